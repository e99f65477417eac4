"""Open gridded input files lazily and put them in a common form.

Each input (any role of :mod:`euphotic.roles`: chlorophyll, PAR, temperature, day length,
backscattering, attenuation, mixed-layer depth) becomes one dask-backed
``xarray.DataArray`` with dims ``("time", "lat", "lon")``: latitude ascending, longitude in
[-180, 180) (or [0, 360) for a grid that is only contiguous that way), values decoded and
converted to the model's units, and two coordinates along ``time`` giving each period's first
day (``period_start``) and the day after its last (``period_end``). Nothing is loaded.
"""

from __future__ import annotations

import datetime as dt
import glob
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import cftime
import numpy as np
import xarray as xr

from euphotic import chunkread, screen, units
from euphotic.errors import EuphoticError, GridMismatchError, InputFileError, VariableNotFoundError
from euphotic.regrid import axis_step, is_regular, regrid_like, same_axis
from euphotic.roles import ROLES, role

#: An input role: a key of :data:`euphotic.roles.ROLES` (chl, par, sst, day_length, bbp, ...).
Role = str

#: CF standard names that identify each input, in order of preference (from the catalogue).
STANDARD_NAMES: dict[str, tuple[str, ...]] = {r.name: r.standard_names for r in ROLES.values()}

#: Units each input is converted to (from the catalogue).
TARGET_UNITS: dict[str, str] = {r.name: r.units for r in ROLES.values()}

LONG_NAMES = {r.name: r.long_name for r in ROLES.values()}

#: netCDF-C chunk cache per variable, bytes. The library default (64 MiB per variable) grows
#: memory with every open file; inputs are read chunk by chunk once, so a small cache suffices.
CHUNK_CACHE_BYTES = 4 * 1024 * 1024


@dataclass
class InputSpec:
    """How to find one input: files, variable, and how to date the files."""

    role: Role
    files: str | Sequence[str]
    variable: str | None = None
    units: str | None = None
    #: regular expression with a named group ``start`` (and optionally ``end``, inclusive)
    date_pattern: str | None = None
    #: strptime format of the dates the pattern captures
    date_format: str = "%Y%m%d"
    #: length of each file's period when only a start date is known: "day", "month" or N (days)
    period: str | int | None = None
    base_dir: Path = field(default_factory=Path.cwd)
    #: files (or time steps) with the same period: "error", or keep the "first"/"last" by path
    duplicates: str = "error"
    #: plausible range in the model's units; None: ``screen.DEFAULT_VALID_RANGE[role]``
    valid_range: tuple[float, float] | None = None

    def paths(self) -> list[str]:
        """Expand the file pattern(s) into a sorted list of existing paths."""
        pats = [self.files] if isinstance(self.files, str) else list(self.files)
        out: list[str] = []
        for pat in pats:
            p = os.path.normpath(pat if os.path.isabs(pat) else str(self.base_dir / pat))
            hits = sorted(glob.glob(p)) if glob.has_magic(p) else ([p] if os.path.exists(p) else [])
            if not hits:
                what = "matches no file" if glob.has_magic(p) else "does not exist"
                raise InputFileError(p, f"{self.role} input {what}")
            out.extend(hits)
        return sorted(dict.fromkeys(out))


# ------------------------------------------------------------------------------------------
# dates
# ------------------------------------------------------------------------------------------


def _to_day(value) -> np.datetime64:
    """A cftime/datetime/date -> numpy datetime64[D] (calendar date as written)."""
    if isinstance(value, np.datetime64):
        return value.astype("datetime64[D]")
    try:
        return np.datetime64(dt.date(value.year, value.month, value.day), "D")
    except ValueError:
        cal = getattr(value, "calendar", "") or "non-standard"
        raise _CalendarDateError(
            f"date {value.year:04d}-{value.month:02d}-{value.day:02d} of the {cal!r} calendar has "
            "no day in the real calendar; give dates with `date_pattern` in the config"
        ) from None


class _NotStackable(Exception):
    """The chunk reader cannot read every file of a stack (they are then opened one by one)."""


class _CalendarDateError(ValueError):
    """A model-calendar date (e.g. 30 February of a 360-day year) with no real day."""


def _ceil_day(value) -> np.datetime64:
    """Exclusive end day: a time exactly at midnight ends the day before; otherwise next day."""
    day = _to_day(value)
    if isinstance(value, np.datetime64):
        return day if value == day.astype(value.dtype) else day + 1
    midnight = (value.hour, value.minute, value.second, getattr(value, "microsecond", 0)) == (
        0,
        0,
        0,
        0,
    )
    return day if midnight else day + 1


def _parse_iso(text: str, path: str, key: str):
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


def _month_end(day: np.datetime64) -> np.datetime64:
    m = day.astype("datetime64[M]")
    return (m + 1).astype("datetime64[D]")


def _period_length(period, start: np.datetime64, path: str) -> np.datetime64:
    if period in (None, "day", "daily", 1, "1"):
        return start + 1
    if period in ("month", "monthly"):
        return _month_end(start)
    try:
        n = int(str(period).removesuffix("-day").removesuffix("D").removesuffix("d"))
    except ValueError:
        raise InputFileError(
            path, f"period {period!r} is not 'day', 'month' or a number of days"
        ) from None
    return start + n


def _dates_from_name(spec: InputSpec, path: str):
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
            end = _period_length(spec.period, start, path)
    except ValueError as exc:
        raise InputFileError(
            path, f"date in file name does not fit date_format {spec.date_format!r}: {exc}"
        ) from None
    return np.array([start]), np.array([end])


def _dates_from_acdd(ds: xr.Dataset, path: str):
    a, b = ds.attrs.get("time_coverage_start"), ds.attrs.get("time_coverage_end")
    if a is None or b is None:
        return None
    start, _ = _parse_iso(a, path, "time_coverage_start")
    end, date_only = _parse_iso(b, path, "time_coverage_end")
    s = _to_day(start)
    e = _to_day(end) + 1 if date_only else _ceil_day(end)
    if e <= s:
        raise InputFileError(
            path, f"time_coverage_end {b!r} is not after time_coverage_start {a!r}"
        )
    return np.array([s]), np.array([e])


def _decode_time(var: xr.Variable, path: str, name: str):
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


# ------------------------------------------------------------------------------------------
# opening one file
# ------------------------------------------------------------------------------------------


@dataclass
class _Piece:
    path: str
    data: xr.DataArray  # (time, lat, lon) in target units
    start: np.ndarray | None  # datetime64[D] per time step, or None (stamps only)
    end: np.ndarray | None
    stamps: np.ndarray | None  # cftime stamps when only stamps are known
    variable: str = ""
    time_dim: str | None = None
    file_dims: tuple = ()  # the variable's dimensions in the file
    #: True when the values come from euphotic.chunkread (the file handle is closed)
    detached: bool = False
    #: paths of the files stacked into ``data`` (just ``path`` for one file)
    paths: list[str] = field(default_factory=list)
    #: how the file was read (the ``open_input`` attrs of the pre-flight contract)
    info: dict = field(default_factory=dict)
    #: what the open-time value sample needs to read another file laid out alike
    enc: dict = field(default_factory=dict)
    sample_attrs: dict = field(default_factory=dict)
    #: files whose sample covered every value and found none valid
    empty: list[str] = field(default_factory=list)
    grid_dims: tuple = ()  # the file's (lat, lon) dimension names


def _find_variable(ds: xr.Dataset, spec: InputSpec, path: str) -> tuple[str, str]:
    """The variable holding ``spec.role`` and how it was identified: the configured name, a CF
    standard name of the role (in the catalogue's order of preference), else one of the role's
    plain variable names."""
    if spec.variable:
        if spec.variable not in ds.data_vars:
            raise VariableNotFoundError(
                path,
                f"no variable {spec.variable!r} (data variables: {', '.join(ds.data_vars) or 'none'})",
            )
        return spec.variable, f"config variable {spec.variable!r}"
    facts = role(spec.role)
    for std in facts.standard_names:
        hits = [v for v in ds.data_vars if ds[v].attrs.get("standard_name") == std]
        if hits:
            return hits[0], f"standard_name {std!r}"
    for name in facts.variable_names:
        if name in ds.data_vars:
            return name, f"variable name {name!r}"
    looked = []
    if facts.standard_names:
        looked.append("has standard_name "
                      + " or ".join(repr(s) for s in facts.standard_names[:2]))
    if facts.variable_names:
        looked.append("is named " + " or ".join(repr(n) for n in facts.variable_names))
    raise VariableNotFoundError(
        path,
        f"no {spec.role} variable: none {' or '.join(looked)} "
        f"(data variables: {', '.join(ds.data_vars) or 'none'}); name it with `variable` in the config",
    )


def _find_axis(ds: xr.Dataset, da: xr.DataArray, axis: str, path: str) -> str:
    std = {"lat": "latitude", "lon": "longitude"}[axis]
    unit_ok = {
        "lat": ("degrees_north", "degree_north", "degree_N", "degrees_N", "degreeN", "degreesN"),
        "lon": ("degrees_east", "degree_east", "degree_E", "degrees_E", "degreeE", "degreesE"),
    }[axis]
    names = {
        "lat": ("lat", "latitude", "y", "nav_lat"),
        "lon": ("lon", "longitude", "x", "nav_lon"),
    }[axis]
    for d in da.dims:
        c = ds[d] if d in ds.variables else None
        attrs = c.attrs if c is not None else {}
        if attrs.get("standard_name") == std or attrs.get("units") in unit_ok or d.lower() in names:
            if c is None:
                raise InputFileError(path, f"dimension {d!r} has no {std} coordinate values")
            if c.ndim != 1:
                raise GridMismatchError(
                    path, f"{std} is not one-dimensional: only regular lat-lon grids are read"
                )
            return d
    raise InputFileError(path, f"variable {da.name!r} has no {std} dimension (dims: {da.dims})")


def _apply_valid_range(da: xr.DataArray, enc: dict, attrs: dict) -> xr.DataArray:
    """Mask values outside valid_min/valid_max/valid_range (compared in unpacked units)."""
    lo, hi = attrs.get("valid_min"), attrs.get("valid_max")
    vr = attrs.get("valid_range")
    if vr is not None and np.size(vr) == 2:
        lo, hi = vr[0], vr[1]
    if lo is None and hi is None:
        return da
    scale = enc.get("scale_factor", 1.0)
    offset = enc.get("add_offset", 0.0)
    packed_dtype = np.dtype(enc.get("dtype", da.dtype))
    packed = "scale_factor" in enc or "add_offset" in enc

    def unpack(v):
        v = np.asarray(v)
        # NUG/CF: on packed data the valid range is stated in the packed (stored) type.
        if packed and (
            v.dtype == packed_dtype or packed_dtype.kind in "iu" and v.dtype.kind in "iu"
        ):
            return float(v) * float(scale) + float(offset)
        return float(v)

    cond = None
    if lo is not None:
        cond = da >= unpack(lo) - 1e-9 * abs(unpack(lo))
    if hi is not None:
        c2 = da <= unpack(hi) + 1e-9 * abs(unpack(hi))
        cond = c2 if cond is None else cond & c2
    return da.where(cond)


def _convert_units(da: xr.DataArray, spec: InputSpec, path: str, name: str) -> xr.DataArray:
    given = spec.units or da.attrs.get("units")
    if given is None or not str(given).strip():
        raise InputFileError(
            path, f"variable {name!r} has no units attribute; set `units` in the config"
        )
    try:
        if role(spec.role).conversion == "light":
            factor, _kind = units.par_factors(given)
            out = da * factor if factor != 1.0 else da
        else:
            target = TARGET_UNITS[spec.role]
            a, b = units.linear_factors(given, target)
            out = da
            if a != 1.0:
                out = out * a
            if b != 0.0:
                out = out + b
    except units.UnitError as exc:
        raise InputFileError(
            path, f"variable {name!r}: {exc} (expected units like {TARGET_UNITS[spec.role]!r})"
        ) from None
    return out


def _conversion_text(spec: InputSpec, given: str) -> str:
    """How values are converted, e.g. ``"K -> degC (- 273.15)"`` or ``"none"``."""
    target = TARGET_UNITS[spec.role]
    try:
        if role(spec.role).conversion == "light":
            (a, kind), b = units.par_factors(given), 0.0
            if kind == "energy":
                return (f"{given} -> {target} (x {a:g}: 4.57 umol J-1 for daylight PAR, "
                        "McCree 1972, and 86400 s d-1)")
        else:
            a, b = units.linear_factors(given, target)
    except units.UnitError:
        return "unknown"
    if a == 1.0 and b == 0.0:
        return "none"
    ops = ([f"x {a:g}"] if a != 1.0 else []) + (
        [f"{'-' if b < 0 else '+'} {abs(b):g}"] if b != 0.0 else [])
    return f"{given} -> {target} ({', '.join(ops)})"


def normalize_lon(da: xr.DataArray, path: str, convention: str | None = None) -> xr.DataArray:
    """Wrap longitudes to [-180, 180) (or [0, 360)), sort them, and check the grid is regular."""
    lon = da["lon"].values.astype(np.float64)
    options = [convention] if convention else ["pm180", "0to360"]
    for conv in options:
        wrapped = ((lon + 180.0) % 360.0) - 180.0 if conv == "pm180" else lon % 360.0
        order = np.argsort(wrapped, kind="stable")
        if is_regular(wrapped[order]):
            out = da.assign_coords(lon=wrapped)
            if not np.all(order == np.arange(len(order))):
                out = out.isel(lon=order)
            return out
    raise GridMismatchError(
        path, "longitudes are not a regular axis (after wrapping to -180..180 and 0..360)"
    )


#: Encoding attributes that CF decoding needs (xarray keeps them in ``encoding``).
_CF_CODING_KEYS = ("_FillValue", "missing_value", "scale_factor", "add_offset", "_Unsigned")


def _lazy_values(da: xr.DataArray, name: str, enc: dict, path: str) -> xr.DataArray:
    """Dask-backed values chunked like the file.

    NetCDF-4 variables with deflate/shuffle filters are read by :mod:`euphotic.chunkread`
    (parallel decompression outside the HDF5 lock; identical values), then CF-decoded by
    xarray exactly as the library path would be. Anything else is read through the netCDF
    library in the file's own chunks (the whole variable for contiguous / netCDF-3 files).
    """
    if chunkread.enabled():
        raw = chunkread.dask_array(path, name)
        if raw is not None and raw.shape == da.shape:
            return da.copy(data=_decode_raw(raw, da.dims, name, enc))
    return _library_read(da, enc, path)


class _NamedReads:
    """Array-like over a variable read through the netCDF library that names the file when
    a read fails (the library's own message, e.g. ``NetCDF: HDF error``, does not)."""

    def __init__(self, var: xr.Variable, path: str):
        self.var, self.path = var, path
        self.shape, self.dtype, self.ndim = var.shape, var.dtype, var.ndim

    def __getitem__(self, key) -> np.ndarray:
        try:
            return np.asarray(self.var[key].values)
        except EuphoticError:
            raise
        except Exception as exc:  # the netCDF/HDF5 libraries raise RuntimeError, OSError...
            raise InputFileError(
                self.path, f"reading values failed ({exc.__class__.__name__}: {exc}): the file "
                "is damaged or unreadable",
            ) from None


def _library_read(da: xr.DataArray, enc: dict, path: str) -> xr.DataArray:
    """``da`` (an open, undecoded-by-dask variable) as dask chunks in the file's own chunks,
    read through the netCDF library."""
    import dask.array as dsa
    from dask.base import tokenize

    pref = enc.get("preferred_chunks") or {}
    chunks = tuple(pref.get(d, n) for d, n in zip(da.dims, da.shape, strict=True))
    st = os.stat(path)
    name = "ncread-" + tokenize(path, da.name, chunks, st.st_mtime_ns, st.st_size)
    arr = dsa.from_array(_NamedReads(da.variable, path), chunks=chunks, name=name, lock=False,
                         asarray=False, fancy=False, meta=np.empty((0,) * da.ndim, da.dtype))
    return da.copy(data=arr)


#: Cells read per axis for the open-time sample of a contiguous (unchunked) variable.
_SAMPLE_CELLS = 256


def _sample_index(shape, dims, chunks, lat_d: str, lon_d: str) -> tuple[tuple, bool]:
    """Index of the stored chunk holding the centre of the first time step (a centre block for
    unchunked data), and whether that covers the whole time step."""
    idx, whole = [], True
    for d, n, c in zip(dims, shape, chunks or [None] * len(shape), strict=True):
        if d in (lat_d, lon_d):
            size = c or min(n, _SAMPLE_CELLS)
            a = (n // 2 // size) * size if c else max(0, n // 2 - size // 2)
            idx.append(slice(a, min(n, a + size)))
            whole &= size >= n
        else:
            idx.append(0)
    return tuple(idx), whole


def _decoded_sample(raw: np.ndarray, dims, name: str, enc: dict, attrs: dict) -> np.ndarray:
    """CF-decoded values of a raw sample, with the file's valid range applied."""
    coding = {k: enc[k] for k in _CF_CODING_KEYS if k in enc}
    var = xr.conventions.decode_cf_variable(
        name, xr.Variable(dims, np.asarray(raw), attrs=coding), mask_and_scale=True,
        decode_times=False)
    da = xr.DataArray(np.asarray(var.values, dtype=np.float64), dims=dims)
    return np.asarray(_apply_valid_range(da, enc, attrs).values)


def _check_sample(spec: InputSpec, path: str, values: np.ndarray, whole: bool, n_steps: int,
                  units_used: str, what: str, empty: list) -> None:
    """Open-time checks on a sample of a temperature file (a role with ``kelvin_check``): a
    kelvin field labelled Celsius is an error; a sample that covers the whole (single) time
    step and holds no value is noted."""
    screen.check_kelvin_label(values, units_used, path=path, what=what, role=spec.role)
    if whole and n_steps == 1 and not np.isfinite(values).any():
        screen.log.warning("%s: %s has no valid value: every value is missing", path, spec.role)
        empty.append(path)


def _dates(spec: InputSpec, ds: xr.Dataset, time_d: str | None, n_time: int, path: str):
    """(start, end, stamps) of a file's time steps: from the file name (``date_pattern``),
    time bounds, ACDD ``time_coverage_*`` attributes, or time stamps (resolved later)."""
    start = end = stamps = None
    if spec.date_pattern:
        start, end = _dates_from_name(spec, path)
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
            b = _decode_time(
                xr.Variable(ds[bname].dims, ds[bname].values, {**tvar.attrs, **ds[bname].attrs}),
                path,
                bname,
            )
            b = np.asarray(b).reshape(-1, 2)
            start = np.array([_to_day(x) for x in b[:, 0]])
            end = np.array([_ceil_day(x) for x in b[:, 1]])
            end = np.maximum(end, start + 1)
        elif n_time == 1 and (acdd := _dates_from_acdd(ds, path)) is not None:
            start, end = acdd
        else:
            stamps = np.atleast_1d(_decode_time(tvar, path, time_d))
    else:
        acdd = _dates_from_acdd(ds, path)
        if acdd is None:
            scalar = [
                c
                for c in ds.coords
                if ds[c].ndim == 0 and "since" in str(ds[c].attrs.get("units", ""))
            ]
            if scalar:
                stamps = np.atleast_1d(_decode_time(ds[scalar[0]].variable, path, scalar[0]))
            else:
                raise InputFileError(
                    path,
                    "no time information: no time coordinate, no time_coverage_start/end "
                    "attributes, and no date_pattern in the config",
                )
        else:
            start, end = acdd
    return start, end, stamps


def _decode_raw(raw, dims, name: str, enc: dict):
    """CF decoding (fill values, scale/offset) of raw stored values, as the library path does."""
    coding = {k: enc[k] for k in _CF_CODING_KEYS if k in enc}
    if raw.dtype.kind == "f" and all(k == "_FillValue" and np.isnan(v) for k, v in coding.items()):
        return raw  # float with NaN fill (or none): nothing to decode
    var = xr.Variable(dims, raw, attrs=coding)
    return xr.conventions.decode_cf_variable(
        name, var, mask_and_scale=True, decode_times=False
    ).data


def _stacked_values(da: xr.DataArray, name: str, enc: dict, stack: list, time_d, grid_dims):
    """The raw values of several files laid out like this file's variable (``stack``: their
    paths, this file's first), one after the other along its time dimension (or a new leading
    one), CF-decoded; only lat/lon coords kept."""
    if time_d is not None:
        raw = chunkread.stacked_dask_array(stack, name, axis=da.dims.index(time_d))
        dims = da.dims
    else:
        time_d = "time"
        raw = chunkread.stacked_dask_array(stack, name, axis=None)
        dims = ("time",) + da.dims
    if raw is None:
        raise _NotStackable(stack[0])
    coords = {d: da[d].variable for d in grid_dims}
    out = xr.DataArray(_decode_raw(raw, dims, name, enc), dims=dims, coords=coords,
                       attrs=dict(da.attrs), name=name)
    return out, time_d


def _open_one(spec: InputSpec, path: str, stack: list | None = None) -> _Piece:
    """One file as a :class:`_Piece`. With ``stack`` (raw chunk-reader arrays of files laid
    out exactly like this one, this file's first), the piece holds all of them in order."""
    try:
        ds = xr.open_dataset(
            path,
            engine="netcdf4",
            chunks=None,  # metadata is read without dask; the data variable is chunked below
            decode_times=False,
            mask_and_scale=True,
            cache=False,
        )
    except (OSError, ValueError) as exc:
        raise InputFileError(
            path, f"cannot be opened as NetCDF ({exc.__class__.__name__}: {exc})"
        ) from None
    name, identified_by = _find_variable(ds, spec, path)
    da = ds[name]
    enc = dict(da.encoding)
    file_dims = tuple(da.dims)
    lat_d = _find_axis(ds, da, "lat", path)
    lon_d = _find_axis(ds, da, "lon", path)
    units_used = spec.units or da.attrs.get("units")
    std_name = da.attrs.get("standard_name")
    lat_raw = np.asarray(ds[lat_d].values, dtype=np.float64)
    lon_raw = np.asarray(ds[lon_d].values, dtype=np.float64)
    info = {
        "identified_by": identified_by,
        "units_in_file": str(units_used),
        "conversion": _conversion_text(spec, str(units_used)) if units_used else "unknown",
        "file_lat_order": "descending" if lat_raw.size > 1 and lat_raw[1] < lat_raw[0]
        else "ascending",
        "file_lon_convention": "[0, 360)" if (lon_raw > 180.0).any() else "[-180, 180)",
    }
    time_d, squeeze = None, []
    for d in da.dims:
        if d in (lat_d, lon_d):
            continue
        c = ds[d] if d in ds.variables else None
        is_time = c is not None and (
            c.attrs.get("standard_name") == "time"
            or c.attrs.get("axis") == "T"
            or "since" in str(c.attrs.get("units", ""))
            or d.lower() in ("time", "t")
        )
        if is_time and time_d is None:
            time_d = d
        elif da.sizes[d] == 1:
            squeeze.append(d)
        else:
            raise InputFileError(
                path, f"variable {name!r} has an extra dimension {d!r} of size {da.sizes[d]}"
            )

    # --- dates (of this file; a stack's dates are given by the caller)
    start, end, stamps = _dates(spec, ds, time_d, da.sizes[time_d] if time_d else 1, path)

    # --- a look at a few values (temperature only): one stored chunk, no dask
    empty: list[str] = []
    sample_attrs = dict(da.attrs)
    if role(spec.role).kelvin_check and units_used and stack is None:
        index, whole = _sample_index(da.shape, file_dims, enc.get("chunksizes"), lat_d, lon_d)
        try:
            decoded = ds[name].variable[index]  # read (and CF-decoded) by the netCDF library
            values = np.asarray(_apply_valid_range(
                xr.DataArray(np.asarray(decoded.values, np.float64), dims=decoded.dims),
                enc, sample_attrs).values)
        except Exception as exc:  # noqa: BLE001 - the library's read errors
            raise InputFileError(path, f"reading values failed ({exc.__class__.__name__}: "
                                 f"{exc}): the file is damaged or unreadable") from None
        n_steps = da.sizes[time_d] if time_d else 1
        _check_sample(spec, path, values, whole, n_steps, str(units_used), std_name or name,
                      empty)

    file_time_d = time_d
    if stack is None:
        da = _lazy_values(da, name, enc, path)
        # values read by euphotic.chunkread need no open netCDF handle: close the file once
        # the metadata below has been read (keeps memory flat however many files a run opens)
        detached = any(str(k).startswith("chunkread-") for k in da.data.__dask_graph__().layers)
    else:
        da, time_d = _stacked_values(da, name, enc, stack, time_d, (lat_d, lon_d))
        detached = True
    attrs = dict(da.attrs)
    if squeeze:
        da = da.isel({d: 0 for d in squeeze}, drop=True)
    da = da.rename({lat_d: "lat", lon_d: "lon"})
    if time_d is None:
        da = da.expand_dims("time")
    else:
        da = da.rename({time_d: "time"})
    da = da.transpose("time", "lat", "lon")
    da = da.drop_vars([c for c in da.coords if c not in ("lat", "lon")])

    # --- values and units
    da = _apply_valid_range(da, enc, attrs)
    da = _convert_units(da, spec, path, name)
    if da.dtype != np.float32 and da.dtype != np.float64:
        da = da.astype(np.float32)

    # --- grid
    lat = da["lat"].values.astype(np.float64)
    if lat.size > 1 and not is_regular(lat):
        raise GridMismatchError(
            path, "latitudes are not a regular axis: only regular lat-lon grids are read"
        )
    if lat.size > 1 and lat[1] < lat[0]:
        da = da.isel(lat=slice(None, None, -1))
    da = da.assign_coords(lat=da["lat"].values.astype(np.float64))
    da = normalize_lon(da, path)
    if detached:
        da = da.copy(data=da.data)  # drop references to the dataset's variables
        ds.close()
    da.attrs = {
        "units": TARGET_UNITS[spec.role],
        "long_name": LONG_NAMES[spec.role],
        "source_variable": name,
    }
    return _Piece(path=path, data=da, start=start, end=end, stamps=stamps, variable=name,
                  time_dim=file_time_d, file_dims=file_dims,
                  detached=detached, paths=[path], info=info, enc=enc,
                  sample_attrs=sample_attrs, empty=empty, grid_dims=(lat_d, lon_d))


#: HDF5 attributes that netCDF-4 and dimension scales manage themselves (not metadata).
_H5_INTERNAL = {"DIMENSION_LIST", "REFERENCE_LIST", "CLASS", "NAME", "_Netcdf4Dimid",
                "_Netcdf4Coordinates", "_NCProperties", "_nc3_strict"}


def _h5_attrs(obj) -> dict:
    """Attributes of an h5py object as netCDF gives them: text as str, numbers as numpy."""
    out = {}
    for k in obj.attrs:
        if k in _H5_INTERNAL:
            continue
        v = obj.attrs[k]
        if isinstance(v, bytes | np.bytes_):
            v = v.decode("utf-8", "replace")
        elif isinstance(v, np.ndarray) and v.dtype.kind in "SO":
            v = [x.decode("utf-8", "replace") if isinstance(x, bytes) else x for x in v.tolist()]
            v = v[0] if len(v) == 1 else v
        elif isinstance(v, np.ndarray) and v.size == 1:
            v = v.reshape(())[()]
        out[k] = v
    return out


def _comparable(attrs: dict) -> tuple:
    """Attributes in a form that compares equal exactly when they are the same (NaN too)."""
    return tuple(
        (k, np.asarray(v).dtype.str, np.asarray(v).tobytes())
        if isinstance(v, np.ndarray | np.generic | float | int) else (k, repr(v))
        for k, v in sorted(attrs.items())
    )


def _h5_layout(f, first: _Piece) -> tuple | None:
    """What must match for a file to be read like ``first`` (an open h5py File): the
    variable's shape, type, chunks, filters and attributes, and its coordinate values."""
    import h5py

    v = f.get(first.variable)
    if not isinstance(v, h5py.Dataset) or v.chunks is None:
        return None
    plist = v.id.get_create_plist()
    sig = [v.shape, v.dtype.str, v.chunks,
           tuple(plist.get_filter(i)[0] for i in range(plist.get_nfilters())),
           _comparable(_h5_attrs(v))]
    for d in first.file_dims:
        if d == first.time_dim:
            continue
        c = f.get(d)
        sig.append((d, c[()].tobytes(), _comparable(_h5_attrs(c)))
                   if isinstance(c, h5py.Dataset) else (d, None))
    return tuple(sig)


def _h5_time_dataset(f, spec: InputSpec, time_d: str | None, n_time: int) -> xr.Dataset:
    """What :func:`_dates` reads from a file, taken from an open h5py File: the time variable
    and its bounds, and the global attributes where ACDD dates may be used."""
    if spec.date_pattern:
        return xr.Dataset()  # dated by the file name
    variables = {}
    if time_d is not None:
        t = f[time_d]
        variables[time_d] = xr.Variable((time_d,), t[()], _h5_attrs(t))
        bname = variables[time_d].attrs.get("bounds")
        if bname and bname in f:
            b = f[bname]
            variables[bname] = xr.Variable((time_d, "nv"), b[()], _h5_attrs(b))
    acdd_possible = time_d is None or (len(variables) == 1 and n_time == 1)
    return xr.Dataset(variables, attrs=_h5_attrs(f) if acdd_possible else {})


def _like_first(spec: InputSpec, path: str, first: _Piece, layout: tuple):
    """Dates of a file laid out exactly like ``first``, read with h5py only (no netCDF open);
    None when anything differs (the file is then opened and checked in full)."""
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError:
        return None
    with f:
        try:
            if _h5_layout(f, first) != layout:
                return None
            var = f[first.variable]
            n_time = var.shape[first.file_dims.index(first.time_dim)] if first.time_dim else 1
            ds = _h5_time_dataset(f, spec, first.time_dim, n_time)
        except (KeyError, OSError, ValueError, TypeError):
            return None  # anything unexpected: the full open reports it properly
        if (role(spec.role).kelvin_check
                and first.info.get("units_in_file") not in (None, "None")):
            lat_d, lon_d = first.grid_dims
            index, whole = _sample_index(var.shape, first.file_dims, var.chunks, lat_d, lon_d)
            try:
                raw = var[index]
            except OSError as exc:
                raise InputFileError(path, f"reading values failed ({exc}): the file is "
                                     "damaged or unreadable") from None
            dims = [d for d, k in zip(first.file_dims, index, strict=True) if isinstance(k, slice)]
            values = _decoded_sample(raw, dims, first.variable, first.enc, first.sample_attrs)
            what = first.sample_attrs.get("standard_name") or first.variable
            _check_sample(spec, path, values, whole, n_time, first.info["units_in_file"], what,
                          first.empty)
    start, end, stamps = _dates(spec, ds, first.time_dim, n_time, path)
    if (stamps is None) != (first.stamps is None):
        return None
    return start, end, stamps


def _open_all(spec: InputSpec, paths: list[str]) -> list[_Piece]:
    """Every file as pieces. Files laid out like the first (same variable layout, attributes
    and grid: the usual daily series) are read as one stacked piece after a light h5py check;
    any other file is opened and checked on its own."""
    first = _open_checked(spec, paths[0])
    if len(paths) == 1 or not first.detached or (first.time_dim is None and first.stamps is not None):
        return [first] + [_open_checked(spec, p) for p in paths[1:]]
    import h5py

    with h5py.File(paths[0], "r") as f:
        layout = _h5_layout(f, first)
    same, others = [(paths[0], first.start, first.end, first.stamps)], []
    for p in paths[1:]:
        try:
            hit = _like_first(spec, p, first, layout) if layout is not None else None
        except _CalendarDateError as exc:
            raise InputFileError(p, str(exc)) from None
        if hit is None:
            others.append(_open_checked(spec, p))
        else:
            same.append((p, *hit))
    if len(same) == 1:
        return [first] + others
    try:
        stacked = _open_one(spec, paths[0], stack=[x[0] for x in same])
    except _NotStackable:
        return [first] + [_open_checked(spec, x[0]) for x in same[1:]] + others
    if first.stamps is not None:
        stacked.stamps = np.concatenate([x[3] for x in same])
    else:
        stacked.start = np.concatenate([x[1] for x in same])
        stacked.end = np.concatenate([x[2] for x in same])
    stacked.paths = [x[0] for x in same]
    stacked.info, stacked.empty = first.info, first.empty
    return [stacked] + others


def _open_checked(spec: InputSpec, path: str) -> _Piece:
    try:
        return _open_one(spec, path)
    except _CalendarDateError as exc:
        raise InputFileError(path, str(exc)) from None


def _resolve_stamps(pieces: list[_Piece], spec: InputSpec) -> None:
    """Give periods to time stamps that came without bounds (spacing decides the length)."""
    todo = [p for p in pieces if p.stamps is not None]
    if not todo:
        return
    all_days = np.unique(np.concatenate([[_to_day(s) for s in p.stamps] for p in todo]))
    if spec.period is not None:
        kind = spec.period
    elif len(all_days) < 2:
        kind = "day"
    else:
        step = float(np.median(np.diff(all_days).astype(np.float64)))
        kind = "day" if step <= 1.5 else ("month" if 27.5 <= step <= 31.5 else int(round(step)))
    for p in todo:
        days = np.array([_to_day(s) for s in p.stamps])
        if kind in ("month", "monthly"):
            p.start = days.astype("datetime64[M]").astype("datetime64[D]")
        else:
            p.start = days
        p.end = np.array([_period_length(kind, s, p.path) for s in p.start])


def _small_chunk_cache() -> None:
    import netCDF4

    size, nelems, preemption = netCDF4.get_chunk_cache()
    if size != CHUNK_CACHE_BYTES:
        netCDF4.set_chunk_cache(CHUNK_CACHE_BYTES, nelems, preemption)


def open_input(spec: InputSpec) -> xr.DataArray:
    """Open all files of one input lazily as ``(time, lat, lon)`` in the model's units.

    Returns
    -------
    xarray.DataArray
        Dask-backed, with coords ``period_start`` and ``period_end`` (datetime64[D], end
        exclusive) along ``time`` and attrs ``units``, ``long_name`` and ``files``; the
        screening attrs ``period_files`` (the file of each time step), ``valid_range`` (lo, hi
        in ``units``; values outside are masked), ``screen_counts`` (lazy per-period counts,
        :class:`euphotic.screen.LazyCounts`) and ``empty_files``; and how the files were read:
        ``identified_by``, ``units_in_file``, ``conversion``, ``file_lat_order``,
        ``file_lon_convention`` (of the first file; ``"mixed: ..."`` when files differ).

    Raises
    ------
    InputFileError
        Naming the file and the problem (missing variable, unknown unit, no dates, a kelvin
        field labelled Celsius, a damaged chunk...).
    DuplicatePeriodError
        Two files (or time steps) with the same period, unless ``spec.duplicates`` picks one.
    """
    paths = spec.paths()
    _small_chunk_cache()
    pieces = _open_all(spec, paths)
    try:
        _resolve_stamps(pieces, spec)
    except _CalendarDateError as exc:
        bad = next((p.path for p in pieces if p.stamps is not None), paths[0])
        raise InputFileError(bad, str(exc)) from None
    ref = pieces[0].data
    arrays = []
    for p in pieces:
        d = p.data
        if not (
            same_axis(d.lat.values, ref.lat.values) and same_axis(d.lon.values, ref.lon.values)
        ):
            raise GridMismatchError(
                p.path, f"grid differs from the first {spec.role} file {pieces[0].path}"
            )
        arrays.append(d.assign_coords(lat=ref.lat.values, lon=ref.lon.values))
    starts = np.concatenate([p.start for p in pieces]).astype("datetime64[D]")
    ends = np.concatenate([p.end for p in pieces]).astype("datetime64[D]")
    out = (
        xr.concat(
            arrays,
            dim="time",
            coords="minimal",
            compat="override",
            join="override",
            combine_attrs="override",
        )
        if len(arrays) > 1
        else arrays[0]
    )
    out = out.assign_coords(
        time=("time", starts.astype("datetime64[ns]")),
        period_start=("time", starts.astype("datetime64[ns]")),
        period_end=("time", ends.astype("datetime64[ns]")),
    )
    step_files = np.array([f for p in pieces for f in _step_files(p)], dtype=object)
    order = np.argsort(starts, kind="stable")
    if not np.all(order == np.arange(len(order))):
        out = out.isel(time=order)
        starts, ends, step_files = starts[order], ends[order], step_files[order]
    # --- screening: repeated periods, overlaps, implausible values (see euphotic.screen)
    keep = screen.resolve_duplicates(starts, ends, list(step_files), role=spec.role,
                                     rule=spec.duplicates)
    if len(keep) < len(starts):
        out = out.isel(time=keep)
        starts, ends, step_files = starts[keep], ends[keep], step_files[keep]
    screen.log_overlaps(starts, ends, list(step_files), role=spec.role)
    lo, hi = screen.valid_range(spec.role, spec.valid_range)
    out, counts = screen.screen_range(out, role=spec.role, lo=lo, hi=hi)
    out.attrs["files"] = sorted(q for p in pieces for q in p.paths)
    out.attrs["period_files"] = [str(f) for f in step_files]
    out.attrs["screen_counts"] = counts
    out.attrs["valid_range"] = (lo, hi)
    out.attrs["empty_files"] = [f for p in pieces for f in p.empty]
    for key in ("identified_by", "units_in_file", "conversion", "file_lat_order",
                "file_lon_convention"):
        seen = list(dict.fromkeys(p.info.get(key, "unknown") for p in pieces))
        out.attrs[key] = seen[0] if len(seen) == 1 else "mixed: " + "; ".join(seen)
    out.name = spec.role
    return out


def _step_files(piece: _Piece) -> list[str]:
    """The file of each time step of a piece (stacked files hold equally many steps)."""
    n = piece.data.sizes["time"]
    per = n // max(len(piece.paths), 1)
    return [f for f in piece.paths for _ in range(per)]


def match_grid(da: xr.DataArray, target: xr.DataArray, path: str) -> xr.DataArray:
    """Bring ``da`` onto ``target``'s lat/lon (area-average when finer, interpolate when coarser)."""
    conv = "0to360" if float(target.lon.max()) > 180.0 else "pm180"
    da = normalize_lon(da, path, convention=conv)
    lat, lon = target.lat.values, target.lon.values
    if same_axis(da.lat.values, lat) and same_axis(da.lon.values, lon):
        return da.assign_coords(lat=lat, lon=lon)
    out = regrid_like(da, lat, lon, path)
    out.attrs = dict(da.attrs)
    return out


def grid_summary(da: xr.DataArray) -> str:
    """One line describing a grid, for messages and `euphotic inspect`."""
    return (
        f"{da.sizes['lat']} x {da.sizes['lon']} cells, lat {float(da.lat[0]):g}..{float(da.lat[-1]):g} "
        f"step {abs(axis_step(da.lat.values)):g}, lon {float(da.lon[0]):g}..{float(da.lon[-1]):g} "
        f"step {abs(axis_step(da.lon.values)):g}"
    )
