"""Compiled (numba) element kernels: one fused pass per block, float64 inside, GIL released.

Each model module writes its per-cell formula as a small function decorated with
:func:`jit_point`; :mod:`euphotic.models._declare` generates the loops over blocks that call it
(compiled with ``nogil=True``, so dask threads run blocks in parallel). Without numba (or with
``EUPHOTIC_KERNEL=numpy``) the models use their numpy formulas instead; both are tested to
agree.
"""

from __future__ import annotations

import os
from collections.abc import Callable

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
