"""The coverage rule (``[run] min_coverage`` / ``low_coverage``) everywhere, and gap-filled
totals (``compare.filled_totals``: observed, scaled, climatology).

Independent references: the totals of the synthetic maps are worked out by hand below (say so
beside each value) on a grid of equal cell areas that the test states (1e10 m2 = 100 km x
100 km per cell); the filled totals of a real run are checked against that run's own regional
totals (the aggregate code path, a separate implementation); Theil-Sen medians by hand and
against scipy.stats.theilslopes (scipy 1.17) on the same numbers.
"""

from __future__ import annotations

import csv
import json

import dask.array as dsa
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from click.testing import CliRunner
from scipy import stats

from euphotic import compare, results
from euphotic.aggregate import region_bits
from euphotic.cli import main
from euphotic.compare import CompareInputError
from euphotic.errors import ConfigError

from ._grids import monthly_case
from .test_compare import make_maps, make_totals
from .test_runs import _consistent, _debris

#: Area of every cell of the hand-worked grid, m2 (stated, not computed: 100 km x 100 km).
CELL_M2 = 1.0e10
#: mg of carbon per Tg (1e3 mg g-1 x 1e12 g Tg-1).
MG_PER_TG = 1.0e15


# --------------------------------------------------------------------------------------------
# hand-worked maps: 3 x 4 cells, two regions, one model, 2001 (baseline) and 2002


def hand_maps(*, rule: str | None = "flag", counter: list | None = None) -> xr.Dataset:
    """Rates r (mg m-2 d-1) ``base`` in every month of 2001 and ``2 * base`` in 2002; cell
    (2, 3) is land (NaN rate and coverage). Gaps: Jan 2001 cell (1, 0) unobserved (so the
    January climatology has no value there); Jan 2002 cells (0, 0) and (1, 0) unobserved, cell
    (0, 2) observed on 20 % of the days (coverage 0.2, below the rule's 0.5)."""
    months = pd.date_range("2001-01-01", periods=24, freq="MS").values
    base = np.array([[100, 200, 300, 400], [110, 210, 310, 410], [120, 220, 320, np.nan]])
    npp = np.stack([base] * 12 + [2 * base] * 12).astype(np.float32)[None]
    cov = np.where(np.isnan(npp), np.nan, 1.0).astype(np.float32)
    npp[0, 0, 1, 0], cov[0, 0, 1, 0] = np.nan, 0.0
    npp[0, 12, 0, 0], cov[0, 12, 0, 0] = np.nan, 0.0
    npp[0, 12, 1, 0], cov[0, 12, 1, 0] = np.nan, 0.0
    cov[0, 12, 0, 2] = 0.2
    dims = ("model", "time", "lat", "lon")
    source = npp if counter is None else _Counting(npp, counter)
    return xr.Dataset(
        {"npp": (dims, dsa.from_array(source, chunks=(1, 1, 3, 4)), {"units": "mg m-2 d-1"}),
         "coverage": (dims, dsa.from_array(cov, chunks=(1, 1, 3, 4)), {"units": "1"})},
        coords={"model": ["vgpm"], "time": months + np.timedelta64(14, "D"),
                "month": ("time", months),
                "days_in_month": ("time", pd.DatetimeIndex(months).days_in_month.values),
                "lat": [10.5, 11.5, 12.5], "lon": [20.5, 21.5, 22.5, 23.5]},
        attrs={} if rule is None else {"min_coverage": 0.5, "low_coverage": rule},
    )


class _Counting:
    """An array that records each non-empty block read from it (to count map reads)."""

    def __init__(self, values: np.ndarray, reads: list):
        self.values, self.reads = values, reads
        self.shape, self.dtype, self.ndim = values.shape, values.dtype, values.ndim

    def __getitem__(self, key):
        out = self.values[key]
        if out.size:
            self.reads.append(str(key))
        return out


def hand_regions() -> xr.Dataset:
    """Region A: columns 0-1 (6 ocean cells); region B: columns 2-3 (5 ocean cells, 1 land)."""
    mask = np.zeros((2, 3, 4), bool)
    mask[0, :, :2] = True
    mask[1, :, 2:] = True
    return xr.Dataset(
        {"mask": (("region", "lat", "lon"), mask),
         "cell_area": (("lat", "lon"), np.full((3, 4), CELL_M2), {"units": "m2"})},
        coords={"region": ["A", "B"], "lat": [10.5, 11.5, 12.5], "lon": [20.5, 21.5, 22.5, 23.5]})


# Hand-worked, January 2002 (31 days; Tg = sum(r) x 1e10 m2 x 31 d / 1e15 = sum(r) x 31e-5):
#  A: observed rates 2 x (200, 210, 120, 220) = 400 + 420 + 240 + 440 = 1500 on 4 of 6 cells.
#     observed    1500 x 31e-5                       = 0.465
#     scaled      (1500 / 4) x 6 = 2250 -> x 31e-5    = 0.6975   (filled 2/6)
#     climatology 1500 + clim (0,0) = 100 (2001 Jan); (1,0) has no January climatology (Jan 2001
#                 unobserved) and stays unfilled: 1600 x 31e-5 = 0.496 (filled 1/6, unfilled 1/6)
#  B: rates 2 x (300, 400, 310, 410, 320) = 600 + 800 + 620 + 820 + 640 = 3480 on 5 ocean cells;
#     cell (0,2) (600) has coverage 0.2.
#     flag: all three = 3480 x 31e-5 = 1.0788 (nothing to fill)
#     drop: observed 2880 x 31e-5 = 0.8928; scaled (2880 / 4) x 5 = 3600 -> 1.116 (filled 1/5);
#           climatology 2880 + 300 (clim of (0,2), Jan 2001) = 3180 -> 0.9858 (filled 1/5)
HAND = {  # (how, rule): (totals A, B in Tg; filled fraction A, B; unfilled fraction A, B)
    ("observed", "flag"): ((0.465, 1.0788), (0.0, 0.0), (2 / 6, 0.0)),
    ("observed", "drop"): ((0.465, 0.8928), (0.0, 0.0), (2 / 6, 1 / 5)),
    ("scaled", "flag"): ((0.6975, 1.0788), (2 / 6, 0.0), (0.0, 0.0)),
    ("scaled", "drop"): ((0.6975, 1.116), (2 / 6, 1 / 5), (0.0, 0.0)),
    ("climatology", "flag"): ((0.496, 1.0788), (1 / 6, 0.0), (1 / 6, 0.0)),
    ("climatology", "drop"): ((0.496, 0.9858), (1 / 6, 1 / 5), (1 / 6, 0.0)),
}


@pytest.mark.parametrize(("how", "rule"), sorted(HAND))
def test_filled_totals_hand_worked(how, rule):
    """Hand-worked (comment above HAND): the three totals under each rule."""
    out = compare.filled_totals(hand_maps(rule=rule), hand_regions(), how=how,
                                baseline=(2001, 2001)).compute()
    jan = out.sel(month="2002-01-01", model="vgpm")
    want_total, want_filled, want_unfilled = HAND[(how, rule)]
    np.testing.assert_allclose(jan["total"].values, want_total, rtol=1e-6)  # float32 rates
    np.testing.assert_allclose(jan["filled_area_fraction"].values, want_filled, atol=1e-12)
    np.testing.assert_allclose(jan["unfilled_area_fraction"].values, want_unfilled, atol=1e-12)
    # coverage as the run's totals define it: area-weighted fraction of days over the ocean
    # (hand-worked: A (0 + 1 + 0 + 1 + 1 + 1) / 6, B (0.2 + 4 x 1) / 5)
    np.testing.assert_allclose(jan["coverage"].values, [4 / 6, 4.2 / 5], rtol=1e-6)
    np.testing.assert_allclose(jan["ocean_area"].values, [6e4, 5e4])  # km2
    assert out["total"].attrs["units"] == "Tg" and out["total"].dims == ("region", "month", "model")
    assert out.attrs["totals_kind"] == how
    assert (out.attrs["min_coverage"], out.attrs["low_coverage"]) == (0.5, rule)
    if how == "climatology":
        assert (out.attrs["baseline_first"], out.attrs["baseline_last"]) == (2001, 2001)


def test_filled_totals_regionmasks_give_the_same_numbers():
    """The run's RegionMasks form (open_region_masks: masks + per-row areas) and the Dataset form
    (open_regions) are two ways in to the same sums."""
    ds = hand_regions()
    masks = region_bits([ds["mask"].values[0], ds["mask"].values[1]])
    masks.names = ["A", "B"]
    masks._index = {"A": 0, "B": 1}
    masks.cell_area_m2 = np.full(3, CELL_M2)
    masks.lat, masks.lon = ds["lat"].values, ds["lon"].values
    a = compare.filled_totals(hand_maps(), masks, baseline=(2001, 2001)).compute()
    b = compare.filled_totals(hand_maps(), ds, baseline=(2001, 2001)).compute()
    xr.testing.assert_identical(a, b)


def test_filled_totals_is_lazy_and_reads_each_map_once(no_compute):
    reads: list = []
    maps = hand_maps(counter=reads)
    with no_compute:
        out = compare.filled_totals(maps, hand_regions(), baseline=(2001, 2001))
    assert out["total"].chunks is not None
    reads.clear()
    out.compute()
    # 24 monthly maps of one model, each one block: each read once by the one computation
    assert len(reads) == 24 and len(set(reads)) == 24


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"how": "mean"}, "how: must be 'observed', 'scaled' or 'climatology', got 'mean'"),
    ({"low_coverage": "hide"}, "low_coverage: must be 'flag' or 'drop', got 'hide'"),
])
def test_filled_totals_bad_options(kwargs, message):
    with pytest.raises(CompareInputError) as err:
        compare.filled_totals(hand_maps(), hand_regions(), **kwargs)
    assert str(err.value) == message


def test_filled_totals_masks_on_another_grid():
    regs = hand_regions().assign_coords(lon=[0.5, 1.5, 2.5, 3.5])
    with pytest.raises(CompareInputError) as err:
        compare.filled_totals(hand_maps(), regs)
    assert str(err.value) == ("masks: their grid differs from the maps' grid (take both from the "
                              "same run)")


# --------------------------------------------------------------------------------------------
# drop vs flag in annual totals, trends and per-cell comparisons


def _with_rule(ds: xr.Dataset, rule: str) -> xr.Dataset:
    ds = ds.copy()
    ds.attrs.update(min_coverage=0.5, low_coverage=rule)
    return ds


def _totals_with_a_thin_june():
    """Monthly totals = annual / 12 with annual totals 10, 30, 20, 50 Tg (2001-2004); June 2002
    has coverage 0.3 (below the rule's 0.5)."""
    annual = np.array([10.0, 30.0, 20.0, 50.0])
    values = np.repeat(annual / 12.0, 12)[None, :, None]
    ds = make_totals(values, n_years=4)
    cov = ds["coverage"].values.copy()
    cov[:, 17, :] = 0.3  # 2002-06
    ds["coverage"] = (ds["coverage"].dims, cov, {"units": "1"})
    return ds


def test_annual_totals_drop_versus_flag():
    """Hand-worked: 2002 sums twelve months of 30/12 = 30 Tg under 'flag' (kept, flagged
    low_coverage); under 'drop' June counts as missing: 11 months, an incomplete year (NaN)."""
    ds = _totals_with_a_thin_june()
    flag = compare.annual_totals(_with_rule(ds, "flag")).sel(region="Maren Sea", model="vgpm")
    drop = compare.annual_totals(_with_rule(ds, "drop")).sel(region="Maren Sea", model="vgpm")
    np.testing.assert_allclose(flag["total"].values, [10, 30, 20, 50])
    assert list(flag["flag"].values) == ["", "low_coverage", "", ""]
    assert list(flag["n_low_coverage"].values) == [0, 1, 0, 0]
    assert list(flag["n_months"].values) == [12, 12, 12, 12]
    np.testing.assert_allclose(drop["total"].values, [10, np.nan, 20, 50])
    assert list(drop["flag"].values) == ["", "incomplete_year", "", ""]
    assert list(drop["n_low_coverage"].values) == [0, 1, 0, 0]
    assert list(drop["n_months"].values) == [12, 11, 12, 12]
    out = compare.annual_totals(_with_rule(ds, "drop"))
    assert (out.attrs["min_coverage"], out.attrs["low_coverage"]) == (0.5, "drop")
    assert out.attrs["n_dropped_low_coverage"] == 4  # 2 regions x 2 models, June 2002
    out = compare.annual_totals(_with_rule(ds, "flag"))
    assert out.attrs["n_flagged_low_coverage"] == 4 and "n_dropped_low_coverage" not in out.attrs


def test_keywords_override_the_recorded_rule():
    ds = _with_rule(_totals_with_a_thin_june(), "drop")
    out = compare.annual_totals(ds, low_coverage="flag").sel(region="Maren Sea", model="vgpm")
    assert out["flag"].values[1] == "low_coverage" and out.attrs["low_coverage"] == "flag"
    # an explicit min_coverage alone drops (as the keyword always did)
    out = compare.annual_totals(_totals_with_a_thin_june(), min_coverage=0.25)
    assert out.attrs["low_coverage"] == "drop" and out.attrs["n_dropped_low_coverage"] == 0
    assert compare.coverage_rule(make_totals()) == (None, "flag")  # no rule recorded, none given
    with pytest.raises(CompareInputError) as err:
        compare.annual_totals(make_totals(), low_coverage="drop")
    assert str(err.value) == ("low_coverage: 'drop' needs min_coverage (the input records no "
                              "coverage rule)")


def test_trend_of_annual_totals_drop_versus_flag():
    """Theil-Sen slope of the annual totals, hand-worked at t = 0.5, 1.5, 2.5, 3.5:
    flag, y = 10, 30, 20, 50: pairwise slopes 20, 5, 13.33, -10, 10, 30 -> median
    (10 + 13.33) / 2 = 11.667 Tg yr-2 over 4 years; drop (2002 incomplete, left out),
    y = 10, 20, 50 at 0.5, 2.5, 3.5: slopes 5, 13.33, 30 -> 13.333 over 3 years."""
    ds = _totals_with_a_thin_june()
    flag = compare.trend(_with_rule(ds, "flag"), annual=True).sel(region="Maren Sea", model="vgpm")
    drop = compare.trend(_with_rule(ds, "drop"), annual=True).sel(region="Maren Sea", model="vgpm")
    assert flag["slope"].item() == pytest.approx(35 / 3, rel=1e-9)
    assert drop["slope"].item() == pytest.approx(40 / 3, rel=1e-9)
    assert (int(flag["n_years"]), int(drop["n_years"])) == (4, 3)
    # scipy on the same numbers
    assert drop["slope"].item() == pytest.approx(
        stats.theilslopes([10, 20, 50], [0.5, 2.5, 3.5]).slope, rel=1e-9)
    assert drop.attrs["low_coverage"] == "drop" and flag.attrs["low_coverage"] == "flag"


def test_cell_values_below_the_rule_in_climatology_and_difference():
    """Maps of two years: cell (0, 0), January of the second year, value 300 on coverage 0.2;
    every other value 100. Hand-worked January climatology of that cell: flag (100 + 300) / 2 =
    200, drop 100; the difference of year 2 against year 1 (mean over 12 months): flag
    (11 x 100 + 300) / 12 - 100 = 16.667, drop 0 (11 months)."""
    values = np.full((2, 24, 3, 4), 100.0)
    values[:, 12, 0, 0] = 300.0
    cov = np.ones((2, 24, 3, 4))
    cov[:, 12, 0, 0] = 0.2
    for rule, clim_jan, diff, n_b in (("flag", 200.0, 200 / 12, 12), ("drop", 100.0, 0.0, 11)):
        maps = _with_rule(make_maps(values, n_years=2, coverage=cov), rule)
        c = compare.climatology(maps).sel(model="vgpm", calendar_month=1).compute()
        assert c["climatology"].values[0, 0] == pytest.approx(clim_jan)
        assert int(c["n_low_coverage"].values[0, 0]) == 1 and int(c["n_low_coverage"].values[1, 1]) == 0
        d = compare.difference(maps, 2001, 2002).sel(model="vgpm").compute()
        assert d["difference"].values[0, 0] == pytest.approx(diff)
        assert int(d["n_months_b"].values[0, 0]) == n_b
        assert int(d["n_low_coverage_b"].values[0, 0]) == 1
        assert int(d["n_low_coverage_a"].values[0, 0]) == 0
        a = compare.anomalies(maps, compare.climatology(maps)).compute()
        assert bool(a["below_min_coverage"].sel(model="vgpm").values[12, 0, 0])
        assert np.isnan(a["anomaly"].sel(model="vgpm").values[12, 0, 0]) == (rule == "drop")


# --------------------------------------------------------------------------------------------
# a run with a rule: recorded, shown, used by `euphotic compare`, overridden by its options

#: Regions of the run: "Westward" spans 16 columns of 0.25 degree (28-24 W), 12 of them west of
#: 25 W ("WestOnly"); in the last month nothing west of 25 W is observed, so Westward's
#: coverage is 4/16 = 0.25 (below the run's 0.4) and WestOnly has no data.
RUN_REGIONS = (("Box", [-30.0, 40.0, -20.0, 50.0]), ("Westward", [-28.0, 40.0, -24.0, 50.0]),
               ("WestOnly", [-28.0, 40.0, -25.0, 50.0]))


@pytest.fixture(scope="module")
def ruled_run(tmp_path_factory):
    """A committed run of 24 monthly composites (2023-2024) with min_coverage = 0.4 and
    low_coverage = "drop"; chlorophyll missing west of 25 W in 2024-12."""
    tmp = tmp_path_factory.mktemp("ruled")
    cfg = monthly_case(tmp, 24, res=0.25, west_gap_last_month=True, regions=RUN_REGIONS,
                       run='min_coverage = 0.4\nlow_coverage = "drop"\n')
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    return tmp / "out"


def _rows(path):
    with open(path) as fh:
        return list(csv.DictReader(fh))


def test_the_run_records_its_rule(ruled_run):
    out = ruled_run
    man = json.loads((out / "euphotic_manifest.json").read_text())
    assert man["coverage_rule"] == {"min_coverage": 0.4, "low_coverage": "drop"}
    with xr.open_dataset(out / "npp_vgpm_2024-12.nc") as ds:
        assert ds.attrs["euphotic_min_coverage"] == 0.4
        assert ds.attrs["euphotic_low_coverage"] == "drop"
    sidecar = json.loads((out / "regional_totals.csv-metadata.json").read_text())
    props = {p["schema:name"]: p["schema:value"] for p in sidecar["schema:additionalProperty"]}
    assert (props["euphotic_min_coverage"], props["euphotic_low_coverage"]) == (0.4, "drop")
    for ds in (results.open_totals(out), results.open_maps(out)):
        assert (ds.attrs["min_coverage"], ds.attrs["low_coverage"]) == (0.4, "drop")
        assert ds.attrs["coverage_rule_source"] == "run"
    assert results.coverage_rule(out) == (0.4, "drop", "run")
    # the run's table is the record: the thin month keeps its numbers and its flag
    (row,) = [r for r in _rows(out / "regional_totals.csv")
              if r["region"] == "Westward" and r["month"] == "2024-12"]
    assert row["flag"] == "low_coverage" and float(row["total_TgC"]) > 0
    assert float(row["coverage_fraction"]) == pytest.approx(0.25, abs=1e-3)


def test_a_run_without_a_recorded_rule_gets_the_default():
    assert results.manifest_coverage_rule({"outputs": {}}) == (0.5, "flag", "default")


def test_low_coverage_must_be_flag_or_drop(tmp_path):
    from euphotic.config import load_config

    cfg = monthly_case(tmp_path, 1, run='low_coverage = "hide"\n')
    with pytest.raises(ConfigError) as err:
        load_config(cfg)
    assert str(err.value) == f'{cfg} [run]: `low_coverage` must be "flag" or "drop", not "hide"'


def test_filled_totals_of_a_run_match_its_own_totals(ruled_run):
    """observed and scaled from the maps = the run's total / total_filled (its aggregate
    code); the climatology fill of Westward in 2024-12 = Westward observed + WestOnly's
    December 2023 total (the only December in the baseline with those cells observed)."""
    out = ruled_run
    maps, masks, tot = results.open_maps(out), results.open_region_masks(out), results.open_totals(out)
    flag = {"low_coverage": "flag"}  # per-cell drop changes nothing here (coverage 0 or 1)
    # rtol 1e-6: the run sums the month's rates before they are stored as float32 (7 digits)
    obs = compare.filled_totals(maps, masks, how="observed", **flag).compute()
    np.testing.assert_allclose(obs["total"].values, tot["total"].values, rtol=1e-6)
    sc = compare.filled_totals(maps, masks, how="scaled", **flag).compute()
    np.testing.assert_allclose(sc["total"].values, tot["total_filled"].values, rtol=1e-6)
    np.testing.assert_allclose(obs["coverage"].values, tot["coverage"].values, rtol=1e-6)
    cl = compare.filled_totals(maps, masks, how="climatology", baseline=(2023, 2024), **flag).compute()
    t = tot["total"].sel(model="vgpm")
    want = t.sel(region="Westward", month="2024-12-01") + t.sel(region="WestOnly", month="2023-12-01")
    got = cl.sel(model="vgpm", region="Westward", month="2024-12-01")
    assert got["total"].item() == pytest.approx(want.item(), rel=1e-6)
    assert got["filled_area_fraction"].item() == pytest.approx(0.75, abs=1e-3)  # 12 of 16 columns
    assert got["unfilled_area_fraction"].item() == pytest.approx(0.0, abs=1e-12)


def test_compare_uses_the_runs_rule_and_options_override_it(ruled_run):
    out = ruled_run
    res = CliRunner().invoke(main, ["compare", str(out), "--no-maps"])
    assert res.exit_code == 0, res.output
    assert ('Totals: observed. Coverage rule: values with coverage below 0.4 dropped (treated '
            'as missing) (low_coverage = "drop").') in res.stdout
    annual = {(r["region"], r["year"]): r for r in _rows(out / "compare_annual_totals.csv")}
    west = annual[("Westward", "2024")]
    assert (west["total_TgC_yr-1"], west["n_months"], west["n_low_coverage_months"],
            west["flag"], west["totals"]) == ("", "11", "1", "incomplete_year", "observed")
    box = annual[("Box", "2024")]
    assert box["flag"] == "" and box["n_low_coverage_months"] == "0"
    anom = {(r["region"], r["month"]): r for r in _rows(out / "compare_anomalies.csv")}
    assert anom[("Westward", "2024-12")]["flag"] == "dropped_low_coverage"
    assert anom[("Westward", "2024-12")]["total_TgC"] == ""
    assert anom[("Westward", "2024-12")]["coverage_fraction"] == "0.250"
    trends = [r for r in _rows(out / "compare_trends.csv") if r["region"] == "Westward"]
    assert {r["n_low_coverage_months"] for r in trends} == {"1"}
    readme = (out / "compare_README.txt").read_text()
    assert "Coverage rule: values with coverage below 0.4 dropped" in readme
    man = _consistent(out)
    assert {json.dumps(e["coverage_rule"]) for e in man["outputs"].values()
            if e["kind"] == "comparison"} == {'{"min_coverage": 0.4, "low_coverage": "drop"}'}

    # the option overrides the run's rule: kept and flagged, written so in every output
    res = CliRunner().invoke(main, ["compare", str(out), "--low-coverage", "flag"])
    assert res.exit_code == 0, res.output
    assert 'Coverage rule: values with coverage below 0.4 kept and flagged low_coverage' in res.stdout
    annual = {(r["region"], r["year"]): r for r in _rows(out / "compare_annual_totals.csv")}
    west = annual[("Westward", "2024")]
    assert (west["n_months"], west["n_low_coverage_months"], west["flag"]) == ("12", "1", "low_coverage")
    monthly = [float(r["total_TgC"]) for r in _rows(out / "regional_totals.csv")
               if r["region"] == "Westward" and r["month"].startswith("2024")]
    assert float(west["total_TgC_yr-1"]) == pytest.approx(sum(monthly), abs=12 * 5e-5)  # hand sum
    anom = {(r["region"], r["month"]): r for r in _rows(out / "compare_anomalies.csv")}
    assert anom[("Westward", "2024-12")]["flag"] == "low_coverage"
    assert "kept and flagged" in (out / "compare_README.txt").read_text()
    for name in ("compare_trend_map.nc", "compare_difference_map.nc"):
        with xr.open_dataset(out / name) as ds:
            assert ds.attrs["euphotic_low_coverage"] == "flag"
            assert ds.attrs["euphotic_min_coverage"] == 0.4
            assert ds.attrs["coverage_rule"].startswith("values with coverage below 0.4 kept")
    with xr.open_dataset(out / "compare_trend_map.nc") as ds:
        # monthly composites: a cell has all of a month's days or none (coverage 1 or 0, the
        # unobserved cells have no value), so no cell-month is thin; the count is there, 0
        assert int(ds["n_low_coverage"].sum()) == 0 and ds["n_low_coverage"].dims[-2:] == ("lat", "lon")
    assert _debris(out) == []


def test_compare_with_climatology_filled_totals(ruled_run):
    out = ruled_run
    res = CliRunner().invoke(main, ["compare", str(out), "--no-maps", "--totals", "climatology",
                                    "--baseline", "2023-2024"])
    assert res.exit_code == 0, res.output
    assert "Totals: climatology." in res.stdout
    filled = {(r["region"], r["month"]): r for r in _rows(out / "compare_filled_totals.csv")}
    w = filled[("Westward", "2024-12")]
    assert (w["observed_area_fraction"], w["filled_area_fraction"], w["unfilled_area_fraction"],
            w["flag"]) == ("0.2500", "0.7500", "0.0000", "dropped_low_coverage")
    tot = results.open_totals(out)["total"].sel(model="vgpm")
    want = (tot.sel(region="Westward", month="2024-12-01")
            + tot.sel(region="WestOnly", month="2023-12-01")).item()
    assert float(w["total_TgC"]) == pytest.approx(want, abs=5e-5)  # 4 decimals in the table
    assert {r["totals"] for r in _rows(out / "compare_annual_totals.csv")} == {"climatology"}
    man = _consistent(out)
    assert man["outputs"]["compare_filled_totals.csv"]["totals"] == "climatology"
    assert "compare_filled_totals.csv" in (out / "compare_README.txt").read_text()


@pytest.mark.parametrize(("args", "message"), [
    (["--low-coverage", "hide"], "Invalid value for '--low-coverage'"),
    (["--totals", "mean"], "Invalid value for '--totals'"),
])
def test_compare_bad_rule_options(ruled_run, args, message):
    before = json.loads((ruled_run / "euphotic_manifest.json").read_text())
    res = CliRunner().invoke(main, ["compare", str(ruled_run), *args])
    assert res.exit_code == 2 and message in res.output
    assert json.loads((ruled_run / "euphotic_manifest.json").read_text()) == before


def test_report_shows_the_rule(ruled_run):
    from euphotic.report import render

    page, _ = render(ruled_run)
    assert "coverage rule" in page
    assert "values with coverage below 0.4 dropped (treated as missing)" in page


def test_methods_state_the_rule(ruled_run):
    from euphotic.methods import methods_text

    text = " ".join(methods_text(ruled_run).text.split())
    assert ("Region-months and cells whose coverage is below 0.4 are flagged low_coverage and "
            "left out of comparisons") in text


def test_figures_mark_by_the_runs_rule(ruled_run):
    """`euphotic figures` without --min-coverage marks cells by the run's 0.4 (its captions
    say so); --min-coverage overrides it."""
    res = CliRunner().invoke(main, ["figures", str(ruled_run), "-q", "--projection", "latlon",
                                    "--width", "one-column"])
    assert res.exit_code == 0, res.output
    caption = (ruled_run / "fig_npp_maps.caption.txt").read_text()
    assert "coverage below 0.4 " in " ".join(caption.split())
    res = CliRunner().invoke(main, ["figures", str(ruled_run), "-q", "--projection", "latlon",
                                    "--width", "one-column", "--min-coverage", "0.9"])
    assert res.exit_code == 0, res.output
    caption = (ruled_run / "fig_npp_maps.caption.txt").read_text()
    assert "coverage below 0.9 " in " ".join(caption.split())


def test_compare_step_keys_and_cli_defaults_match_the_function():
    """[compare] low_coverage / totals reach write_comparisons under the names the command
    uses, with the same defaults (None: the run's rule; "observed")."""
    import inspect

    from euphotic import steps
    from euphotic.compare_outputs import write_comparisons

    sig = {k: v.default for k, v in inspect.signature(write_comparisons).parameters.items()}
    cli = main.commands["compare"].make_context("compare", ["some_folder"]).params
    assert (sig["low_coverage"], sig["totals"]) == (cli["low_coverage"], cli["totals"]) == (
        None, "observed")
    assert steps.compare_kwargs({"low_coverage": "drop", "totals": "climatology"}) == {
        "low_coverage": "drop", "totals": "climatology"}
