"""Compiled (numba) element kernels: one fused pass per block, float64 inside, GIL released.

Each model module writes its per-cell formula as a small function decorated with
:func:`jit_point`; :mod:`euphotic.models._declare` generates the loops over blocks that call it
(compiled with ``nogil=True``, so dask threads run blocks in parallel). Without numba (or with
``EUPHOTIC_KERNEL=numpy``) the models use their numpy formulas instead; both are tested to
agree.

numba itself is imported only when the first compiled loop is built (:func:`compile_points`),
not by ``import euphotic``: importing it costs most of a second.
"""

from __future__ import annotations

import importlib.util
import os
import sys
import threading
from collections.abc import Callable

# numba is a declared dependency; the numpy path remains as the reference and fallback
HAVE_NUMBA = importlib.util.find_spec("numba") is not None

#: Point functions waiting to be compiled, in the order they were declared.
_PENDING: list[Callable] = []
#: Plain function -> its compiled dispatcher.
_COMPILED: dict[Callable, Callable] = {}
_LOCK = threading.Lock()


def use_compiled() -> bool:
    """True when compiled kernels are available and not switched off by EUPHOTIC_KERNEL=numpy."""
    return HAVE_NUMBA and os.environ.get("EUPHOTIC_KERNEL", "compiled").lower() != "numpy"


def jit_point(fn: Callable) -> Callable:
    """Mark a scalar function for use inside other compiled kernels.

    The plain function is returned (and works as such from Python); :func:`compile_points`
    later puts its compiled version in its place in the defining module, where point functions
    calling each other and the generated loops find it.
    """
    if HAVE_NUMBA:
        with _LOCK:
            _PENDING.append(fn)
    return fn


def compile_points() -> None:
    """Compile every marked point function and bind the compiled versions, in place of the
    plain ones, in the modules that defined them (numba resolves a compiled function's
    globals when it compiles, so these must be in place before the loops are built)."""
    if not HAVE_NUMBA:
        return
    with _LOCK:
        if not _PENDING:
            return
        import numba

        new = {}
        for fn in _PENDING:
            new[fn] = numba.njit(nogil=True, cache=True, inline="always")(fn)
        _COMPILED.update(new)
        _PENDING.clear()
        for modname in {fn.__module__ for fn in _COMPILED}:
            mod = sys.modules.get(modname)
            if mod is None:
                continue
            g = vars(mod)
            for key, value in list(g.items()):
                if callable(value) and not isinstance(value, type):
                    try:
                        compiled = _COMPILED.get(value)
                    except TypeError:  # unhashable callable
                        continue
                    if compiled is not None:
                        g[key] = compiled
