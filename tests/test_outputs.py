"""Output files against outside references: the IOOS compliance-checker (CF-1.8, ACDD-1.3),
GDAL through rasterio (grid mapping), netCDF-C through netCDF4-python (unlimited time, NCZarr),
pyproj (the CRS), the W3C CSVW reader ``csvw`` (totals sidecar) and the csv module.

Expected values are hand-worked from the invented test grids and stated beside each check.
"""

from __future__ import annotations

import contextlib
import csv
import datetime as dt
import hashlib
import json
import logging
import re
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from euphotic import __version__
from euphotic.cli import format_totals, main
from euphotic.config import load_config
from euphotic.errors import ConfigError
from euphotic.outputs import (
    CAUTION,
    METADATA_DEFAULTS,
    TOTALS_COLUMNS,
    TOTALS_SPEC,
    month_dataset,
    write_lazy,
)
from euphotic.pipeline import run

from ._grids import CHL_STD, PAR_STD, SST_STD, grid, run_config, write_field

ROOT = Path(__file__).resolve().parents[1]

#: Every ACDD key a user can set, with invented values (example.org is reserved, RFC 2606).
FULL_METADATA = {
    "id": "tiny-test",
    "naming_authority": "org.example.tiny",
    "license": "CC0-1.0",
    "institution": "Tiny Test Institute (invented)",
    "project": "Tiny test project (invented)",
    "program": "Tiny test programme (invented)",
    "acknowledgement": "No funding (invented test).",
    "creator_name": "Tiny test team (invented)",
    "creator_email": "tiny@example.org",
    "creator_url": "https://example.org/tiny",
    "creator_type": "group",
    "creator_institution": "Tiny Test Institute (invented)",
    "publisher_name": "Tiny Test Institute (invented)",
    "publisher_email": "data@example.org",
    "publisher_url": "https://example.org/data",
    "publisher_type": "institution",
    "publisher_institution": "Tiny Test Institute (invented)",
    "contributor_name": "Tiny test reviewer (invented)",
    "contributor_role": "reviewer",
    "metadata_link": "https://example.org/tiny/metadata",
    "platform": "none (invented test grids)",
    "platform_vocabulary": "none",
    "instrument": "none (invented test grids)",
    "instrument_vocabulary": "none",
}


def _toml_table(d: dict) -> str:
    return "[metadata]\n" + "".join(f"{k} = {json.dumps(v)}\n" for k, v in d.items())


def _two_month_case(tmp: Path, *, metadata: dict | None = None, fmt: str = "netcdf",
                    earth: str = "sphere") -> Path:
    """4 x 4 cells of 0.5 degree at the equator (10-12E, 1S-1N). The west half (lon < 11E) has
    no valid temperature: land (ocean from temperature). Chlorophyll 0.5 mg m-3 for all of
    January 2024; every February value missing. Regions: "Sea" (east half, all ocean) and
    "Land" (west half, no ocean cell)."""
    lat, lon = grid(-1.0, 1.0, 10.0, 12.0, 0.5)
    shape = (len(lat), len(lon))
    write_field(tmp / "chl" / "jan.nc", "chl", CHL_STD, "mg m-3", np.full(shape, 0.5), lat, lon,
                start="2024-01-01", end="2024-01-31")
    write_field(tmp / "chl" / "feb.nc", "chl", CHL_STD, "mg m-3", np.full(shape, np.nan), lat,
                lon, start="2024-02-01", end="2024-02-29")
    sst = np.full(shape, 20.0)
    sst[:, lon < 11.0] = np.nan
    for m, (a, b) in enumerate((("2024-01-01", "2024-02-01"), ("2024-02-01", "2024-03-01"))):
        write_field(tmp / "par" / f"p{m}.nc", "par", PAR_STD, "einstein m-2 day-1",
                    np.full(shape, 40.0), lat, lon, time_bounds=(a, b))
        write_field(tmp / "sst" / f"s{m}.nc", "sst", SST_STD, "degC", sst, lat, lon,
                    time_bounds=(a, b))
    return run_config(tmp / "run.toml",
                      run=f'models = ["vgpm"]\nearth = "{earth}"\noutput_format = "{fmt}"',
                      regions=[("Sea", [11.0, -1.0, 12.0, 1.0]), ("Land", [10.0, -1.0, 11.0, 1.0])],
                      extra=_toml_table(metadata) if metadata else "")


@contextlib.contextmanager
def _euphotic_warnings():
    """Collect the messages of the ``euphotic`` logger (the CLI may have stopped it
    propagating to pytest's caplog handler)."""
    records: list[str] = []

    class H(logging.Handler):
        def emit(self, record):
            records.append(record.getMessage())

    log = logging.getLogger("euphotic")
    h, level = H(level=logging.WARNING), log.level
    log.addHandler(h)
    log.setLevel(logging.WARNING)
    try:
        yield records
    finally:
        log.removeHandler(h)
        log.setLevel(level)


# --------------------------------------------------------------------------------------------
# IOOS compliance-checker, offline
# --------------------------------------------------------------------------------------------


def _check(path: Path, suite: str, monkeypatch):
    """Run one compliance-checker suite through its Python API, offline: the standard-name
    table declared in the file must be the one packaged with the checker (a download would
    fail the test)."""
    from compliance_checker.cf import util as cf_util
    from compliance_checker.runner import CheckSuite

    downloads = []  # the checker catches a failed download and falls back: record, then assert

    def no_download(version, *a, **k):
        downloads.append(version)
        raise OSError("no network in tests")

    monkeypatch.setattr(cf_util, "download_cf_standard_name_table", no_download)
    cs = CheckSuite()
    cs.load_all_available_checkers()
    ds = cs.load_dataset(str(path))
    groups, errors = cs.run_all(ds, [suite], skip_checks=[])[suite]
    assert not errors, errors
    assert downloads == [], (
        f"standard_name_vocabulary names table v{downloads}, not the checker's packaged one: "
        "check the standard names against the packaged table and update "
        "outputs.STANDARD_NAME_VOCABULARY"
    )
    scored = cs.build_structure(suite, groups, str(path))
    failed = []
    for r in groups:
        v = r.value
        ok = v if isinstance(v, bool) else v[0] == v[1]
        if not ok:
            failed.append(r)
    return scored, failed


@pytest.mark.parametrize("model", ["vgpm", "eppley_vgpm"])
def test_cf_1_8_no_high_or_medium_failure(demo_run, monkeypatch, model):
    # compliance-checker cf:1.8 weights: 3 = high, 2 = medium, 1 = low priority
    scored, failed = _check(demo_run / f"npp_{model}_2025-04.nc", "cf:1.8", monkeypatch)
    bad = [(r.weight, r.name, r.msgs) for r in failed if r.weight >= 2]
    assert bad == [], "\n".join(f"[{w}] {n}: {m}" for w, n, m in bad)
    # with compliance-checker 6.1.0 the files pass every CF check (306/306 points)
    assert scored["scored_points"] == scored["possible_points"], [
        (r.weight, r.name, r.msgs) for r in failed
    ]


#: ACDD checks that fail by design (README "Files and standards"): the checker compares the
#: extents with the first/last cell centre and the time coverage with the time stamp, while
#: ACDD's extents are the outer cell edges and the month's bounds; the coverage fraction has
#: no CF standard name; a depth-integrated product has no single vertical extent; the tool
#: cannot know the inputs' platform/instrument or a keyword vocabulary.
ACDD_EXPECTED_MISSES = {
    "geospatial_lat_extents_match",
    "geospatial_lon_extents_match",
    "time_coverage_extents_match",
    'variable "coverage" missing the following attributes:',
}
ACDD_EXPECTED_MISSING_ATTRS = {
    "geospatial_vertical_min", "geospatial_vertical_max", "geospatial_vertical_positive",
    "geospatial_bounds_vertical_crs", "geospatial_vertical_units",
    "geospatial_vertical_resolution", "keywords_vocabulary", "platform", "platform_vocabulary",
    "instrument", "instrument_vocabulary", "metadata_link", "contributor_name",
    "contributor_role",
}


def test_acdd_1_3_demo_misses_only_what_is_by_design(demo_run, monkeypatch):
    scored, failed = _check(demo_run / "npp_vgpm_2025-04.nc", "acdd:1.3", monkeypatch)
    points = (scored["scored_points"], scored["possible_points"])
    unexpected, missing = [], set()
    for r in failed:
        if r.name == "Global Attributes":
            missing |= {m.removesuffix(" not present") for m in r.msgs}
        elif r.name not in ACDD_EXPECTED_MISSES:
            unexpected.append((r.name, r.msgs))
    assert unexpected == [], f"{points}: {unexpected}"
    assert missing <= ACDD_EXPECTED_MISSING_ATTRS, f"{points}: {missing - ACDD_EXPECTED_MISSING_ATTRS}"
    # the target, 50 of 60 points, as a fraction (compliance-checker 6.1.0: 79/94)
    assert points[0] / points[1] >= 50 / 60, points


def test_acdd_1_3_at_least_50_of_60_with_full_metadata(tmp_path, monkeypatch):
    run(load_config(_two_month_case(tmp_path, metadata=FULL_METADATA)), progress=False)
    scored, failed = _check(tmp_path / "out" / "npp_vgpm_2024-01.nc", "acdd:1.3", monkeypatch)
    got, possible = scored["scored_points"], scored["possible_points"]
    # the target, 50 of 60 points, as a fraction (compliance-checker 6.1.0: 79/94)
    assert got / possible >= 50 / 60, (got, possible, [(r.name, r.msgs) for r in failed])


# --------------------------------------------------------------------------------------------
# grid mapping, as GDAL (rasterio) and PROJ (pyproj) read it
# --------------------------------------------------------------------------------------------


def test_gdal_reads_epsg_4326_and_the_grid(demo_run):
    import rasterio

    with rasterio.open(f'NETCDF:"{demo_run / "npp_vgpm_2025-04.nc"}":npp') as src:
        assert src.crs.to_epsg() == 4326  # the demo runs with earth = "wgs84"
        # demo grid: 1/12 degree, 36W-14W, 40N-60N (scripts/make_sample_grids.py)
        assert src.shape == (240, 264)
        np.testing.assert_allclose(
            tuple(src.transform)[:6], (1 / 12, 0.0, -36.0, 0.0, -1 / 12, 60.0), atol=1e-9
        )
        np.testing.assert_allclose(tuple(src.bounds), (-36.0, 40.0, -14.0, 60.0), atol=1e-9)


def test_sphere_run_declares_the_authalic_sphere(tmp_path):
    import rasterio
    from pyproj import CRS

    run(load_config(_two_month_case(tmp_path)), progress=False)
    path = tmp_path / "out" / "npp_vgpm_2024-01.nc"
    with rasterio.open(f'NETCDF:"{path}":npp') as src:
        assert src.crs.is_geographic
        crs = CRS.from_wkt(src.crs.to_wkt())
    # authalic radius of WGS84, 6371007.2 m (NIMA TR8350.2), a sphere: no flattening
    assert crs.ellipsoid.semi_major_metre == 6371007.2
    assert crs.ellipsoid.inverse_flattening == 0.0
    with xr.open_dataset(path) as ds:
        assert ds["crs"].attrs["earth_radius"] == 6371007.2
        for v in ("npp", "coverage", "n_valid_days"):
            assert ds[v].encoding.get("grid_mapping", ds[v].attrs.get("grid_mapping")) == "crs"


# --------------------------------------------------------------------------------------------
# time, counts and global attributes
# --------------------------------------------------------------------------------------------


def test_time_is_unlimited_without_fill_and_months_join(tmp_path):
    import netCDF4

    run(load_config(_two_month_case(tmp_path)), progress=False)
    files = [tmp_path / "out" / f"npp_vgpm_2024-0{m}.nc" for m in (1, 2)]
    for f in files:
        with netCDF4.Dataset(f) as nc:
            assert nc.dimensions["time"].isunlimited()
            assert "_FillValue" not in nc["time"].ncattrs()
            assert "_FillValue" not in nc["time_bnds"].ncattrs()
            assert nc["time"].units == "days since 1970-01-01"
            assert nc["time"].dtype == np.float64
    with xr.open_mfdataset(files, combine="by_coords", data_vars="minimal") as ds:
        assert ds.sizes["time"] == 2
        # stamps: month start + half the days, whole days: 1 Jan + 15 d, 1 Feb + 14 d (2024)
        assert list(ds["time"].values) == [np.datetime64("2024-01-16T00:00", "ns"),
                                           np.datetime64("2024-02-15T00:00", "ns")]


def test_n_valid_days_is_coverage_times_days(tmp_path):
    import netCDF4

    run(load_config(_two_month_case(tmp_path)), progress=False)
    # hand-worked: January all 31 days valid on ocean; February none; land (lon < 11E) fill
    for month, days, expect in (("2024-01", 31, 31), ("2024-02", 29, 0)):
        path = tmp_path / "out" / f"npp_vgpm_{month}.nc"
        with netCDF4.Dataset(path) as nc:
            v = nc["n_valid_days"]
            v.set_auto_maskandscale(False)
            raw = v[:]
            assert v.dtype == np.int16 and v._FillValue == -1
            assert v.standard_name == "number_of_observations" and v.units == "1"
            assert nc["npp"].ancillary_variables == "coverage n_valid_days"
        assert (raw[0][:, :2] == -1).all() and (raw[0][:, 2:] == expect).all()
        with xr.open_dataset(path) as ds:
            cov = ds["coverage"].values
            np.testing.assert_array_equal(
                ds["n_valid_days"].values[np.isfinite(cov)], np.round(cov * days)[np.isfinite(cov)]
            )
            assert ds.attrs["time_coverage_duration"] == f"P{days}D"


def test_month_dataset_stays_lazy(tmp_path, no_compute):
    import dask.array as da

    from euphotic.aggregate import MonthlyMaps

    lat, lon = grid(-1.0, 1.0, 10.0, 12.0, 0.5)
    coords = {"lat": lat, "lon": lon}
    npp = xr.DataArray(da.full((4, 4), 100.0, chunks=2), dims=("lat", "lon"), coords=coords)
    cov = xr.DataArray(da.full((4, 4), 0.5, chunks=2), dims=("lat", "lon"), coords=coords)
    maps = MonthlyMaps(month=np.datetime64("2024-04"), model="vgpm", npp=npp, coverage=cov,
                       n_days=30)
    with no_compute:
        ds = month_dataset(maps, title="t", command="c", extra_attrs={"masked_chl_values": 7})
        assert isinstance(ds["n_valid_days"].data, da.Array)
        delayed = write_lazy(ds, tmp_path / "x.nc", "netcdf")
    delayed.compute()
    with xr.open_dataset(tmp_path / "x.nc") as back:
        assert back.attrs["masked_chl_values"] == 7
        assert (back["n_valid_days"].values == 15).all()  # 0.5 x 30 days


ISO_Z = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z$")


def test_attributes_iso_times_extents_and_provenance(demo_run):
    cfg_path = demo_run.parent / "configs" / "demo.toml"
    with xr.open_dataset(demo_run / "npp_vgpm_2025-04.nc") as ds:
        a = ds.attrs
    for key in ("time_coverage_start", "time_coverage_end", "date_created", "date_modified",
                "date_issued", "date_metadata_modified"):
        assert ISO_Z.match(a[key]), (key, a[key])
        assert dt.datetime.fromisoformat(a[key]).tzinfo is not None
    assert (a["time_coverage_start"], a["time_coverage_end"]) == (
        "2025-04-01T00:00:00Z", "2025-05-01T00:00:00Z")
    assert a["time_coverage_duration"] == "P30D"  # April
    # cell edges of the demo grid, exactly (scripts/make_sample_grids.py: 36W-14W, 40N-60N)
    assert (a["geospatial_lat_min"], a["geospatial_lat_max"]) == (40.0, 60.0)
    assert (a["geospatial_lon_min"], a["geospatial_lon_max"]) == (-36.0, -14.0)
    assert a["geospatial_lat_resolution"] == a["geospatial_lon_resolution"] == "0.0833333 degrees"
    # WKT in EPSG:4326 axis order, latitude first (ACDD 1.3 geospatial_bounds example)
    assert a["geospatial_bounds"] == "POLYGON((40 -36, 40 -14, 60 -14, 60 -36, 40 -36))"
    from shapely import wkt

    assert wkt.loads(a["geospatial_bounds"]).bounds == (40.0, -36.0, 60.0, -14.0)
    assert a["cdm_data_type"] == "Grid"
    assert a["standard_name_vocabulary"] == "CF Standard Name Table v93"
    assert "VGPM (Behrenfeld & Falkowski 1997)" in a["title"]
    assert CAUTION in a["summary"] and a["caution"] == CAUTION
    # [metadata] of configs/demo.toml
    assert a["id"] == "maren-demo_npp_vgpm_2025-04"
    assert a["creator_email"] == "demo@example.org"
    assert a["license"] == "CC0-1.0 (invented demo data)"
    # provenance: paths relative to the config file, its hash and text
    first = a["input_files_chl"].split(", ")[0]
    assert first == "../sample_grids/chl/maren_chl_20250401.nc"
    assert a["land_mask_source"] == "file ../sample_grids/masks.nc variable 'land'"
    assert a["region_sources"] == (
        "Skerrow Shelf: box [-22.0, 44.0, -15.0, 56.0] (west, south, east, north; degrees); "
        "GeoJSON regions/maren_gyre.geojson (one region per feature, named by property 'name'); "
        "Tollan Bank: NetCDF mask ../sample_grids/masks.nc variable 'bank' value(s) 1; "
        "Whole Maren Sea: box [-36.0, 40.0, -14.0, 60.0] (west, south, east, north; degrees)"
    )
    assert a["earth_model"].startswith("WGS84 ellipsoid (semi-major axis 6378137.0 m")
    assert a["euphotic_config_sha256"] == hashlib.sha256(cfg_path.read_bytes()).hexdigest()
    assert a["euphotic_config"] == cfg_path.read_text()


# --------------------------------------------------------------------------------------------
# Zarr stores: time like the NetCDF files, and readable by netCDF-C (NCZarr)
# --------------------------------------------------------------------------------------------


def test_zarr_store_time_crs_and_netcdf_c_reads_it(tmp_path):
    import netCDF4

    result = run(load_config(_two_month_case(tmp_path, fmt="zarr")), progress=False)
    store = result.maps[0]
    assert store.name == "npp_vgpm_2024-01.zarr"
    zt = json.loads((store / "time" / ".zarray").read_text())
    zattrs = json.loads((store / "time" / ".zattrs").read_text())
    assert (zt["dtype"], zt["fill_value"]) == ("<f8", None)
    assert (zattrs["units"], zattrs["calendar"]) == ("days since 1970-01-01", "standard")
    assert json.loads((store / "npp" / ".zarray").read_text())["compressor"]["id"] == "zlib"
    with xr.open_zarr(store) as z:
        assert z["crs"].attrs["grid_mapping_name"] == "latitude_longitude"
        npp = z["npp"].values
        ndays = z["n_valid_days"].values
    # netCDF-C's NCZarr reading the same store (netCDF4-python) gives the same numbers
    with netCDF4.Dataset(f"file://{store}#mode=nczarr,file") as nc:
        np.testing.assert_array_equal(np.ma.filled(nc["npp"][:], np.nan), npp)
        np.testing.assert_array_equal(np.ma.filled(nc["n_valid_days"][:].astype(float), np.nan),
                                      ndays)
        t = nc["time"]
        assert t.units == "days since 1970-01-01"
        # 16 Jan 2024 is day 19738 since 1970-01-01 (1 Jan 2024 = 54 x 365 + 13 leap days)
        assert float(t[0]) == 19738.0
    assert np.isfinite(npp).sum() == 8  # the 8 ocean cells


# --------------------------------------------------------------------------------------------
# the totals table and its CSVW sidecar
# --------------------------------------------------------------------------------------------

#: Per column: the text a cell may hold (fixed decimals, never an exponent; empty = missing).
CELL_PATTERNS = {
    "region": r".+",
    "month": r"\d{4}-\d{2}",
    "model": r"[a-z_]+",
    "mean_npp_mgC_m-2_d-1": r"(\d+\.\d{2})?",
    "observed_area_km2": r"\d+",
    "ocean_area_km2": r"\d+",
    "coverage_fraction": r"([01]\.\d{4})?",
    "total_TgC": r"(\d+\.\d{4})?",
    "total_filled_TgC": r"(\d+\.\d{4})?",
    "flag": r"([a-z_]+(;[a-z_]+)*)?",
}


def test_cells_fixed_point_never_exponent_nor_negative_zero():
    from euphotic.outputs import format_cell

    spec = {c.name: c for c in TOTALS_SPEC}
    assert format_cell(1.0e-5, spec["total_TgC"]) == "0.0000"  # rounds, no "1e-05"
    assert format_cell(-1.0e-9, spec["total_TgC"]) == "0.0000"  # no "-0.0000"
    assert format_cell(3.6e8, spec["ocean_area_km2"]) == "360000000"  # no "3.6e+08"
    assert format_cell(1002.375, spec["mean_npp_mgC_m-2_d-1"]) == "1002.38"
    assert format_cell(float("nan"), spec["coverage_fraction"]) == ""
    assert format_cell("no_ocean_cells;low_coverage", spec["flag"]) == "no_ocean_cells;low_coverage"


def test_totals_csv_formats_per_column(demo_run):
    assert list(CELL_PATTERNS) == TOTALS_COLUMNS
    with open(demo_run / "regional_totals.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == TOTALS_COLUMNS
    assert len(rows) == 1 + 4 * 4  # 4 regions (one GeoJSON feature) x 4 models, one month
    for row in rows[1:]:
        for name, cell in zip(TOTALS_COLUMNS, row, strict=True):
            assert re.fullmatch(CELL_PATTERNS[name], cell), (name, cell)
        # every demo region has ocean and data; the low-coverage flag follows the run's
        # min_coverage (default 0.5) on the region's coverage as written
        assert row[-1] == ("low_coverage" if float(row[6]) < 0.5 else ""), row
    # Tollan Bank, 21 % of days, for each of the 4 models
    assert sum(r[-1] == "low_coverage" for r in rows[1:]) == 4


def test_flags_empty_cells_and_warnings_never_a_silent_zero(tmp_path):
    with _euphotic_warnings() as messages:
        result = run(load_config(_two_month_case(tmp_path)), progress=False)
    with open(tmp_path / "out" / "regional_totals.csv", newline="") as fh:
        table = {(r["region"], r["month"]): r for r in csv.DictReader(fh)}
    sea_jan, land_jan = table["Sea", "2024-01"], table["Land", "2024-01"]
    sea_feb, land_feb = table["Sea", "2024-02"], table["Land", "2024-02"]
    assert sea_jan["flag"] == "" and float(sea_jan["total_TgC"]) > 0
    for r in (land_jan, land_feb):
        assert r["flag"] == "no_ocean_cells"
        assert (r["observed_area_km2"], r["ocean_area_km2"], r["coverage_fraction"]) == ("0", "0", "")
        assert r["mean_npp_mgC_m-2_d-1"] == r["total_TgC"] == r["total_filled_TgC"] == ""
    assert sea_feb["flag"] == "no_valid_data"
    assert (sea_feb["observed_area_km2"], sea_feb["coverage_fraction"]) == ("0", "0.0000")
    assert sea_feb["ocean_area_km2"] == sea_jan["ocean_area_km2"]
    assert sea_feb["mean_npp_mgC_m-2_d-1"] == sea_feb["total_TgC"] == sea_feb["total_filled_TgC"] == ""
    ocean = sea_jan["ocean_area_km2"]
    # one warning per region and case, naming every month it holds for
    assert [m for m in messages if "(flag " in m] == [
        "region 'Land', 2 month(s) (2024-01, 2024-02), model(s) vgpm: no ocean cell of the grid "
        "in the region; mean and totals left empty (flag no_ocean_cells)",
        f"region 'Sea', 2024-02, model vgpm: no valid estimate on the region's {ocean} km2 of "
        "ocean; mean and totals left empty (flag no_valid_data)",
    ]
    # in memory: NaN, not zero
    rows = {(r["region"], r["month"]): r for r in result.rows}
    assert np.isnan(rows["Sea", "2024-02"]["total_TgC"]) and np.isnan(rows["Land", "2024-01"]["total_TgC"])
    # the CLI's text table shows them as "-" with the flag
    text = format_totals(result.rows)
    assert text.splitlines()[0].split()[-1] == "flag"
    line = next(s for s in text.splitlines() if s.startswith("Land") and "2024-01" in s)
    # mean, observed, ocean, coverage, total, filled, flag
    assert line.split()[-7:] == ["-", "0", "0", "-", "-", "-", "no_ocean_cells"]


def test_totals_read_back_to_stated_precision(tmp_path):
    result = run(load_config(_two_month_case(tmp_path)), progress=False)
    with open(tmp_path / "out" / "regional_totals.csv", newline="") as fh:
        back = list(csv.DictReader(fh))
    assert len(back) == len(result.rows) == 4
    for mem, text in zip(result.rows, back, strict=True):
        for col in TOTALS_SPEC:
            if col.fmt is None:
                assert text[col.name] == mem[col.name]
                continue
            if np.isnan(mem[col.name]):
                assert text[col.name] == ""
                continue
            decimals = int(col.fmt[1:-1])  # ".4f" -> 4
            assert abs(float(text[col.name]) - mem[col.name]) <= 0.5 * 10.0**-decimals + 1e-12


def test_csvw_sidecar_is_valid_and_describes_every_column(tmp_path):
    from csvw import CSVW, Table

    run(load_config(_two_month_case(tmp_path, metadata=FULL_METADATA)), progress=False)
    out = tmp_path / "out"
    side = out / "regional_totals.csv-metadata.json"
    doc = json.loads(side.read_text())
    # W3C CSVW, validated and read with the csvw library (declared datatypes)
    assert CSVW(str(side), validate=True).is_valid
    typed = list(Table.from_file(side).iterdicts())
    with open(out / "regional_totals.csv", newline="") as fh:
        plain = list(csv.DictReader(fh))
    assert [r["region"] for r in typed] == [r["region"] for r in plain]
    sea_jan = typed[0]
    assert isinstance(sea_jan["ocean_area_km2"], int)
    assert str(sea_jan["total_TgC"]) == plain[0]["total_TgC"]
    cols = doc["tableSchema"]["columns"]
    assert [c["name"] for c in cols] == TOTALS_COLUMNS
    units = {c["name"]: c.get("schema:unitText") for c in cols}
    assert units["mean_npp_mgC_m-2_d-1"] == "mg m-2 d-1" and units["ocean_area_km2"] == "km2"
    assert units["total_TgC"] == "Tg" and units["coverage_fraction"] == "1"
    assert all(c["dc:description"] for c in cols)
    props = {p["schema:name"]: p["schema:value"] for p in doc["schema:additionalProperty"]}
    assert props["caution"] == CAUTION
    assert props["euphotic_version"] == __version__
    assert props["earth_model"] == "sphere of the WGS84 authalic radius (6371007.2 m)"
    assert props["model_vgpm"].startswith("VGPM (Behrenfeld & Falkowski 1997). Behrenfeld, M. J.")
    assert props["land_mask_source"] == "valid temperature"
    assert props["input_files_chl"] == "chl/feb.nc, chl/jan.nc"
    assert props["creator_name"] == FULL_METADATA["creator_name"]
    assert doc["dc:license"] == "CC0-1.0" and doc["dc:identifier"] == "tiny-test_regional_totals"
    gen = doc["prov:wasGeneratedBy"]
    assert gen["prov:wasAssociatedWith"]["schema:softwareVersion"] == __version__
    assert ISO_Z.match(gen["prov:startedAtTime"]["@value"])
    assert ISO_Z.match(gen["prov:endedAtTime"]["@value"])


# --------------------------------------------------------------------------------------------
# the [metadata] table
# --------------------------------------------------------------------------------------------


def test_metadata_keys_end_up_in_the_files(tmp_path):
    run(load_config(_two_month_case(tmp_path, metadata=FULL_METADATA)), progress=False)
    with xr.open_dataset(tmp_path / "out" / "npp_vgpm_2024-02.nc") as ds:
        for key, value in FULL_METADATA.items():
            expect = f"{value}_npp_vgpm_2024-02" if key == "id" else value
            assert ds.attrs[key] == expect, key


def test_metadata_defaults_are_honest(tmp_path):
    run(load_config(_two_month_case(tmp_path)), progress=False)
    with xr.open_dataset(tmp_path / "out" / "npp_vgpm_2024-01.nc") as ds:
        a = ds.attrs
    assert a["id"] == "npp_vgpm_2024-01"
    for key, default in METADATA_DEFAULTS.items():
        if key != "id":
            assert a.get(key) == default, key
    assert a["license"] == "not specified by the user"


@pytest.mark.parametrize(
    ("table", "problem"),
    [
        ('creator_nme = "x"', "unknown key(s) creator_nme; allowed: "
         + ", ".join(sorted(METADATA_DEFAULTS))),
        ("license = 3", "`license` must be a text string, not int 3"),
        ('creator_email = ["a@example.org"]',
         "`creator_email` must be a text string, not list ['a@example.org']"),
        ('institution = "  "', "`institution` must not be empty"),
        ('creator_type = "team"',
         "`creator_type` must be one of person, group, institution, position, not 'team'"),
    ],
)
def test_bad_metadata_is_one_line_error(tmp_path, table, problem):
    from click.testing import CliRunner

    cfg = _two_month_case(tmp_path)
    cfg.write_text(cfg.read_text() + "[metadata]\n" + table + "\n")
    with pytest.raises(ConfigError) as info:
        load_config(cfg)
    assert str(info.value) == f"{cfg} [metadata]: {problem}"
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 1
    assert res.output == f"euphotic: error: {cfg} [metadata]: {problem}\n"
    assert not (tmp_path / "out").exists()  # nothing written


def test_metadata_must_be_a_table(tmp_path):
    cfg = _two_month_case(tmp_path)
    cfg.write_text('metadata = "x"\n' + cfg.read_text())
    with pytest.raises(ConfigError) as info:
        load_config(cfg)
    assert str(info.value) == f"{cfg} [metadata]: must be a table of text values ([metadata])"


# --------------------------------------------------------------------------------------------
# regions.nc: the run's region masks and cell areas
# --------------------------------------------------------------------------------------------


def test_regions_file_passes_cf_checks(demo_run, monkeypatch):
    scored, failed = _check(demo_run / "regions.nc", "cf:1.8", monkeypatch)
    bad = [(r.weight, r.name, r.msgs) for r in failed if r.weight >= 2]
    assert bad == [], "\n".join(f"[{w}] {n}: {m}" for w, n, m in bad)


def test_regions_file_masks_match_cell_centres_and_areas_match_pyproj(demo_run):
    """The stored masks are the configured regions (a box checked cell by cell with plain
    numpy on the cell centres; configs/demo.toml: "Skerrow Shelf" = [-22, 44, -15, 56]) and
    the stored cell areas are the WGS84 cell areas (pyproj.Geod polygon area, an outside
    reference)."""
    from pyproj import Geod

    from euphotic import results

    masks = results.open_region_masks(demo_run)
    assert masks.names == ["Skerrow Shelf", "Outer Maren Gyre", "Tollan Bank", "Whole Maren Sea"]
    lat, lon = masks.lat, masks.lon
    box = ((lon[None, :] >= -22) & (lon[None, :] <= -15) & (lat[:, None] >= 44)
           & (lat[:, None] <= 56))
    np.testing.assert_array_equal(masks["Skerrow Shelf"], box)
    whole = ((lon[None, :] >= -36) & (lon[None, :] <= -14) & (lat[:, None] >= 40)
             & (lat[:, None] <= 60))
    np.testing.assert_array_equal(masks["Whole Maren Sea"], whole)
    d = float(lat[1] - lat[0])
    geod = Geod(ellps="WGS84")
    for i in (0, len(lat) // 2, len(lat) - 1):
        s, n = lat[i] - d / 2, lat[i] + d / 2
        w, e = lon[0] - d / 2, lon[0] + d / 2
        # edges along the parallels densified, so that geodesic edges follow them
        xs = np.linspace(w, e, 200)
        ref, _ = geod.polygon_area_perimeter(np.r_[xs, xs[::-1]], np.r_[np.full(200, s),
                                                                          np.full(200, n)])
        assert masks.cell_area_m2[i] == pytest.approx(abs(ref), rel=1e-9)
    ds = results.open_regions(demo_run)
    assert list(ds["region"].values) == masks.names
    np.testing.assert_array_equal(ds["mask"].sel(region="Tollan Bank").values,
                                  masks["Tollan Bank"])
    assert ds["cell_area"].attrs["units"] == "m2"


def test_regions_file_is_listed_in_the_manifest(demo_run):
    import json

    man = json.loads((demo_run / "euphotic_manifest.json").read_text())
    assert man["outputs"]["regions.nc"]["kind"] == "regions"
    assert man["outputs"]["regions.nc"]["bytes"] == (demo_run / "regions.nc").stat().st_size
