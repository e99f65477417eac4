"""Files laid out alike: the usual daily series, checked cheaply and read as one stack.

A file whose data variable has the same shape, type, chunks, filters and attributes as the
first file's, on the same coordinates, is read like it: its dates (and, for temperature, the
open-time value sample) are taken with h5py alone, without opening it through the netCDF
library (:func:`like_first`), and its stored chunks join the first file's in one dask array.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from euphotic.cfdecode import check_sample, decoded_sample, sample_index
from euphotic.dating import file_dates
from euphotic.errors import InputFileError
from euphotic.inputfiles import InputSpec
from euphotic.roles import role

if TYPE_CHECKING:
    from euphotic.readers import _Piece

#: HDF5 attributes that netCDF-4 and dimension scales manage themselves (not metadata).
H5_INTERNAL = {"DIMENSION_LIST", "REFERENCE_LIST", "CLASS", "NAME", "_Netcdf4Dimid",
                "_Netcdf4Coordinates", "_NCProperties", "_nc3_strict"}


def h5_attrs(obj) -> dict:
    """Attributes of an h5py object as netCDF gives them: text as str, numbers as numpy."""
    out = {}
    for k in obj.attrs:
        if k in H5_INTERNAL:
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


def comparable(attrs: dict) -> tuple:
    """Attributes in a form that compares equal exactly when they are the same (NaN too)."""
    return tuple(
        (k, np.asarray(v).dtype.str, np.asarray(v).tobytes())
        if isinstance(v, np.ndarray | np.generic | float | int) else (k, repr(v))
        for k, v in sorted(attrs.items())
    )


def h5_layout(f, first: _Piece) -> tuple | None:
    """What must match for a file to be read like ``first`` (an open h5py File): the
    variable's shape, type, chunks, filters and attributes, and its coordinate values."""
    import h5py

    v = f.get(first.variable)
    if not isinstance(v, h5py.Dataset) or v.chunks is None:
        return None
    plist = v.id.get_create_plist()
    sig = [v.shape, v.dtype.str, v.chunks,
           tuple(plist.get_filter(i)[0] for i in range(plist.get_nfilters())),
           comparable(h5_attrs(v))]
    for d in first.file_dims:
        if d == first.time_dim:
            continue
        c = f.get(d)
        sig.append((d, c[()].tobytes(), comparable(h5_attrs(c)))
                   if isinstance(c, h5py.Dataset) else (d, None))
    return tuple(sig)


def h5_time_dataset(f, spec: InputSpec, time_d: str | None, n_time: int) -> xr.Dataset:
    """What :func:`file_dates` reads from a file, taken from an open h5py File: the time variable
    and its bounds, and the global attributes where ACDD dates may be used."""
    if spec.date_pattern:
        return xr.Dataset()  # dated by the file name
    variables = {}
    if time_d is not None:
        t = f[time_d]
        variables[time_d] = xr.Variable((time_d,), t[()], h5_attrs(t))
        bname = variables[time_d].attrs.get("bounds")
        if bname and bname in f:
            b = f[bname]
            variables[bname] = xr.Variable((time_d, "nv"), b[()], h5_attrs(b))
    acdd_possible = time_d is None or (len(variables) == 1 and n_time == 1)
    return xr.Dataset(variables, attrs=h5_attrs(f) if acdd_possible else {})


def like_first(spec: InputSpec, path: str, first: _Piece, layout: tuple):
    """Dates of a file laid out exactly like ``first``, read with h5py only (no netCDF open),
    and the chunk map of its variable (:func:`euphotic.chunkread.chunk_map`, None if the
    chunk reader cannot read it): ``(start, end, stamps, chunk map)``; None when anything
    differs (the file is then opened and checked in full)."""
    import h5py

    from euphotic import chunkread

    try:
        f = h5py.File(path, "r")
    except OSError:
        return None
    with f:
        try:
            if h5_layout(f, first) != layout:
                return None
            var = f[first.variable]
            n_time = var.shape[first.file_dims.index(first.time_dim)] if first.time_dim else 1
            ds = h5_time_dataset(f, spec, first.time_dim, n_time)
            cmap = chunkread.chunk_map_of(f, first.variable, path)
        except (KeyError, OSError, ValueError, TypeError):
            return None  # anything unexpected: the full open reports it properly
        if (role(spec.role).kelvin_check
                and first.info.get("units_in_file") not in (None, "None")):
            lat_d, lon_d = first.grid_dims
            index, whole = sample_index(var.shape, first.file_dims, var.chunks, lat_d, lon_d)
            try:
                raw = var[index]
            except OSError as exc:
                raise InputFileError(path, f"reading values failed ({exc}): the file is "
                                     "damaged or unreadable") from None
            dims = [d for d, k in zip(first.file_dims, index, strict=True) if isinstance(k, slice)]
            values = decoded_sample(raw, dims, first.variable, first.enc, first.sample_attrs)
            what = first.sample_attrs.get("standard_name") or first.variable
            check_sample(spec, path, values, whole, n_time, first.info["units_in_file"], what,
                          first.empty)
    start, end, stamps = file_dates(spec, ds, first.time_dim, n_time, path)
    if (stamps is None) != (first.stamps is None):
        return None
    return start, end, stamps, cmap

