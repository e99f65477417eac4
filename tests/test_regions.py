"""Region masks (cell-centre rule), the packaged ocean mask, and regional totals arithmetic.

Polygon masks are compared with shapely's vectorised point-in-polygon test (shapely.contains_xy,
a general-purpose geometry library) on the same cell centres.
"""

from __future__ import annotations

import json

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


def test_region_bits_many_overlapping():
    rng = np.random.default_rng(3)
    masks = [rng.random((5, 7)) > 0.5 for _ in range(40)]
    bits = aggregate.region_bits(masks)
    assert bits.dtype == np.uint64
    for r, m in enumerate(masks):
        np.testing.assert_array_equal(((bits >> np.uint64(r)) & np.uint64(1)).astype(bool), m)


def test_demo_config_loads_all_region_kinds():
    from pathlib import Path

    cfg = load_config(Path(__file__).resolve().parents[1] / "configs" / "demo.toml")
    assert [r.name for r in cfg.regions] == [
        "Skerrow Shelf",
        "Outer Maren Gyre",
        "Tollan Bank",
        "Whole Maren Sea",
    ]
