"""Carbon-based Production Model (CbPM), Behrenfeld, Boss, Siegel & Shea (2005).

The formulation below is written from memory of Behrenfeld et al. (2005), Global Biogeochem.
Cycles 19, GB1006 (the paper was not at hand to check it):

- phytoplankton carbon from particulate backscattering at 443 nm,
  C = 13000 mg C m-2 x (bbp(443) - 0.00035 m-1), mg C m-3 (0.00035 m-1: the non-algal
  background);
- the chlorophyll-to-carbon ratio Theta = Chl / C;
- the median light of the mixed layer per hour of daylight,
  I_g = (E0 / D) exp(-Kd(490) MLD / 2), mol photons m-2 h-1;
- the Chl:C ratio of nutrient-replete cells acclimated to that light,
  Theta_max = 0.022 + (0.045 - 0.022) exp(-3 I_g);
- the growth rate mu = mu_max min(Theta / Theta_max, 1) (1 - exp(-3 I_g)), mu_max = 2 d-1;
- NPP = C mu Z_eu h(E0), with the euphotic depth Z_eu from surface chlorophyll and the VGPM's
  depth-shape light term h(E0) = 0.66125 E0 / (E0 + 4.1) (Behrenfeld & Falkowski 1997,
  eq. 10), which the 2005 CbPM kept (from memory).

Which exponent goes where (from memory, not checked against the paper): the same light
coefficient, 3 m2 h (mol photons)-1, is used for the photoacclimation curve Theta_max(I_g)
(:data:`LIGHT_COEFF`) and for the light limitation of growth, 1 - exp(-3 I_g)
(:data:`GROWTH_LIGHT_COEFF`). Our memory is least sure of the second: descriptions of the model
may use a larger coefficient (5) in the growth term. Check against the paper before relying on
absolute values; the two constants are kept apart so that either can be corrected alone (the
compiled formula shares one exponential while they are equal).

Rules: no daylight (day length <= 0) gives 0 whatever else is known; missing or impossible
chlorophyll (NaN, <= 0, inf), PAR, backscattering, Kd(490) or mixed-layer depth (NaN, negative,
inf) gives NaN; backscattering at or below the background (C <= 0, no phytoplankton carbon to
grow) gives 0.
"""

from __future__ import annotations

import numpy as np

from euphotic.models import zeu
from euphotic.models._compiled import jit_point
from euphotic.models._declare import NPP_ATTRS, Input, ModelSpec, Parameter, build
from euphotic.models.vgpm import EUPHOTIC_DEPTH, VGPM_CONSTANT, VGPM_LIGHT_HALF_SAT

#: Carbon per unit of particulate backscattering at 443 nm above background, mg C m-2
#: (mg C m-3 per m-1). Source: Behrenfeld et al. (2005), from memory.
CARBON_SCALE = 13000.0
#: Non-algal background of bbp(443), m-1. Source: Behrenfeld et al. (2005), from memory.
BBP_BACKGROUND = 0.00035
#: Maximum growth rate, d-1. Source: Behrenfeld et al. (2005), from memory.
MU_MAX = 2.0
#: Chl:C ratio of cells acclimated to high light (the floor of Theta_max), mg Chl (mg C)-1.
#: Source: Behrenfeld et al. (2005), from memory.
THETA_HIGH_LIGHT = 0.022
#: Chl:C ratio of cells acclimated to darkness (Theta_max at I_g = 0), mg Chl (mg C)-1.
#: Source: Behrenfeld et al. (2005), from memory.
THETA_LOW_LIGHT = 0.045
#: Light coefficient of the photoacclimation curve Theta_max(I_g), m2 h (mol photons)-1.
#: Source: Behrenfeld et al. (2005), from memory (see the module docstring).
LIGHT_COEFF = 3.0
#: Light coefficient of the growth term 1 - exp(-k I_g), m2 h (mol photons)-1. From memory
#: the same 3 as :data:`LIGHT_COEFF` (see the module docstring); while the two are equal the
#: compiled formula computes one exponential for both (numba folds the comparison of these
#: module constants when it compiles).
GROWTH_LIGHT_COEFF = 3.0

_THETA_SPAN = THETA_LOW_LIGHT - THETA_HIGH_LIGHT

#: The inputs of the CbPM and the units its formula takes.
INPUTS = (
    Input("chl", "mg m-3"),
    Input("par", "mol m-2 d-1"),
    Input("day_length", "h"),
    Input("bbp", "m-1"),
    Input("kd490", "m-1"),
    Input("mld", "m"),
)

_SOURCE = "Behrenfeld et al. (2005), Global Biogeochem. Cycles 19, GB1006 (from memory)"

PARAMETERS = (
    Parameter("mu_max", MU_MAX, "d-1", f"Maximum phytoplankton growth rate; {_SOURCE}",
              minimum=0.0),
    Parameter("bbp_background", BBP_BACKGROUND, "m-1",
              f"Non-algal background of bbp(443), subtracted before scaling to carbon; {_SOURCE}",
              minimum=0.0),
    Parameter("carbon_scale", CARBON_SCALE, "mg C m-2",
              f"Phytoplankton carbon per bbp(443) above background (mg C m-3 per m-1); {_SOURCE}",
              minimum=0.0),
    EUPHOTIC_DEPTH,
)


def cbpm_kernel(chl, par, day_length, bbp, kd490, mld, *, mu_max=MU_MAX,
                bbp_background=BBP_BACKGROUND, carbon_scale=CARBON_SCALE,
                euphotic_depth: str = zeu.DEFAULT) -> np.ndarray:
    """CbPM on numpy arrays in canonical units (float64). The plain formula, test reference.

    Parameters
    ----------
    chl : array_like
        Surface chlorophyll-a, mg m-3.
    par : array_like
        Daily PAR at the surface, mol photons m-2 d-1.
    day_length : array_like
        Day length, h.
    bbp : array_like
        Particulate backscattering coefficient at 443 nm, m-1.
    kd490 : array_like
        Diffuse attenuation coefficient at 490 nm, m-1.
    mld : array_like
        Mixed-layer depth, m.
    mu_max : float or array_like
        Maximum growth rate, d-1.
    bbp_background : float or array_like
        Non-algal bbp(443), m-1.
    carbon_scale : float or array_like
        mg C m-2 (mg C m-3 of phytoplankton carbon per m-1 of bbp(443) above background).
    euphotic_depth : str
        The euphotic-depth relation (:data:`euphotic.models.zeu.CHOICES`).

    Returns
    -------
    numpy.ndarray
        Net primary production, mg C m-2 d-1.

    Notes
    -----
    .. math::

        C = s (b_{bp} - b_{bp,0}),\\quad I_g = \\frac{E_0}{D} e^{-K_d \\mathrm{MLD}/2},\\quad
        \\Theta_{max} = 0.022 + 0.023 e^{-3 I_g}

        \\mu = \\mu_{max} \\min(\\Theta/\\Theta_{max}, 1) (1 - e^{-3 I_g}),\\quad
        NPP = C \\mu Z_{eu} \\, 0.66125 \\frac{E_0}{E_0 + 4.1}

    References
    ----------
    Behrenfeld, Boss, Siegel and Shea (2005), Global Biogeochem. Cycles 19, GB1006 (the
    formulation from memory, see the module docstring).
    """
    f8 = np.float64
    chl, par, dl, bbp, kd, mld = (np.asarray(a, dtype=f8)
                                  for a in (chl, par, day_length, bbp, kd490, mld))
    mu_max, b0, scale = (np.asarray(a, dtype=f8) for a in (mu_max, bbp_background, carbon_scale))

    def ok(x):  # a non-negative finite value
        return np.isfinite(x) & (x >= 0.0)

    valid = np.isfinite(chl) & (chl > 0.0) & ok(par) & ok(bbp) & ok(kd) & ok(mld)
    chl_ok = np.where(valid, chl, np.nan)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        carbon = scale * (bbp - b0)
        theta = chl_ok / carbon
        ig = par / dl * np.exp(-kd * mld / 2.0)
        theta_max = THETA_HIGH_LIGHT + _THETA_SPAN * np.exp(-LIGHT_COEFF * ig)
        mu = mu_max * np.minimum(theta / theta_max, 1.0) * (1.0 - np.exp(-GROWTH_LIGHT_COEFF * ig))
        z = zeu.euphotic_depth_by(chl_ok, euphotic_depth)
        npp = carbon * mu * z * VGPM_CONSTANT * par / (par + VGPM_LIGHT_HALF_SAT)
    # No phytoplankton carbon (bbp at or below the background): nothing grows.
    npp = np.where(valid & (carbon <= 0.0), 0.0, np.where(valid, npp, np.nan))
    # No light, no production: where the sun does not rise the rate is 0 whatever else is known.
    return np.where(dl <= 0.0, 0.0, npp)


@jit_point
def point(chl: float, par: float, day_length: float, bbp: float, kd490: float, mld: float,
          mu_max: float, bbp_background: float, carbon_scale: float, zeu_method: float) -> float:
    """The CbPM for one cell and day (compiled), mg C m-2 d-1: two exponentials (mixed-layer
    attenuation; the shared exp(-3 I_g)) besides the euphotic depth's."""
    if day_length <= 0.0:
        return 0.0  # no light, no production
    if not (chl > 0.0 and chl < np.inf) or not (par >= 0.0 and par < np.inf) or not (
            bbp >= 0.0 and bbp < np.inf) or not (kd490 >= 0.0 and kd490 < np.inf) or not (
            mld >= 0.0 and mld < np.inf):
        return np.nan
    carbon = carbon_scale * (bbp - bbp_background)
    if carbon <= 0.0:
        return 0.0  # no phytoplankton carbon
    ig = par / day_length * np.exp(-0.5 * kd490 * mld)
    e = np.exp(-LIGHT_COEFF * ig)
    theta_max = THETA_HIGH_LIGHT + _THETA_SPAN * e
    g = e if GROWTH_LIGHT_COEFF == LIGHT_COEFF else np.exp(-GROWTH_LIGHT_COEFF * ig)
    # C min(Theta / Theta_max, 1) = min(Chl / Theta_max, C): one division fewer
    c_eff = chl / theta_max
    if c_eff > carbon:
        c_eff = carbon
    light = par / (par + VGPM_LIGHT_HALF_SAT)
    return c_eff * mu_max * (1.0 - g) * zeu.zeu_point(chl, zeu_method) * VGPM_CONSTANT * light


SPEC = ModelSpec(
    name="cbpm",
    label="CbPM",
    published_name="CbPM (Behrenfeld et al. 2005)",
    citation_keys=("behrenfeld2005", "behrenfeld1997", "morel1989"),
    inputs=INPUTS,
    parameters=PARAMETERS,
    point=point,
    reference=cbpm_kernel,
    methods=("the Carbon-based Production Model (CbPM) of {behrenfeld2005}: phytoplankton "
             "carbon C = s (bbp(443) - b0) from particulate backscattering, growth rate "
             "mu = mu_max min(Theta / Theta_max, 1) (1 - exp(-3 I_g)) from the "
             "chlorophyll-to-carbon ratio Theta = Chl / C and the median mixed-layer light "
             "I_g = (E0 / D) exp(-Kd(490) MLD / 2), with Theta_max = 0.022 + 0.023 exp(-3 I_g), "
             "and NPP = C mu Z_eu 0.66125 E0 / (E0 + 4.1), the depth shape of the VGPM of "
             "{behrenfeld1997}, with Z_eu from surface chlorophyll after {euphotic_depth}"),
    summary=("Carbon-based Production Model: phytoplankton carbon from backscattering at "
             "443 nm, growth rate from the chlorophyll-to-carbon ratio relative to its "
             "light-acclimated maximum and the median light of the mixed layer (from daily PAR, "
             "day length, Kd(490) and mixed-layer depth), integrated over the euphotic depth "
             "with the VGPM's light term E0 / (E0 + 4.1)."),
    output_attrs=dict(NPP_ATTRS),
)

#: The public function (numpy, dask or xarray; see :func:`euphotic.models._declare.build`).
cbpm = build(SPEC)
