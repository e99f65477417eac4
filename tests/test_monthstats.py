"""The calendar-month block kernels (euphotic.monthstats) and the compiled path of the
comparison functions on dask-backed maps.

References: numpy's ``nanmean`` / ``count_nonzero`` on the same numbers (float64), and the
xarray groupby path of :mod:`euphotic.compare` itself (taken for numpy-backed input), which the
existing hand-worked tests in ``test_compare.py`` check. Tolerance 1e-12 relative: both sum
float64 values, in another order (sequential here, pairwise in numpy), so a few roundings of
float64 (epsilon 2.2e-16) may differ, nothing more.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

from euphotic import compare, monthstats
from euphotic.compare import CompareInputError
from tests.test_compare import make_maps


def test_group_mean_by_hand():
    # two series, 4 steps in groups 0, 1, 0, -1 (the last left out, as a month outside the
    # baseline): means (1 + 3) / 2 = 2 and 2; second series has a NaN in group 0
    y = np.array([[1.0, 2.0, 3.0, 100.0], [np.nan, 5.0, 7.0, 100.0]], dtype=np.float32)
    mean, n = monthstats.group_mean(y, np.array([0, 1, 0, -1]), n_groups=3)
    np.testing.assert_array_equal(mean[0], [2.0, 2.0, np.nan])  # group 2 empty: NaN, not 0
    np.testing.assert_array_equal(mean[1], [7.0, 5.0, np.nan])
    np.testing.assert_array_equal(n, [[2, 1, 0], [1, 1, 0]])
    assert mean.dtype == np.float64 and n.dtype == np.int64


def test_group_mean_accumulates_float32_in_float64():
    # 2**24 + 1 is not a float32: a float32 running sum of 2**24 and ten 1.0 stays at 2**24
    # (each + 1 rounds back); a float64 sum gives 2**24 + 10 exactly (worked by hand)
    y = np.array([[2.0**24] + [1.0] * 10], dtype=np.float32)
    mean, n = monthstats.group_mean(y, np.zeros(11, dtype=int), n_groups=1)
    assert mean[0, 0] == (2.0**24 + 10) / 11 and n[0, 0] == 11


def test_group_mean_and_departures_against_numpy():
    rng = np.random.default_rng(4)
    y = rng.uniform(50, 900, (3, 5, 36)).astype(np.float32)
    y[rng.uniform(size=y.shape) < 0.2] = np.nan
    group = np.arange(36) % 12
    mean, n = monthstats.group_mean(y, group)
    y64 = y.astype(np.float64)
    for g in range(12):
        sel = y64[..., group == g]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # "Mean of empty slice": NaN
            ref = np.nanmean(sel, axis=-1)  # numpy reference
        np.testing.assert_allclose(mean[..., g], ref, rtol=1e-12)
        np.testing.assert_array_equal(n[..., g], np.count_nonzero(np.isfinite(sel), axis=-1))
    dep = monthstats.departures(y, mean, group)
    np.testing.assert_allclose(dep, y64 - mean[..., group], rtol=1e-12)
    assert dep.dtype == np.float64 and np.isnan(dep[np.isnan(y)]).all()


def test_kernels_refuse_bad_groups():
    y = np.zeros((2, 3))
    with pytest.raises(ValueError, match=r"^group: expected 3 labels below 12"):
        monthstats.group_mean(y, np.array([0, 1, 12]))
    with pytest.raises(ValueError, match=r"^group: expected 3 labels below 12$"):
        monthstats.departures(y, np.zeros((2, 12)), np.array([0, -1, 2]))


def _gappy_maps() -> xr.Dataset:
    rng = np.random.default_rng(8)
    values = rng.uniform(100.0, 500.0, (2, 144, 3, 4)).astype(np.float32)
    values[rng.uniform(size=values.shape) < 0.15] = np.nan
    values[:, 6::12, 0, 0] = np.nan  # one cell never observed in July: NaN climatology
    cov = rng.uniform(0.2, 1.0, values.shape).astype(np.float32)
    return make_maps(values, coverage=cov)


@pytest.mark.parametrize("rule", [{}, {"min_coverage": 0.5}, {"min_coverage": 0.5, "low_coverage": "flag"}])
def test_compiled_path_matches_the_groupby_path(rule):
    maps = _gappy_maps()
    eager = maps.compute()
    assert maps["npp"].chunks is not None and eager["npp"].chunks is None
    calls = (
        lambda m: compare.climatology(m, baseline=(2002, 2009), **rule),
        lambda m: compare.anomalies(m, compare.climatology(m, **rule), relative=True, **rule),
        lambda m: compare.trend_map(m, annual=True, **rule),
    )
    for fn in calls:
        lazy_ds = fn(maps)
        now = fn(eager)
        assert lazy_ds["climatology" if "climatology" in lazy_ds else
                       "anomaly" if "anomaly" in lazy_ds else "slope"].chunks is not None
        lazy = lazy_ds.compute()
        # the count of values below the rule: a lazy variable on dask input, an attr on numpy
        for count in ("n_dropped_low_coverage", "n_flagged_low_coverage"):
            if count in now.attrs:
                assert lazy[count].item() == now.attrs.pop(count) > 0
                lazy = lazy.drop_vars(count)
        assert lazy.attrs == now.attrs
        assert {k: v.dims for k, v in lazy.variables.items()} == {k: v.dims for k, v in now.variables.items()}
        assert {k: v.attrs for k, v in lazy.data_vars.items()} == {k: v.attrs for k, v in now.data_vars.items()}
        xr.testing.assert_allclose(lazy, now, rtol=1e-12)
        assert {k: v.dtype for k, v in lazy.data_vars.items()} == {k: v.dtype for k, v in now.data_vars.items()}


def test_compiled_anomalies_refuse_another_grid():
    maps = _gappy_maps()
    clim = compare.climatology(maps.isel(lon=slice(0, 2)))
    with pytest.raises(CompareInputError) as err:
        compare.anomalies(maps, clim)
    assert str(err.value) == (
        "clim: its regions/grid or models differ from the data's (compute the climatology from "
        "the same results)"
    )


def test_compiled_path_stays_lazy(no_compute):
    maps = _gappy_maps()
    with no_compute:
        clim = compare.climatology(maps)
        an = compare.anomalies(maps, clim)
        tm = compare.trend_map(maps, annual=True)
    assert all(v.chunks is not None for ds in (clim, an, tm) for v in ds.data_vars.values())


def test_compiled_anomalies_of_lazy_maps_against_an_in_memory_climatology():
    maps = _gappy_maps()
    eager = maps.compute()
    clim = compare.climatology(eager)  # numpy-backed, from the groupby path
    lazy = compare.anomalies(maps, clim, relative=True)
    assert lazy["anomaly"].chunks is not None
    xr.testing.assert_allclose(lazy.compute(), compare.anomalies(eager, clim, relative=True), rtol=1e-12)
