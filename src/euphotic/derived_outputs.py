"""Write what a run's production implies (``euphotic derive CONFIG``, or the ``[derived]`` step
of ``euphotic run``): per model and month a CF-1.8 / ACDD-1.3 NetCDF map of export production
by each configured method, nitrogen and phosphorus demand and oxygen production, and
``derived_totals.csv`` (region x month x model x quantity), added to the run's output folder
as one unit (:meth:`euphotic.runfolder.OutputFolder.adding`, manifest kind :data:`KIND`; a new
derivation replaces the whole set; on any failure nothing changes).

I/O and metadata only: the numbers come from :mod:`euphotic.derived`. It reads the committed
monthly maps (:func:`euphotic.results.open_maps`), the run's own sea surface temperature and
chlorophyll (:func:`euphotic.preflight.open_inputs`, one month at a time through
:func:`euphotic.aggregate.daily_stack`) and the run's regions
(:func:`euphotic.results.open_regions`), all lazily; each batch of months is computed once
(maps written and regional sums taken in one dask computation).
"""

from __future__ import annotations

import csv
import dataclasses
import functools
import io
import json
import logging
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import __version__, results, runfolder
from euphotic import derived as dv
from euphotic.outputs import (
    CAUTION,
    PUBLISHED_NAMES,
    STANDARD_NAME_VOCABULARY,
    coordinate_encoding,
    grid_encoding,
    iso_utc,
    metadata_attrs,
    model_label,
    month_file_attrs,
    month_grid,
)

log = logging.getLogger("euphotic")

#: The kind under which derived files are listed in the run manifest.
KIND = "derived"
#: The regional totals table and its CSV-on-the-Web metadata.
TOTALS_FILE = "derived_totals.csv"
TOTALS_METADATA = "derived_totals.csv-metadata.json"
#: Columns of the totals table, with their meaning (the README lists the same words).
TOTALS_COLUMNS: dict[str, str] = {
    "region": "region name, as configured",
    "month": "calendar month, YYYY-MM",
    "model": "model id of the production maps",
    "quantity": "export_<method>, nitrogen_demand, phosphorus_demand or oxygen_production",
    "substance": "what the amounts and masses are of: C, N, P or O2",
    "mean_rate": "area-weighted mean daily rate over the region's cells with a value",
    "rate_units": "units of mean_rate (mg C m-2 d-1 for export, mmol <substance> m-2 d-1 else)",
    "observed_area_km2": "area of the region's cells with a value, km2",
    "total_mol": "amount over the month and the cells with a value, mol of the substance",
    "total_Tg": "mass over the month and the cells with a value, Tg (1e12 g) of the substance",
    "flag": "no_valid_data when no cell of the region has a value (totals then empty)",
}
#: Significant digits of the numbers in the totals table (no exponent is ever written).
DIGITS = 6
#: Quality flag of a region without any cell with a value.
FLAG_NO_DATA = "no_valid_data"
#: The caution of every derived output: the project's, and the one of export methods.
DERIVED_CAUTION = f"{CAUTION} {dv.EXPORT_CAUTION}"


@dataclass(frozen=True)
class Options:
    """The checked options of one derivation."""

    export: tuple[str, ...] = dv.DEFAULT_EXPORT
    quotient: float = dv.DEFAULT_QUOTIENT
    models: tuple[str, ...] | None = None  # None: every model of the run
    #: where the models came from, for messages
    models_where: str = "[derived] models"

    def text(self) -> str:
        return (f"export methods {', '.join(self.export)}; photosynthetic quotient "
                f"{self.quotient:g} mol O2 (mol C)-1; Redfield C:N:P 106:16:1")


@dataclass
class Written:
    """What ``euphotic derive`` wrote."""

    files: list[Path] = field(default_factory=list)
    options: Options | None = None
    rows: list[dict] = field(default_factory=list)


def options_from(table: dict, *, export=None, quotient=None, models=None,
                 where: str = "[derived]") -> Options:
    """The options of a ``[derived]`` table (already checked by the config) overridden by those
    given (command-line options, checked here).

    Raises
    ------
    DerivedError
        One line naming the option and what is expected.
    """
    exp = export if export is not None else table.get("export", dv.DEFAULT_EXPORT)
    exp_where = "--export" if export is not None else f"{where} export"
    names = [exp] if isinstance(exp, str) else list(exp)
    unknown = [e for e in names if e not in dv.EXPORT_METHODS]
    if not names or unknown:
        raise dv.DerivedError(
            f"{exp_where}: unknown export method(s) {', '.join(map(repr, unknown)) or '(none)'}"
            f"; choose from {', '.join(dv.EXPORT_METHODS)}")
    q_raw = quotient if quotient is not None else table.get("quotient", dv.DEFAULT_QUOTIENT)
    q = dv.quotient_value(q_raw, "--quotient" if quotient is not None else f"{where} quotient")
    mods = models if models else table.get("models")
    models_where = "--model" if models else f"{where} models"
    return Options(export=tuple(dict.fromkeys(names)), quotient=q,
                   models=tuple(dict.fromkeys(mods)) if mods else None,
                   models_where=models_where)


# --------------------------------------------------------------------------------------------
# inputs
# --------------------------------------------------------------------------------------------


def _month_mean(da: xr.DataArray, month: np.datetime64) -> xr.DataArray:
    """Mean over the days of the month of an input on the map grid (lazy), NaN where no day
    has a value."""
    from euphotic.aggregate import daily_stack, month_days

    stack = daily_stack(da, month_days(np.datetime64(month, "M")))
    return stack.mean("day", skipna=True)


def _zeu(chl: xr.DataArray) -> xr.DataArray:
    """Euphotic depth (m) from chlorophyll (mg m-3), Morel and Berthon (1989), lazily."""
    from euphotic.models.morel_berthon import euphotic_depth

    zeu = xr.apply_ufunc(euphotic_depth, chl, dask="parallelized", output_dtypes=[np.float64])
    zeu.attrs = {"units": "m", "long_name": "euphotic depth (Morel and Berthon 1989)"}
    return zeu


#: The ensemble where a model name goes (euphotic.results.ENSEMBLE on the ensemble branch),
#: and the manifest kind of its maps (euphotic.ensemble.MAP_KIND).
ENSEMBLE = "ensemble"
ENSEMBLE_MAP_KIND = "ensemble map"


def _ensemble_npp(folder: Path, manifest: dict) -> xr.DataArray | None:
    """The ensemble-mean production maps ``(time, lat, lon)`` with a ``month`` coordinate,
    when the run holds an ensemble (:func:`euphotic.results.open_ensemble_maps`); else None."""
    if not any(e.get("kind") == ENSEMBLE_MAP_KIND for e in manifest["outputs"].values()):
        return None
    opener = getattr(results, "open_ensemble_maps", None)
    if opener is None:  # a folder written by a version with ensembles, read by one without
        return None
    return opener(folder)["npp_mean"]


def _check_grid(on_grid: xr.DataArray, maps: xr.Dataset, role: str, config) -> None:
    for c in ("lat", "lon"):
        a, b = on_grid[c].values, maps[c].values
        if a.shape != b.shape or not np.allclose(a, b, rtol=0, atol=1e-9):
            raise dv.DerivedError(
                f"{config}: the {role} input is on another grid ({c}: {a.size} values) than "
                f"the run's maps ({b.size}); derive with the config the run was made with")


# --------------------------------------------------------------------------------------------
# one map file
# --------------------------------------------------------------------------------------------


def file_name(model: str, month) -> str:
    """``derived_<model>_YYYY-MM.nc``."""
    return f"derived_{model}_{np.datetime64(month, 'M')}.nc"


@functools.lru_cache(maxsize=32)
def _references(keys: tuple[str, ...]) -> str:
    """The works cited, as text, from ``references.bib`` (rendered once per set of keys: each
    rendering looks up pybtex's plugins, about 0.3 s)."""
    from euphotic.methods import reference_text_for

    return " ".join(reference_text_for(k) for k in dict.fromkeys(keys))


def month_dataset(values: dict, qs: list[dv.Quantity], opts: Options, *, model: str,
                  month, lat, lon, earth: str, metadata, command: str, source_map: str,
                  input_files: dict[str, str]) -> xr.Dataset:
    """One model's month of derived quantities as a lazy CF-1.8 / ACDD-1.3 Dataset."""
    start = np.datetime64(month, "M").astype("datetime64[D]")
    end = (np.datetime64(month, "M") + 1).astype("datetime64[D]")
    n_days = int((end - start).astype(int))
    data = {}
    keys: list[str] = []
    for q in qs:
        s = dv.SUBSTANCES[q.substance]
        keys += q.citation_keys
        data[q.name] = (("time", "lat", "lon"), values[q.name].astype(np.float32).data[None], {
            "units": s.rate_units, "long_name": q.long_name + ", mean daily rate over the month",
            "cell_methods": "time: mean", "coverage_content_type": "modelResult",
            "comment": q.comment, "grid_mapping": "crs"})
        if q.name.startswith("export_"):
            e = q.name.removeprefix("export_")
            m = dv.EXPORT_METHODS[e]
            data[f"export_ratio_{e}"] = (
                ("time", "lat", "lon"), values[f"export_ratio_{e}"].astype(np.float32).data[None],
                {"units": "1", "long_name": f"export ratio, {m.label}",
                 "coverage_content_type": "modelResult", "comment": m.formula,
                 "grid_mapping": "crs"})
    ds = month_grid(data, lat, lon, start, end, earth)
    name = PUBLISHED_NAMES.get(model, model)
    who = f"the {name} model (euphotic id {model!r})"
    if model == ENSEMBLE:
        name = who = "the ensemble mean of the run's models"
    stem = file_name(model, month).removesuffix(".nc")
    now = iso_utc()
    ds.attrs = {
        "Conventions": "CF-1.8, ACDD-1.3",
        "title": f"What production implies: export, nutrient demand and oxygen from "
                 f"{model_label(model)}, {np.datetime64(month, 'M')}",
        "summary": (
            f"Monthly mean daily export production ({len(opts.export)} published methods side "
            f"by side), nitrogen and phosphorus uptake (Redfield ratio) and oxygen production "
            f"(photosynthetic quotient {opts.quotient:g}) implied by the monthly mean net "
            f"primary production of {who} in {source_map}. "
            + DERIVED_CAUTION),
        "comment": "Ocean cells with a production estimate only. Export ratios use the "
                   "month's mean sea surface temperature (and chlorophyll for the euphotic "
                   "depth) of the run's inputs, averaged over the days with a value.",
        "keywords": "export production, new production, nitrogen demand, phosphorus demand, "
                    "oxygen production, net primary production",
        "standard_name_vocabulary": STANDARD_NAME_VOCABULARY,
        "cdm_data_type": "Grid",
        "model": model,
        "model_name": name,
        "source_map": source_map,
        "export_methods": " ".join(opts.export),
        "photosynthetic_quotient": float(opts.quotient),
        "references": _references(tuple(keys)),
        "caution": DERIVED_CAUTION,
        **month_file_attrs(f"{start}T00:00:00Z", f"{end}T00:00:00Z", n_days, lat, lon,
                           now=now, command=command, level="L4 model output (derived)"),
        **metadata_attrs(metadata, stem),
        **{f"input_files_{r}": v for r, v in input_files.items()},
    }
    return ds


def _encoding(ds: xr.Dataset) -> dict:
    enc = {}
    for v, da in ds.data_vars.items():
        if da.dims == ("time", "lat", "lon"):
            blocks = (1, min(da.shape[1], 1024), min(da.shape[2], 1024))  # as the maps'
            enc[v] = grid_encoding(blocks)
    enc.update(coordinate_encoding())
    return enc


# --------------------------------------------------------------------------------------------
# regional sums
# --------------------------------------------------------------------------------------------


def _region_sums(values: dict, names: list[str], weights: xr.DataArray) -> xr.DataArray:
    """Per quantity, month and region: sum of rate x cell area (m2) over cells with a value,
    and the area of those cells (m2). Lazy; dims ``(what, quantity, time, region)``, what =
    sum, area."""
    stacked = xr.concat([values[n] for n in names], dim="quantity").assign_coords(quantity=names)
    ok = np.isfinite(stacked)
    s = xr.dot(stacked.where(ok, 0.0), weights, dim=["lat", "lon"])
    a = xr.dot(ok.astype(np.float64), weights, dim=["lat", "lon"])
    return xr.concat([s, a], dim="what").transpose("what", "quantity", "time", "region")


def _fmt(v: float) -> str:
    if not np.isfinite(v):
        return ""
    return np.format_float_positional(v, precision=DIGITS, unique=False, fractional=False,
                                      trim="-")


def _rows(sums: np.ndarray, qs: list[dv.Quantity], regions: list[str], model: str, month,
          n_days: int) -> list[dict]:
    rows = []
    for qi, q in enumerate(qs):
        s = dv.SUBSTANCES[q.substance]
        unit = s.rate_units.replace("mg ", "mg C ") if s.mass_rate else \
            s.rate_units.replace("mmol ", f"mmol {s.symbol} ")
        for ri, region in enumerate(regions):
            total, area = float(sums[0, qi, ri]), float(sums[1, qi, ri])
            if area > 0:
                mol, tg = dv.totals_from_integral(total * n_days, q.substance)
                mean, flag = total / area, ""
            else:
                mol = tg = mean = float("nan")
                flag = FLAG_NO_DATA
            rows.append({"region": region, "month": str(np.datetime64(month, "M")),
                         "model": model, "quantity": q.name, "substance": s.symbol,
                         "mean_rate": mean, "rate_units": unit,
                         "observed_area_km2": area / 1e6, "total_mol": mol, "total_Tg": tg,
                         "flag": flag})
    return rows


#: Column -> (CSVW datatype, UDUNITS unit or None). Rates have their units in rate_units.
_COLUMN_TYPES = {"region": ("string", None), "month": ("gYearMonth", None),
                 "model": ("string", None), "quantity": ("string", None),
                 "substance": ("string", None), "mean_rate": ("double", None),
                 "rate_units": ("string", None), "observed_area_km2": ("double", "km2"),
                 "total_mol": ("double", "mol"), "total_Tg": ("double", "Tg"),
                 "flag": ("string", None)}


def totals_metadata(opts: Options, models: list[str], *, metadata, export_keys: list[str]
                    ) -> dict:
    """The W3C CSV-on-the-Web metadata of ``derived_totals.csv`` (as the run's totals table
    has): each column's meaning, datatype and unit, the options, the works cited and the
    caution."""
    meta = metadata_attrs(metadata, TOTALS_FILE.removesuffix(".csv"))
    columns = []
    for name, description in TOTALS_COLUMNS.items():
        datatype, unit = _COLUMN_TYPES[name]
        col = {"name": name, "titles": name, "dc:description": description,
               "datatype": datatype, "null": "",
               "required": name in ("region", "month", "model", "quantity")}
        if unit:
            col["schema:unitText"] = unit
        columns.append(col)
    properties = {"caution": DERIVED_CAUTION, "euphotic_version": __version__,
                  "export_methods": " ".join(opts.export),
                  "photosynthetic_quotient": opts.quotient,
                  "redfield_ratio": "C:N:P = 106:16:1",
                  "models": " ".join(models),
                  **{k: v for k, v in meta.items() if k not in ("id", "license")}}
    return {
        "@context": ["http://www.w3.org/ns/csvw", {"@language": "en"}],
        "url": TOTALS_FILE,
        "dc:identifier": meta["id"],
        "dc:title": "What production implies: regional export, nutrient demand and oxygen "
                    "(euphotic)",
        "dc:description": "Totals per region, calendar month, model and derived quantity. "
                          + DERIVED_CAUTION,
        "dc:license": meta["license"],
        "dc:created": {"@value": iso_utc(), "@type": "xsd:dateTime"},
        "dc:references": _references(tuple(export_keys)),
        "rdfs:comment": DERIVED_CAUTION,
        "schema:additionalProperty": [
            {"@type": "schema:PropertyValue", "schema:name": k, "schema:value": v}
            for k, v in properties.items()],
        "tableSchema": {"columns": columns,
                        "primaryKey": ["region", "month", "model", "quantity"]},
    }


def totals_csv(rows: list[dict]) -> str:
    """The totals table as CSV text (numbers to :data:`DIGITS` significant digits)."""
    out = io.StringIO()
    w = csv.DictWriter(out, fieldnames=list(TOTALS_COLUMNS), lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: _fmt(v) if isinstance(v, float) else v for k, v in r.items()})
    return out.getvalue()


# --------------------------------------------------------------------------------------------
# the command
# --------------------------------------------------------------------------------------------


def _load(cfg):
    from euphotic.config import RunConfig, load_config

    return cfg if isinstance(cfg, RunConfig) else load_config(cfg)


def write_derived(folder: str | Path | None = None, *, cfg, export=None, quotient=None,
                  models=None, command: str = "euphotic derive") -> Written:
    """Derive export, nutrient demand and oxygen production from the run committed in
    ``folder`` (default: the config's output folder) and commit them into it.

    Parameters
    ----------
    folder : the run's output folder
    cfg : RunConfig or config path
        The run's configuration: its inputs give the month's sea surface temperature and
        chlorophyll, its ``[derived]`` table the defaults of the options below.
    export : export methods (names of :data:`euphotic.derived.EXPORT_METHODS`)
    quotient : photosynthetic quotient, mol O2 per mol C, or "ammonium" / "nitrate"
    models : models whose maps to use (default: every model with maps in the run)

    Raises
    ------
    DerivedError
        An option that cannot be used, or inputs on another grid than the maps.
    NoRunError, InterruptedCommitError, OutputChangedError, SelectionError
        As :func:`euphotic.results.open_maps`.
    InputFileError
        The run's temperature or chlorophyll files cannot be read.
    """
    import dask

    from euphotic.preflight import open_inputs

    config = _load(cfg)
    folder = Path(folder if folder is not None else config.output_dir)
    where = f"{config.path} [derived]"
    opts = options_from(config.steps.get("derived", {}), export=export, quotient=quotient,
                        models=models, where=where)
    manifest = results.committed_manifest(folder)  # no run, or an interrupted commit first
    wanted = [m for m in opts.models or () if m != ENSEMBLE]
    try:
        maps = results.open_maps(folder, models=wanted or None)
    except results.SelectionError as exc:
        raise dv.DerivedError(f"{opts.models_where}: {exc}") from None
    ensemble = _ensemble_npp(folder, manifest)
    if ensemble is None and opts.models and ENSEMBLE in opts.models:
        raise dv.DerivedError(f"{opts.models_where}: {folder}: the run has no ensemble maps "
                              f"(it ran {', '.join(map(str, maps['model'].values))})")
    sources = {str(m): maps["npp"].sel(model=m) for m in maps["model"].values
               if not opts.models or m in opts.models}
    if ensemble is not None and (not opts.models or ENSEMBLE in opts.models):
        sources[ENSEMBLE] = ensemble
    qs = dv.quantities(opts.export, opts.quotient)
    needs = {"sst"} | ({"chl"} if any("zeu" in dv.EXPORT_METHODS[e].needs for e in opts.export)
                       else set())
    # only the inputs the formulas need (chlorophyll also gives the grid)
    inputs = open_inputs(dataclasses.replace(
        config, inputs={r: spec for r, spec in config.inputs.items() if r in ("chl", "sst")}))
    for role in ("chl", "sst"):  # chlorophyll gives the grid: needed in any case
        if role in inputs.errors:
            raise inputs.errors[role]
        _check_grid(inputs.on_grid[role], maps, role, config.path)
    regions = results.open_regions(folder)
    weights = (regions["mask"].astype(np.float64) * regions["cell_area"])
    weights = weights.assign_coords(lat=maps["lat"].values, lon=maps["lon"].values)
    region_names = [str(r) for r in regions["region"].values]
    base = Path(config.path).resolve().parent
    from euphotic.outputs import _rel

    files_of = {r: ", ".join(_rel(p, base) for p in inputs.raw[r].attrs.get("files", []))
                for r in sorted(needs)}
    map_names = {(e["model"] if e.get("kind") == "map" else ENSEMBLE,
                  str(np.datetime64(e["month"], "M"))): n
                 for n, e in manifest["outputs"].items()
                 if e.get("kind") in ("map", ENSEMBLE_MAP_KIND) and "month" in e}
    lat, lon = maps["lat"].values, maps["lon"].values
    months = list(maps["month"].values)
    per_batch = max(1, config.months_per_compute) if config.months_per_compute else len(months)
    written = Written(options=opts)

    with runfolder.OutputFolder(folder).adding(command, replace_kinds=(KIND,)) as (stage, added):
        for b in range(0, len(months), per_batch):
            batch = [np.datetime64(months[ti], "M") for ti in range(b, min(b + per_batch,
                                                                           len(months)))]
            days = {mo: int(maps["days_in_month"].values[b + k]) for k, mo in enumerate(batch)}
            # the month's mean temperature (and euphotic depth): once for every model, on the
            # maps' own coordinates (so that xarray lines them up exactly)
            sst = xr.concat([_month_mean(inputs.on_grid["sst"], mo) for mo in batch],
                            dim="time").assign_coords(lat=lat, lon=lon)
            zeu = (_zeu(xr.concat([_month_mean(inputs.on_grid["chl"], mo) for mo in batch],
                                  dim="time")).assign_coords(lat=lat, lon=lon)
                   if "chl" in needs else None)
            grids, sums, keys = [], [], []
            for m, source in sources.items():
                have = [(k, int(at[0])) for k, mo in enumerate(batch)
                        if len(at := np.flatnonzero(source["month"].values.astype(
                            "datetime64[M]") == mo))]
                if not have:
                    continue  # an ensemble without these months
                pick = [k for k, _ in have]
                npp = source.isel(time=[i for _, i in have]).drop_vars(
                    ["model", "time", "month", "days_in_month"], errors="ignore"
                ).assign_coords(lat=lat, lon=lon).astype(np.float64)
                values = dv.compute_quantities(
                    npp, sst.isel(time=pick), zeu=None if zeu is None else zeu.isel(time=pick),
                    export=opts.export, quotient=opts.quotient)
                sums.append(_region_sums(values, [q.name for q in qs], weights).data)
                keys.append((m, [batch[k] for k in pick]))
                grids.append({n: v.astype(np.float32) for n, v in values.items()})
            # one computation for the batch: every input month read once, every model's maps
            # and sums from it (the maps then written from memory: a lazy write per file would
            # optimise the whole shared graph once per file)
            with warnings.catch_warnings():
                warnings.filterwarnings("ignore", r"Mean of empty slice", RuntimeWarning)
                warnings.filterwarnings("ignore", r"invalid value encountered", RuntimeWarning)
                grids, computed = dask.compute(grids, sums)
            for (m, got), values in zip(keys, grids, strict=True):
                for j, month in enumerate(got):
                    name = file_name(m, month)
                    ds = month_dataset(
                        {n: v.isel(time=j) for n, v in values.items()}, qs, opts, model=m,
                        month=month, lat=lat, lon=lon, earth=config.earth,
                        metadata=config.metadata, command=command,
                        source_map=map_names.get((m, str(month)), f"npp_{m}_{month}"),
                        input_files=files_of)
                    ds.to_netcdf(stage.file(name), engine="netcdf4", encoding=_encoding(ds))
                    added[name] = {"kind": KIND, "model": m, "month": str(month),
                                   "description": f"export, N and P demand and O2 production "
                                                  f"from {model_label(m)}, {month}"}
                    written.files.append(folder / name)
            rows: dict[tuple, list[dict]] = {}
            for (m, got), s in zip(keys, computed, strict=True):
                for j, month in enumerate(got):
                    rows[(month, m)] = _rows(np.asarray(s)[:, :, j, :], qs, region_names, m,
                                             month, days[month])
            for month in batch:  # month by month, the models in the run's order
                for m in sources:
                    written.rows += rows.get((month, m), [])
        stage.file(TOTALS_FILE).write_text(totals_csv(written.rows))
        added[TOTALS_FILE] = {"kind": KIND, "description": "regional totals of the derived "
                              "quantities (region, month, model, quantity) in mol and Tg",
                              "export": list(opts.export), "quotient": opts.quotient}
        written.files.append(folder / TOTALS_FILE)
        keys = [k for q in qs for k in q.citation_keys]
        side = stage.file(TOTALS_METADATA)
        side.write_text(json.dumps(totals_metadata(opts, list(sources), metadata=config.metadata,
                                                   export_keys=keys), indent=1))
        added[TOTALS_METADATA] = {"kind": KIND, "of": TOTALS_FILE,
                                  "description": "CSV-on-the-Web metadata of the derived totals"}
        written.files.append(folder / TOTALS_METADATA)
    return written


# --------------------------------------------------------------------------------------------
# the report's section
# --------------------------------------------------------------------------------------------

#: Columns of the report's table: quantity -> header.
_REPORT_HEADS = {"nitrogen_demand": "N demand (Tg N)", "phosphorus_demand": "P demand (Tg P)",
                 "oxygen_production": "O2 production (Tg O2)"}


def read_totals(path: Path) -> list[dict]:
    """The rows of a ``derived_totals.csv`` (numbers as floats, empty cells NaN)."""
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    for r in rows:
        for k in ("mean_rate", "observed_area_km2", "total_mol", "total_Tg"):
            r[k] = float(r[k]) if r.get(k) else float("nan")
    return rows


def annual_table(rows: list[dict]) -> tuple[list[str], list[list]]:
    """Regional annual totals (Tg) of each quantity side by side: the header and one row per
    region, year and model: region, year, model, months summed, then each quantity."""
    quantities = list(dict.fromkeys(r["quantity"] for r in rows))
    acc: dict[tuple, dict] = {}
    months: dict[tuple, set] = {}
    for r in rows:
        key = (r["region"], r["month"][:4], r["model"])
        months.setdefault(key, set()).add(r["month"])
        cell = acc.setdefault(key, {})
        v = r["total_Tg"]
        if np.isfinite(v):
            cell[r["quantity"]] = cell.get(r["quantity"], 0.0) + v
    head = ["region", "year", "model", "months"] + [
        _REPORT_HEADS.get(q) or f"export, {dv.EXPORT_METHODS[q.removeprefix('export_')].label}"
        " (Tg C)" for q in quantities]
    body = [[reg, year, model_label(mod), len(months[(reg, year, mod)])]
            + [acc[(reg, year, mod)].get(q, float("nan")) for q in quantities]
            for (reg, year, mod) in acc]
    return head, body


def report_section(locate, outputs: dict) -> str:
    """The report's section "What production implies" (HTML; empty when the run has no
    derived quantities)."""
    import html

    if TOTALS_FILE not in outputs or outputs[TOTALS_FILE].get("kind") != KIND:
        return ""
    try:
        rows = read_totals(locate(TOTALS_FILE))
    except (OSError, UnicodeDecodeError, csv.Error, ValueError, KeyError) as exc:
        from euphotic.report import ReportError

        raise ReportError(f"{locate(TOTALS_FILE)}: cannot read the derived totals "
                            f"({exc})") from None
    head, body = annual_table(rows)
    q = outputs[TOTALS_FILE].get("quotient")
    quotient = f"a photosynthetic quotient of {q:g} mol O2 (mol C)-1" if q else \
        "the photosynthetic quotient given in the maps' attributes"

    def e(x) -> str:
        return html.escape(str(x), quote=True)

    cells = "\n".join(
        "<tr>" + "".join(f'<td class="text">{e(c)}</td>' for c in r[:3])
        + f"<td>{r[3]}</td>" + "".join(f"<td>{e(_fmt(v) if isinstance(v, float) else v)}</td>"
                                       for v in r[4:]) + "</tr>" for r in body)
    table = ('<div class="wide"><table id="derived">\n<thead><tr>'
             + "".join(f'<th class="text">{e(h)}</th>' for h in head[:3])
             + "".join(f"<th>{e(h)}</th>" for h in head[3:])
             + f"</tr></thead>\n<tbody>\n{cells}\n</tbody>\n</table></div>")
    return ("<h2>What production implies</h2>\n"
            "<p>Totals over the months of the run in each year (a year with fewer than 12 "
            "months is a partial sum), over the cells with a production estimate, from "
            f"<code>{TOTALS_FILE}</code>. Export by each method side by side; nitrogen and "
            "phosphorus demand with the Redfield ratio C:N:P = 106:16:1; oxygen with "
            f"{e(quotient)} (Laws 1991).</p>\n"
            f'<p class="caution">{e(dv.EXPORT_CAUTION)}</p>\n{table}')
