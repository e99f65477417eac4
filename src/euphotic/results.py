"""Open what a run produced as xarray objects: the monthly maps of every model as one lazy
Dataset, and the regional totals as a small labelled Dataset.

Both read the *committed* run of an output folder, as its manifest (``euphotic_manifest.json``,
see :mod:`euphotic.runfolder`) lists it: files are found through the manifest, never by their
names, and each one is checked against the size and modification time the manifest recorded.
A run writing into the folder at the same time is no obstacle (its outputs stay in its staging
folder until it commits); a commit that a kill interrupted is, because the folder then holds
part of two runs.

The layout of the returned Datasets is a contract with :mod:`euphotic.compare` (the results
schema): maps ``(model, time, lat, lon)`` with ``npp``, ``coverage`` and ``n_valid_days``;
totals ``(region, month, model)`` with ``mean_npp``, ``observed_area``, ``ocean_area``,
``coverage``, ``total``, ``total_filled`` and ``flag``.

Nothing here computes on the grid: the maps stay dask arrays in the files' own chunks.
"""

from __future__ import annotations

import json
import os
import socket
import time as _time
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import runfolder
from euphotic.errors import EuphoticError, NoRunError
from euphotic.outputs import CAUTION, PUBLISHED_NAMES, REGIONS_FILE, TOTALS_SPEC

#: Variables of a map file that the maps Dataset carries (the rest, bounds and the CRS
#: variable, is not decoded at all).
MAP_VARIABLES = ("npp", "coverage", "n_valid_days")
_SKIP_VARIABLES = ["time_bnds", "lat_bnds", "lon_bnds", "crs"]

#: Totals table column (``outputs.TOTALS_SPEC``) -> variable of the totals Dataset.
TOTALS_VARIABLES: dict[str, str] = {
    "mean_npp_mgC_m-2_d-1": "mean_npp",
    "observed_area_km2": "observed_area",
    "ocean_area_km2": "ocean_area",
    "coverage_fraction": "coverage",
    "total_TgC": "total",
    "total_filled_TgC": "total_filled",
    "flag": "flag",
}

#: The totals that are masses of carbon: long name and comment. Their ``units`` stay "Tg"
#: (teragrams), which UDUNITS parses as CF asks; "TgC" of the CSV column names is not a
#: UDUNITS unit, so "of carbon" is said here instead.
CARBON_TOTALS: dict[str, dict[str, str]] = {
    "total_TgC": {
        "long_name": "total carbon fixed in the month",
        "comment": "mass of carbon (Tg = 1e9 kg of carbon; the table's column total_TgC)"},
    "total_filled_TgC": {
        "long_name": "total carbon fixed in the month (gaps filled)",
        "comment": "mass of carbon (Tg = 1e9 kg of carbon; the table's column "
                   "total_filled_TgC)"},
}

#: How long a reader waits for a run that is committing right now (its renames take
#: milliseconds) before it calls the folder inconsistent, in seconds.
COMMIT_WAIT_S = 5.0
#: Times the maps are opened again when a run commits while they are being opened.
_OPEN_ATTEMPTS = 3


class ResultsError(EuphoticError):
    """An output folder cannot be read as one committed run."""


class InterruptedCommitError(ResultsError):
    """A kill interrupted a commit: the folder holds parts of two runs until a run completes it."""


class OutputChangedError(ResultsError):
    """An output the manifest lists is missing, or differs from what the run wrote."""


class SelectionError(ResultsError):
    """A requested model or month is not in the run."""


# --------------------------------------------------------------------------------------------
# the committed run
# --------------------------------------------------------------------------------------------


def _committing(folder: Path) -> list[Path]:
    """Stage folders holding a commit plan: a commit is under way or was interrupted."""
    return sorted(p for p in folder.glob(runfolder.STAGE_PREFIX + "*")
                  if p.is_dir() and (p / runfolder.COMMIT_NAME).exists())


def _writer_running(folder: Path) -> bool:
    """A live process on this host holds the folder's lock (by the text it wrote there)."""
    try:
        info = json.loads((folder / runfolder.LOCK_NAME).read_text())
        pid = int(info["pid"])
    except (OSError, ValueError, KeyError, TypeError):
        return False
    if info.get("state") != "running" or info.get("host") != socket.gethostname():
        return False
    return runfolder.pid_alive(pid)


def _recorded_stat(path: Path) -> dict:
    """Size and modification time as the run recorded them in its manifest (for a Zarr store:
    the bytes of all its files and the store folder's own modification time)."""
    return runfolder.stat_entry(path)  # the one definition the manifest is written with


def _check_output(folder: Path, name: str, entry: dict) -> Path:
    path = folder / name
    try:
        st = _recorded_stat(path)
    except OSError:
        raise OutputChangedError(
            f"{path}: listed in the manifest of the run in {folder} but missing; run that "
            "run again to rewrite it") from None
    if st["bytes"] != entry.get("bytes") or st["mtime_ns"] != entry.get("mtime_ns"):
        what = (f"size {st['bytes']} bytes, the manifest says {entry.get('bytes')}"
                if st["bytes"] != entry.get("bytes") else "modification time differs")
        raise OutputChangedError(
            f"{path}: changed since the run in {folder} wrote it ({what}); run that run "
            "again to rewrite it")
    return path


def _read_once(folder: Path) -> dict:
    if _committing(folder):
        raise InterruptedCommitError(
            f"the last run in {folder} was interrupted while committing; run it again to "
            "complete it")
    man_path = folder / runfolder.MANIFEST_NAME
    if not folder.is_dir():
        raise NoRunError(f"no euphotic run in {folder}: no such folder")
    try:
        manifest = json.loads(man_path.read_text())
    except FileNotFoundError:
        raise NoRunError(
            f"no euphotic run in {folder}: it has no {runfolder.MANIFEST_NAME}") from None
    except (OSError, ValueError) as exc:
        raise NoRunError(
            f"no euphotic run in {folder}: {runfolder.MANIFEST_NAME} cannot be read "
            f"({exc.__class__.__name__})") from None
    if not isinstance(manifest, dict) or manifest.get("tool") != "euphotic" \
            or not isinstance(manifest.get("outputs"), dict):
        raise NoRunError(
            f"no euphotic run in {folder}: {runfolder.MANIFEST_NAME} is not a euphotic manifest")
    for name, entry in manifest["outputs"].items():
        if entry.get("kind") == "map":
            _check_output(folder, name, entry)
    return manifest


def committed_manifest(folder: str | os.PathLike) -> dict:
    """The manifest of the run committed in ``folder``, its maps checked to be in place.

    Every map the manifest lists must be there with the size and modification time it
    recorded (the totals in the manifest are the sums of those maps). A run that is committing
    at this moment (a live process holds the folder's lock) is waited for, up to
    :data:`COMMIT_WAIT_S` seconds.

    Raises
    ------
    NoRunError
        No manifest (no run was ever committed here), or one that cannot be read.
    InterruptedCommitError
        A stage folder holds a commit plan and no run is completing it.
    OutputChangedError
        A map the manifest lists is missing or changed (size or modification time).
    """
    path = Path(folder).absolute()
    deadline = _time.monotonic() + COMMIT_WAIT_S
    while True:
        try:
            return _read_once(path)
        except (InterruptedCommitError, OutputChangedError):
            # a run committing right now renames its files and then its manifest: read again
            if _writer_running(path) and _time.monotonic() < deadline:
                _time.sleep(0.05)
                continue
            raise


def _map_entries(manifest: dict) -> list[tuple[str, dict]]:
    return [(n, e) for n, e in manifest["outputs"].items() if e.get("kind") == "map"]


def _month(value) -> np.datetime64:
    return np.datetime64(value, "M")


def _month_coords(months: list[np.datetime64]) -> tuple[np.ndarray, np.ndarray]:
    """First day of each month (datetime64[ns]) and its number of days."""
    first = np.array(months, dtype="datetime64[M]")
    days = ((first + 1).astype("datetime64[D]") - first.astype("datetime64[D]")).astype(int)
    return first.astype("datetime64[D]").astype("datetime64[ns]"), days.astype(np.int64)


def manifest_coverage_rule(manifest: dict) -> tuple[float, str, str]:
    """The coverage rule a run recorded: ``(min_coverage, low_coverage, source)``.

    ``min_coverage`` (0-1) and ``low_coverage`` (``"flag"``: values below it are kept and
    flagged; ``"drop"``: comparisons treat them as missing) as the run's ``[run]`` keys set
    them; ``source`` is ``"run"``, or ``"default"`` for a run written before euphotic recorded
    its rule (then this tool's defaults, 0.5 and "flag", which such runs flagged by).
    """
    from euphotic.aggregate import DEFAULT_MIN_COVERAGE

    rule = manifest.get("coverage_rule")
    if isinstance(rule, dict) and rule.get("low_coverage") in ("flag", "drop"):
        return float(rule["min_coverage"]), str(rule["low_coverage"]), "run"
    return DEFAULT_MIN_COVERAGE, "flag", "default"


def coverage_rule(folder: str | os.PathLike) -> tuple[float, str, str]:
    """The coverage rule of the run committed in ``folder`` (see
    :func:`manifest_coverage_rule`)."""
    return manifest_coverage_rule(committed_manifest(Path(folder).absolute()))


def _run_attrs(folder: Path, manifest: dict, models: list[str], cites: dict[str, str]) -> dict:
    min_cov, low, source = manifest_coverage_rule(manifest)
    attrs = {
        "caution": manifest.get("caution") or CAUTION,
        "euphotic_folder": str(folder),
        "euphotic_run_id": str(manifest.get("run_id")),
        "euphotic_version": str(manifest.get("version")),
        # the run's coverage rule: euphotic.compare uses it unless told otherwise
        "min_coverage": min_cov,
        "low_coverage": low,
        "coverage_rule_source": source,
    }
    for m in models:
        attrs[f"model_name_{m}"] = PUBLISHED_NAMES.get(m, m)
        attrs[f"citation_{m}"] = cites[m]
    return attrs


def _citation(model: str, fallback: str | None = None) -> str:
    from euphotic.models import CITATIONS

    return fallback or CITATIONS.get(model, "not recorded")


# --------------------------------------------------------------------------------------------
# maps
# --------------------------------------------------------------------------------------------


def _open_map(path: Path, chunks) -> xr.Dataset:
    kw = {"engine": "zarr", "consolidated": True} if path.is_dir() else {"engine": "netcdf4"}
    try:
        ds = xr.open_dataset(path, chunks=chunks, drop_variables=_SKIP_VARIABLES,
                             decode_timedelta=False, **kw)
    except (OSError, ValueError, KeyError) as exc:
        raise OutputChangedError(
            f"{path}: cannot be opened as a map ({exc.__class__.__name__}: "
            f"{' '.join(str(exc).split())[:200]})") from None
    missing = [v for v in MAP_VARIABLES if v not in ds.variables]
    if missing or ds[MAP_VARIABLES[0]].dims != ("time", "lat", "lon") or ds.sizes["time"] != 1:
        ds.close()
        raise OutputChangedError(
            f"{path}: not a euphotic month map (expected {', '.join(MAP_VARIABLES)} on "
            "(time, lat, lon) with one time step)")
    return ds


def _values(ds: xr.Dataset, v: str):
    """Lazy values of a map variable: read by :mod:`euphotic.chunkread` (whole stored chunks
    decompressed outside the HDF5 lock, so threads read in parallel; identical values, then
    CF-decoded as xarray does) where the file allows it and the blocks are the stored chunks;
    otherwise the netCDF library's reads of the opened file."""
    from euphotic import chunkread
    from euphotic.cfdecode import decode_raw

    src = ds.encoding.get("source")
    if src and Path(src).is_file() and chunkread.enabled():
        raw = chunkread.dask_array(src, v)
        if raw is not None and raw.shape == ds[v].shape and raw.chunks == ds[v].data.chunks:
            return decode_raw(raw, ds[v].dims, v, ds[v].encoding)
    return ds[v].data


def _manifest_id(folder: Path) -> tuple | None:
    """Identity of the manifest file: a commit replaces it (new inode and time)."""
    try:
        st = (folder / runfolder.MANIFEST_NAME).stat()
    except OSError:
        return None
    return st.st_ino, st.st_mtime_ns, st.st_size


def _of_months(path: Path, entries: list, months, what: str) -> list:
    """The manifest entries of the months asked for, or SelectionError naming those the run
    has none of."""
    wanted = {_month(m) for m in ([months] if isinstance(months, str) else months)}
    have = {_month(e["month"]) for _, e in entries}
    unknown = [str(m) for m in sorted(wanted) if m not in have]
    if unknown:
        raise SelectionError(
            f"{path}: no {what} of month(s) {', '.join(unknown)} in this run (it has "
            f"{', '.join(str(m) for m in sorted(have)) or 'none'})")
    return [(n, e) for n, e in entries if _month(e["month"]) in wanted]


def _select(path: Path, manifest: dict, models, months) -> tuple[list[str], list]:
    """The run's models (in its order) and the map entries of the requested models/months."""
    entries = _map_entries(manifest)
    run_models = list(dict.fromkeys(
        [m for m in manifest.get("models", []) if any(e["model"] == m for _, e in entries)]
        + [e["model"] for _, e in entries]))
    if models is not None:
        models = [models] if isinstance(models, str) else list(models)
        unknown = [m for m in models if m not in run_models]
        if unknown:
            raise SelectionError(
                f"{path}: no maps of model(s) {', '.join(unknown)} in this run "
                f"(it has {', '.join(run_models) or 'none'})")
        run_models = list(dict.fromkeys(models))
    entries = [(n, e) for n, e in entries if e["model"] in run_models]
    if months is not None:
        entries = _of_months(path, entries, months, "maps")
    if not entries:
        raise SelectionError(f"{path}: the run has no month maps to open")
    return run_models, entries


def _open_files(path: Path, entries, chunks) -> tuple[dict, xr.Dataset]:
    """Each map file opened lazily, keyed by (model, month); all on one grid."""
    files: dict[tuple[str, np.datetime64], xr.Dataset] = {}
    ref = None
    for name, e in entries:
        ds = _open_map(path / name, chunks)
        if ref is None:
            ref = ds
        elif ds.sizes["lat"] != ref.sizes["lat"] or ds.sizes["lon"] != ref.sizes["lon"] \
                or not np.array_equal(ds["lat"].values, ref["lat"].values) \
                or not np.array_equal(ds["lon"].values, ref["lon"].values):
            for d in [*files.values(), ds]:
                d.close()
            raise OutputChangedError(
                f"{path / name}: its grid differs from that of {path / entries[0][0]}")
        files[(e["model"], _month(e["month"]))] = ds
    return files, ref


def open_maps(
    folder: str | os.PathLike,
    *,
    models: Iterable[str] | None = None,
    months: Iterable | None = None,
    chunks: dict | None = None,
) -> xr.Dataset:
    """The monthly maps of the run committed in ``folder`` as one lazy Dataset.

    Parameters
    ----------
    folder : the run's output folder (holding ``euphotic_manifest.json``)
    models : model ids to include (default: every model of the run, in the run's order)
    months : months to include, as ``"YYYY-MM"`` strings or datetime64 (default: all)
    chunks : dask chunks per file, as for :func:`xarray.open_dataset`; the default ``{}``
        keeps the chunks the files were written in (one month, the map's blocks)

    Returns
    -------
    xarray.Dataset
        Dimensions ``(model, time, lat, lon)``. ``npp`` (float32, mg m-2 d-1 of carbon, the
        mean daily rate over the month), ``coverage`` (float32, 1: fraction of the month's
        days with a valid estimate) and ``n_valid_days`` (float32 count; the files' int16 with
        fill -1 decoded, missing as NaN), all NaN off the ocean and where a model has no map
        for a month. Coordinates ``model``, ``time`` (the files' mid-month stamps), ``month``
        (first day of the month) and ``days_in_month`` along ``time``, ``lat`` and ``lon``
        (degrees). Attributes: ``caution``, ``euphotic_folder``, ``euphotic_run_id``,
        ``euphotic_version``, the run's coverage rule (``min_coverage``, 0-1;
        ``low_coverage``, ``"flag"`` or ``"drop"``; ``coverage_rule_source``, see
        :func:`manifest_coverage_rule`), and per model ``model_name_<id>`` and
        ``citation_<id>``.

    Raises
    ------
    NoRunError, InterruptedCommitError, OutputChangedError
        See :func:`committed_manifest`; also a map that cannot be opened or whose grid differs
        from the others (:class:`OutputChangedError`).
    SelectionError
        A requested model or month that the run does not have.

    Notes
    -----
    Values are read only when computed. A later run into the same folder replaces the files:
    load (``.load()``) or write what you need before running again into that folder.
    """
    import dask.array as da

    path = Path(folder).absolute()
    for attempt in range(_OPEN_ATTEMPTS):
        before = _manifest_id(path)
        manifest = committed_manifest(path)
        run_models, entries = _select(path, manifest, models, months)
        files, ref = _open_files(path, entries, {} if chunks is None else chunks)
        if _manifest_id(path) == before or attempt == _OPEN_ATTEMPTS - 1:
            break
        for ds in files.values():  # a run committed while the files were opened: again
            ds.close()
    month_list = sorted({mo for _, mo in files})
    index = {m: i for i, m in enumerate(month_list)}

    times = np.full(len(month_list), np.datetime64("NaT"), dtype="datetime64[ns]")
    for (_, mo), ds in files.items():
        if np.isnat(times[index[mo]]):
            times[index[mo]] = ds["time"].values[0]
    cites = {}
    for m in run_models:
        attr = next((ds.attrs.get("model_citation") for (mm, _), ds in files.items() if mm == m),
                    None)
        cites[m] = _citation(m, attr)

    data_vars = {}
    for v in MAP_VARIABLES:
        template = ref[v]
        per_model = []
        for m in run_models:
            blocks = []
            for mo in month_list:
                ds = files.get((m, mo))
                if ds is not None:
                    blocks.append(_values(ds, v))
                else:  # no map of this model for this month: NaN, lazily, in the same chunks
                    blocks.append(da.full(template.shape, np.nan, dtype=template.dtype,
                                          chunks=template.data.chunks))
            per_model.append(da.concatenate(blocks, axis=0))
        attrs = {k: val for k, val in template.attrs.items() if k != "grid_mapping"}
        data_vars[v] = (("model", "time", "lat", "lon"), da.stack(per_model, axis=0), attrs)

    first, ndays = _month_coords(month_list)
    out = xr.Dataset(
        data_vars,
        coords={
            "model": ("model", np.array(run_models, dtype=str)),
            "time": ("time", times, dict(ref["time"].attrs)),
            "month": ("time", first, {"long_name": "first day of the month"}),
            "days_in_month": ("time", ndays, {"long_name": "number of days of the month",
                                              "units": "1"}),
            "lat": ref["lat"].variable.to_base_variable(),
            "lon": ref["lon"].variable.to_base_variable(),
        },
        attrs=_run_attrs(path, manifest, run_models, cites),
    )
    out["time"].attrs.pop("bounds", None)  # time bounds are not carried
    for c in ("lat", "lon"):
        out[c].attrs.pop("bounds", None)
    return out


# --------------------------------------------------------------------------------------------
# regional totals
# --------------------------------------------------------------------------------------------


def open_totals(folder: str | os.PathLike) -> xr.Dataset:
    """The regional totals of the run committed in ``folder``, at full precision.

    Built from the rows the manifest keeps for each month map (the numbers the totals table
    ``regional_totals.csv`` prints rounded), not from the table.

    Parameters
    ----------
    folder : the run's output folder (holding ``euphotic_manifest.json``)

    Returns
    -------
    xarray.Dataset
        Dimensions ``(region, month, model)``; coordinates ``region`` (the configured names,
        in the run's order), ``month`` (first day of the month, datetime64[ns]), ``model`` and
        ``days_in_month`` along ``month``. float64 variables, each with its ``units``:
        ``mean_npp`` (mg m-2 d-1 of carbon), ``observed_area`` and ``ocean_area`` (km2),
        ``coverage`` (1), ``total`` and ``total_filled`` (Tg of carbon fixed in the month); and
        ``flag`` (text, quality codes separated by ";", "" when fine). Combinations without a
        row are NaN with flag "". Attributes as :func:`open_maps`.

    Raises
    ------
    NoRunError, InterruptedCommitError, OutputChangedError
        See :func:`committed_manifest`.
    """
    path = Path(folder).absolute()
    manifest = committed_manifest(path)
    entries = _map_entries(manifest)
    rows = [r for _, e in entries for r in e.get("rows", [])]
    models = list(dict.fromkeys(
        [m for m in manifest.get("models", []) if any(e["model"] == m for _, e in entries)]
        + [e["model"] for _, e in entries]))
    month_list = sorted({_month(e["month"]) for _, e in entries})
    out = totals_from_rows(rows, models, month_list)
    out.attrs = _run_attrs(path, manifest, models, {m: _citation(m) for m in models})
    return out


def totals_from_rows(rows: list[dict], models: list[str], months: list | None = None
                     ) -> xr.Dataset:
    """The ``(region, month, model)`` totals Dataset of :func:`open_totals` (without its run
    attributes) from totals rows (:func:`euphotic.aggregate.finish_totals`; missing numbers
    None or NaN). ``months``: the months to hold (default: those of the rows)."""
    month_list = sorted({_month(m) for m in months} if months is not None
                        else {_month(r["month"]) for r in rows})
    regions = list(dict.fromkeys(r["region"] for r in rows))
    ri = {r: i for i, r in enumerate(regions)}
    mi = {m: i for i, m in enumerate(month_list)}
    di = {m: i for i, m in enumerate(models)}
    shape = (len(regions), len(month_list), len(models))
    spec = {c.name: c for c in TOTALS_SPEC}
    numeric = [c for c in TOTALS_VARIABLES if c != "flag"]
    values = {c: np.full(shape, np.nan) for c in numeric}
    flags = np.full(shape, "", dtype=object)
    for r in rows:
        if r["model"] not in di:
            continue
        at = (ri[r["region"]], mi[_month(r["month"])], di[r["model"]])
        for c in numeric:
            v = r.get(c)
            values[c][at] = np.nan if v is None else float(v)
        flags[at] = r.get("flag") or ""

    def attrs(col: str) -> dict:
        c = spec[col]
        a = {"long_name": c.title, "description": c.description}
        if c.unit is not None:
            a["units"] = c.unit
        a.update(CARBON_TOTALS.get(col, {}))
        return a

    data_vars = {TOTALS_VARIABLES[c]: (("region", "month", "model"), values[c], attrs(c))
                 for c in numeric}
    data_vars["flag"] = (("region", "month", "model"), flags.astype(str), attrs("flag"))
    first, ndays = _month_coords(month_list)
    return xr.Dataset(
        data_vars,
        coords={
            "region": ("region", np.array(regions, dtype=str)),
            "month": ("month", first, {"long_name": "first day of the month"}),
            "model": ("model", np.array(models, dtype=str)),
            "days_in_month": ("month", ndays, {"long_name": "number of days of the month",
                                               "units": "1"}),
        },
    )


# --------------------------------------------------------------------------------------------
# the ensemble of a run of several models
# --------------------------------------------------------------------------------------------

#: Variables of an ensemble map file (:mod:`euphotic.ensemble_outputs`).
ENSEMBLE_VARIABLES = ("npp_mean", "npp_min", "npp_max", "npp_std", "npp_cv", "n_models")
#: The ensemble where a model id goes, and the manifest kinds of its outputs.
ENSEMBLE = "ensemble"
ENSEMBLE_MAP_KIND = "ensemble map"
ENSEMBLE_TOTALS_KIND = "ensemble totals"


class NoEnsembleError(ResultsError):
    """The run has no ensemble (it ran a single model)."""


def _no_ensemble(path: Path, manifest: dict) -> NoEnsembleError:
    ran = ", ".join(manifest.get("models", [])) or "no model"
    return NoEnsembleError(f"{path}: the run has no ensemble outputs (an ensemble needs two or "
                           f"more models; it ran {ran})")


def open_ensemble_maps(folder: str | os.PathLike, *, months: Iterable | None = None,
                       chunks: dict | None = None) -> xr.Dataset:
    """The ensemble maps of the run committed in ``folder`` as one lazy Dataset.

    Parameters
    ----------
    folder : the run's output folder
    months : months to include, ``"YYYY-MM"`` or datetime64 (default: all)
    chunks : dask chunks per file (default: the files' own)

    Returns
    -------
    xarray.Dataset
        Dimensions ``(time, lat, lon)``: ``npp_mean``, ``npp_min``, ``npp_max``, ``npp_std``
        (float32, mg m-2 d-1 of carbon), ``npp_cv`` (float32, 1) and ``n_models`` (int16),
        with the coordinates of :func:`open_maps` (``time``, ``month``, ``days_in_month``,
        ``lat``, ``lon``). Attributes as :func:`open_maps` for the members, and
        ``ensemble_models``, ``ensemble_rule``.

    Raises
    ------
    NoEnsembleError
        The run has no ensemble maps (one model).
    SelectionError
        A requested month that the ensemble does not have.
    NoRunError, InterruptedCommitError, OutputChangedError
        As :func:`open_maps`; every ensemble map is checked against the manifest.
    """
    path = Path(folder).absolute()
    manifest = committed_manifest(path)
    entries = sorted(((n, e) for n, e in manifest["outputs"].items()
                      if e.get("kind") == ENSEMBLE_MAP_KIND), key=lambda x: x[1]["month"])
    if not entries:
        raise _no_ensemble(path, manifest)
    if months is not None:
        entries = _of_months(path, entries, months, "ensemble maps")
    files = []
    try:
        for name, e in entries:
            p = _check_output(path, name, e)
            try:
                ds = xr.open_dataset(p, engine="netcdf4", chunks={} if chunks is None else chunks,
                                     drop_variables=_SKIP_VARIABLES, decode_timedelta=False)
            except (OSError, ValueError, KeyError) as exc:
                raise OutputChangedError(f"{p}: cannot be opened as an ensemble map "
                                         f"({exc.__class__.__name__})") from None
            files.append(ds)
            missing = [v for v in ENSEMBLE_VARIABLES if v not in ds.variables]
            if missing:
                raise OutputChangedError(f"{p}: not a euphotic ensemble map (no "
                                         f"{', '.join(missing)})")
        out = xr.concat([ds[list(ENSEMBLE_VARIABLES)] for ds in files], dim="time",
                        coords="minimal", compat="override", join="override")
    except BaseException:
        for ds in files:
            ds.close()
        raise
    first, ndays = _month_coords([_month(e["month"]) for _, e in entries])
    out = out.assign_coords(
        month=("time", first, {"long_name": "first day of the month"}),
        days_in_month=("time", ndays, {"long_name": "number of days of the month",
                                       "units": "1"}))
    for v in out.data_vars.values():
        v.attrs.pop("grid_mapping", None)
    for c in ("time", "lat", "lon"):
        out[c].attrs.pop("bounds", None)
    models = list(entries[0][1].get("models") or manifest.get("models", []))
    attrs = _run_attrs(path, manifest, models, {m: _citation(m) for m in models})
    attrs["ensemble_models"] = " ".join(models)
    attrs["ensemble_rule"] = files[0].attrs.get("ensemble_rule", "")
    out.attrs = attrs
    return out


def open_ensemble_totals(folder: str | os.PathLike) -> xr.Dataset:
    """The statistics across models of the regional totals of the run committed in
    ``folder``, at full precision (``ensemble_totals.csv`` prints them rounded).

    Returns
    -------
    xarray.Dataset
        Dimensions ``(region, month)``: ``mean``, ``min``, ``max``, ``std`` (Tg of carbon
        fixed in the month), ``cv`` (1), ``n_models``, ``min_model``, ``max_model`` and
        ``flag``, as :func:`euphotic.ensemble.total_statistics` makes them from
        :func:`open_totals`. Attributes as :func:`open_totals`, and ``ensemble_models``,
        ``ensemble_rule``.

    Raises
    ------
    NoEnsembleError
        The run has no ensemble totals (one model, or no regions).
    """
    from euphotic.ensemble import total_statistics

    path = Path(folder).absolute()
    manifest = committed_manifest(path)
    entry = next((e for e in manifest["outputs"].values()
                  if e.get("kind") == ENSEMBLE_TOTALS_KIND), None)
    if entry is None:
        raise _no_ensemble(path, manifest)
    totals = open_totals(path)
    models = [m for m in entry.get("models", []) if m in totals["model"].values] or None
    if models is not None:
        totals = totals.sel(model=models)
    stats = total_statistics(totals["total"], totals["flag"], totals["observed_area"])
    stats.attrs = {**totals.attrs, **stats.attrs}
    return stats


# --------------------------------------------------------------------------------------------
# regions
# --------------------------------------------------------------------------------------------


def _regions_file(folder: str | os.PathLike) -> Path:
    path = Path(folder).absolute()
    manifest = committed_manifest(path)
    names = [n for n, e in manifest["outputs"].items() if e.get("kind") == "regions"]
    if not names:
        raise NoRunError(
            f"{path}: the run recorded no region masks (runs before euphotic wrote "
            f"{REGIONS_FILE}); run it again to write them")
    return _check_output(path, names[0], manifest["outputs"][names[0]])


def open_region_masks(folder: str | os.PathLike):
    """The region masks of the run committed in ``folder`` as the run used them.

    Returns
    -------
    euphotic.aggregate.RegionMasks
        A mapping region name -> boolean (lat, lon) mask (unpacked on access), in the run's
        order, with ``lat``, ``lon`` (degrees) and ``cell_area_m2`` (m2 of a cell in each
        row) added as attributes.
    """
    from euphotic.aggregate import RegionMasks

    path = _regions_file(folder)
    with xr.open_dataset(path, engine="netcdf4") as ds:
        ds = ds.load()
    names = [str(n) for n in ds["region_name"].values]
    attrs = ds["region_planes"].attrs
    planes = ds["region_planes"].values.astype(attrs.get("packed_type", "uint16"))
    bit_regions = tuple(int(b) for b in np.atleast_1d(attrs.get("bit_regions", [])))
    win = ds["region_window"].values.reshape(len(names), 4)
    windows = [(slice(int(a), int(b)), slice(int(c), int(d))) for a, b, c, d in win]
    masks = RegionMasks(names, planes if planes.shape[0] else None,
                        n_label_layers=int(attrs.get("n_label_layers", 0)),
                        bit_regions=bit_regions, windows=windows)
    masks.lat = ds["lat"].values
    masks.lon = ds["lon"].values
    masks.cell_area_m2 = ds["cell_area"].values
    masks.region_sources = ds.attrs.get("region_sources", "")
    return masks


def open_regions(folder: str | os.PathLike) -> xr.Dataset:
    """The run's regions as a labelled Dataset, for notebooks and per-cell region work.

    Returns
    -------
    xarray.Dataset
        ``mask (region, lat, lon)``: bool, True where the cell centre is inside the region
        (dask-backed, one chunk per region, unpacked only when computed); ``cell_area
        (lat, lon)``: m2 (dask-backed broadcast of the per-row areas). Coordinates ``region``
        (names, in the run's order), ``lat``, ``lon``. Attributes: ``region_sources`` (how
        each region was defined).
    """
    import dask
    import dask.array as dsa

    masks = open_region_masks(folder)
    shape = (len(masks.lat), len(masks.lon))
    parts = [dsa.from_delayed(dask.delayed(masks.__getitem__)(n), shape=shape, dtype=bool)
             for n in masks.names]
    mask = (dsa.stack(parts) if parts else dsa.zeros((0, *shape), dtype=bool))
    area = dsa.broadcast_to(dsa.from_array(masks.cell_area_m2[:, None]), shape)
    return xr.Dataset(
        {
            "mask": (("region", "lat", "lon"), mask,
                     {"long_name": "cell centre inside the region"}),
            "cell_area": (("lat", "lon"), area, {"standard_name": "cell_area", "units": "m2"}),
        },
        coords={"region": masks.names, "lat": masks.lat, "lon": masks.lon},
        attrs={"region_sources": masks.region_sources},
    )
