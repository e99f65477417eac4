"""Opening what runs produced (euphotic.results): maps as one lazy Dataset, totals from the
manifest rows, and the refusals of a folder that is not one committed run.

Values are checked against the files read with an independent reader (netCDF4-python, and
netCDF-C's NCZarr for Zarr stores), against the totals CSV at the precision it prints, and
against the manifest rows exactly. Days of the month and mid-month stamps are calendar facts
(Gregorian calendar: January 31 days, February 2023 28 days, April 30 days).
"""

from __future__ import annotations

import csv
import json
import os
import shutil
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from euphotic import results, runfolder
from euphotic.config import load_config
from euphotic.models import CITATIONS
from euphotic.outputs import CAUTION, TOTALS_SPEC, format_cell
from euphotic.pipeline import run
from euphotic.results import (
    InterruptedCommitError,
    NoRunError,
    OutputChangedError,
    SelectionError,
    open_maps,
    open_totals,
)

from ._grids import monthly_case
from .conftest import run_killed_mid_commit

MODELS = ("vgpm", "eppley_vgpm")
MONTHS = ("2023-01", "2023-02", "2023-03")


def _case(tmp: Path, *, n_months: int = 3, fmt: str = "netcdf", models=MODELS) -> Path:
    """Monthly composites on a 10 x 10 degree box at 0.5 degree; two box regions (the whole
    box, its western half); in the last month chlorophyll is missing over the western half, so
    that region's totals are empty and flagged there. Returns the config."""
    return monthly_case(tmp, n_months, res=0.5, seed=11, west_gap_last_month=True,
                        models=models, run='output_format = "zarr"' if fmt == "zarr" else "",
                        regions=[("Box", [-30.0, 40.0, -20.0, 50.0]),
                                 ("West", [-30.0, 40.0, -25.0, 50.0])])


@pytest.fixture(scope="module")
def months_run(tmp_path_factory) -> Path:
    """Output folder of a three-month, two-model NetCDF run (tests copy it before changing it)."""
    base = tmp_path_factory.mktemp("months")
    run(load_config(_case(base)), progress=False)
    return base / "out"


@pytest.fixture
def months_copy(months_run, tmp_path) -> Path:
    """A copy of the whole case (inputs, config, outputs) with the outputs' sizes and
    modification times kept (``copy2``), so the manifest still describes it."""
    shutil.copytree(months_run.parent, tmp_path / "case", symlinks=True)
    return tmp_path / "case" / "out"


def _nc(path: Path, var: str) -> np.ndarray:
    """A variable read with netCDF4-python, fill values as NaN."""
    with netCDF4.Dataset(path) as nc:
        return np.ma.filled(nc[var][:].astype("f8"), np.nan)


def _nc_time(path: Path) -> np.datetime64:
    with netCDF4.Dataset(path) as nc:
        t = nc["time"]
        d = netCDF4.num2date(t[0], t.units, t.calendar, only_use_cftime_datetimes=False)
    return np.datetime64(d.isoformat(), "ns")


def _manifest(folder: Path) -> dict:
    return json.loads((folder / runfolder.MANIFEST_NAME).read_text())


def _csv(folder: Path) -> list[dict]:
    with open(folder / "regional_totals.csv", newline="") as fh:
        return list(csv.DictReader(fh))


# --------------------------------------------------------------------------------------------
# the demo run
# --------------------------------------------------------------------------------------------


def test_demo_maps_open_as_the_schema_says(demo_run):
    ds = open_maps(demo_run)
    assert list(ds.npp.dims) == ["model", "time", "lat", "lon"]
    # configs/demo.toml order
    assert list(ds.model.values) == ["vgpm", "eppley_vgpm", "pi_platt", "cbpm"]
    assert ds.time.dtype == np.dtype("datetime64[ns]")
    assert list(ds.month.values) == [np.datetime64("2025-04-01", "ns")]
    assert ds.days_in_month.dims == ("time",) and list(ds.days_in_month.values) == [30]
    assert ds.npp.dtype == np.float32 and ds.coverage.dtype == np.float32
    assert ds.npp.attrs["units"] == "mg m-2 d-1" and ds.npp.attrs["long_name"]
    assert ds.coverage.attrs["units"] == "1"
    assert ds.attrs["caution"] == CAUTION
    assert ds.attrs["euphotic_folder"] == str(demo_run.absolute())
    assert ds.attrs["citation_vgpm"] == CITATIONS["vgpm"]
    assert ds.attrs["citation_eppley_vgpm"] == CITATIONS["eppley_vgpm"]
    for model in ("vgpm", "eppley_vgpm", "pi_platt", "cbpm"):
        f = demo_run / f"npp_{model}_2025-04.nc"
        assert ds.time.values[0] == _nc_time(f)
        with netCDF4.Dataset(f) as nc:
            np.testing.assert_array_equal(ds.lat.values, nc["lat"][:])
            np.testing.assert_array_equal(ds.lon.values, nc["lon"][:])
        sel = ds.sel(model=model)
        for v in ("npp", "coverage", "n_valid_days"):  # n_valid_days: int16, fill -1 -> NaN
            np.testing.assert_array_equal(sel[v].values.astype("f8"), _nc(f, v), err_msg=v)
    # off the ocean: NaN in every variable (land cells are the file's fill values)
    land = np.isnan(_nc(demo_run / "npp_vgpm_2025-04.nc", "coverage"))[0]
    assert land.any()
    for v in ("npp", "coverage", "n_valid_days"):
        assert bool(np.isnan(ds[v].values[:, 0][:, land]).all()), v


def test_demo_totals_equal_the_csv_and_the_manifest_rows(demo_run):
    tot = open_totals(demo_run)
    assert tot.mean_npp.dims == ("region", "month", "model")
    assert list(tot.region.values) == ["Skerrow Shelf", "Outer Maren Gyre", "Tollan Bank",
                                       "Whole Maren Sea"]
    assert list(tot.model.values) == ["vgpm", "eppley_vgpm", "pi_platt", "cbpm"]
    assert list(tot.month.values) == [np.datetime64("2025-04-01", "ns")]
    assert list(tot.days_in_month.values) == [30]
    units = {v: tot[v].attrs.get("units") for v in tot.data_vars}
    assert units == {"mean_npp": "mg m-2 d-1", "observed_area": "km2", "ocean_area": "km2",
                     "coverage": "1", "total": "Tg", "total_filled": "Tg", "flag": None}
    assert all(tot[v].dtype == np.float64 for v in tot.data_vars if v != "flag")
    _check_totals(demo_run, tot)


def _check_totals(folder: Path, tot) -> None:
    """Every CSV row equals the Dataset at the CSV's printed precision; every manifest row
    equals it exactly; and nothing else in the Dataset is set."""
    names = dict(results.TOTALS_VARIABLES)
    spec = {c.name: c for c in TOTALS_SPEC}
    seen = set()
    for row in _csv(folder):
        at = {"region": row["region"], "month": np.datetime64(row["month"], "ns"),
              "model": row["model"]}
        seen.add((row["region"], row["month"], row["model"]))
        for col, var in names.items():
            value = tot[var].sel(at).item()
            got = value if var == "flag" else format_cell(value, spec[col])
            assert got == row[col], (at, col)
    rows = [r for e in _manifest(folder)["outputs"].values() if e.get("kind") == "map"
            for r in e["rows"]]
    assert len(rows) == len(seen)
    for r in rows:
        at = {"region": r["region"], "month": np.datetime64(r["month"], "ns"), "model": r["model"]}
        for col, var in names.items():
            value = tot[var].sel(at).item()
            if r[col] is None:  # JSON null: a missing number
                assert np.isnan(value), (at, col)
            else:
                assert value == r[col], (at, col)  # exact: full precision, not the CSV's
    keys = {(r["region"], np.datetime64(r["month"], "ns"), r["model"]) for r in rows}
    for region in tot.region.values:  # combinations without a row: NaN, flag ""
        for month in tot.month.values:
            for model in tot.model.values:
                if (region, month, model) not in keys:
                    cell = tot.sel(region=region, month=month, model=model)
                    assert cell.flag.item() == ""
                    assert all(np.isnan(cell[v].item()) for v in tot.data_vars if v != "flag")


# --------------------------------------------------------------------------------------------
# several months and models
# --------------------------------------------------------------------------------------------


def test_months_and_models_on_one_time_axis(months_run):
    ds = open_maps(months_run)
    assert dict(ds.sizes) == {"model": 2, "time": 3, "lat": 20, "lon": 20}
    assert list(ds.model.values) == list(MODELS)
    assert list(ds.month.values) == [np.datetime64(f"{m}-01", "ns") for m in MONTHS]
    assert list(ds.days_in_month.values) == [31, 28, 31]  # Gregorian calendar, 2023
    for i, month in enumerate(MONTHS):
        for j, model in enumerate(MODELS):
            f = months_run / f"npp_{model}_{month}.nc"
            assert ds.time.values[i] == _nc_time(f)
            for v in ("npp", "coverage", "n_valid_days"):
                np.testing.assert_array_equal(ds[v].values[j, i].astype("f8"), _nc(f, v)[0])
    # the mid-month stamps of CF time (half of the month's days after its first day)
    assert list(ds.time.values) == [np.datetime64(t, "ns") for t in
                                    ("2023-01-16", "2023-02-15", "2023-03-16")]


def test_models_and_months_can_be_chosen(months_run):
    ds = open_maps(months_run, models=["eppley_vgpm"], months=["2023-03", np.datetime64("2023-01")])
    assert list(ds.model.values) == ["eppley_vgpm"]
    assert list(ds.month.values) == [np.datetime64("2023-01-01", "ns"),
                                     np.datetime64("2023-03-01", "ns")]
    np.testing.assert_array_equal(ds.npp.values[0, 1].astype("f8"),
                                  _nc(months_run / "npp_eppley_vgpm_2023-03.nc", "npp")[0])
    assert list(open_maps(months_run, models="vgpm").model.values) == ["vgpm"]


@pytest.mark.parametrize("kw, problem", [
    ({"models": ["cafe"]}, "no maps of model(s) cafe in this run (it has vgpm, eppley_vgpm)"),
    ({"months": ["2023-04", "2022-12"]},
     "no maps of month(s) 2022-12, 2023-04 in this run (it has 2023-01, 2023-02, 2023-03)"),
])
def test_a_model_or_month_not_in_the_run_is_refused(months_run, kw, problem):
    with pytest.raises(SelectionError) as err:
        open_maps(months_run, **kw)
    assert str(err.value) == f"{months_run}: {problem}"


def test_a_month_missing_for_one_model_is_nan(months_copy):
    """A manifest where one model lacks a month: that model's maps are NaN there and its
    totals NaN with an empty flag; the file of that month, still in the folder but no longer
    listed, is not read (maps are found through the manifest, never by their names)."""
    man = _manifest(months_copy)
    del man["outputs"]["npp_eppley_vgpm_2023-02.nc"]
    (months_copy / runfolder.MANIFEST_NAME).write_text(json.dumps(man))
    ds = open_maps(months_copy)
    assert dict(ds.sizes) == {"model": 2, "time": 3, "lat": 20, "lon": 20}
    for v in ("npp", "coverage", "n_valid_days"):
        assert bool(ds[v].sel(model="eppley_vgpm").isel(time=1).isnull()
                    .all()), v
    np.testing.assert_array_equal(ds.npp.values[1, 0].astype("f8"),
                                  _nc(months_copy / "npp_eppley_vgpm_2023-01.nc", "npp")[0])
    np.testing.assert_array_equal(ds.npp.values[0, 1].astype("f8"),
                                  _nc(months_copy / "npp_vgpm_2023-02.nc", "npp")[0])
    assert ds.time.values[1] == _nc_time(months_copy / "npp_vgpm_2023-02.nc")
    tot = open_totals(months_copy)
    hole = tot.sel(model="eppley_vgpm", month=np.datetime64("2023-02-01"))
    assert bool(hole.total.isnull().all()) and list(hole.flag.values) == ["", ""]
    assert bool(tot.sel(model="vgpm", month=np.datetime64("2023-02-01")).total.notnull().all())


def test_totals_of_several_months_with_a_flag(months_run):
    tot = open_totals(months_run)
    assert dict(tot.sizes) == {"region": 2, "month": 3, "model": 2}
    assert list(tot.region.values) == ["Box", "West"]
    assert list(tot.days_in_month.values) == [31, 28, 31]
    # the western half has no chlorophyll in March: no valid estimate, flagged, numbers NaN
    west = tot.sel(region="West", month=np.datetime64("2023-03-01"))
    assert list(west.flag.values) == ["no_valid_data", "no_valid_data"]
    assert bool(west.mean_npp.isnull().all()) and bool(west.total.isnull().all())
    assert float(west.ocean_area.sel(model="vgpm")) > 0
    assert (tot.flag.sel(month=slice("2023-01", "2023-02")) == "").all()
    _check_totals(months_run, tot)


def test_maps_are_lazy_in_the_files_chunks(months_run, no_compute):
    with no_compute:
        ds = open_maps(months_run)
        mean = ds.npp.mean("time")  # building on it stays lazy too
    assert mean.chunks is not None
    with netCDF4.Dataset(months_run / "npp_vgpm_2023-01.nc") as nc:
        stored = tuple(nc["npp"].chunking())
    assert ds.npp.data.chunksize == (1, *stored)
    assert ds.npp.data.numblocks == (2, 3, 1, 1)


def test_zarr_stores_open_like_netcdf_files(tmp_path, no_compute):
    run(load_config(_case(tmp_path, n_months=2, fmt="zarr", models=("vgpm",))), progress=False)
    out = tmp_path / "out"
    with no_compute:
        ds = open_maps(out)
    assert dict(ds.sizes) == {"model": 1, "time": 2, "lat": 20, "lon": 20}
    for i, month in enumerate(MONTHS[:2]):
        store = out / f"npp_vgpm_{month}.zarr"
        assert store.is_dir()
        # the independent reader: netCDF-C's NCZarr through netCDF4-python
        with netCDF4.Dataset(f"file://{store}#mode=nczarr,file") as nc:
            for v in ("npp", "coverage", "n_valid_days"):
                want = np.ma.filled(nc[v][:].astype("f8"), np.nan)[0]
                np.testing.assert_array_equal(ds[v].values[0, i].astype("f8"), want, err_msg=v)
    _check_totals(out, open_totals(out))


# --------------------------------------------------------------------------------------------
# folders that are not one committed run
# --------------------------------------------------------------------------------------------

OPENERS = pytest.mark.parametrize("opener", [open_maps, open_totals],
                                  ids=["open_maps", "open_totals"])


@OPENERS
def test_a_folder_without_a_run_is_refused(tmp_path, opener):
    (tmp_path / "regional_totals.csv").write_text("region\n")
    with pytest.raises(NoRunError) as err:
        opener(tmp_path)
    assert str(err.value) == f"no euphotic run in {tmp_path}: it has no euphotic_manifest.json"
    with pytest.raises(NoRunError) as err:
        opener(tmp_path / "nowhere")
    assert str(err.value) == f"no euphotic run in {tmp_path / 'nowhere'}: no such folder"
    (tmp_path / runfolder.MANIFEST_NAME).write_text('{"tool": "euph')  # cut short
    with pytest.raises(NoRunError) as err:
        opener(tmp_path)
    assert str(err.value) == (f"no euphotic run in {tmp_path}: euphotic_manifest.json cannot "
                              "be read (JSONDecodeError)")


@OPENERS
def test_an_interrupted_commit_is_refused(months_copy, monkeypatch, opener):
    """A real commit killed after its first rename (as in test_runs): the folder holds parts
    of two runs; both openers refuse until a run completes the commit."""
    out = months_copy
    run_killed_mid_commit(monkeypatch, out, load_config(out.parent / "run.toml"), force=True)
    with pytest.raises(InterruptedCommitError) as err:
        opener(out)
    assert str(err.value) == (f"the last run in {out} was interrupted while committing; run it "
                              "again to complete it")
    run(load_config(out.parent / "run.toml"), progress=False)  # completes the commit
    assert opener(out) is not None


def test_a_run_holding_the_lock_is_no_obstacle(months_copy, monkeypatch):
    """A run in progress (lock held, its stage being written) does not stop readers: they
    read the committed run. A commit plan beside a live holder is waited for, then refused."""
    before = open_totals(months_copy)
    lock = runfolder.Lock(months_copy / runfolder.LOCK_NAME)
    lock.acquire("euphotic run (test)")
    try:
        stage = runfolder.OutputFolder(months_copy).new_stage({"command": "test"})
        (stage.path / "npp_vgpm_2023-01.nc").write_bytes(b"half-written")
        assert before.identical(open_totals(months_copy))
        assert open_maps(months_copy).sizes["time"] == 3
        (stage.path / runfolder.COMMIT_NAME).write_text('{"moves": [], "deletes": []}')
        monkeypatch.setattr(results, "COMMIT_WAIT_S", 0.2)
        with pytest.raises(InterruptedCommitError):
            open_maps(months_copy)
    finally:
        lock.release()


@OPENERS
def test_a_missing_map_is_named(months_copy, opener):
    gone = months_copy / "npp_eppley_vgpm_2023-02.nc"
    gone.unlink()
    with pytest.raises(OutputChangedError) as err:
        opener(months_copy)
    assert str(err.value) == (f"{gone}: listed in the manifest of the run in {months_copy} but "
                              "missing; run that run again to rewrite it")


@OPENERS
def test_a_changed_map_is_named(months_copy, opener):
    f = months_copy / "npp_vgpm_2023-03.nc"
    st = f.stat()
    os.utime(f, ns=(st.st_atime_ns, st.st_mtime_ns + 1_000_000_000))  # touched: same bytes
    with pytest.raises(OutputChangedError) as err:
        opener(months_copy)
    assert str(err.value) == (f"{f}: changed since the run in {months_copy} wrote it "
                              "(modification time differs); run that run again to rewrite it")
    with open(f, "ab") as fh:  # a byte appended
        fh.write(b"\0")
    with pytest.raises(OutputChangedError) as err:
        opener(months_copy)
    assert str(err.value) == (f"{f}: changed since the run in {months_copy} wrote it (size "
                              f"{st.st_size + 1} bytes, the manifest says {st.st_size}); run "
                              "that run again to rewrite it")


def test_maps_are_opened_again_when_a_commit_lands_meanwhile(months_copy, monkeypatch):
    """A commit replacing the manifest while the files are being opened (here: the manifest's
    modification time changes after the first file) makes open_maps open them again, so the
    Dataset never mixes files of two runs under one manifest."""
    real, opened = results._open_map, []

    def open_and_commit(path, chunks):
        opened.append(path.name)
        if len(opened) == 1:
            man = months_copy / runfolder.MANIFEST_NAME
            st = man.stat()
            os.utime(man, ns=(st.st_atime_ns, st.st_mtime_ns + 1))
        return real(path, chunks)

    monkeypatch.setattr(results, "_open_map", open_and_commit)
    ds = open_maps(months_copy)
    assert len(opened) == 2 * len(MODELS) * len(MONTHS)
    assert dict(ds.sizes) == {"model": 2, "time": 3, "lat": 20, "lon": 20}
