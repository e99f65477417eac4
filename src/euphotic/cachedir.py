"""Where euphotic keeps what it can rebuild but would rather not at every start."""

from __future__ import annotations

import os
from pathlib import Path


def cache_dir(kind: str) -> Path:
    """The folder for one kind of cached file: ``$EUPHOTIC_CACHE_DIR`` when set (every kind
    together), else ``$XDG_CACHE_HOME/euphotic/<kind>`` (``~/.cache`` without XDG).

    Kinds in use: ``"kernels"`` (generated model loops and numba's machine code of them),
    ``"masks"`` (the packaged ocean mask on each grid met), ``"lookups"`` (unit factors and
    citation lines). Every file there can be deleted at any time: it is built again."""
    env = os.environ.get("EUPHOTIC_CACHE_DIR")
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "euphotic" / kind
