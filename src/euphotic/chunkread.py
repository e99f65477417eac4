"""Read chunks of NetCDF-4 (HDF5) variables outside the HDF5 library, so threads run in parallel.

The netCDF/HDF5 libraries hold one global lock: however many dask threads read, chunks are
decompressed one at a time. Here the chunk map (byte offset, size and filter mask of every
stored chunk) is taken once from the file with h5py; each dask task then reads its chunk's
bytes with ``os.pread`` and undoes the file's own filter pipeline itself: deflate (with
libdeflate through the ``deflate`` package when installed, else the standard library's zlib,
both of which release the GIL), byte shuffle (compiled with numba), and Fletcher-32 (checksum
verified, as HDF5 does).
The values are exactly those the netCDF library returns; CF decoding (fill values,
scale/offset) is then applied by xarray as usual.

Variables with other filters (szip, blosc, zstd plugins...), contiguous or compact storage fall
back to the netCDF library (:func:`supported` says which). ``EUPHOTIC_READER=netcdf4`` turns
this path off.
"""

from __future__ import annotations

import os
import zlib
from dataclasses import dataclass

import numpy as np

from euphotic.errors import InputFileError
from euphotic.jit import compiled

try:  # libdeflate: whole-buffer inflate, 1.6-2x faster than ISA-L or zlib on float chunks
    import deflate as _libdeflate
except ImportError:  # pragma: no cover
    _libdeflate = None

def _unshuffle_kernel(src, out, size):  # pragma: no cover - compiled
    # out seen as (element, byte): each byte plane of src is copied into one column
    n = out.size // size
    o = out[: n * size].reshape((n, size))
    for b in range(size):
        plane = src[b * n : (b + 1) * n]
        for i in range(n):
            o[i, b] = plane[i]


H5Z_DEFLATE, H5Z_SHUFFLE, H5Z_FLETCHER32 = 1, 2, 3
_SUPPORTED = {H5Z_DEFLATE, H5Z_SHUFFLE, H5Z_FLETCHER32}


def enabled() -> bool:
    """False when switched off with ``EUPHOTIC_READER=netcdf4`` or when h5py is missing."""
    if os.environ.get("EUPHOTIC_READER", "auto").lower() in ("netcdf4", "library", "off"):
        return False
    try:
        import h5py  # noqa: F401
    except ImportError:  # pragma: no cover
        return False
    return True


@dataclass
class ChunkMap:
    """Where each stored chunk of one variable is, and how it was filtered."""

    path: str
    shape: tuple[int, ...]
    chunks: tuple[int, ...]
    dtype: np.dtype
    fill: object
    filters: tuple[int, ...]  # HDF5 filter ids in pipeline (write) order
    offsets: dict  # chunk index tuple -> (byte offset, size, filter mask)

    @property
    def chunk_nbytes(self) -> int:
        return int(np.prod(self.chunks)) * self.dtype.itemsize


def chunk_map(path: str, variable: str) -> ChunkMap | None:
    """Chunk map of ``variable`` in the NetCDF-4/HDF5 file ``path``; None if not supported."""
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError:
        return None  # e.g. netCDF-3 classic files: not HDF5
    with f:
        return chunk_map_of(f, variable, path)


def chunk_map_of(f, variable: str, path: str) -> ChunkMap | None:
    """Chunk map of ``variable`` in the open h5py File ``f`` of ``path``; None if not
    supported."""
    import h5py

    if variable not in f:
        return None
    d = f[variable]
    if not isinstance(d, h5py.Dataset) or d.chunks is None or d.dtype.kind not in "iuf":
        return None
    plist = d.id.get_create_plist()
    filters = tuple(plist.get_filter(i)[0] for i in range(plist.get_nfilters()))
    if not set(filters) <= _SUPPORTED:
        return None
    offsets: dict = {}
    chunks = d.chunks

    def visit(info):
        key = tuple(o // c for o, c in zip(info.chunk_offset, chunks, strict=True))
        offsets[key] = (int(info.byte_offset), int(info.size), int(info.filter_mask))

    try:
        d.id.chunk_iter(visit)
    except (AttributeError, RuntimeError):  # older HDF5: one call per chunk
        for i in range(d.id.get_num_chunks()):
            visit(d.id.get_chunk_info(i))
    fill = d.fillvalue
    return ChunkMap(path=str(path), shape=tuple(d.shape), chunks=tuple(chunks),
                    dtype=np.dtype(d.dtype), fill=fill, filters=filters, offsets=offsets)


def _fletcher32(data: bytes) -> int:
    """HDF5's Fletcher-32 of a byte string (H5_checksum_fletcher32)."""
    b = np.frombuffer(data, dtype=np.uint8)
    n = len(b) // 2
    words = (b[: 2 * n : 2].astype(np.uint64) << 8) | b[1 : 2 * n : 2].astype(np.uint64)
    if len(b) % 2:
        words = np.append(words, np.uint64(b[-1]) << 8)
    sum1 = sum2 = 0
    for start in range(0, len(words), 360):
        block = words[start : start + 360]
        c1 = np.cumsum(block, dtype=np.uint64)
        sum2 = (sum2 + len(block) * sum1 + int(c1.sum())) % 65535
        sum1 = (sum1 + int(c1[-1])) % 65535
    return (sum2 << 16) | sum1


def decode_chunk(raw: bytes, cmap: ChunkMap, filter_mask: int) -> np.ndarray:
    """Undo the filter pipeline of one chunk; returns the full (padded) chunk array."""
    buf = raw
    for i, fid in reversed(list(enumerate(cmap.filters))):
        if filter_mask & (1 << i):
            continue  # this filter was skipped for this chunk when it was written
        if fid == H5Z_FLETCHER32:
            stored = int.from_bytes(buf[-4:], "little")
            buf = buf[:-4]
            if _fletcher32(buf) != stored:
                raise OSError("Fletcher-32 checksum mismatch")
        elif fid == H5Z_DEFLATE:
            buf = _inflate(buf, cmap.chunk_nbytes)
        elif fid == H5Z_SHUFFLE:
            size = cmap.dtype.itemsize
            if size > 1:
                buf = _unshuffle(buf, size)
    return np.frombuffer(buf, dtype=cmap.dtype).reshape(cmap.chunks)


def _decode_or_fail(raw: bytes, cmap: ChunkMap, mask: int, index: tuple, offset: int):
    """:func:`decode_chunk`, with any failure reported as a damaged file naming the chunk."""
    try:
        return decode_chunk(raw, cmap, mask)
    except (zlib.error, OSError, ValueError) as exc:
        what = "fails its checksum" if "checksum" in str(exc) else "cannot be decoded"
        raise InputFileError(
            cmap.path,
            f"stored chunk {tuple(int(i) for i in index)} at byte {offset} {what} "
            f"({exc.__class__.__name__}: {exc}): the file is damaged",
        ) from None


def _inflate(buf, nbytes: int) -> bytes:
    """Inflate one zlib stream that holds ``nbytes`` (a whole chunk); checks its Adler-32."""
    if _libdeflate is not None:
        try:
            return _libdeflate.zlib_decompress(buf, nbytes)
        except _libdeflate.DeflateError:
            pass  # not exactly nbytes (not written by HDF5's deflate filter?): stream it
    return zlib.decompress(buf, bufsize=nbytes)


def _unshuffle(buf, size: int) -> np.ndarray:
    """Undo HDF5's byte shuffle (byte b of every element stored in plane b)."""
    src = np.frombuffer(buf, dtype=np.uint8)
    n = src.size // size
    out = np.empty(src.size, dtype=np.uint8)
    kernel = compiled(_unshuffle_kernel)
    if kernel is not None:
        kernel(src[: n * size], out, size)
    else:  # pragma: no cover
        out[: n * size] = src[: n * size].reshape(size, n).T.ravel()
    out[n * size :] = src[n * size :]  # HDF5 leaves a remainder of bytes unshuffled
    return out


class ChunkedArray:
    """Array-like over one variable that ``dask.array.from_array`` reads chunk by chunk."""

    def __init__(self, cmap: ChunkMap):
        self.cmap = cmap
        self.shape = cmap.shape
        self.dtype = cmap.dtype
        self.ndim = len(cmap.shape)

    def __getitem__(self, key) -> np.ndarray:
        key = key if isinstance(key, tuple) else (key,)
        slices = [k if isinstance(k, slice) else slice(k, k + 1) for k in key]
        slices += [slice(None)] * (self.ndim - len(slices))
        bounds = [s.indices(n)[:2] for s, n in zip(slices, self.shape, strict=True)]
        first = [a // c for (a, _), c in zip(bounds, self.cmap.chunks, strict=True)]
        last = [max(b - 1, a) // c for (a, b), c in zip(bounds, self.cmap.chunks, strict=True)]
        one_chunk = first == last and all(b > a for a, b in bounds)
        out = None if one_chunk else np.empty([b - a for a, b in bounds], dtype=self.dtype)
        fd = os.open(self.cmap.path, os.O_RDONLY)
        try:
            for idx in np.ndindex(*[l_ - f + 1 for f, l_ in zip(first, last, strict=True)]):
                ci = tuple(f + i for f, i in zip(first, idx, strict=True))
                lo = [c * n for c, n in zip(ci, self.cmap.chunks, strict=True)]
                entry = self.cmap.offsets.get(ci)
                if entry is None:  # never written: HDF5 returns the fill value
                    block = np.full(self.cmap.chunks, self.cmap.fill, dtype=self.dtype)
                else:
                    offset, size, mask = entry
                    block = _decode_or_fail(os.pread(fd, size, offset), self.cmap, mask, ci, offset)
                src, dst = [], []
                for d, (a, b) in enumerate(bounds):
                    s0 = max(a, lo[d])
                    s1 = min(b, lo[d] + self.cmap.chunks[d])
                    src.append(slice(s0 - lo[d], s1 - lo[d]))
                    dst.append(slice(s0 - a, s1 - a))
                if one_chunk:  # the usual dask task: its chunk, or part of it, as a view
                    out = block[tuple(src)]
                    if not out.flags.writeable:  # a view of immutable bytes (no shuffle)
                        out = out.copy()
                else:
                    out[tuple(dst)] = block[tuple(src)]
        finally:
            os.close(fd)
        squeeze = tuple(i for i, k in enumerate(key) if not isinstance(k, slice))
        return out.squeeze(axis=squeeze) if squeeze else out


def dask_array(path: str, variable: str, chunks: tuple[int, ...] | None = None):
    """A dask array of the raw (still CF-encoded) values of ``variable``, in blocks of
    ``chunks`` (default: the stored chunks); None if unsupported."""
    import dask.array as da
    from dask.base import tokenize

    cmap = chunk_map(path, variable)
    if cmap is None:
        return None
    st = os.stat(path)
    name = "chunkread-" + tokenize(str(path), variable, chunks, st.st_mtime_ns, st.st_size)
    src = ChunkedArray(cmap)
    dims = tuple(regular_chunks(n, c) for n, c in zip(cmap.shape, chunks or cmap.chunks,
                                                       strict=True))
    return da.from_array(src, chunks=dims, name=name, lock=False, asarray=False,
                         fancy=False, meta=np.empty((0,) * src.ndim, src.dtype))


def regular_chunks(n: int, c: int) -> tuple[int, ...]:
    """Sizes of the chunks of ``c`` cutting an axis of ``n`` (the last one shorter), as dask
    gives them ((0,) for an empty axis)."""
    return tuple(min(c, n - i) for i in range(0, n, c)) or (0,)
