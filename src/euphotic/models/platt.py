"""Depth- and day-integrated analytic P-I model, Platt & Sathyendranath (1988).

Formulation
-----------
Photosynthesis per unit chlorophyll as a function of light, without photoinhibition, in the
form of Platt, Gallegos & Harrison (1980) [platt1980] as used by Platt & Sathyendranath (1988)
[platt1988]:

.. math:: P^B(I) = P^B_m \\left(1 - e^{-I / I_k}\\right), \\qquad I_k = P^B_m / \\alpha^B

Light: a sinusoidal day of length D and exponential attenuation with depth,
:math:`I(z, t) = I_{0m} \\sin(\\pi t / D)\\, e^{-K z}` for :math:`0 \\le t \\le D`. The noon
surface PAR :math:`I_{0m}` follows from the daily dose of such a day,
:math:`PAR = I_{0m} \\int_0^D \\sin(\\pi t/D)\\,dt = I_{0m}\\, 2 D / \\pi`, so
:math:`I_{0m} = \\pi\\, PAR / (2 D)`; with PAR in mol m-2 d-1 and D in seconds
(3600 x day length in h), times 1e6 for umol photons m-2 s-1, the units of alpha^B.

Biomass B is vertically uniform and equal to the surface chlorophyll (mg m-3).

K (m-1), the attenuation of PAR, is the mean attenuation over the euphotic layer,
K = ln(100) / Z_eu (PAR falls to 1 % at Z_eu), with Z_eu from surface chlorophyll by a
published bio-optical relation: Morel & Berthon (1989) [morel1989] by default, Morel &
Maritorena (2001) [morel2001] selectable (the ``euphotic_depth`` choice shared with the VGPM).

Daily production per unit area (derivation, our own working of [platt1988]/[platt1990]):

1. Depth integral at one instant, with :math:`y = I_{0m}\\sin(\\pi t/D)/I_k`:
   :math:`\\int_0^\\infty (1 - \\exp(-y e^{-Kz}))\\,dz`; substitute :math:`u = y e^{-Kz}`,
   :math:`dz = -du / (K u)`, limits z = 0 -> u = y, z -> inf -> u -> 0:
   :math:`= \\frac{1}{K}\\int_0^y \\frac{1 - e^{-u}}{u}\\,du = \\mathrm{Ein}(y) / K`,
   and :math:`\\mathrm{Ein}(y) = E_1(y) + \\ln y + \\gamma` (a standard identity; checked
   numerically in the tests).
2. Day integral: :math:`\\int_0^D \\mathrm{Ein}(x \\sin(\\pi t/D))\\,dt`, with
   :math:`\\theta = \\pi t / D`, :math:`= (D/\\pi)\\int_0^\\pi \\mathrm{Ein}(x\\sin\\theta)\\,d\\theta
   = D\\, f(x)`, where :math:`x = I^*_m = I_{0m} / I_k` and
   :math:`f(x) = \\frac{1}{\\pi}\\int_0^\\pi \\mathrm{Ein}(x\\sin\\theta)\\,d\\theta`.
3. Hence :math:`P_{Z,T} = B\\, P^B_m\\, D_h\\, f(I^*_m) / K` (mg C m-2 d-1 with B in mg m-3,
   P^B_m in mg C (mg Chl)-1 h-1, D_h the day length in h, K in m-1).

Limits of f (derived; both checked against the exact f in the tests):

* low light: :math:`\\mathrm{Ein}(y) = y - y^2/4 + \\dots`, and
  :math:`\\frac{1}{\\pi}\\int_0^\\pi \\sin\\theta\\,d\\theta = 2/\\pi`, so
  :math:`f(x) \\approx (2/\\pi) x`: :math:`P_{Z,T} \\approx B \\alpha^B I_{0m} (2/\\pi) D_h / K`,
  linear in PAR.
* high light: :math:`f(x) = \\ln x + \\frac{1}{\\pi}\\int_0^\\pi \\ln\\sin\\theta\\,d\\theta + \\gamma +
  \\frac{1}{\\pi}\\int_0^\\pi E_1(x\\sin\\theta)\\,d\\theta` and
  :math:`\\frac{1}{\\pi}\\int_0^\\pi \\ln\\sin\\theta\\,d\\theta = -\\ln 2`; the last term,
  with :math:`s = \\sin\\theta`, :math:`d\\theta = ds/\\sqrt{1-s^2}` and
  :math:`\\int_0^\\infty u^n E_1(u)\\,du = n!/(n+1)`, is
  :math:`(2/\\pi)(1/x + 1/(3x^3) + \\dots)`. So
  :math:`f(x) \\approx \\ln x - \\ln 2 + \\gamma + 2/(\\pi x) + \\dots`: production grows only
  logarithmically with light.

Approximation used here
-----------------------
Platt, Sathyendranath & Ravindran (1990) [platt1990] replaced f by a fifth-order polynomial
:math:`\\sum_{k=1}^{5} \\Omega_k (I^*_m)^k` over its useful range. Their table of
coefficients was not available to us: the coefficients :data:`OMEGA`, :data:`FAR_C3` and
:data:`FAR_C5` are OUR OWN least-squares fit to the exact integral, NOT the published values
(``scripts/fit_platt_daily_integral.py`` reproduces them):

* :math:`0 \\le x \\le 3.5`: the polynomial, :math:`\\Omega_1 = 2/\\pi` fixed (the exact low-light
  slope), :math:`\\Omega_2 \\dots \\Omega_5` fitted (relative least squares);
* :math:`x > 3.5`: the asymptote above plus :math:`c_3/x^3 + c_5/x^5`, :math:`c_5` set so the
  two pieces meet at 3.5 and :math:`c_3` fitted.

Largest relative error against the exact f on 0 < x <= 1000: 1.2e-4 (:data:`MAX_REL_ERROR`,
checked in tests/test_platt.py with scipy). The compiled formula (:func:`point`) and the numpy
formula (:func:`platt_kernel`) use this same approximation.

Rules (as the VGPM): day length <= 0 gives 0 (no light, no production); chlorophyll not > 0
or not finite gives NaN; PAR < 0 or NaN gives NaN; PAR = 0 in daylight gives 0.
"""

from __future__ import annotations

import numpy as np

from euphotic.models import zeu
from euphotic.models._compiled import jit_point
from euphotic.models._declare import NPP_ATTRS, Input, ModelSpec, Parameter, build
from euphotic.models.vgpm import EUPHOTIC_DEPTH

#: Coefficients Omega_1..Omega_5 of f(x) ~ sum Omega_k x^k for 0 <= x <= X_SPLIT.
#: OUR OWN least-squares fit to the exact integral (scripts/fit_platt_daily_integral.py),
#: not the published table of Platt et al. (1990); Omega_1 = 2/pi exactly.
OMEGA = (0.6366197723675814, -0.12465086388034552, 0.022637314812853554,
         -0.0030403689661458867, 0.0002081028158578193)
#: Where the polynomial hands over to the asymptotic piece (dimensionless I*_m).
X_SPLIT = 3.5
#: Corrections c3 / x^3 + c5 / x^5 of the large-x piece (our own fit, as OMEGA; the two pieces
#: meet at X_SPLIT).
FAR_C3 = 0.26480496883896243
FAR_C5 = -0.03881333412967937
#: -ln 2 + Euler's gamma, the constant of the large-x asymptote f(x) ~ ln x - ln 2 + gamma.
FAR_CONST = float(np.euler_gamma - np.log(2.0))
#: 2/pi, the 1/x coefficient of the asymptote (and the low-light slope Omega_1).
TWO_OVER_PI = float(2.0 / np.pi)
#: Largest relative error of the approximation against the exact f on 0 < x <= 1000.
MAX_REL_ERROR = 1.2e-4

#: ln(100): K = ln(100) / Z_eu, PAR at 1 % of the surface at the euphotic depth.
LN100 = float(np.log(100.0))
#: I0_m (umol m-2 s-1) = PAR_TO_NOON * PAR (mol m-2 d-1) / day length (h):
#: pi / 2 x 1e6 umol mol-1 / 3600 s h-1.
PAR_TO_NOON = float(np.pi / 2.0 * 1e6 / 3600.0)

#: The inputs and the units the formula takes.
INPUTS = (Input("chl", "mg m-3"), Input("par", "mol m-2 d-1"), Input("day_length", "h"))

ALPHA_B = Parameter(
    "alpha_b", 0.03, "mg C (mg Chl)-1 h-1 (umol photons m-2 s-1)-1",
    "initial slope alpha^B of the P-I curve; default from memory, typical of open-ocean "
    "compilations of P-I parameters (not a value from one paper)",
    per_region=True, minimum=0.001, maximum=1.0)
PB_MAX = Parameter(
    "pb_max", 3.0, "mg C (mg Chl)-1 h-1",
    "assimilation number P^B_m of the P-I curve; default from memory, typical of open-ocean "
    "compilations of P-I parameters (not a value from one paper)",
    per_region=True, minimum=0.1, maximum=30.0)


def daily_integral(x) -> np.ndarray:
    """The dimensionless daily depth integral f(I*_m), our fitted approximation (numpy).

    Parameters
    ----------
    x : array_like
        I*_m = I0_m / I_k, noon surface light over the saturation parameter (>= 0).

    Returns
    -------
    numpy.ndarray
        f(x), with a relative error below :data:`MAX_REL_ERROR` against
        (1/pi) integral_0^pi Ein(x sin theta) d theta (see the module docstring).
    """
    x = np.asarray(x, dtype=np.float64)
    o1, o2, o3, o4, o5 = OMEGA
    near = x * (o1 + x * (o2 + x * (o3 + x * (o4 + x * o5))))
    xf = np.where(x > X_SPLIT, x, X_SPLIT)  # the large-x piece only where it is used
    r = 1.0 / xf
    r2 = r * r
    far = np.log(xf) + FAR_CONST + r * (TWO_OVER_PI + r2 * (FAR_C3 + r2 * FAR_C5))
    return np.where(x > X_SPLIT, far, near)  # NaN stays NaN (through `near`)


@jit_point
def daily_integral_point(x: float) -> float:
    """:func:`daily_integral` for one value (compiled; a polynomial, or one logarithm)."""
    if x <= X_SPLIT:
        o1, o2, o3, o4, o5 = OMEGA
        return x * (o1 + x * (o2 + x * (o3 + x * (o4 + x * o5))))
    r = 1.0 / x
    r2 = r * r
    return np.log(x) + FAR_CONST + r * (TWO_OVER_PI + r2 * (FAR_C3 + r2 * FAR_C5))


def platt_kernel(chl, par, day_length, *, alpha_b=ALPHA_B.default, pb_max=PB_MAX.default,
                 euphotic_depth: str = EUPHOTIC_DEPTH.default) -> np.ndarray:
    """The P-I (Platt) model on numpy arrays in canonical units (float64), mg C m-2 d-1.

    The plain numpy formula (the test reference); see the module docstring.

    Parameters
    ----------
    chl : array_like
        Surface chlorophyll-a, mg m-3 (the uniform biomass B).
    par : array_like
        Daily PAR at the surface, mol photons m-2 d-1.
    day_length : array_like
        Day length, h.
    alpha_b : float or array_like
        alpha^B, mg C (mg Chl)-1 h-1 (umol photons m-2 s-1)-1.
    pb_max : float or array_like
        P^B_m, mg C (mg Chl)-1 h-1.
    euphotic_depth : str
        The euphotic-depth relation (:data:`euphotic.models.zeu.CHOICES`).
    """
    chl = np.asarray(chl, dtype=np.float64)
    par = np.asarray(par, dtype=np.float64)
    dl = np.asarray(day_length, dtype=np.float64)
    alpha = np.asarray(alpha_b, dtype=np.float64)
    pbm = np.asarray(pb_max, dtype=np.float64)
    valid_chl = np.isfinite(chl) & (chl > 0.0)
    chl_ok = np.where(valid_chl, chl, np.nan)
    par_ok = np.where(par >= 0.0, par, np.nan)  # negative light is a bad value, NaN stays NaN
    with np.errstate(divide="ignore", invalid="ignore"):
        i0m = PAR_TO_NOON * par_ok / dl  # noon surface PAR, umol m-2 s-1
        x = i0m * alpha / pbm  # I*_m = I0_m / I_k, I_k = P^B_m / alpha^B
        k = LN100 / zeu.euphotic_depth_by(chl_ok, euphotic_depth)  # m-1
        npp = chl_ok * pbm * dl / k * daily_integral(x)
    # No light, no production: where the sun does not rise the rate is 0 whatever else is known.
    return np.where(dl <= 0.0, 0.0, npp)


@jit_point
def point(chl: float, par: float, day_length: float, alpha_b: float, pb_max: float,
          zeu_method: float) -> float:
    """The P-I (Platt) model for one cell and day (compiled), mg C m-2 d-1."""
    if day_length <= 0.0:
        return 0.0  # no light, no production
    if not (chl > 0.0 and chl < np.inf) or not (par >= 0.0):
        return np.nan
    x = PAR_TO_NOON * par * alpha_b / (day_length * pb_max)  # I*_m, one division
    # B P^B_m D_h / K f(x), 1/K = Z_eu / ln(100)
    return (chl * pb_max * day_length * zeu.zeu_point(chl, zeu_method) * _INV_LN100
            * daily_integral_point(x))


_INV_LN100 = 1.0 / LN100


SPEC = ModelSpec(
    name="pi_platt",
    label="P-I (Platt)",
    published_name="depth- and day-integrated P-I model (Platt & Sathyendranath 1988)",
    citation_keys=("platt1988", "platt1990", "platt1980", "morel1989"),
    inputs=INPUTS,
    parameters=(ALPHA_B, PB_MAX, EUPHOTIC_DEPTH),
    point=point,
    reference=platt_kernel,
    output_attrs=dict(NPP_ATTRS),
    methods=("the depth- and day-integrated analytic P-I model of {platt1988}: the P-I curve "
             "P^B = P^B_m (1 - exp(-I/I_k)) of {platt1980} without photoinhibition, a "
             "sinusoidal day, uniform biomass equal to surface chlorophyll and PAR attenuation "
             "K = ln(100)/Z_eu with the euphotic depth Z_eu from surface chlorophyll after "
             "{euphotic_depth}; the daily integral f(I*_m) was approximated, as in {platt1990}, by a "
             "fifth-order polynomial (coefficients our own least-squares fit to the exact "
             "integral, not the published ones) and its logarithmic asymptote at high light"),
    summary=("Analytic P-I model: P = B P^B_m D / K f(I0_m / I_k), P-I curve without "
             "photoinhibition, sinusoidal day, uniform biomass, K = ln(100)/Z_eu; f by our own "
             "polynomial fit (and asymptote) to the exact daily integral."),
)

#: The public function (numpy, dask or xarray; see :func:`euphotic.models._declare.build`).
pi_platt = build(SPEC)
