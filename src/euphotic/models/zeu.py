"""Euphotic depth from surface chlorophyll: the published relations a model may choose from.

:data:`CHOICES` names them in the order of the index the compiled formulas receive
(:func:`zeu_point`); :func:`euphotic_depth_by` is the numpy equivalent.
"""

from __future__ import annotations

import numpy as np

from euphotic.models._compiled import jit_point
from euphotic.models.morel_berthon import euphotic_depth, euphotic_depth_point

#: Names of the euphotic-depth relations, in the order of their index.
CHOICES: tuple[str, ...] = ("morel_berthon_1989", "morel_maritorena_2001")
#: The ``references.bib`` key of each relation, in the order of :data:`CHOICES`.
CITATIONS: tuple[str, ...] = ("morel1989", "morel2001")
#: The relation used unless a model's configuration chooses another.
DEFAULT = "morel_berthon_1989"
#: What the choice means, for the declaration's documentation.
SOURCE = ("euphotic depth (1 % of surface PAR) from surface chlorophyll: "
          "morel_berthon_1989 = Morel & Berthon (1989), as in Behrenfeld & Falkowski (1997); "
          "morel_maritorena_2001 = Z_eu = 34.0 Chl^-0.39 m, Morel & Maritorena (2001)")

#: Coefficient (m) and exponent of the power law Z_eu = a Chl^b for case 1 waters.
#: Source: Morel and Maritorena (2001), J. Geophys. Res. 106(C4):7163-7180, equation 10
#: (coefficients from memory; the paper was not at hand to check them).
MM01_A, MM01_B = 34.0, -0.39


def euphotic_depth_mm01(chl) -> np.ndarray:
    """Euphotic depth, m, from surface chlorophyll (mg m-3), Morel & Maritorena (2001)."""
    chl = np.asarray(chl, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return MM01_A * chl**MM01_B


@jit_point
def zeu_point(chl: float, method: float) -> float:
    """Euphotic depth, m, by relation number ``method`` (index into :data:`CHOICES`)."""
    if method == 1.0:
        return MM01_A * np.exp(MM01_B * np.log(chl))
    return euphotic_depth_point(chl)


def euphotic_depth_by(chl, method: str = DEFAULT) -> np.ndarray:
    """Euphotic depth, m, from surface chlorophyll (mg m-3) by the named relation."""
    if method not in CHOICES:
        raise ValueError(f"euphotic_depth must be one of {CHOICES}, not {method!r}")
    if method == "morel_maritorena_2001":
        return euphotic_depth_mm01(chl)
    return euphotic_depth(chl)
