"""Open gridded input files lazily and put them in a common form.

Each input (any role of :mod:`euphotic.roles`: chlorophyll, PAR, temperature, day length,
backscattering, attenuation, mixed-layer depth) becomes one dask-backed
``xarray.DataArray`` with dims ``("time", "lat", "lon")``: latitude ascending, longitude in
[-180, 180) (or [0, 360) for a grid that is only contiguous that way), values decoded and
converted to the model's units, and two coordinates along ``time`` giving each period's first
day (``period_start``) and the day after its last (``period_end``). Nothing is loaded.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import xarray as xr
from dask.base import tokenize

from euphotic import chunkread, lazyread, screen
from euphotic.cfdecode import (
    apply_valid_range,
    check_sample,
    conversion_text,
    decode_raw,
    decoder_for,
    sample_index,
    unit_factors,
)
from euphotic.dating import CalendarDateError, file_dates, period_length, resolve_stamps
from euphotic.errors import EuphoticError, GridMismatchError, InputFileError
from euphotic.inputfiles import (
    LONG_NAMES,
    STANDARD_NAMES,
    TARGET_UNITS,
    InputSpec,
    Role,
    find_axis,
    find_variable,
    small_chunk_cache,
)
from euphotic.regrid import axis_step, is_regular, regrid_like, same_axis
from euphotic.roles import role
from euphotic.stacking import h5_layout, like_first

__all__ = ["LONG_NAMES", "STANDARD_NAMES", "TARGET_UNITS", "InputSpec", "Role", "decode_raw",
           "grid_summary", "lon_axis", "match_grid", "normalize_lon", "open_input",
           "period_length"]


class _NotStackable(Exception):
    """The chunk reader cannot read every file of a stack (they are then opened one by one)."""


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
    #: (paths, chunk maps) of files laid out exactly like this one -> ``data`` over this file
    #: then those, read with this file's layout and decoder; None when not chunk-read
    restack: Callable[[list[str], list], xr.DataArray] | None = None



def lon_axis(lon, path: str, convention: str | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Longitudes wrapped to [-180, 180) (or [0, 360)) and sorted: ``(values, order)`` with
    ``order`` the position of each sorted value in ``lon``; a :class:`GridMismatchError` when
    they do not make a regular axis either way."""
    lon = np.asarray(lon, dtype=np.float64)
    options = [convention] if convention else ["pm180", "0to360"]
    for conv in options:
        wrapped = ((lon + 180.0) % 360.0) - 180.0 if conv == "pm180" else lon % 360.0
        order = np.argsort(wrapped, kind="stable")
        if is_regular(wrapped[order]):
            return wrapped[order], order
    raise GridMismatchError(
        path, "longitudes are not a regular axis (after wrapping to -180..180 and 0..360)"
    )


def normalize_lon(da: xr.DataArray, path: str, convention: str | None = None) -> xr.DataArray:
    """Wrap longitudes to [-180, 180) (or [0, 360)), sort them, and check the grid is regular."""
    values, order = lon_axis(da["lon"].values, path, convention)
    if not np.all(order == np.arange(len(order))):
        da = da.isel(lon=order)
    return da.assign_coords(lon=values)


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


def _parts(shape: tuple, name: str, paths: list[str], maps: list | None = None):
    """The stored chunks of ``name`` (of ``shape``) in each file, for
    :mod:`euphotic.chunkread` (``(parts, False)``: raw values), or ``(None, True)`` when it
    cannot read them all alike. ``maps``: the files' chunk maps where they are known already
    (None: read here)."""
    if not chunkread.enabled():
        return None, True
    maps = [m if m is not None else chunkread.chunk_map(p, name)
            for p, m in zip(paths, maps or [None] * len(paths), strict=True)]
    if any(m is None for m in maps) or len({(m.shape, m.chunks, m.dtype) for m in maps}) != 1:
        return None, True
    if maps[0].shape != tuple(shape):
        return None, True
    return [chunkread.ChunkedArray(m) for m in maps], False


def _open_one(spec: InputSpec, path: str) -> _Piece:
    """One file as a :class:`_Piece` (with ``restack`` to read files laid out like it)."""
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
    name, identified_by = find_variable(ds, spec, path)
    da = ds[name]
    enc = dict(da.encoding)
    file_dims = tuple(da.dims)
    lat_d = find_axis(ds, da, "lat", path)
    lon_d = find_axis(ds, da, "lon", path)
    units_used = spec.units or da.attrs.get("units")
    std_name = da.attrs.get("standard_name")
    lat_raw = np.asarray(ds[lat_d].values, dtype=np.float64)
    lon_raw = np.asarray(ds[lon_d].values, dtype=np.float64)
    info = {
        "identified_by": identified_by,
        "units_in_file": str(units_used),
        "conversion": conversion_text(spec, str(units_used)) if units_used else "unknown",
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
    start, end, stamps = file_dates(spec, ds, time_d, da.sizes[time_d] if time_d else 1, path)

    # --- a look at a few values (temperature only): one stored chunk, no dask
    empty: list[str] = []
    sample_attrs = dict(da.attrs)
    if role(spec.role).kelvin_check and units_used:
        index, whole = sample_index(da.shape, file_dims, enc.get("chunksizes"), lat_d, lon_d)
        try:
            decoded = ds[name].variable[index]  # read (and CF-decoded) by the netCDF library
            values = np.asarray(apply_valid_range(
                xr.DataArray(np.asarray(decoded.values, np.float64), dims=decoded.dims),
                enc, sample_attrs).values)
        except Exception as exc:  # noqa: BLE001 - the library's read errors
            raise InputFileError(path, f"reading values failed ({exc.__class__.__name__}: "
                                 f"{exc}): the file is damaged or unreadable") from None
        n_steps = da.sizes[time_d] if time_d else 1
        check_sample(spec, path, values, whole, n_steps, str(units_used), std_name or name,
                      empty)

    file_time_d = time_d
    # --- grid: the order of latitudes and longitudes in the common form
    if lat_raw.size > 1 and not is_regular(lat_raw):
        raise GridMismatchError(
            path, "latitudes are not a regular axis: only regular lat-lon grids are read"
        )
    lat_order = np.arange(lat_raw.size)
    if lat_raw.size > 1 and lat_raw[1] < lat_raw[0]:
        lat_order = lat_order[::-1]
    lon_values, lon_order = lon_axis(lon_raw, path)
    a, b = unit_factors(spec, units_used, path, name)

    # --- values: one task per stored chunk reads, orients and decodes it (euphotic.lazyread)
    dims = tuple(da.dims)
    parts, decoded = _parts(da.shape, name, [path])
    detached = parts is not None  # values read by euphotic.chunkread need no open handle
    if parts is None:
        parts, decoded = [_NamedReads(ds[name].variable, path)], True
    stored = parts[0].shape
    chunks = (parts[0].cmap.chunks if detached
              else tuple(enc.get("chunksizes") or stored))
    in_task = lazyread.runs_of(lon_order) is not None
    layout = lazyread.Layout(
        axes=(dims.index(time_d) if time_d else None, dims.index(lat_d), dims.index(lon_d)),
        squeeze=tuple(dims.index(d) for d in squeeze),
        lat_order=lat_order, lon_order=lon_order if in_task else np.arange(lon_raw.size),
        chunks=tuple(chunks),
        group=lazyread.block_group(chunks[dims.index(lat_d)], chunks[dims.index(lon_d)],
                                   lat_raw.size, lon_raw.size))
    decoder = decoder_for(parts[0].dtype, enc, dict(da.attrs), a, b, decoded=decoded,
                          screen_range=screen.valid_range(spec.role, spec.valid_range))
    lat_sorted = lat_raw[lat_order]
    shape = da.shape

    def values_of(paths: list[str], parts: list) -> xr.DataArray:
        stats = [os.stat(p) for p in paths]
        key = ("chunkread-" if detached else "ncread-") + tokenize(
            paths, [(st.st_mtime_ns, st.st_size) for st in stats], name, layout.axes,
            layout.squeeze, layout.chunks, layout.group, lat_order, lon_order, decoder, decoded)
        out = xr.DataArray(lazyread.dask_array(parts, layout, decoder, key),
                           dims=("time", "lat", "lon"),
                           coords={"lat": lat_sorted, "lon": lon_values if in_task else lon_raw},
                           name=name)
        if not in_task:  # an irregular longitude order: reordered by xarray
            out = normalize_lon(out, path)
        out.attrs = {
            "units": TARGET_UNITS[spec.role],
            "long_name": LONG_NAMES[spec.role],
            "source_variable": name,
        }
        return out

    first_map = parts[0].cmap if detached else None

    def restack(more: list[str], maps: list) -> xr.DataArray:
        paths = [path, *more]
        parts, _ = _parts(shape, name, paths, [first_map, *maps])
        if parts is None:
            raise _NotStackable(path)
        return values_of(paths, parts)

    values = values_of([path], parts)
    if detached:
        ds.close()
    return _Piece(path=path, data=values, start=start, end=end, stamps=stamps, variable=name,
                  time_dim=file_time_d, file_dims=file_dims,
                  detached=detached, paths=[path], info=info, enc=enc,
                  sample_attrs=sample_attrs, empty=empty, grid_dims=(lat_d, lon_d),
                  restack=restack if detached else None)


def _open_all(spec: InputSpec, paths: list[str]) -> list[_Piece]:
    """Every file as pieces. Files laid out like the first (same variable layout, attributes
    and grid: the usual daily series) are read as one stacked piece after a light h5py check;
    any other file is opened and checked on its own."""
    first = _open_checked(spec, paths[0])
    if len(paths) == 1 or not first.detached or (first.time_dim is None and first.stamps is not None):
        return [first] + [_open_checked(spec, p) for p in paths[1:]]
    import h5py

    with h5py.File(paths[0], "r") as f:
        layout = h5_layout(f, first)
    same, others = [(paths[0], first.start, first.end, first.stamps, None)], []
    for p in paths[1:]:
        try:
            hit = like_first(spec, p, first, layout) if layout is not None else None
        except CalendarDateError as exc:
            raise InputFileError(p, str(exc)) from None
        if hit is None:
            others.append(_open_checked(spec, p))
        else:
            same.append((p, *hit))
    if len(same) == 1:
        return [first] + others
    try:  # the first file's layout and decoder over every file laid out like it
        stacked = dataclasses.replace(first, data=first.restack(
            [x[0] for x in same[1:]], [x[4] for x in same[1:]]))
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
    except CalendarDateError as exc:
        raise InputFileError(path, str(exc)) from None



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
    small_chunk_cache()
    pieces = _open_all(spec, paths)
    try:
        resolve_stamps(pieces, spec)
    except CalendarDateError as exc:
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
    counts = screen.count_marks(out, role=spec.role, lo=lo, hi=hi)  # marked when read
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
    conv = "0to360" if float(np.max(target.lon.values)) > 180.0 else "pm180"  # no numbagg compile
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
