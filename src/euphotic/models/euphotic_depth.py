"""Euphotic depth from surface chlorophyll: the published relations a model may choose from.

:data:`CHOICES` names them in the order of the index the compiled formulas receive
(:func:`zeu_point`); :func:`euphotic_depth_by` is the numpy equivalent.
"""

from __future__ import annotations

import numpy as np

from euphotic.models._compiled import jit_point
from euphotic.models.morel_berthon import euphotic_depth, euphotic_depth_point

#: Names of the euphotic-depth relations, in the order of their index.
CHOICES: tuple[str, ...] = ("morel_berthon_1989",)
#: The relation used unless a model's configuration chooses another.
DEFAULT = "morel_berthon_1989"
#: What the choice means, for the declaration's documentation.
SOURCE = ("euphotic depth (1 % of surface PAR) from surface chlorophyll: "
          "morel_berthon_1989 = Morel & Berthon (1989), as in Behrenfeld & Falkowski (1997)")


@jit_point
def zeu_point(chl: float, method: float) -> float:
    """Euphotic depth, m, by relation number ``method`` (index into :data:`CHOICES`)."""
    return euphotic_depth_point(chl)


def euphotic_depth_by(chl, method: str = DEFAULT) -> np.ndarray:
    """Euphotic depth, m, from surface chlorophyll (mg m-3) by the named relation."""
    if method not in CHOICES:
        raise ValueError(f"euphotic_depth must be one of {CHOICES}, not {method!r}")
    return euphotic_depth(chl)
