"""Comparisons on results (euphotic.compare) on small synthetic Datasets built to the results
schema. Arithmetic is checked against hand-worked numbers (said beside each check); trend
statistics against scipy.stats.theilslopes / kendalltau (scipy 1.17) called directly on the
same numbers."""

from __future__ import annotations

import logging

import dask.array as dsa
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

from euphotic import compare
from euphotic.compare import CompareInputError
from euphotic.errors import EuphoticError

MODELS = ["vgpm", "eppley_vgpm"]
REGIONS = ["Maren Sea", "Outer Shelf"]


def _months(first_year: int, n_years: int) -> np.ndarray:
    return pd.date_range(f"{first_year}-01-01", periods=12 * n_years, freq="MS").values


def make_totals(values: np.ndarray | None = None, *, first_year: int = 2001, n_years: int = 12,
                coverage: float = 1.0) -> xr.Dataset:
    """Totals per the schema: dims (region, month, model); ``values`` is the ``total`` (Tg)."""
    months = _months(first_year, n_years)
    shape = (len(REGIONS), len(months), len(MODELS))
    if values is None:
        values = np.random.default_rng(1).uniform(1.0, 5.0, shape)
    values = np.broadcast_to(np.asarray(values, np.float64), shape).copy()
    dim = pd.DatetimeIndex(months).days_in_month.values
    ocean = np.full(shape, 1.0e5)
    return xr.Dataset(
        {
            "mean_npp": (("region", "month", "model"), values * 10.0, {"units": "mg m-2 d-1", "long_name": "mean NPP"}),
            "observed_area": (("region", "month", "model"), ocean * coverage, {"units": "km2"}),
            "ocean_area": (("region", "month", "model"), ocean, {"units": "km2"}),
            "coverage": (("region", "month", "model"), np.full(shape, coverage), {"units": "1"}),
            "total": (("region", "month", "model"), values, {"units": "Tg"}),
            "total_filled": (("region", "month", "model"), values / coverage, {"units": "Tg"}),
            "flag": (("region", "month", "model"), np.full(shape, "", dtype=object)),
        },
        coords={"region": REGIONS, "month": months, "model": MODELS, "days_in_month": ("month", dim)},
        attrs={"caution": "models differ by about a factor of two", "euphotic_folder": "x",
               "citation_vgpm": "Behrenfeld and Falkowski (1997)"},
    )


def make_maps(values: np.ndarray | None = None, *, first_year: int = 2001, n_years: int = 12,
              coverage: np.ndarray | float = 1.0) -> xr.Dataset:
    """Maps per the schema: dims (model, time, lat, lon), 3 x 4 cells, dask-backed."""
    months = _months(first_year, n_years)
    shape = (len(MODELS), len(months), 3, 4)
    if values is None:
        values = np.random.default_rng(2).uniform(100.0, 500.0, shape)
    values = np.broadcast_to(np.asarray(values, np.float32), shape)
    cov = np.broadcast_to(np.asarray(coverage, np.float32), shape)
    chunks = (1, 12, 3, 4)
    dims = ("model", "time", "lat", "lon")
    return xr.Dataset(
        {
            "npp": (dims, dsa.from_array(values, chunks=chunks), {"units": "mg m-2 d-1", "long_name": "NPP"}),
            "coverage": (dims, dsa.from_array(cov, chunks=chunks), {"units": "1"}),
            "n_valid_days": (dims, dsa.from_array(np.rint(cov * 30).astype(np.float32), chunks=chunks)),
        },
        coords={
            "model": MODELS, "time": months + np.timedelta64(14, "D"), "month": ("time", months),
            "days_in_month": ("time", pd.DatetimeIndex(months).days_in_month.values),
            "lat": [10.5, 11.5, 12.5], "lon": [20.5, 21.5, 22.5, 23.5],
        },
        attrs={"caution": "models differ by about a factor of two", "euphotic_folder": "x"},
    )


def by_calendar(n_years: int, per_month) -> np.ndarray:
    """A monthly series (n_years * 12) from a function of (year index, calendar month 1-12)."""
    return np.array([per_month(y, m) for y in range(n_years) for m in range(1, 13)], np.float64)


# ---------------------------------------------------------------------------------------------
# annual totals


def test_annual_totals_sum_and_pg_by_hand():
    # month m of every year holds m Tg: a year is 1 + 2 + ... + 12 = 78 Tg = 0.078 Pg (by hand)
    series = by_calendar(3, lambda y, m: float(m))
    ds = make_totals(series[None, :, None], n_years=3)
    out = compare.annual_totals(ds)
    assert out["total"].dims == ("region", "year", "model")
    assert list(out["year"].values) == [2001, 2002, 2003]
    np.testing.assert_array_equal(out["total"].values, 78.0)
    np.testing.assert_allclose(out["total_pg"].values, 0.078, rtol=1e-15)
    np.testing.assert_array_equal(out["n_months"].values, 12)
    assert (out["flag"].values == "").all()
    assert out["total"].attrs["units"] == "Tg yr-1"
    assert out["total_pg"].attrs["units"] == "Pg yr-1"
    assert out["n_months"].attrs["units"] == "1"
    assert out.attrs["caution"] == "models differ by about a factor of two"  # carried over
    assert list(out["model"].values) == MODELS  # models side by side


def test_annual_totals_incomplete_and_empty_years():
    series = by_calendar(3, lambda y, m: float(m))
    series[12 + 10:12 + 12] = np.nan  # 2002: November and December missing
    series[24:36] = np.nan  # 2003: nothing
    ds = make_totals(series[None, :, None], n_years=3)
    out = compare.annual_totals(ds).sel(region="Maren Sea", model="vgpm")
    assert out["total"].values[0] == 78.0
    assert np.isnan(out["total"].values[1]) and np.isnan(out["total"].values[2])
    assert list(out["n_months"].values) == [12, 10, 0]
    assert list(out["flag"].values) == ["", "incomplete_year", "no_data"]
    # keep_partial: 1 + ... + 10 = 55 Tg (by hand); an empty year stays NaN, never 0
    kept = compare.annual_totals(ds, keep_partial=True).sel(region="Maren Sea", model="vgpm")
    assert kept["total"].values[1] == 55.0
    assert np.isnan(kept["total"].values[2])
    assert kept["flag"].values[1] == "incomplete_year"
    # min_months=10 accepts 2002 as complete
    ten = compare.annual_totals(ds, min_months=10).sel(region="Maren Sea", model="vgpm")
    assert ten["total"].values[1] == 55.0 and ten["flag"].values[1] == ""


def test_annual_totals_min_coverage_drops_and_counts():
    ds = make_totals(2.0, n_years=2)
    cov = ds["coverage"].values.copy()
    cov[0, 0, 0] = 0.1  # Maren Sea, 2001-01, vgpm
    cov[1, 5, 1] = 0.29  # Outer Shelf, 2001-06, eppley_vgpm
    ds["coverage"].values[:] = cov
    out = compare.annual_totals(ds, min_coverage=0.3)
    assert out.attrs["n_dropped_low_coverage"] == 2
    assert out.attrs["min_coverage"] == 0.3
    assert out["n_months"].sel(region="Maren Sea", model="vgpm", year=2001).item() == 11
    assert out["flag"].sel(region="Maren Sea", model="vgpm", year=2001).item() == "incomplete_year"
    # 12 months of 2 Tg = 24 Tg (by hand) where nothing was dropped
    assert out["total"].sel(region="Maren Sea", model="vgpm", year=2002).item() == 24.0


# ---------------------------------------------------------------------------------------------
# seasonal cycle, climatology, anomalies


def test_seasonal_cycle_by_hand():
    # calendar month m of year index y holds 10 m + 3 y: January over 2001-2003 = 10, 13, 16
    series = by_calendar(4, lambda y, m: 10.0 * m + 3.0 * y)
    ds = make_totals(series[None, :, None], n_years=4)
    out = compare.seasonal_cycle(ds, years=(2001, 2003))
    jan = out.sel(region="Maren Sea", model="vgpm", calendar_month=1)
    assert (jan["mean"].item(), jan["min"].item(), jan["max"].item()) == (13.0, 10.0, 16.0)
    assert jan["range"].item() == 6.0 and jan["count"].item() == 3
    assert out["mean"].attrs["units"] == "Tg" and out["count"].attrs["units"] == "1"
    assert out["mean"].dims == ("region", "calendar_month", "model")
    # a list of years, and a single year
    two = compare.seasonal_cycle(ds, years=[2001, 2004]).sel(region="Maren Sea", model="vgpm")
    assert two["mean"].sel(calendar_month=12).item() == 124.5  # (120 + 129) / 2 by hand
    one = compare.seasonal_cycle(ds, years=2002, variable="mean_npp").sel(region="Maren Sea", model="vgpm")
    assert one["mean"].sel(calendar_month=2).item() == 230.0  # (20 + 3) * 10 by hand
    assert one["mean"].attrs["units"] == "mg m-2 d-1"


def test_climatology_and_anomalies_by_hand():
    # baseline 2001-2002; March values 4 and 8 -> climatology 6; 2003 March = 9 -> anomaly 3, +50 %
    series = by_calendar(3, lambda y, m: float(m) * (1 + y))  # year index 0: m, 1: 2m, 2: 3m
    series[0:12] = np.where(np.arange(1, 13) == 7, np.nan, series[0:12])  # July 2001 missing
    series[12:24] = np.where(np.arange(1, 13) == 7, np.nan, series[12:24])  # July 2002 missing
    ds = make_totals(series[None, :, None], n_years=3)
    clim = compare.climatology(ds, baseline=(2001, 2002))
    c = clim.sel(region="Maren Sea", model="vgpm")
    assert c["climatology"].sel(calendar_month=3).item() == 4.5  # (3 + 6) / 2 by hand
    assert c["n_years"].sel(calendar_month=3).item() == 2
    # no July in the baseline: NaN, not 0, and counted as 0 years
    assert np.isnan(c["climatology"].sel(calendar_month=7).item())
    assert c["n_years"].sel(calendar_month=7).item() == 0
    assert clim.attrs["baseline_first"] == 2001 and clim.attrs["baseline_last"] == 2002
    assert clim["climatology"].attrs["units"] == "Tg"

    an = compare.anomalies(ds, clim, relative=True).sel(region="Maren Sea", model="vgpm")
    assert an["anomaly"].dims == ("month",)
    march_2003 = an.sel(month="2003-03-01")
    assert march_2003["anomaly"].item() == 4.5  # 9 - 4.5
    assert march_2003["anomaly_percent"].item() == 100.0  # 100 * 4.5 / 4.5
    assert np.isnan(an["anomaly"].sel(month="2003-07-01").item())  # no July climatology
    assert an["anomaly"].attrs["units"] == "Tg" and an["anomaly_percent"].attrs["units"] == "%"
    assert an.attrs["baseline_first"] == 2001
    # default baseline is the whole record: March (3 + 6 + 9) / 3 = 6
    assert compare.climatology(ds)["climatology"].sel(
        region="Maren Sea", model="vgpm", calendar_month=3).item() == 6.0


def test_percent_anomaly_of_zero_climatology_is_nan():
    ds = make_totals(0.0, n_years=2)
    ds["total"].values[0, 12, 0] = 1.0
    an = compare.anomalies(ds, compare.climatology(ds, baseline=(2001, 2001)), relative=True)
    cell = an.sel(region="Maren Sea", model="vgpm", month="2002-01-01")
    assert cell["anomaly"].item() == 1.0
    assert np.isnan(cell["anomaly_percent"].item())


def test_anomalies_refuse_other_regions():
    ds = make_totals(n_years=2)
    clim = compare.climatology(ds.isel(region=[0]))
    with pytest.raises(CompareInputError) as err:
        compare.anomalies(ds, clim)
    assert str(err.value) == (
        "clim: its regions/grid or models differ from the data's (compute the climatology from "
        "the same results)"
    )
    with pytest.raises(CompareInputError, match=r"^clim: a climatology of 'mean_npp', but the anomalies are of 'total'$"):
        compare.anomalies(ds, compare.climatology(ds, variable="mean_npp"))


# ---------------------------------------------------------------------------------------------
# differences


def test_difference_year_and_period_by_hand():
    # year index y holds (y + 1) Tg every month: 2001 -> 1, ..., 2005 -> 5
    series = by_calendar(5, lambda y, m: float(y + 1))
    series[4 * 12 + 2] = np.nan  # March 2005 missing
    ds = make_totals(series[None, :, None], n_years=5)
    out = compare.difference(ds, (2001, 2003), 2005).sel(region="Maren Sea", model="vgpm")
    assert out["mean_a"].item() == 2.0  # (1 + 2 + 3) / 3
    assert out["mean_b"].item() == 5.0
    assert out["difference"].item() == 3.0
    assert out["percent"].item() == 150.0  # 100 * 3 / 2
    assert out["n_months_a"].item() == 36 and out["n_months_b"].item() == 11
    assert out.attrs["period_a"] == "2001-2003" and out.attrs["period_b"] == "2005"
    assert out.attrs["months_in_period_a"] == 36 and out.attrs["months_in_period_b"] == 12
    assert out["difference"].attrs["units"] == "Tg" and out["percent"].attrs["units"] == "%"
    assert out["n_months_a"].attrs["units"] == "1"


def test_difference_period_outside_record():
    ds = make_totals(n_years=3)
    with pytest.raises(CompareInputError) as err:
        compare.difference(ds, 2001, 2030)
    assert str(err.value) == "b: no month of the record (2001-2003) falls in 2030"
    assert isinstance(err.value, EuphoticError)


# ---------------------------------------------------------------------------------------------
# trends


def _t_monthly(n_years: int) -> np.ndarray:
    """Years since 1 January of the first year, mid-month in twelfths (as documented)."""
    return np.arange(12 * n_years) / 12.0 + 0.5 / 12.0


def test_known_linear_trend_recovered_exactly():
    # 0.25 Tg per year on top of 3 Tg, sampled at the documented monthly times
    t = _t_monthly(12)
    ds = make_totals((3.0 + 0.25 * t)[None, :, None])
    out = compare.trend(ds, deseasonalise=False).sel(region="Maren Sea", model="vgpm")
    assert out["slope"].item() == pytest.approx(0.25, rel=1e-12)
    assert out["intercept"].item() == pytest.approx(3.0, rel=1e-12)
    assert out["tau"].item() == 1.0
    assert out["slope"].attrs["units"] == "Tg yr-1"
    # annual sums of the same series: 12 * 3 + 0.25 * sum(t over the year) = 36 + 3 (year + 0.5)
    # Tg yr-1 (by hand), a slope of exactly 3 Tg yr-2 and 37.5 Tg yr-1 at the origin
    ann = compare.trend(ds, annual=True).sel(region="Maren Sea", model="vgpm")
    assert ann["slope"].item() == pytest.approx(3.0, rel=1e-12)
    assert ann["intercept"].item() == pytest.approx(36.0, rel=1e-12)
    assert ann["slope"].attrs["units"] == "Tg yr-2"
    assert ann["intercept"].attrs["units"] == "Tg yr-1"
    assert ann["n"].item() == 12 and ann["n_years"].item() == 12
    assert ann.attrs["trend_basis"] == "annual" and ann.attrs["time_origin"] == "2001-01-01"


def test_trend_matches_scipy_on_the_same_numbers():
    rng = np.random.default_rng(42)
    season = np.tile(np.sin(2 * np.pi * np.arange(12) / 12), 12)
    y = 5.0 + 0.1 * _t_monthly(12) + season + rng.normal(0, 0.3, 144)
    y[[7, 50, 51, 100]] = np.nan  # missing months
    ds = make_totals(y[None, :, None])
    out = compare.trend(ds, alpha=0.1).sel(region="Maren Sea", model="vgpm")
    # deseasonalised by hand: each calendar month minus its mean over all years (NaN skipped)
    grid = y.reshape(12, 12)
    anom = (grid - np.nanmean(grid, axis=0)).ravel()
    ok = np.isfinite(anom)
    ts = stats.theilslopes(anom[ok], _t_monthly(12)[ok], alpha=0.9)  # 90 % interval
    kt = stats.kendalltau(_t_monthly(12)[ok], anom[ok])
    assert out["slope"].item() == pytest.approx(ts.slope, rel=1e-12)
    assert out["intercept"].item() == pytest.approx(ts.intercept, rel=1e-9, abs=1e-12)
    assert out["slope_low"].item() == pytest.approx(ts.low_slope, rel=1e-12)
    assert out["slope_high"].item() == pytest.approx(ts.high_slope, rel=1e-12)
    assert out["tau"].item() == pytest.approx(kt.statistic, rel=1e-12)
    assert out["p_value"].item() == pytest.approx(kt.pvalue, rel=1e-9)
    assert out["n"].item() == 140 and out["n_years"].item() == 12
    assert bool(out["significant"].item()) == (kt.pvalue < 0.1)
    assert out["slope_low"].attrs["long_name"].startswith("lower bound of the 90% confidence")
    assert out.attrs["trend_basis"] == "monthly, deseasonalised"


def test_noise_false_positive_rate_is_about_alpha():
    # 200 seeded series of pure noise: under no trend the test rejects at about alpha = 5 %
    # (binomial(200, 0.05): mean 10, central 99 % range about 3-19; from the binomial law)
    noise = np.random.default_rng(7).normal(10.0, 1.0, (200, 144))
    da = xr.DataArray(noise, dims=("region", "month"), name="total", attrs={"units": "Tg"},
                      coords={"region": [f"r{i}" for i in range(200)], "month": _months(2001, 12)})
    out = compare.trend(da)
    n_sig = int(out["significant"].sum())
    assert 3 <= n_sig <= 19
    assert n_sig == int((out["p_value"] < 0.05).sum())
    assert float(np.abs(out["slope"]).median()) < 0.05  # Tg yr-1; the noise sd is 1 Tg


def test_short_record_warns_and_flags(caplog):
    ds = make_totals(n_years=6)
    with caplog.at_level(logging.WARNING, logger="euphotic"):
        out = compare.trend(ds, annual=True)
    assert out["short_record"].all() and (out["n_years"] == 6).all()
    assert [r.getMessage() for r in caplog.records] == [
        "trend of total: 4 of 4 series have fewer than 10 years (shortest 6); a trend over so "
        "short a record says little (flagged short_record)"
    ]


def test_long_record_does_not_warn(caplog):
    with caplog.at_level(logging.WARNING, logger="euphotic"):
        out = compare.trend(make_totals(n_years=10))
    assert not out["short_record"].any()
    assert caplog.records == []


def test_too_few_values_give_nan_statistics():
    y = np.full(24, np.nan)
    y[[0, 13]] = 1.0, 2.0
    out = compare.trend(make_totals(y[None, :, None], n_years=2), deseasonalise=False)
    cell = out.sel(region="Maren Sea", model="vgpm")
    assert np.isnan(cell["slope"].item()) and np.isnan(cell["p_value"].item())
    assert cell["n"].item() == 2 and cell["n_years"].item() == 2
    assert not bool(cell["significant"].item())


# ---------------------------------------------------------------------------------------------
# maps: lazy, per cell


def test_map_functions_stay_lazy(no_compute):
    maps = make_maps(coverage=0.8)
    with no_compute:
        clim = compare.climatology(maps, baseline=(2001, 2005))
        outs = [
            compare.seasonal_cycle(maps, min_coverage=0.5),
            clim,
            compare.anomalies(maps, clim, relative=True),
            compare.difference(maps, (2001, 2005), 2012),
            compare.trend_map(maps),
            compare.trend_map(maps, annual=True),
        ]
    for ds in outs:
        for name, v in ds.data_vars.items():
            assert v.chunks is not None, name
            assert "units" in v.attrs or v.dtype == bool, name
        assert "model" in ds.dims
    # the dropped count is a lazy variable on dask input (0 here: every coverage is 0.8)
    assert outs[0]["n_dropped_low_coverage"].compute().item() == 0


def test_trend_map_cell_matches_scipy():
    values = np.random.default_rng(3).uniform(100.0, 500.0, (2, 144, 3, 4)).astype(np.float32)
    values[1, :, 2, 3] += (20.0 * _t_monthly(12)).astype(np.float32)  # a real trend in one cell
    values[0, 30:40, 0, 0] = np.nan
    out = compare.trend_map(make_maps(values), deseasonalise=False).compute()
    assert out["slope"].dims == ("model", "lat", "lon")
    assert out["slope"].attrs["units"] == "mg m-2 d-1 yr-1"
    for m, i, j in [(0, 0, 0), (1, 2, 3), (1, 1, 2)]:
        y = values[m, :, i, j].astype(np.float64)
        ok = np.isfinite(y)
        ts = stats.theilslopes(y[ok], _t_monthly(12)[ok])
        kt = stats.kendalltau(_t_monthly(12)[ok], y[ok])
        cell = out.isel(model=m, lat=i, lon=j)
        assert cell["slope"].item() == pytest.approx(ts.slope, rel=1e-12)
        assert cell["intercept"].item() == pytest.approx(ts.intercept, rel=1e-12)
        assert cell["p_value"].item() == pytest.approx(kt.pvalue, rel=1e-9)
    assert out["n"].isel(model=0, lat=0, lon=0).item() == 134
    assert bool(out["significant"].isel(model=1, lat=2, lon=3).item())


def test_map_min_coverage_and_difference_values():
    cov = np.ones((2, 36, 3, 4), np.float32)
    cov[0, 0, 0, 0] = 0.1  # January 2001 of one cell dropped
    values = np.broadcast_to(
        np.repeat([100.0, 200.0, 300.0], 12)[None, :, None, None], (2, 36, 3, 4))
    out = compare.difference(make_maps(values, n_years=3, coverage=cov), 2001, 2003, min_coverage=0.5)
    out = out.compute()
    assert out["n_dropped_low_coverage"].item() == 1
    assert out["mean_a"].isel(model=0, lat=0, lon=0).item() == 100.0
    assert out["n_months_a"].isel(model=0, lat=0, lon=0).item() == 11
    assert out["n_months_a"].isel(model=0, lat=0, lon=1).item() == 12
    np.testing.assert_array_equal(out["percent"].values, 200.0)  # 100 * (300 - 100) / 100
    assert out.attrs["min_coverage"] == 0.5


def test_short_record_warning_on_lazy_maps_uses_the_record_length(caplog, no_compute):
    maps = make_maps(n_years=3)
    with caplog.at_level(logging.WARNING, logger="euphotic"), no_compute:
        compare.trend_map(maps)
    assert [r.getMessage() for r in caplog.records] == [
        "trend of npp: the record has fewer than 10 years (shortest 3); a trend over so short "
        "a record says little (flagged short_record)"
    ]


# ---------------------------------------------------------------------------------------------
# bad input: one line naming the argument or variable


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda ds: compare.annual_totals(ds, min_coverage=1.5),
         "min_coverage: must be between 0 and 1, got 1.5"),
        (lambda ds: compare.annual_totals(ds, variable="mean_npp"),
         "variable 'mean_npp': annual totals sum amounts in 'Tg' per month, got units 'mg m-2 d-1'"),
        (lambda ds: compare.seasonal_cycle(ds, variable="chl"),
         "variable 'chl': not in the dataset (has ['coverage', 'flag', 'mean_npp', 'observed_area', "
         "'ocean_area', 'total', 'total_filled'])"),
        (lambda ds: compare.climatology(ds["total"], min_coverage=0.5),
         "min_coverage: needs the 'coverage' variable; pass the Dataset, not the DataArray 'total'"),
        (lambda ds: compare.climatology(ds, baseline=(2005, 2001)),
         "baseline: first year 2005 is after last year 2001"),
        (lambda ds: compare.trend(ds, alpha=1.0),
         "alpha: must be between 0 and 1 (exclusive), got 1.0"),
        (lambda ds: compare.trend_map(ds),
         "maps: no 'time' dimension (has ['model', 'month', 'region']); use trend() for totals"),
        (lambda ds: compare.difference(ds, [2001, 2002, 2003], 2004),
         "a: expected a year or (first_year, last_year), got [2001, 2002, 2003]"),
        (lambda ds: compare.seasonal_cycle(ds.isel(month=0, drop=True)),
         "input: no 'time' or 'month' dimension (has ['model', 'region'])"),
        (lambda ds: compare.anomalies(ds.rename(month="time"), compare.climatology(ds)),
         "input: no 'month' coordinate along 'time' (first day of each month)"),
    ],
)
def test_bad_input_messages(call, message):
    with pytest.raises(CompareInputError) as err:
        call(make_totals(n_years=3))
    assert str(err.value) == message


def test_numpy_and_dask_maps_give_one_answer():
    maps = make_maps()
    eager = maps.compute()
    assert eager["npp"].chunks is None
    for fn in (lambda m: compare.climatology(m, baseline=(2002, 2006)),
               lambda m: compare.seasonal_cycle(m, years=(2001, 2003)),
               lambda m: compare.difference(m, 2001, (2010, 2012)),
               lambda m: compare.trend_map(m, annual=True)):
        lazy, now = fn(maps).compute(), fn(eager)
        assert lazy.attrs == now.attrs
        # float64 arithmetic: dask sums per chunk, numpy pairwise, so the last bits may differ
        # (1e-12 relative allows a few roundings of float64, epsilon 2.2e-16)
        xr.testing.assert_allclose(lazy, now, rtol=1e-12)
        assert all(v.dtype in (np.float64, np.int64, bool) for v in lazy.data_vars.values())


def test_p_value_is_the_mann_kendall_z_test_without_continuity_correction():
    # Mann-Kendall by its usual formulas (Kendall 1975, as usually quoted; from memory):
    # S = sum_{i<j} sign(y_j - y_i), var S = [n(n-1)(2n+5) - sum_t t(t-1)(2t+5)] / 18 over tie
    # groups of size t, z = S / sqrt(var S) (here without the continuity correction, as
    # documented), p = erfc(|z| / sqrt 2). Values rounded to 0.1 so that there are ties.
    import math

    y = np.round(np.random.default_rng(5).normal(10.0, 1.0, 144) + 0.004 * np.arange(144), 1)
    out = compare.trend(make_totals(y[None, :, None]), deseasonalise=False)
    n = y.size
    s = sum(np.sign(y[j] - y[i]) for i in range(n) for j in range(i + 1, n))
    _, t = np.unique(y, return_counts=True)
    var_s = (n * (n - 1) * (2 * n + 5) - np.sum(t * (t - 1) * (2 * t + 5))) / 18.0
    p = math.erfc(abs(s / math.sqrt(var_s)) / math.sqrt(2.0))
    assert out["p_value"].sel(region="Maren Sea", model="vgpm").item() == pytest.approx(p, rel=1e-9)
