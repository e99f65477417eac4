"""Run a numpy block kernel on numpy, dask or xarray inputs, lazily where they are lazy."""

from __future__ import annotations

from collections.abc import Callable

import dask.array as da
import numpy as np
import xarray as xr

from euphotic import units


def as_units(x, expected: str, name: str):
    """Convert ``x`` to ``expected`` units when it says its own (xarray ``units`` attribute or a
    pint Quantity); a bare array is taken to be in ``expected`` units already."""
    if isinstance(x, xr.DataArray):
        given = x.attrs.get("units")
        if given is not None and str(given).strip():
            try:
                a, b = units.linear_factors(given, expected)
            except units.UnitError as exc:
                raise ValueError(f"{name}: {exc}") from None
            if (a, b) != (1.0, 0.0):
                x = x * a + b if b else x * a
        return x
    if hasattr(x, "magnitude") and hasattr(x, "units"):  # pint Quantity
        return x.to(units.parse_units(expected)).magnitude
    return x


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
    if any(isinstance(a, da.Array) for a in args):
        arrays = da.broadcast_arrays(*[da.asarray(a) for a in args])
        return da.map_blocks(kernel, *arrays, dtype=np.float64)
    return kernel(*[np.asarray(a, dtype=np.float64) for a in args])
