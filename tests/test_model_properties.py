"""Property-based tests of the NPP models (hypothesis): what must hold for every valid input.

Valid inputs, from the ranges met in open-ocean satellite products (common practice, not a
published table): chlorophyll 0.01-100 mg m-3, daily PAR 0.1-100 mol photons m-2 d-1, SST
-2-35 degC, day length 0-24 h.

Properties, each following from the published equations (Behrenfeld and Falkowski 1997,
eq. 10-11; Morel and Berthon 1989; Eppley 1972) rather than from the package's own numbers:

* finite and non-negative (every factor of eq. 10 is positive for valid inputs);
* non-decreasing in PAR (the light term E0 / (E0 + 4.1) increases with E0);
* exactly zero when the day length is zero (the day-length factor);
* the same numbers from numpy, xarray and dask inputs;
* unit invariance: SST in K (T + 273.15, handbook) and PAR in W m-2 (McCree 1972: 4.57 umol
  J-1, x 86,400 s d-1 = 0.394848 mol m-2 d-1 per W m-2, worked by hand) give the same result
  as degC and mol m-2 d-1.

Both the public functions (compiled kernels) and the numpy reference formulas are checked.
``deadline=None``: the first call may compile with numba.
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from euphotic.models import eppley_vgpm, vgpm
from euphotic.models.eppley_vgpm import eppley_vgpm_kernel as _eppley_kernel
from euphotic.models.vgpm import PBOPT_T_HIGH, PBOPT_T_LOW, vgpm_kernel

from .conftest import NoCompute

#: McCree (1972): 4.57 umol J-1; x 1e-6 mol/umol x 86,400 s/d (by hand).
W_M2_TO_MOL_M2_D = 0.394848

SETTINGS = settings(max_examples=40, deadline=None, derandomize=True)

PUBLIC = {"vgpm": vgpm, "eppley_vgpm": eppley_vgpm}
ALL = {**PUBLIC, "vgpm numpy formula": vgpm_kernel, "eppley_vgpm numpy formula": _eppley_kernel}


def _floats(lo: float, hi: float):
    return st.floats(lo, hi, allow_nan=False, allow_infinity=False)


CHL = _floats(0.01, 100.0)
PAR = _floats(0.1, 100.0)
# Away from the two cut-offs of P^B_opt (B&F97 eq. 11), where the published function jumps
# (4.023 -> 4.00 at 28.5 degC): a K -> degC round trip may move a value across by 1 ulp.
SST = _floats(-2.0, 35.0).filter(
    lambda t: abs(t - PBOPT_T_HIGH) > 1e-9 and abs(t - PBOPT_T_LOW) > 1e-9
)
DAY = _floats(0.0, 24.0)


@st.composite
def fields(draw, n_max: int = 16):
    """Four 1-D float64 arrays of one length: chl, PAR, SST, day length."""
    n = draw(st.integers(1, n_max))
    return tuple(
        draw(arrays(np.float64, n, elements=el)) for el in (CHL, PAR, SST, DAY)
    )


@pytest.mark.parametrize("name", list(ALL))
@SETTINGS
@given(f=fields())
def test_finite_and_non_negative(name, f):
    out = np.asarray(ALL[name](*f))
    assert out.dtype == np.float64 and out.shape == f[0].shape
    assert np.isfinite(out).all()
    assert (out >= 0.0).all()


@pytest.mark.parametrize("name", list(ALL))
@SETTINGS
@given(f=fields(), par2=arrays(np.float64, 16, elements=PAR))
def test_non_decreasing_in_par(name, f, par2):
    chl, par, sst, dl = f
    lo = np.minimum(par, par2[: par.size])
    hi = np.maximum(par, par2[: par.size])
    a = np.asarray(ALL[name](chl, lo, sst, dl))
    b = np.asarray(ALL[name](chl, hi, sst, dl))
    # rel 1e-12: E0 / (E0 + 4.1) rounds its numerator and denominator separately, so two
    # PAR values a few ulps apart may come out 1 ulp the "wrong" way round
    assert (b >= a * (1.0 - 1e-12)).all()


@pytest.mark.parametrize("name", list(ALL))
@SETTINGS
@given(f=fields())
def test_zero_day_length_gives_exactly_zero(name, f):
    chl, par, sst, _ = f
    out = np.asarray(ALL[name](chl, par, sst, np.zeros_like(chl)))
    assert (out == 0.0).all()


@pytest.mark.parametrize("name", list(PUBLIC))
@SETTINGS
@given(f=fields(), chunk=st.integers(1, 5))
def test_numpy_xarray_dask_identical(name, f, chunk):
    model = PUBLIC[name]
    expected = model(*f)
    as_xr = [xr.DataArray(a, dims="x") for a in f]
    as_dask_xr = [xr.DataArray(da.from_array(a, chunks=chunk), dims="x") for a in f]
    as_dask = [da.from_array(a, chunks=chunk) for a in f]
    np.testing.assert_array_equal(model(*as_xr).values, expected)
    with NoCompute():  # stays lazy
        lazy_xr, lazy = model(*as_dask_xr), model(*as_dask)
    np.testing.assert_array_equal(lazy_xr.compute().values, expected)
    np.testing.assert_array_equal(lazy.compute(), expected)


@pytest.mark.parametrize("name", list(PUBLIC))
@SETTINGS
@given(f=fields())
def test_units_invariance(name, f):
    model = PUBLIC[name]
    chl, par, sst, dl = f
    expected = model(*f)

    def arr(values, units):
        return xr.DataArray(values, dims="x", attrs={"units": units})

    # rel 1e-12: K -> degC subtracts 273.15 (a few ulps of ~300 K, about 1e-13 degC, reach
    # the result through P^B_opt), W m-2 -> mol m-2 d-1 multiplies by a float factor
    kelvin = model(arr(chl, "mg m-3"), arr(par, "mol m-2 d-1"), arr(sst + 273.15, "K"),
                   arr(dl, "h"))
    np.testing.assert_allclose(kelvin.values, expected, rtol=1e-12, atol=0)
    watts = model(arr(chl, "mg m-3"), arr(par / W_M2_TO_MOL_M2_D, "W m-2"), arr(sst, "degC"),
                  arr(dl, "h"))
    np.testing.assert_allclose(watts.values, expected, rtol=1e-12, atol=0)
