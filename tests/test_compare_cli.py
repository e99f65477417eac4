"""`euphotic compare`: comparison tables and maps of a committed run, added to its folder.

Independent references: annual totals are the sums of the run's own monthly totals (hand
arithmetic on the table); trend slopes are recomputed with scipy.stats.theilslopes and
kendalltau on the same numbers.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import stats

from euphotic.cli import main

from .test_runs import _consistent, _debris, _months_case


@pytest.fixture(scope="module")
def three_years(tmp_path_factory):
    """A committed run of 36 monthly composites (2023-2025) on a small box."""
    tmp = tmp_path_factory.mktemp("three_years")
    cfg = _months_case(tmp, 36)
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    return tmp / "out"


def _rows(path):
    with open(path) as fh:
        return list(csv.DictReader(fh))


def test_compare_writes_tables_and_maps_into_the_run(three_years):
    out = three_years
    res = CliRunner().invoke(main, ["compare", str(out), "--baseline", "2023-2024",
                                    "--compare-to", "2025"])
    assert res.exit_code == 0, res.output
    # three years: every trend is flagged (fewer than 10 years, common practice)
    assert "fewer than 10 years" in res.stderr and "(short record)" in res.stdout
    assert "Caution: " in res.stdout
    man = _consistent(out)
    names = sorted(n for n, e in man["outputs"].items() if e["kind"] == "comparison")
    assert names == ["compare_README.txt", "compare_annual_totals.csv", "compare_anomalies.csv",
                     "compare_difference_map.nc", "compare_seasonal_cycle.csv",
                     "compare_trend_map.nc", "compare_trends.csv"]
    assert "npp_vgpm_2023-01.nc" in man["outputs"]  # the run's outputs stay
    assert _debris(out) == []

    # annual totals = the sum of the twelve monthly totals of the run (hand arithmetic; the
    # monthly table is rounded to 4 decimals, hence the tolerance)
    monthly = _rows(out / "regional_totals.csv")
    annual = {r["year"]: float(r["total_TgC_yr-1"]) for r in _rows(out / "compare_annual_totals.csv")}
    for year in ("2023", "2024", "2025"):
        want = sum(float(r["total_TgC"]) for r in monthly if r["month"].startswith(year))
        assert annual[year] == pytest.approx(want, abs=12 * 5e-5)
        # Pg = Tg / 1000 (SI prefixes)

    # the annual trend against scipy on the same annual totals
    (tr,) = [r for r in _rows(out / "compare_trends.csv") if r["series"] == "annual totals"]
    y = np.array([annual[k] for k in ("2023", "2024", "2025")])
    ts = stats.theilslopes(y, np.arange(3.0))
    assert float(tr["slope_per_yr"]) == pytest.approx(ts.slope, abs=1e-3)
    assert float(tr["kendall_tau"]) == pytest.approx(stats.kendalltau(np.arange(3), y)[0], abs=1e-4)
    assert tr["short_record"] == "true" and tr["n_years"] == "3"

    # anomalies: total minus the 2023-2024 mean of the same calendar month (hand arithmetic)
    anom = [r for r in _rows(out / "compare_anomalies.csv") if r["month"] == "2025-03"][0]
    march = [float(r["total_TgC"]) for r in monthly if r["month"] in ("2023-03", "2024-03")]
    assert float(anom["climatology_TgC"]) == pytest.approx(np.mean(march), abs=1e-4)
    assert float(anom["anomaly_TgC"]) == pytest.approx(
        float(anom["total_TgC"]) - np.mean(march), abs=2e-4)

    import xarray as xr

    with xr.open_dataset(out / "compare_difference_map.nc") as d:
        assert d["difference"].dims == ("model", "lat", "lon")
        assert "caution" in d.attrs and d["lat"].attrs["units"] == "degrees_north"


def test_a_new_compare_replaces_the_set_and_errors_are_one_line(three_years, tmp_path):
    out = three_years
    res = CliRunner().invoke(main, ["compare", str(out), "--no-maps", "-q"])
    assert res.exit_code == 0, res.output
    man = json.loads((out / "euphotic_manifest.json").read_text())
    assert "compare_trend_map.nc" not in man["outputs"]
    assert not (out / "compare_trend_map.nc").exists()
    assert (out / "compare_trends.csv").exists()

    res = CliRunner().invoke(main, ["compare", str(out), "--baseline", "2030-2031"])
    assert res.exit_code == 1
    assert res.stderr.strip() == (f"euphotic: error: --baseline 2030-2031: the run in {out} "
                                  "covers 2023-2025")
    res = CliRunner().invoke(main, ["compare", str(out), "--baseline", "twenty"])
    assert res.exit_code == 1
    assert res.stderr.strip() == ("euphotic: error: --baseline: expected YEAR or FIRST-LAST "
                                  "(e.g. 2015-2019), not 'twenty'")
    empty = tmp_path / "empty"
    empty.mkdir()
    res = CliRunner().invoke(main, ["compare", str(empty)])
    assert res.exit_code == 1
    assert res.stderr.strip().startswith(f"euphotic: error: no euphotic run in {empty}")


def test_compare_on_a_one_month_run_says_there_is_no_trend(demo_run, tmp_path):
    """The April demo has no complete year: no slope is printed as a number."""
    import shutil

    out = tmp_path / "demo"
    shutil.copytree(demo_run, out)
    res = CliRunner().invoke(main, ["compare", str(out), "-q"])
    assert res.exit_code == 0, res.output
    assert "nan" not in res.stdout
    assert "  Tollan Bank              vgpm         no trend: 0 complete year(s) of data" in res.stdout
