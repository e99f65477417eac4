"""Euphotic depth from surface chlorophyll (Morel & Berthon 1989, case 1 waters)."""

from __future__ import annotations

import numpy as np

from euphotic.models._compiled import jit_point


def chl_euphotic_column(chl: np.ndarray) -> np.ndarray:
    """Chlorophyll integrated over the euphotic layer, C_tot (mg m-2), from surface chl (mg m-3).

    Notes
    -----
    .. math:: C_{tot} = 38.0\\,C^{0.425}\\ (C < 1), \\qquad 40.2\\,C^{0.507}\\ (C \\ge 1)

    References
    ----------
    Morel, A. and Berthon, J.-F. (1989). Surface pigments, algal biomass profiles, and potential
    production of the euphotic layer. Limnology and Oceanography 34(8):1545-1562, table 2;
    as used by Behrenfeld and Falkowski (1997), Limnol. Oceanogr. 42:1-20, section 2.
    """
    chl = np.asarray(chl, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(chl < 1.0, 38.0 * chl**0.425, 40.2 * chl**0.507)


def euphotic_depth(chl) -> np.ndarray:
    """Depth of the euphotic layer (1 % of surface light), m, from surface chlorophyll (mg m-3).

    Parameters
    ----------
    chl : array_like
        Surface chlorophyll-a, mg m-3.

    Returns
    -------
    numpy.ndarray
        Euphotic depth Z_eu, m.

    Notes
    -----
    .. math:: Z_{eu} = 568.2\\,C_{tot}^{-0.746}; \\text{ if } Z_{eu} > 102\\text{ m: }
              Z_{eu} = 200\\,C_{tot}^{-0.293}

    References
    ----------
    Morel and Berthon (1989), Limnol. Oceanogr. 34:1545-1562, equations 1a and 1b.
    """
    ctot = chl_euphotic_column(chl)
    with np.errstate(invalid="ignore", divide="ignore"):
        zeu = 568.2 * ctot**-0.746
        return np.where(zeu > 102.0, 200.0 * ctot**-0.293, zeu)


@jit_point
def euphotic_depth_point(chl: float) -> float:
    """:func:`euphotic_depth` for one value (compiled; chl must be > 0 and finite).

    Same equations with one logarithm: C_tot = a C^b, so C_tot^k = a^k exp(b k ln C).
    """
    lc = np.log(chl)
    if chl < 1.0:
        la, b = _LN38, 0.425
    else:
        la, b = _LN402, 0.507
    ln_ctot = la + b * lc
    zeu = 568.2 * np.exp(-0.746 * ln_ctot)
    if zeu > 102.0:
        zeu = 200.0 * np.exp(-0.293 * ln_ctot)
    return zeu


_LN38 = float(np.log(38.0))
_LN402 = float(np.log(40.2))
