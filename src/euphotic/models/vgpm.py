"""Vertically Generalized Production Model (VGPM), Behrenfeld & Falkowski (1997)."""

from __future__ import annotations

import numpy as np

from euphotic.models import zeu
from euphotic.models._compiled import jit_point
from euphotic.models._declare import NPP_ATTRS, Choice, Input, ModelSpec, build

#: Dimensionless constant of the VGPM (the volume function integrated over depth).
#: Source: Behrenfeld and Falkowski (1997), Limnol. Oceanogr. 42:1-20, equation 10.
VGPM_CONSTANT = 0.66125
#: Half-saturation light of the light term E0 / (E0 + 4.1), mol photons m-2 d-1.
#: Source: Behrenfeld and Falkowski (1997), equation 10.
VGPM_LIGHT_HALF_SAT = 4.1

#: Cut-offs of the P^B_opt(T) polynomial, degC, and the values used outside them,
#: mg C (mg Chl)-1 h-1. Source: Behrenfeld and Falkowski (1997), equation 11.
PBOPT_T_LOW, PBOPT_LOW = -1.0, 1.13
PBOPT_T_HIGH, PBOPT_HIGH = 28.5, 4.00
#: Coefficients of the seventh-order polynomial, lowest order first (ibid., equation 11).
PBOPT_COEFFS = (
    1.2956,
    2.749e-1,
    6.17e-2,
    -2.05e-2,
    2.462e-3,
    -1.348e-4,
    3.4132e-6,
    -3.27e-8,
)

_OUTPUT_ATTRS = NPP_ATTRS

#: The inputs of the VGPM and the units its formula takes.
INPUTS = (Input("chl", "mg m-3"), Input("par", "mol m-2 d-1"), Input("sst", "degC"),
          Input("day_length", "h"))
#: The euphotic-depth relation (Behrenfeld & Falkowski 1997 used Morel & Berthon 1989).
EUPHOTIC_DEPTH = Choice("euphotic_depth", zeu.CHOICES, default=zeu.DEFAULT, source=zeu.SOURCE,
                        citations=zeu.CITATIONS)


def pb_opt_behrenfeld_falkowski(sst) -> np.ndarray:
    """Maximum daily carbon fixation rate per chlorophyll in the water column, P^B_opt.

    Parameters
    ----------
    sst : array_like
        Sea surface temperature, degC.

    Returns
    -------
    numpy.ndarray
        P^B_opt, mg C (mg Chl)-1 h-1.

    Notes
    -----
    1.13 below -1 degC; 4.00 above 28.5 degC; otherwise
    :math:`\\sum_{k=0}^{7} c_k T^k` with the coefficients :data:`PBOPT_COEFFS`.

    References
    ----------
    Behrenfeld and Falkowski (1997), Limnol. Oceanogr. 42:1-20, equation 11.
    """
    t = np.asarray(sst, dtype=np.float64)
    poly = np.zeros_like(t)
    for c in reversed(PBOPT_COEFFS):  # Horner, in float64
        poly = poly * t + c
    return np.where(t < PBOPT_T_LOW, PBOPT_LOW, np.where(t > PBOPT_T_HIGH, PBOPT_HIGH, poly))


def vgpm_kernel(chl, par, sst, day_length, pb_opt=pb_opt_behrenfeld_falkowski, *,
                euphotic_depth: str = zeu.DEFAULT) -> np.ndarray:
    """VGPM on numpy arrays in canonical units (float64 arithmetic). See :func:`vgpm`.

    The plain numpy formula (the test reference); ``pb_opt`` is the temperature function."""
    chl = np.asarray(chl, dtype=np.float64)
    par = np.asarray(par, dtype=np.float64)
    dl = np.asarray(day_length, dtype=np.float64)
    pbo = pb_opt(sst)
    valid_chl = np.isfinite(chl) & (chl > 0.0)
    chl_ok = np.where(valid_chl, chl, np.nan)
    par_ok = np.where(par >= 0.0, par, np.nan)  # negative light is a bad value, NaN stays NaN
    z = zeu.euphotic_depth_by(chl_ok, euphotic_depth)
    npp = VGPM_CONSTANT * pbo * (par_ok / (par_ok + VGPM_LIGHT_HALF_SAT)) * z * chl_ok * dl
    # No light, no production: where the sun does not rise the rate is 0 whatever else is known.
    return np.where(dl <= 0.0, 0.0, npp)


@jit_point
def pb_opt_point(t: float) -> float:
    """:func:`pb_opt_behrenfeld_falkowski` for one value (compiled)."""
    if t < PBOPT_T_LOW:
        return PBOPT_LOW
    if t > PBOPT_T_HIGH:
        return PBOPT_HIGH
    c0, c1, c2, c3, c4, c5, c6, c7 = PBOPT_COEFFS
    return c0 + t * (c1 + t * (c2 + t * (c3 + t * (c4 + t * (c5 + t * (c6 + t * c7))))))


@jit_point
def vgpm_point_with(chl: float, par: float, dl: float, pb_opt: float, zeu_method: float) -> float:
    """The VGPM for one cell given its P^B_opt (compiled), mg C m-2 d-1."""
    if dl <= 0.0:
        return 0.0  # no light, no production
    if not (chl > 0.0 and chl < np.inf) or not (par >= 0.0):
        return np.nan
    light = par / (par + VGPM_LIGHT_HALF_SAT)
    return VGPM_CONSTANT * pb_opt * light * zeu.zeu_point(chl, zeu_method) * chl * dl


@jit_point
def point(chl: float, par: float, sst: float, day_length: float, zeu_method: float) -> float:
    """The VGPM for one cell and day (compiled), mg C m-2 d-1."""
    return vgpm_point_with(chl, par, day_length, pb_opt_point(sst), zeu_method)


SPEC = ModelSpec(
    name="vgpm",
    label="VGPM",
    published_name="VGPM (Behrenfeld & Falkowski 1997)",
    citation_keys=("behrenfeld1997", "morel1989"),
    inputs=INPUTS,
    parameters=(EUPHOTIC_DEPTH,),
    point=point,
    reference=vgpm_kernel,
    methods=("the Vertically Generalized Production Model (VGPM) of {behrenfeld1997}, eq. 10, "
             "with the optimal assimilation number P^B_opt from sea surface temperature by the "
             "seventh-order polynomial of their eq. 11 and the euphotic depth Z_eu from surface "
             "chlorophyll after {euphotic_depth}"),
    summary=("Vertically Generalized Production Model: chlorophyll-specific optimal rate "
             "P^B_opt(T) from the seventh-order polynomial of temperature, a light term "
             "E0 / (E0 + 4.1), euphotic depth, chlorophyll and day length."),
)

#: The public function (numpy, dask or xarray; see :func:`euphotic.models._declare.build`).
vgpm = build(SPEC)
