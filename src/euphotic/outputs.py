"""Write results: CF-1.8 / ACDD-1.3 monthly maps (NetCDF or Zarr), the regional totals CSV
and its CSV-on-the-Web metadata sidecar, and the metadata they carry.

Metadata only: nothing here computes on the grid. Each writer writes exactly to the path it
is given; the pipeline decides where (temporary names, staging) and when files are put in
place.
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import json
import math
import os
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import __version__
from euphotic.aggregate import MonthlyMaps
from euphotic.constants import AUTHALIC_RADIUS_M, WGS84_A_M, WGS84_F
from euphotic.errors import ConfigError
from euphotic.models import CITATIONS, SPECS
from euphotic.roles import ROLES

CAUTION = (
    "Satellite net primary production models disagree with each other by about a factor of "
    "two; these estimates need validation against local in situ measurements (e.g. 14C uptake "
    "or oxygen incubations) before use in fisheries management or carbon accounting."
)

#: The CF standard name table the variables' standard names were checked against (the table
#: packaged with compliance-checker 6.1; every name used here has been in the table for years).
STANDARD_NAME_VOCABULARY = "CF Standard Name Table v93"

class _FromSpecs(Mapping):
    """Model id -> one field of its declaration (:data:`euphotic.models.SPECS`)."""

    def __init__(self, field: str):
        self._field = field

    def __getitem__(self, model):
        spec = SPECS.get(model)
        if spec is None:
            raise KeyError(model)
        return getattr(spec, self._field)

    def __iter__(self):
        return iter(SPECS)

    def __len__(self):
        return len(SPECS)


#: Model id -> the model's published name, as written in titles and summaries.
PUBLISHED_NAMES: Mapping[str, str] = _FromSpecs("published_name")

#: Short labels for axes and legends (the captions and metadata give PUBLISHED_NAMES and the
#: citations).
MODEL_LABELS: Mapping[str, str] = _FromSpecs("label")


def model_label(model: str) -> str:
    """Short display label of a model id (the id itself when it has none)."""
    return MODEL_LABELS.get(model, model)


#: Value written for a [metadata] attribute the user did not set (an honest "unknown").
NOT_SPECIFIED = "not specified by the user"

#: [metadata] keys -> default. ``None``: written only when the user sets it. ``id`` is special:
#: each file's id is ``<id>_<file stem>`` (default: the file stem alone).
METADATA_DEFAULTS: dict[str, str | None] = {
    "id": None,
    "naming_authority": NOT_SPECIFIED,
    "license": NOT_SPECIFIED,
    "institution": NOT_SPECIFIED,
    "project": NOT_SPECIFIED,
    "program": None,
    "acknowledgement": NOT_SPECIFIED,
    "creator_name": NOT_SPECIFIED,
    "creator_email": NOT_SPECIFIED,
    "creator_url": NOT_SPECIFIED,
    "creator_type": None,
    "creator_institution": None,
    "publisher_name": NOT_SPECIFIED,
    "publisher_email": NOT_SPECIFIED,
    "publisher_url": NOT_SPECIFIED,
    "publisher_type": None,
    "publisher_institution": None,
    "contributor_name": None,
    "contributor_role": None,
    "metadata_link": None,
    "platform": None,
    "platform_vocabulary": None,
    "instrument": None,
    "instrument_vocabulary": None,
}

#: Allowed values of creator_type / publisher_type (ACDD 1.3).
_PARTY_TYPES = ("person", "group", "institution", "position")

#: Integer fill value of ``n_valid_days`` (a count is never negative).
N_DAYS_FILL = np.int16(-1)


def metadata_from_config(table: object, where: str) -> dict[str, str]:
    """Check the ``[metadata]`` table of a run configuration and return the keys it sets.

    Parameters
    ----------
    table : the parsed TOML value of ``[metadata]`` (a dict of strings)
    where : prefix of error messages, e.g. ``"run.toml [metadata]"``

    Raises
    ------
    ConfigError
        Not a table, an unknown key, a value that is not a non-empty string, or a
        creator_type / publisher_type outside the ACDD vocabulary.
    """
    if not isinstance(table, dict):
        raise ConfigError(where, "must be a table of text values ([metadata])")
    unknown = sorted(set(table) - set(METADATA_DEFAULTS))
    if unknown:
        raise ConfigError(
            where,
            f"unknown key(s) {', '.join(unknown)}; allowed: {', '.join(sorted(METADATA_DEFAULTS))}",
        )
    out: dict[str, str] = {}
    for key, value in table.items():
        if not isinstance(value, str):
            raise ConfigError(
                where, f"`{key}` must be a text string, not {type(value).__name__} {value!r}"
            )
        if not value.strip():
            raise ConfigError(where, f"`{key}` must not be empty")
        if key in ("creator_type", "publisher_type") and value not in _PARTY_TYPES:
            raise ConfigError(
                where, f"`{key}` must be one of {', '.join(_PARTY_TYPES)}, not {value!r}"
            )
        out[key] = value.strip()
    return out


def metadata_attrs(metadata: Mapping[str, str] | None, stem: str) -> dict[str, str]:
    """ACDD attributes from the user's ``[metadata]`` keys and the defaults, for one file."""
    metadata = dict(metadata or {})
    attrs: dict[str, str] = {}
    for key, default in METADATA_DEFAULTS.items():
        if key == "id":
            attrs["id"] = f"{metadata['id']}_{stem}" if "id" in metadata else stem
        elif key in metadata:
            attrs[key] = metadata[key]
        elif default is not None:
            attrs[key] = default
    return attrs


def iso_utc(when: dt.datetime | None = None) -> str:
    """A time as ISO 8601 with time zone, to the second: ``2025-04-01T00:00:00Z``."""
    when = when or dt.datetime.now(dt.UTC)
    return when.astimezone(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _day_iso(day: np.datetime64) -> str:
    return f"{np.datetime64(day, 'D')}T00:00:00Z"


def _rel(path: str | Path, base: Path) -> str:
    """``path`` relative to ``base`` (POSIX separators; symbolic links kept as written);
    absolute when on another drive."""
    try:
        return Path(os.path.relpath(os.path.abspath(path), base)).as_posix()
    except ValueError:
        return Path(os.path.abspath(path)).as_posix()


def earth_description(earth: str) -> str:
    """The earth model of cell areas and of the grid's CRS, in words with its constants."""
    if earth == "wgs84":
        return f"WGS84 ellipsoid (semi-major axis {WGS84_A_M:.1f} m, inverse flattening {1 / WGS84_F!r})"
    return f"sphere of the WGS84 authalic radius ({AUTHALIC_RADIUS_M:.1f} m)"


def _region_sources(raw_regions: object, base: Path) -> str:
    parts = []
    for r in raw_regions if isinstance(raw_regions, list) else []:
        if not isinstance(r, dict):
            continue
        name = r.get("name")
        if "box" in r:
            desc = f"box {list(r['box'])} (west, south, east, north; degrees)"
        elif "geojson" in r:
            desc = f"GeoJSON {_rel(base / str(r['geojson']), base)}"
            if "name_property" in r:
                desc += f" (one region per feature, named by property {r['name_property']!r})"
        elif "mask" in r:
            desc = f"NetCDF mask {_rel(base / str(r['mask']), base)}"
            if "variable" in r:
                desc += f" variable {r['variable']!r}"
            if "value" in r or "values" in r:
                desc += f" value(s) {r.get('values', r.get('value'))}"
        else:
            desc = "unknown source"
        parts.append(f"{name}: {desc}" if name else desc)
    return "; ".join(parts)


def provenance_attrs(cfg, input_files: Mapping[str, Sequence[str]]) -> dict[str, str | float]:
    """Where a run's results come from, as global attributes (called once per run).

    Input paths are relative to the configuration file's folder; the configuration's text is
    included with its SHA-256, so that a file alone tells how it was made.

    Parameters
    ----------
    cfg : euphotic.config.RunConfig
    input_files : role (any of :data:`euphotic.roles.ROLES`) -> paths read
    """
    config_path = Path(cfg.path)
    base = Path(os.path.abspath(config_path)).parent
    data = config_path.read_bytes()
    text = data.decode("utf-8", errors="replace")
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError:  # the file changed since it was loaded
        raw = {}
    attrs = {
        f"input_files_{role}": ", ".join(_rel(p, base) for p in input_files[role])
        for role in ROLES
        if role in input_files
    }
    if cfg.ocean_source == "file":
        written = raw.get("ocean", {}).get("land_mask")  # as written: symbolic links kept
        land = f"file {_rel(base / written if written else cfg.land_mask, base)}"
        if cfg.land_mask_variable:
            land += f" variable {cfg.land_mask_variable!r}"
    elif cfg.ocean_source == "package":
        land = "global-land-mask package"
    else:
        land = "valid temperature"
    attrs.update(
        {
            "land_mask_source": land,
            "region_sources": _region_sources(raw.get("regions", []), base) or "none",
            "earth_model": earth_description(cfg.earth),
            "euphotic_config_file": config_path.name,
            "euphotic_config_sha256": hashlib.sha256(data).hexdigest(),
            "euphotic_config": text,
            "euphotic_run_started": iso_utc(),
            # the run's coverage rule ([run] min_coverage, low_coverage): see euphotic.compare
            "euphotic_min_coverage": float(cfg.min_coverage),
            "euphotic_low_coverage": str(cfg.low_coverage),
        }
    )
    return attrs


def crs_attrs(earth: str) -> dict:
    """CF grid-mapping attributes of the latitude-longitude grid, as CF-1.8 and GDAL read them.

    ``"wgs84"``: EPSG:4326 (WKT from GDAL via rasterio). ``"sphere"``: a geographic CRS on the
    sphere of the WGS84 authalic radius, the sphere the run's cell areas were computed on.
    """
    if earth == "wgs84":
        from rasterio.crs import CRS

        wkt = CRS.from_epsg(4326).to_wkt()
        return {
            "grid_mapping_name": "latitude_longitude",
            "semi_major_axis": WGS84_A_M,
            "inverse_flattening": 1.0 / WGS84_F,
            "longitude_of_prime_meridian": 0.0,
            "crs_wkt": wkt,
            "spatial_ref": wkt,
            "epsg_code": "EPSG:4326",
        }
    wkt = (
        'GEOGCS["Sphere of the WGS84 authalic radius",'
        'DATUM["Authalic sphere",SPHEROID["Authalic sphere",'
        f'{AUTHALIC_RADIUS_M!r},0]],'
        'PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433],'
        'AXIS["Latitude",NORTH],AXIS["Longitude",EAST]]'
    )
    return {
        "grid_mapping_name": "latitude_longitude",
        "earth_radius": AUTHALIC_RADIUS_M,
        "longitude_of_prime_meridian": 0.0,
        "crs_wkt": wkt,
        "spatial_ref": wkt,
    }


def month_stem(maps: MonthlyMaps) -> str:
    """File stem of one month's map: ``npp_<model>_YYYY-MM``."""
    return f"npp_{maps.model}_{maps.month}"


def _bounds(centres: np.ndarray) -> np.ndarray:
    from euphotic.geo import cell_edges

    e = cell_edges(centres)
    return np.stack([e[:-1], e[1:]], axis=1)


def _decimals(step: float) -> int:
    """Decimals that keep a grid's edges and spacing to 1/1000 of a cell (float noise off)."""
    return max(0, math.ceil(-math.log10(abs(step))) + 3)


def _num(v: float, decimals: int) -> str:
    s = f"{round(v, decimals):.{decimals}f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def month_grid(data: dict, lat, lon, start: np.datetime64, end: np.datetime64, earth: str,
               mid: np.datetime64 | None = None) -> xr.Dataset:
    """A month's CF grid dataset of ``data`` ((time, lat, lon) variables): time at the middle
    of [start, end) (or ``mid``) with its bounds, latitude and longitude with their cell
    bounds, and the ``crs`` grid mapping of ``earth``."""
    mid = start + (end - start) // 2 if mid is None else mid
    ds = xr.Dataset(data, coords={
        "time": ("time", [np.datetime64(mid, "ns")],
                 {"standard_name": "time", "axis": "T", "bounds": "time_bnds",
                  "long_name": "time"}),
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "axis": "Y",
                             "bounds": "lat_bnds", "long_name": "latitude"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east", "axis": "X",
                             "bounds": "lon_bnds", "long_name": "longitude"}),
    })
    ds["crs"] = xr.DataArray(np.int32(0), attrs=crs_attrs(earth))
    ds["time_bnds"] = (("time", "nv"), np.array([[start, end]], dtype="datetime64[ns]"))
    ds["lat_bnds"] = (("lat", "nv"), _bounds(lat))
    ds["lon_bnds"] = (("lon", "nv"), _bounds(lon))
    return ds


def _input_words(model: str) -> str:
    """The gridded inputs a model reads, as words ("surface chlorophyll, PAR and ...")."""
    from euphotic import roles
    from euphotic.models import SPECS

    spec = SPECS.get(model)
    names = [r for r in (spec.roles if spec else ("chl", "par", "sst")) if r != "day_length"]
    words = [roles.ROLES[r].short_name for r in roles.ordered(names)]
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def month_file_attrs(start: str, end: str, n_days: int, lat: np.ndarray, lon: np.ndarray, *,
                     now: str, command: str, level: str) -> dict:
    """ACDD attributes every monthly file shares: its time coverage (ISO 8601 start and end,
    ``n_days`` long), its bounding box, its creation and the software that made it."""
    return {
        "time_coverage_start": start,
        "time_coverage_end": end,
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
        "processing_level": level,
    }


def geospatial_attrs(lat: np.ndarray, lon: np.ndarray) -> dict:
    """ACDD extents (cell edges), resolutions and WKT bounds of a regular grid, rounded to
    what the grid's spacing justifies (1/1000 of a cell) so no float noise shows."""
    out: dict = {}
    wkt = {}
    for axis, c, units in (("lat", lat, "degrees_north"), ("lon", lon, "degrees_east")):
        edges = _bounds(c)
        step = float(np.abs(np.diff(c)).mean())
        d = _decimals(step)
        lo, hi = round(float(edges.min()), d) + 0.0, round(float(edges.max()), d) + 0.0
        out[f"geospatial_{axis}_min"] = lo
        out[f"geospatial_{axis}_max"] = hi
        out[f"geospatial_{axis}_units"] = units
        out[f"geospatial_{axis}_resolution"] = f"{_num(step, d + 2)} degrees"
        wkt[axis] = (_num(lo, d), _num(hi, d))
    (s, n), (w, e) = wkt["lat"], wkt["lon"]
    # EPSG:4326 axis order, latitude first (as in ACDD 1.3's own example)
    out["geospatial_bounds"] = f"POLYGON(({s} {w}, {s} {e}, {n} {e}, {n} {w}, {s} {w}))"
    out["geospatial_bounds_crs"] = "EPSG:4326"
    return out


def month_dataset(
    maps: MonthlyMaps,
    *,
    title: str,
    command: str,
    input_files: Mapping[str, Sequence[str]] | None = None,
    earth: str = "sphere",
    provenance: Mapping[str, str] | None = None,
    metadata: Mapping[str, str] | None = None,
    extra_attrs: Mapping | None = None,
) -> xr.Dataset:
    """A lazy CF-1.8 / ACDD-1.3 dataset for one month: ``npp``, ``coverage``, ``n_valid_days``,
    the ``crs`` grid mapping, coordinates with bounds and the global attributes.

    Parameters
    ----------
    maps : the month's lazy maps (npp mg C m-2 d-1, coverage 1)
    title : the run's title
    command : the command line, for ``history``
    input_files : role -> paths; used only when ``provenance`` is not given
    earth : ``"sphere"`` or ``"wgs84"``, the run's earth model (the grid mapping)
    provenance : from :func:`provenance_attrs` (once per run)
    metadata : the run's ``[metadata]`` keys (see :func:`metadata_from_config`)
    extra_attrs : more global attributes, merged last
    """
    start = np.datetime64(maps.month, "D")
    end = (np.datetime64(maps.month, "M") + 1).astype("datetime64[D]")
    n_days = int((end - start).astype(int))
    lat = maps.npp["lat"].values
    lon = maps.npp["lon"].values
    npp = maps.npp.astype(np.float32).expand_dims(time=1)
    cov = maps.coverage.astype(np.float32).expand_dims(time=1)
    # lazy: coverage is count / days of the month, so the count comes back exactly
    nvd = (maps.coverage * maps.n_days).round().expand_dims(time=1)
    npp.attrs = {
        "units": "mg m-2 d-1",
        "long_name": "net primary production of carbon, mean daily rate over the month",
        "standard_name": "net_primary_productivity_of_biomass_expressed_as_carbon",
        "cell_methods": "time: mean",
        "coverage_content_type": "modelResult",
        "comment": "Integrated over the euphotic layer; mass is of carbon. Mean over the days "
        "of the month with a valid estimate (see coverage and n_valid_days).",
        "ancillary_variables": "coverage n_valid_days",
        "grid_mapping": "crs",
    }
    cov.attrs = {
        "units": "1",
        "long_name": "fraction of the month's days with a valid production estimate",
        "valid_min": np.float32(0.0),
        "valid_max": np.float32(1.0),
        "coverage_content_type": "qualityInformation",
        "grid_mapping": "crs",
    }
    nvd.attrs = {
        "units": "1",
        "standard_name": "number_of_observations",
        "long_name": "number of days of the month with a valid production estimate",
        "valid_min": np.int16(0),
        "valid_max": np.int16(n_days),
        "coverage_content_type": "qualityInformation",
        "grid_mapping": "crs",
    }
    ds = month_grid({"npp": npp, "coverage": cov, "n_valid_days": nvd}, lat, lon, start, end,
                    earth)
    now = iso_utc()
    if provenance is None:
        provenance = {
            f"input_files_{k}": ", ".join(str(p) for p in v) for k, v in (input_files or {}).items()
        }
    name = PUBLISHED_NAMES.get(maps.model, maps.model)
    stem = month_stem(maps)
    ds.attrs = {
        "Conventions": "CF-1.8, ACDD-1.3",
        "title": f"{title}: {name}, monthly mean net primary production, {maps.month}",
        "summary": (
            f"Monthly mean daily net primary production (mg C m-2 d-1) from the {name} model "
            f"(euphotic id {maps.model!r}), evaluated day by day from {_input_words(maps.model)}"
            " with day length from latitude and date. " + CAUTION
        ),
        "comment": "Ocean cells only (land and cells without any valid day are missing). "
        "coverage and n_valid_days give the days behind each monthly mean.",
        "keywords": "net primary production, phytoplankton, chlorophyll, ocean carbon",
        "standard_name_vocabulary": STANDARD_NAME_VOCABULARY,
        "cdm_data_type": "Grid",
        "model": maps.model,
        "model_name": name,
        "model_citation": CITATIONS[maps.model],
        "references": CITATIONS[maps.model]
        + " Day length: Forsythe et al. (1995), Ecological Modelling 80:87-95.",
        "caution": CAUTION,
        **month_file_attrs(_day_iso(start), _day_iso(end), n_days, lat, lon, now=now,
                           command=command, level="L4 model output"),
        **metadata_attrs(metadata, stem),
        **provenance,
    }
    if extra_attrs:
        ds.attrs.update(extra_attrs)
    return ds


#: Variables stored as the map's float32 grids, and the integer day count.
_GRID_FLOAT = ("npp", "coverage")
_TIME_ENCODING = {"units": "days since 1970-01-01", "calendar": "standard", "dtype": "float64",
                  "_FillValue": None}


def _map_chunks(ds: xr.Dataset) -> tuple[int, int, int]:
    """Stored chunks of the map: its blocks' most common size along each axis (blocks follow
    the inputs' stored chunks, cut where latitudes were reversed or longitudes rotated), or
    1024 x 1024 for a map not in blocks."""
    chunks = getattr(ds["npp"].data, "chunks", None)
    if chunks is not None and len(chunks) == 3:
        blocks = [max(set(c), key=lambda n, c=c: (c.count(n), n)) for c in chunks]
        if blocks[1] * blocks[2] <= 4 * 2**20:
            return (1, blocks[1], blocks[2])
    return (1, min(ds.sizes["lat"], 1024), min(ds.sizes["lon"], 1024))


def _regular_blocks(ds: xr.Dataset, chunks: tuple[int, int, int]) -> xr.Dataset:
    """``ds`` with its grid variables in blocks of the stored ``chunks`` (rechunked only where
    the blocks are not already whole chunks), so that every block is written as whole stored
    chunks: a block straddling chunks makes the library read back, inflate and deflate the
    partial chunks again."""
    import sys

    import dask

    from euphotic.chunkread import regular_chunks

    # without dask.distributed loaded there is no cluster, and dask would pick its task-based
    # rechunking after importing it to ask (a quarter of a second at start): say so
    method = {} if "distributed" in sys.modules else {"array.rechunk.method": "tasks"}
    out = {}
    with dask.config.set(method):
        for v in _GRID_FLOAT + ("n_valid_days",):
            if v not in ds or not hasattr(ds[v].data, "chunks"):
                continue
            got = ds[v].data.chunks
            want = tuple(regular_chunks(n, c) for n, c in zip(ds[v].shape, chunks, strict=True))
            if want != tuple(got):
                out[v] = ds[v].chunk(dict(zip(ds[v].dims, chunks, strict=True)))
    return ds.assign(out) if out else ds


_NAN32 = np.float32(np.nan)


def grid_encoding(chunks: tuple[int, int, int], dtype: str = "float32", fill=_NAN32) -> dict:
    """NetCDF encoding of a (time, lat, lon) variable of a month file: zlib level 1 with
    shuffle, stored ``dtype`` in ``chunks``."""
    return {"zlib": True, "complevel": 1, "shuffle": True, "dtype": dtype, "_FillValue": fill,
            "chunksizes": chunks}


def coordinate_encoding() -> dict:
    """NetCDF encoding of a month file's time, lat and lon and their bounds: CF time in days,
    no fill value on coordinates and bounds (CF 2.5.1, 7.1)."""
    enc = {"time": dict(_TIME_ENCODING), "time_bnds": dict(_TIME_ENCODING)}
    for c in ("lat", "lon", "lat_bnds", "lon_bnds"):
        enc[c] = {"_FillValue": None}
    return enc


def encoding_for(ds: xr.Dataset) -> dict:
    """Compressed float32 storage chunked like the map (CF time units in days).

    A dask-backed map is stored in chunks equal to its blocks, so that each block is written
    as whole chunks: a block that straddled stored chunks would make the library read back,
    inflate and deflate the partial chunks again (and the inputs' small chunk cache cannot
    hold them). Coordinates and bounds carry no fill value (CF 2.5.1, 7.1).
    """
    chunks = _map_chunks(ds)
    # shuffle does most of the work on float maps; zlib level 1 is fastest
    enc = {v: grid_encoding(chunks) for v in _GRID_FLOAT}
    enc["n_valid_days"] = grid_encoding(chunks, "int16", N_DAYS_FILL)
    enc.update(coordinate_encoding())
    return enc


def zarr_encoding_for(ds: xr.Dataset) -> dict:
    """Zarr v2 encoding: chunks of the map's blocks, time as in the NetCDF files, and the zlib
    compressor on every array, the one netCDF-C's NCZarr decodes without plugins (it reads
    Blosc-compressed chunks, xarray's default, as wrong numbers without an error)."""
    import numcodecs

    zlib = [numcodecs.Zlib(level=1)]

    def blocks(v: str) -> tuple:  # each variable's own dask blocks (whole chunks per task)
        return tuple(getattr(ds[v].data, "chunksize", None) or _map_chunks(ds))

    enc = {
        v: {"chunks": blocks(v), "compressors": zlib, "dtype": "float32",
            "_FillValue": np.float32(np.nan)}
        for v in _GRID_FLOAT
    }
    enc["n_valid_days"] = {"chunks": blocks("n_valid_days"), "compressors": zlib,
                           "dtype": "int16", "_FillValue": N_DAYS_FILL}
    enc["time"] = {**_TIME_ENCODING, "compressors": zlib}
    enc["time_bnds"] = {**_TIME_ENCODING, "compressors": zlib}
    for c in ("lat", "lon", "lat_bnds", "lon_bnds", "crs"):
        enc[c] = {"_FillValue": None, "compressors": zlib}
    return enc


def write_lazy(ds: xr.Dataset, tmp: Path, fmt: str):
    """Start writing ``ds`` to ``tmp`` and return the delayed computation that fills it.

    ``"netcdf"``: one NetCDF-4 file, ``time`` unlimited (so months can be appended or joined
    by record, e.g. with NCO's ncrcat). ``"zarr"``: a Zarr v2 store chunked like the map, so
    that workers of a cluster write chunks in parallel (suited to multi-year runs).
    """
    if fmt == "zarr":
        enc = zarr_encoding_for(ds)
        for v in ds.variables:
            ds[v].encoding = {}
        return ds.to_zarr(tmp, mode="w", compute=False, encoding=enc, zarr_format=2,
                          consolidated=True)
    enc = encoding_for(ds)
    ds = _regular_blocks(ds, next(e["chunksizes"] for e in enc.values() if "chunksizes" in e))
    from euphotic import chunkwrite

    direct = chunkwrite.lazy_netcdf(ds, tmp, enc)  # chunks compressed in the dask threads
    if direct is not None:
        return direct
    return ds.to_netcdf(tmp, engine="netcdf4", encoding=enc, compute=False,
                        unlimited_dims=["time"])


REGIONS_FILE = "regions.nc"


def _plane_chunks(shape: tuple[int, ...]) -> tuple[int, int, int]:
    """Chunks of ``region_planes`` on disk: one plane, up to 1024 x 1024 cells."""
    return (1, min(shape[1], 1024), min(shape[2], 1024))


def _stored_planes(planes: np.ndarray, name: str | None):
    """The planes as stored: signed on disk (CF 1.8 has no unsigned types), in the next wider
    signed type that holds every value (uint8 planes as int16, uint16 as int32). With a
    ``name`` (the prefix of its dask name), a dask array cast chunk by chunk as the file is
    written, so that the conversion and compression of a fine grid's planes run in the dask
    threads with the run's compute instead of before it."""
    stored = {1: np.int16, 2: np.int32}.get(planes.dtype.itemsize, np.int64)
    if name is None or not planes.size:
        return planes.astype(stored)
    from euphotic.lazyread import held_array

    return held_array(planes, _plane_chunks(planes.shape), name).astype(stored)


def region_dataset(masks, lat: np.ndarray, lon: np.ndarray, area_rows_m2: np.ndarray, *,
                   earth: str, region_sources: str = "", name: str | None = None
                   ) -> xr.Dataset:
    """The run's region masks and cell areas as one CF NetCDF dataset (``regions.nc``).

    The masks are stored as :class:`euphotic.aggregate.RegionMasks` holds them: label layers
    (``r + 1`` for region ``r``, 0 for none) then bit planes (``bit_regions``), in
    ``region_planes (plane, lat, lon)``; ``region_window (region, bound)`` keeps each region's
    row and column range so that unpacking one region reads only its window. ``cell_area``
    (m2) is the area of one cell in each row of the regular grid. Read it back with
    :func:`euphotic.results.open_regions` or :func:`euphotic.results.open_region_masks`.
    With ``name`` (the prefix of a dask name), the planes are a lazy dask array over the
    masks' planes (written by :func:`write_regions_lazy`).
    """
    names = list(masks.names)
    n = len(names)
    planes = masks.planes
    if planes is None:
        planes = np.zeros((0, len(lat), len(lon)), dtype=np.uint16)
    windows = masks.windows or [(slice(0, len(lat)), slice(0, len(lon)))] * n
    win = np.array([[w[0].start or 0, w[0].stop if w[0].stop is not None else len(lat),
                     w[1].start or 0, w[1].stop if w[1].stop is not None else len(lon)]
                    for w in windows], dtype=np.int32).reshape(n, 4)
    ds = xr.Dataset(
        {
            "region_name": ("region", np.array(names, dtype=object),
                            {"long_name": "region name, as configured"}),
            # signed on disk (CF 1.8 has no unsigned types): the next wider signed type
            # holds every value (uint8 planes as int16, uint16 as int32)
            "region_planes": (("plane", "lat", "lon"), _stored_planes(planes, name), {
                "long_name": "region membership: label layers then bit planes",
                "comment": "In the first n_label_layers planes a cell holds r + 1 for the "
                           "region r (0-based, in region_name order) it belongs to in that "
                           "layer, 0 for none. Region bit_regions[j] is bit j % B of plane "
                           "n_label_layers + j // B (B the bits of the integer type). A cell "
                           "belongs to a region when its centre is inside.",
                "n_label_layers": np.int32(masks.n_label_layers),
                "bit_regions": np.array(masks.bit_regions, dtype=np.int32),
                "packed_type": str(planes.dtype),
            }),
            "region_window": (("region", "bound"), win, {
                "long_name": "first row, end row, first column, end column of the region's cells "
                             "(0-based, end exclusive)"}),
            "cell_area": ("lat", np.asarray(area_rows_m2, dtype=np.float64), {
                "standard_name": "cell_area", "units": "m2",
                "long_name": "area of one grid cell in this row (regular grid: the same along "
                             "the row)",
                "comment": f"exact cell area on the {earth_description(earth)}"}),
        },
        coords={
            "lat": ("lat", np.asarray(lat, dtype=np.float64),
                    {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
            "lon": ("lon", np.asarray(lon, dtype=np.float64),
                    {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
        },
        attrs={
            "Conventions": "CF-1.8",
            "title": "Regions of a euphotic run: masks and cell areas",
            "region_sources": region_sources or "none",
            "earth_model": earth_description(earth),
            "history": f"{iso_utc()} written by euphotic {__version__}",
        },
    )
    return ds


def _regions_encoding(ds: xr.Dataset) -> dict:
    # zlib level 1: a 1/24-degree grid's planes are written in a third of level 4's time,
    # and label planes compress about as well
    enc = {"region_planes": {"zlib": True, "complevel": 1, "shuffle": True},
           "lat": {"_FillValue": None}, "lon": {"_FillValue": None},
           "cell_area": {"_FillValue": None}, "region_window": {"_FillValue": None}}
    if ds.sizes["plane"] and ds.sizes["lat"] and ds.sizes["lon"]:
        enc["region_planes"]["chunksizes"] = _plane_chunks(ds["region_planes"].shape)
    return enc


def write_regions(path: Path, ds: xr.Dataset) -> None:
    """Write :func:`region_dataset` to ``path`` (NetCDF-4, deflated)."""
    ds.to_netcdf(path, engine="netcdf4", encoding=_regions_encoding(ds))


def write_regions_lazy(path: Path, ds: xr.Dataset):
    """Write the metadata of :func:`region_dataset` (made with a ``name``) to ``path`` now
    and return the dask array whose computation writes the planes' compressed chunks (from
    the dask threads, see :mod:`euphotic.chunkwrite`); None, with the whole file written
    now, where that path does not apply (a cluster, or no planes)."""
    if hasattr(ds["region_planes"].data, "dask"):
        from euphotic import chunkwrite

        lazy = chunkwrite.lazy_netcdf(ds, path, _regions_encoding(ds), unlimited_dims=())
        if lazy is not None:
            return lazy
        ds = ds.load()
    write_regions(path, ds)
    return None


# ------------------------------------------------------------------------------------------
# the regional totals table
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class TotalsColumn:
    """One column of the totals table: name (with its unit), CSVW datatype, unit, text format."""

    name: str
    title: str
    description: str
    datatype: str  # CSVW / XML Schema datatype
    unit: str | None = None  # UDUNITS spelling
    fmt: str | None = None  # format spec of numbers (fixed point: never an exponent)


#: The totals table, column by column (the single source of names, units and formats).
TOTALS_SPEC: tuple[TotalsColumn, ...] = (
    TotalsColumn("region", "region", "region name from the run configuration", "string"),
    TotalsColumn("month", "month", "calendar month", "gYearMonth"),
    TotalsColumn("model", "model", "model id (`euphotic models` lists them)", "string"),
    TotalsColumn(
        "mean_npp_mgC_m-2_d-1", "mean NPP",
        "area-weighted mean of the monthly mean map over the region's ocean cells with data, "
        "milligrams of carbon per square metre per day", "decimal", "mg m-2 d-1", ".2f",
    ),
    TotalsColumn(
        "observed_area_km2", "observed area",
        "area of the region's ocean cells with at least one valid day in the month",
        "integer", "km2", ".0f",
    ),
    TotalsColumn("ocean_area_km2", "ocean area", "area of the region's ocean cells", "integer",
                 "km2", ".0f"),
    TotalsColumn(
        "coverage_fraction", "coverage",
        "area-weighted mean over the region's ocean cells of the fraction of the month's days "
        "with a valid estimate (0 to 1)", "decimal", "1", ".4f",
    ),
    TotalsColumn(
        "total_TgC", "total",
        "monthly mean map integrated over the region's ocean cells with data, times the days "
        "of the month: teragrams of carbon fixed in the month", "decimal", "Tg", ".4f",
    ),
    TotalsColumn(
        "total_filled_TgC", "total (filled)",
        "observed area-mean rate times the region's whole ocean area and the days of the "
        "month: teragrams of carbon, cells without data filled with the regional mean",
        "decimal", "Tg", ".4f",
    ),
    TotalsColumn(
        "flag", "flag",
        "quality codes separated by ';', empty when fine: no_ocean_cells (the region has no "
        "ocean cell on the grid), no_valid_data (ocean cells but no valid estimate in the "
        "month), low_coverage (coverage below the run's min_coverage: the numbers rest on few "
        "days); missing numbers are empty cells", "string",
    ),
)

#: Column names of the totals table, in order.
TOTALS_COLUMNS: list[str] = [c.name for c in TOTALS_SPEC]


def format_cell(value, column: TotalsColumn) -> str:
    """A value as written in the CSV: fixed decimals per column, empty when missing."""
    if column.fmt is None:
        return "" if value is None else str(value)
    if value is None or not np.isfinite(value):
        return ""
    s = format(float(value), column.fmt)
    return s.lstrip("-") if float(s) == 0 else s  # no "-0.0000"


def write_totals_csv(rows: list[dict], path: Path) -> None:
    """Write the totals table exactly to ``path`` (the caller provides atomicity)."""
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(TOTALS_COLUMNS)
        for r in rows:
            w.writerow([format_cell(r.get(c.name), c) for c in TOTALS_SPEC])


def totals_metadata_path(csv_path: Path) -> Path:
    """The CSVW sidecar of a table: ``<table>.csv-metadata.json`` (W3C locating rule)."""
    csv_path = Path(csv_path)
    return csv_path.with_name(csv_path.name + "-metadata.json")


def totals_metadata(
    *,
    csv_name: str,
    models: Sequence[str],
    earth: str,
    provenance: Mapping[str, str] | None = None,
    metadata: Mapping[str, str] | None = None,
    run_time: dt.datetime | None = None,
) -> dict:
    """The W3C CSV-on-the-Web (CSVW) metadata of the totals table, as a JSON-LD dict.

    Per column: name, title, description, datatype and unit (``schema:unitText``, UDUNITS);
    for the table: caution, tool version, earth model, models with citations, provenance and
    the run time (``prov:wasGeneratedBy``).
    """
    provenance = dict(provenance or {})
    ended = iso_utc(run_time)
    stem = Path(csv_name).stem
    meta = metadata_attrs(metadata, stem)
    columns = []
    for c in TOTALS_SPEC:
        col = {
            "name": c.name,
            "titles": c.title,
            "dc:description": c.description,
            "datatype": c.datatype,
            "null": "",
            "required": c.name in ("region", "month", "model"),
        }
        if c.unit is not None:
            col["schema:unitText"] = c.unit
        if c.name == "flag":
            col["separator"] = ";"
        columns.append(col)
    activity = {
        "@type": "prov:Activity",
        "prov:endedAtTime": {"@value": ended, "@type": "xsd:dateTime"},
        "prov:wasAssociatedWith": {
            "@type": "prov:SoftwareAgent",
            "schema:name": "euphotic",
            "schema:softwareVersion": __version__,
        },
    }
    if "euphotic_run_started" in provenance:
        activity["prov:startedAtTime"] = {
            "@value": provenance["euphotic_run_started"], "@type": "xsd:dateTime"}
    used = [p for k, v in provenance.items() if k.startswith("input_files_") for p in v.split(", ")]
    if used:
        activity["prov:used"] = used
    properties = {
        "caution": CAUTION,
        "euphotic_version": __version__,
        "earth_model": earth_description(earth),
        **{f"model_{m}": f"{PUBLISHED_NAMES.get(m, m)}. {CITATIONS[m]}" for m in models},
        **{k: v for k, v in meta.items() if k not in ("id", "license")},
        **provenance,
    }
    return {
        "@context": ["http://www.w3.org/ns/csvw", {"@language": "en"}],
        "url": csv_name,
        "dc:identifier": meta["id"],
        "dc:title": "Regional net primary production totals (euphotic)",
        "dc:description": "Net primary production totals of carbon per region, calendar month "
        "and model. " + CAUTION,
        "dc:license": meta["license"],
        "dc:created": {"@value": ended, "@type": "xsd:dateTime"},
        "dc:references": [f"{PUBLISHED_NAMES.get(m, m)}: {CITATIONS[m]}" for m in models],
        "rdfs:comment": CAUTION,
        "prov:wasGeneratedBy": activity,
        "schema:additionalProperty": [
            {"@type": "schema:PropertyValue", "schema:name": k, "schema:value": v}
            for k, v in properties.items()
        ],
        "tableSchema": {
            "columns": columns,
            "primaryKey": ["region", "month", "model"],
        },
    }


def write_totals_metadata(path: Path, **kwargs) -> None:
    """Write :func:`totals_metadata` (keyword arguments) as JSON exactly to ``path``."""
    doc = totals_metadata(**kwargs)
    with open(path, "w", encoding="utf-8") as fh:
        json.dump(doc, fh, indent=2, ensure_ascii=False)
        fh.write("\n")
