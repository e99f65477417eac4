"""Region masks (cell-centre rule), the packaged ocean mask, and regional totals arithmetic.

Polygon masks are compared with shapely's vectorised point-in-polygon test (shapely.contains_xy,
a general-purpose geometry library) on the same cell centres.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import shapely
import xarray as xr
from shapely.geometry import MultiPolygon, Polygon, box

from euphotic import aggregate
from euphotic.config import load_config
from euphotic.ocean import packaged_ocean_mask
from euphotic.regions import box_geometry, polygon_mask, regions_from_config


def _centres(res: float, lon0: float = -180.0):
    lat = np.arange(-90 + res / 2, 90, res)
    lon = np.arange(lon0 + res / 2, lon0 + 360, res)
    return lat, lon


def _shapely_mask(geom, lat, lon):
    lo, la = np.meshgrid(((lon + 180) % 360) - 180, lat)
    return shapely.contains_xy(geom, lo, la)


def test_polygon_mask_matches_shapely_on_cell_centres():
    lat, lon = _centres(0.5)
    poly = Polygon([(-40.2, 10.1), (-20.3, 12.7), (-15.1, 30.4), (-33.3, 41.9), (-45.6, 25.2)])
    np.testing.assert_array_equal(polygon_mask(poly, lat, lon), _shapely_mask(poly, lat, lon))


def test_box_crossing_antimeridian_on_both_longitude_conventions():
    geom = box_geometry(170.0, -10.0, -170.0, 10.0)  # RFC 7946 bbox order, west > east
    assert isinstance(geom, MultiPolygon)
    lat, lon = _centres(1.0)
    m = polygon_mask(geom, lat, lon)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    expect = (np.abs(la) < 10) & (np.abs(lo) > 170)  # centres are at .5, never on an edge
    np.testing.assert_array_equal(m, expect)
    assert m.sum() == 20 * 20
    # the same region on a 0..360 grid selects the same cells
    lat2, lon2 = _centres(1.0, lon0=0.0)
    m2 = polygon_mask(geom, lat2, lon2)
    la2, lo2 = np.meshgrid(lat2, lon2, indexing="ij")
    np.testing.assert_array_equal(m2, (np.abs(la2) < 10) & (lo2 > 170) & (lo2 < 190))


def test_geojson_antimeridian_split_multipolygon(tmp_path):
    # RFC 7946 section 3.1.9: a geometry crossing the antimeridian is cut into two parts
    gj = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {"label": "Dateline Strait"},
                "geometry": {
                    "type": "MultiPolygon",
                    "coordinates": [
                        [
                            [
                                [175.0, 50.0],
                                [180.0, 50.0],
                                [180.0, 55.0],
                                [175.0, 55.0],
                                [175.0, 50.0],
                            ]
                        ],
                        [
                            [
                                [-180.0, 50.0],
                                [-172.0, 50.0],
                                [-172.0, 55.0],
                                [-180.0, 55.0],
                                [-180.0, 50.0],
                            ]
                        ],
                    ],
                },
            }
        ],
    }
    (tmp_path / "r.geojson").write_text(json.dumps(gj))
    (region,) = regions_from_config(
        [{"geojson": "r.geojson", "name_property": "label"}], tmp_path, "t"
    )
    assert region.name == "Dateline Strait"
    lat, lon = _centres(0.25)
    m = region.mask(lat, lon)
    expect = _shapely_mask(MultiPolygon([box(175, 50, 180, 55), box(-180, 50, -172, 55)]), lat, lon)
    np.testing.assert_array_equal(m, expect)
    assert m.sum() == 20 * (20 + 32)  # 5 x 5 deg and 8 x 5 deg at 0.25 deg


def test_netcdf_mask_region(tmp_path):
    lat, lon = _centres(1.0)
    basin = np.zeros((lat.size, lon.size), "i2")
    basin[100:110, 50:60] = 3
    basin[0:5, :] = 7
    xr.Dataset(
        {"basin": (("lat", "lon"), basin[::-1])}, coords={"lat": lat[::-1], "lon": lon % 360}
    ).to_netcdf(tmp_path / "m.nc")
    (r,) = regions_from_config(
        [{"name": "B3", "mask": "m.nc", "variable": "basin", "value": 3}], tmp_path, "t"
    )
    np.testing.assert_array_equal(r.mask(lat, lon), basin == 3)


def test_config_region_errors(tmp_path):
    from euphotic.errors import ConfigError

    with pytest.raises(ConfigError, match="exactly one of"):
        regions_from_config([{"name": "x"}], tmp_path, "cfg.toml")
    with pytest.raises(ConfigError, match="unique"):
        regions_from_config(
            [{"name": "a", "box": [0, 0, 1, 1]}, {"name": "a", "box": [0, 0, 2, 2]}],
            tmp_path,
            "cfg.toml",
        )
    with pytest.raises(ConfigError, match="west, south, east, north"):
        regions_from_config([{"name": "a", "box": [0, 0, 1]}], tmp_path, "cfg.toml")


def test_packaged_ocean_mask_known_places():
    """General geography (from common knowledge, no source needed): open-ocean points are ocean,
    continental interiors are land."""
    lat = np.array([-30.5, 0.5, 23.5, 45.5])
    lon = np.array([-150.5, -30.5, 10.5, 90.5])
    m = packaged_ocean_mask(lat, lon)
    assert m[0, 0] and m[1, 1] and m[3, 0]  # South Pacific, equatorial Atlantic, North Pacific
    assert not m[2, 2] and not m[3, 3]  # Sahara, central Asia
    # about 70 % of the Earth's surface is ocean (handbook figure ~71 %); centre sampling of a
    # 1-degree grid with ice shelves counted as land gives a little less
    glat, glon = _centres(1.0)
    from euphotic.geo import cell_area

    area = cell_area(glat, glon)
    frac = (area * packaged_ocean_mask(glat, glon)).sum() / area.sum()
    assert 0.66 < frac < 0.73


def test_packaged_ocean_mask_cache(tmp_path, monkeypatch):
    """The cached mask of a grid is the streamed one; a damaged cache file is recomputed and
    replaced."""
    from euphotic import ocean

    glat, glon = _centres(2.0)
    monkeypatch.setenv("EUPHOTIC_CACHE_DIR", str(tmp_path))
    first = packaged_ocean_mask(glat, glon)
    cached = list(tmp_path.glob("ocean-mask-*.npy"))
    assert len(cached) == 1
    streamed = ocean._stream_mask(ocean._packaged_mask_path(), glat, ((glon + 180) % 360) - 180)
    np.testing.assert_array_equal(first, streamed)
    np.testing.assert_array_equal(packaged_ocean_mask(glat, glon), streamed)  # from the cache
    cached[0].write_bytes(b"not a numpy file")
    np.testing.assert_array_equal(packaged_ocean_mask(glat, glon), streamed)
    assert np.load(cached[0]).dtype == np.uint8  # rewritten
    assert not list(tmp_path.glob("*.tmp"))  # no temporary file left


def test_totals_arithmetic_hand_worked():
    """2 x 2 cells of 1e6 m2 each in a 30-day month, one cell never observed (hand-worked):
    rates 100, 200, 300 mg C m-2 d-1 -> integral 600e6 mg/d; observed 3e6 m2; mean 200;
    total 600e6 * 30 / 1e3 / 1e12 = 1.8e-5 Tg C; filled 200 * 4e6 * 30 / 1e15 = 2.4e-5 Tg C.
    A second, overlapping region holds only the top-left cell: total 100e6 * 30 / 1e15."""
    npp = xr.DataArray([[100.0, 200.0], [300.0, np.nan]], dims=("lat", "lon"))
    cov = xr.DataArray([[0.5, 0.5], [1.0, 0.0]], dims=("lat", "lon"))
    maps = aggregate.MonthlyMaps(
        month=np.datetime64("2024-04"), model="vgpm", npp=npp, coverage=cov, n_days=30
    )
    ocean = xr.DataArray(np.ones((2, 2), bool), dims=("lat", "lon"))
    bits = aggregate.region_bits([np.ones((2, 2), bool), np.array([[True, False], [False, False]])])
    z = aggregate.region_sums(maps, ["R", "corner"], bits, ocean, np.full(2, 1e6))
    row, corner = aggregate.finish_totals(z, np.asarray(z.sums.compute()))
    assert row["mean_npp_mgC_m-2_d-1"] == pytest.approx(200.0)
    assert row["observed_area_km2"] == pytest.approx(3.0)
    assert row["ocean_area_km2"] == pytest.approx(4.0)
    assert row["coverage_fraction"] == pytest.approx(0.5)
    assert row["total_TgC"] == pytest.approx(1.8e-5)
    assert row["total_filled_TgC"] == pytest.approx(2.4e-5)
    assert corner["total_TgC"] == pytest.approx(3.0e-6)
    assert corner["ocean_area_km2"] == pytest.approx(1.0)


def test_region_bits_any_number_overlapping():
    # 100 random overlapping masks (more than the 64 bits of one integer), all packed as bits
    rng = np.random.default_rng(3)
    masks = [rng.random((5, 7)) > 0.5 for _ in range(100)]
    bits = aggregate.region_bits(masks).planes
    assert bits.dtype == np.uint16 and bits.shape == (7, 5, 7)  # ceil(100 / 16) planes
    for r, m in enumerate(masks):
        plane = bits[r // 16]
        np.testing.assert_array_equal(((plane >> np.uint16(r % 16)) & 1).astype(bool), m)
    # the same planes read back through the Mapping, bits-only layout
    unpacked = aggregate.RegionMasks([str(r) for r in range(100)], bits)
    assert unpacked.bit_regions == tuple(range(100))
    for r, m in enumerate(masks):
        np.testing.assert_array_equal(unpacked[str(r)], m)


def test_region_sums_refuses_names_with_a_bare_array():
    # label planes read as bits would give wrong sums silently: refused instead
    npp = xr.DataArray(np.ones((2, 2)), dims=("lat", "lon"))
    maps = aggregate.MonthlyMaps(month=np.datetime64("2024-04"), model="vgpm", npp=npp,
                                 coverage=npp, n_days=30)
    masks = aggregate.RegionMasks.build([("a", np.eye(2, dtype=bool))])
    ocean = xr.DataArray(np.ones((2, 2), bool), dims=("lat", "lon"))
    with pytest.raises(TypeError, match="give the RegionMasks"):
        aggregate.region_sums(maps, ["a"], masks.planes, ocean, np.ones(2))
    z = aggregate.region_sums(maps, ["a"], masks, ocean, np.ones(2))
    np.testing.assert_array_equal(z.sums.compute(), [[2.0, 2.0, 2.0, 2.0]])


def test_demo_config_loads_all_region_kinds():
    cfg = load_config(Path(__file__).resolve().parents[1] / "configs" / "demo.toml")
    assert [r.name for r in cfg.regions] == [
        "Skerrow Shelf",
        "Outer Maren Gyre",
        "Tollan Bank",
        "Whole Maren Sea",
    ]


# --------------------------------------------------------------------------------------
# Many regions: label layers + packed bits, checked against plain boolean masks
# --------------------------------------------------------------------------------------


def _random_polygons(rng, n, lon0, lat0, size):
    """Convex hulls of 6 random points in boxes of ``size`` degrees: valid, overlapping."""
    from shapely.geometry import MultiPoint

    out = []
    for _ in range(n):
        x = lon0 + rng.uniform(0, 40)
        y = lat0 + rng.uniform(0, 30)
        pts = np.column_stack([x + rng.uniform(0, size, 6), y + rng.uniform(0, size, 6)])
        out.append(MultiPoint(pts).convex_hull)
    return out


def _reference_sums(masks, npp, cov, ocean, area_rows):
    """Per-region sums with one plain numpy boolean mask per region (independent of the
    label/bit machinery): ocean area, observed area, area integral, coverage area."""
    w = np.broadcast_to(area_rows[:, None], npp.shape) * ocean
    obs = np.isfinite(npp)
    out = []
    for m in masks:
        wm = w * m
        out.append([wm.sum(), (wm * obs).sum(), (wm * np.where(obs, npp, 0)).sum(),
                    (wm * np.nan_to_num(cov)).sum()])
    return np.array(out)


@pytest.fixture(scope="module")
def overlapping_case():
    """300 random overlapping polygons plus one box over them all on a 0.5-degree grid
    (lon -70..0, lat -30..30), their shapely ``contains_xy`` masks, random fields, and the
    per-region sums from plain numpy boolean masks."""
    rng = np.random.default_rng(20)
    lat = np.arange(-29.75, 30, 0.5)
    lon = np.arange(-69.75, 0, 0.5)
    polys = _random_polygons(rng, 300, -60.0, -20.0, 6.0) + [box(-62, -22, -10, 20)]
    names = [f"R{i}" for i in range(len(polys))]
    expect_masks = [_shapely_mask(g, lat, lon) for g in polys]
    npp = rng.uniform(0, 2000, (lat.size, lon.size))
    npp[rng.random(npp.shape) < 0.3] = np.nan
    cov = np.where(np.isfinite(npp), rng.uniform(0, 1, npp.shape), np.nan)
    ocean = rng.random(npp.shape) < 0.8
    area_rows = np.cos(np.deg2rad(lat)) * 3.0e9
    expected = _reference_sums(expect_masks, npp, cov, ocean, area_rows)
    return lat, lon, polys, names, expect_masks, (npp, cov, ocean, area_rows), expected


@pytest.mark.parametrize("max_layers", [0, 1, aggregate.MAX_LABEL_LAYERS, 50])
@pytest.mark.parametrize("backend", ["numpy", "dask"])
def test_many_overlapping_polygon_sums_match_plain_masks(overlapping_case, max_layers, backend):
    """Masks equal shapely ``contains_xy`` on the cell centres, and the regional sums equal
    per-region boolean-mask sums (float64; rel 1e-12 for summation order only). The layout
    (labels only, labels + bits, bits only) must not change a number."""
    import dask.array as da

    lat, lon, polys, names, expect_masks, fields, expected = overlapping_case
    npp, cov, ocean, area_rows = fields
    masks = aggregate.RegionMasks.build(
        list(zip(names, [polygon_mask(g, lat, lon) for g in polys], strict=True)),
        max_label_layers=max_layers,
    )
    assert masks.n_label_layers <= max_layers
    if max_layers == 0:
        assert masks.bit_regions == tuple(range(len(polys)))
    elif max_layers == 50:
        assert masks.bit_regions == ()  # random overlaps fit in a few layers
    else:  # labels and bits both in use
        assert masks.n_label_layers == max_layers and len(masks.bit_regions) > 16
    for n, m in zip(names, expect_masks, strict=True):
        np.testing.assert_array_equal(masks[n], m)

    def wrap(a):
        return xr.DataArray(da.from_array(a, chunks=(45, 50)) if backend == "dask" else a,
                            dims=("lat", "lon"))

    maps = aggregate.MonthlyMaps(month=np.datetime64("2025-04"), model="vgpm", npp=wrap(npp),
                                 coverage=wrap(cov), n_days=30)
    planes = masks.planes if backend == "numpy" else da.from_array(masks.planes,
                                                                    chunks=(-1, 30, 70))
    z = aggregate.region_sums(maps, masks, planes, wrap(ocean), area_rows)
    got = np.asarray(z.sums.compute())
    assert z.regions == names
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0)


def test_non_overlapping_regions_are_one_label_layer():
    """1,000 small non-overlapping boxes in a 40 x 25 grid plus a box over all of them: one
    layer of labels for the 1,000 and a second for the big box; no bits. Memory: two uint16
    planes, 4 bytes a cell (the old one-integer packing stopped at 64 regions)."""
    lat, lon = _centres(0.25)
    regions = [
        {"name": f"cell {i}-{j}", "box": [-50 + i, -10 + j, -49 + i, -9 + j]}
        for i in range(40) for j in range(25)
    ] + [{"name": "all", "box": [-50, -10, -10, 15]}]
    from euphotic.regions import region_masks

    masks = region_masks(regions_from_config(regions, Path("."), "t"), lat, lon)
    assert len(masks) == 1001
    assert masks.n_label_layers == 2 and masks.bit_regions == ()
    assert masks.planes.dtype == np.uint16
    assert masks.nbytes == 2 * 2 * lat.size * lon.size
    # each 1-degree box holds 4 x 4 centres at 0.25 degrees; the big box 160 x 100
    assert masks["cell 0-0"].sum() == 16 and masks["cell 39-24"].sum() == 16
    assert masks["all"].sum() == 160 * 100
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    np.testing.assert_array_equal(masks["cell 3-7"], (lo > -47) & (lo < -46) & (la > -3)
                                  & (la < -2))


def test_more_than_64_regions_load(tmp_path):
    """The config once stopped at 64 regions; 300 load and keep their order."""
    body = "[inputs.chl]\nfiles = 'x.nc'\n[inputs.par]\nfiles = 'x.nc'\n[inputs.sst]\nfiles = 'x.nc'\n"
    body += "".join(f"[[regions]]\nname = 'r{i}'\nbox = [{i % 180}, 0, {i % 180 + 1}, 1]\n"
                    for i in range(300))
    (tmp_path / "c.toml").write_text(body)
    cfg = load_config(tmp_path / "c.toml")
    assert [r.name for r in cfg.regions] == [f"r{i}" for i in range(300)]


def test_run_with_many_regions_parts_add_up_to_whole(tmp_path):
    """A run with 101 regions: a 10 x 10 partition of a box and the box itself. The parts'
    totals add up to the whole's (additivity of area integrals, rel 1e-12 for summation
    order), and every part has its own row."""
    import csv

    from euphotic.pipeline import run

    from ._grids import CHL_STD, PAR_STD, SST_STD, grid, run_config, write_field

    lat, lon = grid(0.0, 10.0, 0.0, 10.0, 0.25)
    rng = np.random.default_rng(7)
    shape = (lat.size, lon.size)
    chl = np.exp(rng.normal(-1, 1, shape))
    chl[rng.random(shape) < 0.2] = np.nan
    write_field(tmp_path / "chl" / "c.nc", "chl", CHL_STD, "mg m-3", chl, lat, lon,
                start="2024-03-01", end="2024-03-08")
    write_field(tmp_path / "par" / "p.nc", "par", PAR_STD, "einstein m-2 day-1",
                rng.uniform(5, 50, shape), lat, lon, start="2024-03-01", end="2024-03-08")
    write_field(tmp_path / "sst" / "s.nc", "sst", SST_STD, "degC", rng.uniform(0, 25, shape),
                lat, lon, start="2024-03-01", end="2024-03-08")
    parts = "".join(f"[[regions]]\nname = 'p{i}{j}'\nbox = [{i}, {j}, {i + 1}, {j + 1}]\n"
                    for i in range(10) for j in range(10))
    run_config(tmp_path / "run.toml", run='models = ["vgpm"]',
               regions=[("whole", [0, 0, 10, 10])], extra=parts)
    result = run(load_config(tmp_path / "run.toml"), progress=False)
    rows = {r["region"]: r for r in result.rows}  # full precision (the CSV rounds)
    assert len(rows) == 101
    with open(tmp_path / "out" / "regional_totals.csv") as fh:
        assert len(list(csv.DictReader(fh))) == 101
    whole = rows.pop("whole")
    for key in ("total_TgC", "ocean_area_km2", "observed_area_km2"):
        assert sum(float(r[key]) for r in rows.values()) == pytest.approx(float(whole[key]),
                                                                          rel=1e-12)
    assert float(whole["total_TgC"]) > 0


# --------------------------------------------------------------------------------------
# Invalid polygons, swapped boxes, feature names
# --------------------------------------------------------------------------------------


def _feature(coords, **props):
    return {"type": "Feature", "properties": props,
            "geometry": {"type": "Polygon", "coordinates": [coords]}}


_SQUARE = [[0, 0], [4, 0], [4, 4], [0, 4], [0, 0]]
_BOW_TIE = [[10, 10], [20, 20], [20, 10], [10, 20], [10, 10]]


def _geojson(tmp_path, feats, name="r.geojson"):
    (tmp_path / name).write_text(json.dumps({"type": "FeatureCollection", "features": feats}))
    return tmp_path / name


def test_bow_tie_polygon_is_an_error_naming_file_and_feature(tmp_path):
    """A self-intersecting ring (a "bow-tie"): shapely's is_valid is False and explain_validity
    says "Self-intersection[15 15]" (the crossing of the two diagonals, worked by hand). The
    error names the file, the feature's index and name, and shapely's reason; it is not
    repaired."""
    from shapely.validation import explain_validity

    from euphotic.errors import InputFileError

    path = _geojson(tmp_path, [_feature(_SQUARE, name="Fine"),
                               _feature(_BOW_TIE, name="Knot Reach")])
    assert explain_validity(Polygon(_BOW_TIE)) == "Self-intersection[15 15]"
    for item in ({"geojson": "r.geojson", "name_property": "name"},
                 {"geojson": "r.geojson", "name": "all"}):
        with pytest.raises(InputFileError) as err:
            regions_from_config([item], tmp_path, "cfg.toml")
        assert str(err.value) == (
            f"{path.resolve()}: feature 1 ('Knot Reach') is not a valid polygon: "
            "Self-intersection[15 15] (fix the polygon in the file, e.g. a self-intersecting "
            "ring)"
        )


def test_bow_tie_through_the_command_line(tmp_path):
    """Exit code 1, one line naming the file and the feature, no output folder content."""
    from click.testing import CliRunner

    from euphotic.cli import main

    from ._grids import box_run_config

    _geojson(tmp_path, [_feature(_BOW_TIE)], "bad.geojson")
    cfg = box_run_config(tmp_path / "run.toml", "Box", [0.0, 0.0, 4.0, 4.0])
    cfg.write_text(cfg.read_text() + '[[regions]]\nname = "Bad"\ngeojson = "bad.geojson"\n')
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 1
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert lines == [f"euphotic: error: {(tmp_path / 'bad.geojson').resolve()}: feature 0 is not a "
                     "valid polygon: Self-intersection[15 15] (fix the polygon in the file, e.g. "
                     "a self-intersecting ring)"]
    assert not (tmp_path / "out").exists()


def test_name_property_missing_or_repeated_names_the_feature(tmp_path):
    from euphotic.errors import InputFileError

    path = _geojson(tmp_path, [_feature(_SQUARE, label="A"), _feature(_SQUARE, other="x")])
    with pytest.raises(InputFileError) as err:
        regions_from_config([{"geojson": "r.geojson", "name_property": "label"}], tmp_path, "c")
    assert str(err.value) == (f"{path.resolve()}: feature 1 has no property 'label' "
                              "(`name_property` names every feature)")
    path = _geojson(tmp_path, [_feature(_SQUARE, label="A"), _feature(_SQUARE, label="B"),
                               _feature(_SQUARE, label="A")])
    with pytest.raises(InputFileError) as err:
        regions_from_config([{"geojson": "r.geojson", "name_property": "label"}], tmp_path, "c")
    assert str(err.value) == (f"{path.resolve()}: feature 2 has label 'A', already used by "
                              "feature 0: region names must be unique")


def test_box_spanning_most_of_the_globe_warns_swapped(tmp_path, caplog):
    """[10, 0, -10, 10] crosses the antimeridian and spans 340 degrees: a warning naming the
    region. [170, 0, -170, 10] spans 20 degrees across the antimeridian: no warning."""
    import logging

    with caplog.at_level(logging.WARNING, logger="euphotic"):
        regions_from_config([{"name": "Dateline", "box": [170, 0, -170, 10]}], tmp_path, "c")
        assert caplog.records == []
        (r,) = regions_from_config([{"name": "Backwards", "box": [10, 0, -10, 10]}],
                                   tmp_path, "c")
    assert [rec.getMessage() for rec in caplog.records] == [
        "c: [[regions]] #1: box of region 'Backwards' has west 10 > east -10, so it crosses "
        "the antimeridian and spans 340 degrees of longitude: probably west and east swapped"
    ]
    # the box is still taken as written (a warning, not an error)
    lat, lon = _centres(1.0)
    assert r.mask(lat, lon).sum() == 10 * 340


@pytest.mark.slow
def test_many_regions_benchmark_runs_tiny():
    """The benchmark script runs end to end on a 1-degree grid (figures only, no timing
    assertions); its previous-loop comparison reports the same sums."""
    import subprocess
    import sys

    root = Path(__file__).resolve().parents[1]
    res = subprocess.run(
        [sys.executable, str(root / "benchmarks" / "many_regions.py"), "--res", "1",
         "--repeats", "1", "--chunk", "60"],
        capture_output=True, text=True, timeout=300, check=False,
    )
    assert res.returncode == 0, res.stdout + res.stderr
    assert "1005 regions (1000 small non-overlapping + 5 large overlapping boxes)" in res.stdout
    for phrase in ("mask build:", "masks held:", "regional sums per month, 1005 regions:",
                   "previous per-region loop:", "(same sums: True)"):
        assert phrase in res.stdout


def test_figures_with_many_regions_stay_readable(tmp_path):
    """Hundreds of regions: maps are not outlined and the chart shows the largest 30 (the
    table keeps all). Checked on what was drawn: the title text and the number of bars."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from euphotic import figures

    rows = [{"region": f"r{i:03d}", "model": "vgpm", "month": "2024-03", "total_TgC": float(i),
             "total_filled_TgC": float(i)} for i in range(100)]
    captured = {}
    real_close = plt.close

    def keep(fig):
        captured["fig"] = fig

    plt.close = keep
    try:
        figures.totals_figure(rows, tmp_path / "t.png")
    finally:
        plt.close = real_close
    ax = captured["fig"].axes[0]
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert labels == [f"r{i:03d}" for i in range(70, 100)]  # the 30 largest, in table order
    assert "the 30 largest of 100 regions" in ax.get_title()
    real_close(captured["fig"])


# --------------------------------------------------------------------------------------------
# boxes as index ranges
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("lon0", [-180.0, 0.0])  # -180..180 and 0..360 grids
def test_box_window_matches_shapely_on_random_boxes(lon0):
    """Index-range boxes against shapely's point-in-polygon test of every cell centre (an
    outside reference), on 200 seeded random boxes, antimeridian crossings included. Box
    edges are whole degrees and centres are at .25/.75, so no centre lies on an edge."""
    import shapely

    from euphotic.regions import box_geometry, box_window

    lat = np.arange(-89.75, 90, 0.5)
    lon = np.arange(lon0 + 0.25, lon0 + 360, 0.5)
    glon, glat = np.meshgrid(lon, lat)
    rng = np.random.default_rng(7)
    for _ in range(200):
        s, n = np.sort(rng.choice(np.arange(-90, 91), 2, replace=False)).astype(float)
        w, e = rng.choice(np.arange(-180, 181), 2, replace=False).astype(float)
        g = box_geometry(w, s, e, n)
        ref = np.zeros(glon.shape, bool)
        for shift in (0.0, 360.0):
            ref |= shapely.contains_xy(g, glon - shift, glat)
        win = box_window(w, s, e, n, lat, lon)
        got = np.zeros(glon.shape, bool)
        got[win.rows, win.cols] = win.mask
        np.testing.assert_array_equal(got, ref, err_msg=f"box {[w, s, e, n]}")


def test_box_edges_are_half_open_so_neighbours_tile():
    """This tool's rule (README "Regions"): south and west edges in, north and east out, so
    two boxes sharing an edge never count a cell twice; north = 90 takes the top row."""
    from euphotic.regions import box_window

    lat = np.arange(-90.0, 90.0, 1.0)  # centres exactly on whole degrees: on the edges
    lon = np.arange(-180.0, 180.0, 1.0)

    def cells(*b):
        w = box_window(*b, lat, lon)
        m = np.zeros((len(lat), len(lon)), bool)
        m[w.rows, w.cols] = w.mask
        return m

    a, b = cells(-10, -5, 0, 5), cells(0, -5, 10, 5)
    assert not (a & b).any()
    np.testing.assert_array_equal(a | b, cells(-10, -5, 10, 5))
    assert cells(-10, -5, 10, 5).sum() == 20 * 10
    assert cells(-180, 80, 180, 90)[-1].all()  # whole globe in longitude, top row in
    assert cells(170, 0, -170, 1).sum() == 20  # across the antimeridian


@pytest.mark.parametrize("lat_step, lon0", [(-1.0, 0.0), (-0.5, -180.0), (1 / 24, -180.0)])
def test_box_window_matches_polygon_path_on_descending_and_fine_grids(lat_step, lon0):
    """Index-range boxes against the polygon path (rasterio burning the box polygon, itself
    checked against shapely above) on descending-latitude, 0..360 and 1/24-degree grids.
    Centres sit half a cell off whole degrees, so no centre lies on a box edge (on an edge the
    two rules differ by design: boxes are half-open, see the test above)."""
    from euphotic.regions import box_window

    step = abs(lat_step)
    lat = np.arange(90 - step / 2, -90, -step) if lat_step < 0 else np.arange(
        -90 + step / 2, 90, step)
    lon = np.arange(lon0 + step / 2, lon0 + 360, step)
    if step < 0.1:  # the fine grid: a band of rows keeps the test light
        lat = lat[(lat > -12) & (lat < 12)]
    rng = np.random.default_rng(11)
    for _ in range(40 if step >= 0.5 else 8):
        s, n = np.sort(rng.choice(np.arange(-90, 91), 2, replace=False)).astype(float)
        w, e = rng.choice(np.arange(-180, 181), 2, replace=False).astype(float)
        win = box_window(w, s, e, n, lat, lon)
        got = np.zeros((len(lat), len(lon)), bool)
        got[win.rows, win.cols] = win.mask
        np.testing.assert_array_equal(got, polygon_mask(box_geometry(w, s, e, n), lat, lon),
                                      err_msg=f"box {[w, s, e, n]}")


@pytest.mark.parametrize("n_regions", [None, 6, 2])  # none given; honest; too few (more come)
def test_planes_are_the_same_with_or_without_the_number_of_regions(n_regions):
    """Masks built into one zeroed buffer (the number of regions known up front) give the
    planes numpy's stack of separately built planes gives (the reference); more regions than
    ``n_regions`` said still load. Each mask reads back exactly."""
    rng = np.random.default_rng(11)
    masks = [(f"r{i}", rng.random((6, 9)) > 0.6) for i in range(6)]
    ref = aggregate.RegionMasks.build(iter(masks), max_label_layers=2)  # no length: stacked
    got = aggregate.RegionMasks.build(iter(masks), n_regions=n_regions, max_label_layers=2)
    # the integer type follows n_regions; the values (labels, bits) are the same
    np.testing.assert_array_equal(got.planes, ref.planes.astype(got.planes.dtype))
    assert (got.n_label_layers, got.bit_regions) == (ref.n_label_layers, ref.bit_regions)
    for name, m in masks:
        np.testing.assert_array_equal(got[name], m)
