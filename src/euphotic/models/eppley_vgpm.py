"""VGPM with the Eppley (1972) exponential temperature dependence of P^B_opt."""

from __future__ import annotations

from functools import partial

import numpy as np

from euphotic.models._apply import apply_kernel, model_inputs
from euphotic.models._compiled import block_kernel, jit_loop, jit_point, month_block, use_compiled
from euphotic.models.vgpm import _OUTPUT_ATTRS, vgpm_kernel, vgpm_point_with

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


_eppley_kernel = partial(vgpm_kernel, pb_opt=pb_opt_eppley)


@jit_point
def pb_opt_eppley_point(t: float) -> float:
    """:func:`pb_opt_eppley` for one value (compiled)."""
    return EPPLEY_A * 10.0 ** (EPPLEY_B * t - EPPLEY_C)


def _eppley_vgpm_loop(c, p, t, d, out):
    for i in range(out.size):
        out[i] = vgpm_point_with(
            np.float64(c[i]), np.float64(p[i]), np.float64(d[i]), pb_opt_eppley_point(np.float64(t[i]))
        )


#: Compiled block kernel of the Eppley-VGPM (None without numba).
eppley_vgpm_block = block_kernel(jit_loop(_eppley_vgpm_loop))


def _eppley_vgpm_accumulate(c, p, t, d, ocean, total, count):
    for j in range(c.shape[0]):
        dl = d[j]
        for i in range(c.shape[1]):
            if ocean[j, i]:
                v = vgpm_point_with(
                    np.float64(c[j, i]), np.float64(p[j, i]), dl, pb_opt_eppley_point(np.float64(t[j, i]))
                )
                if v == v:  # a valid estimate (not NaN)
                    total[j, i] += v
                    count[j, i] += 1.0


#: Fused monthly pass of the Eppley-VGPM (see :func:`euphotic.models._compiled.month_block`).
eppley_vgpm_month_block = month_block(jit_loop(_eppley_vgpm_accumulate))


def eppley_vgpm(chl, par, sst, day_length):
    """Net primary production by the VGPM with Eppley's temperature function, mg C m-2 d-1.

    Same arguments, units, conversions and checks as :func:`euphotic.models.vgpm` (chl
    mg m-3, PAR mol photons m-2 d-1 or a DataArray in W m-2 / umol m-2 s-1, SST degC, day
    length h; DataArrays on different dims or grids raise ``InputMismatchError``); only
    P^B_opt(T) differs (:func:`pb_opt_eppley`).

    References
    ----------
    Behrenfeld and Falkowski (1997), Limnol. Oceanogr. 42:1-20; Eppley (1972), Fish. Bull.
    70:1063-1085.
    """
    chl, par, sst, day_length = model_inputs(chl, par, sst, day_length)
    kernel = (
        eppley_vgpm_block if (eppley_vgpm_block is not None and use_compiled()) else _eppley_kernel
    )
    return apply_kernel(kernel, chl, par, sst, day_length, name="npp", attrs=_OUTPUT_ATTRS)
