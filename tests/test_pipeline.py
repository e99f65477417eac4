"""End-to-end behaviour of a run: compositing, polar night, totals, laziness, atomic outputs.

Expected values come from the published VGPM equations (Behrenfeld & Falkowski 1997,
Limnol. Oceanogr. 42:1-20, eqs. 10-11; Morel & Berthon 1989 for Z_eu), written out here
independently of the package, and from hand arithmetic stated beside each check.
"""

from __future__ import annotations

import csv
from pathlib import Path

import dask
import numpy as np
import pytest
import xarray as xr

from euphotic import aggregate
from euphotic.config import load_config
from euphotic.models import get_month_block, vgpm
from euphotic.outputs import CAUTION, TOTALS_COLUMNS
from euphotic.pipeline import prepare, run

from ._grids import CHL_STD, PAR_STD, SST_STD, box_run_config, grid, write_field
from .conftest import folder_bytes


def vgpm_reference(chl: float, par: float, sst: float, dl: float) -> float:
    """VGPM written from the paper: Behrenfeld & Falkowski (1997) eq. 10 and 11, Z_eu from
    Morel & Berthon (1989) (C_tot = 38.0 C^0.425 / 40.2 C^0.507; Z_eu = 568.2 C_tot^-0.746,
    or 200 C_tot^-0.293 beyond 102 m)."""
    c = [1.2956, 2.749e-1, 6.17e-2, -2.05e-2, 2.462e-3, -1.348e-4, 3.4132e-6, -3.27e-8]
    pb = 1.13 if sst < -1 else 4.0 if sst > 28.5 else sum(ck * sst**k for k, ck in enumerate(c))
    ctot = 38.0 * chl**0.425 if chl < 1 else 40.2 * chl**0.507
    zeu = 568.2 * ctot**-0.746
    if zeu > 102:
        zeu = 200.0 * ctot**-0.293
    return 0.66125 * pb * par / (par + 4.1) * zeu * chl * dl


# --------------------------------------------------------------------------------------------
# an equatorial test case where day length is exactly 12 h every day (CBM model, geometric
# horizon: at latitude 0 the arccos argument is 0 for any declination -> 24 - 24/pi * pi/2)
# --------------------------------------------------------------------------------------------


def _equator_case(tmp: Path, *, straddle=True) -> Path:
    lat, lon = grid(-1.0, 1.0, 10.0, 12.0, 0.5)  # 4 x 4 cells, centres +-0.25 and +-0.75
    # but keep day length ~12 h: |lat| <= 0.75 deg gives 12 h +- 0.8 min; the hand values below
    # use the package's day length for those latitudes, so only the compositing is under test.
    shape = (len(lat), len(lon))
    # chlorophyll: two 8-day composites, 17-24 Jan (chl 0.2) and 25 Jan - 1 Feb (chl 1.0),
    # dated by ACDD attributes; the second straddles the month boundary (7 days Jan, 1 day Feb)
    write_field(
        tmp / "chl" / "c1.nc",
        "chl",
        CHL_STD,
        "mg m-3",
        np.full(shape, 0.2),
        lat,
        lon,
        start="2024-01-17",
        end="2024-01-24",
    )
    if straddle:
        write_field(
            tmp / "chl" / "c2.nc",
            "chl",
            CHL_STD,
            "mg m-3",
            np.full(shape, 1.0),
            lat,
            lon,
            start="2024-01-25T00:00:00Z",
            end="2024-02-02T00:00:00Z",
        )
    # PAR and SST as monthly means (time bounds), covering Jan and Feb
    for m, (a, b) in enumerate((("2024-01-01", "2024-02-01"), ("2024-02-01", "2024-03-01"))):
        write_field(
            tmp / "par" / f"p{m}.nc",
            "par",
            PAR_STD,
            "einstein m-2 day-1",
            np.full(shape, 40.0),
            lat,
            lon,
            time_bounds=(a, b),
        )
        write_field(
            tmp / "sst" / f"s{m}.nc",
            "sst",
            SST_STD,
            "degC",
            np.full(shape, 20.0),
            lat,
            lon,
            time_bounds=(a, b),
        )
    return box_run_config(tmp / "run.toml", "All", [10.0, -1.0, 12.0, 1.0], models='"vgpm"')


def test_eight_day_composite_straddling_month_boundary(tmp_path):
    cfg = load_config(_equator_case(tmp_path))
    result = run(cfg, progress=False)
    jan = xr.open_dataset(tmp_path / "out" / "npp_vgpm_2024-01.nc")
    feb = xr.open_dataset(tmp_path / "out" / "npp_vgpm_2024-02.nc")
    lat = jan["lat"].values
    from euphotic.geo import day_length

    for i, la in enumerate(lat):
        jan_days = np.arange(np.datetime64("2024-01-17"), np.datetime64("2024-02-01"))
        dls = day_length(la, jan_days)
        # 8 days at chl 0.2 (17-24 Jan) and 7 days at chl 1.0 (25-31 Jan): mean over 15 days
        rates = [
            vgpm_reference(0.2 if d < np.datetime64("2024-01-25") else 1.0, 40.0, 20.0, dl)
            for d, dl in zip(jan_days, dls, strict=True)
        ]
        np.testing.assert_allclose(
            jan["npp"].values[0, i], np.mean(rates), rtol=1e-6
        )  # float32 store
        feb_rate = vgpm_reference(1.0, 40.0, 20.0, float(day_length(la, "2024-02-01")))
        np.testing.assert_allclose(feb["npp"].values[0, i], feb_rate, rtol=1e-6)
    # coverage: 15 of 31 days in January, 1 of 29 days in February 2024 (leap year)
    np.testing.assert_allclose(jan["coverage"].values, 15 / 31, rtol=1e-6)
    np.testing.assert_allclose(feb["coverage"].values, 1 / 29, rtol=1e-6)

    # totals: integral of the monthly mean map times the days of the month, in Tg C
    rows = {r["month"]: r for r in result.rows}
    from euphotic.geo import cell_area

    area = cell_area(jan["lat"].values, jan["lon"].values)
    expect = float((jan["npp"].values[0].astype(np.float64) * area).sum()) * 31 / 1e3 / 1e12
    np.testing.assert_allclose(rows["2024-01"]["total_TgC"], expect, rtol=1e-6)
    np.testing.assert_allclose(rows["2024-01"]["ocean_area_km2"], area.sum() / 1e6, rtol=1e-12)
    np.testing.assert_allclose(rows["2024-01"]["coverage_fraction"], 15 / 31, rtol=1e-6)


@pytest.mark.parametrize("kernel", ["compiled", "numpy"])
@pytest.mark.parametrize("chl_days", [31, 10])
def test_polar_night_counts_as_zero_production(tmp_path, monkeypatch, kernel, chl_days):
    """At 80N in December the sun does not rise (day length 0): NPP is 0 and the day counts as
    observed even where chlorophyll is missing, and even on days with no chlorophyll file."""
    monkeypatch.setenv("EUPHOTIC_KERNEL", kernel)
    lat, lon = grid(78.0, 82.0, 0.0, 4.0, 1.0)
    shape = (len(lat), len(lon))
    chl = np.full(shape, np.nan)  # no chlorophyll at all (no light to see it by)
    for d in range(1, chl_days + 1):
        day = f"2023-12-{d:02d}"
        write_field(
            tmp_path / "chl" / f"c{d}.nc",
            "chl",
            CHL_STD,
            "mg m-3",
            chl,
            lat,
            lon,
            start=day,
            end=day,
        )
    write_field(
        tmp_path / "par" / "p.nc",
        "par",
        PAR_STD,
        "einstein m-2 day-1",
        np.zeros(shape),
        lat,
        lon,
        time_bounds=("2023-12-01", "2024-01-01"),
    )
    write_field(
        tmp_path / "sst" / "s.nc",
        "sst",
        SST_STD,
        "degC",
        np.full(shape, -1.5),
        lat,
        lon,
        time_bounds=("2023-12-01", "2024-01-01"),
    )
    cfg = box_run_config(tmp_path / "run.toml", "Arctic box", [0.0, 78.0, 4.0, 82.0])
    result = run(load_config(cfg), progress=False)
    ds = xr.open_dataset(tmp_path / "out" / "npp_vgpm_2023-12.nc")
    assert np.all(ds["npp"].values == 0.0)
    assert np.all(ds["coverage"].values == 1.0)
    (row,) = result.rows
    assert row["total_TgC"] == 0.0 and row["coverage_fraction"] == pytest.approx(1.0)
    assert row["observed_area_km2"] == pytest.approx(row["ocean_area_km2"])


def test_building_the_graph_computes_nothing(tmp_path, no_compute):
    cfg = load_config(_equator_case(tmp_path))
    with no_compute:
        prep = prepare(cfg)
        maps = aggregate.monthly_npp(
            vgpm, "vgpm", prep.months[0], chl=prep.chl, par=prep.par, sst=prep.sst, ocean=prep.ocean
        )
        bits = aggregate.region_bits([np.ones(prep.ocean.shape, bool)])
        sums = aggregate.region_sums(maps, ["All"], bits, prep.ocean, prep.area_rows_m2)
        assert isinstance(maps.npp.data, dask.array.Array)
        assert isinstance(sums.sums, dask.array.Array)
    with pytest.raises(AssertionError, match="computed early"), no_compute:
        maps.npp.compute()  # the guard itself works


def test_failed_run_leaves_no_file_and_keeps_old_results(tmp_path, monkeypatch):
    cfg = load_config(_equator_case(tmp_path))
    run(cfg, progress=False)
    out = tmp_path / "out"
    good = (out / "npp_vgpm_2024-01.nc").read_bytes()
    good_csv = (out / "regional_totals.csv").read_text()

    from euphotic.models import get_model

    def broken(*args, **kwargs):
        raise RuntimeError("disk on fire")

    model = get_model("vgpm")  # its compiled monthly pass and its block kernel both fail
    monkeypatch.setattr(model, "accumulate", broken)
    monkeypatch.setattr(model, "block", broken)
    with pytest.raises(RuntimeError, match="disk on fire"):
        run(cfg, progress=False, force=True)
    assert (out / "npp_vgpm_2024-01.nc").read_bytes() == good
    assert (out / "regional_totals.csv").read_text() == good_csv
    assert not [p for p in out.iterdir() if ".part-" in p.name]


@pytest.mark.parametrize("per", [0, 2])
def test_months_computed_in_batches_match_one_graph(tmp_path, per):
    """`months_per_compute` only changes how many months each computed graph holds: one
    month at a time (the default), two, or all (0) give the same files and totals (January and
    February of the equator case, whose composite straddles the boundary)."""
    cfg = load_config(_equator_case(tmp_path))
    one = run(cfg, progress=False)
    cfg.months_per_compute = per
    cfg.output_dir = tmp_path / f"per{per}"
    other = run(cfg, progress=False)
    assert [p.name for p in one.maps] == [p.name for p in other.maps] == [
        "npp_vgpm_2024-01.nc", "npp_vgpm_2024-02.nc"]
    for a, b in zip(one.maps, other.maps, strict=True):
        with xr.open_dataset(a) as x, xr.open_dataset(b) as y:
            np.testing.assert_array_equal(x["npp"].values, y["npp"].values)
            np.testing.assert_array_equal(x["coverage"].values, y["coverage"].values)
    assert one.totals_csv.read_text() == other.totals_csv.read_text()


def test_failure_in_a_later_batch_puts_no_month_in_place(tmp_path, monkeypatch):
    """January is computed first, then February fails: January's finished file is not put in
    place either, the old results stay, and no temporary file is left."""
    from euphotic import pipeline

    cfg = load_config(_equator_case(tmp_path))
    run(cfg, progress=False)
    out = tmp_path / "out"
    before = folder_bytes(out)
    real, calls = pipeline._compute, []

    def second_fails(objs, **kw):
        calls.append(1)
        if len(calls) == 2:
            raise RuntimeError("node lost")
        return real(objs, **kw)

    monkeypatch.setattr(pipeline, "_compute", second_fails)
    (out / "npp_vgpm_2024-01.nc").unlink()  # a month with no earlier result
    with pytest.raises(RuntimeError, match="node lost"):
        run(cfg, progress=False, force=True)
    assert folder_bytes(out) == {k: v for k, v in before.items() if k != "npp_vgpm_2024-01.nc"}


def test_demo_run_end_to_end(demo_run):
    """The bundled demo (run once per session by the ``demo_run`` fixture, through the CLI):
    the totals table has the promised rows, columns and units."""
    tmp_path = demo_run
    root = Path(__file__).resolve().parents[1]
    with open(tmp_path / "regional_totals.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == TOTALS_COLUMNS
    cfg = load_config(root / "configs" / "demo.toml")
    assert len(rows) == len(cfg.regions) * len(cfg.models)  # one month
    for r in rows:
        assert r["month"] == "2025-04"
        assert 0 < float(r["coverage_fraction"]) <= 1
        assert float(r["observed_area_km2"]) <= float(r["ocean_area_km2"]) * (1 + 1e-9)
        # typical open-ocean to coastal spring rates are 1e2-1e4 mg C m-2 d-1 (common practice)
        assert 50 < float(r["mean_npp_mgC_m-2_d-1"]) < 10000
        assert float(r["total_TgC"]) > 0
    ds = xr.open_dataset(tmp_path / "npp_vgpm_2025-04.nc")
    assert ds["npp"].attrs["units"] == "mg m-2 d-1"
    assert ds["npp"].attrs["cell_methods"] == "time: mean"
    assert ds["npp"].encoding["dtype"] == np.float32
    for key in (
        "title",
        "summary",
        "time_coverage_start",
        "time_coverage_end",
        "history",
        "references",
        "model",
        "model_citation",
        "geospatial_lat_min",
        "product_version",
    ):
        assert ds.attrs[key], key
    assert CAUTION in ds.attrs["summary"]
    assert ds.attrs["time_coverage_start"] == "2025-04-01T00:00:00Z"  # ACDD: ISO 8601 with time zone
    cov = ds["coverage"].values
    assert np.nanmin(cov) >= 0 and np.nanmax(cov) <= 1
    # figures were drawn and are not blank
    from matplotlib.image import imread

    img = imread(tmp_path / "npp_vgpm_2025-04.png")
    assert img.shape[0] > 300 and img[..., :3].std() > 0.05


@pytest.mark.slow
def test_local_cluster_gives_identical_results(tmp_path):
    """A 2-process dask.distributed LocalCluster reproduces the threaded run bit for bit."""
    root = Path(__file__).resolve().parents[1]
    cfg = load_config(root / "configs" / "demo.toml")
    cfg.figures = False
    cfg.models = ["vgpm"]
    cfg.output_dir = tmp_path / "threads"
    a = run(cfg, progress=False)
    cfg.output_dir = tmp_path / "cluster"
    b = run(cfg, progress=False, workers=2)
    for fa, fb in zip(a.maps, b.maps, strict=True):
        with xr.open_dataset(fa) as x, xr.open_dataset(fb) as y:
            np.testing.assert_array_equal(x["npp"].values, y["npp"].values)
            np.testing.assert_array_equal(x["coverage"].values, y["coverage"].values)
    assert (tmp_path / "threads" / "regional_totals.csv").read_text() == (
        tmp_path / "cluster" / "regional_totals.csv"
    ).read_text()


def test_zarr_output_matches_netcdf(tmp_path):
    root = Path(__file__).resolve().parents[1]
    cfg = load_config(root / "configs" / "demo.toml")
    cfg.figures = False
    cfg.models = ["vgpm"]
    cfg.output_dir = tmp_path / "nc"
    a = run(cfg, progress=False)
    cfg.output_dir = tmp_path / "zarr"
    cfg.output_format = "zarr"
    b = run(cfg, progress=False)
    assert b.maps[0].suffix == ".zarr" and b.maps[0].is_dir()
    with xr.open_dataset(a.maps[0]) as x, xr.open_zarr(b.maps[0]) as y:
        np.testing.assert_array_equal(x["npp"].values, y["npp"].values)
        assert y["npp"].attrs["units"] == "mg m-2 d-1"
    assert not [p for p in (tmp_path / "zarr").iterdir() if ".part-" in p.name]


def test_fused_monthly_pass_matches_model_then_mean(tmp_path, monkeypatch):
    """The compiled fused pass gives the same monthly map as applying the numpy model formula
    day by day and taking xarray's mean (float32 storage: rtol 1e-6)."""
    root = Path(__file__).resolve().parents[1]
    cfg = load_config(root / "configs" / "demo.toml")
    cfg.figures = False
    cfg.output_dir = tmp_path / "fused"
    a = run(cfg, progress=False)
    monkeypatch.setenv("EUPHOTIC_KERNEL", "numpy")
    cfg.output_dir = tmp_path / "numpy"
    b = run(cfg, progress=False)
    for fa, fb in zip(a.maps, b.maps, strict=True):
        with xr.open_dataset(fa) as x, xr.open_dataset(fb) as y:
            np.testing.assert_allclose(x["npp"].values, y["npp"].values, rtol=1e-6)
            np.testing.assert_array_equal(x["coverage"].values, y["coverage"].values)
    for ra, rb in zip(a.rows, b.rows, strict=True):
        assert ra["total_TgC"] == pytest.approx(rb["total_TgC"], rel=1e-6)


@pytest.mark.slow
def test_external_scheduler_address(tmp_path):
    """`--scheduler ADDRESS`: the CLI connects to a scheduler it did not start (here one started
    by distributed's own LocalCluster in this test) and gives the threaded run's numbers."""
    from click.testing import CliRunner
    from distributed import LocalCluster

    from euphotic.cli import main

    root = Path(__file__).resolve().parents[1]
    demo = str(root / "configs" / "demo.toml")
    assert CliRunner().invoke(main, ["run", demo, "-o", str(tmp_path / "t"), "-q", "--no-figures"]).exit_code == 0
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=True, dashboard_address=None) as cluster:
        res = CliRunner().invoke(
            main, ["run", demo, "-o", str(tmp_path / "s"), "-q", "--no-figures", "--scheduler", cluster.scheduler_address]
        )
    assert res.exit_code == 0, res.output
    assert (tmp_path / "t" / "regional_totals.csv").read_text() == (tmp_path / "s" / "regional_totals.csv").read_text()


def test_fused_chain_with_several_days_per_chunk_matches_day_by_day():
    """The fused pass chains the day chunks of each block, whatever their length: inputs held
    as 7-day dask chunks with gaps give the same monthly map as the model applied day by day
    (numpy VGPM formula, then xarray's mean); the chain has one accumulator task per block and
    day chunk."""
    rng = np.random.default_rng(11)
    lat, lon = np.linspace(-60, 60, 9), np.linspace(0, 40, 11)
    days = np.arange(np.datetime64("2024-06-01"), np.datetime64("2024-07-01"))
    shape = (len(days), len(lat), len(lon))

    def field(lo, hi, gaps):
        v = rng.uniform(lo, hi, shape)
        v[rng.random(shape) < gaps] = np.nan
        return xr.DataArray(
            dask.array.from_array(v, chunks=(7, 4, 5)), dims=("time", "lat", "lon"),
            coords={"lat": lat, "lon": lon, "period_start": ("time", days.astype("datetime64[ns]")),
                    "period_end": ("time", (days + 1).astype("datetime64[ns]"))},
        )

    chl, par, sst = field(0.05, 5.0, 0.3), field(1.0, 60.0, 0.05), field(-2.0, 30.0, 0.05)
    ocean = xr.DataArray(rng.random((9, 11)) > 0.2, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    month = np.datetime64("2024-06")
    fused = aggregate.monthly_npp(vgpm, "vgpm", month, chl=chl, par=par, sst=sst, ocean=ocean,
                                  month_block=get_month_block("vgpm"))
    plain = aggregate.monthly_npp(vgpm, "vgpm", month, chl=chl, par=par, sst=sst, ocean=ocean)
    steps = [k for k in dict(fused.npp.data.__dask_graph__()) if str(k[0]).startswith("month-step")]
    assert len(steps) == 5 * 3 * 3  # 30 days in 7-day chunks (5) x 3 x 3 spatial blocks
    with dask.config.set(scheduler="threads"):
        np.testing.assert_allclose(fused.npp.values, plain.npp.values, rtol=1e-6)
        np.testing.assert_array_equal(fused.coverage.values, plain.coverage.values)


def test_cluster_masks_are_sent_to_workers_not_embedded_in_the_graph():
    """With a dask.distributed client the ocean mask and region bits are scattered to the
    workers once: the graph holds a reference, not the array (a large array in the graph makes
    distributed warn and ship it through the scheduler). Without a client they are held once
    in the graph."""
    import pickle

    from distributed import Client, LocalCluster

    from euphotic.pipeline import _grid_masks

    root = Path(__file__).resolve().parents[1]
    prep = prepare(load_config(root / "configs" / "demo.toml"))
    size = prep.ocean.values.nbytes
    local_ocean, local_bits = _grid_masks(prep, None)
    assert len(pickle.dumps(dict(local_ocean.data.__dask_graph__()))) >= size
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        ocean_mask, bits = _grid_masks(prep, client)
        for arr, full in ((ocean_mask.data, prep.ocean.values), (bits, prep.region_masks.bits)):
            assert len(pickle.dumps(dict(arr.__dask_graph__()))) < size / 2
            np.testing.assert_array_equal(arr.compute(), full)


def test_low_coverage_is_flagged_by_the_run_rule(tmp_path):
    """January of the equator case has chlorophyll on 15 of its 31 days (17-31 Jan), so its
    coverage is 15/31 = 0.484 (hand arithmetic): below the default min_coverage 0.5 it is
    flagged low_coverage (the numbers are kept); with min_coverage = 0.4 it is not."""
    cfg = load_config(_equator_case(tmp_path))
    result = run(cfg, progress=False)
    jan = [r for r in result.rows if r["month"] == "2024-01"][0]
    assert jan["coverage_fraction"] == pytest.approx(15 / 31)
    assert jan["flag"] == "low_coverage" and jan["total_TgC"] > 0
    cfg.min_coverage = 0.4
    cfg.output_dir = tmp_path / "lenient"
    jan = [r for r in run(cfg, progress=False).rows if r["month"] == "2024-01"][0]
    assert jan["flag"] == ""


def test_min_coverage_must_be_a_fraction(tmp_path):
    from euphotic.errors import ConfigError

    path = _equator_case(tmp_path)
    path.write_text(path.read_text().replace("[run]\n", "[run]\nmin_coverage = 2\n"))
    with pytest.raises(ConfigError, match=r"`min_coverage` must be a fraction between 0 and 1, "
                                          r"not 2"):
        load_config(path)


def test_empty_region_months_are_warned_about_once_per_region(caplog):
    """Seven empty months of two models give one warning naming them, not fourteen."""
    import logging

    from euphotic import aggregate

    found = [(aggregate.FLAG_NO_DATA, "Bank", f"2016-{m:02d}", model, 6.0e10)
             for m in range(1, 8) for model in ("vgpm", "eppley_vgpm")]
    with caplog.at_level(logging.WARNING, logger="euphotic"):
        aggregate.warn_empty_regions(found)
    assert [r.getMessage() for r in caplog.records] == [
        "region 'Bank', 7 month(s) (2016-01, 2016-02, 2016-03, 2016-04, 2016-05, 2016-06 and "
        "1 more), model(s) vgpm, eppley_vgpm: no valid estimate on the region's 60000 km2 of "
        "ocean; mean and totals left empty (flag no_valid_data)"]
