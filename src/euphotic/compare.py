"""Comparisons on a run's results: annual totals, seasonal cycles, climatologies, anomalies,
differences between years or periods, and trends.

Pure functions on the Datasets of :mod:`euphotic.results` (``open_totals``: dims
``(region, month, model)``; ``open_maps``: dims ``(model, time, lat, lon)`` with a ``month``
coordinate along ``time``) or a DataArray taken from them. Nothing here reads a file, and
nothing computes where the input is dask-backed: the results are lazy too. Every output
variable carries a ``units`` attribute; the ``model`` dimension is kept throughout, so models
run side by side are compared side by side.

Calendar months come from the ``month`` coordinate (first day of the month). Outputs by
calendar month have a dimension ``calendar_month`` (1-12, always all twelve; a calendar month
without data is NaN, never 0).

Coverage rule: one rule, recorded by the run (``[run] min_coverage`` and ``low_coverage``, in
the attrs of :func:`euphotic.results.open_totals` / ``open_maps``), used by every function here
unless its ``min_coverage`` / ``low_coverage`` keywords say otherwise. A value (a region-month
total, or a cell's monthly value) is *below the rule* where its ``coverage`` is below
``min_coverage``. With ``low_coverage="drop"`` such values are NaN before anything is computed
(a month dropped from a year makes that year incomplete); with ``"flag"`` they are kept and
counted. An explicit ``min_coverage`` without ``low_coverage`` drops (as before the run recorded
a rule). The output's attrs record the rule used (``min_coverage``, ``low_coverage``) and the
number of values below it (``n_dropped_low_coverage`` or ``n_flagged_low_coverage``). For
dask-backed input that count is not known without computing, so it is returned instead as a
lazy 0-d data variable of the same name. Input without a rule (no attrs, no keywords) is used
as it is.

Arithmetic is in float64 (the maps' float32 values are converted chunk by chunk), so outputs
are float64.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from typing import Any, Literal

import numpy as np
import xarray as xr

from euphotic import monthstats, trendstats
from euphotic.constants import G_PER_TG
from euphotic.errors import EuphoticError

_log = logging.getLogger("euphotic")

#: Teragrams per petagram (SI prefixes: 1 Pg = 1e15 g = 1000 Tg).
TG_PER_PG = 1000.0
#: Months in a calendar year.
MONTHS_PER_YEAR = 12
#: Fewest years of record for a trend to be taken at face value. Common practice (a rule of
#: thumb, from memory, not from one citable source): trends of ocean productivity over fewer than
#: about a decade are dominated by interannual variability (e.g. ENSO), so shorter records are
#: flagged ``short_record`` and warned about.
MIN_TREND_YEARS = 10

#: Variables of the totals table that are amounts per month (summed to a year, not averaged).
_EXTENSIVE = ("total", "total_filled")
#: Default variable per kind of input.
_DEFAULT_VARIABLE = {"maps": "npp", "totals": "total"}

Years = int | tuple[int, int] | Sequence[int] | None
#: What the coverage rule does with values below it.
LowCoverage = Literal["flag", "drop"]
#: How a region-month total is formed (see :func:`filled_totals`).
TotalsKind = Literal["observed", "scaled", "climatology"]
#: Flag of a value below the coverage rule that was kept (rule "flag").
FLAG_LOW_COVERAGE = "low_coverage"
#: Milligrams per gram.
MG_PER_G = 1000.0


class CompareInputError(EuphoticError):
    """A comparison got data or options it cannot use: a missing variable or dimension, a
    period with no months in the record, mismatched grids or regions, an option out of range.
    The message names the argument (or variable) and the problem in one line."""


# --------------------------------------------------------------------------------------------
# helpers


def _time_dim(da: xr.DataArray | xr.Dataset) -> str:
    if "time" in da.dims:
        return "time"
    if "month" in da.dims:
        return "month"
    raise CompareInputError(
        f"input: no 'time' or 'month' dimension (has {sorted(map(str, da.dims))})"
    )


def _kind(x: xr.DataArray | xr.Dataset) -> str:
    return "maps" if "time" in x.dims else "totals"


def _is_lazy(da: xr.DataArray) -> bool:
    return da.chunks is not None


def _check_fraction(name: str, value: float | None) -> None:
    if value is not None and not (0.0 <= float(value) <= 1.0):
        raise CompareInputError(f"{name}: must be between 0 and 1, got {value!r}")


def coverage_rule(
    x: xr.Dataset | xr.DataArray,
    *,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> tuple[float | None, LowCoverage]:
    """The coverage rule to apply to ``x``: ``(min_coverage, low_coverage)``.

    Keywords win over the rule ``x`` records in its attrs (``min_coverage``, ``low_coverage``:
    the run's ``[run]`` keys, see :func:`euphotic.results.open_totals`). An explicit
    ``min_coverage`` without ``low_coverage`` means ``"drop"``. ``(None, "flag")``: no rule.
    """
    _check_fraction("min_coverage", min_coverage)
    if low_coverage not in (None, "flag", "drop"):
        raise CompareInputError(f"low_coverage: must be 'flag' or 'drop', got {low_coverage!r}")
    attrs = x.attrs if isinstance(x, xr.Dataset) else {}
    if min_coverage is not None:
        return float(min_coverage), low_coverage or "drop"
    recorded = attrs.get("min_coverage")
    if recorded is None:
        if low_coverage == "drop":
            raise CompareInputError(
                "low_coverage: 'drop' needs min_coverage (the input records no coverage rule)")
        return None, low_coverage or "flag"
    _check_fraction("min_coverage (recorded)", recorded)
    how = low_coverage or attrs.get("low_coverage") or "flag"
    if how not in ("flag", "drop"):
        raise CompareInputError(f"low_coverage (recorded): must be 'flag' or 'drop', got {how!r}")
    return float(recorded), how


def _below_rule(x: xr.Dataset | xr.DataArray, attrs: dict[str, Any], name: str) -> xr.DataArray | None:
    """Where ``x[name]`` has a value and its coverage is below the rule in ``attrs`` (None: no
    rule applies)."""
    if attrs.get("min_coverage") is None or not isinstance(x, xr.Dataset) or "coverage" not in x:
        return None
    return x[name].notnull() & (x["coverage"] < float(attrs["min_coverage"]))


def _select(
    x: xr.Dataset | xr.DataArray,
    variable: str | None,
    min_coverage: float | None,
    low_coverage: LowCoverage | None = None,
    *,
    float64: bool = True,
) -> tuple[xr.DataArray, dict[str, Any], dict[str, xr.DataArray]]:
    """The variable to work on (masked by the coverage rule), the attrs to carry, and any lazy
    count. ``float64=False`` leaves a numeric variable in its own dtype (for the compiled
    kernels, which accumulate in float64)."""
    as_float = _as_float64 if float64 else _numeric
    _check_fraction("min_coverage", min_coverage)
    tdim = _time_dim(x)
    if "month" not in x.coords or x["month"].dims != (tdim,):
        raise CompareInputError(f"input: no 'month' coordinate along {tdim!r} (first day of each month)")
    attrs: dict[str, Any] = dict(x.attrs) if isinstance(x, xr.Dataset) else {}
    if isinstance(x, xr.DataArray):
        if variable is not None and variable != x.name:
            raise CompareInputError(
                f"variable {variable!r}: a DataArray named {x.name!r} was given; pass the Dataset"
            )
        if min_coverage is not None or low_coverage == "drop":
            what = "min_coverage" if min_coverage is not None else "low_coverage"
            raise CompareInputError(
                f"{what}: needs the 'coverage' variable; pass the Dataset, not the DataArray {x.name!r}"
            )
        return as_float(x), attrs, {}
    name = variable or _DEFAULT_VARIABLE[_kind(x)]
    if name not in x.data_vars:
        raise CompareInputError(
            f"variable {name!r}: not in the dataset (has {sorted(map(str, x.data_vars))})"
        )
    da = as_float(x[name])
    extra: dict[str, xr.DataArray] = {}
    threshold, how = coverage_rule(x, min_coverage=min_coverage, low_coverage=low_coverage)
    for key in ("min_coverage", "low_coverage", "n_dropped_low_coverage", "n_flagged_low_coverage"):
        attrs.pop(key, None)
    if threshold is not None:
        if "coverage" not in x.data_vars:
            raise CompareInputError("min_coverage: the dataset has no 'coverage' variable")
        low = x["coverage"] < threshold  # NaN coverage compares False: not below the rule
        below = (da.notnull() & low).sum()
        if how == "drop":
            da = da.where(~low)
            da.attrs = dict(x[name].attrs)
        attrs["min_coverage"] = threshold
        attrs["low_coverage"] = how
        count = "n_dropped_low_coverage" if how == "drop" else "n_flagged_low_coverage"
        if _is_lazy(below):
            below.attrs = {"units": "1", "long_name": "values dropped for coverage below min_coverage"
                           if how == "drop" else "values kept and flagged for coverage below min_coverage"}
            extra[count] = below
        else:
            attrs[count] = int(below)
    return da, attrs, extra


def _numeric(da: xr.DataArray) -> xr.DataArray:
    if not np.issubdtype(da.dtype, np.number):
        raise CompareInputError(f"variable {da.name!r}: not numeric (dtype {da.dtype})")
    return da


def _as_float64(da: xr.DataArray) -> xr.DataArray:
    """Float64 for the arithmetic (float32 maps lose digits in differences of means), lazily."""
    if _numeric(da).dtype == np.float64:
        return da
    out = da.astype(np.float64)
    out.attrs = dict(da.attrs)
    return out


def _units(da: xr.DataArray) -> str:
    return str(da.attrs.get("units", "1"))


def _per_year(units: str) -> str:
    """Units of a rate of change per year: ``Tg yr-1`` -> ``Tg yr-2``, ``mg m-2 d-1`` ->
    ``mg m-2 d-1 yr-1``."""
    if units.endswith(" yr-1"):
        return units[: -len(" yr-1")] + " yr-2"
    return f"{units} yr-1"


def _years_of(da: xr.DataArray) -> xr.DataArray:
    return da["month"].dt.year.rename("year")


def _calendar_of(da: xr.DataArray) -> xr.DataArray:
    return da["month"].dt.month.rename("calendar_month")


def _year_set(years: Years, what: str) -> tuple[int, int] | list[int] | None:
    if years is None:
        return None
    if isinstance(years, (int, np.integer)):
        return (int(years), int(years))
    if isinstance(years, tuple) and len(years) == 2:
        first, last = int(years[0]), int(years[1])
        if first > last:
            raise CompareInputError(f"{what}: first year {first} is after last year {last}")
        return (first, last)
    return sorted(int(y) for y in years)


def _pick_years(da: xr.DataArray, years: Years, what: str) -> xr.DataArray:
    """``da`` restricted to the months of the chosen years (an error if none are left)."""
    chosen = _year_set(years, what)
    if chosen is None:
        return da
    yr = _years_of(da).values
    keep = (yr >= chosen[0]) & (yr <= chosen[1]) if isinstance(chosen, tuple) else np.isin(yr, chosen)
    if not keep.any():
        span = f"{yr.min()}-{yr.max()}" if yr.size else "empty"
        raise CompareInputError(f"{what}: no month of the record ({span}) falls in {years!r}")
    return da.isel({_time_dim(da): np.flatnonzero(keep)})


def _by_calendar_month(grouped: xr.DataArray) -> xr.DataArray:
    return grouped.reindex(calendar_month=np.arange(1, MONTHS_PER_YEAR + 1))


def _out(data: dict[str, xr.DataArray], attrs: dict[str, Any], extra: dict[str, xr.DataArray]):
    ds = xr.Dataset({**data, **extra})
    ds.attrs = attrs
    return ds


def _period_label(years: Years) -> str:
    chosen = _year_set(years, "period")
    if isinstance(chosen, tuple):
        return str(chosen[0]) if chosen[0] == chosen[1] else f"{chosen[0]}-{chosen[1]}"
    return "all" if chosen is None else ",".join(map(str, chosen))


# --------------------------------------------------------------------------------------------
# compiled path for dask-backed maps (climatology and anomalies in one pass over each block)

_CALENDAR_MONTHS = np.arange(1, MONTHS_PER_YEAR + 1)


def _compiled_path(da: xr.DataArray) -> bool:
    """Dask-backed maps of floats go through the block kernels of :mod:`euphotic.monthstats`
    (same values as the groupby path to float64 rounding; no float64 copy of the stack)."""
    return _is_lazy(da) and "time" in da.dims and da.dtype in (np.float32, np.float64)


def _calendar_means(da: xr.DataArray) -> tuple[xr.DataArray, xr.DataArray]:
    """Mean and count by calendar month of lazy maps, a time-contiguous block at a time."""
    series = _time_contiguous(_drop_time_coords(da), "time")
    group = _calendar_of(da).values.astype(np.int64) - 1
    mean, n = xr.apply_ufunc(
        monthstats.group_mean, series, kwargs={"group": group, "n_groups": MONTHS_PER_YEAR},
        input_core_dims=[["time"]], output_core_dims=[["calendar_month"], ["calendar_month"]],
        dask="parallelized", output_dtypes=[np.float64, np.int64],
        dask_gufunc_kwargs={"output_sizes": {"calendar_month": MONTHS_PER_YEAR}},
    )
    order = ["calendar_month" if d == "time" else d for d in da.dims]
    mean, n = (v.assign_coords(calendar_month=_CALENDAR_MONTHS).transpose(*order) for v in (mean, n))
    return mean.rename(da.name), n.rename(da.name)


def _departures(da: xr.DataArray, c: xr.DataArray) -> xr.DataArray:
    """``da`` minus ``c`` of its calendar month (float64), a time-contiguous block at a time;
    indexes must match exactly (a ValueError otherwise)."""
    tcoords = [k for k, v in da.coords.items() if k not in da.dims and "time" in v.dims]
    series = _time_contiguous(da.drop_vars(tcoords), "time")  # (chunk() would chunk them too)
    group = _calendar_of(da).values.astype(np.int64) - 1
    c = c.chunk({"calendar_month": -1}) if _is_lazy(c) else c
    anom = xr.apply_ufunc(
        monthstats.departures, series, c, kwargs={"group": group},
        input_core_dims=[["time"], ["calendar_month"]], output_core_dims=[["time"]],
        dask="parallelized", output_dtypes=[np.float64], join="exact",
    )
    anom = anom.assign_coords({k: da.coords[k] for k in tcoords})
    return anom.transpose(*[d for d in da.dims if d in anom.dims], ...)


# --------------------------------------------------------------------------------------------
# annual totals


def annual_totals(
    totals: xr.Dataset | xr.DataArray,
    *,
    min_months: int = MONTHS_PER_YEAR,
    keep_partial: bool = False,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> xr.Dataset:
    """Carbon fixed per region, calendar year and model.

    Parameters
    ----------
    totals : xarray.Dataset or DataArray
        The totals table (:func:`euphotic.results.open_totals`), or its ``total`` /
        ``total_filled`` variable; Tg of carbon per month.
    min_months : int, keyword-only
        Months with a value a year needs to count as complete (default 12).
    keep_partial : bool, keyword-only
        Keep the sum over the months present for incomplete years (still flagged). By default
        an incomplete year's total is NaN, since a sum over fewer months is not a yearly total.
    variable : str, keyword-only
        ``"total"`` (default: observed cells) or ``"total_filled"``.
    min_coverage, low_coverage : keyword-only
        The coverage rule (module docstring; default: the rule the input records). With
        ``"drop"``, months below it count as missing, so their year is incomplete; with
        ``"flag"`` they are summed and the year is flagged ``low_coverage``.

    Returns
    -------
    xarray.Dataset
        Dims ``(region, year, model)``: ``total`` (Tg yr-1 of carbon), ``total_pg`` (Pg yr-1,
        the same divided by 1000), ``n_months`` (months with a value, 1), ``n_low_coverage``
        (months below the coverage rule, dropped or kept, 1) and ``flag`` (str, codes joined
        by ``;``: ``""``, ``"incomplete_year"`` when ``n_months < min_months``, ``"no_data"``
        when 0, ``"low_coverage"`` when the rule is "flag" and a summed month is below it).

    Notes
    -----
    total(year) = sum over the year's months with a value of total(month); 1 Pg = 1000 Tg.
    """
    if not 1 <= int(min_months) <= MONTHS_PER_YEAR:
        raise CompareInputError(f"min_months: must be between 1 and 12, got {min_months!r}")
    da, attrs, extra = _select(totals, variable, min_coverage, low_coverage)
    if _time_dim(da) != "month":
        raise CompareInputError("totals: annual totals need the totals table (dim 'month')")
    if _units(da) != "Tg":
        raise CompareInputError(
            f"variable {da.name!r}: annual totals sum amounts in 'Tg' per month, got units {_units(da)!r}"
        )
    grouped = da.groupby(_years_of(da))
    total = grouped.sum(skipna=True, min_count=1)
    n = da.notnull().groupby(_years_of(da)).sum().astype(np.int64)
    incomplete = n < int(min_months)
    if not keep_partial:
        total = total.where(~incomplete)
    below = _below_rule(totals, attrs, str(da.name))
    n_low = (below.groupby(_years_of(da)).sum() if below is not None
             else xr.zeros_like(n)).astype(np.int64)
    kept_low = (n_low > 0) & (attrs.get("low_coverage") == "flag") & (n > 0)
    flag = xr.where(n == 0, "no_data", xr.where(incomplete, "incomplete_year", ""))
    flag = xr.where(kept_low, xr.where(flag == "", FLAG_LOW_COVERAGE, flag + ";" + FLAG_LOW_COVERAGE), flag)
    total.attrs = {"units": "Tg yr-1", "long_name": "carbon fixed in the year (net primary production)"}
    pg = total / TG_PER_PG
    pg.attrs = {"units": "Pg yr-1", "long_name": "carbon fixed in the year (net primary production)"}
    n.attrs = {"units": "1", "long_name": "months with a value"}
    n_low.attrs = {"units": "1", "long_name": "months with coverage below min_coverage (dropped "
                   "with the rule 'drop', kept and flagged with 'flag')"}
    flag.attrs = {"long_name": "quality flag, codes separated by ';'",
                  "flag_meanings": "'' incomplete_year no_data low_coverage"}
    attrs.update(min_months=int(min_months), keep_partial=int(bool(keep_partial)), source_variable=str(da.name))
    order = [d for d in ("region", "year", "model") if d in total.dims]
    data = {k: v.transpose(*order, ...) for k, v in
            {"total": total, "total_pg": pg, "n_months": n, "n_low_coverage": n_low,
             "flag": flag}.items()}
    return _out(data, attrs, extra)


# --------------------------------------------------------------------------------------------
# seasonal cycle and climatology


def _count_by_calendar_month(flags: xr.DataArray) -> xr.DataArray:
    """How many True values each calendar month holds (int64, 0 where none); on lazy maps by
    the compiled calendar-month kernel (a mean of 0/1 times the count of months)."""
    if _is_lazy(flags) and "time" in flags.dims:
        share, months = _calendar_means(flags.astype(np.float32))
        return (share * months).where(months > 0, 0).round().astype(np.int64)
    return _by_calendar_month(flags.groupby(_calendar_of(flags)).sum()).fillna(0).astype(np.int64)


def seasonal_cycle(
    x: xr.Dataset | xr.DataArray,
    *,
    years: Years = None,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> xr.Dataset:
    """Mean, minimum, maximum, range and count by calendar month over chosen years.

    Parameters
    ----------
    x : xarray.Dataset or DataArray
        Totals (default variable ``total``, Tg per month) or maps (default ``npp``,
        mg m-2 d-1), or one variable of them.
    years : int, (first, last) or list of int, keyword-only
        Years to use (a span includes both ends); all by default.
    variable, min_coverage, low_coverage : keyword-only
        The variable to use, and the coverage rule (see the module docstring; default: the
        rule the input records, e.g. the run's).

    Returns
    -------
    xarray.Dataset
        The time dimension replaced by ``calendar_month`` (1-12): ``mean``, ``min``, ``max``,
        ``range`` (max - min), all in the variable's units, ``count`` (years with a value,
        1) and, where a coverage rule applies, ``n_low_coverage`` (years below it, 1). A
        calendar month with no value is NaN (count 0).
    """
    da, attrs, extra = _select(x, variable, min_coverage, low_coverage)
    da = _pick_years(da, years, "years")
    g = da.groupby(_calendar_of(da))
    units = _units(da)
    out = {
        "mean": _by_calendar_month(g.mean(skipna=True)),
        "min": _by_calendar_month(g.min(skipna=True)),
        "max": _by_calendar_month(g.max(skipna=True)),
    }
    out["range"] = out["max"] - out["min"]
    for k, v in out.items():
        v.attrs = {"units": units, "long_name": f"{k} of {da.name} by calendar month"}
    count = _count_by_calendar_month(da.notnull())
    count.attrs = {"units": "1", "long_name": "years with a value"}
    out["count"] = count
    below = _below_rule(x, attrs, str(da.name))
    if below is not None:
        n_low = _count_by_calendar_month(_pick_years(below, years, "years"))
        n_low.attrs = {"units": "1", "long_name": "years below the coverage rule (dropped with "
                       "'drop', kept with 'flag')"}
        out["n_low_coverage"] = n_low
    out = {k: _drop_time_coords(v) for k, v in out.items()}
    attrs.update(source_variable=str(da.name), years=_period_label(years))
    return _out(out, attrs, extra)


def _drop_time_coords(da: xr.DataArray) -> xr.DataArray:
    return da.drop_vars([c for c in ("days_in_month", "month", "time") if c in da.coords and c not in da.dims])


def climatology(
    x: xr.Dataset | xr.DataArray,
    *,
    baseline: tuple[int, int] | None = None,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> xr.Dataset:
    """Mean by calendar month over a baseline period, per cell (maps) or per region (totals).

    Parameters
    ----------
    x : xarray.Dataset or DataArray
        Totals (default variable ``total``, Tg per month) or maps (default ``npp``,
        mg m-2 d-1).
    baseline : (first_year, last_year), keyword-only
        Baseline years, both included; by default the whole record.
    variable, min_coverage, low_coverage : keyword-only
        As in :func:`seasonal_cycle`.

    Returns
    -------
    xarray.Dataset
        ``climatology`` (the variable's units), ``n_years`` (years with a value, 1) and,
        where a coverage rule applies, ``n_low_coverage`` (baseline years below it, 1), with
        dimension ``calendar_month`` (1-12). A calendar month without any value in the
        baseline is NaN, not 0. Attrs ``baseline_first``, ``baseline_last``.
    """
    da, attrs, extra = _select(x, variable, min_coverage, low_coverage, float64=False)
    if baseline is None:
        yr = _years_of(da).values
        baseline = (int(yr.min()), int(yr.max()))
    elif not (isinstance(baseline, tuple) and len(baseline) == 2):
        raise CompareInputError(f"baseline: expected (first_year, last_year), got {baseline!r}")
    da = _pick_years(da, baseline, "baseline")
    if _compiled_path(da):
        clim, n = _calendar_means(da)
    else:
        da = _as_float64(da)
        clim = _by_calendar_month(da.groupby(_calendar_of(da)).mean(skipna=True))
        n = _by_calendar_month(da.notnull().groupby(_calendar_of(da)).sum()).fillna(0).astype(np.int64)
    clim.attrs = {"units": _units(da), "long_name": f"mean of {da.name} by calendar month over the baseline"}
    n.attrs = {"units": "1", "long_name": "baseline years with a value"}
    attrs.update(
        source_variable=str(da.name), baseline_first=int(baseline[0]), baseline_last=int(baseline[1])
    )
    data = {"climatology": _drop_time_coords(clim), "n_years": _drop_time_coords(n)}
    below = _below_rule(x, attrs, str(da.name))
    if below is not None:
        n_low = _count_by_calendar_month(_pick_years(below, baseline, "baseline"))
        n_low.attrs = {"units": "1", "long_name": "baseline years below the coverage rule "
                       "(dropped with 'drop', kept with 'flag')"}
        data["n_low_coverage"] = _drop_time_coords(n_low)
    return _out(data, attrs, extra)


def anomalies(
    x: xr.Dataset | xr.DataArray,
    clim: xr.Dataset | xr.DataArray,
    *,
    relative: bool = False,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> xr.Dataset:
    """Departures of each month from its calendar month's climatology.

    Parameters
    ----------
    x : xarray.Dataset or DataArray
        Totals or maps, as in :func:`climatology` (the same variable).
    clim : xarray.Dataset or DataArray
        The output of :func:`climatology` (or its ``climatology`` variable), on the same
        regions / grid and models as ``x``.
    relative : bool, keyword-only
        Also give the anomaly in percent of the climatology (NaN where the climatology is 0
        or NaN).
    variable, min_coverage, low_coverage : keyword-only
        As in :func:`seasonal_cycle`.

    Returns
    -------
    xarray.Dataset
        On ``x``'s dims: ``anomaly`` (the variable's units), with ``relative``
        ``anomaly_percent`` (%), and where a coverage rule applies ``below_min_coverage``
        (bool: the value's coverage is below it). NaN where either side has no value.

    Notes
    -----
    anomaly = x - clim[calendar month]; anomaly_percent = 100 * anomaly / clim[calendar month].
    """
    da, attrs, extra = _select(x, variable, min_coverage, low_coverage, float64=False)
    c = clim["climatology"] if isinstance(clim, xr.Dataset) else clim
    if "calendar_month" not in c.dims:
        raise CompareInputError("clim: no 'calendar_month' dimension (pass the output of climatology())")
    if isinstance(clim, xr.Dataset) and clim.attrs.get("source_variable") not in (None, da.name):
        raise CompareInputError(
            f"clim: a climatology of {clim.attrs['source_variable']!r}, but the anomalies are of {da.name!r}"
        )
    if _units(c) != _units(da):
        raise CompareInputError(f"clim: units {_units(c)!r} differ from {da.name!r} units {_units(da)!r}")
    compiled = _compiled_path(da) and np.array_equal(c["calendar_month"].values, _CALENDAR_MONTHS)
    if not compiled:
        da = _as_float64(da)
    per_month = c.sel(calendar_month=_calendar_of(da)).drop_vars("calendar_month")
    try:
        with xr.set_options(arithmetic_join="exact"):
            anom = _departures(da, c) if compiled else da - per_month
            pct = 100.0 * anom / per_month.where(per_month != 0) if relative else None
    except ValueError as exc:
        raise CompareInputError(
            "clim: its regions/grid or models differ from the data's (compute the climatology from the same results)"
        ) from exc
    anom.attrs = {"units": _units(da), "long_name": f"anomaly of {da.name} from the calendar-month climatology"}
    data = {"anomaly": anom}
    below = _below_rule(x, attrs, str(da.name))
    if below is not None:
        below.attrs = {"long_name": "coverage below min_coverage (dropped with 'drop', kept with 'flag')"}
        data["below_min_coverage"] = below
    if pct is not None:
        pct.attrs = {"units": "%", "long_name": f"anomaly of {da.name} in percent of the climatology"}
        data["anomaly_percent"] = pct
    for key in ("baseline_first", "baseline_last"):
        if key in getattr(clim, "attrs", {}):
            attrs[key] = clim.attrs[key]
    attrs["source_variable"] = str(da.name)
    return _out(data, attrs, extra)


# --------------------------------------------------------------------------------------------
# differences


def difference(
    x: xr.Dataset | xr.DataArray,
    a: int | tuple[int, int],
    b: int | tuple[int, int],
    *,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> xr.Dataset:
    """Period ``b`` against period ``a`` (e.g. a year against a baseline), per cell or region.

    Parameters
    ----------
    x : xarray.Dataset or DataArray
        Totals (default variable ``total``, Tg per month) or maps (default ``npp``,
        mg m-2 d-1).
    a, b : int or (first_year, last_year)
        The reference period ``a`` and the compared period ``b`` (a year, or a span with both
        ends included).
    variable, min_coverage, low_coverage : keyword-only
        As in :func:`seasonal_cycle`.

    Returns
    -------
    xarray.Dataset
        ``mean_a``, ``mean_b`` (mean monthly value of each period, the variable's units),
        ``difference`` (b - a, same units), ``percent`` (100 (b - a) / a, %; NaN where a is 0),
        ``n_months_a``, ``n_months_b`` (months with a value behind each side, 1), and where a
        coverage rule applies ``n_low_coverage_a`` / ``_b`` (months below it on each side,
        dropped or kept, 1). Attrs ``period_a``, ``period_b`` and ``months_in_period_a`` /
        ``_b`` (months each span has).

    Notes
    -----
    Each side is the mean over the months with a value, so a side that misses months is
    weighted towards the seasons it has: compare ``n_months_*`` with ``months_in_period_*``.
    For totals the mean monthly total (Tg) times 12 is the period's mean annual total when no
    month is missing.
    """
    da, attrs, extra = _select(x, variable, min_coverage, low_coverage)
    tdim = _time_dim(da)
    below = _below_rule(x, attrs, str(da.name))
    sides = {}
    for label, period in (("a", a), ("b", b)):
        if isinstance(period, (list, np.ndarray)) or (isinstance(period, tuple) and len(period) != 2):
            raise CompareInputError(f"{label}: expected a year or (first_year, last_year), got {period!r}")
        part = _pick_years(da, period, label)
        chosen = _year_set(period, label)
        mean = _drop_time_coords(part.mean(tdim, skipna=True))
        mean.attrs = {"units": _units(da), "long_name": f"mean monthly {da.name} over {_period_label(period)}"}
        n = _drop_time_coords(part.notnull().sum(tdim)).astype(np.int64)
        n.attrs = {"units": "1", "long_name": f"months with a value in {_period_label(period)}"}
        sides[label] = (mean, n)
        if below is not None:
            n_low = _drop_time_coords(_pick_years(below, period, label).sum(tdim)).astype(np.int64)
            n_low.attrs = {"units": "1", "long_name": f"months below the coverage rule in "
                           f"{_period_label(period)} (dropped with 'drop', kept with 'flag')"}
            extra = {**extra, f"n_low_coverage_{label}": n_low}
        attrs[f"period_{label}"] = _period_label(period)
        attrs[f"months_in_period_{label}"] = (chosen[1] - chosen[0] + 1) * MONTHS_PER_YEAR
    (ma, na), (mb, nb) = sides["a"], sides["b"]
    diff = mb - ma
    diff.attrs = {"units": _units(da), "long_name": f"{da.name}: period b minus period a"}
    pct = 100.0 * diff / ma.where(ma != 0)
    pct.attrs = {"units": "%", "long_name": f"{da.name}: (b - a) in percent of a"}
    attrs["source_variable"] = str(da.name)
    data = {"mean_a": ma, "mean_b": mb, "difference": diff, "percent": pct, "n_months_a": na, "n_months_b": nb}
    return _out(data, attrs, extra)


# --------------------------------------------------------------------------------------------
# gap-filled totals


def _region_weights(masks: Any, maps: xr.Dataset) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Region names, the (region, lat, lon) masks and the (lat, lon) cell areas (m2) on the
    maps' grid, from :func:`euphotic.results.open_region_masks` or ``open_regions``."""
    lat, lon = maps["lat"].values, maps["lon"].values
    shape = (len(lat), len(lon))
    if isinstance(masks, xr.Dataset):
        if "mask" not in masks or "cell_area" not in masks:
            raise CompareInputError("masks: a Dataset needs 'mask' and 'cell_area' "
                                    "(euphotic.results.open_regions)")
        names = [str(n) for n in masks["region"].values]
        stack = np.asarray(masks["mask"].values, bool)
        area = np.asarray(masks["cell_area"].values, np.float64)
        mlat, mlon = masks["lat"].values, masks["lon"].values
    else:
        rows = getattr(masks, "cell_area_m2", None)
        if rows is None:
            raise CompareInputError("masks: no cell areas (pass euphotic.results."
                                    "open_region_masks(folder) or open_regions(folder))")
        names = [str(n) for n in masks]
        stack = (np.stack([np.asarray(masks[n], bool) for n in names]) if names
                 else np.zeros((0, *shape), bool))
        area = np.asarray(rows, np.float64)
        area = area[:, None] if area.ndim == 1 else area
        mlat, mlon = getattr(masks, "lat", lat), getattr(masks, "lon", lon)
    if not names:
        raise CompareInputError("masks: no regions (the run defined none)")
    if stack.shape[1:] != shape or len(mlat) != len(lat) or len(mlon) != len(lon) \
            or not (np.allclose(mlat, lat) and np.allclose(mlon, lon)):
        raise CompareInputError("masks: their grid differs from the maps' grid (take both from "
                                "the same run)")
    return names, stack, np.broadcast_to(area, shape)


def filled_totals(
    maps: xr.Dataset,
    masks: Any,
    *,
    how: TotalsKind = "climatology",
    baseline: tuple[int, int] | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
) -> xr.Dataset:
    """Region-month totals formed one of the three usual ways, from the maps (lazy).

    Parameters
    ----------
    maps : xarray.Dataset
        :func:`euphotic.results.open_maps`: ``npp`` (mg m-2 d-1 of carbon, the month's mean
        daily rate) and ``coverage`` (1; NaN off the ocean, so ocean cells are those with a
        coverage), dims ``(model, time, lat, lon)``.
    masks : RegionMasks or xarray.Dataset
        The run's regions: :func:`euphotic.results.open_region_masks` (masks and per-row cell
        areas, m2) or :func:`euphotic.results.open_regions`, on the maps' grid.
    how : "observed", "scaled" or "climatology", keyword-only
        ``observed``: the sum over the observed cells. ``scaled``: the observed area-mean rate
        times the region's whole ocean area. ``climatology`` (default): observed cells as
        observed, every other ocean cell (unobserved, or dropped by the coverage rule) filled
        with its own calendar-month climatology over ``baseline``; a cell whose climatology
        has no value for that calendar month stays unfilled.
    baseline : (first_year, last_year), keyword-only
        Years of the climatology (``how="climatology"``), both included; default: every year.
    min_coverage, low_coverage : keyword-only
        The coverage rule (module docstring; default: the maps' run's). With ``"drop"`` a
        cell's monthly value below it is not observed here: it is left out of ``observed``
        and ``scaled``, filled under ``climatology``, and left out of the climatology itself.

    Returns
    -------
    xarray.Dataset
        Dims ``(region, month, model)`` (``month``: first day of the month): ``total`` (Tg of
        carbon fixed in the month), ``coverage`` (area-weighted fraction of the month's days
        with a valid estimate over the region's ocean, 1, as in the run's totals: the
        region-month rule of the other functions applies to it), ``ocean_area`` (km2),
        ``observed_area_fraction``, ``filled_area_fraction`` (area given a value not observed
        there: by the mean under ``scaled``, by the climatology under ``climatology``; 0 under
        ``observed``) and ``unfilled_area_fraction`` (1). ``total`` is NaN where no cell has a
        value, never 0. Attrs ``totals_kind`` and, for ``climatology``, ``baseline_first`` /
        ``baseline_last``; the rule used as ``min_coverage`` / ``low_coverage``.

    Notes
    -----
    With A the cell area (m2), d the days of the month, r the monthly mean rate
    (mg m-2 d-1) and c(m) the cell's climatology of calendar month m (mg m-2 d-1)::

        observed    = d * sum_obs A r                                   / 1e15
        scaled      = d * (sum_obs A r / sum_obs A) * sum_ocean A       / 1e15
        climatology = d * (sum_obs A r + sum_fill A c(m))               / 1e15

    (1e15 mg per Tg: 1e3 mg g-1 times 1e12 g Tg-1), sums over the region's cells. Lazy on
    dask-backed maps: nothing is computed; computing the result reads each map once (the
    climatology and the totals share the reads in one graph).
    """
    if how not in ("observed", "scaled", "climatology"):
        raise CompareInputError(f"how: must be 'observed', 'scaled' or 'climatology', got {how!r}")
    if not isinstance(maps, xr.Dataset) or "time" not in maps.dims:
        raise CompareInputError("maps: pass the maps Dataset (euphotic.results.open_maps), dims "
                                "(model, time, lat, lon)")
    for v in ("npp", "coverage"):
        if v not in maps.data_vars:
            raise CompareInputError(f"maps: no {v!r} variable (has {sorted(map(str, maps.data_vars))})")
    npp, attrs, extra = _select(maps, "npp", min_coverage, low_coverage)
    if _units(npp) != "mg m-2 d-1":
        raise CompareInputError(f"variable 'npp': expected units 'mg m-2 d-1', got {_units(npp)!r}")
    names, stack, area_np = _region_weights(masks, maps)
    # cell area inside each region, 0 outside (m2): an integral is one dot product per field
    weights = xr.DataArray(stack * area_np[None], dims=("region", "lat", "lon"),
                           coords={"region": names})

    def integrate(field: xr.DataArray) -> xr.DataArray:
        """Area integral over each region: (region, model, time)."""
        return xr.dot(field, weights, dim=("lat", "lon"))

    cov = _as_float64(maps["coverage"])
    ocean = cov.notnull()
    observed = npp.notnull() & ocean
    ocean_m2 = integrate(ocean.astype(np.float64))
    obs_m2 = integrate(observed.astype(np.float64))
    obs_int = integrate(npp.where(observed, 0.0))  # mg d-1
    cov_m2 = integrate(cov.fillna(0.0))
    to_tg = maps["days_in_month"] / (MG_PER_G * G_PER_TG)  # d, mg -> Tg
    seen = obs_m2 > 0
    if how == "observed":
        total = (obs_int * to_tg).where(seen)
        filled_m2 = xr.zeros_like(obs_m2)
    elif how == "scaled":
        total = (obs_int / obs_m2.where(seen) * ocean_m2 * to_tg)
        filled_m2 = (ocean_m2 - obs_m2).where(seen, 0.0)
    else:
        clim = climatology(maps, baseline=baseline, variable="npp",
                           min_coverage=attrs.get("min_coverage"),
                           low_coverage=attrs.get("low_coverage"))
        per_month = clim["climatology"].sel(calendar_month=_calendar_of(npp)).drop_vars("calendar_month")
        fillable = ocean & ~observed & per_month.notnull()
        fill_int = integrate(per_month.where(fillable, 0.0))
        filled_m2 = integrate(fillable.astype(np.float64))
        total = ((obs_int + fill_int) * to_tg).where((obs_m2 + filled_m2) > 0)
        attrs.update(baseline_first=clim.attrs["baseline_first"],
                     baseline_last=clim.attrs["baseline_last"])
    has_ocean = ocean_m2 > 0
    frac = {
        "observed_area_fraction": (obs_m2 / ocean_m2).where(has_ocean),
        "filled_area_fraction": (filled_m2 / ocean_m2).where(has_ocean),
    }
    frac["unfilled_area_fraction"] = (1.0 - frac["observed_area_fraction"]
                                      - frac["filled_area_fraction"]).clip(min=0.0)
    long = {"observed": "carbon fixed in the month over the observed cells",
            "scaled": "observed area-mean rate times the whole ocean area of the region",
            "climatology": "observed cells plus unobserved ocean cells filled with their "
                           "calendar-month climatology"}[how]
    data = {
        "total": (total, {"units": "Tg", "long_name": long}),
        "coverage": ((cov_m2 / ocean_m2).where(has_ocean),
                     {"units": "1", "long_name": "area-weighted fraction of the month's days "
                      "with a valid estimate"}),
        "ocean_area": (ocean_m2 / 1e6, {"units": "km2", "long_name": "ocean area of the region"}),
        "observed_area_fraction": (frac["observed_area_fraction"],
                                   {"units": "1", "long_name": "fraction of the ocean area observed"}),
        "filled_area_fraction": (frac["filled_area_fraction"],
                                 {"units": "1", "long_name": f"fraction of the ocean area filled ({how})"}),
        "unfilled_area_fraction": (frac["unfilled_area_fraction"],
                                   {"units": "1", "long_name": "fraction of the ocean area without a value"}),
    }
    out = {}
    for k, (v, a) in data.items():
        v = v.transpose("region", "time", "model").swap_dims(time="month")
        v = v.drop_vars([c for c in ("time", "calendar_month") if c in v.coords])
        v.attrs = a
        out[k] = v
    attrs["totals_kind"] = how
    attrs["source_variable"] = "npp"
    return _out(out, attrs, extra)


# --------------------------------------------------------------------------------------------
# trends

#: Order of the statistics of the trend kernel (:data:`euphotic.trendstats.TREND_STATS`).
_TREND_STATS = trendstats.TREND_STATS
#: Largest block of a time-contiguous series array handed to the trend kernel at once, bytes
#: (float64). Blocks of the maps larger than this are split along their spatial dimensions
#: (never merged) before the time axis is made one chunk; 64 MiB keeps a few blocks per
#: thread well inside the 2 GiB the comparison pass may use.
TREND_BLOCK_BYTES = 64 * 2**20


def _time_contiguous(series: xr.DataArray, sdim: str, *, max_bytes: int = TREND_BLOCK_BYTES
                     ) -> xr.DataArray:
    """``series`` rechunked to one chunk along ``sdim``, its other chunks split (not merged)
    until a block holds at most ``max_bytes`` of float64."""
    series = series.chunk({sdim: -1})
    chunks = dict(zip(series.dims, series.chunks, strict=True))
    ntime = series.sizes[sdim]
    others = [d for d in series.dims if d != sdim]

    def block_bytes() -> int:
        return 8 * ntime * int(np.prod([max(chunks[d]) for d in others]))

    while block_bytes() > max_bytes:
        d = max(others, key=lambda d: max(chunks[d]))  # halve the largest chunk edge
        if max(chunks[d]) == 1:
            break
        chunks[d] = tuple(p for c in chunks[d] for p in (c - c // 2, c // 2) if p > 0)
    return series.chunk({d: chunks[d] for d in others})


def _trend_block(y: np.ndarray, *, t: np.ndarray, years: np.ndarray, confidence: float
                 ) -> np.ndarray:
    return trendstats.trend_block(y, t, years, confidence=confidence)


def _annual_values(da: xr.DataArray) -> xr.DataArray:
    """Yearly values: sums of monthly amounts (Tg -> Tg yr-1) or means of rates; years with
    fewer than 12 months are NaN."""
    years = _years_of(da)
    extensive = _units(da) == "Tg"
    if _compiled_path(da):  # one pass over each time-contiguous block (euphotic.monthstats)
        labels, group = np.unique(years.values, return_inverse=True)
        series = _time_contiguous(_drop_time_coords(da), "time")
        mean, n = xr.apply_ufunc(
            monthstats.group_mean, series, kwargs={"group": group, "n_groups": labels.size},
            input_core_dims=[["time"]], output_core_dims=[["year"], ["year"]],
            dask="parallelized", output_dtypes=[np.float64, np.int64],
            dask_gufunc_kwargs={"output_sizes": {"year": labels.size}},
        )
        val = (mean * n).where(n > 0) if extensive else mean
        val = val.assign_coords(year=labels)
        n = n.assign_coords(year=labels)
    else:
        da = _as_float64(da)
        g = da.groupby(years)
        val = g.sum(skipna=True, min_count=1) if extensive else g.mean(skipna=True)
        n = da.notnull().groupby(years).sum()
    val = val.where(n >= MONTHS_PER_YEAR)
    val.attrs = {"units": "Tg yr-1" if extensive else _units(da)}
    return val.rename(da.name)


def _trend(
    x: xr.Dataset | xr.DataArray,
    *,
    deseasonalise: bool,
    annual: bool,
    alpha: float,
    variable: str | None,
    min_coverage: float | None,
    low_coverage: LowCoverage | None,
    min_years: int,
) -> xr.Dataset:
    if not 0.0 < float(alpha) < 1.0:
        raise CompareInputError(f"alpha: must be between 0 and 1 (exclusive), got {alpha!r}")
    da, attrs, extra = _select(x, variable, min_coverage, low_coverage, float64=False)
    record_years = _years_of(da).values
    y0 = int(record_years.min())
    if annual:
        series = _annual_values(da)
        sdim = "year"
        yrs = series["year"].values.astype(np.int64)
        t = (yrs - y0) + 0.5
        basis = "annual"
    else:
        sdim = _time_dim(da)
        da = _as_float64(da)
        series = da
        if deseasonalise:
            clim = climatology(da)["climatology"]
            series = (da - clim.sel(calendar_month=_calendar_of(da)).drop_vars("calendar_month"))
            series.attrs = dict(da.attrs)
        yrs = record_years.astype(np.int64)
        t = (yrs - y0) + (_calendar_of(da).values - 0.5) / MONTHS_PER_YEAR
        basis = "monthly, deseasonalised" if deseasonalise else "monthly"
    units = _units(series)
    series = _drop_time_coords(series).drop_vars([c for c in series.coords if c in (sdim,)])
    lazy = _is_lazy(series)
    if lazy:
        series = _time_contiguous(series, sdim)
    stats_ = xr.apply_ufunc(  # a block of series at a time, time last (the compiled kernel)
        _trend_block,
        series,
        kwargs={"t": np.asarray(t, dtype=np.float64), "years": yrs,
                "confidence": 1.0 - float(alpha)},
        input_core_dims=[[sdim]],
        output_core_dims=[["stat"]],
        dask="parallelized",
        output_dtypes=[np.float64],
        dask_gufunc_kwargs={"output_sizes": {"stat": len(_TREND_STATS)}},
    )
    per = _per_year(units)
    meta = {
        "slope": (per, "Theil-Sen slope (median of pairwise slopes)"),
        "intercept": (units, "Theil-Sen intercept: the fitted value at the time origin"),
        "slope_low": (per, f"lower bound of the {100 * (1 - alpha):g}% confidence interval of the slope"),
        "slope_high": (per, f"upper bound of the {100 * (1 - alpha):g}% confidence interval of the slope"),
        "tau": ("1", "Kendall's tau-b of value against time (Mann-Kendall test statistic)"),
        "p_value": ("1", "two-sided p-value of the Mann-Kendall test (scipy.stats.kendalltau)"),
        "n": ("1", "values in the fit"),
        "n_years": ("1", "calendar years with at least one value"),
    }
    data: dict[str, xr.DataArray] = {}
    for i, name in enumerate(_TREND_STATS):
        v = stats_.isel(stat=i, drop=True)
        if name in ("n", "n_years"):
            v = v.astype(np.int64)
        v.attrs = {"units": meta[name][0], "long_name": meta[name][1]}
        data[name] = v
    sig = (data["p_value"] < alpha)
    sig.attrs = {"long_name": f"Mann-Kendall p-value below alpha = {alpha:g}"}
    short = data["n_years"] < int(min_years)
    short.attrs = {"long_name": f"fewer than {int(min_years)} years of record: the trend says little"}
    data["significant"] = sig
    data["short_record"] = short
    attrs.update(
        source_variable=str(da.name), trend_basis=basis, alpha=float(alpha), min_years=int(min_years),
        time_origin=f"{y0}-01-01", time_units="years since time_origin",
    )
    if lazy:
        # values are not known without computing: warn on the record's length (the coordinate)
        shortest = len(np.unique(record_years))
        n_short_text = "the record has"
    else:
        ny = data["n_years"].values
        shortest = int(ny.min()) if ny.size else 0
        n_short_text = f"{int((ny < int(min_years)).sum())} of {ny.size} series have"
    if shortest < int(min_years):
        _log.warning(
            "trend of %s: %s fewer than %d years (shortest %d); a trend over so short a record "
            "says little (flagged short_record)", da.name, n_short_text, int(min_years), shortest,
        )
    return _out(data, attrs, extra)


def trend(
    series: xr.Dataset | xr.DataArray,
    *,
    deseasonalise: bool = True,
    annual: bool = False,
    alpha: float = 0.05,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
    min_years: int = MIN_TREND_YEARS,
) -> xr.Dataset:
    """Theil-Sen trend and Mann-Kendall test per region and model (totals), or per series of
    any input with a time dimension.

    Parameters
    ----------
    series : xarray.Dataset or DataArray
        Totals (default variable ``total``, Tg per month; ``mean_npp`` in mg m-2 d-1 also
        works), or a variable of them.
    deseasonalise : bool, keyword-only
        Monthly values minus their calendar month's climatology over the whole record (the
        mean of that calendar month over all years) before fitting. Ignored with ``annual``.
    annual : bool, keyword-only
        Fit yearly values instead: sums of monthly amounts (``total``: Tg yr-1, slope
        Tg yr-2) or means of rates (``mean_npp``: mg m-2 d-1, slope mg m-2 d-1 yr-1). A year
        with fewer than 12 months is left out (NaN).
    alpha : float, keyword-only
        Significance level of the test; the slope's confidence interval is at 1 - alpha.
    variable, min_coverage, low_coverage : keyword-only
        As in :func:`seasonal_cycle`.
    min_years : int, keyword-only
        Records with fewer calendar years with a value are flagged ``short_record`` and warned
        about on the ``euphotic`` logger (default 10, common practice; see
        :data:`MIN_TREND_YEARS`).

    Returns
    -------
    xarray.Dataset
        Without the time dimension: ``slope``, ``slope_low``, ``slope_high`` (units of the
        fitted values per year), ``intercept`` (fitted value at the time origin, the values'
        units), ``tau``, ``p_value`` (1), ``n`` (values fitted), ``n_years`` (calendar years with
        a value), ``significant`` (p < alpha) and ``short_record`` (bool). Statistics are NaN
        for a series with fewer than 3 values.

    Notes
    -----
    Time is in years since 1 January of the record's first year (attr ``time_origin``): month
    m of year Y is at (Y - Y0) + (m - 0.5) / 12 (months taken as equal twelfths of a year),
    year Y at (Y - Y0) + 0.5. On deseasonalised values the intercept is the fitted anomaly at
    the origin (near 0), not a level.

    Slope, intercept and confidence interval are those of :func:`scipy.stats.theilslopes`
    (Sen 1968, intercept median(y) - slope median(t), interval from Kendall's tau statistic).
    The trend test is that of :func:`scipy.stats.kendalltau` of value against time: its
    tau-b and p-value. Both are computed by the compiled block kernel
    :func:`euphotic.trendstats.trend_block`, which reproduces scipy's numbers (tested against
    scipy to a relative 1e-10, p-values 1e-8) for many series at once. With
    time strictly increasing this is the Mann-Kendall test (tau-b = S / sqrt(n0 (n0 - n_ties))),
    with two differences from the usual statement of the Mann-Kendall z-test: no continuity correction
    (z = S / sqrt(var S) rather than (|S| - 1) / sqrt(var S)), and for series without ties and
    up to 33 values scipy gives the exact p-value instead of the normal approximation. Both make
    small differences near the significance threshold for short series only. Ties in the
    values are corrected for in var S as in the Mann-Kendall test. No correction for serial
    correlation is made (monthly anomalies are often autocorrelated, which makes p-values too
    small; annual values are less affected).

    Slope units: the values' units followed by ``yr-1`` (``Tg yr-1`` becomes ``Tg yr-2``).
    For monthly ``total`` (Tg per month) the slope is in Tg (per month) per year, ``Tg yr-1``.
    """
    return _trend(
        series, deseasonalise=deseasonalise, annual=annual, alpha=alpha, variable=variable,
        min_coverage=min_coverage, low_coverage=low_coverage, min_years=min_years,
    )


def trend_map(
    maps: xr.Dataset | xr.DataArray,
    *,
    deseasonalise: bool = True,
    annual: bool = False,
    alpha: float = 0.05,
    variable: str | None = None,
    min_coverage: float | None = None,
    low_coverage: LowCoverage | None = None,
    min_years: int = MIN_TREND_YEARS,
) -> xr.Dataset:
    """Per-cell Theil-Sen trend and Mann-Kendall test of the maps (lazy on dask input).

    Parameters and results as :func:`trend`, on maps (default variable ``npp``,
    mg m-2 d-1; slope mg m-2 d-1 yr-1), with dims ``(model, lat, lon)``. The time axis is
    made one chunk (blocks split spatially to at most :data:`TREND_BLOCK_BYTES`); each block of
    cells is fitted at once by the compiled kernel :func:`euphotic.trendstats.trend_block`
    through :func:`xarray.apply_ufunc` (``dask="parallelized"``). On dask input the
    short-record warning is based on the number of years in the time coordinate (the per-cell
    ``short_record`` flag uses each cell's years).

    Cost: a series of n values takes n(n-1)/2 pairwise slopes. Annual values
    (``annual=True``; 20 years: 190 pairs) take about 5 microseconds a cell on one core, so a
    20-year global 1/12-degree grid (9.3 million cells) is a matter of seconds to a minute;
    monthly values (240 months: 28,680 pairs) take about 0.5 ms a cell, an hour or more of
    thread time on that grid. ``euphotic compare`` therefore maps trends of annual means per
    cell and fits deseasonalised monthly values only per region (measured on a 2-core
    machine, see ``benchmarks/RESULTS.md``).
    """
    if "time" not in maps.dims:
        raise CompareInputError(f"maps: no 'time' dimension (has {sorted(map(str, maps.dims))}); use trend() for totals")
    return _trend(
        maps, deseasonalise=deseasonalise, annual=annual, alpha=alpha, variable=variable,
        min_coverage=min_coverage, low_coverage=low_coverage, min_years=min_years,
    )


__all__ = [
    "CompareInputError", "annual_totals", "seasonal_cycle", "climatology", "anomalies",
    "difference", "trend", "trend_map", "TG_PER_PG", "MIN_TREND_YEARS", "coverage_rule",
    "filled_totals", "FLAG_LOW_COVERAGE",
]
