"""Tests of the NPP models against their published equations and hand-worked values.

References:

* Behrenfeld, M. J. and Falkowski, P. G. (1997). Photosynthetic rates derived from
  satellite-based chlorophyll concentration. Limnology and Oceanography 42(1):1-20.
  "B&F97" below: the VGPM, NPP = 0.66125 P^B_opt E0/(E0 + 4.1) Z_eu C DL, and P^B_opt(T)
  of their eq. 11.
* Morel, A. and Berthon, J.-F. (1989). Surface pigments, algal biomass profiles, and potential
  production of the euphotic layer. Limnology and Oceanography 34(8):1545-1562. "M&B89":
  C_tot = 38.0 C^0.425 (C < 1), 40.2 C^0.507 (C >= 1); Z_eu = 568.2 C_tot^-0.746, or
  200 C_tot^-0.293 where the first gives more than 102 m.
* Behrenfeld, M. J., Boss, E., Siegel, D. A. and Shea, D. M. (2005). Carbon-based ocean
  productivity and phytoplankton physiology from space. Global Biogeochemical Cycles 19,
  GB1006: the CbPM (formulation from memory; its own tests are in tests/test_cbpm.py). Here it
  runs through the same missing-value, array-type, laziness, unit and compiled-kernel checks.
* Eppley, R. W. (1972). Temperature and phytoplankton growth in the sea. Fishery Bulletin
  70:1063-1085; in the Eppley-VGPM as P^B_opt = 1.54 x 10^(0.0275 T - 0.07) (this form is
  from memory of the literature).

"Worked by hand" values below were computed step by step, each intermediate written in the
comment to 7 significant figures (powers and logarithms with a calculator), independently of
the package code.
"""

from __future__ import annotations

import dask
import dask.array as da
import numpy as np
import pytest
import xarray as xr

from euphotic.models import (
    cbpm,
    eppley_vgpm,
    euphotic_depth,
    pb_opt_behrenfeld_falkowski,
    pb_opt_eppley,
    pi_platt,
    vgpm,
)

from .conftest import NoCompute

#: Every registered model (pi_platt and cbpm: tests/test_platt.py and tests/test_cbpm.py have
#: their own published checks).
ALL_MODELS = [vgpm, eppley_vgpm, pi_platt, cbpm]


def _by_role(model, chl, par, sst, dl):
    """The inputs a model takes, in its declared order (pi_platt takes no SST)."""
    given = {"chl": chl, "par": par, "sst": sst, "day_length": dl}
    return [given[r] for r in model.spec.roles]


# --------------------------------------------------------------------------------------
# P^B_opt(T), B&F97 eq. 11
# --------------------------------------------------------------------------------------

# Worked by hand, term by term (c_k T^k, k = 0..7), decimal arithmetic:
#   T = 0:  1.2956 (only the constant term)
#   T = 10: 1.2956 + 2.749 + 6.17 - 20.5 + 24.62 - 13.48 + 3.4132 - 0.327 = 3.9408
#   T = 20: 1.2956 + 5.498 + 24.68 - 164.0 + 393.92 - 431.36 + 218.4448 - 41.856 = 6.6224
#   T = -1: 1.2956 - 0.2749 + 0.0617 + 0.0205 + 0.002462 + 0.0001348 + 0.0000034132
#           + 0.0000000327 = 1.1055002459
#   T = 28.5: 1.2956 + 7.83465 + 50.115825 - 474.5570625 + 1624.304653875
#           - 2534.6277901125 + 1829.07240234823125 - 499.41521896414921875
#           = 4.02305964658203125
# The hand sums are exact decimals; the only difference is float64 rounding of terms up to
# ~2500 in size (2500 x 2.2e-16 x a few terms ~ 1e-12), hence abs 1e-11.
_PB_HAND = [(0.0, 1.2956), (10.0, 3.9408), (20.0, 6.6224), (-1.0, 1.1055002459),
            (28.5, 4.02305964658203125)]


@pytest.mark.parametrize("t, expected", _PB_HAND)
def test_pb_opt_polynomial_hand_values(t, expected):
    assert pb_opt_behrenfeld_falkowski(t) == pytest.approx(expected, rel=0, abs=1e-11)


def test_pb_opt_cutoffs():
    # B&F97 eq. 11: 1.13 for T < -1 degC, 4.00 for T > 28.5 degC (constants, so exact), the
    # polynomial on [-1, 28.5] including both end points (the inequalities are strict).
    t = np.array([-5.0, -1.0001, -1.0, -0.9999, 28.4999, 28.5, 28.5001, 35.0])
    out = pb_opt_behrenfeld_falkowski(t)
    assert out[0] == 1.13 and out[1] == 1.13
    assert out[6] == 4.00 and out[7] == 4.00
    # At and just inside the cut-offs: the hand values at -1 and 28.5 above. Within 1e-4 degC
    # of them the polynomial moves by < 1e-4 x |dP/dT| (about 0.21 at -1 and 0.46 at 28.5, by
    # hand from the same terms), so abs 1e-4 is ample.
    np.testing.assert_allclose(out[2:4], 1.1055002459, rtol=0, atol=1e-4)
    np.testing.assert_allclose(out[4:6], 4.02305964658203125, rtol=0, atol=1e-4)


def test_pb_opt_nan_in_nan_out():
    assert np.isnan(pb_opt_behrenfeld_falkowski(np.nan))


# --------------------------------------------------------------------------------------
# Euphotic depth, M&B89
# --------------------------------------------------------------------------------------

# Worked by hand (7 significant figures at each step):
#  chl 0.02 (C < 1): 0.02^0.425 = 0.1896434, C_tot = 38.0 x that = 7.206449;
#     568.2 x 7.206449^-0.746 = 568.2 x 0.2291606 = 130.209 > 102 m, so
#     Z_eu = 200 x 7.206449^-0.293 = 200 x 0.5606446 = 112.1289 m        (deep branch)
#  chl 0.5 (C < 1): 0.5^0.425 = 0.7448387, C_tot = 28.30387;
#     Z_eu = 568.2 x 28.30387^-0.746 = 568.2 x 0.08258915 = 46.92716 m
#  chl 0.9999999 (C < 1): C_tot = 38.00000 (to 7 figures); Z_eu = 568.2 x 0.06629510 = 37.66888
#  chl 1 (C >= 1): C_tot = 40.2; Z_eu = 568.2 x 40.2^-0.746 = 568.2 x 0.06356929 = 36.12007 m
#  chl 2 (C >= 1): 2^0.507 = 1.421092, C_tot = 57.12790;
#     Z_eu = 568.2 x 0.04890927 = 27.79025 m
#  chl 10 (C >= 1): 10^0.507 = 3.213661, C_tot = 129.1892;
#     Z_eu = 568.2 x 0.02660880 = 15.11912 m
# Tolerance rel 1e-6: the hand values carry 7 significant figures.
_ZEU_HAND = [(0.02, 112.1289), (0.5, 46.92716), (0.9999999, 37.66888), (1.0, 36.12007),
             (2.0, 27.79025), (10.0, 15.11912)]


@pytest.mark.parametrize("chl, expected", _ZEU_HAND)
def test_euphotic_depth_hand_values(chl, expected):
    assert euphotic_depth(chl) == pytest.approx(expected, rel=1e-6)


def test_euphotic_depth_switches_branch_at_102_m():
    # M&B89: the 200 C_tot^-0.293 branch is used only where 568.2 C_tot^-0.746 > 102 m, i.e.
    # C_tot < (568.2/102)^(1/0.746) = 9.996947, chl < (9.996947/38)^(1/0.425) = 0.04320075
    # (worked by hand). Either side of it:
    #  chl 0.0430: C_tot = 38 x 0.2625573 = 9.977177; 568.2 x 0.1797795 = 102.1507 > 102, so
    #     Z_eu = 200 x 0.5096720 = 101.9344 m (deep branch, though the value is below 102)
    #  chl 0.0435: C_tot = 38 x 0.2638505 = 10.02632; Z_eu = 568.2 x 0.1791218 = 101.7770 m
    #     (the deep branch would have given 200 x 0.5089388 = 101.7878, 1e-4 away)
    # Tolerance rel 1e-6 (7-figure hand values) separates the two branches at 0.0435 (1e-4).
    out = euphotic_depth(np.array([0.0430, 0.0435]))
    np.testing.assert_allclose(out, [101.9344, 101.7770], rtol=1e-6)


# --------------------------------------------------------------------------------------
# VGPM and Eppley-VGPM on scalars
# --------------------------------------------------------------------------------------

# Worked by hand: chl 0.5 mg m-3, PAR 40 mol m-2 d-1, SST 20 degC, day length 12 h.
#   P^B_opt(20) = 6.6224 (above); light term 40 / (40 + 4.1) = 0.9070295; Z_eu = 46.92716 m
#   0.66125 x 6.6224 = 4.379062; x 0.9070295 = 3.971938; x 46.92716 = 186.3918;
#   x 0.5 = 93.19588; x 12 = 1118.351 mg C m-2 d-1
VGPM_HAND = 1118.351
# Eppley: P^B_opt(20) = 1.54 x 10^(0.55 - 0.07) = 1.54 x 10^0.48 = 1.54 x 3.019952 = 4.650726;
#   NPP = 1118.351 x 4.650726 / 6.6224 = 785.386 mg C m-2 d-1 (by hand)
EPPLEY_PB_20_HAND = 4.650726
EPPLEY_HAND = 785.386


def test_vgpm_hand_worked_value():
    # B&F97 VGPM with eq. 11 and M&B89. rel 1e-6: 7 significant figures carried by hand.
    out = vgpm(0.5, 40.0, 20.0, 12.0)
    assert out == pytest.approx(VGPM_HAND, rel=1e-6)
    assert np.asarray(out).dtype == np.float64


def test_eppley_pb_opt_hand_values():
    # Eppley form (from memory of the literature): 1.54 x 10^(0.0275 T - 0.07).
    #   T = 0:  1.54 x 10^-0.07 = 1.54 x 0.8511380 = 1.310753
    #   T = 10: 1.54 x 10^0.205 = 1.54 x 1.603245 = 2.468998
    #   T = 20: 4.650726 (above)
    # Per degree the rate grows by 10^0.0275 = 1.065369, Eppley's (1972) "1.066" (from memory).
    # Tolerance rel 1e-6: 7 significant figures by hand.
    t = np.array([0.0, 10.0, 20.0])
    np.testing.assert_allclose(pb_opt_eppley(t), [1.310753, 2.468998, EPPLEY_PB_20_HAND],
                               rtol=1e-6)
    assert pb_opt_eppley(21.0) / pb_opt_eppley(20.0) == pytest.approx(1.065369, rel=1e-6)


def test_eppley_vgpm_hand_worked_value():
    assert eppley_vgpm(0.5, 40.0, 20.0, 12.0) == pytest.approx(EPPLEY_HAND, rel=1e-6)


@pytest.mark.parametrize("sst", [-2.0, 0.0, 5.0, 12.5, 20.0, 27.0, 30.0])
def test_eppley_over_vgpm_is_ratio_of_pb_opt(sst):
    # The two models differ only in P^B_opt(T) (Eppley-VGPM = VGPM with Eppley's temperature
    # function), so the ratio of NPPs must be the ratio of the P^B_opt values; the ones used
    # here are checked against hand values above. rel 1e-12: float64 rounding only.
    chl, par, dl = 0.3, 25.0, 10.5
    ratio = eppley_vgpm(chl, par, sst, dl) / vgpm(chl, par, sst, dl)
    expected = pb_opt_eppley(sst) / pb_opt_behrenfeld_falkowski(sst)
    assert ratio == pytest.approx(expected, rel=1e-12)


def _call(model, **fields):
    """Call a model with the fields of its own inputs (by role name), the others left out."""
    return model(**{r: fields[r] for r in model.spec.roles})


def _other(values, n):
    """The CbPM's extra inputs: a valid value (bbp above its 0.00035 m-1 background) in every
    cell, as a float array of ``values`` with the same NaN pattern as given."""
    return np.broadcast_to(np.asarray(values, dtype=np.float64), (n,)).copy()


@pytest.mark.parametrize("model", ALL_MODELS)
def test_missing_and_dark_values(model):
    # chl <= 0, NaN or inf is missing chlorophyll -> NaN; NaN PAR -> NaN; NaN in the model's
    # other inputs (SST; bbp, Kd(490), MLD) -> NaN.
    # Day length 0 (polar night): no light, no production -> exactly 0, even with NaN chl.
    chl = np.array([0.5, 0.0, -0.1, np.nan, np.inf, 0.5, 0.5, np.nan, 0.0])
    par = np.array([40.0, 40.0, 40.0, 40.0, 40.0, np.nan, 40.0, 40.0, 40.0])
    sst = np.array([20.0, 20.0, 20.0, 20.0, 20.0, 20.0, np.nan, 20.0, 20.0])
    dl = np.array([12.0, 12.0, 12.0, 12.0, 12.0, 12.0, 12.0, 0.0, 0.0])
    extra = {}
    for role, v in (("bbp", 0.003), ("kd490", 0.06), ("mld", 20.0)):
        extra[role] = _other(v, 9)
        extra[role][6] = np.nan
    out = _call(model, chl=chl, par=par, sst=sst, day_length=dl, **extra)
    assert out.dtype == np.float64
    assert np.isfinite(out[0]) and out[0] > 0
    assert np.isnan(out[1:6]).all()
    if set(model.spec.roles) & {"sst", "bbp", "kd490", "mld"}:
        assert np.isnan(out[6])  # NaN in one of its other inputs
    else:
        assert out[6] == out[0]  # pi_platt reads none of them
    assert (out[7:] == 0.0).all()


@pytest.mark.parametrize("dtype", [np.float32, np.int32])
def test_output_is_float64(dtype):
    # Integer-valued inputs (chl 1 mg m-3, as 0.5 is no int32) compared with the float64 call.
    # These values are exact in float32 and int32, so the only difference allowed is none in
    # practice; rel 1e-6 would still cover float32 rounding of non-exact inputs (1.2e-7 each).
    chl, par, sst, dl = (np.array([v], dtype=dtype) for v in (1, 40, 20, 12))
    out = vgpm(chl, par, sst, dl)
    assert out.dtype == np.float64
    assert out[0] == pytest.approx(float(vgpm(1.0, 40.0, 20.0, 12.0)), rel=1e-6)


# --------------------------------------------------------------------------------------
# Array types: numpy, xarray, dask-backed xarray
# --------------------------------------------------------------------------------------

# Four 2x3 fields: a regular cell (the hand-worked one), warm and cold water, the deep Z_eu
# branch, high chl, and a polar-night cell with missing chlorophyll.
_CHL = np.array([[0.5, 0.02, 2.0], [10.0, 0.1, np.nan]])
_PAR = np.array([[40.0, 60.0, 20.0], [5.0, 0.5, 30.0]])
_SST = np.array([[20.0, 28.9, 10.0], [-1.5, 3.0, 15.0]])
_DL = np.array([[12.0, 14.0, 11.0], [18.0, 6.0, 0.0]])
# The CbPM's extra inputs (invented, plausible): bbp(443) m-1, Kd(490) m-1, mixed layer m; the
# cell [0, 0] is the CbPM hand-worked cell of tests/test_cbpm.py, [1, 1] has bbp below the
# background (no phytoplankton carbon: 0).
_BBP = np.array([[0.003, 0.0012, 0.006], [0.02, 0.0003, 0.004]])
_KD = np.array([[0.06, 0.02, 0.12], [0.6, 0.04, 0.08]])
_MLD = np.array([[20.0, 60.0, 35.0], [10.0, 120.0, 40.0]])
_FIELDS = {"chl": (_CHL, "mg m-3"), "par": (_PAR, "mol m-2 d-1"), "sst": (_SST, "degC"),
           "day_length": (_DL, "h"), "bbp": (_BBP, "m-1"), "kd490": (_KD, "m-1"),
           "mld": (_MLD, "m")}


def _numpy_args(model):
    return [_FIELDS[r][0] for r in model.spec.roles]


@pytest.fixture(params=["numpy", "xarray", "dask"])
def array_type(request):
    """Convert a numpy array (plus its units) to the requested array type, as MetPy's tests do.

    xarray and dask carry a ``units`` attribute; dask uses 1x2 chunks so the calculation runs
    over several blocks.
    """
    kind = request.param

    def convert(values, units=None):
        values = np.asarray(values)
        if kind == "numpy":
            return values
        data = da.from_array(values, chunks=(1, 2)) if kind == "dask" else values
        return xr.DataArray(data, dims=("y", "x"), attrs={"units": units} if units else {})

    convert.kind = kind
    return convert


@pytest.mark.parametrize("model", ALL_MODELS)
def test_array_types_give_the_same_numbers(array_type, model):
    expected = model(*_numpy_args(model))  # numpy reference
    # The hand value sits in cell [0, 0] (rel 1e-6 as above); the polar night cell is 0.
    if model is vgpm:
        assert expected[0, 0] == pytest.approx(VGPM_HAND, rel=1e-6)
    if model is cbpm:
        from .test_cbpm import CBPM_HAND

        assert expected[0, 0] == pytest.approx(CBPM_HAND, rel=1e-6)
        assert expected[1, 1] == 0.0  # bbp below background
    assert expected[1, 2] == 0.0
    args = tuple(array_type(*_FIELDS[r]) for r in model.spec.roles)
    with NoCompute():
        out = model(*args)
    if array_type.kind == "numpy":
        assert isinstance(out, np.ndarray)
        values = out
    else:
        assert isinstance(out, xr.DataArray)
        assert out.dims == ("y", "x")
        assert out.attrs["units"] == "mg m-2 d-1"
        if array_type.kind == "dask":
            assert isinstance(out.data, da.Array)  # still lazy
            values = out.compute().values
        else:
            assert isinstance(out.data, np.ndarray)
            values = out.values
    assert values.dtype == np.float64
    # Same float64 arithmetic on every path: exact equality, NaN where NaN.
    np.testing.assert_array_equal(values, expected)


def test_no_compute_callback_catches_a_compute():
    # Guard for the laziness check itself: the callback must fire on a real compute.
    # Default (threaded) scheduler, the one the other tests would use.
    arr = da.ones(4, chunks=2) + 1
    with NoCompute(), pytest.raises(AssertionError, match="computed early"):
        arr.compute()


@pytest.mark.parametrize("model", ALL_MODELS)
def test_plain_dask_arrays_stay_lazy(model):
    chunks = (1, 2)
    args = [da.from_array(a, chunks=chunks) for a in _numpy_args(model)]
    with NoCompute():
        out = model(*args)
    assert isinstance(out, da.Array)
    with dask.config.set(scheduler="sync"):
        np.testing.assert_array_equal(out.compute(), model(*_numpy_args(model)))


def test_dask_array_mixed_with_numpy_array():
    chl = da.from_array(np.array([0.5, 2.0]), chunks=1)
    par = np.array([40.0, 40.0])
    out = vgpm(chl, par, 20.0, 12.0)
    expected = vgpm(np.array([0.5, 2.0]), par, 20.0, 12.0)
    np.testing.assert_array_equal(np.asarray(out.compute()), expected)


# --------------------------------------------------------------------------------------
# Unit invariance of DataArray inputs
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("model", ALL_MODELS)
def test_units_are_converted(array_type, model):
    if array_type.kind == "numpy":
        pytest.skip("bare numpy arrays carry no units")
    canonical = model(*(array_type(*_FIELDS[r]) for r in model.spec.roles))
    # Handbook conversions: T(K) = T(degC) + 273.15; 1 ug L-1 = 1e-6 g / 1e-3 m3 = 1 mg m-3;
    # 1 h = 60 min; 1 einstein = 1 mol photons; 1 m-1 = 1000 km-1 = 0.01 cm-1; 1 m = 100 cm.
    other_units = {
        "chl": (_CHL, "ug L-1"),
        "par": (_PAR, "einstein m-2 day-1"),
        "sst": (_SST + 273.15, "K"),
        "day_length": (_DL * 60.0, "min"),
        "bbp": (_BBP * 1000.0, "km-1"),
        "kd490": (_KD * 0.01, "cm-1"),
        "mld": (_MLD * 100.0, "cm"),
    }
    converted_args = tuple(array_type(*other_units[r]) for r in model.spec.roles)
    with NoCompute():
        other = model(*converted_args)
    # rel 1e-12: K -> degC subtracts 273.15 and the factors come from pint as floats, so a few
    # ulps of ~300 K (about 1e-13 degC) reach the result through P^B_opt; the CbPM's factors
    # (km-1, cm-1, cm) are a few ulps each; nothing else differs.
    np.testing.assert_allclose(other.values, canonical.values, rtol=1e-12, atol=0)
    assert np.isnan(other.values[1, 2]) == np.isnan(canonical.values[1, 2])


def test_kelvin_sst_hand_worked_value():
    # 293.15 K = 20 degC: the hand-worked VGPM value (rel 1e-6 as above).
    def one(v, u):
        return xr.DataArray([v], dims="x", attrs={"units": u})

    out = vgpm(one(0.5, "mg m-3"), one(40.0, "mol m-2 d-1"), one(293.15, "K"), one(720.0, "min"))
    assert float(out[0]) == pytest.approx(VGPM_HAND, rel=1e-6)


def test_incompatible_units_are_rejected():
    bad_sst = xr.DataArray([20.0], dims="x", attrs={"units": "m"})
    with pytest.raises(ValueError):
        vgpm(0.5, 40.0, bad_sst, 12.0)


# --------------------------------------------------------------------------------------
# Compiled kernels agree with the numpy formulas (the numpy path is written straight from
# the published equations above); tolerance rtol 1e-6 as required, both compute in float64.
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["vgpm", "eppley_vgpm", "pi_platt"])
def test_compiled_kernel_matches_numpy_formula(name):
    # (the CbPM, with its own inputs: test_compiled_cbpm_matches_numpy_formula below)
    from euphotic.models import SPECS, get_model
    from euphotic.models._compiled import HAVE_NUMBA

    model = get_model(name)
    spec = SPECS[name]
    # the parameters' defaults in declared order (the euphotic-depth choice's index 0.0:
    # Morel & Berthon)
    defaults = list(spec.default_values().values())

    def block(chl, par, sst, dl):
        return model.block(*_by_role(model, chl, par, sst, dl), *defaults)

    def reference(chl, par, sst, dl):
        return spec.reference(*_by_role(model, chl, par, sst, dl))

    if not HAVE_NUMBA:
        pytest.skip("numba not installed")
    rng = np.random.default_rng(1997)
    n = 200_000
    chl = np.exp(rng.normal(-1.0, 1.8, n)).astype("f4")  # ~0.005 to 100 mg m-3
    chl[::97] = np.nan
    chl[::89] = 0.0
    chl[::83] = -0.1
    chl[::79] = np.inf
    chl[1] = 1.0  # the C_tot branch point
    par = rng.uniform(-1.0, 65.0, n).astype("f4")
    sst = rng.uniform(-3.0, 33.0, n).astype("f4")  # spans both P^B_opt cut-offs
    sst[::71] = np.nan
    dl = rng.uniform(0.0, 24.0, n)
    dl[::7] = 0.0
    got = block(chl, par, sst, dl)
    want = reference(chl, par, sst, dl)
    assert got.dtype == np.float64
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got, want, rtol=1e-6, equal_nan=True)
    # broadcasting, as inside the monthly graph: day length (day, lat, 1) against (day, lat, lon)
    c3 = chl[:24].reshape(2, 3, 4)
    d3 = dl[:6].reshape(2, 3, 1)
    np.testing.assert_allclose(block(c3, 30.0, 15.0, d3), reference(c3, 30.0, 15.0, d3), rtol=1e-6)


@pytest.mark.parametrize("zeu_index", [0.0, 1.0])
def test_compiled_cbpm_matches_numpy_formula(zeu_index):
    # As above for the CbPM (its own inputs), with both euphotic-depth relations and default
    # parameters; rtol 1e-6 as required (both float64; the compiled formula takes
    # min(Chl / Theta_max, C) for C min(Theta / Theta_max, 1), equal up to rounding).
    from euphotic.models import SPECS, get_model
    from euphotic.models._compiled import HAVE_NUMBA
    from euphotic.models.zeu import CHOICES

    if not HAVE_NUMBA:
        pytest.skip("numba not installed")
    model = get_model("cbpm")
    reference = SPECS["cbpm"].reference
    rng = np.random.default_rng(2005)
    n = 200_000
    chl = np.exp(rng.normal(-1.0, 1.8, n)).astype("f4")
    chl[::97] = np.nan
    chl[::89] = 0.0
    chl[::83] = -0.1
    chl[::79] = np.inf
    par = rng.uniform(-1.0, 65.0, n).astype("f4")
    dl = rng.uniform(0.0, 24.0, n)
    dl[::7] = 0.0
    bbp = rng.uniform(-0.0005, 0.02, n)  # spans below the 0.00035 m-1 background and < 0
    bbp[::61] = np.nan
    bbp[::101] = 0.00035  # exactly the background: C = 0
    kd = rng.uniform(-0.01, 0.5, n)
    kd[::67] = np.nan
    mld = rng.uniform(-5.0, 400.0, n)
    mld[::73] = np.nan
    mld[::103] = np.inf
    got = model.block(chl, par, dl, bbp, kd, mld, 2.0, 0.00035, 13000.0, zeu_index)
    want = reference(chl, par, dl, bbp, kd, mld, euphotic_depth=CHOICES[int(zeu_index)])
    assert got.dtype == np.float64
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    # The exact zeros of the rules (no daylight, no PAR, bbp at or below its background) agree.
    rule_zero = (dl <= 0.0) | (np.isfinite(want) & ((par == 0.0) | (bbp <= 0.00035)))
    assert (got[rule_zero] == 0.0).all() and (want[rule_zero] == 0.0).all()
    # atol 1e-9 mg C m-2 d-1 besides rtol 1e-6: under a very deep, turbid mixed layer
    # (I_g < ~1e-8) 1 - exp(-3 I_g) cancels and the two exp implementations (numba's and
    # numpy's) may differ by an ulp of 1, i.e. by 100 % of values below ~1e-12 mg C m-2 d-1.
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-9, equal_nan=True)
    assert np.nanmax(np.abs(got - want)[want > 1e-6] / want[want > 1e-6]) < 1e-6
    # the public function on the compiled path gives the same as the numpy formula
    np.testing.assert_allclose(cbpm(chl, par, dl, bbp, kd, mld,
                                    euphotic_depth=CHOICES[int(zeu_index)]), want,
                               rtol=1e-6, atol=1e-9, equal_nan=True)


def test_numpy_kernel_can_be_forced(monkeypatch):
    from euphotic.models import vgpm

    fast = vgpm(np.array([0.5]), np.array([40.0]), np.array([20.0]), np.array([12.0]))
    monkeypatch.setenv("EUPHOTIC_KERNEL", "numpy")
    slow = vgpm(np.array([0.5]), np.array([40.0]), np.array([20.0]), np.array([12.0]))
    np.testing.assert_allclose(fast, slow, rtol=1e-12)


# --------------------------------------------------------------------------------------
# Python API: PAR units as the readers take them; inputs on different grids are refused
# --------------------------------------------------------------------------------------

# Worked by hand: McCree (1972), Agricultural Meteorology 10:443-453: about 4.57 umol photons
# per joule of daylight PAR; a daily-mean flux of 1 W m-2 is then
# 4.57e-6 mol J-1 x 86,400 s d-1 = 0.394848 mol photons m-2 d-1.
W_M2_TO_MOL_M2_D = 0.394848
# 1 umol m-2 s-1 as a daily mean = 1e-6 x 86,400 = 0.0864 mol m-2 d-1 (by hand).
UMOL_S_TO_MOL_D = 0.0864


def _field(values, dims=("lat", "lon"), units=None, **coords):
    values = np.asarray(values, dtype=np.float64)
    return xr.DataArray(values, dims=dims, coords=coords or None,
                        attrs={"units": units} if units else {})


@pytest.mark.parametrize("model", [vgpm, eppley_vgpm, pi_platt])
@pytest.mark.parametrize(
    ("par_units", "per_mol_d"),
    [("W m-2", W_M2_TO_MOL_M2_D), ("W/m^2", W_M2_TO_MOL_M2_D),
     ("umol m-2 s-1", UMOL_S_TO_MOL_D), ("einstein m-2 d-1", 1.0), ("mol m-2 d-1", 1.0)],
)
def test_par_dataarray_in_any_reader_unit(model, par_units, per_mol_d):
    # 40 mol m-2 d-1 given in another unit gives the hand-worked VGPM value (rel 1e-12: one
    # multiplication by a factor pint works out in float64).
    par = _field([[40.0 / per_mol_d]], units=par_units)
    canonical = model(*_by_role(model, 0.5, 40.0, 20.0, 12.0))
    out = model(*_by_role(model, _field([[0.5]], units="mg m-3"), par, 20.0, 12.0))
    assert float(out[0, 0]) == pytest.approx(float(canonical), rel=1e-12)
    if model is vgpm:
        assert float(out[0, 0]) == pytest.approx(VGPM_HAND, rel=1e-6)


def test_par_conversion_is_the_readers_conversion():
    # One shared function (units.par_factors) for the command line and the Python API.
    from euphotic import units

    factor, kind = units.par_factors("W m-2")
    assert (factor, kind) == (pytest.approx(W_M2_TO_MOL_M2_D, rel=1e-12), "energy")
    par = _field([[100.0, 250.0]], units="W m-2")
    np.testing.assert_array_equal(
        vgpm(0.5, par, 20.0, 12.0).values, vgpm(0.5, par.values * factor, 20.0, 12.0)
    )


def test_par_pint_quantity_in_w_m2():
    from euphotic.units import ureg

    par = ureg.Quantity(np.array([40.0 / W_M2_TO_MOL_M2_D]), "W m-2")
    assert vgpm(0.5, par, 20.0, 12.0)[0] == pytest.approx(VGPM_HAND, rel=1e-6)


def test_par_without_time_is_refused():
    with pytest.raises(ValueError, match=r"^par: PAR unit 'mol m-2' has no time"):
        vgpm(0.5, _field([[40.0]], units="mol m-2"), 20.0, 12.0)


def test_different_dimension_names_are_refused():
    """chl on (time, latitude, longitude), SST on (time, lat, lon): xarray would broadcast
    them to the outer product of both grids (5 dims); the models refuse, naming both."""
    from euphotic.errors import EuphoticError
    from euphotic.models import InputMismatchError

    t = np.array(["2025-04-01"], dtype="datetime64[ns]")
    lat, lon = np.array([10.0, 11.0]), np.array([20.0, 21.0, 22.0])
    chl = _field(np.full((1, 2, 3), 0.5), ("time", "latitude", "longitude"), "mg m-3",
                 time=t, latitude=lat, longitude=lon)
    par = chl.copy(data=np.full((1, 2, 3), 40.0)).assign_attrs(units="mol m-2 d-1")
    sst = _field(np.full((1, 2, 3), 20.0), ("time", "lat", "lon"), "degC", time=t, lat=lat,
                 lon=lon)
    with pytest.raises(InputMismatchError) as err:
        vgpm(chl, par, sst, 12.0)
    assert str(err.value) == (
        "sst has dims ('time', 'lat', 'lon') but chl has ('time', 'latitude', 'longitude'): "
        "give all inputs the same dimension names and grid"
    )
    assert isinstance(err.value, ValueError) and isinstance(err.value, EuphoticError)
    # a day length on (lat,) beside inputs on latitude/longitude is refused the same way
    dl = _field([12.0, 12.5], ("lat",), "h", lat=lat)
    with pytest.raises(InputMismatchError, match=r"^day_length has dims \('lat',\) but chl"):
        eppley_vgpm(chl, par, chl.copy(data=np.full((1, 2, 3), 20.0)), dl)


def test_different_grids_are_refused():
    from euphotic.models import InputMismatchError

    lat, lon = np.array([10.0, 11.0]), np.array([20.0, 21.0, 22.0])
    chl = _field(np.full((2, 3), 0.5), units="mg m-3", lat=lat, lon=lon)
    sst = _field(np.full((2, 3), 20.0), units="degC", lat=lat + 0.5, lon=lon)
    with pytest.raises(InputMismatchError) as err:
        vgpm(chl, 40.0, sst, 12.0)
    assert str(err.value) == (
        "sst coordinate 'lat' differs from chl's (at index 0: 10.5 vs 10.0): give all inputs "
        "the same dimension names and grid"
    )
    par = _field(np.full((2, 2), 40.0), units="mol m-2 d-1", lat=lat, lon=lon[:2])
    with pytest.raises(InputMismatchError) as err:
        vgpm(chl, par, 20.0, 12.0)
    assert str(err.value) == (
        "par has 2 values along 'lon' but chl has 3: give all inputs the same dimension "
        "names and grid"
    )


def test_broadcasting_a_day_length_by_latitude_and_scalars_stays_allowed():
    # every DataArray's dims a subset of the largest input's, same coordinates on shared dims
    t = np.array(["2025-04-01", "2025-04-02"], dtype="datetime64[ns]")
    lat, lon = np.array([10.0, 11.0]), np.array([20.0, 21.0, 22.0])
    chl = _field(np.full((2, 2, 3), 0.5), ("time", "lat", "lon"), "mg m-3", time=t, lat=lat,
                 lon=lon)
    dl = _field([12.0, 6.0], ("lat",), "h", lat=lat)
    sst_on_lon_lat = _field(np.full((3, 2), 20.0), ("lon", "lat"), "degC", lon=lon, lat=lat)
    out = vgpm(chl, 40.0, sst_on_lon_lat, dl)
    assert out.dims == ("time", "lat", "lon")
    np.testing.assert_allclose(out.values[:, 0, :], VGPM_HAND, rtol=1e-6)
    np.testing.assert_allclose(out.values[:, 1, :], VGPM_HAND / 2, rtol=1e-6)


# Morel & Maritorena (2001) euphotic depth, Z_eu = 34.0 Chl^-0.39 (coefficients from memory of
# their eq. 10; the values below are worked by hand from that power law):
#  chl 1: 34.0 m; chl 0.03: 0.03^-0.39 = exp(0.39 x 3.506558) = 3.925751, 133.4755 m;
#  chl 5: 5^-0.39 = exp(-0.39 x 1.609438) = 0.5338284, 18.15017 m.
@pytest.mark.parametrize("chl, expected", [(1.0, 34.0), (0.03, 133.4755), (5.0, 18.15017)])
def test_euphotic_depth_morel_maritorena_hand_values(chl, expected):
    from euphotic.models.zeu import euphotic_depth_by, zeu_point

    assert euphotic_depth_by(chl, "morel_maritorena_2001") == pytest.approx(expected, rel=1e-6)
    assert zeu_point(chl, 1.0) == pytest.approx(expected, rel=1e-6)
    # the default stays Morel & Berthon (1989)
    assert euphotic_depth_by(chl) == pytest.approx(float(euphotic_depth(chl)), rel=1e-12)


def test_vgpm_with_morel_maritorena_scales_by_the_depth_ratio():
    # The VGPM is linear in Z_eu (Behrenfeld & Falkowski 1997, eq. 10), so switching the relation
    # scales the result by the ratio of the two depths.
    from euphotic.models.zeu import euphotic_depth_by

    chl, par, sst, dl = 0.5, 40.0, 20.0, 12.0
    base = vgpm(chl, par, sst, dl)
    mm = vgpm(chl, par, sst, dl, euphotic_depth="morel_maritorena_2001")
    ratio = euphotic_depth_by(chl, "morel_maritorena_2001") / euphotic_depth_by(chl)
    assert float(mm) == pytest.approx(float(base) * float(ratio), rel=1e-9)
