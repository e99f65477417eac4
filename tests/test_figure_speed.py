"""Large grids in the figure set: period means in one computation, drawn at most
``MAX_CELLS_PER_PIXEL`` cells per PNG pixel as area-weighted block means.

Independent references: the block means are worked out with plain numpy loops over the
blocks (weights are the cells' areas); the area of a block of whole cells is the spherical
zone formula R^2 dlon (sin lat2 - sin lat1) with the authalic radius 6,371,007.2 m
(Snyder 1987, USGS PP 1395, eq. for the area of a zone; radius from NGA TR8350.2); the
number of pixels across a panel is its width in inches x 300 dpi (the figure's width in mm /
25.4 minus the 0.6 inch of margins the layout keeps, this tool's layout).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from dask.callbacks import Callback

from euphotic import figureset
from euphotic.geo import cell_area

from .test_figureset import _synthetic_maps

AUTHALIC_RADIUS_M = 6371007.2  # NGA TR8350.2 authalic sphere (as written in the source)


def _loop_block_mean(v, w, f):
    """The block means by hand: a loop over the blocks, NaN cells left out."""
    ny, nx = v.shape
    out = np.full((math.ceil(ny / f), math.ceil(nx / f)), np.nan)
    wsum = np.zeros_like(out)
    for i in range(out.shape[0]):
        for j in range(out.shape[1]):
            bv = v[i * f:(i + 1) * f, j * f:(j + 1) * f]
            bw = w[i * f:(i + 1) * f, j * f:(j + 1) * f]
            ok = np.isfinite(bv)
            wsum[i, j] = bw[ok].sum()
            if ok.any():
                out[i, j] = (bv[ok] * bw[ok]).sum() / bw[ok].sum()
    return out, wsum


def test_block_mean_is_the_area_weighted_mean_of_the_cells_with_a_value():
    rng = np.random.default_rng(8)
    lat, lon = np.arange(-4.5, 5.5, 1.0), np.arange(100.5, 114.5, 1.0)  # 10 x 14 cells
    v = rng.uniform(10, 1000, (10, 14))  # invented rates
    v[rng.random((10, 14)) < 0.3] = np.nan
    v[0:3, 0:3] = np.nan  # one block without any value
    w = cell_area(lat, lon)
    mean, weight = figureset.block_mean(v, w, 3)
    want, wsum = _loop_block_mean(v, w, 3)
    assert mean.shape == (4, 5)  # the last row and column of blocks hold what is left over
    np.testing.assert_allclose(mean, want, rtol=1e-12)
    np.testing.assert_allclose(weight, wsum, rtol=1e-12)
    assert np.isnan(mean[0, 0]) and weight[0, 0] == 0.0
    # a block of whole cells with every value: its weight is the area of the 3 x 3 degree
    # block on the sphere, R^2 dlon (sin lat2 - sin lat1) (worked out here, not from geo)
    full, area = figureset.block_mean(np.ones((10, 14)), w, 3)
    band = AUTHALIC_RADIUS_M ** 2 * np.deg2rad(3.0) * (np.sin(np.deg2rad(-2.0))
                                                       - np.sin(np.deg2rad(-5.0)))
    assert area[0, 0] == pytest.approx(band, rel=1e-12)
    assert (full == 1.0).all()
    # block means of block means (with their weights) are the block means of the cells
    m2, w2 = figureset.block_mean(*figureset.block_mean(v[:, :12], w[:, :12], 2), 3)
    np.testing.assert_allclose(m2, _loop_block_mean(v[:, :12], w[:, :12], 6)[0], rtol=1e-12)


def _wide_maps():
    """A 60 x 4800 cell grid (0.01 degree, invented values), wider than 2 cells a pixel of a
    two-column panel: rates rising west to east, a land block and a half-land block."""
    lat = 40.005 + 0.01 * np.arange(60)
    lon = -30.0 + 0.005 + 0.01 * np.arange(4800)
    ny, nx = len(lat), len(lon)
    base = np.tile(np.linspace(50.0, 800.0, nx), (ny, 1))
    later = base * 1.2
    cov = np.full((ny, nx), 0.9)
    for a in (base, later, cov):
        a[:, :100] = np.nan  # land: whole blocks
        a[:, 201] = np.nan  # land in one column of a block of two
    cov[:, 300:400] = 0.2  # low coverage
    return _synthetic_maps(lat, lon, years=(2020, 2021), npp={"vgpm": {2020: base, 2021: later}},
                           cov={"vgpm": {2020: cov, 2021: cov}}), base, later, cov


def test_a_large_grid_is_drawn_as_block_means():
    import matplotlib.pyplot as plt

    maps, base, later, cov = _wide_maps()
    # two-column figure, one panel: (180 / 25.4 - 0.6) in x 300 dpi = 1946 px across; 4800
    # cells at most 1 a pixel need blocks of ceil(4800 / 1946) = 3 cells (hand-worked)
    assert figureset.MAX_CELLS_PER_PIXEL == 1.0
    assert figureset._reduce_factor(60, 4800, panel_width_in=180 / 25.4 - 0.6) == 3
    d = figureset.map_panels(maps, period=(2020, 2021), min_coverage=0.5)
    mesh = d.artists["meshes"][0]
    drawn = np.ma.filled(mesh.get_array(), np.nan).reshape(20, 1600)
    w = cell_area(maps["lat"].values, maps["lon"].values)
    want, _ = _loop_block_mean((base + later) / 2, w, 3)  # mean over 24 months (12 each)
    np.testing.assert_allclose(drawn, want, rtol=1e-6)  # float32 sums over 24 months
    assert np.isnan(drawn[:, :33]).all()  # all-land blocks (columns 0-98) stay land
    # the block of columns 201-203, 201 land: the mean of its two ocean columns (one value
    # down each column, so the areas of the rows weigh both alike)
    assert np.isfinite(drawn[:, 67]).all()
    np.testing.assert_allclose(drawn[:, 67], (base[::3, 202:204] + later[::3, 202:204]).mean(1)
                               / 2, rtol=1e-6)
    # the caption's count of low-coverage cells is of the run's cells, not of blocks
    assert "Model vgpm: 6000 cells" in d.caption  # 60 rows x 100 columns (hand count)
    plt.close(d.figure)
    # the three panels of baseline | period | change: at most (180 / 25.4 - 0.6) / 3 x 300 =
    # 649 px across, so blocks of at least ceil(4800 / 649) = 8 cells, made of the means'
    # blocks of 3: 3 x 3 = 9 cells, ceil(60 / 9) x ceil(4800 / 9) = 7 x 534 blocks
    c = figureset.comparison_panels(maps, period=(2021, 2021), baseline=(2020, 2020))
    assert c.artists["means"][0].get_array().size == 7 * 534
    change = np.ma.filled(c.artists["changes"][0].get_array(), np.nan).reshape(7, 534)
    np.testing.assert_allclose(change[:, 12:], 20.0, rtol=1e-5)  # later = 1.2 x base
    plt.close(c.figure)


class _Count(Callback):
    def __init__(self):
        super().__init__()
        self.n = 0

    def _start(self, dsk):
        self.n += 1


def test_every_map_of_the_set_comes_from_one_computation():
    import matplotlib.pyplot as plt

    maps, *_ = _wide_maps()
    ch = {"time": 1, "lat": 30, "lon": 1200}  # dask-backed values, as results.open_maps
    maps = maps.assign(npp=maps["npp"].chunk(ch), coverage=maps["coverage"].chunk(ch))
    with _Count() as count:
        drawn, notes = figureset.draw_all(maps, xr.Dataset(), min_coverage=0.5)
    assert [d.name for d in drawn] == ["fig_npp_maps", "fig_npp_difference",
                                       "fig_npp_baseline_period_change", "fig_npp_ratio"]
    assert notes == ["no regional figures: the run has no regions"]
    assert count.n == 1
    for d in drawn:
        plt.close(d.figure)
