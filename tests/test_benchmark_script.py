"""The scale benchmark script runs end to end at a tiny size (no timing assertions: timings
are for the script's printed report, not for tests)."""

from __future__ import annotations

import csv
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_scale_benchmark_runs_tiny(tmp_path):
    cmd = [
        sys.executable, str(ROOT / "benchmarks" / "scale_month.py"),
        "--res", "1/2", "--days", "2", "--naive-days", "1", "--sweep-days", "1,2",
        "--sweep-res", "2", "--repeats", "1",
        "--data", str(tmp_path / "data"), "--out", str(tmp_path / "out"),
    ]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=600, check=False)
    assert res.returncode == 0, res.stdout + res.stderr
    for phrase in ("(a) read floor", "(b) euphotic run", "(c) naive eager script",
                   "ratio (b)/(a) per day", "ratio (c)/(b) per day", "peak RSS (b)"):
        assert phrase in res.stdout
    with open(tmp_path / "out" / "scale_month.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["kind"] for r in rows} == {"main", "sweep"}
    assert {int(r["days"]) for r in rows if r["kind"] == "sweep"} == {1, 2}
    assert all(float(r["euphotic_peak_GiB"]) > 0 for r in rows)
    assert (tmp_path / "out" / "scale_month.png").stat().st_size > 10_000
    # the run it measured produced a real map
    assert list((tmp_path / "out" / "out_2_2").glob("npp_vgpm_2025-04.nc"))


def test_layout_benchmark_runs_tiny(tmp_path):
    # benchmarks/scale_layouts.py end to end at 1/2 degree, 2 days, two layouts: one row per
    # layout in the CSV, and euphotic's monthly map equals the plain xarray script's (the same
    # published VGPM formula computed by xarray/dask) within 1e-5 relative.
    out_csv = tmp_path / "layouts.csv"
    cmd = [
        sys.executable, str(ROOT / "benchmarks" / "scale_layouts.py"),
        "--res-list", "2", "--days", "2", "--layouts", "current,all",
        "--data", str(tmp_path / "data"), "--out", str(tmp_path / "out"), "--csv", str(out_csv),
    ]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=600, check=False)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "eu/floor" in res.stdout and "peer/eu" in res.stdout
    with open(out_csv) as fh:
        rows = list(csv.DictReader(fh))
    assert [(r["layout"], r["cells_per_degree"]) for r in rows] == [("current", "2"), ("all", "2")]
    for r in rows:
        assert r["error"] == ""
        assert r["mean_check"] == "ok"
        assert float(r["max_rel_diff"]) <= 1e-5
        assert float(r["euphotic_GiB"]) > 0 and float(r["peer_GiB"]) > 0
    assert not (tmp_path / "data" / "layout_2").exists()  # inputs removed without --keep
