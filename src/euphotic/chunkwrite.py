"""Write a map's compressed chunks from the dask threads, outside the netCDF library's lock.

Written through the netCDF library, every chunk of a month map is compressed one at a time
(the netCDF/HDF5 libraries hold one global lock), which is the longest serial stretch of a
run on a fine grid. Here xarray writes the file's metadata and coordinates as usual (its own
encoding of every variable), the map variables are created but left unwritten, and each dask
task then encodes its block as xarray would (:func:`xarray.conventions.encode_cf_variable`),
applies the variable's own HDF5 filter pipeline itself (byte shuffle, then deflate with
libdeflate, which releases the GIL) and stores the finished chunk with HDF5's direct chunk
write (h5py ``write_direct_chunk``), the mirror image of :mod:`euphotic.chunkread`.
The file is the one the library would write, chunk for chunk (tested by reading both back).

Only for runs in this process (the threaded scheduler): with a distributed cluster, or when
anything is unusual (other filters, blocks that are not whole chunks, h5py or the deflate
package missing), :func:`lazy_netcdf` returns None and the map is written through xarray.
"""

from __future__ import annotations

import sys
import threading
import zlib
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import chunkread

try:
    import deflate as _libdeflate
except ImportError:  # pragma: no cover
    _libdeflate = None


def in_process() -> bool:
    """True when dask runs tasks in threads of this process (not on a cluster's workers)."""
    import dask

    if dask.config.get("scheduler", None) not in (None, "threads", "threading", "sync",
                                                  "synchronous", "single-threaded"):
        return False
    if "distributed" in sys.modules:
        try:
            from distributed import default_client

            default_client()
            return False
        except ValueError:
            return True
    return True


class ChunkWriter:
    """The open file (h5py, opened on first use) and a lock around its direct chunk writes."""

    def __init__(self, path: Path, variables: dict):
        self.path = str(path)
        self.variables = variables  # name -> (chunks, filters [(id, level)], fill, dtype)
        self.lock = threading.Lock()
        self._file = None

    def write(self, name: str, block: np.ndarray, start: tuple[int, ...]) -> int:
        chunks, filters, fill, dtype = self.variables[name]
        full = np.asarray(block, dtype=dtype)
        if full.shape != chunks:  # an edge chunk: HDF5 stores whole chunks, padded
            pad = np.full(chunks, fill, dtype=dtype)
            pad[tuple(slice(0, n) for n in full.shape)] = full
            full = pad
        data = encode_chunk(np.ascontiguousarray(full), filters)
        with self.lock:
            if self._file is None:
                import h5py

                self._file = h5py.File(self.path, "r+")
            self._file[name].id.write_direct_chunk(start, data, 0)
        return len(data)

    def close(self, *_written) -> None:
        with self.lock:
            if self._file is not None:
                self._file.close()
                self._file = None

    def __reduce__(self):  # never shipped to another process
        raise TypeError("ChunkWriter writes from threads of the process that made it")


def encode_chunk(arr: np.ndarray, filters: list[tuple[int, int]]) -> bytes:
    """Apply the HDF5 filter pipeline (in write order) to one whole chunk."""
    buf = arr.tobytes()
    for fid, level in filters:
        if fid == chunkread.H5Z_SHUFFLE:
            size = arr.dtype.itemsize
            if size > 1:
                buf = np.frombuffer(buf, np.uint8).reshape(-1, size).T.tobytes()
        elif fid == chunkread.H5Z_DEFLATE:
            buf = (_libdeflate.zlib_compress(buf, level) if _libdeflate is not None
                   else zlib.compress(buf, level))
        else:  # pragma: no cover - excluded by _filters
            raise ValueError(f"HDF5 filter {fid} not supported")
    return buf


def _filters(dset) -> list[tuple[int, int]] | None:
    """The dataset's filters as (id, level) in write order; None if one is not supported."""
    plist = dset.id.get_create_plist()
    out = []
    for i in range(plist.get_nfilters()):
        fid, _flags, values, _name = plist.get_filter(i)
        if fid == chunkread.H5Z_DEFLATE:
            out.append((fid, int(values[0]) if len(values) else 4))
        elif fid == chunkread.H5Z_SHUFFLE:
            out.append((fid, 0))
        else:
            return None
    return out


def _write_block(block: np.ndarray, writer: ChunkWriter, var: str, starts: list,
                 block_info=None) -> np.ndarray:
    loc = block_info[0]["chunk-location"]
    start = tuple(s[i] for s, i in zip(starts, loc, strict=True))
    n = writer.write(var, block, start)
    return np.full((1,) * block.ndim, n, dtype=np.int64)


def lazy_netcdf(ds: xr.Dataset, path: Path, encoding: dict, unlimited_dims=("time",)):
    """Write ``ds``'s metadata and coordinates to ``path`` now and return a lazy dask array
    (0-d: the bytes written) whose computation writes the dask-backed variables chunk by
    chunk and closes the file; None (nothing written) when this path does not apply (see the
    module docstring)."""
    if not in_process() or not chunkread.enabled():
        return None
    lazy = [v for v in ds.variables if hasattr(ds[v].data, "dask")
            and encoding.get(v, {}).get("chunksizes")]
    small = [v for v in ds.variables if hasattr(ds[v].data, "dask") and v not in lazy]
    if sum(ds[v].nbytes for v in small) > 2**26:
        return None
    if small:  # small dask-backed variables (bounds...) are written with the metadata
        ds = ds.assign({v: ds[v].load() for v in small if v in ds.data_vars})
        ds = ds.assign_coords({v: ds[v].load() for v in small if v in ds.coords})
    for v in lazy:
        enc = encoding.get(v, {})
        chunks = enc.get("chunksizes")
        want = tuple(chunkread.regular_chunks(n, c)
                     for n, c in zip(ds[v].shape, chunks or (), strict=False))
        if not chunks or len(chunks) != ds[v].ndim or want != ds[v].data.chunks:
            return None
    try:
        from xarray.backends.common import ArrayWriter
        from xarray.backends.netCDF4_ import NETCDF4_PYTHON_LOCK, NetCDF4DataStore
        from xarray.backends.writers import dump_to_store
    except ImportError:  # pragma: no cover - another xarray layout
        return None
    import dask.array as da
    import h5py

    # the CF encoding xarray applies when writing (fill values, rounding, dtype), lazily
    encoded = {}
    for v in lazy:
        var = ds[v].variable.copy(deep=False)
        var.encoding = dict(encoding.get(v, {}))
        encoded[v] = xr.conventions.encode_cf_variable(var, name=v)
    # the netCDF library's own lock: only this thread writes through it (xarray's default
    # adds a per-file write lock chosen by asking which scheduler runs, which imports
    # dask.distributed, a quarter of a second at start)
    store = NetCDF4DataStore.open(str(path), mode="w", format="NETCDF4",
                                  lock=NETCDF4_PYTHON_LOCK)
    try:
        # dask-backed variables are created and left for the writer: ArrayWriter only
        # collects them, and it is never synced
        dump_to_store(ds, store, ArrayWriter(), encoding=encoding,
                      unlimited_dims=list(unlimited_dims))
    finally:
        store.close()
    variables = {}
    with h5py.File(str(path), "r+") as f:
        for v in lazy:
            dset = f[v]
            filters = _filters(dset)
            if filters is None or dset.chunks is None:
                return None
            if dset.shape != ds[v].shape:  # an unlimited dimension starts empty
                dset.resize(ds[v].shape)
            fill = dset.fillvalue
            variables[v] = (tuple(dset.chunks), filters, fill, np.dtype(dset.dtype))
    writer = ChunkWriter(path, variables)
    written = []
    for v in lazy:
        data = encoded[v].data
        starts = [np.cumsum((0,) + c[:-1]) for c in data.chunks]
        written.append(da.map_blocks(
            _write_block, data, writer=writer, var=v, starts=starts, dtype=np.int64,
            chunks=tuple((1,) * len(c) for c in data.chunks),
            meta=np.empty((0,) * data.ndim, np.int64)))
    # one array collection (computed and optimised with the run's other arrays, so the
    # blocks are computed once for the file, the totals and the counts): the bytes written,
    # summed by a last task that closes the file
    total = da.concatenate([w.ravel() for w in written]).sum()
    return total.map_blocks(_close, writer=writer, dtype=np.int64, meta=np.empty((), np.int64))


def _close(total: np.ndarray, writer: ChunkWriter) -> np.ndarray:
    writer.close()
    return total
