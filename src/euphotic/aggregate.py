"""From input periods to calendar months, and from maps to regional totals.

Pure functions on (dask-backed) xarray objects and numpy arrays; nothing here computes.

Time model: every input period (a day, an 8-day composite, a month) stands for each day it
covers. For each calendar day the model is evaluated with the inputs whose periods cover that
day and that day's day length, so an input period contributes to a month in proportion to the
days it overlaps that month. The monthly map is the mean daily rate over the days with a valid
estimate; ``coverage`` is the fraction of the month's days with one.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np
import xarray as xr

from euphotic.constants import G_PER_TG
from euphotic.geo import day_length as _day_length

MG_PER_G = 1000.0


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
) -> MonthlyMaps:
    """Monthly mean NPP and coverage for one calendar month (lazy).

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
    days = month_days(month)
    c = daily_stack(chl, days)
    p = daily_stack(par, days)
    t = daily_stack(sst, days)
    if day_length is None:
        dl = _day_length(chl["lat"], xr.DataArray(days, dims="day", coords={"day": c.day}))
        dl = dl.transpose("day", "lat")
    else:
        dl = daily_stack(day_length, days)
    npp_daily = model(c, p, t, dl).where(ocean)
    n = len(days)
    valid = npp_daily.notnull()
    npp = npp_daily.mean("day", skipna=True)
    coverage = (valid.sum("day") / n).where(ocean)
    return MonthlyMaps(
        month=np.datetime64(month, "M"), model=model_name, npp=npp, coverage=coverage, n_days=n
    )


@dataclass
class RegionTotalsLazy:
    """Lazy sums for one region and month; finish with :func:`finish_totals` once computed."""

    region: str
    month: np.datetime64
    model: str
    n_days: int
    ocean_area_m2: xr.DataArray
    observed_area_m2: xr.DataArray
    integral_mg_d: xr.DataArray  # sum of rate * area over observed cells, mg C d-1
    coverage_area_m2: xr.DataArray  # sum of coverage * area over ocean cells


def region_sums(
    maps: MonthlyMaps, region: str, mask: np.ndarray, ocean: xr.DataArray, area_m2: np.ndarray
) -> RegionTotalsLazy:
    """Lazy area integrals of one monthly map over one region's ocean cells.

    ``ocean`` is a boolean (lat, lon) DataArray (lazy when taken from temperature).
    """
    in_region = xr.DataArray(np.where(np.asarray(mask, bool), area_m2, 0.0), dims=("lat", "lon"))
    oc = ocean.drop_vars([c for c in ocean.coords if c in ("lat", "lon")])
    w = in_region * oc
    rate = maps.npp.drop_vars([c for c in maps.npp.coords if c in ("lat", "lon")])
    cov = maps.coverage.drop_vars([c for c in maps.coverage.coords if c in ("lat", "lon")])
    observed = rate.notnull()
    return RegionTotalsLazy(
        region=region,
        month=maps.month,
        model=maps.model,
        n_days=maps.n_days,
        ocean_area_m2=w.sum(),
        observed_area_m2=(w * observed).sum(),
        integral_mg_d=(rate.fillna(0.0) * w).sum(),
        coverage_area_m2=(cov.fillna(0.0) * w).sum(),
    )


def finish_totals(
    lazy: RegionTotalsLazy, observed_m2: float, integral: float, cov_m2: float, ocean_m2: float
) -> dict:
    """One row of the regional totals table from computed sums.

    ``total_TgC``: monthly mean rate integrated over the observed cells, times the days of the
    month. ``total_filled_TgC``: observed area-mean rate times the region's whole ocean area and
    the days of the month.
    """
    ocean_km2 = ocean_m2 / 1e6
    observed_km2 = observed_m2 / 1e6
    mean = integral / observed_m2 if observed_m2 > 0 else np.nan
    to_tg = lazy.n_days / MG_PER_G / G_PER_TG
    return {
        "region": lazy.region,
        "month": str(lazy.month),
        "model": lazy.model,
        "mean_npp_mg_m2_d": mean,
        "observed_area_km2": observed_km2,
        "ocean_area_km2": ocean_km2,
        "coverage": cov_m2 / ocean_m2 if ocean_m2 > 0 else np.nan,
        "total_TgC": integral * to_tg,
        "total_filled_TgC": mean * ocean_m2 * to_tg if observed_m2 > 0 else np.nan,
    }


def all_periods(arrays: Iterable[xr.DataArray]) -> tuple[np.ndarray, np.ndarray]:
    """Concatenated period starts and ends of several inputs."""
    arrays = list(arrays)
    return (
        np.concatenate([a["period_start"].values for a in arrays]).astype("datetime64[D]"),
        np.concatenate([a["period_end"].values for a in arrays]).astype("datetime64[D]"),
    )
