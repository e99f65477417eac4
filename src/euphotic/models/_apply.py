"""Run a numpy block kernel on numpy, dask or xarray inputs, lazily where they are lazy."""

from __future__ import annotations

import sys
from collections.abc import Callable

import numpy as np
import xarray as xr

from euphotic import units
from euphotic.errors import EuphoticError


class InputMismatchError(EuphoticError):
    """Model inputs (DataArrays) whose dimension names, sizes or coordinates differ, which
    xarray would otherwise broadcast against each other instead of matching cell by cell."""


_SAME_GRID = "give all inputs the same dimension names and grid"


def check_same_grid(**named) -> None:
    """Refuse DataArray inputs that would broadcast instead of lining up cell by cell.

    The rule: the DataArray with the most dimensions (the first one given, on a tie) is the
    reference; every other DataArray's dims must be a subset of its dims (in any order), with
    the same length and identical coordinate values on every shared dim (where both have a
    coordinate there). So a 1-D ``day_length(lat)`` or a scalar broadcasts; chlorophyll on
    ``latitude/longitude`` beside SST on ``lat/lon``, or two different grids, do not.

    Raises
    ------
    InputMismatchError
        Naming the argument, its dims or coordinate, and the reference's.
    """
    arrays = [(k, v) for k, v in named.items() if isinstance(v, xr.DataArray)]
    if len(arrays) < 2:
        return
    ref_name, ref = max(arrays, key=lambda kv: kv[1].ndim)
    for name, a in arrays:
        if a is ref:
            continue
        if not set(a.dims) <= set(ref.dims):
            raise InputMismatchError(
                f"{name} has dims {tuple(a.dims)} but {ref_name} has {tuple(ref.dims)}: "
                f"{_SAME_GRID}"
            )
        for d in a.dims:
            if a.sizes[d] != ref.sizes[d]:
                raise InputMismatchError(
                    f"{name} has {a.sizes[d]} values along {d!r} but {ref_name} has "
                    f"{ref.sizes[d]}: {_SAME_GRID}"
                )
            if d in a.coords and d in ref.coords:
                mine, theirs = a[d].values, ref[d].values
                if not _same_values(mine, theirs):
                    i = int(np.flatnonzero(_differs(mine, theirs))[0])
                    raise InputMismatchError(
                        f"{name} coordinate {d!r} differs from {ref_name}'s (at index {i}: "
                        f"{mine[i]} vs {theirs[i]}): {_SAME_GRID}"
                    )


def _differs(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Where two coordinate arrays of one length differ (NaN equal to NaN)."""
    out = a != b
    try:
        out &= ~(np.isnan(a) & np.isnan(b))
    except TypeError:  # strings, objects: no NaN
        pass
    return out


def _same_values(a: np.ndarray, b: np.ndarray) -> bool:
    """Identical coordinate values (NaN equal to NaN where the dtype has NaN)."""
    return a.shape == b.shape and not _differs(a, b).any()


def as_units(x, expected: str, name: str):
    """Convert ``x`` to ``expected`` units when it says its own (xarray ``units`` attribute or a
    pint Quantity); a bare array is taken to be in ``expected`` units already.

    PAR (``expected`` = :data:`euphotic.units.PAR_UNITS`) goes through
    :func:`euphotic.units.par_factors`, the readers' conversion: a daily dose, a daily-mean
    photon flux (x 86,400 s) or a daily-mean energy flux in W m-2 (McCree's 4.57 umol J-1).
    """
    if isinstance(x, xr.DataArray):
        given = x.attrs.get("units")
        if given is not None and str(given).strip():
            a, b = _factors(str(given), expected, name)
            if (a, b) != (1.0, 0.0):
                x = x * a + b if b else x * a
        return x
    if hasattr(x, "magnitude") and hasattr(x, "units"):  # pint Quantity
        if expected == units.PAR_UNITS:
            a, _ = _factors(str(x.units), expected, name)
            return x.magnitude * a
        return x.to(units.parse_units(expected)).magnitude
    return x


def _factors(given: str, expected: str, name: str) -> tuple[float, float]:
    try:
        if expected == units.PAR_UNITS:
            return units.par_factors(given)[0], 0.0
        return units.linear_factors(given, expected)
    except units.UnitError as exc:
        raise ValueError(f"{name}: {exc}") from None


def model_inputs(spec, bound: dict) -> list:
    """A model's inputs (``bound``: role -> value, None for an optional input not given),
    checked (:func:`check_same_grid`) and converted to the units its declaration names
    (:class:`euphotic.models._declare.ModelSpec`), in declared order; a missing optional
    input becomes NaN."""
    check_same_grid(**{k: v for k, v in bound.items() if v is not None})
    out = []
    for inp in spec.inputs:
        v = bound.get(inp.role)
        out.append(np.nan if v is None else as_units(v, inp.units, inp.role))
    return out


def apply_kernel(kernel: Callable, *args, name: str, attrs: dict | None = None):
    """Apply an elementwise numpy ``kernel`` to broadcastable inputs.

    xarray inputs -> xarray output (dask-backed stays lazy); dask arrays -> dask array;
    anything else -> numpy array (float64).
    """
    if any(isinstance(a, xr.DataArray) for a in args):
        out = xr.apply_ufunc(
            kernel,
            *args,
            dask="parallelized",
            output_dtypes=[np.float64],
            keep_attrs=False,
        )
        out.name = name
        if attrs:
            out.attrs.update(attrs)
        return out
    # dask.array is imported only when dask is in play: a dask array among the inputs means
    # the module is loaded already (keeps ``import euphotic`` light).
    da = sys.modules.get("dask.array")
    if da is not None and any(isinstance(a, da.Array) for a in args):
        arrays = da.broadcast_arrays(*[da.asarray(a) for a in args])
        return da.map_blocks(kernel, *arrays, dtype=np.float64)
    return kernel(*[np.asarray(a, dtype=np.float64) for a in args])
