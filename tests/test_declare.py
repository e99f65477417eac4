"""The model declaration and its factory (issue: a model is one module holding one declaration).

A toy model declared here (a light-saturation curve, y = k chl PAR / (PAR + 1) * day length,
no published source: it exists only to exercise the factory) shows what a new model needs: a
scalar formula, a numpy formula and a declaration. Expected values below are worked by hand
from that formula; the registered models are checked against their published equations in
tests/test_models.py.
"""

from __future__ import annotations

import dask
import dask.array as darr
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from euphotic import aggregate
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.errors import ConfigError
from euphotic.models import (
    SPECS,
    Choice,
    Input,
    ModelSpec,
    Parameter,
    get_model,
    input_roles,
    model_parameter_attrs,
    parameter_settings,
)
from euphotic.models._compiled import HAVE_NUMBA, jit_point

from ._grids import INPUTS


@jit_point
def toy_point(chl, par, day_length, k, shape):
    if day_length <= 0.0:
        return 0.0
    if not (chl > 0.0) or not (par >= 0.0):
        return np.nan
    light = par / (par + 1.0) if shape == 0.0 else 1.0 - np.exp(-par)
    return k * chl * light * day_length


def toy_reference(chl, par, day_length, *, k=2.0, shape="hyperbolic"):
    chl = np.where(np.asarray(chl, float) > 0, chl, np.nan)
    par = np.where(np.asarray(par, float) >= 0, par, np.nan)
    light = par / (par + 1.0) if shape == "hyperbolic" else 1.0 - np.exp(-par)
    out = k * chl * light * np.asarray(day_length, float)
    return np.where(np.asarray(day_length) <= 0, 0.0, out)


TOY = ModelSpec(
    name="toy",
    label="Toy",
    published_name="a toy light curve (tests only)",
    citation_keys=("behrenfeld1997",),
    inputs=(Input("chl", "mg m-3"), Input("par", "mol m-2 d-1"), Input("day_length", "h")),
    parameters=(Parameter("k", 2.0, "mg C (mg Chl)-1 h-1", "tests only", per_region=True,
                          minimum=0.0),
                Choice("shape", ("hyperbolic", "exponential"), "hyperbolic", "tests only")),
    point=toy_point,
    reference=toy_reference,
)


@pytest.fixture
def toy(monkeypatch):
    monkeypatch.setitem(SPECS, "toy", TOY)
    from euphotic import models

    monkeypatch.delitem(models._BUILT, "toy", raising=False)
    yield get_model("toy")
    models._BUILT.pop("toy", None)


def test_public_function_numpy_dask_xarray_and_parameters(toy):
    chl = np.array([1.0, 2.0, 0.0, np.nan])
    # hand: 2 * 1 * (3 / 4) * 12 = 18; 2 * 2 * 0.75 * 12 = 36; chl 0 and NaN are missing
    np.testing.assert_allclose(toy(chl, 3.0, 12.0), [18.0, 36.0, np.nan, np.nan])
    np.testing.assert_allclose(toy(chl, 3.0, 12.0, k=1.0), [9.0, 18.0, np.nan, np.nan])
    # hand: 2 * 1 * (1 - e^-3) * 12 = 23.4025...
    assert toy(1.0, 3.0, 12.0, shape="exponential") == pytest.approx(24 * (1 - np.exp(-3)))
    assert toy(chl=1.0, par=3.0, day_length=0.0) == 0.0  # no light, no production
    lazy = toy(darr.from_array(chl, chunks=2), 3.0, 12.0)
    assert isinstance(lazy, darr.Array)
    np.testing.assert_allclose(lazy.compute(), [18.0, 36.0, np.nan, np.nan])
    x = xr.DataArray(chl, dims="x", attrs={"units": "mg m-3"})
    par = xr.DataArray(np.full(4, 3.0), dims="x", attrs={"units": "mol m-2 d-1"})
    out = toy(x, par, 12.0)
    assert out.attrs["units"] == "mg m-2 d-1"
    np.testing.assert_allclose(out.values, [18.0, 36.0, np.nan, np.nan])
    # a parameter per cell (a per-region parameter arrives as an array)
    np.testing.assert_allclose(toy(chl, 3.0, 12.0, k=np.array([1.0, 2.0, 3.0, 4.0])),
                               [9.0, 36.0, np.nan, np.nan])


def test_public_function_refuses_missing_inputs_and_unknown_options(toy):
    with pytest.raises(TypeError, match=r"toy\(\) needs input\(s\) par"):
        toy(chl=1.0, day_length=12.0)
    with pytest.raises(TypeError, match="unexpected keyword argument"):
        toy(1.0, 3.0, 12.0, q=1)
    with pytest.raises(ValueError, match="shape must be one of 'hyperbolic', 'exponential'"):
        toy(1.0, 3.0, 12.0, shape="linear")


@pytest.mark.skipif(not HAVE_NUMBA, reason="numba not installed")
def test_generated_kernel_matches_numpy_reference(toy, tmp_path, monkeypatch):
    rng = np.random.default_rng(3)
    chl = np.exp(rng.normal(0, 2, 10_000))
    chl[::17] = np.nan
    par = rng.uniform(-1, 60, 10_000)
    dl = rng.uniform(0, 24, 10_000)
    dl[::13] = 0.0
    for shape in ("hyperbolic", "exponential"):
        got = toy.block(chl, par, dl, 1.7, float(TOY.parameter("shape").choices.index(shape)))
        np.testing.assert_allclose(got, toy_reference(chl, par, dl, k=1.7, shape=shape),
                                   rtol=1e-12, equal_nan=True)


def test_kernel_files_are_written_in_the_cache_folder(monkeypatch, tmp_path):
    from euphotic.models import _declare

    monkeypatch.setenv("EUPHOTIC_CACHE_DIR", str(tmp_path / "k"))
    assert _declare.kernel_cache_dir() == tmp_path / "k"
    if not HAVE_NUMBA:
        pytest.skip("numba not installed")
    spec = ModelSpec(**{**TOY.__dict__, "name": "toy_cache_probe"})
    mod = _declare._load_generated(spec)
    files = sorted(p.name for p in (tmp_path / "k").glob("*.py"))
    assert files == [f"{mod.__name__}.py"]
    assert "toy_point as point" in (tmp_path / "k" / files[0]).read_text()


def test_fused_pass_of_several_models_equals_each_model_alone(toy):
    """All models of a month in one fused pass (one task per block and day chunk) give what
    each model's public function gives day by day (the reference path)."""
    rng = np.random.default_rng(5)
    lat, lon = np.linspace(-70, 70, 8), np.linspace(0, 30, 10)
    days = np.arange(np.datetime64("2024-06-01"), np.datetime64("2024-07-01"))
    shape = (len(days), len(lat), len(lon))

    def field(lo, hi, gaps):
        v = rng.uniform(lo, hi, shape)
        v[rng.random(shape) < gaps] = np.nan
        return xr.DataArray(
            darr.from_array(v, chunks=(10, 4, 5)), dims=("time", "lat", "lon"),
            coords={"lat": lat, "lon": lon,
                    "period_start": ("time", days.astype("datetime64[ns]")),
                    "period_end": ("time", (days + 1).astype("datetime64[ns]"))})

    inputs = {"chl": field(0.05, 5.0, 0.3), "par": field(1.0, 60.0, 0.05),
              "sst": field(-2.0, 30.0, 0.05)}
    ocean = xr.DataArray(rng.random((8, 10)) > 0.2, dims=("lat", "lon"),
                         coords={"lat": lat, "lon": lon})
    k_map = np.where(np.arange(10)[None, :] < 5, 1.5, 3.0) * np.ones((8, 1))
    runs = [("vgpm", {}), ("eppley_vgpm", {}), ("toy", {"k": k_map, "shape": "exponential"})]
    month = np.datetime64("2024-06")
    fused = aggregate.monthly_npp_models(runs, month, inputs=inputs, ocean=ocean, fused=True)
    plain = aggregate.monthly_npp_models(runs, month, inputs=inputs, ocean=ocean, fused=False)
    graph = dict(fused[0].npp.data.__dask_graph__())
    steps = [k for k in graph if str(k[0]).startswith("month-step")]
    assert len(steps) == 3 * 2 * 2  # 30 days in 10-day chunks x 2 x 2 blocks, for all 3 models
    with dask.config.set(scheduler="threads"):
        for f, p in zip(fused, plain, strict=True):
            assert f.model == p.model
            np.testing.assert_allclose(f.npp.values, p.npp.values, rtol=1e-6)
            np.testing.assert_array_equal(f.coverage.values, p.coverage.values)
    # the toy's per-cell k: doubling k doubles its rate on the east half
    with dask.config.set(scheduler="threads"):
        east = fused[2].npp.values[:, 5:]
        alone = aggregate.monthly_npp_models([("toy", {"k": 1.5, "shape": "exponential"})],
                                             month, inputs=inputs, ocean=ocean)[0].npp.values
    np.testing.assert_allclose(east, 2.0 * alone[:, 5:], rtol=1e-12)


def test_parameter_settings_per_region_last_listed_wins(toy):
    a = np.zeros((3, 4), bool)
    a[:, :2] = True
    b = np.zeros((3, 4), bool)
    b[:, 1:3] = True
    got = parameter_settings("toy", {"values": {"k": 1.0},
                                     "regions": {"A": {"k": 5.0}, "B": {"k": 7.0}}},
                             {"A": a, "B": b})
    np.testing.assert_array_equal(got["k"], np.array([[5.0, 7.0, 7.0, 1.0]] * 3))
    assert got["shape"] == "hyperbolic"
    assert parameter_settings("vgpm") == {"euphotic_depth": "morel_berthon_1989"}
    assert model_parameter_attrs("toy", {"values": {"k": 1.0}, "regions": {"A": {"k": 5.0}}}) == {
        "model_parameters": "k = 1.0 mg C (mg Chl)-1 h-1; shape = hyperbolic (default); "
                            "k = 5.0 in A"}


def test_input_roles_come_from_the_declarations(toy):
    assert input_roles(["vgpm"]) == (("chl", "par", "sst"), ("day_length",))
    assert input_roles(["toy"]) == (("chl", "par"), ("day_length",))


# ---- [models.<name>] in the config ---------------------------------------------------------


def _cfg(tmp_path, extra, models='["vgpm"]'):
    p = tmp_path / "run.toml"
    p.write_text(f'[run]\nmodels = {models}\n{INPUTS}\n[[regions]]\nname = "Shelf"\n'
                 f'box = [0.0, 0.0, 10.0, 10.0]\n{extra}')
    return p


def _error(path) -> str:
    with pytest.raises(ConfigError) as info:
        load_config(path)
    return str(info.value)


def test_config_model_parameters_are_checked(tmp_path, toy):
    p = _cfg(tmp_path, '[models.vgpm]\neuphotic_depth = "secchi"\n')
    assert _error(p) == (f"{p} [models.vgpm]: euphotic_depth must be one of "
                         "'morel_berthon_1989', 'morel_maritorena_2001', not 'secchi'")
    p = _cfg(tmp_path, "[models.vgpm]\nalpha = 1\n")
    assert _error(p) == (f"{p} [models.vgpm]: unknown parameter 'alpha' of vgpm "
                         "(its parameters: euphotic_depth)")
    p = _cfg(tmp_path, '[models.vgpm.regions."Shelf"]\neuphotic_depth = "morel_berthon_1989"\n')
    assert _error(p) == (f'{p} [models.vgpm.regions."Shelf"]: euphotic_depth is one value for '
                         "the whole run; set it in [models.vgpm]")
    p = _cfg(tmp_path, '[models.toy.regions."Reef"]\nk = 3.0\n', models='["toy"]')
    assert _error(p) == f'{p} [models.toy.regions."Reef"]: no region named \'Reef\' in [[regions]]'
    p = _cfg(tmp_path, "[models.toy]\nk = -1.0\n", models='["toy"]')
    assert _error(p) == (f"{p} [models.toy]: k must be a finite number >= 0 "
                         "(mg C (mg Chl)-1 h-1), not -1.0")
    p = _cfg(tmp_path, "[models.nope]\nk = 1.0\n")
    assert _error(p).startswith(f"{p} [models.nope]: unknown model 'nope'; choose from ")


def test_config_model_parameters_are_kept(tmp_path, toy):
    p = _cfg(tmp_path, '[models.toy]\nk = 3.0\n[models.toy.regions."Shelf"]\nk = 4.5\n',
             models='["toy"]')
    cfg = load_config(p)
    assert cfg.model_settings == {"toy": {"values": {"k": 3.0}, "regions": {"Shelf": {"k": 4.5}}}}


def test_models_command_lists_inputs_parameters_and_references():
    res = CliRunner().invoke(main, ["models"])
    assert res.exit_code == 0
    assert "vgpm  (VGPM): VGPM (Behrenfeld & Falkowski 1997)" in res.output
    assert "    inputs: chl [mg m-3], par [mol m-2 d-1], sst [degC], day_length [h]" in res.output
    # the references come from references.bib (pybtex), not from strings in the code
    assert "Eppley, R. W. (1972). Temperature and phytoplankton growth in the sea. Fishery " \
           "Bulletin 70, 1063-1085." in res.output
    # every registered model, in SPECS order, the P-I (Platt) model after the Eppley-VGPM
    heads = [line.split("  (")[0] for line in res.output.splitlines()
             if line and not line.startswith(" ")]
    assert heads == ["vgpm", "eppley_vgpm", "pi_platt", "cbpm"]
    assert "    inputs: chl [mg m-3], par [mol m-2 d-1], day_length [h]" in res.output
    assert "Platt, T., Sathyendranath, S. and Ravindran, P. (1990). Primary production by " \
           "phytoplankton: analytic solutions for daily rates per unit area of water surface." \
           in res.output
