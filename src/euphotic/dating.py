"""Dating input files: which days each time step stands for.

Every time step of an input gets a period: its first day (``start``) and the day after its
last (``end``, exclusive), from, in order of preference, the file name (``date_pattern`` in the
config), time bounds, the ACDD ``time_coverage_start``/``time_coverage_end`` attributes, or
time stamps alone (their spacing then decides whether they stand for days, months or N days:
:func:`resolve_stamps`).
"""

from __future__ import annotations

import datetime as dt
import os
import re

import cftime
import numpy as np
import xarray as xr

from euphotic.errors import InputFileError
from euphotic.inputfiles import InputSpec


def to_day(value) -> np.datetime64:
    """A cftime/datetime/date -> numpy datetime64[D] (calendar date as written)."""
    if isinstance(value, np.datetime64):
        return value.astype("datetime64[D]")
    try:
        return np.datetime64(dt.date(value.year, value.month, value.day), "D")
    except ValueError:
        cal = getattr(value, "calendar", "") or "non-standard"
        raise CalendarDateError(
            f"date {value.year:04d}-{value.month:02d}-{value.day:02d} of the {cal!r} calendar has "
            "no day in the real calendar; give dates with `date_pattern` in the config"
        ) from None



class CalendarDateError(ValueError):
    """A model-calendar date (e.g. 30 February of a 360-day year) with no real day."""


def ceil_day(value) -> np.datetime64:
    """Exclusive end day: a time exactly at midnight ends the day before; otherwise next day."""
    day = to_day(value)
    if isinstance(value, np.datetime64):
        return day if value == day.astype(value.dtype) else day + 1
    midnight = (value.hour, value.minute, value.second, getattr(value, "microsecond", 0)) == (
        0,
        0,
        0,
        0,
    )
    return day if midnight else day + 1


def parse_iso(text: str, path: str, key: str):
    t = str(text).strip()
    try:
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}|\d{8}", t):  # extended or basic ISO 8601 date
            return dt.date.fromisoformat(t), True
        t = t.replace("Z", "+00:00")
        value = dt.datetime.fromisoformat(t)
        if value.tzinfo is not None:
            value = value.astimezone(dt.UTC).replace(tzinfo=None)
        return value, False
    except ValueError:
        raise InputFileError(
            path, f"global attribute {key}={text!r} is not an ISO 8601 date"
        ) from None


def month_end(day: np.datetime64) -> np.datetime64:
    m = day.astype("datetime64[M]")
    return (m + 1).astype("datetime64[D]")


def period_length(period, start: np.datetime64, path: str) -> np.datetime64:
    if period in (None, "day", "daily", 1, "1"):
        return start + 1
    if period in ("month", "monthly"):
        return month_end(start)
    try:
        n = int(str(period).removesuffix("-day").removesuffix("D").removesuffix("d"))
    except ValueError:
        raise InputFileError(
            path, f"period {period!r} is not 'day', 'month' or a number of days"
        ) from None
    return start + n


def dates_from_name(spec: InputSpec, path: str):
    m = re.search(spec.date_pattern, os.path.basename(path))
    if not m or "start" not in m.groupdict():
        raise InputFileError(path, f"file name does not match date_pattern {spec.date_pattern!r}")
    try:
        start = np.datetime64(dt.datetime.strptime(m.group("start"), spec.date_format).date(), "D")
        if m.groupdict().get("end"):
            end = (
                np.datetime64(dt.datetime.strptime(m.group("end"), spec.date_format).date(), "D")
                + 1
            )
        else:
            end = period_length(spec.period, start, path)
    except ValueError as exc:
        raise InputFileError(
            path, f"date in file name does not fit date_format {spec.date_format!r}: {exc}"
        ) from None
    return np.array([start]), np.array([end])


def dates_from_acdd(ds: xr.Dataset, path: str):
    a, b = ds.attrs.get("time_coverage_start"), ds.attrs.get("time_coverage_end")
    if a is None or b is None:
        return None
    start, _ = parse_iso(a, path, "time_coverage_start")
    end, date_only = parse_iso(b, path, "time_coverage_end")
    s = to_day(start)
    e = to_day(end) + 1 if date_only else ceil_day(end)
    if e <= s:
        raise InputFileError(
            path, f"time_coverage_end {b!r} is not after time_coverage_start {a!r}"
        )
    return np.array([s]), np.array([e])


def decode_time(var: xr.Variable, path: str, name: str):
    units_ = var.attrs.get("units")
    if not units_ or "since" not in str(units_):
        raise InputFileError(path, f"time variable {name!r} has no 'UNITS since DATE' units")
    cal = var.attrs.get("calendar", "standard")
    try:
        return cftime.num2date(
            np.asarray(var.values), units_, calendar=cal, only_use_cftime_datetimes=True
        )
    except Exception as exc:
        raise InputFileError(path, f"cannot decode time variable {name!r}: {exc}") from None



def file_dates(spec: InputSpec, ds: xr.Dataset, time_d: str | None, n_time: int, path: str):
    """(start, end, stamps) of a file's time steps: from the file name (``date_pattern``),
    time bounds, ACDD ``time_coverage_*`` attributes, or time stamps (resolved later)."""
    start = end = stamps = None
    if spec.date_pattern:
        start, end = dates_from_name(spec, path)
        if time_d is not None and n_time != 1:
            raise InputFileError(
                path,
                "date_pattern dates one period per file, but the file has "
                f"{n_time} time steps",
            )
    elif time_d is not None:
        tvar = ds[time_d].variable
        bname = ds[time_d].attrs.get("bounds")
        if bname and bname in ds.variables:
            b = decode_time(
                xr.Variable(ds[bname].dims, ds[bname].values, {**tvar.attrs, **ds[bname].attrs}),
                path,
                bname,
            )
            b = np.asarray(b).reshape(-1, 2)
            start = np.array([to_day(x) for x in b[:, 0]])
            end = np.array([ceil_day(x) for x in b[:, 1]])
            end = np.maximum(end, start + 1)
        elif n_time == 1 and (acdd := dates_from_acdd(ds, path)) is not None:
            start, end = acdd
        else:
            stamps = np.atleast_1d(decode_time(tvar, path, time_d))
    else:
        acdd = dates_from_acdd(ds, path)
        if acdd is None:
            scalar = [
                c
                for c in ds.coords
                if ds[c].ndim == 0 and "since" in str(ds[c].attrs.get("units", ""))
            ]
            if scalar:
                stamps = np.atleast_1d(decode_time(ds[scalar[0]].variable, path, scalar[0]))
            else:
                raise InputFileError(
                    path,
                    "no time information: no time coordinate, no time_coverage_start/end "
                    "attributes, and no date_pattern in the config",
                )
        else:
            start, end = acdd
    return start, end, stamps


def resolve_stamps(pieces: list, spec: InputSpec) -> None:
    """Give periods to time stamps that came without bounds (spacing decides the length):
    ``pieces`` have ``stamps`` (or None), ``start``, ``end`` and ``path``."""
    todo = [p for p in pieces if p.stamps is not None]
    if not todo:
        return
    all_days = np.unique(np.concatenate([[to_day(s) for s in p.stamps] for p in todo]))
    if spec.period is not None:
        kind = spec.period
    elif len(all_days) < 2:
        kind = "day"
    else:
        step = float(np.median(np.diff(all_days).astype(np.float64)))
        kind = "day" if step <= 1.5 else ("month" if 27.5 <= step <= 31.5 else int(round(step)))
    for p in todo:
        days = np.array([to_day(s) for s in p.stamps])
        if kind in ("month", "monthly"):
            p.start = days.astype("datetime64[M]").astype("datetime64[D]")
        else:
            p.start = days
        p.end = np.array([period_length(kind, s, p.path) for s in p.start])

