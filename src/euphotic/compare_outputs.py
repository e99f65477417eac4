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

from euphotic import __version__, compare, ensemble, ensemble_outputs, results, runfolder
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
    #: the coverage rule used: (min_coverage or None, "flag" or "drop")
    rule: tuple[float | None, str] = (None, "flag")
    #: which region-month total fed the comparisons
    totals: str = "observed"


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


def _cf_map(ds: xr.Dataset, maps: xr.Dataset, title: str, rule: dict) -> xr.Dataset:
    out = ds.copy()
    out["lat"].attrs.update(standard_name="latitude", units="degrees_north", axis="Y")
    out["lon"].attrs.update(standard_name="longitude", units="degrees_east", axis="X")
    out.attrs = {
        "Conventions": "CF-1.8",
        "title": title,
        "caution": CAUTION,
        "source": f"euphotic {__version__} (euphotic compare)",
        "date_created": runfolder.now_iso(),
        "coverage_rule": rule_words(rule["min_coverage"], rule["low_coverage"]),
        **{f"euphotic_{k}": v for k, v in rule.items() if v is not None},
        **{k: v for k, v in maps.attrs.items() if k.startswith(("citation_", "model_name_"))},
    }
    for v in out.data_vars:
        if out[v].dtype == bool:
            out[v] = out[v].astype("i1")
            out[v].attrs.update(flag_values=np.array([0, 1], "i1"), flag_meanings="false true")
    return out


#: How each choice of ``--totals`` forms a region-month total (for the outputs' text).
TOTALS_WORDS = {
    "observed": "sum over the observed cells (the run's total_TgC)",
    "scaled": "observed area-mean rate times the region's whole ocean area (the run's "
              "total_filled_TgC)",
    "climatology": "observed cells as observed, unobserved or dropped ocean cells filled with "
                   "their calendar-month climatology over the baseline",
}


def rule_words(min_coverage: float | None, low_coverage: str) -> str:
    """The coverage rule in words, for tables' notes, captions and the command's output."""
    if min_coverage is None:
        return "none (every monthly value used)"
    what = ("dropped (treated as missing)" if low_coverage == "drop"
            else "kept and flagged low_coverage")
    return f"values with coverage below {min_coverage:g} {what} (low_coverage = \"{low_coverage}\")"


def _low_flag(cov: float, value: float, min_coverage: float | None, how: str) -> str:
    """Flag of one monthly value under the rule: '' / low_coverage / dropped_low_coverage."""
    if min_coverage is None or not np.isfinite(cov) or cov >= min_coverage or not np.isfinite(value):
        return ""
    return "dropped_low_coverage" if how == "drop" else compare.FLAG_LOW_COVERAGE


def write_comparisons(folder: str | Path, *, baseline: str | None = None,
                      compare_years: str | None = None, min_coverage: float | None = None,
                      low_coverage: str | None = None, totals: compare.TotalsKind = "observed",
                      maps: bool = True, command: str = "euphotic compare") -> Written:
    """Comparison tables (and maps) of the run in ``folder``, committed into it.

    Parameters
    ----------
    baseline : "FIRST-LAST" or "YEAR", optional
        Years of the climatology that anomalies and differences refer to (default: every
        year of the run).
    compare_years : "FIRST-LAST" or "YEAR", optional
        Years set against the baseline in the difference map (default: the run's last year).
    min_coverage, low_coverage : optional
        The coverage rule (default: the run's, from its manifest; see
        :func:`euphotic.compare.coverage_rule`: a ``min_coverage`` given alone drops).
    totals : "observed", "scaled" or "climatology"
        Which region-month total feeds the annual totals, seasonal cycle, anomalies and trends
        (:data:`TOTALS_WORDS`); ``climatology`` also writes ``compare_filled_totals.csv``.
    maps : bool
        Also write the per-cell trend and difference maps (CF NetCDF).
    """
    folder = Path(folder)
    if totals not in TOTALS_WORDS:
        raise CompareOptionError(f"--totals: expected observed, scaled or climatology, not "
                                 f"{totals!r}")
    run_totals = results.open_totals(folder)
    years = sorted({int(str(m)[:4]) for m in run_totals["month"].values})
    base = _years(baseline, "--baseline") or (years[0], years[-1])
    later = _years(compare_years, "--compare-to") or (years[-1], years[-1])
    for what, (a, b) in (("--baseline", base), ("--compare-to", later)):
        if b < years[0] or a > years[-1]:
            raise CompareOptionError(f"{what} {a}-{b}: the run in {folder} covers "
                                     f"{years[0]}-{years[-1]}")
    written = Written(baseline=base, compare_years=later)
    thr, how = compare.coverage_rule(run_totals, min_coverage=min_coverage,
                                     low_coverage=low_coverage)
    written.rule = (thr, how)
    written.totals = totals
    rule = {"min_coverage": thr, "low_coverage": how}

    src, var = run_totals, ("total_filled" if totals == "scaled" else "total")
    map_ds = None
    if totals == "climatology":
        map_ds = results.open_maps(folder)
        src = compare.filled_totals(map_ds, results.open_region_masks(folder), how="climatology",
                                    baseline=base, **rule).compute()
        src = src.drop_vars([v for v in src.data_vars if str(v).startswith("n_")])
        src.attrs.update(min_coverage=thr, low_coverage=how)

    # several models: the ensemble mean as one more "model" of every table (euphotic.ensemble)
    members = [str(m) for m in src["model"].values]
    src = ensemble.with_ensemble_mean(src, name=ensemble_outputs.ENSEMBLE)
    has_ensemble = len(members) >= 2
    annual = compare.annual_totals(src, variable=var, **rule)
    cycle = compare.seasonal_cycle(src, variable=var, **rule)
    clim = compare.climatology(src, baseline=base, variable=var, **rule)
    anom = compare.anomalies(src, clim, relative=True, variable=var, **rule)
    trend_annual = compare.trend(src, annual=True, variable=var, **rule)
    trend_monthly = compare.trend(src, deseasonalise=True, variable=var, **rule)
    # values below the rule in each trend's series (kept with "flag", dropped with "drop")
    below = ((src[var].notnull() & (src["coverage"] < thr)) if thr is not None
             else xr.zeros_like(src[var], dtype=bool))
    n_low_series = below.sum("month")

    with runfolder.OutputFolder(folder).adding(command, replace_kinds=(KIND,)) as (stage, added):
        def add(name: str, description: str) -> Path:
            added[name] = {"kind": KIND, "description": description,
                           "coverage_rule": rule, "totals": totals}
            written.files.append(folder / name)
            return stage.file(name)

        regions, models = list(src["region"].values), list(src["model"].values)
        rows = []
        spread = _model_range(annual["total"], members) if has_ensemble else None
        for r in regions:
            for y in annual["year"].values:
                for m in models:
                    s = annual.sel(region=r, year=y, model=m)
                    rows.append([r, int(y), m, totals, s["total"].item(), s["total_pg"].item(),
                                 int(s["n_months"].item()), int(s["n_low_coverage"].item()),
                                 str(s["flag"].item())])
                    if spread is not None:  # the range across models on the ensemble's row
                        lo, hi = (spread[k].sel(region=r, year=y).item()
                                  if m == ensemble_outputs.ENSEMBLE else np.nan
                                  for k in ("min", "max"))
                        rows[-1] += [lo, hi]
        _write_csv(add("compare_annual_totals.csv", "carbon fixed per region, year and model"),
                   ["region", "year", "model", "totals", "total_TgC_yr-1", "total_PgC_yr-1",
                    "n_months", "n_low_coverage_months", "flag"]
                   + (["models_min_TgC_yr-1", "models_max_TgC_yr-1"] if has_ensemble else []),
                   rows, [-1, -1, -1, -1, 4, 7, -1, -1, -1] + ([4, 4] if has_ensemble else []))

        rows = []
        for r in regions:
            for c in cycle["calendar_month"].values:
                for m in models:
                    s = cycle.sel(region=r, calendar_month=c, model=m)
                    n_low = int(s["n_low_coverage"].item()) if "n_low_coverage" in s else 0
                    rows.append([r, int(c), m, totals, s["mean"].item(), s["min"].item(),
                                 s["max"].item(), int(s["count"].item()), n_low])
        _write_csv(add("compare_seasonal_cycle.csv", "mean and range by calendar month"),
                   ["region", "calendar_month", "model", "totals", "mean_TgC_month-1",
                    "min_TgC_month-1", "max_TgC_month-1", "n_years", "n_low_coverage_years"],
                   rows, [-1, -1, -1, -1, 4, 4, 4, -1, -1])

        rows = []
        for r in regions:
            for i, mo in enumerate(src["month"].values):
                cm = int(str(mo)[5:7])
                for m in models:
                    value = src[var].sel(region=r, model=m).values[i]
                    cov = src["coverage"].sel(region=r, model=m).values[i]
                    flag = _low_flag(cov, value, thr, how)
                    rows.append([r, np.datetime64(mo, "M"), m, totals,
                                 np.nan if flag == "dropped_low_coverage" else value,
                                 clim["climatology"].sel(region=r, model=m,
                                                         calendar_month=cm).item(),
                                 anom["anomaly"].sel(region=r, model=m).values[i],
                                 anom["anomaly_percent"].sel(region=r, model=m).values[i],
                                 cov, flag])
        _write_csv(add("compare_anomalies.csv",
                       f"monthly totals against the {base[0]}-{base[1]} climatology"),
                   ["region", "month", "model", "totals", "total_TgC", "climatology_TgC",
                    "anomaly_TgC", "anomaly_percent", "coverage_fraction", "flag"],
                   rows, [-1, 0, -1, -1, 4, 4, 4, 2, 3, -1])

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
                    row["n_low_coverage"] = int(n_low_series.sel(region=r, model=m).item())
                    written.trends.append(row)
                    rows.append([r, m, label, totals, row["slope"], row["slope_low"],
                                 row["slope_high"], row["tau"], row["p_value"],
                                 int(row["n_years"]), bool(row["significant"]),
                                 bool(row["short_record"]), row["n_low_coverage"], unit])
        _write_csv(add("compare_trends.csv", "Theil-Sen slopes with Mann-Kendall tests"),
                   ["region", "model", "series", "totals", "slope_per_yr", "slope_low_per_yr",
                    "slope_high_per_yr", "kendall_tau", "p_value", "n_years", "significant",
                    "short_record", "n_low_coverage_months", "slope_unit"],
                   rows, [-1, -1, -1, -1, 4, 4, 4, 4, 4, -1, 0, 0, -1, -1])

        if totals == "climatology":
            rows = []
            for r in regions:
                for i, mo in enumerate(src["month"].values):
                    for m in models:
                        s = src.sel(region=r, model=m).isel(month=i)
                        cov, value = s["coverage"].item(), s["total"].item()
                        rows.append([r, np.datetime64(mo, "M"), m, value,
                                     s["observed_area_fraction"].item(),
                                     s["filled_area_fraction"].item(),
                                     s["unfilled_area_fraction"].item(), cov,
                                     _low_flag(cov, value, thr, how)])
            _write_csv(add("compare_filled_totals.csv",
                           f"region-month totals gap-filled with the {base[0]}-{base[1]} "
                           "per-cell climatology"),
                       ["region", "month", "model", "total_TgC", "observed_area_fraction",
                        "filled_area_fraction", "unfilled_area_fraction", "coverage_fraction",
                        "flag"], rows, [-1, 0, -1, 4, 4, 4, 4, 3, -1])

        if maps:
            # Per cell: trends of annual means (n(n-1)/2 pairs of years per cell; monthly
            # values would cost ~150 times more, see compare.trend_map), and the difference.
            # Written one after the other: each reads the maps (fast, see results.open_maps),
            # and one computation of both held twice the memory (20 years of 1/12-degree
            # maps: 3.7 GiB at peak against 2.0 GiB for the trend map alone; measured with
            # benchmarks/compare_decades.py).
            m = map_ds if map_ds is not None else results.open_maps(folder)
            tmap = compare.trend_map(m, annual=True, **rule)
            if thr is not None:
                n_low = (m["npp"].notnull() & (m["coverage"] < thr)).sum("time").astype("i2")
                n_low.attrs = {"units": "1", "long_name": "months below the coverage rule "
                               f"({rule_words(thr, how)})"}
                tmap["n_low_coverage"] = n_low
            tmap.attrs.update(rule)
            _cf_map(tmap, m, "Trend of annual mean net primary production per cell "
                    "(Theil-Sen slope, Mann-Kendall test)", rule).to_netcdf(
                add("compare_trend_map.nc", "per-cell trend of annual mean NPP"))
            diff = compare.difference(m, base, later, **rule)
            _cf_map(diff, m, f"Net primary production {later[0]}-{later[1]} against "
                    f"{base[0]}-{base[1]}", rule).to_netcdf(
                add("compare_difference_map.nc", "per-cell difference of mean NPP"))
        readme = add("compare_README.txt", "what the comparison files hold")
        readme.write_text(_readme(folder, base, later, thr, how, totals, members))
    return written


def _model_range(values: xr.DataArray, members: list[str]) -> xr.Dataset:
    """Minimum and maximum across the ``members`` models, where every one has a value."""
    x = values.sel(model=members)
    complete = x.notnull().all("model")
    return xr.Dataset({"min": x.min("model").where(complete),
                       "max": x.max("model").where(complete)})


def _readme(folder: Path, base, later, min_coverage, low_coverage, totals,
            members: list[str] | None = None) -> str:
    ens = ("" if not members or len(members) < 2 else
           f"\nModel \"ensemble\": the mean across the {len(members)} models "
           f"({' '.join(members)}) of each\n  region-month total, where every model has one "
           "(its coverage the smallest of theirs);\n  every table has its rows. "
           "compare_annual_totals.csv gives on its rows the smallest and\n  largest of the "
           "models' annual totals (models_min_TgC_yr-1, models_max_TgC_yr-1).\n  The spread "
           "is not an error estimate: the models share inputs and assumptions.")
    filled = ("\ncompare_filled_totals.csv   the region-month totals used here, gap-filled with the\n"
              f"                            {base[0]}-{base[1]} climatology of each cell, with the observed,\n"
              "                            filled and unfilled fractions of the ocean area.\n"
              if totals == "climatology" else "")
    return f"""Comparisons of the run in {folder} (euphotic {__version__},
{dt.datetime.now(dt.UTC).strftime('%Y-%m-%dT%H:%M:%SZ')}).

Totals used (column "totals"): {totals}: {TOTALS_WORDS[totals]}.{ens}
Coverage rule: {rule_words(min_coverage, low_coverage)}.
  n_low_coverage_* columns count the months below the rule behind each number; flag
  low_coverage: a month below the rule was kept; dropped_low_coverage: it was left out.
  The run's regional_totals.csv is the record and is not changed by this rule.

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
                            practice), too short to mean much.{filled}
compare_trend_map.nc        the same per cell, on annual means of the daily rate.
compare_difference_map.nc   mean rate {later[0]}-{later[1]} minus {base[0]}-{base[1]}, per cell.

Caution: {CAUTION}
"""
