"""Write a run's comparisons (``euphotic compare``): tidy CSV tables and CF NetCDF maps, added
to the run's output folder as one unit (:meth:`euphotic.runfolder.OutputFolder.adding`).

I/O only: the numbers come from :mod:`euphotic.compare` on the Datasets of
:mod:`euphotic.results`; nothing re-reads the daily inputs.
"""

from __future__ import annotations

import csv
import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import __version__, compare, results, runfolder
from euphotic.errors import EuphoticError
from euphotic.outputs import CAUTION

#: The kind under which comparison files are listed in the run manifest; a new
#: ``euphotic compare`` replaces the whole set.
KIND = "comparison"


class CompareOptionError(EuphoticError):
    """A `euphotic compare` option cannot be used with this run."""


@dataclass
class Written:
    """What ``euphotic compare`` wrote and what it found worth saying."""

    files: list[Path] = field(default_factory=list)
    trends: list[dict] = field(default_factory=list)
    baseline: tuple[int, int] | None = None
    compare_years: tuple[int, int] | None = None


def _years(spec: str | None, where: str) -> tuple[int, int] | None:
    """``"2015-2019"`` or ``"2020"`` -> (first, last)."""
    if spec is None:
        return None
    parts = str(spec).split("-")
    try:
        first, last = (int(parts[0]), int(parts[-1])) if len(parts) in (1, 2) else (None, None)
    except ValueError:
        first = last = None
    if first is None or first > last:
        raise CompareOptionError(f"{where}: expected YEAR or FIRST-LAST (e.g. 2015-2019), not "
                                 f"{spec!r}")
    return first, last


def _fmt(v, decimals: int) -> str:
    if v is None or isinstance(v, str):
        return v or ""
    if isinstance(v, bool | np.bool_):
        return "true" if v else "false"
    if isinstance(v, np.datetime64):
        return str(np.datetime64(v, "M"))
    f = float(v)
    if not np.isfinite(f):
        return ""
    return f"{f:.{decimals}f}"


def _write_csv(path: Path, header: list[str], rows: list[list], decimals: list[int]) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([_fmt(v, d) if d >= 0 else v for v, d in zip(r, decimals, strict=True)])


def _cf_map(ds: xr.Dataset, maps: xr.Dataset, title: str) -> xr.Dataset:
    out = ds.copy()
    out["lat"].attrs.update(standard_name="latitude", units="degrees_north", axis="Y")
    out["lon"].attrs.update(standard_name="longitude", units="degrees_east", axis="X")
    out.attrs = {
        "Conventions": "CF-1.8",
        "title": title,
        "caution": CAUTION,
        "source": f"euphotic {__version__} (euphotic compare)",
        "date_created": runfolder.now_iso(),
        **{k: v for k, v in maps.attrs.items() if k.startswith(("citation_", "model_name_"))},
    }
    for v in out.data_vars:
        if out[v].dtype == bool:
            out[v] = out[v].astype("i1")
            out[v].attrs.update(flag_values=np.array([0, 1], "i1"), flag_meanings="false true")
    return out


def write_comparisons(folder: str | Path, *, baseline: str | None = None,
                      compare_years: str | None = None, min_coverage: float | None = None,
                      maps: bool = True, command: str = "euphotic compare") -> Written:
    """Comparison tables (and maps) of the run in ``folder``, committed into it.

    Parameters
    ----------
    baseline : "FIRST-LAST" or "YEAR", optional
        Years of the climatology that anomalies and differences refer to (default: every
        year of the run).
    compare_years : "FIRST-LAST" or "YEAR", optional
        Years set against the baseline in the difference map (default: the run's last year).
    min_coverage : float, optional
        Drop monthly values whose coverage is below this fraction (see
        :mod:`euphotic.compare`).
    maps : bool
        Also write the per-cell trend and difference maps (CF NetCDF).
    """
    folder = Path(folder)
    totals = results.open_totals(folder)
    years = sorted({int(str(m)[:4]) for m in totals["month"].values})
    base = _years(baseline, "--baseline") or (years[0], years[-1])
    later = _years(compare_years, "--compare-to") or (years[-1], years[-1])
    for what, (a, b) in (("--baseline", base), ("--compare-to", later)):
        if b < years[0] or a > years[-1]:
            raise CompareOptionError(f"{what} {a}-{b}: the run in {folder} covers "
                                     f"{years[0]}-{years[-1]}")
    written = Written(baseline=base, compare_years=later)

    annual = compare.annual_totals(totals, min_coverage=min_coverage)
    cycle = compare.seasonal_cycle(totals, variable="total", min_coverage=min_coverage)
    clim = compare.climatology(totals, baseline=base, variable="total",
                               min_coverage=min_coverage)
    anom = compare.anomalies(totals, clim, relative=True, variable="total",
                             min_coverage=min_coverage)
    trend_annual = compare.trend(totals, annual=True, min_coverage=min_coverage)
    trend_monthly = compare.trend(totals, deseasonalise=True, min_coverage=min_coverage)

    with runfolder.OutputFolder(folder).adding(command, replace_kinds=(KIND,)) as (stage, added):
        def add(name: str, description: str) -> Path:
            added[name] = {"kind": KIND, "description": description}
            written.files.append(folder / name)
            return stage.file(name)

        regions, models = list(totals["region"].values), list(totals["model"].values)
        rows = []
        for r in regions:
            for y in annual["year"].values:
                for m in models:
                    s = annual.sel(region=r, year=y, model=m)
                    rows.append([r, int(y), m, s["total"].item(), s["total_pg"].item(),
                                 int(s["n_months"].item()), str(s["flag"].item())])
        _write_csv(add("compare_annual_totals.csv", "carbon fixed per region, year and model"),
                   ["region", "year", "model", "total_TgC_yr-1", "total_PgC_yr-1", "n_months",
                    "flag"], rows, [-1, -1, -1, 4, 7, -1, -1])

        rows = []
        for r in regions:
            for c in cycle["calendar_month"].values:
                for m in models:
                    s = cycle.sel(region=r, calendar_month=c, model=m)
                    rows.append([r, int(c), m, s["mean"].item(), s["min"].item(),
                                 s["max"].item(), int(s["count"].item())])
        _write_csv(add("compare_seasonal_cycle.csv", "mean and range by calendar month"),
                   ["region", "calendar_month", "model", "mean_TgC_month-1", "min_TgC_month-1",
                    "max_TgC_month-1", "n_years"], rows, [-1, -1, -1, 4, 4, 4, -1])

        rows = []
        for r in regions:
            for i, mo in enumerate(totals["month"].values):
                cm = int(str(mo)[5:7])
                for m in models:
                    rows.append([r, np.datetime64(mo, "M"), m,
                                 totals["total"].sel(region=r, model=m).values[i],
                                 clim["climatology"].sel(region=r, model=m,
                                                         calendar_month=cm).item(),
                                 anom["anomaly"].sel(region=r, model=m).values[i],
                                 anom["anomaly_percent"].sel(region=r, model=m).values[i]])
        _write_csv(add("compare_anomalies.csv",
                       f"monthly totals against the {base[0]}-{base[1]} climatology"),
                   ["region", "month", "model", "total_TgC", "climatology_TgC", "anomaly_TgC",
                    "anomaly_percent"], rows, [-1, 0, -1, 4, 4, 4, 2])

        rows = []
        for label, tr, unit in (("annual totals", trend_annual, "TgC_yr-2"),
                                ("monthly totals, deseasonalised", trend_monthly, "TgC_yr-1")):
            for r in regions:
                for m in models:
                    s = tr.sel(region=r, model=m)
                    row = {"region": r, "model": m, "series": label,
                           **{k: s[k].item() for k in ("slope", "slope_low", "slope_high",
                                                       "intercept", "tau", "p_value",
                                                       "n_years", "significant",
                                                       "short_record")}}
                    row["unit"] = unit
                    written.trends.append(row)
                    rows.append([r, m, label, row["slope"], row["slope_low"], row["slope_high"],
                                 row["tau"], row["p_value"], int(row["n_years"]),
                                 bool(row["significant"]), bool(row["short_record"]), unit])
        _write_csv(add("compare_trends.csv", "Theil-Sen slopes with Mann-Kendall tests"),
                   ["region", "model", "series", "slope_per_yr", "slope_low_per_yr",
                    "slope_high_per_yr", "kendall_tau", "p_value", "n_years", "significant",
                    "short_record", "slope_unit"],
                   rows, [-1, -1, -1, 4, 4, 4, 4, 4, -1, 0, 0, -1])

        if maps:
            # Per cell: trends of annual means (n(n-1)/2 pairs of years per cell; monthly
            # values would cost ~150 times more, see compare.trend_map), and the difference.
            # Written one after the other: each reads the maps (fast, see results.open_maps),
            # and one computation of both held twice the memory (20 years of 1/12-degree
            # maps: 3.7 GiB at peak against 2.0 GiB for the trend map alone; measured with
            # benchmarks/compare_decades.py).
            m = results.open_maps(folder)
            tmap = compare.trend_map(m, annual=True, min_coverage=min_coverage)
            _cf_map(tmap, m, "Trend of annual mean net primary production per cell "
                    "(Theil-Sen slope, Mann-Kendall test)").to_netcdf(
                add("compare_trend_map.nc", "per-cell trend of annual mean NPP"))
            diff = compare.difference(m, base, later, min_coverage=min_coverage)
            _cf_map(diff, m, f"Net primary production {later[0]}-{later[1]} against "
                    f"{base[0]}-{base[1]}").to_netcdf(
                add("compare_difference_map.nc", "per-cell difference of mean NPP"))
        readme = add("compare_README.txt", "what the comparison files hold")
        readme.write_text(_readme(folder, base, later, min_coverage))
    return written


def _readme(folder: Path, base, later, min_coverage) -> str:
    return f"""Comparisons of the run in {folder} (euphotic {__version__},
{dt.datetime.now(dt.UTC).strftime('%Y-%m-%dT%H:%M:%SZ')}).

compare_annual_totals.csv   carbon fixed per region, year and model (Tg C yr-1, Pg C yr-1);
                            a year with fewer than 12 months is left empty (flag
                            incomplete_year).
compare_seasonal_cycle.csv  mean, min and max of the monthly totals by calendar month.
compare_anomalies.csv       monthly totals against the {base[0]}-{base[1]} climatology of the same
                            calendar month (Tg C and percent).
compare_trends.csv          Theil-Sen slope (scipy.stats.theilslopes) with its confidence
                            interval, Kendall's tau and the Mann-Kendall p-value
                            (scipy.stats.kendalltau), on annual totals and on deseasonalised
                            monthly totals; short_record: fewer than 10 years (common
                            practice), too short to mean much.
compare_trend_map.nc        the same per cell, on annual means of the daily rate.
compare_difference_map.nc   mean rate {later[0]}-{later[1]} minus {base[0]}-{base[1]}, per cell.
Coverage rule: {'values with coverage below ' + str(min_coverage) + ' dropped'
                if min_coverage is not None else 'none (every monthly value used)'}.

Caution: {CAUTION}
"""
