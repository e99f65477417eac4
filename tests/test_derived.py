"""Derived quantities: export ratios at check points of their published formulas, Redfield and
photosynthetic-quotient arithmetic through pint, the ``derive`` command and ``[derived]`` step
on the bundled demo, and bad options.

Where the values come from (said again beside each check):

- Export ratios: worked by hand from the published formulas as written in each docstring
  (Laws et al. 2011; Dunne et al. 2005, eq. 1a; Henson et al. 2011). The coefficients are
  from memory (the Dunne et al. coefficients match other published code); the only value
  printed in a paper that is checked is Henson et al.'s 0.23 at 0 degC, the coefficient itself.
- Molar masses: IUPAC conventional atomic weights (C 12.011, N 14.007, O 15.999 x 2 =
  31.998; P 30.974, the standard weight 30.973 761 998 rounded); the Redfield ratio
  106:16:1 (Redfield 1934; Redfield et al. 1963); quotients 1.1 and 1.4 (Laws 1991).
- Regional totals: against the run's own carbon totals (``regional_totals``, summed by
  :mod:`euphotic.aggregate`, not by the code under test) times the ratios above.
- Files: the IOOS compliance-checker (CF-1.8, ACDD-1.3), as the month maps are checked.
"""

from __future__ import annotations

import csv
import math
import os
import shutil
from pathlib import Path

import dask.array as da
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from euphotic import derived as dv
from euphotic import derived_outputs as do
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.errors import ConfigError
from euphotic.units import ureg

from .conftest import folder_bytes

# --------------------------------------------------------------------------------------------
# export ratios at check points (by hand from the formulas; coefficients from memory)
# --------------------------------------------------------------------------------------------


def test_henson2011_check_points():
    # Henson et al. (2011): ef = 0.23 exp(-0.08 T). At 0 degC the printed coefficient 0.23;
    # at 10 degC by hand 0.23 x exp(-0.8) = 0.23 x 0.449328964 = 0.103345662
    np.testing.assert_allclose(dv.ef_henson2011(np.array([0.0, 10.0])),
                               [0.23, 0.103345662], rtol=1e-8)  # 9 digits by hand
    # a temperature in kelvin gives the same ratio (273.15 K = 0 degC)
    assert dv.ef_henson2011(273.15, sst_units="K") == pytest.approx(0.23, rel=1e-12)


def test_laws2011_check_points_and_the_zero_floor():
    # Laws et al. (2011): ef = (0.5857 - 0.0165 T) P / (51.7 + P). By hand:
    # T = 0, P = 51.7: 0.5857 x 0.5 = 0.29285
    # T = 20, P = 500: (0.5857 - 0.33) x 500 / 551.7 = 0.2557 x 0.906289650 = 0.231738263
    # T = 40: 0.5857 - 0.66 < 0, floored to 0 (our choice: a negative ratio means nothing)
    got = dv.ef_laws2011(np.array([0.0, 20.0, 40.0]), np.array([51.7, 500.0, 500.0]))
    np.testing.assert_allclose(got, [0.29285, 0.231738263, 0.0], rtol=1e-8, atol=0)
    # production in g m-2 d-1 is converted: 0.5 g = 500 mg
    assert dv.ef_laws2011(20.0, 0.5, npp_units="g m-2 d-1") == pytest.approx(0.231738263,
                                                                             rel=1e-8)


def test_dunne2005_check_point_and_bounds():
    # Dunne et al. (2005), eq. 1a: pe = -0.0101 T + 0.0582 ln(P/Zeu) + 0.419, P/Zeu in
    # mmol C m-3 d-1, bounded to [0.04, 0.72]. By hand:
    # T = 10, P = 50 mmol = 600.55 mg C m-2 d-1 (x 12.011), Zeu = 50 m: ln(1) = 0,
    #   pe = -0.101 + 0.419 = 0.318
    # T = 30, P = 1 mmol (12.011 mg), Zeu = 100 m: -0.303 + 0.0582 ln(0.01) + 0.419 = -0.152
    #   -> lower bound 0.04
    # T = -2, P = 1000 mmol (12011 mg), Zeu = 1 m: 0.0202 + 0.0582 ln(1000) + 0.419 = 0.841
    #   -> upper bound 0.72
    got = dv.pe_dunne2005(np.array([10.0, 30.0, -2.0]), np.array([600.55, 12.011, 12011.0]),
                          np.array([50.0, 100.0, 1.0]))
    np.testing.assert_allclose(got, [0.318, 0.04, 0.72], rtol=1e-9)
    # inside the bounds the unbounded value: T = 20, P/Zeu = e mmol m-3 d-1:
    # -0.202 + 0.0582 + 0.419 = 0.2752
    assert dv.pe_dunne2005(20.0, 12.011 * math.e * 10, 10.0) == pytest.approx(0.2752, rel=1e-9)
    # no production: ln(0) = -inf -> the lower bound, and no export
    assert dv.pe_dunne2005(15.0, 0.0, 50.0) == pytest.approx(0.04)


def test_the_methods_differ_by_a_factor_of_several():
    # the point of reporting them side by side: at 20 degC and 500 mg C m-2 d-1 (Zeu 50 m,
    # P/Zeu = 500 / 12.011 / 50 = 0.832570 mmol m-3 d-1), by hand to 6 digits: Laws 0.231738,
    # Dunne -0.202 + 0.0582 x ln(0.832570) + 0.419 = -0.202 - 0.0106647 + 0.419 = 0.206335,
    # Henson 0.23 x exp(-1.6) = 0.23 x 0.201897 = 0.0464362
    laws = dv.ef_laws2011(20.0, 500.0)
    dunne = dv.pe_dunne2005(20.0, 500.0, 50.0)
    henson = dv.ef_henson2011(20.0)
    np.testing.assert_allclose([laws, dunne, henson], [0.231738, 0.206335, 0.0464362], rtol=1e-5)
    assert max(laws, dunne, henson) / min(laws, dunne, henson) > 4
    assert "factor of several" in dv.EXPORT_CAUTION


def test_export_is_ratio_times_production_and_nan_stays_nan():
    q = dv.compute_quantities(np.array([500.0, np.nan]), np.array([20.0, 20.0]),
                              zeu=np.array([50.0, 50.0]))
    np.testing.assert_allclose(q["export_laws2011"][0], 500.0 * 0.231738263, rtol=1e-8)
    np.testing.assert_allclose(q["export_henson2011"][0], 500 * 0.23 * math.exp(-1.6),
                               rtol=1e-12)
    # no production: every quantity and every ratio missing (Henson's ratio needs no NPP, but
    # a ratio where there is no production is not written)
    assert all(np.isnan(v[1]) for v in q.values()), {k: v[1] for k, v in q.items()}


# --------------------------------------------------------------------------------------------
# Redfield and quotient arithmetic through pint
# --------------------------------------------------------------------------------------------


def test_redfield_106_mol_carbon_gives_16_mol_nitrogen_and_1_mol_phosphorus():
    # 106 mol C m-2 d-1 as a mass: 106 x 12.011 g = 1273.166 g m-2 d-1 (IUPAC 12.011)
    carbon = ureg.Quantity(106 * 12.011, "g m-2 d-1")
    assert dv.nitrogen_demand(carbon) == pytest.approx(16_000.0, rel=1e-12)  # mmol N m-2 d-1
    assert dv.phosphorus_demand(carbon) == pytest.approx(1_000.0, rel=1e-12)  # mmol P m-2 d-1
    # the same in mg and as plain numbers in the maps' units
    assert dv.nitrogen_demand(106 * 12.011e3) == pytest.approx(16_000.0, rel=1e-12)


def test_quotients_of_laws_1991():
    one_mmol_c = 12.011  # mg C m-2 d-1
    assert dv.oxygen_production(one_mmol_c, quotient="nitrate") == pytest.approx(1.4, rel=1e-12)
    assert dv.oxygen_production(one_mmol_c, quotient="ammonium") == pytest.approx(1.1, rel=1e-12)
    assert dv.oxygen_production(one_mmol_c, quotient=1.25) == pytest.approx(1.25, rel=1e-12)
    # default: nitrate-based growth (euphotic.stations.DEFAULT_QUOTIENT, reused, not copied)
    from euphotic import stations

    assert dv.DEFAULT_QUOTIENT is stations.DEFAULT_QUOTIENT == 1.4
    assert dv.MOLAR_MASS_C_G_MOL is stations.MOLAR_MASS_C_G_MOL


@pytest.mark.parametrize(("substance", "integral", "mol", "tg"), [
    # export: 12.011e15 mg C = 1e12 mol C = 12.011e12 g = 12.011 Tg C
    ("C", 12.011e15, 1e12, 12.011),
    # 1e15 mmol N = 1e12 mol x 14.007 g mol-1 = 14.007 Tg N
    ("N", 1e15, 1e12, 14.007),
    ("P", 1e15, 1e12, 30.974),
    ("O2", 1e15, 1e12, 31.998),
])
def test_amounts_and_masses_with_iupac_molar_masses(substance, integral, mol, tg):
    got = dv.totals_from_integral(integral, substance)
    np.testing.assert_allclose(got, (mol, tg), rtol=1e-12)


def test_units_are_checked_at_the_entry():
    # an amount of carbon is not a mass: refused, not silently taken as mg
    with pytest.raises(dv.DerivedError, match=r"^npp: "):
        dv.nitrogen_demand(ureg.Quantity(1.0, "mmol m-2 d-1"))
    with pytest.raises(dv.DerivedError, match=r"^sst: "):
        dv.ef_henson2011(1.0, sst_units="m")
    # a DataArray's own units attribute is used
    sst = xr.DataArray([283.15], dims="x", attrs={"units": "K"})
    np.testing.assert_allclose(dv.ef_henson2011(sst).values, [0.103345662], rtol=1e-8)


@pytest.mark.parametrize(("value", "message"), [
    (9, 'q: expected "ammonium", "nitrate" or a number between 0.5 and 3 (mol O2 per mol C), '
        "not 9"),
    ("urea", 'q: expected "ammonium", "nitrate" or a number between 0.5 and 3 (mol O2 per mol '
             "C), not 'urea'"),
    (True, 'q: expected "ammonium", "nitrate" or a number between 0.5 and 3 (mol O2 per mol C), '
           "not True"),
])
def test_bad_quotient(value, message):
    with pytest.raises(dv.DerivedError) as err:
        dv.quotient_value(value, "q")
    assert str(err.value) == message


# --------------------------------------------------------------------------------------------
# numpy, xarray and dask alike; lazy on dask
# --------------------------------------------------------------------------------------------


def test_numpy_xarray_dask_agree_and_dask_stays_lazy(no_compute):
    rng = np.random.default_rng(3)
    npp = rng.uniform(50, 2000, (6, 5))
    sst = rng.uniform(-1, 30, (6, 5))
    zeu = rng.uniform(10, 120, (6, 5))
    ref = dv.compute_quantities(npp, sst, zeu=zeu, quotient="ammonium")
    dims = ("lat", "lon")
    xa = dv.compute_quantities(xr.DataArray(npp, dims=dims), xr.DataArray(sst, dims=dims),
                               zeu=xr.DataArray(zeu, dims=dims), quotient="ammonium")
    with no_compute:
        lazy = dv.compute_quantities(
            xr.DataArray(da.from_array(npp, chunks=3), dims=dims),
            xr.DataArray(da.from_array(sst, chunks=3), dims=dims),
            zeu=xr.DataArray(da.from_array(zeu, chunks=3), dims=dims), quotient="ammonium")
        assert all(isinstance(v.data, da.Array) for v in lazy.values())
    for k, v in ref.items():
        np.testing.assert_allclose(xa[k].values, v, rtol=1e-14, err_msg=k)
        np.testing.assert_allclose(lazy[k].values, v, rtol=1e-14, err_msg=k)


# --------------------------------------------------------------------------------------------
# the command on the bundled demo
# --------------------------------------------------------------------------------------------

#: What `euphotic derive` adds to the demo folder (two models, April 2025).
DEMO_FILES = {"derived_vgpm_2025-04.nc", "derived_eppley_vgpm_2025-04.nc",
              "derived_pi_platt_2025-04.nc", "derived_cbpm_2025-04.nc",
              "derived_ensemble_2025-04.nc", "derived_totals.csv",
              "derived_totals.csv-metadata.json"}
#: Variables of a derived map with the default options.
DEMO_VARIABLES = {"export_laws2011", "export_ratio_laws2011", "export_dunne2005",
                  "export_ratio_dunne2005", "export_henson2011", "export_ratio_henson2011",
                  "nitrogen_demand", "phosphorus_demand", "oxygen_production", "crs",
                  "time_bnds", "lat_bnds", "lon_bnds"}


@pytest.fixture
def demo_copy(demo_run, tmp_path):
    """A private copy of the demo run and its configuration (modification times kept, so the
    copied manifest still matches its files)."""
    base = demo_run.parent
    shutil.copytree(base / "configs", tmp_path / "configs")
    (tmp_path / "sample_grids").symlink_to(os.readlink(base / "sample_grids"))
    shutil.copytree(demo_run, tmp_path / "demo_output", symlinks=True)
    return tmp_path / "configs" / "demo.toml", tmp_path / "demo_output"


def _derive(*args: str):
    return CliRunner().invoke(main, ["derive", *map(str, args)])


def _error(res) -> str:
    """The one error line of a failed command (warnings of the config, e.g. inputs no model
    uses, may come before it), with its exit code checked: 1."""
    assert res.exit_code == 1, res.output
    lines = res.stderr.splitlines()
    errors = [ln for ln in lines if ln.startswith("euphotic: error: ")]
    assert len(errors) == 1 and lines[-1] == errors[0], res.stderr
    assert all(ln.startswith("euphotic: warning: ") for ln in lines[:-1]), res.stderr
    return errors[0] + "\n"


def _read_csv(path: Path) -> list[dict]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture
def derived_demo(demo_copy):
    cfg, out = demo_copy
    before = folder_bytes(out)
    res = _derive(cfg, "-q")
    assert res.exit_code == 0, res.output
    return cfg, out, before, res


def test_derive_on_the_demo_leaves_exactly_its_files(derived_demo):
    import json

    cfg, out, before, res = derived_demo
    after = folder_bytes(out)
    assert set(after) - set(before) == DEMO_FILES
    assert set(before) - set(after) == set()
    changed = {n for n in before if before[n] != after[n]}
    assert changed == {"euphotic_manifest.json"}  # the demo holds no report to rebuild
    man = json.loads((out / "euphotic_manifest.json").read_text())
    assert {n for n, e in man["outputs"].items() if e["kind"] == "derived"} == DEMO_FILES
    assert man["added"][-1]["outputs"] == sorted(DEMO_FILES)
    assert not [p for p in out.iterdir() if p.name.startswith(".euphotic-stage")]
    # the cautions are printed
    assert "Caution: " + do.DERIVED_CAUTION in " ".join(res.stdout.split())
    with xr.open_dataset(out / "derived_vgpm_2025-04.nc") as ds:
        assert set(ds.variables) - {"time", "lat", "lon"} == DEMO_VARIABLES
        for v in ds.data_vars:
            if ds[v].dims == ("time", "lat", "lon"):
                assert {"units", "long_name", "comment"} <= set(ds[v].attrs), v
        assert ds["export_dunne2005"].attrs["units"] == "mg m-2 d-1"
        assert ds["nitrogen_demand"].attrs["units"] == "mmol m-2 d-1"
        assert "Dunne et al. (2005)" in ds["export_dunne2005"].attrs["comment"]
        assert "Redfield 1934; Redfield et al. 1963" in ds["nitrogen_demand"].attrs["comment"]
        assert "quotient of 1.4" in ds["oxygen_production"].attrs["comment"]
        assert ds.attrs["caution"] == do.DERIVED_CAUTION
        assert ds.attrs["photosynthetic_quotient"] == 1.4
        assert "Henson, S. A." in ds.attrs["references"]


def test_derived_totals_match_the_runs_carbon_totals(derived_demo):
    """N, P and O2 totals are the run's own carbon totals (summed by euphotic.aggregate over
    the same observed cells) times Redfield ratios and molar masses."""
    from euphotic.results import open_totals

    _, out, _, _ = derived_demo
    tot = open_totals(out)
    rows = _read_csv(out / "derived_totals.csv")
    assert list(rows[0]) == list(do.TOTALS_COLUMNS)
    # 4 regions x (4 models and their ensemble mean) x (3 export methods + N + P + O2)
    assert len(rows) == 4 * 5 * 6
    by = {(r["region"], r["model"], r["quantity"]): r for r in rows}
    for region in tot["region"].values:
        for model in tot["model"].values:
            tg_c = float(tot["total"].sel(region=region, model=model).isel(month=0))
            mol_c = tg_c * 1e12 / 12.011
            expect = {"nitrogen_demand": (mol_c * 16 / 106, mol_c * 16 / 106 * 14.007e-12),
                      "phosphorus_demand": (mol_c / 106, mol_c / 106 * 30.974e-12),
                      "oxygen_production": (mol_c * 1.4, mol_c * 1.4 * 31.998e-12)}
            for q, (mol, tg) in expect.items():
                r = by[(str(region), str(model), q)]
                # the table keeps 6 significant digits (a relative rounding of at most 5e-6);
                # the sums differ otherwise only in the order of float additions
                np.testing.assert_allclose([float(r["total_mol"]), float(r["total_Tg"])],
                                           [mol, tg], rtol=6e-6, err_msg=f"{region} {model} {q}")
                obs = float(tot["observed_area"].sel(region=region, model=model).isel(month=0))
                np.testing.assert_allclose(float(r["observed_area_km2"]), obs, rtol=6e-6)
            for e in ("laws2011", "dunne2005", "henson2011"):
                r = by[(str(region), str(model), f"export_{e}")]
                assert r["substance"] == "C" and r["rate_units"] == "mg C m-2 d-1"
                # export is a fraction of production: between 0 and the carbon total
                assert 0 < float(r["total_Tg"]) < tg_c
    units = {(r["quantity"], r["rate_units"]) for r in rows}
    assert ("nitrogen_demand", "mmol N m-2 d-1") in units
    assert ("oxygen_production", "mmol O2 m-2 d-1") in units


def test_csvw_sidecar_is_valid_and_carries_the_caution(derived_demo):
    """The W3C CSVW metadata, validated and read with the csvw library, as the run's totals
    sidecar is (test_outputs)."""
    import json

    from csvw import CSVW, Table

    _, out, _, _ = derived_demo
    side = out / "derived_totals.csv-metadata.json"
    assert CSVW(str(side), validate=True).is_valid
    typed = list(Table.from_file(side).iterdicts())
    plain = _read_csv(out / "derived_totals.csv")
    assert [(r["region"], r["quantity"]) for r in typed] == [
        (r["region"], r["quantity"]) for r in plain]
    assert str(typed[0]["total_Tg"]) == plain[0]["total_Tg"]
    doc = json.loads(side.read_text())
    cols = {c["name"]: c for c in doc["tableSchema"]["columns"]}
    assert list(cols) == list(do.TOTALS_COLUMNS)
    assert cols["total_Tg"]["schema:unitText"] == "Tg"
    assert cols["total_mol"]["schema:unitText"] == "mol"
    props = {p["schema:name"]: p["schema:value"] for p in doc["schema:additionalProperty"]}
    assert props["caution"] == do.DERIVED_CAUTION and props["photosynthetic_quotient"] == 1.4
    assert "Dunne, J. P." in doc["dc:references"]


def test_derived_maps_follow_the_formulas_at_a_cell(derived_demo):
    """At every cell: Henson's ratio from the month's mean temperature of the run's own SST
    files (read here with xarray, averaged with numpy), export = ratio x the run's NPP."""
    from euphotic.aggregate import daily_stack, month_days
    from euphotic.preflight import open_inputs

    cfg, out, _, _ = derived_demo
    inputs = open_inputs(load_config(cfg))
    sst = daily_stack(inputs.on_grid["sst"], month_days(np.datetime64("2025-04"))).values
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            t = np.nanmean(sst, axis=0)
    with xr.open_dataset(out / "derived_vgpm_2025-04.nc") as d, \
            xr.open_dataset(out / "npp_vgpm_2025-04.nc") as m:
        npp = m["npp"].values[0].astype(float)
        ok = np.isfinite(npp)
        assert ok.sum() > 1000
        ratio = 0.23 * np.exp(-0.08 * t)  # Henson et al. (2011), by hand
        np.testing.assert_allclose(d["export_ratio_henson2011"].values[0][ok], ratio[ok],
                                   rtol=1e-6)  # float32 storage
        np.testing.assert_allclose(d["export_henson2011"].values[0][ok], (ratio * npp)[ok],
                                   rtol=1e-6)
        np.testing.assert_allclose(d["nitrogen_demand"].values[0][ok],
                                   (npp / 12.011 * 16 / 106)[ok], rtol=1e-6)
        assert np.isnan(d["nitrogen_demand"].values[0][~ok]).all()
        dunne = d["export_ratio_dunne2005"].values[0][ok]
        assert dunne.min() >= np.float32(0.04) and dunne.max() <= np.float32(0.72)


def test_a_new_derivation_replaces_the_set(derived_demo):
    cfg, out, _, _ = derived_demo
    res = _derive(cfg, "--export", "henson2011", "--quotient", "ammonium", "--model", "vgpm")
    assert res.exit_code == 0, res.output
    assert "export methods henson2011; photosynthetic quotient 1.1" in res.stdout
    names = {p.name for p in out.iterdir() if p.name.startswith("derived_")}
    assert names == {"derived_vgpm_2025-04.nc", "derived_totals.csv",
                     "derived_totals.csv-metadata.json"}
    rows = _read_csv(out / "derived_totals.csv")
    assert {r["quantity"] for r in rows} == {"export_henson2011", "nitrogen_demand",
                                            "phosphorus_demand", "oxygen_production"}
    assert {r["model"] for r in rows} == {"vgpm"}
    with xr.open_dataset(out / "derived_vgpm_2025-04.nc") as ds:
        assert "export_laws2011" not in ds and ds.attrs["photosynthetic_quotient"] == 1.1


def test_the_report_gets_a_section_side_by_side(demo_copy):
    cfg, out = demo_copy
    assert CliRunner().invoke(main, ["report", str(out), "-q"]).exit_code == 0
    res = _derive(cfg, "-q")  # the report in the folder is rebuilt by the same commit
    assert res.exit_code == 0, res.output
    page = (out / "report.html").read_text()
    assert "<h2>What production implies</h2>" in page
    assert do.DERIVED_CAUTION.split(". ")[-1].rstrip(".") in page  # the export caution
    head, body = do.annual_table(do.read_totals(out / "derived_totals.csv"))
    assert head == ["region", "year", "model", "months",
                    "export, Laws et al. (2011) (Tg C)", "export, Dunne et al. (2005) (Tg C)",
                    "export, Henson et al. (2011) (Tg C)", "N demand (Tg N)",
                    "P demand (Tg P)", "O2 production (Tg O2)"]
    # regions x (4 models and their ensemble mean)
    assert len(body) == 4 * 5 and all(r[1] == "2025" and r[3] == 1 for r in body)
    for h in head:
        assert h in page


# --------------------------------------------------------------------------------------------
# the CF / ACDD compliance checker on a derived file
# --------------------------------------------------------------------------------------------


def test_cf_1_8_every_check_passes(derived_demo, monkeypatch):
    from .test_outputs import _check

    _, out, _, _ = derived_demo
    scored, failed = _check(out / "derived_vgpm_2025-04.nc", "cf:1.8", monkeypatch)
    assert scored["scored_points"] == scored["possible_points"], [
        (r.weight, r.name, r.msgs) for r in failed]


def test_acdd_1_3_misses_only_what_is_by_design(derived_demo, monkeypatch):
    from .test_outputs import ACDD_EXPECTED_MISSING_ATTRS, _check

    _, out, _, _ = derived_demo
    scored, failed = _check(out / "derived_vgpm_2025-04.nc", "acdd:1.3", monkeypatch)
    points = (scored["scored_points"], scored["possible_points"])
    missing, unexpected, no_standard_name = set(), [], set()
    for r in failed:
        if r.name == "Global Attributes":
            missing |= {m.removesuffix(" not present") for m in r.msgs}
        elif r.name in {"geospatial_lat_extents_match", "geospatial_lon_extents_match",
                        "time_coverage_extents_match"}:
            continue  # cell edges and month bounds, as for the month maps (test_outputs)
        elif r.name.startswith('variable "') and r.msgs == ["standard_name"]:
            no_standard_name.add(r.name.split('"')[1])
        else:
            unexpected.append((r.name, r.msgs))
    assert unexpected == [], f"{points}: {unexpected}"
    assert missing <= ACDD_EXPECTED_MISSING_ATTRS, missing - ACDD_EXPECTED_MISSING_ATTRS
    # compliance-checker 6.1.0: 89/112 points. Below the month maps' 79/94 only by one point
    # per variable for a standard name: the CF table has none for export production,
    # nutrient demand or oxygen production (the nearest, the sinking mole flux of
    # particulate organic carbon, is an amount per second at a depth), and none is invented
    assert no_standard_name == DEMO_VARIABLES - {"crs", "time_bnds", "lat_bnds", "lon_bnds"}
    assert points[0] / points[1] >= 0.75, points


# --------------------------------------------------------------------------------------------
# faults
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("table", "problem"), [
    ('export = ["laws2011", "martin1987"]',
     '`export`: unknown method(s) "martin1987"; choose from "laws2011", "dunne2005", '
     '"henson2011"'),
    ("export = []", '`export` must be a list of export methods ("laws2011", "dunne2005", '
                    '"henson2011"), not []'),
    ("quotient = 9", '`quotient` must be "ammonium", "nitrate" or a number between 0.5 and 3, '
                     "not 9"),
    ('quotient = "urea"', '`quotient` must be "ammonium", "nitrate" or a number between 0.5 '
                          'and 3, not "urea"'),
    ("models = []", "`models` must be a non-empty list of model names (strings), not []"),
    ("model = 1", "unknown key(s) model; allowed: export, models, quotient"),
])
def test_bad_derived_key_one_line_exit_1(demo_copy, table, problem):
    cfg, out = demo_copy
    cfg.write_text(cfg.read_text() + f"\n[derived]\n{table}\n")
    with pytest.raises(ConfigError) as err:
        load_config(cfg)
    assert str(err.value) == f"{cfg} [derived]: {problem}"
    before = folder_bytes(out)
    res = _derive(cfg)
    assert _error(res) == f"euphotic: error: {cfg} [derived]: {problem}\n"
    assert folder_bytes(out) == before


@pytest.mark.parametrize(("args", "message"), [
    (["--export", "martin1987"], "--export: unknown export method(s) 'martin1987'; choose from "
                                 "laws2011, dunne2005, henson2011"),
    (["--quotient", "0.2"], '--quotient: expected "ammonium", "nitrate" or a number between '
                            "0.5 and 3 (mol O2 per mol C), not '0.2'"),
    (["--model", "cafe"], "--model: {out}: no maps of model(s) cafe in this run (it has vgpm, "
                          "eppley_vgpm, pi_platt, cbpm)"),
])
def test_bad_options_one_line_exit_1_folder_unchanged(demo_copy, args, message):
    cfg, out = demo_copy
    before = folder_bytes(out)
    res = _derive(cfg, *args)
    assert _error(res) == f"euphotic: error: {message.format(out=out)}\n"
    assert folder_bytes(out) == before


def test_no_run_in_the_folder(demo_copy, tmp_path):
    cfg, _ = demo_copy
    empty = tmp_path / "nothing"
    res = _derive(cfg, "-o", empty)
    assert _error(res) == f"euphotic: error: no euphotic run in {empty}: no such folder\n"
    assert not empty.exists()


def test_a_failure_while_computing_leaves_the_folder_as_it_was(derived_demo, monkeypatch):
    cfg, out, _, _ = derived_demo
    before = folder_bytes(out)

    def broken(*a, **k):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(do, "totals_csv", broken)  # after the maps are staged
    res = _derive(cfg, "--export", "henson2011")
    assert _error(res) == ("euphotic: error: unexpected OSError: [Errno 28] No space left on "
                           "device (rerun with --debug for the traceback)\n")
    assert folder_bytes(out) == before  # the earlier derivation is kept, nothing half-written
    assert not [p for p in out.iterdir() if p.name.startswith(".euphotic-stage")]


def test_inputs_on_another_grid_are_refused(demo_copy, tmp_path):
    """A config whose inputs no longer match the run's maps (here: the 1/4-degree SST files
    taken as chlorophyll, so the grid is the SST grid: 80 latitudes for 20 degrees, against
    the maps' 240 at 1/12 degree)."""
    cfg, out = demo_copy
    text = cfg.read_text().replace('files = "../sample_grids/chl/maren_chl_*.nc"',
                                   'files = "../sample_grids/sst/maren_sst_*.nc"\n'
                                   'variable = "sea_surface_temperature"\nunits = "mg m-3"')
    cfg.write_text(text)
    before = folder_bytes(out)
    res = _derive(cfg, "--export", "henson2011")
    assert _error(res) == (f"euphotic: error: {cfg}: the chl input is on another grid (lat: 80 "
                          "values) than the run's maps (240); derive with the config the run "
                          "was made with\n")
    assert folder_bytes(out) == before


# --------------------------------------------------------------------------------------------
# the step of `euphotic run`
# --------------------------------------------------------------------------------------------


def test_run_with_a_derived_table_adds_the_step(tmp_path):
    from ._grids import monthly_case

    cfg = monthly_case(tmp_path, 2, res=0.5, models=("vgpm", "eppley_vgpm"))
    cfg.write_text(cfg.read_text() + '\n[derived]\nexport = ["henson2011", "laws2011"]\n'
                                     "quotient = 1.2\n")
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    names = {p.name for p in out.iterdir() if p.name.startswith("derived_")}
    # two models: their ensemble mean is derived too
    assert names == {f"derived_{m}_2023-0{i}.nc" for m in ("vgpm", "eppley_vgpm", "ensemble")
                     for i in (1, 2)} | {"derived_totals.csv", "derived_totals.csv-metadata.json"}
    rows = _read_csv(out / "derived_totals.csv")
    assert len(rows) == 1 * 2 * 3 * 5  # region x months x models x (2 exports, N, P, O2)
    o2 = [r for r in rows if r["quantity"] == "oxygen_production"]
    n = {(r["month"], r["model"]): float(r["total_mol"]) for r in rows
         if r["quantity"] == "nitrogen_demand"}
    for r in o2:  # O2 / N = quotient x 106 / 16, by hand 1.2 x 6.625 = 7.95
        assert float(r["total_mol"]) / n[(r["month"], r["model"])] == pytest.approx(7.95,
                                                                                  rel=1.2e-5)
    import json

    man = json.loads((out / "euphotic_manifest.json").read_text())
    assert man["added"][0]["command"].endswith("[derived]")


def test_the_ensemble_is_derived_when_the_run_has_one(demo_copy):
    """The demo runs four models, so it has ensemble maps (kind "ensemble map", opened by
    results.open_ensemble_maps): they get derived maps of the ensemble mean too."""
    import json

    cfg, out = demo_copy
    man_path = out / "euphotic_manifest.json"
    assert json.loads(man_path.read_text())["outputs"]["npp_ensemble_2025-04.nc"]["kind"] == \
        "ensemble map"
    res = _derive(cfg, "--export", "henson2011", "-q")
    assert res.exit_code == 0, res.output
    names = {p.name for p in out.iterdir() if p.name.startswith("derived_")}
    assert "derived_ensemble_2025-04.nc" in names and len(names) == 7
    members = []
    for m in ("vgpm", "eppley_vgpm", "pi_platt", "cbpm"):
        with xr.open_dataset(out / f"derived_{m}_2025-04.nc") as d:
            members.append(d["nitrogen_demand"].values.astype(float))
    with xr.open_dataset(out / "derived_ensemble_2025-04.nc") as e:
        # N demand is linear in production: the ensemble's is the mean of the members'
        # (float32 maps: to float32 rounding)
        np.testing.assert_allclose(e["nitrogen_demand"].values, sum(members) / 4, rtol=2e-6)
        assert "ensemble mean of the run's models" in e.attrs["summary"]
    rows = _read_csv(out / "derived_totals.csv")
    assert {r["model"] for r in rows} == {"vgpm", "eppley_vgpm", "pi_platt", "cbpm", "ensemble"}
    # asked for by name where there is none (the run's ensemble taken out): one line
    man = json.loads(man_path.read_text())  # as the derivation committed it
    for n in [n for n, e in man["outputs"].items() if e["kind"].startswith("ensemble")]:
        del man["outputs"][n]
    man_path.write_text(json.dumps(man))
    res = _derive(cfg, "--model", "ensemble")
    assert _error(res) == (f"euphotic: error: --model: {out}: the run has no ensemble maps (it "
                          "ran vgpm, eppley_vgpm, pi_platt, cbpm)\n")


def test_readme_names_every_method_key_and_column():
    """The README section "What production implies" documents what the code writes."""
    from .conftest import ROOT

    text = (ROOT / "README.md").read_text()
    section = text.split("## What production implies", 1)[1].split("\n## ", 1)[0]
    for name in [*dv.EXPORT_METHODS, *do.TOTALS_COLUMNS, "nitrogen_demand", "phosphorus_demand",
                 "oxygen_production", "export", "quotient", "models"]:
        assert f"`{name}`" in section or f'"{name}"' in section, name
    assert "factor of several" in section
