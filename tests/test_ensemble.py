"""The ensemble of a run's models (euphotic.ensemble, ensemble_outputs and their use in
results, compare_outputs, figureset and report).

References: numpy (np.mean, np.min, np.max, np.std with ddof=1, np.nanmean) on the same
numbers; the IOOS compliance-checker (CF-1.8, ACDD-1.3) and the W3C CSVW reader ``csvw`` on
the files; netCDF4-python to read the member maps back. Hand-worked values say so.
"""

from __future__ import annotations

import csv
import json
import os
from pathlib import Path

import dask.array as da
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from euphotic import ensemble, ensemble_outputs, results
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.outputs import CAUTION
from euphotic.pipeline import run

from ._grids import monthly_case

RNG = np.random.default_rng(20261203)


def _members(n: int, backend: str, shape=(6, 7)) -> list[xr.DataArray]:
    """``n`` invented maps (mg m-2 d-1) with NaN holes that differ between members, and one
    cell (0, 0) where every member is 0 (no light)."""
    lat, lon = np.linspace(-10, 10, shape[0]), np.linspace(20, 30, shape[1])
    out = []
    for k in range(n):
        v = RNG.uniform(50, 900, shape)
        v[RNG.uniform(size=shape) < 0.2] = np.nan
        v[0, 0] = 0.0
        v[-1, :] = np.nan if k == 0 else v[-1, :]  # a row only the first model misses
        data = da.from_array(v, chunks=(3, 4)) if backend == "dask" else v
        out.append(xr.DataArray(data, dims=("lat", "lon"), coords={"lat": lat, "lon": lon},
                                name=f"m{k}").assign_coords(model=f"m{k}"))
    return out


@pytest.mark.parametrize("kernel", ["compiled", "numpy"])
@pytest.mark.parametrize("backend", ["numpy", "dask"])
@pytest.mark.parametrize("n", [2, 3])
def test_map_statistics_against_numpy(n, backend, kernel, monkeypatch):
    # both paths: the compiled one-pass loop and the plain xarray reductions
    monkeypatch.setenv("EUPHOTIC_KERNEL", kernel)
    members = _members(n, backend)
    got = ensemble.map_statistics(members).compute()
    x = np.stack([np.asarray(m.values, float) for m in members])
    complete = np.isfinite(x).all(axis=0)
    assert complete.sum() > 5 and (~complete).sum() > 5  # both kinds of cells are tested
    with np.errstate(invalid="ignore"):
        want = {"npp_mean": np.mean(x, axis=0), "npp_min": np.min(x, axis=0),
                "npp_max": np.max(x, axis=0), "npp_std": np.std(x, axis=0, ddof=1)}
    for v, w in want.items():  # numpy reference, float64 both: equal to rounding
        np.testing.assert_allclose(got[v].values[complete], w[complete], rtol=1e-12)
        assert np.isnan(got[v].values[~complete]).all(), v
    # CV = std / mean, NaN where the mean is 0 (cell 0, 0: every model 0)
    ok = complete & (want["npp_mean"] != 0)
    np.testing.assert_allclose(got["npp_cv"].values[ok],
                               want["npp_std"][ok] / want["npp_mean"][ok], rtol=1e-12)
    assert np.isnan(got["npp_cv"].values[0, 0]) and got["npp_mean"].values[0, 0] == 0.0
    assert np.isnan(got["npp_cv"].values[~complete]).all()
    np.testing.assert_array_equal(got["n_models"].values, np.isfinite(x).sum(axis=0))
    assert got["npp_std"].attrs["ddof"] == 1
    assert got["npp_mean"].attrs["ensemble_models"] == " ".join(f"m{k}" for k in range(n))


def test_map_statistics_takes_a_model_dimension_and_stays_lazy(no_compute):
    members = xr.concat(_members(3, "dask"), dim="model")
    with no_compute:  # nothing is computed while the statistics are built
        stats = ensemble.map_statistics(members)
    assert all(isinstance(v.data, da.Array) for v in stats.data_vars.values())
    ref = ensemble.map_statistics(list(members.transpose("model", ...))).compute()
    xr.testing.assert_allclose(stats.compute(), ref)


def test_map_statistics_bad_members():
    one = _members(1, "numpy")
    with pytest.raises(ensemble.EnsembleError, match="at least two models, not 1"):
        ensemble.map_statistics(one)
    a, b = _members(2, "numpy")
    with pytest.raises(ensemble.EnsembleError, match="member 1 is on another grid"):
        ensemble.map_statistics([a, b.isel(lat=slice(1, None))])
    with pytest.raises(ensemble.EnsembleError, match="no 'model' dimension"):
        ensemble.map_statistics(a)


def _totals(values, flags=None, areas=None):
    dims = ("region", "month", "model")
    v = np.asarray(values, float)
    coords = {"region": ["A", "B", "C"][: v.shape[0]], "model": ["x", "y", "z"][: v.shape[2]]}
    t = xr.DataArray(v, dims=dims, coords=coords, attrs={"units": "Tg"})
    f = xr.DataArray(np.full(v.shape, "", object) if flags is None else np.asarray(flags, object),
                     dims=dims, coords=coords)
    a = None if areas is None else xr.DataArray(np.asarray(areas, float), dims=dims,
                                                coords=coords)
    return t, f, a


def test_total_statistics_against_numpy_and_flags():
    # region A: three models with totals; region B: model y flagged low_coverage (month 0) and
    # model z without a total (month 1)
    vals = [[[10.0, 14.0, 12.0], [1.0, 2.0, 6.0]],
            [[5.0, 4.0, 6.0], [3.0, 3.5, np.nan]]]
    flags = [[["", "", ""], ["", "", ""]],
             [["", "low_coverage", ""], ["", "", ""]]]
    t, f, _ = _totals(vals, flags)
    s = ensemble.total_statistics(t, f)
    a = np.array(vals[0])
    np.testing.assert_allclose(s["mean"].sel(region="A").values, np.mean(a, axis=1))
    np.testing.assert_allclose(s["min"].sel(region="A").values, np.min(a, axis=1))
    np.testing.assert_allclose(s["max"].sel(region="A").values, np.max(a, axis=1))
    np.testing.assert_allclose(s["std"].sel(region="A").values, np.std(a, axis=1, ddof=1))
    # worked by hand: month 0 of A: mean 12, std 2 (deviations -2, 2, 0; 8 / 2 = 4), CV 1/6
    assert s["cv"].values[0, 0] == pytest.approx(2.0 / 12.0, rel=1e-12)
    assert list(s["min_model"].values[0]) == ["x", "x"]
    assert list(s["max_model"].values[0]) == ["y", "z"]
    assert list(s["flag"].values[0]) == ["", ""]
    # a flagged or missing member: no statistics, and the flag says which and why
    assert np.isnan(s["mean"].values[1]).all() and np.isnan(s["cv"].values[1]).all()
    assert list(s["flag"].values[1]) == ["low_coverage:y", "missing:z"]
    assert list(s["n_models"].values[1]) == [3, 2]
    assert s["std"].attrs["ddof"] == 1 and s["mean"].attrs["units"] == "Tg"


def test_total_statistics_flags_different_observed_areas():
    t, f, a = _totals([[[1.0, 2.0]]], areas=[[[100.0, 98.0]]])
    s = ensemble.total_statistics(t, f, a)
    assert s["flag"].item() == ensemble.FLAG_AREA_DIFFERS  # 2 % apart (> 1 %): kept, flagged
    assert s["mean"].item() == 1.5
    t, f, a = _totals([[[1.0, 2.0]]], areas=[[[100.0, 99.5]]])
    assert ensemble.total_statistics(t, f, a)["flag"].item() == ""
    with pytest.raises(ensemble.EnsembleError, match="at least two models"):
        ensemble.total_statistics(*_totals([[[1.0]]])[:2])


def test_spread_and_ensemble_mean_of_totals():
    x = np.array([[1.0, 2.0, np.nan], [3.0, 6.0, 1.0]])
    mean, lo, hi = ensemble.spread(x)
    np.testing.assert_array_equal(mean, [2.0, 4.0, np.nan])
    np.testing.assert_array_equal(lo, [1.0, 2.0, np.nan])
    np.testing.assert_array_equal(hi, [3.0, 6.0, np.nan])
    t, f, _ = _totals([[[1.0, 3.0], [np.nan, 5.0]]], [[["", "low_coverage"], ["", ""]]])
    ds = xr.Dataset({"total": t, "coverage": t * 0 + xr.DataArray([0.9, 0.4], dims="model"),
                     "flag": f.astype(str)})
    e = ensemble.with_ensemble_mean(ds)
    assert list(e["model"].values) == ["x", "y", "ensemble"]
    got = e.sel(model="ensemble")
    np.testing.assert_array_equal(got["total"].values, [[2.0, np.nan]])  # all members only
    np.testing.assert_array_equal(got["coverage"].values, [[0.4, np.nan]])  # the smallest
    assert list(got["flag"].values[0]) == ["low_coverage", ""]
    assert ensemble.with_ensemble_mean(ds.isel(model=[0])) is not None
    assert "ensemble" not in ensemble.with_ensemble_mean(ds.isel(model=[0]))["model"].values


# --------------------------------------------------------------------------------------------
# a run of two models
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def two_years(tmp_path_factory):
    """24 monthly composites (2023-2024) on a 1-degree 10 x 10 box, models vgpm and
    eppley_vgpm; the last month has no chlorophyll west of 25 W; regions: the box and its
    north half."""
    tmp = tmp_path_factory.mktemp("ensemble_two_years")
    cfg = monthly_case(tmp, 24, res=1.0, models=("vgpm", "eppley_vgpm"),
                       west_gap_last_month=True,
                       regions=(("Box", [-30.0, 40.0, -20.0, 50.0]),
                                ("North half", [-30.0, 45.0, -20.0, 50.0])))
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    return cfg, tmp / "out"


def _manifest(out: Path) -> dict:
    return json.loads((out / "euphotic_manifest.json").read_text())


def test_two_models_write_the_ensemble_maps_and_table(two_years):
    import netCDF4

    _, out = two_years
    man = _manifest(out)
    names = sorted(n for n, e in man["outputs"].items() if e["kind"] == "ensemble map")
    assert names == [f"npp_ensemble_{np.datetime64('2023-01') + k}.nc" for k in range(24)]
    assert man["outputs"]["ensemble_totals.csv"]["kind"] == "ensemble totals"
    assert man["outputs"]["ensemble_totals.csv-metadata.json"]["of"] == "ensemble_totals.csv"
    for month in ("2023-05", "2024-12"):  # 2024-12: the west half without chlorophyll
        with netCDF4.Dataset(out / f"npp_vgpm_{month}.nc") as a, \
                netCDF4.Dataset(out / f"npp_eppley_vgpm_{month}.nc") as b, \
                netCDF4.Dataset(out / f"npp_ensemble_{month}.nc") as e:
            x = np.stack([np.ma.filled(a["npp"][0].astype(float), np.nan),
                          np.ma.filled(b["npp"][0].astype(float), np.nan)])
            ok = np.isfinite(x).all(axis=0)
            got = {v: np.ma.filled(e[v][0].astype(float), np.nan)
                   for v in ("npp_mean", "npp_min", "npp_max", "npp_std", "npp_cv")}
            # numpy on the member maps as stored (float32), the ensemble stored as float32
            for v, w in (("npp_mean", np.mean(x, axis=0)), ("npp_min", np.min(x, axis=0)),
                         ("npp_max", np.max(x, axis=0)),
                         ("npp_std", np.std(x, axis=0, ddof=1))):
                np.testing.assert_allclose(got[v][ok], w[ok], rtol=1e-6)
                assert np.isnan(got[v][~ok]).all()
            np.testing.assert_allclose(got["npp_cv"][ok], (np.std(x, axis=0, ddof=1)
                                                           / np.mean(x, axis=0))[ok], rtol=1e-5)
            np.testing.assert_array_equal(e["n_models"][0], np.isfinite(x).sum(axis=0))
            assert e.ensemble_models == "vgpm eppley_vgpm" and e.caution == CAUTION
            assert "not a measure of error" in e.summary
            assert "vgpm eppley_vgpm" in e["npp_mean"].comment
            assert e["npp_mean"].standard_name == \
                "net_primary_productivity_of_biomass_expressed_as_carbon"
            assert e["npp_std"].ddof == 1
        if month == "2024-12":
            assert (~ok).sum() > 0 and np.isfinite(x[0]).sum() > 0


def test_ensemble_table_matches_the_members_totals_and_csvw(two_years):
    from csvw import CSVW, Table

    _, out = two_years
    with open(out / "regional_totals.csv", newline="") as fh:
        members = list(csv.DictReader(fh))
    with open(out / "ensemble_totals.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 2 * 24  # regions x months
    by = {(r["region"], r["month"], r["model"]): float(r["total_TgC"]) for r in members}
    for r in rows:
        x = np.array([by[(r["region"], r["month"], m)] for m in ("vgpm", "eppley_vgpm")])
        assert r["models"] == "vgpm eppley_vgpm" and r["n_models"] == "2"
        if r["flag"]:
            assert r["mean_total_TgC"] == ""
            continue
        # numpy on the 4-decimal member totals: agrees to the rounding (5e-5 each)
        assert float(r["mean_total_TgC"]) == pytest.approx(x.mean(), abs=1.5e-4)
        assert float(r["min_total_TgC"]) == pytest.approx(x.min(), abs=1.5e-4)
        assert float(r["max_total_TgC"]) == pytest.approx(x.max(), abs=1.5e-4)
        assert float(r["std_total_TgC"]) == pytest.approx(np.std(x, ddof=1), abs=1.5e-4)
        assert {r["min_model"], r["max_model"]} == {"vgpm", "eppley_vgpm"}
    side = out / "ensemble_totals.csv-metadata.json"
    assert CSVW(str(side), validate=True).is_valid  # W3C CSVW, read by the csvw library
    typed = list(Table.from_file(side).iterdicts())
    assert [r["region"] for r in typed] == [r["region"] for r in rows]
    assert isinstance(typed[0]["n_models"], int)
    doc = json.loads(side.read_text())
    props = {p["schema:name"]: p["schema:value"] for p in doc["schema:additionalProperty"]}
    assert props["caution"] == CAUTION and props["ensemble_models"] == "vgpm eppley_vgpm"
    assert [c["name"] for c in doc["tableSchema"]["columns"]] == ensemble_outputs.TOTALS_COLUMNS


def test_results_open_the_ensemble(two_years):
    _, out = two_years
    maps = results.open_maps(out)
    ens = results.open_ensemble_maps(out)
    assert ens["npp_mean"].dims == ("time", "lat", "lon") and ens.sizes["time"] == 24
    assert isinstance(ens["npp_mean"].data, da.Array)
    np.testing.assert_array_equal(ens["month"].values, maps["month"].values)
    want = maps["npp"].astype(float).mean("model", skipna=False)
    np.testing.assert_allclose(ens["npp_mean"].values, want.values, rtol=1e-6)
    one = results.open_ensemble_maps(out, months=["2024-02"])
    assert one.sizes["time"] == 1
    with pytest.raises(results.SelectionError, match="no ensemble maps of month"):
        results.open_ensemble_maps(out, months=["2026-01"])
    tot = results.open_ensemble_totals(out)
    member = results.open_totals(out)["total"]
    np.testing.assert_allclose(tot["mean"].values, member.mean("model").values, rtol=1e-12)
    assert tot.attrs["caution"] == CAUTION and tot.attrs["ensemble_models"] == "vgpm eppley_vgpm"


def test_ensemble_passes_the_compliance_checker(two_years, monkeypatch):
    from .test_outputs import _check

    _, out = two_years
    path = out / "npp_ensemble_2023-07.nc"
    scored, failed = _check(path, "cf:1.8", monkeypatch)
    # compliance-checker 6.1: every CF-1.8 check passes, as for the member maps
    assert scored["scored_points"] == scored["possible_points"], [
        (r.weight, r.name, r.msgs) for r in failed]
    member, member_failed = _check(out / "npp_vgpm_2023-07.nc", "acdd:1.3", monkeypatch)
    member_missing = {m.removesuffix(" not present") for r in member_failed
                      if r.name == "Global Attributes" for m in r.msgs}
    scored, failed = _check(path, "acdd:1.3", monkeypatch)
    unexpected, missing = [], set()
    for r in failed:
        if r.name == "Global Attributes":
            missing |= {m.removesuffix(" not present") for m in r.msgs}
        elif r.name in ("geospatial_lat_extents_match", "geospatial_lon_extents_match",
                        "time_coverage_extents_match"):
            continue  # by design, as the member maps (edges, not centres; see test_outputs)
        elif r.name.startswith("variable ") and "missing the following attributes" in r.name:
            # only the statistics without a CF standard name (none exists for them)
            assert r.name.split('"')[1] in ("npp_min", "npp_max", "npp_std", "npp_cv",
                                            "n_models"), r.name
        else:
            unexpected.append((r.name, r.msgs))
    assert unexpected == []
    # no global attribute beyond those the member map misses too (the run sets no
    # [metadata]: the optional ACDD keys a user may add are absent from both)
    assert missing == member_missing, missing ^ member_missing
    # points lost (compliance-checker 6.1: 33 of 102 against the member's 29 of 93): those
    # of the member, less its coverage variable's standard name, plus one for each of the
    # five ensemble variables without one
    lost = scored["possible_points"] - scored["scored_points"]
    assert lost == member["possible_points"] - member["scored_points"] - 1 + 5


def test_a_rerun_reuses_the_ensemble_and_one_model_writes_none(two_years, tmp_path):
    cfg_path, out = two_years
    before = {n: (e.get("fingerprint"), os.stat(out / n).st_mtime_ns)
              for n, e in _manifest(out)["outputs"].items() if e["kind"] == "ensemble map"}
    res = run(load_config(cfg_path), progress=False, steps=False)
    after = {n: (e.get("fingerprint"), os.stat(out / n).st_mtime_ns)
             for n, e in _manifest(out)["outputs"].items() if e["kind"] == "ensemble map"}
    assert len(res.reused) == 48 and after == before  # not written again
    assert out / "ensemble_totals.csv" in res.ensemble
    # the same folder run again with one model: the ensemble goes with the commit
    cfg = load_config(cfg_path)
    cfg.models = ["vgpm"]
    res = run(cfg, progress=False, steps=False)
    assert res.ensemble == []
    names = set(_manifest(out)["outputs"])
    assert not [n for n in names if "ensemble" in n]
    assert not list(out.glob("*ensemble*"))
    with pytest.raises(results.NoEnsembleError) as exc:
        results.open_ensemble_maps(out)
    assert str(exc.value) == (f"{out.absolute()}: the run has no ensemble outputs (an "
                              "ensemble needs two or more models; it ran vgpm)")
    # and back to two: the ensemble is written again, from the members' maps
    res = run(load_config(cfg_path), progress=False, steps=False)
    assert len([p for p in res.ensemble if p.suffix == ".nc"]) == 24


def test_force_rewrites_the_ensemble(tmp_path):
    cfg_path = monthly_case(tmp_path, 1, res=1.0, models=("eppley_vgpm", "vgpm"))
    first = run(load_config(cfg_path), progress=False, steps=False)
    (name,) = [p.name for p in first.ensemble if p.suffix == ".nc"]
    fp = _manifest(tmp_path / "out")["outputs"][name]["fingerprint"]
    t0 = os.stat(tmp_path / "out" / name).st_mtime_ns
    run(load_config(cfg_path), progress=False, steps=False, force=True)
    entry = _manifest(tmp_path / "out")["outputs"][name]
    assert entry["fingerprint"] == fp and entry["models"] == ["eppley_vgpm", "vgpm"]
    assert os.stat(tmp_path / "out" / name).st_mtime_ns != t0


# --------------------------------------------------------------------------------------------
# comparisons, figures, report
# --------------------------------------------------------------------------------------------


def test_comparisons_carry_the_ensemble(two_years):
    _, out = two_years
    res = CliRunner().invoke(main, ["compare", str(out), "--baseline", "2023"])
    assert res.exit_code == 0, res.output
    with open(out / "compare_annual_totals.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 2 * 2 * 3  # regions x years x (two models and the ensemble)
    by = {(r["region"], r["year"], r["model"]): r for r in rows}
    for region in ("Box", "North half"):
        x = np.array([float(by[(region, "2023", m)]["total_TgC_yr-1"])
                      for m in ("vgpm", "eppley_vgpm")])
        e = by[(region, "2023", "ensemble")]
        # numpy on the 4-decimal annual totals of the members
        assert float(e["total_TgC_yr-1"]) == pytest.approx(x.mean(), abs=1e-4)
        assert float(e["models_min_TgC_yr-1"]) == pytest.approx(x.min(), abs=1e-4)
        assert float(e["models_max_TgC_yr-1"]) == pytest.approx(x.max(), abs=1e-4)
        assert by[(region, "2023", "vgpm")]["models_min_TgC_yr-1"] == ""
    with open(out / "compare_trends.csv", newline="") as fh:
        assert {r["model"] for r in csv.DictReader(fh)} == {"vgpm", "eppley_vgpm", "ensemble"}
    assert 'Model "ensemble"' in (out / "compare_README.txt").read_text()


def test_time_series_draw_the_band_around_the_ensemble_mean(two_years):
    import matplotlib.pyplot as plt

    from euphotic import compare, figureset

    _, out = two_years
    totals = results.open_totals(out)
    d = figureset.monthly_series(totals, baseline=(2023, 2023))
    ax = d.artists["axes"][0]
    tr = totals["total"].sel(region="Box").transpose("model", "month").values
    band = d.artists["spread"][0]
    from matplotlib.collections import PolyCollection

    assert isinstance(band, PolyCollection) and band in ax.collections
    verts = band.get_paths()[0].vertices
    # the band's edges are the numpy min and max across the models, month by month
    np.testing.assert_allclose(sorted(set(np.round(verts[:, 1], 9))),
                               sorted(set(np.round(np.r_[tr.min(0), tr.max(0)], 9))))
    line = d.artists["ensemble_mean"][0]
    np.testing.assert_allclose(line.get_ydata(), np.mean(tr, axis=0), rtol=1e-12)
    legend = [t.get_text() for t in d.figure.legends[0].get_texts()]
    assert "ensemble mean" in legend and "black line: the ensemble mean of the 2" in d.caption
    plt.close(d.figure)
    d = figureset.annual_series(totals, baseline=(2023, 2023))
    ann = compare.annual_totals(totals)["total"].sel(region="Box").transpose("model", "year")
    np.testing.assert_allclose(d.artists["ensemble_mean"][0].get_ydata(),
                               ann.values.mean(axis=0), rtol=1e-12)
    assert isinstance(d.artists["spread"][0], PolyCollection)
    plt.close(d.figure)
    one = figureset.monthly_series(totals.isel(model=[0]), baseline=(2023, 2023))
    assert one.artists["ensemble_mean"] == [None, None]
    plt.close(one.figure)


def test_report_has_the_ensemble_table(two_years):
    _, out = two_years
    res = CliRunner().invoke(main, ["report", str(out)])
    assert res.exit_code == 0, res.output
    page = (out / "report.html").read_text()
    assert "<h2>Spread across models</h2>" in page and 'id="ensemble"' in page
    table = page.split('id="ensemble"')[1].split("</table>")[0]
    assert table.count("<tr>") == 1 + 2 * 24  # header + regions x months
    stats = results.open_ensemble_totals(out)
    first = f"{stats['mean'].values[0, 0]:,.4f}"
    assert f"<td>{first}</td>" in table and "<td>2 of 2</td>" in table


def test_a_changed_member_month_rewrites_only_that_ensemble_map(tmp_path):
    cfg_path = monthly_case(tmp_path, 2, res=1.0, models=("vgpm", "eppley_vgpm"))
    run(load_config(cfg_path), progress=False, steps=False)
    out = tmp_path / "out"
    before = {n: (e["fingerprint"], os.stat(out / n).st_mtime_ns)
              for n, e in _manifest(out)["outputs"].items() if e["kind"] == "ensemble map"}
    chl = tmp_path / "chl" / "c01.nc"  # February's chlorophyll: a new modification time
    st = chl.stat()
    os.utime(chl, ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))
    res = run(load_config(cfg_path), progress=False, steps=False)
    assert sorted(res.reused) == [("eppley_vgpm", "2023-01"), ("vgpm", "2023-01")]
    after = {n: (e["fingerprint"], os.stat(out / n).st_mtime_ns)
             for n, e in _manifest(out)["outputs"].items() if e["kind"] == "ensemble map"}
    assert after["npp_ensemble_2023-01.nc"] == before["npp_ensemble_2023-01.nc"]  # reused
    new, old = after["npp_ensemble_2023-02.nc"], before["npp_ensemble_2023-02.nc"]
    assert new[0] != old[0] and new[1] != old[1]  # its members changed: written again
    assert ensemble_outputs.fingerprint(
        [_manifest(out)["outputs"][f"npp_{m}_2023-02.nc"]["fingerprint"]
         for m in ("vgpm", "eppley_vgpm")], ["vgpm", "eppley_vgpm"]) == new[0]
