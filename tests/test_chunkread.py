"""The parallel chunk reader returns exactly what the netCDF library returns.

Reference: netCDF4-python (the Unidata netCDF-C library over HDF5) reading the same files with
auto mask/scale off, so raw stored values are compared bit for bit; then the full reader
(`open_input`) with the chunk reader on and off.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from euphotic import chunkread
from euphotic.errors import InputFileError
from euphotic.readers import InputSpec, open_input


def _write(path, data, *, dtype="f4", chunks=(1, 7, 9), fill=None, endian="native", write_all=True, **kw):
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", data.shape[0])
        ds.createDimension("lat", data.shape[1])
        ds.createDimension("lon", data.shape[2])
        lat = ds.createVariable("lat", "f8", ("lat",))
        lat[:] = np.linspace(-10, 10, data.shape[1])
        lat.units = "degrees_north"
        lon = ds.createVariable("lon", "f8", ("lon",))
        lon[:] = np.linspace(0, 30, data.shape[2])
        lon.units = "degrees_east"
        t = ds.createVariable("time", "f8", ("time",))
        t[:] = np.arange(data.shape[0])
        t.units = "days since 2024-05-01"
        v = ds.createVariable("x", dtype, ("time", "lat", "lon"), chunksizes=chunks, fill_value=fill,
                              endian=endian, **kw)
        v.set_auto_maskandscale(False)
        v.standard_name = "sea_surface_temperature"
        v.units = "degC"
        if write_all:
            v[:] = data
        else:  # leave most chunks unwritten: HDF5 gives the fill value there
            v[:, :7, :9] = data[:, :7, :9]


def _library(path):
    with netCDF4.Dataset(path) as ds:
        ds["x"].set_auto_maskandscale(False)
        return np.asarray(ds["x"][:])


CASES = {
    "float32 deflate+shuffle": dict(zlib=True, complevel=4, shuffle=True),
    "float32 deflate only": dict(zlib=True, complevel=9, shuffle=False),
    "float32 no filter": dict(zlib=False),
    "fletcher32": dict(zlib=True, shuffle=True, fletcher32=True),
    "int16 packed": dict(dtype="i2", zlib=True, shuffle=True, fill=np.int16(-32768)),
    "big-endian float64": dict(dtype=">f8", zlib=True, shuffle=True, endian="big"),
    "unwritten chunks": dict(zlib=True, shuffle=True, fill=np.float32(-999.0), write_all=False),
    "whole-variable chunk": dict(zlib=True, chunks=(3, 20, 25)),
}


@pytest.mark.parametrize("case", list(CASES))
def test_raw_values_identical_to_netcdf_library(tmp_path, case):
    kw = dict(CASES[case])
    rng = np.random.default_rng(5)
    data = rng.normal(15, 8, (3, 20, 25))  # 20 x 25 is not a multiple of 7 x 9: edge chunks
    if kw.get("dtype") == "i2":
        data = np.round(data * 100)
    path = tmp_path / "f.nc"
    _write(path, data, **kw)
    arr = chunkread.dask_array(str(path), "x")
    assert arr is not None
    got = arr.compute(scheduler="threads")
    want = _library(path)
    assert got.dtype == want.dtype
    np.testing.assert_array_equal(got, want)
    # arbitrary sub-selections span several chunks
    np.testing.assert_array_equal(arr[1:, 3:18, 5:24].compute(), want[1:, 3:18, 5:24])


def test_rechunked_reads_equal_the_library_array(tmp_path):
    """dask chunks that are not the stored chunks (several stored chunks per block, and a
    block cut inside a stored chunk) read the same values as the library."""
    data = np.random.default_rng(8).normal(15, 8, (3, 20, 25))
    path = tmp_path / "f.nc"
    _write(path, data, chunks=(2, 7, 9), zlib=True, shuffle=True)
    want = _library(path)
    arr = chunkread.dask_array(str(path), "x", chunks=(3, 14, 10))
    assert arr.chunks == ((3,), (14, 6), (10, 10, 5))
    np.testing.assert_array_equal(arr.compute(), want)
    np.testing.assert_array_equal(arr[1:, 3:18, 5:24].compute(), want[1:, 3:18, 5:24])


def test_standard_library_inflate_gives_the_same_values(tmp_path, monkeypatch):
    """Without libdeflate (the ``deflate`` package) chunks are inflated by zlib: same values."""
    data = np.random.default_rng(6).normal(15, 8, (2, 20, 25))
    path = tmp_path / "f.nc"
    _write(path, data, zlib=True, complevel=4, shuffle=True)
    monkeypatch.setattr(chunkread, "_libdeflate", None)
    got = chunkread.dask_array(str(path), "x").compute(scheduler="sync")
    np.testing.assert_array_equal(got, _library(path))


def test_inflate_falls_back_when_the_size_is_not_a_whole_chunk():
    """A stream whose inflated size differs from the chunk size is still inflated (by zlib)."""
    import zlib

    payload = bytes(range(256)) * 10
    assert chunkread._inflate(zlib.compress(payload), len(payload) + 100) == payload


def test_unsupported_layouts_fall_back(tmp_path):
    data = np.ones((1, 4, 5))
    with netCDF4.Dataset(tmp_path / "c.nc", "w") as ds:  # contiguous storage
        for d, n in zip(("time", "lat", "lon"), data.shape, strict=True):
            ds.createDimension(d, n)
        ds.createVariable("x", "f4", ("time", "lat", "lon"), contiguous=True)[:] = data
    assert chunkread.dask_array(str(tmp_path / "c.nc"), "x") is None
    with netCDF4.Dataset(tmp_path / "n3.nc", "w", format="NETCDF3_CLASSIC") as ds:  # not HDF5
        for d, n in zip(("time", "lat", "lon"), data.shape, strict=True):
            ds.createDimension(d, n)
        ds.createVariable("x", "f4", ("time", "lat", "lon"))[:] = data
    assert chunkread.dask_array(str(tmp_path / "n3.nc"), "x") is None


def test_corrupt_checksum_is_an_error(tmp_path):
    data = np.arange(3 * 20 * 25, dtype="f4").reshape(3, 20, 25)
    path = tmp_path / "f.nc"
    _write(path, data, zlib=False, fletcher32=True)
    arr = chunkread.dask_array(str(path), "x")
    offset, size, _ = arr_first = next(iter(chunkread.chunk_map(str(path), "x").offsets.values()))
    assert arr_first
    raw = bytearray(path.read_bytes())
    raw[offset + 10] ^= 0xFF
    path.write_bytes(bytes(raw))
    with pytest.raises(InputFileError) as excinfo:
        chunkread.dask_array(str(path), "x").compute()
    # The file and the chunk are named; the chunk index (0, 0, 0) and byte offset come from
    # h5py's chunk map (the stored chunk whose byte was flipped).
    assert str(excinfo.value) == (
        f"{path}: stored chunk (0, 0, 0) at byte {offset} fails its checksum "
        "(OSError: Fletcher-32 checksum mismatch): the file is damaged")
    del arr


@pytest.mark.parametrize("case", ["float32 deflate+shuffle", "int16 packed", "unwritten chunks"])
def test_open_input_identical_with_and_without_chunk_reader(tmp_path, monkeypatch, case):
    kw = dict(CASES[case])
    rng = np.random.default_rng(9)
    data = rng.normal(15, 8, (3, 20, 25))
    if kw.get("dtype") == "i2":
        data = np.round(data * 100)
    path = tmp_path / "f.nc"
    _write(path, data, **kw)
    if kw.get("dtype") == "i2":
        with netCDF4.Dataset(path, "a") as ds:
            ds["x"].scale_factor = 0.01
            ds["x"].add_offset = 273.15
            ds["x"].units = "K"
    spec = InputSpec(role="sst", files=str(path))
    fast = open_input(spec)
    assert any(str(k).find("chunkread-") >= 0 for k in fast.data.dask)
    monkeypatch.setenv("EUPHOTIC_READER", "netcdf4")
    slow = open_input(spec)
    assert not any(str(k).find("chunkread-") >= 0 for k in slow.data.dask)
    assert fast.dtype == slow.dtype
    np.testing.assert_array_equal(fast.values, slow.values)
