"""Inputs laid out as gridded products often are: the values `open_input` gives are those the
netCDF library reads, put in the common orientation.

Layouts: latitudes north to south; longitudes in [0, 360); SST and PAR packed as int16 with
scale_factor/add_offset, a _FillValue and a valid range; chunks that do not divide the grid;
chlorophyll stored with netCDF quantization (significant digits); and all of these at once.

Reference, independent of euphotic's reading code: netCDF4-python (the Unidata netCDF-C
library) reading each file with its default automatic masking and scaling (fill value, valid
range, scale_factor/add_offset), then, in this file, latitudes sorted ascending with numpy,
longitudes wrapped to [-180, 180) and sorted with numpy, kelvin turned into degrees Celsius by
subtracting 273.15 (the SI definition of the Celsius scale). Values must be identical (same
floating type, same bits), not merely close.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from euphotic import lazyread
from euphotic.readers import InputSpec, open_input

N_LAT, N_LON, DAYS = 36, 72, 3  # a 5-degree global grid: small enough for a quick test
LAYOUTS = {
    "current": {},
    "lat_desc": {"lat_desc": True},
    "lon360": {"lon360": True},
    "packed": {"packed": True},
    "odd_chunks": {"chunks": (1, 10, 14)},
    "quantized": {"quantized": True},
    "packed64": {"packed": "f8"},
    "all": {"lat_desc": True, "lon360": True, "packed": True, "chunks": (1, 10, 14),
            "quantized": True},
}
#: plausible ranges given in the config (model units): some values of every field lie outside
SCREEN = {"chl": (0.05, 5.0), "sst": (0.0, 25.0), "par": (5.0, 55.0)}
ROLE = {"chl": ("mass_concentration_of_chlorophyll_a_in_sea_water", "mg m-3"),
        "sst": ("sea_surface_temperature", "K"),
        "par": ("surface_downwelling_photosynthetic_photon_flux_in_air", "einstein m-2 day-1")}


def _field(var: str, day: int) -> np.ndarray:
    rng = np.random.default_rng(100 * day + len(var))
    base = {"chl": np.exp(rng.normal(-1.0, 1.0, (N_LAT, N_LON))),
            "sst": 273.15 + rng.uniform(-2, 30, (N_LAT, N_LON)),
            "par": rng.uniform(0, 60, (N_LAT, N_LON))}[var]
    base[rng.random((N_LAT, N_LON)) < 0.1] = np.nan  # land and cloud
    return base


def write_day(path, var: str, day: int, *, lat_desc=False, lon360=False, packed=False,
              chunks=(1, 12, 24), quantized=False) -> None:
    """One daily file of one variable, in the given layout (written with netCDF4-python)."""
    lat = -90 + (np.arange(N_LAT) + 0.5) * 180 / N_LAT
    lon = -180 + (np.arange(N_LON) + 0.5) * 360 / N_LON
    values = _field(var, day)
    if lat_desc:
        lat, values = lat[::-1], values[::-1]
    if lon360:
        order = np.argsort(lon % 360)
        lon, values = lon[order] % 360, values[:, order]
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", 1)
        ds.createDimension("lat", N_LAT)
        ds.createDimension("lon", N_LON)
        t = ds.createVariable("time", "f8", ("time",))
        t.units, t.standard_name = "days since 2025-04-01", "time"
        t[:] = [day]
        for name, vals, units in (("lat", lat, "degrees_north"), ("lon", lon, "degrees_east")):
            c = ds.createVariable(name, "f8", (name,))
            c.units = units
            c[:] = vals
        pack = packed and var in ("sst", "par")
        kw = {"zlib": True, "complevel": 4, "shuffle": True, "chunksizes": chunks}
        if pack:
            v = ds.createVariable(var, "i2", ("time", "lat", "lon"), fill_value=np.int16(-32767), **kw)
            ftype = np.float64 if packed == "f8" else np.float32  # the type of the unpacked values
            v.scale_factor = ftype(0.005 if var == "sst" else 0.002)
            v.add_offset = ftype(273.15 if var == "sst" else 60.0)
            v.valid_min, v.valid_max = np.int16(-32000), np.int16(32000)
        elif quantized and var == "chl":
            v = ds.createVariable(var, "f4", ("time", "lat", "lon"), fill_value=np.float32(np.nan),
                                  significant_digits=3, quantize_mode="BitGroom", **kw)
        else:
            v = ds.createVariable(var, "f4", ("time", "lat", "lon"), fill_value=np.float32(np.nan), **kw)
        v.standard_name, v.units = ROLE[var]
        v[0] = np.ma.masked_array(np.nan_to_num(values), mask=np.isnan(values))


def reference(paths: list[str], var: str) -> np.ndarray:
    """netCDF4-python's reads, oriented and converted in numpy (see the module docstring)."""
    out = []
    for p in paths:
        with netCDF4.Dataset(p) as ds:
            v = ds[var][0]  # default auto mask and scale: fill, valid range, scale/offset
            lat, lon = ds["lat"][:].data, ds["lon"][:].data
        vals = np.ma.filled(v.astype(v.dtype), np.nan)
        vals = vals[np.argsort(lat)]
        vals = vals[:, np.argsort(((lon + 180) % 360) - 180, kind="stable")]
        if var == "sst":
            vals = vals - 273.15
        out.append(vals)
    return np.stack(out)


@pytest.mark.parametrize("reader", ["chunks", "library"])
@pytest.mark.parametrize("layout", list(LAYOUTS))
def test_layout_values_identical_to_library(tmp_path, monkeypatch, layout, reader):
    if reader == "library":
        monkeypatch.setenv("EUPHOTIC_READER", "netcdf4")
    for var in ("chl", "sst", "par"):
        paths = []
        for day in range(DAYS):
            p = tmp_path / f"{var}_{day}.nc"
            write_day(p, var, day, **LAYOUTS[layout])
            paths.append(str(p))
        lo, hi = SCREEN[var]
        da = open_input(InputSpec(role=var, files=paths, valid_range=(lo, hi)))
        assert da.dims == ("time", "lat", "lon")
        assert np.all(np.diff(da.lat.values) > 0) and np.all(np.diff(da.lon.values) > 0)
        assert da.lon.values.min() < 0  # [-180, 180) whatever the file's convention
        ref = reference(paths, var)
        below, above = (ref < lo).sum(axis=(1, 2)), (ref > hi).sum(axis=(1, 2))
        within = ((ref >= lo) & (ref <= hi)).sum(axis=(1, 2))
        ref = np.where((ref < lo) | (ref > hi), np.nan, ref)  # the screening rule
        got = da.values
        assert got.dtype == ref.dtype, (var, got.dtype, ref.dtype)
        np.testing.assert_array_equal(got, ref, err_msg=f"{layout} {var} {reader}")
        assert np.isnan(got).any() and np.isfinite(got).any()
        counts = np.asarray(da.attrs["screen_counts"].totals.compute())
        assert below.sum() > 0 and above.sum() > 0
        np.testing.assert_array_equal(counts, np.stack([below, above, within], axis=1))


def test_layout_tasks_are_one_per_stored_piece(tmp_path, monkeypatch):
    """No separate reordering or decoding layers: the input's graph is its read tasks plus
    the screening counts; with one stored chunk per block, blocks follow the stored chunks
    cut at the longitude seam."""
    monkeypatch.setattr(lazyread, "BLOCK_CELLS", 1)
    paths = []
    for day in range(2):
        p = tmp_path / f"sst_{day}.nc"
        write_day(p, "sst", day, **LAYOUTS["all"])
        paths.append(str(p))
    da = open_input(InputSpec(role="sst", files=paths))
    layers = da.data.__dask_graph__().layers
    names = [str(k).split("-")[0] for k in layers]
    assert not any(n in ("getitem", "shuffle", "take", "where", "astype", "add", "mul")
                   for n in names), names
    # latitudes: stored chunks of 10 over 36 rows, reversed -> 6, 10, 10, 10
    assert da.data.chunks[1] == (6, 10, 10, 10)
    # longitudes: chunks of 14 over 72, the seam at stored index 36 splits the third chunk
    # (28..42): the output starts at stored 36 -> pieces 36-42, 42-56, 56-70, 70-72, 0-14, ...
    assert da.data.chunks[2] == (6, 14, 14, 2, 14, 14, 8)


@pytest.mark.parametrize(("order", "runs"), [
    (np.arange(10), [(0, 0, 1)]),
    (np.arange(10)[::-1], [(0, 9, -1)]),
    (np.array([5, 6, 7, 8, 9, 0, 1, 2, 3, 4]), [(0, 5, 1), (5, 0, 1)]),
    (np.array([4, 3, 2, 1, 0, 9, 8, 7, 6, 5]), [(0, 4, -1), (5, 9, -1)]),
])
def test_runs_of_permutations(order, runs):
    # expected runs worked out by hand from the permutation's definition
    assert lazyread.runs_of(order) == runs


def test_irregular_order_falls_back():
    assert lazyread.runs_of(np.array([0, 2, 1, 3, 5, 4, 6, 8, 7, 9])) is None


@pytest.mark.parametrize(("order", "chunk", "group", "blocks"), [
    # stored chunks of 4 over 10 cells, ascending: [0, 4), [4, 8), [8, 10); in pairs
    (np.arange(10), 4, 1, [(0, 4, 0, 1), (4, 8, 4, 1), (8, 10, 8, 1)]),
    (np.arange(10), 4, 2, [(0, 8, 0, 1), (8, 10, 8, 1)]),
    # reversed: output 0 is stored 9; the first block is the rest of chunk [8, 10)
    (np.arange(10)[::-1], 4, 1, [(0, 2, 9, -1), (2, 6, 7, -1), (6, 10, 3, -1)]),
    (np.arange(10)[::-1], 4, 2, [(0, 6, 9, -1), (6, 10, 3, -1)]),
    # rotated at stored 5 (a seam inside chunk [4, 8)): 5..9 then 0..4
    (np.r_[5:10, 0:5], 4, 1, [(0, 3, 5, 1), (3, 5, 8, 1), (5, 9, 0, 1), (9, 10, 4, 1)]),
])
def test_axis_blocks(order, chunk, group, blocks):
    # worked out by hand: each block is a contiguous stored range inside one run
    assert lazyread.axis_blocks(order, chunk, group) == blocks


def test_block_group_sizes():
    # 256 x 512 stored chunks on a 1/24-degree grid: 2 chunks side by side, 2 rows: 512 x 1024
    assert lazyread.block_group(256, 512, 4320, 8640) == (2, 2)
    # 540 x 1080 chunks: one is already about 2**19 cells
    assert lazyread.block_group(540, 1080, 4320, 8640) == (1, 1)
    # a small grid is one block
    assert lazyread.block_group(10, 14, 36, 72) == (4, 6)
