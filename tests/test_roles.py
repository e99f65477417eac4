"""Input roles as data: the catalogue (euphotic.roles), the inputs a config must give (from the
models' declarations), and the three new inputs (bbp, Kd(490), mixed-layer depth) read,
converted, screened, regridded, dated and used by the existing code with no special case.

Sources of the checked values, beside each check:

* The CF standard name table shipped with the IOOS compliance checker
  (``compliance_checker/data/cf-standard-name-table.xml``, version 93) for the standard names
  and their canonical units.
* Unit factors are SI prefixes (1 cm = 0.01 m; 1 km-1 = 0.001 m-1; BIPM SI Brochure, 9th ed.).
* The toy model declared here (``mixing``: 1000 x bbp x chl / Kd(490) x MLD / (MLD + 10 m),
  0 without daylight) has no published source; it exists to need the three new inputs, and
  every expected value is worked by hand from it (stated beside each).
* Counts of masked values are worked out by hand from the cells written.
"""

from __future__ import annotations

import logging
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from euphotic import models, preflight, roles, units
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.errors import ConfigError, VariableNotFoundError
from euphotic.matchup import DailyInputs, MatchupConfigError, extract
from euphotic.models import Input, ModelSpec
from euphotic.models._compiled import jit_point
from euphotic.readers import InputSpec, match_grid, open_input

from ._files import write_grid
from ._grids import CHL_STD, INPUTS, grid, run_config, write_field
from .conftest import ROOT

# ---- the catalogue against the CF standard name table ---------------------------------------


def _cf_table() -> dict[str, str]:
    """Standard name -> canonical units, from the table the compliance checker ships."""
    import compliance_checker

    path = Path(compliance_checker.__file__).parent / "data" / "cf-standard-name-table.xml"
    root = ET.parse(path).getroot()
    return {e.get("id"): (e.findtext("canonical_units") or "").strip()
            for e in root.iter("entry")}


def test_every_catalogued_standard_name_is_in_the_cf_table_with_convertible_units():
    table = _cf_table()
    for r in roles.ROLES.values():
        for std in r.standard_names:
            if r.name == "day_length":
                continue
            assert std in table, (r.name, std)
            canonical = table[std]
            if r.conversion == "light":  # photon or energy flux: PAR's own rule
                units.par_factors(canonical)
            else:  # K -> degC, m-1 -> m-1, m -> m: a linear change of units
                units.linear_factors(canonical, r.units)
    # the documented exceptions: day_length is not a CF name; no CF name is the particulate
    # backscattering alone (the total of water and particles is, and is not taken as bbp)
    assert "day_length" not in table
    assert roles.ROLES["bbp"].standard_names == ()
    assert "volume_backwards_scattering_coefficient_of_radiative_flux_in_sea_water" in table
    assert table["volume_attenuation_coefficient_of_downwelling_radiative_flux_in_sea_water"] \
        == "m-1"
    assert table["ocean_mixed_layer_thickness"] == "m"


def test_catalogue_order_units_and_ranges():
    assert list(roles.ROLES) == ["chl", "par", "sst", "day_length", "bbp", "kd490", "mld"]
    assert {r: f.units for r, f in roles.ROLES.items()} == {
        "chl": "mg m-3", "par": "mol m-2 d-1", "sst": "degC", "day_length": "h",
        "bbp": "m-1", "kd490": "m-1", "mld": "m"}
    # the screening ranges are the catalogue's, each with its basis written
    from euphotic import screen

    assert screen.DEFAULT_VALID_RANGE == {r: f.valid_range for r, f in roles.ROLES.items()}
    assert all(f.range_basis for f in roles.ROLES.values())
    with pytest.raises(roles.UnknownRoleError, match="unknown input 'salinity'; known inputs: "
                       "chl, par, sst, day_length, bbp, kd490, mld"):
        roles.role("salinity")


def test_every_declared_model_input_is_a_catalogued_role_in_convertible_units():
    for spec in models.SPECS.values():
        for inp in spec.inputs:
            facts = roles.role(inp.role)  # raises for a role the readers do not know
            if facts.conversion == "light":
                assert units.par_factors(inp.units) == (1.0, "photons"), (spec.name, inp)
            else:
                units.linear_factors(facts.units, inp.units)  # raises when not convertible


# ---- reading the new inputs ------------------------------------------------------------------

LAT, LON = grid(30.0, 32.0, -40.0, -38.0, 0.5)  # 4 x 4 cells of 0.5 degree (mid-Atlantic)
SHAPE = (len(LAT), len(LON))
ONE_DAY = {"time_coverage_start": "2024-05-01T00:00:00Z",
           "time_coverage_end": "2024-05-01T23:59:59Z"}
KD_STD = "volume_attenuation_coefficient_of_downwelling_radiative_flux_in_sea_water"
MLD_STD = "ocean_mixed_layer_thickness"


def _plain(path: Path, name: str, units_: str, values, *, std: str | None = None,
           lat=LAT, lon=LON, attrs=ONE_DAY) -> Path:
    """A float32 field with or without a standard name, dated by ACDD attributes."""
    path.parent.mkdir(parents=True, exist_ok=True)
    var_attrs = {"units": units_} | ({"standard_name": std} if std else {})
    return write_grid(path, np.asarray(values, "f4"), lat, lon, name=name, var_attrs=var_attrs,
                      global_attrs=dict(attrs), dtype="f4", fill_value=np.float32(-999.0))


def test_mixed_layer_in_cm_is_read_in_m(tmp_path):
    cm = np.arange(16, dtype=float).reshape(SHAPE) * 100.0 + 1234.0  # 12.34 m, 13.34 m, ...
    p = _plain(tmp_path / "mld.nc", "h", "cm", cm, std=MLD_STD)
    da = open_input(InputSpec(role="mld", files=str(p)))
    np.testing.assert_allclose(da.values[0], cm / 100.0, rtol=1e-6)  # 1 cm = 0.01 m (SI)
    assert da.attrs["units"] == "m"
    assert da.attrs["long_name"] == "ocean mixed-layer thickness"
    assert da.attrs["identified_by"] == f"standard_name {MLD_STD!r}"
    assert da.attrs["conversion"] == "cm -> m (x 0.01)"
    assert str(da["period_start"].values[0])[:10] == "2024-05-01"


def test_kd490_in_km_per_metre_by_its_variable_name(tmp_path):
    per_km = np.full(SHAPE, 50.0)  # 50 km-1 = 0.05 m-1 (SI)
    p = _plain(tmp_path / "k.nc", "kd_490", "km-1", per_km)
    da = open_input(InputSpec(role="kd490", files=str(p)))
    np.testing.assert_allclose(da.values, 0.05, rtol=1e-6)
    assert da.attrs["identified_by"] == "variable name 'kd_490'"
    assert da.attrs["conversion"] == "km-1 -> m-1 (x 0.001)"


def test_bbp_is_found_by_name_not_by_the_total_backscattering_standard_name(tmp_path):
    total = "volume_backwards_scattering_coefficient_of_radiative_flux_in_sea_water"
    p = _plain(tmp_path / "b.nc", "bb", "m-1", np.full(SHAPE, 0.004), std=total)
    with pytest.raises(VariableNotFoundError) as exc:
        open_input(InputSpec(role="bbp", files=str(p)))
    assert str(exc.value) == (
        f"{p}: no bbp variable: none is named 'bbp_443' or 'bbp443' or 'bbp' (data variables: "
        "bb); name it with `variable` in the config")
    da = open_input(InputSpec(role="bbp", files=str(p), variable="bb"))  # the user decides
    np.testing.assert_allclose(da.values, 0.004, rtol=1e-6)
    assert da.attrs["identified_by"] == "config variable 'bb'"
    # no standard name either way: the message names both ways of finding a variable
    p2 = _plain(tmp_path / "k.nc", "x", "m-1", np.full(SHAPE, 0.1))
    with pytest.raises(VariableNotFoundError) as exc:
        open_input(InputSpec(role="kd490", files=str(p2)))
    assert str(exc.value) == (
        f"{p2}: no kd490 variable: none has standard_name {KD_STD!r} or is named 'kd490' or "
        "'kd_490' (data variables: x); name it with `variable` in the config")


def test_a_mixed_layer_in_kelvin_is_refused_naming_the_file(tmp_path):
    p = _plain(tmp_path / "mld.nc", "mld", "K", np.full(SHAPE, 30.0), std=MLD_STD)
    with pytest.raises(Exception) as exc:
        open_input(InputSpec(role="mld", files=str(p)))
    assert str(exc.value) == (f"{p}: variable 'mld': unit 'K' cannot be converted to 'm' "
                              "(expected units like 'm')")


@pytest.mark.parametrize(("role", "name", "std", "units_", "values", "below", "above"), [
    # catalogue ranges: bbp 0..0.5 m-1, Kd(490) 0.01..10 m-1, MLD 0..4000 m
    ("bbp", "bbp", None, "m-1", [-0.001, 0.0, 0.002, 0.5, 0.6], 1, 1),
    ("kd490", "kd490", KD_STD, "m-1", [0.005, 0.01, 0.2, 10.0, 12.0], 1, 1),
    # 450,000 cm = 4,500 m: above; -500 cm = -5 m: below
    ("mld", "mld", MLD_STD, "cm", [-500.0, 0.0, 3000.0, 400_000.0, 450_000.0], 1, 1),
])
def test_screening_ranges_of_the_new_inputs(tmp_path, role, name, std, units_, values, below,
                                            above):
    v = np.full(SHAPE, values[2])
    v.flat[:5] = values  # five cells set, eleven more inside the range
    p = _plain(tmp_path / f"{role}.nc", name, units_, v, std=std)
    da = open_input(InputSpec(role=role, files=str(p)))
    got = da.values[0]
    assert np.isnan(got.flat[0]) and np.isnan(got.flat[4])  # outside: masked
    assert np.isfinite(got.flat[1:4]).all() and np.isfinite(got.flat[5:]).all()  # bounds kept
    lo, hi = roles.ROLES[role].valid_range
    assert da.attrs["valid_range"] == (lo, hi)
    counts = np.asarray(da.attrs["screen_counts"].totals.compute())
    assert counts.tolist() == [[below, above, 16 - below - above]]


# ---- the inputs a config must give: from the models -----------------------------------------


@jit_point
def mixing_point(chl, bbp, kd490, mld, day_length):
    if day_length <= 0.0:
        return 0.0
    if not (chl > 0.0) or not (bbp >= 0.0) or not (kd490 > 0.0) or not (mld > 0.0):
        return np.nan
    return 1000.0 * bbp * chl / kd490 * mld / (mld + 10.0)


def mixing_reference(chl, bbp, kd490, mld, day_length):
    chl, bbp, kd, h, dl = (np.asarray(x, float) for x in (chl, bbp, kd490, mld, day_length))
    ok = (chl > 0) & (bbp >= 0) & (kd > 0) & (h > 0)
    out = np.where(ok, 1000.0 * bbp * chl / np.where(kd > 0, kd, np.nan) * h / (h + 10.0),
                   np.nan)
    return np.where(dl <= 0, 0.0, out)


#: A toy model needing the three new inputs (tests only; see the module docstring).
MIXING = ModelSpec(
    name="mixing", label="Mixing", published_name="a toy mixed-layer model (tests only)",
    citation_keys=("behrenfeld1997",),
    inputs=(Input("chl", "mg m-3"), Input("bbp", "m-1"), Input("kd490", "m-1"),
            Input("mld", "m"), Input("day_length", "h")),
    point=mixing_point, reference=mixing_reference)


@pytest.fixture
def mixing(monkeypatch):
    monkeypatch.setitem(models.SPECS, "mixing", MIXING)
    monkeypatch.delitem(models._BUILT, "mixing", raising=False)
    yield "mixing"
    models._BUILT.pop("mixing", None)


def _error(path: Path) -> str:
    with pytest.raises(ConfigError) as info:
        load_config(path)
    return str(info.value)


def test_a_model_lacking_inputs_is_one_config_line(tmp_path, mixing):
    path = run_config(tmp_path / "run.toml", run='models = ["vgpm", "mixing"]')
    assert _error(path) == (
        f"{path} [run]: models: mixing needs inputs bbp, kd490, mld; add [inputs.bbp], "
        "[inputs.kd490] and [inputs.mld] or leave mixing out")
    # one lacking input: singular; `model` names the key the config used
    some = INPUTS + '[inputs.bbp]\nfiles = "b/*.nc"\n[inputs.kd490]\nfiles = "k/*.nc"\n'
    path = run_config(tmp_path / "run.toml", run='model = "mixing"', inputs=some)
    assert _error(path) == (
        f"{path} [run]: model: mixing needs input mld; add [inputs.mld] or leave mixing out")
    # through the command line: exit code 1 (configuration errors), one line, nothing written
    res = CliRunner().invoke(main, ["run", str(path), "-q"])
    assert res.exit_code == 1
    assert res.stderr == (f"euphotic: error: {path} [run]: model: mixing needs input mld; add "
                          "[inputs.mld] or leave mixing out\n")
    assert not (tmp_path / "out").exists()


def test_an_input_no_model_uses_is_a_note(tmp_path, caplog):
    inputs = INPUTS + '[inputs.mld]\nfiles = "mld/*.nc"\n'
    path = run_config(tmp_path / "run.toml", run='models = ["vgpm"]', inputs=inputs)
    with caplog.at_level(logging.WARNING, logger="euphotic"):
        cfg = load_config(path)
    note = ("models: no model listed uses [inputs.mld] (vgpm); it is read and checked but not "
            "used")
    assert cfg.notes == [note]
    assert [r.getMessage() for r in caplog.records] == [note]
    assert set(cfg.inputs) == {"chl", "par", "sst", "mld"}
    assert cfg.required_inputs == ("chl", "par", "sst")
    assert cfg.optional_inputs == ("day_length",)


def test_unknown_input_and_temperature_ocean_without_temperature(tmp_path, mixing):
    path = run_config(tmp_path / "run.toml",
                      inputs=INPUTS + '[inputs.salinity]\nfiles = "s/*.nc"\n')
    assert _error(path) == (f"{path} [inputs]: unknown input(s) salinity; known inputs: chl, "
                            "par, sst, day_length, bbp, kd490, mld")
    inputs = ('[inputs.chl]\nfiles = "chl/*.nc"\n[inputs.bbp]\nfiles = "b/*.nc"\n'
              '[inputs.kd490]\nfiles = "k/*.nc"\n[inputs.mld]\nfiles = "m/*.nc"\n')
    path = run_config(tmp_path / "run.toml", run='models = ["mixing"]', inputs=inputs)
    assert _error(path) == (f"{path} [ocean]: source = 'temperature' needs [inputs.sst] (the "
                            "ocean is where temperature is valid)")


def test_the_chlorophyll_grid_is_needed_even_by_a_model_without_chlorophyll(tmp_path,
                                                                          monkeypatch):
    def depth_only(mld):
        return mld

    spec = ModelSpec(name="depth_only", label="D", published_name="depth (tests only)",
                     citation_keys=(), inputs=(Input("mld", "m"),), point=depth_only,
                     reference=depth_only)
    monkeypatch.setitem(models.SPECS, "depth_only", spec)
    path = run_config(tmp_path / "run.toml", run='models = ["depth_only"]',
                      inputs='[inputs.mld]\nfiles = "m/*.nc"\n', ocean='source = "package"')
    assert _error(path) == (f"{path}: missing [inputs.chl]: its grid is the grid of the run "
                            "(every input is brought onto it)")


# ---- a run of a model needing the new inputs -------------------------------------------------

DAYS = ("2024-05-01", "2024-05-02", "2024-05-03")


def _acdd(day: str) -> dict:
    return {"time_coverage_start": f"{day}T00:00:00Z", "time_coverage_end": f"{day}T23:59:59Z"}


def _mixing_case(tmp: Path, *, mld_days=DAYS) -> Path:
    """chl 2 mg m-3, bbp 0.002 m-1, Kd(490) 0.1 m-1 on 0.5-degree cells for three days; the
    mixed layer 3000 cm on a 1-degree grid (regridded), dated by its file name."""
    for d in DAYS:
        write_field(tmp / "chl" / f"c{d}.nc", "chl", CHL_STD, "mg m-3", np.full(SHAPE, 2.0),
                    LAT, LON, start=f"{d}T00:00:00Z", end=f"{d}T23:59:59Z")
        _plain(tmp / "bbp" / f"b{d}.nc", "bbp", "m-1", np.full(SHAPE, 0.002), attrs=_acdd(d))
        _plain(tmp / "kd" / f"k{d}.nc", "kd", "m-1", np.full(SHAPE, 0.1), std=KD_STD,
               attrs=_acdd(d))
    clat, clon = grid(30.0, 32.0, -40.0, -38.0, 1.0)
    for d in mld_days:
        _plain(tmp / "mld" / f"mld_{d.replace('-', '')}.nc", "mld", "cm", np.full((2, 2), 3000.0),
               std=MLD_STD, lat=clat, lon=clon, attrs={})
    inputs = ('[inputs.chl]\nfiles = "chl/*.nc"\n[inputs.bbp]\nfiles = "bbp/*.nc"\n'
              '[inputs.kd490]\nfiles = "kd/*.nc"\n[inputs.mld]\nfiles = "mld/*.nc"\n'
              "date_pattern = '_(?P<start>\\d{8})\\.nc$'\n")
    return run_config(tmp / "run.toml", run='models = ["mixing"]', inputs=inputs,
                      ocean='source = "package"', regions=[("Box", [-40.0, 30.0, -38.0, 32.0])])


def test_coverage_months_use_the_required_inputs(tmp_path, mixing):
    cfg = load_config(_mixing_case(tmp_path, mld_days=DAYS[:2]))
    assert cfg.required_inputs == ("chl", "bbp", "kd490", "mld")
    rep = preflight.check(cfg)
    assert rep.ok, rep.text()
    # chl, bbp and Kd(490) cover 3 days of May, the mixed layer 2: 'all' is 2 of 31
    (row,) = rep.months
    assert (row.month, row.n_days, row.all_inputs) == (np.datetime64("2024-05"), 31, 2)
    assert row.by_input == {"chl": 3, "bbp": 3, "kd490": 3, "mld": 2}
    text = rep.text().splitlines()
    assert "Months (days covered / days in the month; 'all': chl, bbp, kd490 and mld together)" \
        in text
    assert "  month    all   chl   bbp   kd490  mld" in text
    assert "  2024-05  2/31  3/31  3/31  3/31   2/31  partial" in text
    assert "  units:       cm in the file; conversion: cm -> m (x 0.01)" in text


def test_a_model_of_the_new_inputs_runs_end_to_end(tmp_path, mixing):
    from euphotic import methods
    from euphotic.pipeline import run

    cfg = load_config(_mixing_case(tmp_path))
    res = run(cfg, progress=False)
    with xr.open_dataset(res.maps[0]) as ds:
        # by hand: 1000 x 0.002 x 2 / 0.1 x 30 / (30 + 10) = 40 x 0.75 = 30 mg C m-2 d-1 on
        # each of the 3 days (3000 cm = 30 m; the 1-degree mixed layer is constant, so its
        # interpolation onto the 0.5-degree grid is 30 m too); coverage 3 of 31 days
        np.testing.assert_allclose(ds["npp"].values, 30.0, rtol=1e-6)
        np.testing.assert_allclose(ds["coverage"].values, 3 / 31, rtol=1e-6)
        assert ds.attrs["input_files_mld"].count("mld_2024050") == 3
        assert ds.attrs["screen_mld_valid_range"].tolist() == [0.0, 4000.0]
    text = methods.methods_text(tmp_path / "out").text.replace("\n", " ")
    assert ("ocean mixed-layer depth (MLD) (3 files; 3 daily periods, 2024-05-01 to 2024-05-03; "
            "in cm)") in text
    assert "mixed-layer depth was converted from cm to m" in text
    assert "mixed-layer depth: lat interpolated linearly (1 -> 0.5 deg)" in text


def test_matchups_call_each_model_with_its_inputs_as_keywords(tmp_path, mixing):
    from euphotic.pipeline import prepare

    cfg = load_config(_mixing_case(tmp_path))
    prep = prepare(cfg)
    inputs = DailyInputs(dict(prep.inputs), prep.ocean)
    ex = extract(inputs, np.array([31.1]), np.array([-38.9]),
                 np.array(["2024-05-02"], "datetime64[D]"), ["mixing"])
    np.testing.assert_allclose(ex.values["mixing"][0, 0], 30.0, rtol=1e-6)  # as the run
    # a model whose inputs the run does not have
    without = DailyInputs({r: v for r, v in prep.inputs.items() if r != "mld"}, prep.ocean)
    with pytest.raises(MatchupConfigError) as exc:
        extract(without, np.array([31.1]), np.array([-38.9]),
                np.array(["2024-05-02"], "datetime64[D]"), ["mixing"])
    assert str(exc.value) == ("model mixing needs input mld, which the run's configuration does "
                              "not give; leave the model out")


# ---- the demo's new inputs --------------------------------------------------------------------


def test_sample_grids_stay_small_and_the_new_demo_inputs_are_coherent():
    sample = ROOT / "sample_grids"
    total = sum(p.stat().st_size for p in sample.rglob("*") if p.is_file())
    assert total < 20_000_000, total  # the issue: sample_grids/ stays under 20 MB
    # the decade demo's monthly composites (1/2 degree): bbp and Kd(490) follow chlorophyll
    # (Morel & Maritorena 2001 relations in scripts/make_sample_grids.py), the mixed layer is
    # deep in winter and shallow in summer, within 10-300 m
    dec = sample / "decade"
    chl = open_input(InputSpec(role="chl", files=str(dec / "maren_chl_monthly_2020.nc")))
    got = {r: open_input(InputSpec(role=r, files=str(dec / f"maren_{r}_monthly_2020.nc")))
           for r in ("bbp", "kd490", "mld")}
    c = chl.values.ravel()
    for r in ("bbp", "kd490"):
        v = got[r].values.ravel()
        ok = np.isfinite(c) & np.isfinite(v)
        assert np.corrcoef(np.log(c[ok]), np.log(v[ok]))[0, 1] > 0.9, r
    bbp = got["bbp"].values
    assert 0.0004 <= np.nanmin(bbp) and np.nanmax(bbp) <= 0.012
    mld = got["mld"].values
    assert 10.0 <= np.nanmin(mld) and np.nanmax(mld) <= 300.0
    month_means = np.nanmean(mld, axis=(1, 2))
    assert month_means[2] > 150.0 > 40.0 > month_means[7]  # March deep, August shallow
    # and the April demo's mixed layer, on its coarser grid, matches onto the chlorophyll grid
    day = open_input(InputSpec(role="mld", files=str(sample / "mld" / "maren_mld_20250401.nc"),
                               date_pattern=r"_(?P<start>\d{8})\.nc$"))
    april_chl = open_input(InputSpec(role="chl",
                                     files=str(sample / "chl" / "maren_chl_20250401.nc")))
    assert match_grid(day, april_chl, "mld").shape == (1, 240, 264)


def test_inspect_tries_every_catalogued_input():
    # a backscattering file has no chlorophyll, PAR, temperature or day-length variable: the
    # command tries each role of the catalogue in turn and names the one that fits
    f = ROOT / "sample_grids" / "bbp" / "maren_bbp_20250401.nc"
    res = CliRunner().invoke(main, ["inspect", str(f)])
    assert res.exit_code == 0, res.output
    assert res.stdout.splitlines()[:2] == [
        "input:     bbp (particulate backscattering coefficient at 443 nm)",
        "variable:  bbp_443 -> converted to m-1"]


def test_unit_answers_kept_between_runs(tmp_path, monkeypatch):
    """Conversion factors are worked out with pint once and then read back from the cache
    folder without building the registry; the answers are pint's (kelvin to Celsius: the SI
    definition, t/degC = T/K - 273.15; W m-2 to a daily photon dose: McCree 1972's
    4.57 umol J-1 times 86,400 s)."""
    from euphotic import units

    monkeypatch.setenv("EUPHOTIC_CACHE_DIR", str(tmp_path))
    monkeypatch.setattr(units, "_TABLE", None)
    assert units.linear_factors("K", "degC") == pytest.approx((1.0, -273.15))
    assert units.par_factors("W m-2")[1] == "energy"
    (stored,) = tmp_path.glob("units-*.json")
    monkeypatch.setattr(units, "_TABLE", None)  # a new run: the table read from the file
    monkeypatch.setattr(units, "registry", lambda: pytest.fail("registry built again"))
    assert units.linear_factors("K", "degC") == pytest.approx((1.0, -273.15))
    factor, kind = units.par_factors("W m-2")
    assert kind == "energy" and factor == pytest.approx(4.57e-6 * 86400)
    stored.write_text("not json")  # a damaged table is worked out again
    monkeypatch.setattr(units, "_TABLE", None)
    with pytest.raises(pytest.fail.Exception, match="registry built again"):
        units.linear_factors("K", "degC")
