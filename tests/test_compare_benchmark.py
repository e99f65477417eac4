"""The comparison benchmark script runs end to end at a tiny size (no timing assertions:
timings are for the script's printed report, not for tests)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
import xarray as xr

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_compare_benchmark_runs_tiny(tmp_path):
    work = tmp_path / "work"
    cmd = [sys.executable, str(ROOT / "benchmarks" / "compare_decades.py"),
           "--years", "2", "--res", "1", "--workdir", str(work)]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=600, check=False)
    assert res.returncode == 0, res.stdout + res.stderr
    for phrase in ("(a) read floor (npp)", "(b) comparison pass", "ratio (b)/(a)",
                   "peak RSS (b)", "(b2) euphotic compare", "(c) euphotic figures"):
        assert phrase in res.stdout
    out = json.loads((work / "compare_decades.json").read_text())
    assert out["maps"] == 24 and out["years"] == 2 and out["cells_per_degree"] == 1
    assert out["read_floor_s"] > 0 and out["pass_peak_GiB"] > 0
    # the synthetic run is a committed run the results module opens
    from euphotic.results import open_maps, open_totals

    maps = open_maps(work / "run_1_2y")
    assert dict(maps.sizes) == {"model": 1, "time": 24, "lat": 180, "lon": 360}
    assert open_totals(work / "run_1_2y").sizes["region"] == 4
    # what the pass wrote: 12 climatology maps, the anomaly spread and the trend statistics
    with xr.open_dataset(work / "pass_out.nc") as ds:
        assert ds["climatology"].sizes["calendar_month"] == 12
        assert {"anomaly_sd", "trend_slope", "trend_p_value"} <= set(ds.data_vars)
    # (b2) and (c) added their outputs to the run
    names = set(json.loads((work / "run_1_2y" / "euphotic_manifest.json").read_text())["outputs"])
    assert {"compare_trend_map.nc", "compare_trends.csv"} <= names
    assert any(n.endswith(".png") for n in names)
