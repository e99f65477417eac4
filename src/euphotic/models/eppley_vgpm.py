"""VGPM with the Eppley (1972) exponential temperature dependence of P^B_opt."""

from __future__ import annotations

import numpy as np

from euphotic.models._compiled import jit_point
from euphotic.models._declare import ModelSpec, build
from euphotic.models.vgpm import EUPHOTIC_DEPTH, INPUTS, vgpm_kernel, vgpm_point_with

#: P^B_opt = EPPLEY_A * 10 ** (EPPLEY_B * T - EPPLEY_C), mg C (mg Chl)-1 h-1, T in degC.
#: Source (from memory of the literature): the Eppley-VGPM form of Eppley's (1972) exponential
#: temperature curve, 1.54 * 10^(0.0275 T - 0.07); 10^0.0275 = 1.0654 per degC, Eppley's 1.066.
EPPLEY_A = 1.54
EPPLEY_B = 0.0275
EPPLEY_C = 0.07


def pb_opt_eppley(sst) -> np.ndarray:
    """P^B_opt from temperature by Eppley's exponential curve, mg C (mg Chl)-1 h-1.

    Parameters
    ----------
    sst : array_like
        Sea surface temperature, degC.

    Notes
    -----
    .. math:: P^B_{opt} = 1.54 \\times 10^{0.0275\\,T - 0.07}

    References
    ----------
    Eppley, R. W. (1972). Temperature and phytoplankton growth in the sea. Fishery Bulletin
    70:1063-1085.
    """
    t = np.asarray(sst, dtype=np.float64)
    return EPPLEY_A * 10.0 ** (EPPLEY_B * t - EPPLEY_C)


def eppley_vgpm_kernel(chl, par, sst, day_length, *, euphotic_depth: str = EUPHOTIC_DEPTH.default):
    """The Eppley-VGPM on numpy arrays (the plain formula, the test reference)."""
    return vgpm_kernel(chl, par, sst, day_length, pb_opt=pb_opt_eppley,
                       euphotic_depth=euphotic_depth)


@jit_point
def pb_opt_eppley_point(t: float) -> float:
    """:func:`pb_opt_eppley` for one value (compiled; 10^x as exp(x ln 10), one exp)."""
    return EPPLEY_A * np.exp(_LN10 * (EPPLEY_B * t - EPPLEY_C))


_LN10 = float(np.log(10.0))


@jit_point
def point(chl: float, par: float, sst: float, day_length: float, zeu_method: float) -> float:
    """The Eppley-VGPM for one cell and day (compiled), mg C m-2 d-1."""
    return vgpm_point_with(chl, par, day_length, pb_opt_eppley_point(sst), zeu_method)


SPEC = ModelSpec(
    name="eppley_vgpm",
    label="Eppley-VGPM",
    published_name=("VGPM (Behrenfeld & Falkowski 1997) with the Eppley (1972) temperature "
                     "dependence"),
    citation_keys=("behrenfeld1997", "eppley1972", "morel1989"),
    inputs=INPUTS,
    parameters=(EUPHOTIC_DEPTH,),
    point=point,
    reference=eppley_vgpm_kernel,
    methods=("the Eppley-VGPM, the same model with P^B_opt = 1.54 x 10^(0.0275 T - 0.07) from "
             "the exponential temperature function of {eppley1972}"),
    summary=("The VGPM with P^B_opt(T) = 1.54 x 10^(0.0275 T - 0.07), Eppley's exponential "
             "temperature curve, in place of the polynomial; all else as the VGPM."),
)

#: The public function (numpy, dask or xarray; see :func:`euphotic.models._declare.build`).
eppley_vgpm = build(SPEC)
