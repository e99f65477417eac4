"""Bring a variable on one regular latitude-longitude grid onto another, lazily.

Each axis is handled on its own: the same axis is relabelled, a finer axis with a whole-number
ratio is area-averaged onto the target cells, a coarser axis is linearly interpolated (skipping
missing neighbours, wrapping longitude on global grids). All steps are dask-friendly
(``isel`` with integer indexers, ``coarsen``, arithmetic).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from euphotic.errors import GridMismatchError

#: Relative tolerance on coordinate values and spacing when comparing grids.
COORD_RTOL = 1e-3


def axis_step(values: np.ndarray) -> float:
    """Spacing of a regular, ascending axis (degrees)."""
    return float((values[-1] - values[0]) / (len(values) - 1)) if len(values) > 1 else np.nan


def is_regular(values: np.ndarray) -> bool:
    """True when an axis has one spacing (to :data:`COORD_RTOL` of a step)."""
    v = np.asarray(values, dtype=np.float64)
    if v.size < 2:
        return True
    d = np.diff(v)
    return bool(np.all(np.abs(d - d.mean()) <= COORD_RTOL * abs(d.mean())) and d.mean() != 0)


def same_axis(a: np.ndarray, b: np.ndarray) -> bool:
    """True when two axes are the same to a small fraction of a cell."""
    if len(a) != len(b):
        return False
    step = abs(axis_step(np.asarray(b))) if len(b) > 1 else 1.0
    return bool(np.allclose(a, b, rtol=0, atol=COORD_RTOL * step))


def is_global_lon(lon: np.ndarray) -> bool:
    """True when a longitude axis goes all the way round."""
    step = axis_step(lon)
    return bool(abs(len(lon) * step - 360.0) <= COORD_RTOL * 360.0)


def _coarsen_axis(da: xr.DataArray, dim: str, target: np.ndarray, path: str) -> xr.DataArray:
    src = da[dim].values
    s_step, t_step = axis_step(src), axis_step(target)
    ratio = t_step / s_step
    r = int(round(ratio))
    if abs(ratio - r) > COORD_RTOL * r:
        raise GridMismatchError(
            path,
            f"{dim} spacing {s_step:g} is finer than the target {t_step:g} by a "
            f"non-whole ratio {ratio:.3f}; cannot area-average onto the target grid",
        )
    first_edge = target[0] - 0.5 * t_step
    start = (first_edge + 0.5 * s_step - src[0]) / s_step
    i0 = int(round(start))
    if abs(start - i0) > 0.05 or i0 < 0 or i0 + r * len(target) > len(src):
        raise GridMismatchError(
            path,
            f"{dim} cells do not line up with or do not cover the target grid "
            f"({src[0]:g}..{src[-1]:g} step {s_step:g} vs {target[0]:g}..{target[-1]:g} step {t_step:g})",
        )
    sub = da.isel({dim: slice(i0, i0 + r * len(target))})
    if dim == "lat":
        w = xr.DataArray(np.cos(np.deg2rad(sub[dim].values)), dims=dim, coords={dim: sub[dim]})
    else:
        w = xr.ones_like(sub[dim], dtype=np.float64)
    valid = sub.notnull()
    num = (sub.fillna(0.0) * w).coarsen({dim: r}).sum()
    den = (valid * w).coarsen({dim: r}).sum()
    out = (num / den.where(den > 0)).astype(da.dtype if da.dtype.kind == "f" else np.float64)
    return out.assign_coords({dim: target})


def _interp_axis(
    da: xr.DataArray, dim: str, target: np.ndarray, path: str, cyclic: bool
) -> xr.DataArray:
    src = da[dim].values.astype(np.float64)
    step = axis_step(src)
    n = len(src)
    if cyclic:
        pos = ((target - src[0]) / step) % n
        i0 = np.floor(pos).astype(np.int64)
        w1 = pos - i0
        i1 = (i0 + 1) % n
        i0 = i0 % n
    else:
        half = 0.5 * step + COORD_RTOL * step
        if target[0] < src[0] - half or target[-1] > src[-1] + half:
            raise GridMismatchError(
                path,
                f"{dim} {src[0]:g}..{src[-1]:g} does not cover the target "
                f"{target[0]:g}..{target[-1]:g}",
            )
        pos = np.clip((target - src[0]) / step, 0.0, n - 1.0)
        i0 = np.clip(np.floor(pos).astype(np.int64), 0, max(n - 2, 0))
        i1 = np.minimum(i0 + 1, n - 1)
        w1 = pos - i0
    w0 = 1.0 - w1
    a0 = da.isel({dim: xr.DataArray(i0, dims=dim)}).drop_vars(dim)
    a1 = da.isel({dim: xr.DataArray(i1, dims=dim)}).drop_vars(dim)
    w0 = xr.DataArray(w0, dims=dim)
    w1 = xr.DataArray(w1, dims=dim)
    num = a0.fillna(0.0) * w0 + a1.fillna(0.0) * w1
    den = a0.notnull() * w0 + a1.notnull() * w1
    out = num / den.where(den > 1e-12)
    return out.astype(np.float64).assign_coords({dim: target})


def regrid_axis(da: xr.DataArray, dim: str, target: np.ndarray, path: str) -> xr.DataArray:
    """Put ``da`` on the ``target`` values of one axis (``"lat"`` or ``"lon"``)."""
    src = da[dim].values
    if same_axis(src, target):
        return da.assign_coords({dim: target})
    if len(src) < 2 or not is_regular(src):
        raise GridMismatchError(path, f"{dim} is not a regular axis; cannot match the target grid")
    s_step, t_step = abs(axis_step(src)), abs(axis_step(target))
    if s_step < t_step * (1 - COORD_RTOL):
        return _coarsen_axis(da, dim, target, path)
    cyclic = dim == "lon" and is_global_lon(src)
    return _interp_axis(da, dim, target, path, cyclic)


def regrid_like(da: xr.DataArray, lat: np.ndarray, lon: np.ndarray, path: str) -> xr.DataArray:
    """Put ``da`` (dims include ``lat``, ``lon``; ascending) onto the target cell centres.

    Finer axes are area-averaged (whole-number ratios only), coarser axes interpolated.
    Raises :class:`~euphotic.errors.GridMismatchError` naming ``path`` when that is impossible.
    """
    out = regrid_axis(da, "lat", np.asarray(lat, dtype=np.float64), path)
    out = regrid_axis(out, "lon", np.asarray(lon, dtype=np.float64), path)
    return out.transpose(*da.dims)
