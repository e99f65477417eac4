"""Month maps written chunk by chunk from the dask threads are the files the netCDF library
writes.

Reference: the same dataset written by xarray through the netCDF library (netCDF4-python,
Unidata netCDF-C over HDF5) with the same encoding, both read back with netCDF4-python:
values and masks, types, chunking, filters, fill values and attributes must be the same.
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest
import xarray as xr

from euphotic import chunkwrite, outputs


def _same_attr(a, b) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    return a.shape == b.shape and (np.array_equal(a, b, equal_nan=a.dtype.kind == "f")
                                   if a.dtype.kind in "fiu" else bool(np.all(a == b)))


@pytest.mark.parametrize("blocks", [(7, 9), (16, 32)])  # edge chunks; one block per axis
def test_direct_chunks_give_the_library_file(demo_run, tmp_path, blocks):
    month = sorted(demo_run.glob("npp_vgpm_*.nc"))[0]
    with xr.open_dataset(month, chunks={}) as src:
        ds = src.chunk({"lat": blocks[0], "lon": blocks[1]})
        enc = outputs.encoding_for(ds)
        assert enc["npp"]["chunksizes"] == (1, *[min(b, n) for b, n in
                                                 zip(blocks, ds.npp.shape[1:], strict=True)])
        ref = tmp_path / "library.nc"
        ds.to_netcdf(ref, engine="netcdf4", encoding=enc, unlimited_dims=["time"])
        direct = tmp_path / "direct.nc"
        delayed = chunkwrite.lazy_netcdf(ds, direct, enc)
        assert delayed is not None
        delayed.compute()
    with netCDF4.Dataset(ref) as a, netCDF4.Dataset(direct) as b:
        assert a.dimensions.keys() == b.dimensions.keys()
        assert [d for d in b.dimensions.values() if d.isunlimited()][0].name == "time"
        assert {k: len(d) for k, d in a.dimensions.items()} == {k: len(d) for k, d in b.dimensions.items()}
        assert a.ncattrs() == b.ncattrs()
        for k in a.ncattrs():
            assert _same_attr(a.getncattr(k), b.getncattr(k)), k
        assert a.variables.keys() == b.variables.keys()
        for v in a.variables:
            va, vb = a[v], b[v]
            assert va.dtype == vb.dtype and va.dimensions == vb.dimensions, v
            assert va.chunking() == vb.chunking() and va.filters() == vb.filters(), v
            assert va.ncattrs() == vb.ncattrs(), v
            for k in va.ncattrs():
                assert _same_attr(va.getncattr(k), vb.getncattr(k)), (v, k)
            xa, xb = va[:], vb[:]
            np.testing.assert_array_equal(np.ma.getmaskarray(xa), np.ma.getmaskarray(xb))
            np.testing.assert_array_equal(np.ma.filled(xa, 0), np.ma.filled(xb, 0))
        assert np.isfinite(b["npp"][:]).sum() > 0


def test_not_used_for_a_cluster(monkeypatch, tmp_path):
    """On a cluster's workers (other processes) the library path is used: the writer must
    not be shipped to another process."""
    import dask

    with dask.config.set(scheduler="processes"):
        assert not chunkwrite.in_process()
    w = chunkwrite.ChunkWriter(tmp_path / "x.nc", {})
    import pickle

    with pytest.raises(TypeError, match="writes from threads"):
        pickle.dumps(w)


def test_region_masks_written_by_the_dask_threads_equal_the_library_file(tmp_path):
    """``regions.nc`` with its planes written as direct chunks while the run computes equals
    the file the netCDF library writes (read back with netCDF4-python: same variables,
    attributes, chunking, filters and values); the lazy planes are read-only views of the
    masks, not copies."""
    import dask

    from euphotic import aggregate, lazyread

    rng = np.random.default_rng(5)
    lat = np.arange(-9.75, 10, 0.5)
    lon = np.arange(-19.75, 20, 0.5)
    masks = aggregate.RegionMasks.build(
        [(f"r{i}", rng.random((lat.size, lon.size)) > 0.5) for i in range(5)],
        max_label_layers=1)  # one label layer, then bit planes
    area = np.full(lat.size, 3.0e9)
    eager = outputs.region_dataset(masks, lat, lon, area, earth="sphere")
    ref = tmp_path / "library.nc"
    outputs.write_regions(ref, eager)
    lazy_ds = outputs.region_dataset(masks, lat, lon, area, earth="sphere", name="planes")
    direct = tmp_path / "direct.nc"
    pending = outputs.write_regions_lazy(direct, lazy_ds)
    assert pending is not None  # the planes are left for the compute
    dask.compute(pending)
    with netCDF4.Dataset(ref) as a, netCDF4.Dataset(direct) as b:
        assert a.variables.keys() == b.variables.keys()
        for v in a.variables:
            assert a[v].chunking() == b[v].chunking() and a[v].filters() == b[v].filters(), v
            assert a[v].ncattrs() == b[v].ncattrs(), v
            np.testing.assert_array_equal(a[v][:], b[v][:])
        assert a["region_planes"].dtype == np.int32  # uint16 planes stored signed, wider
    held = lazyread.held_array(masks.planes, (1, 7, 9), "m")
    block = dict(held.dask)[(held.name, 0, 1, 2)]  # the block as the graph holds it
    assert np.shares_memory(block, masks.planes) and not block.flags.writeable
    np.testing.assert_array_equal(held.compute(), masks.planes)
