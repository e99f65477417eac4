"""Published net primary production models, one per module, and a registry by name.

Each model function takes surface chlorophyll (mg m-3), daily PAR (mol photons m-2 d-1),
sea surface temperature (degC) and day length (h) and returns depth-integrated net primary
production, mg C m-2 d-1. They accept numpy arrays, dask arrays and (dask-backed) xarray
objects; on dask they stay lazy.
"""

from __future__ import annotations

from collections.abc import Callable

from euphotic.models._apply import InputMismatchError, check_same_grid
from euphotic.models._compiled import use_compiled
from euphotic.models.eppley_vgpm import eppley_vgpm, eppley_vgpm_month_block, pb_opt_eppley
from euphotic.models.morel_berthon import euphotic_depth
from euphotic.models.vgpm import pb_opt_behrenfeld_falkowski, vgpm, vgpm_month_block

#: Model name -> function. A new model is one module and one line here.
MODELS: dict[str, Callable] = {
    "vgpm": vgpm,
    "eppley_vgpm": eppley_vgpm,
}

#: Model name -> fused monthly block function (compiled; None or absent: use the model function).
MONTH_BLOCKS: dict[str, Callable | None] = {
    "vgpm": vgpm_month_block,
    "eppley_vgpm": eppley_vgpm_month_block,
}


def get_month_block(name: str) -> Callable | None:
    """The fused monthly block function of a model, if it has one and compiled code is on."""
    return MONTH_BLOCKS.get(name) if use_compiled() else None


#: Model name -> citation written into output metadata.
CITATIONS: dict[str, str] = {
    "vgpm": (
        "Behrenfeld, M. J. and Falkowski, P. G. (1997). Photosynthetic rates derived from "
        "satellite-based chlorophyll concentration. Limnology and Oceanography 42(1):1-20. "
        "Euphotic depth: Morel, A. and Berthon, J.-F. (1989), Limnology and Oceanography "
        "34(8):1545-1562."
    ),
    "eppley_vgpm": (
        "VGPM of Behrenfeld and Falkowski (1997, Limnol. Oceanogr. 42:1-20) with the "
        "temperature dependence of Eppley, R. W. (1972), Temperature and phytoplankton growth "
        "in the sea, Fishery Bulletin 70:1063-1085. Euphotic depth: Morel and Berthon (1989)."
    ),
}


def get_model(name: str) -> Callable:
    """Return the model function registered under ``name``."""
    try:
        return MODELS[name]
    except KeyError:
        raise ValueError(f"unknown model {name!r}; choose one of {sorted(MODELS)}") from None


__all__ = [
    "CITATIONS",
    "MODELS",
    "InputMismatchError",
    "check_same_grid",
    "eppley_vgpm",
    "euphotic_depth",
    "get_model",
    "get_month_block",
    "pb_opt_behrenfeld_falkowski",
    "pb_opt_eppley",
    "vgpm",
]
