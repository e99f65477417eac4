"""Compiled loops of the read and write path, numba imported only when one is first needed
(importing numba costs a few tenths of a second that commands which compute nothing should not
pay)."""

from __future__ import annotations

from collections.abc import Callable

_COMPILED: dict[Callable, Callable] = {}


def compiled(fn: Callable) -> Callable | None:
    """``fn`` compiled by numba (``nogil``, machine code cached on disk), compiled on first
    use; None without numba (the caller then takes its numpy form)."""
    out = _COMPILED.get(fn)
    if out is None:
        try:
            import numba
        except ImportError:  # pragma: no cover - numba is a dependency
            return None
        out = _COMPILED[fn] = numba.njit(nogil=True, cache=True)(fn)
    return out
