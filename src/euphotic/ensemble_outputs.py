"""Write the ensemble of a run with two or more models: ``npp_ensemble_YYYY-MM.nc`` per month
(CF-1.8 / ACDD-1.3: mean, minimum, maximum, standard deviation and coefficient of variation
across the models, and the number of models per cell) and ``ensemble_totals.csv`` with its
CSV-on-the-Web metadata (the same statistics of the regional totals).

I/O and metadata only: the numbers come from :mod:`euphotic.ensemble`. The run
(:func:`euphotic.pipeline._finish`) calls :func:`add_to_run` with its stage: the ensemble is
written into the stage from the members' maps and committed with everything else. An
ensemble map whose members' maps are unchanged (same fingerprints) is reused where it is.
"""

from __future__ import annotations

import csv
import json
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import __version__, ensemble, runfolder
from euphotic.outputs import (
    CAUTION,
    PUBLISHED_NAMES,
    STANDARD_NAME_VOCABULARY,
    TotalsColumn,
    coordinate_encoding,
    earth_description,
    format_cell,
    geospatial_attrs,
    grid_encoding,
    iso_utc,
    metadata_attrs,
    month_grid,
    totals_metadata_path,
)

#: Where a model id goes in file names and tables, the ensemble's name.
ENSEMBLE = "ensemble"
#: Manifest kinds of the ensemble's outputs.
MAP_KIND = "ensemble map"
TOTALS_KIND = "ensemble totals"
TOTALS_FILE = "ensemble_totals.csv"
#: Bumped when a change of the code changes the bytes of ensemble maps for the same members.
ENSEMBLE_FORMAT = 1
#: Memory for the statistics of the months computed at once (bytes; this tool's choice).
BATCH_BYTES = 256 * 2**20

#: What the spread is and is not, carried beside the run's caution.
ENSEMBLE_NOTE = (
    "The spread across models shows how much the estimate depends on the choice of model; it "
    "is not a measure of error: the models share their inputs and much of their structure, "
    "and all of them may be wrong in the same direction."
)

#: Statistic -> (long name, comment fragment) of the map variables.
_MAP_STATS = {
    "npp_mean": "mean across models",
    "npp_min": "minimum across models",
    "npp_max": "maximum across models",
    "npp_std": f"standard deviation across models (ddof={ensemble.DDOF}, divisor N - 1)",
}


def map_file(month) -> str:
    """``npp_ensemble_YYYY-MM.nc``."""
    return f"npp_{ENSEMBLE}_{np.datetime64(month, 'M')}.nc"


def _model_list(models: Sequence[str]) -> str:
    return ", ".join(f"{m} ({PUBLISHED_NAMES.get(m, m)})" for m in models)


def month_dataset(stats: xr.Dataset, *, models: Sequence[str], month, time, title: str,
                  command: str, earth: str, members: Sequence[str],
                  provenance: Mapping | None = None, metadata: Mapping | None = None
                  ) -> xr.Dataset:
    """One month of ensemble statistics (from :func:`euphotic.ensemble.map_statistics` on the
    members' ``(time, lat, lon)`` maps) as a lazy CF-1.8 / ACDD-1.3 dataset.

    Parameters
    ----------
    stats : the statistics, ``(time, lat, lon)`` with one time step, production in
        mg m-2 d-1 of carbon
    models : model ids of the members, in the run's order
    month : the calendar month
    time : the members' time stamp (mid-month)
    members : file names of the members' maps
    """
    start = np.datetime64(month, "M").astype("datetime64[D]")
    end = (np.datetime64(month, "M") + 1).astype("datetime64[D]")
    n_days = int((end - start).astype(int))
    n = len(models)
    lat, lon = stats["lat"].values, stats["lon"].values
    who = _model_list(models)
    rule = (f"Only where all {n} models ({' '.join(models)}) have a valid value; NaN "
            "elsewhere, where n_models gives how many did.")
    data = {}
    for v, what in _MAP_STATS.items():
        da = stats[v].astype(np.float32)
        da.attrs = {
            "units": "mg m-2 d-1",
            "long_name": f"net primary production of carbon, {what} of the monthly mean "
                         "daily rate",
            "cell_methods": "time: mean",
            "coverage_content_type": "modelResult",
            "comment": f"The {what} of the {n} models' monthly mean daily rates (variable npp "
                       f"of {', '.join(members)}): {who}. {rule} Integrated over the "
                       "euphotic layer; mass is of carbon.",
            "ancillary_variables": "n_models",
            "grid_mapping": "crs",
        }
        if v == "npp_mean":
            da.attrs["standard_name"] = "net_primary_productivity_of_biomass_expressed_as_carbon"
        if v == "npp_std":
            da.attrs["ddof"] = np.int16(ensemble.DDOF)
        data[v] = da
    cv = stats["npp_cv"].astype(np.float32)
    cv.attrs = {
        "units": "1",
        "long_name": "coefficient of variation of net primary production across models "
                     "(standard deviation / mean)",
        "coverage_content_type": "modelResult",
        "comment": f"npp_std / npp_mean of the {n} models ({' '.join(models)}); NaN where "
                   f"the mean is 0 (no light: every model gives 0). {rule}",
        "ancillary_variables": "n_models",
        "grid_mapping": "crs",
    }
    data["npp_cv"] = cv
    nm = stats["n_models"].astype(np.int16)
    nm.attrs = {
        "units": "1",
        "long_name": "number of models with a valid production estimate in the cell",
        "valid_min": np.int16(0),
        "valid_max": np.int16(n),
        "coverage_content_type": "qualityInformation",
        "comment": f"Out of {n} ({' '.join(models)}); the statistics are given only where it "
                   f"is {n}.",
        "grid_mapping": "crs",
    }
    data["n_models"] = nm
    ds = month_grid(data, lat, lon, start, end, earth, mid=time)
    from euphotic.models import CITATIONS

    stem = map_file(month).removesuffix(".nc")
    now = iso_utc()
    ds.attrs = {
        "Conventions": "CF-1.8, ACDD-1.3",
        "title": f"{title}: ensemble of {n} models, monthly mean net primary production, "
                 f"{np.datetime64(month, 'M')}",
        "summary": (
            f"Mean, minimum, maximum, standard deviation and coefficient of variation across "
            f"{n} models of the monthly mean daily net primary production (mg C m-2 d-1): "
            f"{who}. {rule} " + ENSEMBLE_NOTE + " " + CAUTION),
        "comment": "Ocean cells where every model has a valid estimate; n_models counts the "
                   "models with one in every cell.",
        "keywords": "net primary production, phytoplankton, model ensemble, ocean carbon",
        "standard_name_vocabulary": STANDARD_NAME_VOCABULARY,
        "cdm_data_type": "Grid",
        "model": ENSEMBLE,
        "ensemble_models": " ".join(models),
        "ensemble_size": np.int16(n),
        "ensemble_members": " ".join(members),
        "ensemble_rule": ensemble.RULE,
        "ensemble_note": ENSEMBLE_NOTE,
        "references": " ".join(dict.fromkeys(CITATIONS[m] for m in models if m in CITATIONS)),
        "caution": CAUTION,
        "time_coverage_start": f"{start}T00:00:00Z",
        "time_coverage_end": f"{end}T00:00:00Z",
        "time_coverage_duration": f"P{n_days}D",
        "time_coverage_resolution": "P1M",
        **geospatial_attrs(lat, lon),
        "date_created": now,
        "date_modified": now,
        "date_issued": now,
        "date_metadata_modified": now,
        "history": f"{now} {command} (euphotic {__version__})",
        "source": "euphotic " + __version__,
        "product_version": __version__,
        "processing_level": "L4 model output",
        **metadata_attrs(metadata, stem),
        **(provenance or {}),
    }
    return ds


def encoding(ds: xr.Dataset, chunks: Sequence[int] | None = None) -> dict:
    """float32 statistics and an int16 count, deflated, stored in ``chunks`` (the members'
    chunks) or chunked like the dask blocks."""
    blocks = chunks or getattr(ds["npp_mean"].data, "chunksize", None)
    if blocks is None or len(blocks) != 3:
        blocks = (1, min(ds.sizes["lat"], 1024), min(ds.sizes["lon"], 1024))
    chunks = (1, blocks[1], blocks[2])
    enc = {v: grid_encoding(chunks) for v in (*_MAP_STATS, "npp_cv")}
    enc["n_models"] = grid_encoding(chunks, "int16", None)
    enc.update(coordinate_encoding())
    return enc


# --------------------------------------------------------------------------------------------
# the totals table
# --------------------------------------------------------------------------------------------

#: The ensemble totals table, column by column.
TOTALS_SPEC: tuple[TotalsColumn, ...] = (
    TotalsColumn("region", "region", "region name from the run configuration", "string"),
    TotalsColumn("month", "month", "calendar month", "gYearMonth"),
    TotalsColumn("models", "models", "model ids of the ensemble, separated by spaces",
                 "string"),
    TotalsColumn("n_models", "number of models",
                 "number of models with a total for the region and month", "integer"),
    TotalsColumn("mean_total_TgC", "mean total",
                 "mean across models of total_TgC of regional_totals.csv: teragrams of carbon "
                 "fixed in the month", "decimal", "Tg", ".4f"),
    TotalsColumn("min_total_TgC", "minimum total", "smallest of the models' total_TgC",
                 "decimal", "Tg", ".4f"),
    TotalsColumn("max_total_TgC", "maximum total", "largest of the models' total_TgC",
                 "decimal", "Tg", ".4f"),
    TotalsColumn("std_total_TgC", "standard deviation of the totals",
                 f"standard deviation across models of total_TgC (ddof={ensemble.DDOF}, "
                 "divisor N - 1)", "decimal", "Tg", ".4f"),
    TotalsColumn("cv_total", "coefficient of variation",
                 "std_total_TgC / mean_total_TgC (empty where the mean is 0)", "decimal", "1",
                 ".4f"),
    TotalsColumn("min_model", "model of the minimum", "the model giving min_total_TgC",
                 "string"),
    TotalsColumn("max_model", "model of the maximum", "the model giving max_total_TgC",
                 "string"),
    TotalsColumn(
        "flag", "flag",
        "codes separated by ';', empty when fine. '<code>:<model>' (e.g. low_coverage:vgpm, "
        "no_valid_data:vgpm): that model's row of regional_totals.csv is flagged with the code; "
        "'missing:<model>': the model has no total. Either leaves the statistics empty: a "
        "model whose total rests on few days or none would set the spread. "
        f"'{ensemble.FLAG_AREA_DIFFERS}' (statistics given): the models' totals are sums over "
        f"observed areas differing by more than {ensemble.AREA_RTOL:.0%}, so the spread is in "
        "part one of coverage", "string"),
)
TOTALS_COLUMNS: list[str] = [c.name for c in TOTALS_SPEC]


def totals_rows(stats: xr.Dataset) -> list[dict]:
    """Rows of ``ensemble_totals.csv`` from :func:`euphotic.ensemble.total_statistics` on the
    ``(region, month, model)`` totals (month as datetime64)."""
    models = stats.attrs["ensemble_models"]
    rows = []
    for ri, region in enumerate(stats["region"].values):
        for mi, month in enumerate(stats["month"].values):
            def at(v, ri=ri, mi=mi):
                return stats[v].values[ri, mi]
            rows.append({
                "region": str(region), "month": str(np.datetime64(month, "M")),
                "models": models, "n_models": int(at("n_models")),
                "mean_total_TgC": float(at("mean")), "min_total_TgC": float(at("min")),
                "max_total_TgC": float(at("max")), "std_total_TgC": float(at("std")),
                "cv_total": float(at("cv")), "min_model": str(at("min_model")),
                "max_model": str(at("max_model")), "flag": str(at("flag"))})
    return rows


def write_totals_csv(rows: list[dict], path: Path) -> None:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(TOTALS_COLUMNS)
        for r in rows:
            w.writerow([format_cell(r.get(c.name), c) for c in TOTALS_SPEC])


def totals_metadata(*, models: Sequence[str], earth: str, provenance: Mapping | None = None,
                    metadata: Mapping | None = None) -> dict:
    """The W3C CSV-on-the-Web metadata of ``ensemble_totals.csv`` (JSON-LD)."""
    from euphotic.models import CITATIONS

    meta = metadata_attrs(metadata, TOTALS_FILE.removesuffix(".csv"))
    columns = []
    for c in TOTALS_SPEC:
        col = {"name": c.name, "titles": c.title, "dc:description": c.description,
               "datatype": c.datatype, "null": "", "required": c.name in ("region", "month")}
        if c.unit is not None:
            col["schema:unitText"] = c.unit
        if c.name in ("flag", "models"):
            col["separator"] = ";" if c.name == "flag" else " "
        columns.append(col)
    properties = {
        "caution": CAUTION,
        "ensemble_note": ENSEMBLE_NOTE,
        "ensemble_models": " ".join(models),
        "ensemble_rule": ("statistics only where every model has a total and no model's row is "
                          f"flagged; std with ddof={ensemble.DDOF}; cv = std / mean"),
        "euphotic_version": __version__,
        "earth_model": earth_description(earth),
        **{f"model_{m}": f"{PUBLISHED_NAMES.get(m, m)}. {CITATIONS.get(m, '')}" for m in models},
        **{k: v for k, v in meta.items() if k not in ("id", "license")},
        **{k: v for k, v in (provenance or {}).items() if k != "euphotic_config"},
    }
    return {
        "@context": ["http://www.w3.org/ns/csvw", {"@language": "en"}],
        "url": TOTALS_FILE,
        "dc:identifier": meta["id"],
        "dc:title": "Regional net primary production totals across models (euphotic ensemble)",
        "dc:description": f"Mean, minimum, maximum, standard deviation and coefficient of "
                          f"variation across {len(models)} models ({' '.join(models)}) of the "
                          "regional totals of regional_totals.csv, per region and calendar "
                          "month. " + ENSEMBLE_NOTE + " " + CAUTION,
        "dc:license": meta["license"],
        "dc:created": {"@value": iso_utc(), "@type": "xsd:dateTime"},
        "dc:references": [f"{PUBLISHED_NAMES.get(m, m)}: {CITATIONS.get(m, '')}"
                          for m in models],
        "rdfs:comment": CAUTION,
        "schema:additionalProperty": [
            {"@type": "schema:PropertyValue", "schema:name": k, "schema:value": v}
            for k, v in properties.items()],
        "tableSchema": {"columns": columns, "primaryKey": ["region", "month"]},
    }


# --------------------------------------------------------------------------------------------
# into a run's stage
# --------------------------------------------------------------------------------------------


def fingerprint(member_fingerprints: Sequence[str], models: Sequence[str]) -> str:
    """An ensemble map's fingerprint: its members' map fingerprints (which cover the inputs,
    the configuration and the tool version), their models and the ensemble's format."""
    return runfolder.config_fingerprint([ENSEMBLE_FORMAT, __version__, list(models),
                                         list(member_fingerprints)])


def add_to_run(cfg, months: Sequence, stage: runfolder.Stage, entries: dict[str, dict],
               keep: set[str], previous: dict, *, map_names: Mapping[tuple[str, str], str],
               rows: list[dict], command: str, provenance: Mapping) -> list[str]:
    """Write the ensemble of a run with two or more models into its ``stage`` and list it in
    ``entries`` (the run's manifest entries); nothing for a run of one model.

    Ensemble maps whose fingerprint (:func:`fingerprint`) matches the previous manifest and
    that are in place unchanged are reused (added to ``keep``). The maps are computed from the
    members' files as the run staged or kept them, all months in one dask computation.
    ``rows`` are the run's regional totals rows (:func:`euphotic.aggregate.finish_totals`).
    Returns the names of the ensemble's outputs.
    """
    import dask.array as da

    from euphotic.results import _open_map, totals_from_rows

    models = list(cfg.models)
    if len(models) < 2:
        return []
    out_dir = stage.path.parent
    prev_outputs = previous.get("outputs", {})
    names, opened, todo = [], [], []
    stored = None  # the members' stored chunks
    try:
        for month in months:
            mo = str(np.datetime64(month, "M"))
            members = [map_names[(m, mo)] for m in models]
            fp = fingerprint([entries[n]["fingerprint"] for n in members], models)
            name = map_file(mo)
            names.append(name)
            entry = {"kind": MAP_KIND, "model": ENSEMBLE, "month": mo, "models": models,
                     "members": members, "fingerprint": fp}
            old = prev_outputs.get(name)
            if old and old.get("fingerprint") == fp and runfolder.intact(out_dir / name, old):
                entries[name] = old
                keep.add(name)
                continue
            maps = []
            for n in members:
                ds = _open_map(out_dir / n if n in keep else stage.file(n), {})
                opened.append(ds)
                maps.append(ds["npp"].data)
            todo.append((mo, name, members, ds["time"].values[0], ds["lat"].values,
                         ds["lon"].values, da.stack(maps)))  # (model, time = 1, lat, lon)
            stored = stored or ds["npp"].encoding.get("chunksizes")
            entries[name] = entry
        if todo:
            # the statistics of a batch of months in one computation, held in memory (at
            # most about BATCH_BYTES), then written: (model, time, lat, lon)
            _, _, _, _, lat, lon, _ = todo[0]
            per_month = lat.size * lon.size * (5 * 8 + 2)
            step = max(1, BATCH_BYTES // per_month)
            for b in range(0, len(todo), step):
                part = todo[b: b + step]
                x = xr.DataArray(da.concatenate([t[-1] for t in part], axis=1),
                                 dims=(ensemble.MODEL_DIM, "time", "lat", "lon"),
                                 coords={ensemble.MODEL_DIM: models, "lat": lat, "lon": lon})
                with warnings.catch_warnings():  # all-NaN cells: NaN, as the rule says
                    warnings.filterwarnings("ignore", "invalid value encountered",
                                            RuntimeWarning)
                    warnings.filterwarnings("ignore", "Degrees of freedom", RuntimeWarning)
                    stats = ensemble.map_statistics(x).compute()
                for k, (mo, name, members, time, _, _, _) in enumerate(part):
                    ds = month_dataset(stats.isel(time=slice(k, k + 1)), models=models,
                                       month=mo, time=time, title=cfg.title, command=command,
                                       earth=cfg.earth, members=members,
                                       provenance=provenance, metadata=cfg.metadata)
                    ds.to_netcdf(stage.file(name), engine="netcdf4", encoding=encoding(ds, stored),
                                 unlimited_dims=["time"])
    finally:
        for ds in opened:
            ds.close()
    for name in names:
        if name not in keep:
            entries[name].update(runfolder.stat_entry(stage.file(name)))
    if rows:
        totals = totals_from_rows(rows, models)
        stats = ensemble.total_statistics(totals["total"], totals["flag"],
                                          totals["observed_area"])
        path = stage.file(TOTALS_FILE)
        write_totals_csv(totals_rows(stats), path)
        side = totals_metadata_path(path)
        side.write_text(json.dumps(totals_metadata(models=models, earth=cfg.earth,
                                                   provenance=provenance,
                                                   metadata=cfg.metadata),
                                   indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        entries[TOTALS_FILE] = {"kind": TOTALS_KIND, "models": models,
                                **runfolder.stat_entry(path)}
        entries[side.name] = {"kind": "table metadata", "of": TOTALS_FILE,
                              **runfolder.stat_entry(side)}
        names += [TOTALS_FILE, side.name]
    return names
