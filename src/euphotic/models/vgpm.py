"""Vertically Generalized Production Model (VGPM), Behrenfeld & Falkowski (1997)."""

from __future__ import annotations

import numpy as np

from euphotic.models._apply import apply_kernel, model_inputs
from euphotic.models._compiled import block_kernel, jit_loop, jit_point, month_block, use_compiled
from euphotic.models.morel_berthon import euphotic_depth, euphotic_depth_point

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

_OUTPUT_ATTRS = {
    "units": "mg m-2 d-1",
    "long_name": "net primary production of carbon, integrated over the euphotic layer",
    "standard_name": "net_primary_productivity_of_biomass_expressed_as_carbon",
}


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


def vgpm_kernel(chl, par, sst, day_length, pb_opt=pb_opt_behrenfeld_falkowski) -> np.ndarray:
    """VGPM on numpy arrays in canonical units (float64 arithmetic). See :func:`vgpm`.

    The numpy reference formula; :data:`vgpm_block` is the compiled equivalent."""
    chl = np.asarray(chl, dtype=np.float64)
    par = np.asarray(par, dtype=np.float64)
    dl = np.asarray(day_length, dtype=np.float64)
    pbo = pb_opt(sst)
    valid_chl = np.isfinite(chl) & (chl > 0.0)
    chl_ok = np.where(valid_chl, chl, np.nan)
    par_ok = np.where(par >= 0.0, par, np.nan)  # negative light is a bad value, NaN stays NaN
    zeu = euphotic_depth(chl_ok)
    npp = VGPM_CONSTANT * pbo * (par_ok / (par_ok + VGPM_LIGHT_HALF_SAT)) * zeu * chl_ok * dl
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
def vgpm_point_with(chl: float, par: float, dl: float, pb_opt: float) -> float:
    """The VGPM for one cell given its P^B_opt (compiled), mg C m-2 d-1."""
    if dl <= 0.0:
        return 0.0  # no light, no production
    if not (chl > 0.0 and chl < np.inf) or not (par >= 0.0):
        return np.nan
    light = par / (par + VGPM_LIGHT_HALF_SAT)
    return VGPM_CONSTANT * pb_opt * light * euphotic_depth_point(chl) * chl * dl


def _vgpm_loop(c, p, t, d, out):
    for i in range(out.size):
        out[i] = vgpm_point_with(
            np.float64(c[i]), np.float64(p[i]), np.float64(d[i]), pb_opt_point(np.float64(t[i]))
        )


#: Compiled block kernel of the VGPM (None without numba).
vgpm_block = block_kernel(jit_loop(_vgpm_loop))


def _vgpm_accumulate(c, p, t, d, ocean, total, count):
    for j in range(c.shape[0]):
        dl = d[j]
        for i in range(c.shape[1]):
            if ocean[j, i]:
                v = vgpm_point_with(
                    np.float64(c[j, i]), np.float64(p[j, i]), dl, pb_opt_point(np.float64(t[j, i]))
                )
                if v == v:  # a valid estimate (not NaN)
                    total[j, i] += v
                    count[j, i] += 1.0


#: Fused monthly pass of the VGPM: rate, ocean mask, sum and count of valid days in one loop.
vgpm_month_block = month_block(jit_loop(_vgpm_accumulate))


def vgpm(chl, par, sst, day_length):
    """Net primary production by the VGPM.

    Parameters
    ----------
    chl : array_like, dask array or xarray.DataArray
        Surface chlorophyll-a, mg m-3. Values <= 0 or non-finite are missing.
    par : array_like, dask array or xarray.DataArray
        Daily photosynthetically active radiation at the surface, mol photons m-2 d-1. A
        DataArray whose ``units`` say otherwise is converted as the file readers do
        (:func:`euphotic.units.par_factors`): a daily dose (``einstein m-2 d-1``), a daily-mean
        photon flux (``umol m-2 s-1``, x 86,400 s) or a daily-mean energy flux (``W m-2``,
        x 4.57 umol J-1 after McCree 1972, x 86,400 s).
    sst : array_like, dask array or xarray.DataArray
        Sea surface temperature, degC (a DataArray in K is converted from its units).
    day_length : array_like, dask array or xarray.DataArray
        Day length, h.

    Returns
    -------
    same kind as the inputs
        Net primary production integrated over the euphotic layer, mg C m-2 d-1
        (float64; NaN where an input is missing, 0 where day_length is 0).

    Raises
    ------
    InputMismatchError
        DataArray inputs that would broadcast instead of lining up cell by cell: each
        DataArray's dims must be a subset of the largest input's dims, with identical
        coordinate values on the shared dims (so a ``day_length(lat)`` or a scalar is fine;
        ``latitude/longitude`` beside ``lat/lon``, or two different grids, are not). See
        :func:`euphotic.models.check_same_grid`.
    ValueError
        A ``units`` attribute that cannot be converted, naming the argument.

    Notes
    -----
    .. math:: PP_{eu} = 0.66125\\,P^B_{opt}(T)\\,\\frac{E_0}{E_0 + 4.1}\\,Z_{eu}\\,C_{sat}\\,D_{irr}

    with :math:`P^B_{opt}` from :func:`pb_opt_behrenfeld_falkowski` and :math:`Z_{eu}` from
    :func:`euphotic.models.morel_berthon.euphotic_depth`.

    References
    ----------
    Behrenfeld and Falkowski (1997), Limnol. Oceanogr. 42:1-20, equations 10 and 11.
    Morel and Berthon (1989), Limnol. Oceanogr. 34:1545-1562.
    """
    chl, par, sst, day_length = model_inputs(chl, par, sst, day_length)
    kernel = vgpm_block if (vgpm_block is not None and use_compiled()) else vgpm_kernel
    return apply_kernel(kernel, chl, par, sst, day_length, name="npp", attrs=_OUTPUT_ATTRS)
