"""The fused monthly pass over composites, and the size of each month's graph in long runs."""

from __future__ import annotations

import dask
import dask.array
import numpy as np
import pytest
import xarray as xr
from dask.callbacks import Callback

from euphotic import aggregate
from euphotic.config import load_config
from euphotic.pipeline import run

from ._grids import monthly_case


def _periods(starts, ends, lat, lon, rng, lo, hi, gaps, chunk):
    """Values for the periods [start, end) as a dask-backed (time, lat, lon) input."""
    shape = (len(starts), len(lat), len(lon))
    v = rng.uniform(lo, hi, shape)
    v[rng.random(shape) < gaps] = np.nan
    return xr.DataArray(
        dask.array.from_array(v, chunks=(chunk, 4, 5)), dims=("time", "lat", "lon"),
        coords={"lat": lat, "lon": lon,
                "period_start": ("time", np.asarray(starts, "datetime64[D]").astype("datetime64[ns]")),
                "period_end": ("time", np.asarray(ends, "datetime64[D]").astype("datetime64[ns]"))},
    )


@pytest.mark.parametrize("month", ["2024-02", "2024-03"])
def test_fused_pass_over_composites_matches_day_by_day_reference(month):
    """Composites standing for many days (monthly SST, 8-day PAR straddling the month ends,
    daily chlorophyll with gaps and a missing week, several periods per dask chunk): the fused
    pass, which takes each period once with a day -> period index, gives the maps of the
    reference path (each model's numpy formula applied to each day's values through xarray,
    then xarray's mean; float64 sums in another order: rtol 1e-12) for several models."""
    rng = np.random.default_rng(5)
    lat, lon = np.linspace(-70, 70, 9), np.linspace(0, 40, 11)
    d0 = np.datetime64("2024-01-20")
    eight = d0 + 8 * np.arange(10)
    par = _periods(eight, eight + 8, lat, lon, rng, 1.0, 60.0, 0.05, 3)
    mstart = np.arange(np.datetime64("2024-01"), np.datetime64("2024-05")).astype("datetime64[D]")
    mend = (np.arange(np.datetime64("2024-01"), np.datetime64("2024-05")) + 1).astype("datetime64[D]")
    sst = _periods(mstart, mend, lat, lon, rng, -2.0, 30.0, 0.05, 2)
    days = np.arange(np.datetime64("2024-01-25"), np.datetime64("2024-04-10"))
    days = days[(days < np.datetime64("2024-02-10")) | (days >= np.datetime64("2024-02-17"))]
    chl = _periods(days, days + 1, lat, lon, rng, 0.05, 5.0, 0.3, 5)
    ocean = xr.DataArray(rng.random((9, 11)) > 0.2, dims=("lat", "lon"),
                         coords={"lat": lat, "lon": lon})
    runs = [("vgpm", {}), ("eppley_vgpm", {})]
    inputs = {"chl": chl, "par": par, "sst": sst}
    m = np.datetime64(month)
    fused = aggregate.monthly_npp_models(runs, m, inputs=inputs, ocean=ocean, fused=True)
    plain = aggregate.monthly_npp_models(runs, m, inputs=inputs, ocean=ocean, fused=False)
    graph = dict(fused[0].npp.data.__dask_graph__())
    assert not [k for k in graph if "take" in str(k[0])]  # no day-by-day copy of the periods
    with dask.config.set(scheduler="threads"):
        for f, p in zip(fused, plain, strict=True):
            a, b = dask.compute(f.npp, p.npp)
            assert np.isfinite(a.values).sum() > 20
            np.testing.assert_allclose(a.values, b.values, rtol=1e-12)
            np.testing.assert_array_equal(f.coverage.values, p.coverage.values)


class _Tasks(Callback):
    """Number of tasks given to the scheduler by each compute."""

    def __init__(self):
        super().__init__()
        self.counts: list[int] = []

    def _start(self, dsk):
        self.counts.append(len(dsk))


def _tasks_per_compute(tmp_path, n_months: int) -> list[int]:
    cfg = load_config(monthly_case(tmp_path, n_months, res=1.0, models=("vgpm", "eppley_vgpm"),
                                   regions=(("Box", [-30.0, 40.0, -25.0, 45.0]),
                                            ("Other", [-26.0, 44.0, -20.0, 50.0]))))
    with _Tasks() as seen:
        run(cfg, progress=False, steps=False)
    return seen.counts


def test_tasks_per_month_do_not_grow_with_the_run(tmp_path):
    """One graph per month (the default): a month of a 4-year stack of monthly files is given
    to the scheduler as the same number of tasks as a month of a 2-year stack (the graph refers
    only to the month's own files; counted with a dask scheduler callback)."""
    two = _tasks_per_compute(tmp_path / "two", 24)
    four = _tasks_per_compute(tmp_path / "four", 48)
    # the first month's graph also finds the ocean (valid temperature in any file, taken from
    # the whole stack once); then the months; then the steps after them (ensemble: not counted)
    assert set(two[1:24]) == set(four[1:48]) and len(set(two[1:24])) == 1
    assert two[0] < four[0]  # the first month's graph reads every temperature file once
