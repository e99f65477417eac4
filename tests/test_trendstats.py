"""The compiled trend kernel (euphotic.trendstats) against scipy on the same numbers.

Reference: scipy 1.17 ``scipy.stats.theilslopes`` (method "separate", the default) and
``scipy.stats.kendalltau`` (method "auto", tau-b, two-sided), called per series by
:func:`_scipy_trend_1d` below, which is the per-series function the comparison module used
before the kernel (kept here only as the reference). Tolerances: slope, intercept and the
confidence interval are the same order statistics of the same pairwise slopes (computed with
the same float operations), so they agree to rounding (rtol 1e-10 leaves room for nothing
else); tau is a ratio of the same integer counts (rtol 1e-10); p-values go through a
different implementation of the normal tail (libm erfc against scipy's ndtr) or the same
exact distribution summed in another order, hence rtol 1e-8.
"""

from __future__ import annotations

import math
import warnings

import dask.array as dsa
import numpy as np
import pytest
import xarray as xr
from scipy import stats

from euphotic import compare, trendstats
from euphotic.trendstats import TREND_STATS, trend_block

RTOL = {"slope": 1e-10, "intercept": 1e-10, "slope_low": 1e-10, "slope_high": 1e-10,
        "tau": 1e-10, "p_value": 1e-8}


def _scipy_trend_1d(y: np.ndarray, t: np.ndarray, years: np.ndarray,
                    confidence: float = 0.95) -> np.ndarray:
    """Theil-Sen and Kendall's tau of one series by scipy (NaNs skipped; NaN stats under 3
    values): the reference for the kernel."""
    out = np.full(len(TREND_STATS), np.nan)
    ok = np.isfinite(y)
    n = int(ok.sum())
    out[6] = n
    out[7] = len(np.unique(years[ok]))
    if n < 3:
        return out
    yy, tt = y[ok].astype(np.float64), t[ok]
    ts = stats.theilslopes(yy, tt, alpha=confidence)
    out[0:4] = ts.slope, ts.intercept, ts.low_slope, ts.high_slope
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a constant series: tau undefined, NaN
        kt = stats.kendalltau(tt, yy)
    out[4:6] = kt.statistic, kt.pvalue
    return out


def _assert_matches(got: np.ndarray, want: np.ndarray, what: str) -> None:
    for i, name in enumerate(TREND_STATS):
        g, w = got[..., i], want[..., i]
        if name in ("n", "n_years"):
            np.testing.assert_array_equal(g, w, err_msg=f"{what}: {name}")
        else:
            np.testing.assert_allclose(g, w, rtol=RTOL[name], atol=0, equal_nan=True,
                                       err_msg=f"{what}: {name}")


def _monthly(n_years: int) -> tuple[np.ndarray, np.ndarray]:
    k = np.arange(12 * n_years)
    return k // 12 + (k % 12 + 0.5) / 12, 2001 + k // 12


def _series(rng, n: int, kind: str) -> np.ndarray:
    t = np.arange(n) + 0.5
    y = rng.normal(size=n) + rng.uniform(-0.3, 0.3) * t
    if kind == "ties":
        y = np.round(y)  # integers: many ties in y
    elif kind == "gaps":
        y[rng.random(n) < 0.3] = np.nan
    elif kind == "ties_gaps":
        y = np.round(2 * y) / 2
        y[rng.random(n) < 0.2] = np.nan
    return y


@pytest.mark.parametrize("kind", ["plain", "ties", "gaps", "ties_gaps"])
@pytest.mark.parametrize("n", [3, 4, 7, 20, 32, 33, 34, 35, 60, 240])
def test_kernel_matches_scipy_on_seeded_series(n, kind):
    rng = np.random.default_rng(1000 * n + len(kind))
    t = np.arange(n) + 0.5
    years = 2001 + np.arange(n) // (12 if n >= 60 else 1)
    n_series = 4 if n == 240 else 25
    y = np.stack([_series(rng, n, kind) for _ in range(n_series)])
    want = np.stack([_scipy_trend_1d(row, t, years) for row in y])
    _assert_matches(trend_block(y, t, years), want, f"n={n} {kind}")


@pytest.mark.parametrize("n", [3, 20, 33, 34, 240])
def test_special_series_match_scipy(n):
    """Constant series (tau undefined: NaN), perfectly ordered series (the exact p-value's
    c = 0 branch beyond n = 33 as well), one swapped pair (c = 1), all missing, two values."""
    t = np.arange(n) + 0.5
    years = np.arange(n)
    up = 3.0 + 0.25 * t
    swapped = up.copy()
    swapped[[1, 2]] = swapped[[2, 1]]
    two = np.full(n, np.nan)
    two[[0, n - 1]] = 1.0, 5.0
    y = np.stack([np.full(n, 7.0), up, -up, swapped, np.full(n, np.nan), two])
    got = trend_block(y, t, years)
    want = np.stack([_scipy_trend_1d(row, t, years) for row in y])
    _assert_matches(got, want, f"special n={n}")
    assert np.isnan(got[0, 4]) and np.isnan(got[0, 5])  # constant: no tau
    assert got[0, 0] == 0.0  # ... but a zero slope
    assert got[1, 4] == 1.0 and got[2, 4] == -1.0
    assert np.isnan(got[4, :6]).all() and got[4, 6] == 0 and got[4, 7] == 0
    assert np.isnan(got[5, :6]).all() and got[5, 6] == 2 and got[5, 7] == 2


def test_exact_and_asymptotic_branches_are_both_used():
    """scipy 1.17 (``_stats_py.kendalltau``, method "auto") takes the exact distribution for
    untied series of up to 33 values and the normal approximation beyond: the kernel agrees
    on both sides of the switch, where the two differ visibly."""
    rng = np.random.default_rng(5)
    for n in (33, 34):
        t = np.arange(n) + 0.5
        y = rng.normal(size=n) + 0.03 * t
        got = trend_block(y[None], t, np.arange(n))[0]
        kt = stats.kendalltau(t, y)
        assert got[5] == pytest.approx(kt.pvalue, rel=1e-8)
        exact = stats.kendalltau(t, y, method="exact").pvalue
        asym = stats.kendalltau(t, y, method="asymptotic").pvalue
        assert got[5] == pytest.approx(exact if n <= 33 else asym, rel=1e-8)
        assert abs(exact - asym) > 1e-6 * asym  # the branches are distinguishable here


def test_exact_table_is_kendalls_distribution():
    """The exact two-sided p-values against scipy's own exact routine for every n <= 33 and
    every count of concordant pairs."""
    from scipy.stats._mstats_basic import _kendall_p_exact  # scipy 1.17 private function

    table = trendstats._exact_pvalues()
    for n in range(3, trendstats.EXACT_MAX_N + 1):
        tot = n * (n - 1) // 2
        want = np.array([_kendall_p_exact(n, c) for c in range(tot + 1)])
        np.testing.assert_allclose(table[n, : tot + 1], want, rtol=1e-12, err_msg=f"n={n}")
    # the Mahonian numbers of n = 4 (Kendall 1970, table of the permutation distribution;
    # OEIS A008302 row 4: 1 3 5 6 5 3 1), here cumulated
    assert trendstats._mahonian_cumulative(4) == [1, 4, 9, 15, 20, 23, 24]
    assert trendstats._mahonian_cumulative(4)[-1] == math.factorial(4)


@pytest.mark.parametrize("confidence", [0.95, 0.9, 0.05, 0.99])
def test_confidence_levels_match_scipy(confidence):
    rng = np.random.default_rng(11)
    t, years = _monthly(3)
    y = rng.normal(size=(10, t.size)) + 0.4 * t
    want = np.stack([_scipy_trend_1d(row, t, years, confidence) for row in y])
    _assert_matches(trend_block(y, t, years, confidence=confidence), want, f"{confidence}")


def test_ties_in_time_match_scipy():
    """Not a case the comparisons produce (their times are distinct), but the kernel follows
    scipy there too: pairs with equal t give no slope and count as ties of x."""
    rng = np.random.default_rng(2)
    t = np.repeat(np.arange(10.0), 3)
    years = t.astype(int)
    y = rng.normal(size=(20, t.size)) + 0.2 * t
    y[::3, 5] = np.nan
    want = np.stack([_scipy_trend_1d(row, t, years) for row in y])
    _assert_matches(trend_block(y, t, years), want, "ties in t")


def test_block_equals_the_per_series_loop():
    """One call on a (3, 4, 5, time) block gives what the kernel gives series by series."""
    rng = np.random.default_rng(8)
    t, years = _monthly(4)
    y = rng.normal(size=(3, 4, 5, t.size)) + 0.1 * t
    y[rng.random(y.shape) < 0.2] = np.nan
    y[0, 0, 0] = np.nan
    block = trend_block(y, t, years)
    assert block.shape == (3, 4, 5, len(TREND_STATS))
    for idx in np.ndindex(3, 4, 5):
        np.testing.assert_array_equal(block[idx], trend_block(y[idx], t, years))
        _assert_matches(block[idx], _scipy_trend_1d(y[idx], t, years), str(idx))


def test_block_float32_input_is_fitted_in_float64():
    rng = np.random.default_rng(9)
    t, years = _monthly(2)
    y32 = (100 + rng.normal(size=(6, t.size)) * 10).astype(np.float32)
    np.testing.assert_array_equal(trend_block(y32, t, years),
                                  trend_block(y32.astype(np.float64), t, years))


def test_block_rejects_mismatched_time():
    with pytest.raises(ValueError, match=r"t and years must have shape \(5,\)"):
        trend_block(np.zeros((2, 5)), np.arange(4.0), np.arange(4))


# ---------------------------------------------------------------------------------------------
# through euphotic.compare


def _maps(values: np.ndarray, chunks=None) -> xr.Dataset:
    n_time = values.shape[1]
    months = np.array([np.datetime64("2001-01") + i for i in range(n_time)], "datetime64[M]")
    first = months.astype("datetime64[D]").astype("datetime64[ns]")
    npp = xr.DataArray(values, dims=("model", "time", "lat", "lon"),
                       attrs={"units": "mg m-2 d-1"})
    if chunks is not None:
        npp = npp.chunk(chunks)
    return xr.Dataset(
        {"npp": npp},
        coords={"model": ["vgpm"] * values.shape[0] if values.shape[0] == 1 else
                [f"m{i}" for i in range(values.shape[0])],
                "time": ("time", first + np.timedelta64(14, "D")),
                "month": ("time", first),
                "lat": np.arange(values.shape[2]) - 10.0,
                "lon": np.arange(values.shape[3]) + 20.0},
    )


def test_trend_map_stays_lazy_and_matches_scipy_per_cell(no_compute):
    rng = np.random.default_rng(21)
    values = (200 + 30 * rng.normal(size=(2, 60, 6, 7))).astype(np.float32)
    values[:, :, 0, 0] = np.nan  # a land cell
    values[1, 5:17, 3, 3] = np.nan  # a cell missing a year
    values += (4.0 * np.arange(60) / 12).astype(np.float32)[None, :, None, None]
    maps = _maps(values, chunks={"model": 1, "time": 1, "lat": 3, "lon": 4})
    with no_compute:
        out = compare.trend_map(maps, annual=True)
        monthly = compare.trend_map(maps, deseasonalise=False)
    assert out["slope"].chunks is not None and out["n"].chunks is not None
    out, monthly = out.compute(), monthly.compute()
    assert out["slope"].dims == ("model", "lat", "lon")
    t_ann = np.arange(5) + 0.5
    t_mon, yrs_mon = _monthly(5)
    for m, i, j in [(0, 0, 0), (0, 2, 5), (1, 3, 3), (1, 5, 6)]:
        cell = values[m, :, i, j].astype(np.float64)
        ann = cell.reshape(5, 12)
        full = np.isfinite(ann).sum(axis=1) == 12
        ann = np.array([r.mean() if f else np.nan for r, f in zip(ann, full, strict=True)])
        want = _scipy_trend_1d(ann, t_ann, 2001 + np.arange(5))
        got = np.array([out[k].isel(model=m, lat=i, lon=j).item() for k in TREND_STATS])
        _assert_matches(got, want, f"annual cell {(m, i, j)}")
        want = _scipy_trend_1d(cell, t_mon, yrs_mon)
        got = np.array([monthly[k].isel(model=m, lat=i, lon=j).item() for k in TREND_STATS])
        _assert_matches(got, want, f"monthly cell {(m, i, j)}")
    # months 6/2001-5/2002 missing: both years incomplete, left out of the annual fit
    assert out["n"].isel(model=1, lat=3, lon=3).item() == 3
    assert out["n_years"].isel(model=0, lat=0, lon=0).item() == 0


def test_numpy_and_dask_inputs_give_the_same_trend_map():
    rng = np.random.default_rng(4)
    values = (100 + 10 * rng.normal(size=(1, 36, 4, 5))).astype(np.float32)
    eager = compare.trend_map(_maps(values), deseasonalise=True)
    lazy = compare.trend_map(_maps(values, chunks={"time": 1, "lat": 2, "lon": 5}),
                             deseasonalise=True).compute()
    xr.testing.assert_identical(eager.drop_attrs(), lazy.drop_attrs())


def test_time_contiguous_blocks_are_split_not_merged():
    arr = xr.DataArray(dsa.zeros((1, 240, 540, 1080), chunks=(1, 1, 540, 1080)),
                       dims=("model", "time", "lat", "lon"))
    out = compare._time_contiguous(arr, "time")
    assert out.chunks[1] == (240,)
    block = 8 * 240 * max(out.chunks[2]) * max(out.chunks[3])
    assert block <= compare.TREND_BLOCK_BYTES
    # every new chunk lies inside one old chunk (boundaries only added)
    assert 540 in np.cumsum(out.chunks[2]) and 1080 in np.cumsum(out.chunks[3])
    # 20 years of 270 x 540 blocks: 22 MiB of float64, left as they are
    small = xr.DataArray(dsa.zeros((1, 20, 270, 540), chunks=(1, 1, 270, 540)),
                         dims=("model", "time", "lat", "lon"))
    assert compare._time_contiguous(small, "time").chunks[2:] == ((270,), (540,))
