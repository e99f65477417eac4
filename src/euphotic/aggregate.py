"""From input periods to calendar months, and from maps to regional totals.

Pure functions on (dask-backed) xarray objects and numpy arrays; nothing here computes.

Time model: every input period (a day, an 8-day composite, a month) stands for each day it
covers. For each calendar day the model is evaluated with the inputs whose periods cover that
day and that day's day length, so an input period contributes to a month in proportion to the
days it overlaps that month. The monthly map is the mean daily rate over the days with a valid
estimate; ``coverage`` is the fraction of the month's days with one.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np
import xarray as xr

from euphotic.constants import G_PER_TG
from euphotic.geo import day_length as _day_length

MG_PER_G = 1000.0

#: Totals-table flag: the region has no ocean cell on the grid.
FLAG_NO_OCEAN = "no_ocean_cells"
#: Totals-table flag: the region has ocean cells but none with a valid estimate in the month.
FLAG_NO_DATA = "no_valid_data"

_log = logging.getLogger("euphotic")


def month_days(month: np.datetime64) -> np.ndarray:
    """All days (datetime64[D]) of a calendar month given as datetime64[M]."""
    m = np.datetime64(month, "M")
    return np.arange(m.astype("datetime64[D]"), (m + 1).astype("datetime64[D]"))


def months_touched(starts: np.ndarray, ends: np.ndarray) -> list[np.datetime64]:
    """Calendar months (datetime64[M]) overlapped by any period [start, end)."""
    out: set = set()
    for s, e in zip(
        np.asarray(starts, "datetime64[D]"), np.asarray(ends, "datetime64[D]"), strict=True
    ):
        out.update(np.arange(s.astype("datetime64[M]"), (e - 1).astype("datetime64[M]") + 1))
    return sorted(out)


def day_to_period(starts, ends, days) -> np.ndarray:
    """For each day, the index of the period that covers it (-1 if none).

    Where periods overlap, the shortest wins (a daily file over an 8-day composite), then the
    one that starts latest.
    """
    s = np.asarray(starts, "datetime64[D]")
    e = np.asarray(ends, "datetime64[D]")
    d = np.asarray(days, "datetime64[D]")
    covers = (s[None, :] <= d[:, None]) & (d[:, None] < e[None, :])
    length = (e - s).astype(np.int64)
    # rank: shorter first, then later start
    rank = np.lexsort((-(s - s.min()).astype(np.int64), length))
    score = np.full(len(s), -1, dtype=np.int64)
    score[rank] = np.arange(len(s))[::-1]
    masked = np.where(covers, score[None, :], -1)
    best = masked.argmax(axis=1)
    return np.where(covers.any(axis=1), best, -1)


def daily_stack(da: xr.DataArray, days: np.ndarray) -> xr.DataArray:
    """The input values that stand for each day, dims ``(day, lat, lon)``; NaN where uncovered."""
    idx = day_to_period(da["period_start"].values, da["period_end"].values, days)
    if idx[0] >= 0 and np.all(np.diff(idx) == 1):  # one period per day in order: a plain slice
        taken = da.isel(time=slice(int(idx[0]), int(idx[-1]) + 1)).rename(time="day")
    else:
        taken = da.isel(time=xr.DataArray(np.clip(idx, 0, None), dims="day"))
    taken = taken.drop_vars(
        [c for c in ("time", "period_start", "period_end") if c in taken.coords]
    )
    taken = taken.assign_coords(day=("day", np.asarray(days, "datetime64[ns]")))
    if (idx < 0).any():
        taken = taken.where(xr.DataArray(idx >= 0, dims="day", coords={"day": taken.day}))
    return taken


@dataclass
class MonthlyMaps:
    """Lazy monthly results for one month and one model."""

    month: np.datetime64
    model: str
    npp: xr.DataArray  # (lat, lon) mean daily rate, mg C m-2 d-1
    coverage: xr.DataArray  # (lat, lon) fraction of the month's days with a valid estimate
    n_days: int


def monthly_npp(
    model: Callable,
    model_name: str,
    month: np.datetime64,
    *,
    chl: xr.DataArray,
    par: xr.DataArray,
    sst: xr.DataArray,
    ocean: xr.DataArray,
    day_length: xr.DataArray | None = None,
    month_block: Callable | None = None,
) -> MonthlyMaps:
    """Monthly mean NPP and coverage for one calendar month (lazy).

    With ``month_block`` (a model's fused compiled pass, from
    :func:`euphotic.models.get_month_block`) each day's block is turned straight into a running
    sum and count of valid rates; otherwise the model function is applied day by day and the
    mean taken with xarray. Both give the same numbers (tested).

    Parameters
    ----------
    model : callable
        A model from :mod:`euphotic.models` (chl mg m-3, PAR mol m-2 d-1, SST degC, h).
    chl, par, sst : xarray.DataArray
        Inputs on one grid, dims (time, lat, lon) with period_start/period_end coords.
    ocean : xarray.DataArray of bool
        (lat, lon) ocean cells; elsewhere the result is NaN.
    day_length : xarray.DataArray, optional
        A day-length input (h) with periods; by default computed from latitude and date.
    """
    all_days = month_days(month)
    n = len(all_days)
    block = month_block if day_length is None else None
    if block is not None:
        # Days without chlorophyll yield an estimate only in polar night (0, counted as
        # observed): they are added as counts per latitude row instead of being computed.
        covered = day_to_period(chl["period_start"].values, chl["period_end"].values, all_days) >= 0
        dl_all = _day_length(chl["lat"].values, all_days)  # (day, lat)
        dark_rows = (dl_all[~covered] <= 0.0).sum(axis=0).astype(np.float64)
        days = all_days[covered]
        c, p, t = (daily_stack(x, days) for x in (chl, par, sst))
        npp, coverage = _fused_month(block, c, p, t, dl_all[covered], ocean, n, dark_rows)
        return MonthlyMaps(
            month=np.datetime64(month, "M"), model=model_name, npp=npp, coverage=coverage, n_days=n
        )
    days = all_days
    c = daily_stack(chl, days)
    p = daily_stack(par, days)
    t = daily_stack(sst, days)
    if day_length is None:
        dl = _day_length(chl["lat"], xr.DataArray(days, dims="day", coords={"day": c.day}))
        dl = dl.transpose("day", "lat")
    else:
        dl = daily_stack(day_length, days)
    npp_daily = model(c, p, t, dl).where(ocean)
    valid = npp_daily.notnull()
    npp = npp_daily.mean("day", skipna=True)
    coverage = (valid.sum("day") / n).where(ocean)
    return MonthlyMaps(
        month=np.datetime64(month, "M"), model=model_name, npp=npp, coverage=coverage, n_days=n
    )


def _fused_month(block, c, p, t, dl, ocean, n, dark_rows):
    """Per spatial block, one chain of tasks over the day chunks: each task adds its days'
    valid rates into the block's running (sum, count), in place, and the last one turns them
    into (mean rate, coverage). One accumulator per block is alive, however many days."""
    import dask.array as da
    from dask.base import tokenize
    from dask.highlevelgraph import HighLevelGraph

    cd = c.data if isinstance(c.data, da.Array) else da.from_array(c.values)
    spatial = cd.chunks[1:]
    pd_ = da.asarray(p.data).rechunk(cd.chunks)
    td = da.asarray(t.data).rechunk(cd.chunks)
    dld = da.from_array(np.asarray(dl, np.float64), chunks=(cd.chunks[0], spatial[0]))
    oc = ocean.data if isinstance(ocean.data, da.Array) else da.from_array(np.asarray(ocean.values, bool))
    oc = oc.rechunk(spatial)
    dark = da.from_array(np.asarray(dark_rows, np.float64), chunks=(spatial[0],))
    token = tokenize(block, cd, pd_, td, dld, oc, dark, n)
    step, final = f"month-step-{token}", f"month-mean-{token}"
    dsk = {}
    n_steps = len(cd.chunks[0])
    for y in range(len(spatial[0])):
        for x in range(len(spatial[1])):
            prev = None
            for d in range(n_steps):
                dsk[(step, d, y, x)] = (
                    block, (cd.name, d, y, x), (pd_.name, d, y, x), (td.name, d, y, x),
                    (dld.name, d, y), (oc.name, y, x), prev,
                )
                prev = (step, d, y, x)
            # one task per block turns (sum, count) into (mean rate, coverage), so both outputs
            # come from the same block and the scheduler frees the inputs promptly
            dsk[(final, 0, y, x)] = (_finish_month, prev, (oc.name, y, x), (dark.name, y), n)
    graph = HighLevelGraph.from_collections(final, dsk, dependencies=[cd, pd_, td, dld, oc, dark])
    out = da.Array(graph, final, chunks=((2,),) + spatial, dtype=np.float64)
    coords = {"lat": c["lat"], "lon": c["lon"]}
    npp = xr.DataArray(out[0], dims=("lat", "lon"), coords=coords)
    coverage = xr.DataArray(out[1], dims=("lat", "lon"), coords=coords)
    return npp, coverage


def _finish_month(sums: np.ndarray, ocean: np.ndarray, dark_rows: np.ndarray, n_days: int) -> np.ndarray:
    """(sum, count) of valid daily rates -> (mean rate, coverage); NaN off the ocean.

    ``dark_rows``: per latitude row, the polar-night days that had no input (rate 0, observed).
    """
    total = sums[0]
    count = sums[1] + np.where(ocean, dark_rows[:, None], 0.0)
    valid = count > 0
    mean = np.where(valid, total / np.where(valid, count, 1.0), np.nan)
    coverage = np.where(ocean, count / n_days, np.nan)
    return np.stack([mean, coverage])


#: Quantities summed per region, in this order.
SUM_FIELDS = ("ocean_area_m2", "observed_area_m2", "integral_mg_d", "coverage_area_m2")


def region_bits(masks: list[np.ndarray]) -> np.ndarray:
    """Pack up to 64 boolean (lat, lon) masks into one integer array (bit r = region r).

    One small array stands for every region, overlapping ones included, so a single pass over
    the map computes all regional sums.
    """
    return RegionMasks.build((str(r), m) for r, m in enumerate(masks)).bits


class RegionMasks(Mapping):
    """Region name -> boolean (lat, lon) mask, stored packed in one bit array.

    Each mask is unpacked only when asked for, so a run with many regions holds one small
    integer array instead of one boolean grid per region.
    """

    def __init__(self, names: list[str], bits: np.ndarray | None):
        self.names = list(names)
        self.bits = bits

    @classmethod
    def build(cls, named_masks) -> RegionMasks:
        """Pack masks given as ``(name, mask)`` pairs, one at a time (an iterator is fine)."""
        names, bits = [], None
        for name, mask in named_masks:
            r = len(names)
            if r == 64:
                raise ValueError("at most 64 regions per bit array")
            # the smallest integer type that holds every region's bit, widened as regions come
            dtype = np.uint8 if r < 8 else np.uint16 if r < 16 else np.uint32 if r < 32 else np.uint64
            if bits is None:
                bits = np.zeros(np.shape(mask), dtype=dtype)
            elif bits.dtype != dtype:
                bits = bits.astype(dtype)
            ones = np.ascontiguousarray(mask, dtype=bool).view(np.uint8).astype(dtype, copy=False)
            bits |= ones << dtype(r)
            names.append(name)
        return cls(names, bits)

    def __getitem__(self, name: str) -> np.ndarray:
        r = self.names.index(name)
        return ((self.bits >> self.bits.dtype.type(r)) & 1).astype(bool)

    def __iter__(self):
        return iter(self.names)

    def __len__(self) -> int:
        return len(self.names)


def _block_sums(npp, cov, ocean, bits, area_rows, n_regions):
    """Per-block partial sums, shape (1, 1, n_regions, 4) (see :data:`SUM_FIELDS`)."""
    w = np.broadcast_to(area_rows, npp.shape) * np.asarray(ocean, bool)
    observed = np.isfinite(npp)
    rate = np.where(observed, npp, 0.0)
    cv = np.where(np.isfinite(cov), cov, 0.0)
    out = np.zeros((1, 1, n_regions, len(SUM_FIELDS)))
    for r in range(n_regions):
        wr = np.where((bits >> bits.dtype.type(r)) & 1, w, 0.0)
        out[0, 0, r, 0] = wr.sum()
        out[0, 0, r, 1] = (wr * observed).sum()
        out[0, 0, r, 2] = (wr * rate).sum()
        out[0, 0, r, 3] = (wr * cv).sum()
    return out


@dataclass
class RegionSumsLazy:
    """Lazy regional sums for one month and model; finish with :func:`finish_totals`."""

    regions: list[str]
    month: np.datetime64
    model: str
    n_days: int
    sums: object  # dask or numpy array (n_regions, 4), fields as SUM_FIELDS


def region_sums(
    maps: MonthlyMaps,
    regions: list[str],
    bits: np.ndarray,
    ocean: xr.DataArray,
    area_rows_m2: np.ndarray,
) -> RegionSumsLazy:
    """Lazy area integrals of a monthly map over every region's ocean cells, in one pass.

    Parameters
    ----------
    bits : integer (lat, lon) array (numpy or dask) from :func:`region_bits` (bit r set: in
        ``regions[r]``)
    ocean : boolean (lat, lon) DataArray (lazy when taken from temperature)
    area_rows_m2 : (lat,) area of one cell in each grid row, m2 (regular grid)
    """
    import dask.array as da

    npp = maps.npp.data
    if not isinstance(npp, da.Array):
        npp = da.from_array(np.asarray(npp), chunks=-1)
    chunks = npp.chunks
    cov = da.asarray(maps.coverage.data).rechunk(chunks)
    oc = (
        da.asarray(ocean.data).rechunk(chunks)
        if isinstance(ocean.data, da.Array)
        else da.from_array(np.asarray(ocean.values), chunks=chunks)
    )
    b = bits.rechunk(chunks) if isinstance(bits, da.Array) else da.from_array(np.asarray(bits), chunks=chunks)
    rows = da.from_array(np.asarray(area_rows_m2, np.float64)[:, None], chunks=(chunks[0], 1))
    n = len(regions)
    parts = da.map_blocks(
        _block_sums,
        npp,
        cov,
        oc,
        b,
        rows,
        n,
        new_axis=[2, 3],
        chunks=((1,) * len(chunks[0]), (1,) * len(chunks[1]), (n,), (len(SUM_FIELDS),)),
        dtype=np.float64,
    )
    return RegionSumsLazy(
        regions=list(regions),
        month=maps.month,
        model=maps.model,
        n_days=maps.n_days,
        sums=parts.sum(axis=(0, 1)),
    )


def finish_totals(lazy: RegionSumsLazy, sums: np.ndarray) -> list[dict]:
    """Rows of the regional totals table from the computed sums (keys: the columns of
    :data:`euphotic.outputs.TOTALS_COLUMNS`).

    ``total_TgC``: monthly mean rate integrated over the observed cells, times the days of the
    month. ``total_filled_TgC``: observed area-mean rate times the region's whole ocean area and
    the days of the month. Never a silent zero: where nothing was observed the mean and totals
    are NaN (empty cells), ``flag`` says why (:data:`FLAG_NO_OCEAN`, :data:`FLAG_NO_DATA`) and
    one warning per case goes to the ``euphotic`` logger.
    """
    rows = []
    to_tg = lazy.n_days / MG_PER_G / G_PER_TG
    for name, (ocean_m2, observed_m2, integral, cov_m2) in zip(
        lazy.regions, np.asarray(sums), strict=True
    ):
        flags = []
        if not ocean_m2 > 0:
            flags.append(FLAG_NO_OCEAN)
            _log.warning(
                "region %r, %s, model %s: no ocean cell of the grid in the region; mean and "
                "totals left empty (flag %s)", name, lazy.month, lazy.model, FLAG_NO_OCEAN,
            )
        elif not observed_m2 > 0:
            flags.append(FLAG_NO_DATA)
            _log.warning(
                "region %r, %s, model %s: no valid estimate on the region's %.0f km2 of ocean; "
                "mean and totals left empty (flag %s)",
                name, lazy.month, lazy.model, ocean_m2 / 1e6, FLAG_NO_DATA,
            )
        seen = observed_m2 > 0
        mean = integral / observed_m2 if seen else np.nan
        rows.append(
            {
                "region": name,
                "month": str(lazy.month),
                "model": lazy.model,
                "mean_npp_mgC_m-2_d-1": mean,
                "observed_area_km2": observed_m2 / 1e6,
                "ocean_area_km2": ocean_m2 / 1e6,
                "coverage_fraction": cov_m2 / ocean_m2 if ocean_m2 > 0 else np.nan,
                "total_TgC": integral * to_tg if seen else np.nan,
                "total_filled_TgC": mean * ocean_m2 * to_tg if seen else np.nan,
                "flag": ";".join(flags),
            }
        )
    return rows
