"""Compiled (numba) element kernels: one fused pass per block, float64 inside, GIL released.

Each model module writes its per-cell formula as a small function decorated with
:func:`jit_point`; :func:`block_kernel` turns such a function into a numpy block function that
broadcasts its inputs and loops over them in compiled code with ``nogil=True``, so dask threads
run blocks in parallel. Without numba (or with ``EUPHOTIC_KERNEL=numpy``) the models use their
numpy formulas instead; both are tested to agree.
"""

from __future__ import annotations

import os
from collections.abc import Callable

import numpy as np

try:  # numba is a declared dependency; the numpy path remains as the reference and fallback
    import numba

    HAVE_NUMBA = True
except ImportError:  # pragma: no cover
    numba = None
    HAVE_NUMBA = False


def use_compiled() -> bool:
    """True when compiled kernels are available and not switched off by EUPHOTIC_KERNEL=numpy."""
    return HAVE_NUMBA and os.environ.get("EUPHOTIC_KERNEL", "compiled").lower() != "numpy"


def jit_point(fn: Callable) -> Callable:
    """Compile a scalar function for use inside other compiled kernels."""
    if not HAVE_NUMBA:
        return fn
    return numba.njit(nogil=True, cache=True, inline="always")(fn)


def jit_loop(fn: Callable) -> Callable | None:
    """Compile a loop over flat arrays (cached on disk, GIL released); None without numba."""
    if not HAVE_NUMBA:
        return None
    return numba.njit(nogil=True, cache=True)(fn)


def block_kernel(loop: Callable | None) -> Callable | None:
    """A numpy block function ``f(chl, par, sst, day_length) -> float64 array`` that runs the
    compiled ``loop(c, p, t, d, out)`` over the broadcast inputs."""
    if loop is None:
        return None

    def block(chl, par, sst, day_length):
        arrays = np.broadcast_arrays(
            np.asarray(chl), np.asarray(par), np.asarray(sst), np.asarray(day_length)
        )
        out = np.empty(arrays[0].shape, dtype=np.float64)
        flat = [np.ascontiguousarray(a).reshape(-1) for a in arrays]
        loop(*flat, out.reshape(-1))
        return out

    return block


def month_block(accumulate: Callable | None) -> Callable | None:
    """Block function for the fused monthly pass (see :func:`euphotic.aggregate.monthly_npp`).

    ``accumulate(c, p, t, d, ocean, total, count)`` adds one day's valid rates of a (lat, lon)
    block into ``total`` and 1 into ``count``. The returned function takes blocks shaped
    (day, lat, lon) for chl/PAR/SST, (day, lat) for day length and (lat, lon) for the ocean
    mask, and an accumulator ``acc`` shaped (2, lat, lon) (the sum of the daily rates and the
    number of valid days so far; None for a fresh one) that it adds into and returns.
    """
    if accumulate is None:
        return None

    def block(chl, par, sst, day_length, ocean, acc=None):
        if acc is None:
            acc = np.zeros((2,) + chl.shape[1:], dtype=np.float64)
        oc = np.ascontiguousarray(ocean, dtype=np.bool_)
        for k in range(chl.shape[0]):
            accumulate(chl[k], par[k], sst[k], np.ascontiguousarray(day_length[k], dtype=np.float64),
                       oc, acc[0], acc[1])
        return acc

    return block
