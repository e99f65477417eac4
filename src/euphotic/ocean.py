"""Which grid cells are ocean: from a land-mask file, a packaged global mask, or temperature."""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np
import xarray as xr


def _packaged_mask_path() -> Path:
    import importlib.util

    spec = importlib.util.find_spec("global_land_mask")
    if spec is None or not spec.submodule_search_locations:
        raise ImportError("global-land-mask is not installed")
    return Path(list(spec.submodule_search_locations)[0]) / "globe_combined_mask_compressed.npz"


def _member_stream(path: Path, member: str, block: int = 1 << 22):
    """Yield the inflated bytes of one deflated member of a zip file, block by block.

    Inflates with python-isal when installed (several times faster than zlib); both release
    the GIL, so this overlaps with other start-up work in threads.
    """
    import struct

    try:
        from isal import isal_zlib as zl
    except ImportError:  # pragma: no cover
        import zlib as zl
    with zipfile.ZipFile(path) as z:
        info = z.getinfo(member)
    if info.compress_type != zipfile.ZIP_DEFLATED:
        raise RuntimeError(f"{path}: {member} is not deflated")
    with open(path, "rb") as fh:
        fh.seek(info.header_offset)
        header = fh.read(30)
        name_len, extra_len = struct.unpack("<HH", header[26:30])
        fh.seek(info.header_offset + 30 + name_len + extra_len)
        left = info.compress_size
        d = zl.decompressobj(-15)
        while left > 0:
            data = fh.read(min(block, left))
            left -= len(data)
            while data:  # bounded output: the mask inflates several hundredfold
                out = d.decompress(data, block)
                data = d.unconsumed_tail
                if out:
                    yield out
        tail = d.flush()
        if tail:
            yield tail


def _cache_file(path: Path, lat: np.ndarray, lon: np.ndarray) -> Path:
    """Where the mask of this grid is cached: ``$EUPHOTIC_CACHE_DIR`` (as for the compiled
    kernels), else ``$XDG_CACHE_HOME/euphotic/masks`` or ``~/.cache/euphotic/masks``; the name
    holds a digest of the grid and of the packaged mask file (its path, size and time)."""
    import hashlib

    from euphotic.cachedir import cache_dir

    base = cache_dir("masks")
    st = path.stat()
    h = hashlib.blake2b(digest_size=12)
    for arr in (lat, lon):
        h.update(memoryview(np.ascontiguousarray(arr, dtype=np.float64)).cast("B"))
    h.update(f"{path}|{st.st_size}|{st.st_mtime_ns}".encode())
    return base / f"ocean-mask-{len(lat)}x{len(lon)}-{h.hexdigest()}.npy"


def packaged_ocean_mask(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Ocean (True) at each cell centre, from the 1/120-degree mask of `global-land-mask`.

    The package's mask (21600 x 43200 booleans, rows from 90N southwards, True = ocean) is
    streamed from its compressed file, keeping only the rows and columns nearest the cell
    centres, so memory stays small (the package's own import loads ~1 GB). Streaming the
    whole file takes about half a second whatever the grid, so the result is cached per grid
    (bits packed, a few MB for a 1/24-degree grid; :func:`_cache_file`).
    """
    path = _packaged_mask_path()
    lat = np.asarray(lat, dtype=np.float64)
    lon = ((np.asarray(lon, dtype=np.float64) + 180.0) % 360.0) - 180.0
    cache = _cache_file(path, lat, lon)
    if cache.is_file():
        try:
            bits = np.load(cache, allow_pickle=False)
            return np.unpackbits(bits, count=lat.size * lon.size).astype(bool).reshape(
                lat.size, lon.size)
        except (OSError, ValueError):
            pass  # unreadable: computed again and rewritten
    out = _stream_mask(path, lat, lon)
    _save_atomic(cache, np.packbits(out.reshape(-1)))
    return out


def _save_atomic(target: Path, arr: np.ndarray) -> None:
    """Write ``arr`` to ``target`` through a temporary file and a rename (a cache never holds
    a half-written file); a cache that cannot be written is skipped silently."""
    import os
    import tempfile

    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=target.parent, suffix=".tmp")
        with os.fdopen(fd, "wb") as fh:
            np.save(fh, arr, allow_pickle=False)
        os.replace(tmp, target)
    except OSError:
        pass


def _stream_mask(path: Path, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """The mask at the cell centres, streamed from the package's file (see
    :func:`packaged_ocean_mask`)."""
    stream = _member_stream(path, "mask.npy")
    buf = bytearray()
    for piece in stream:  # the .npy header comes first
        buf += piece
        if len(buf) >= 128 and b"\n" in buf[:4096]:
            break
    import io

    head = io.BytesIO(bytes(buf))
    version = np.lib.format.read_magic(head)
    read_header = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                   else np.lib.format.read_array_header_2_0)
    shape, fortran, dtype = read_header(head)
    if fortran or dtype != np.bool_ or len(shape) != 2:
        raise RuntimeError(f"{path}: unexpected land mask layout {shape} {dtype}")
    nrow, ncol = shape
    rows = np.clip(((90.0 - lat) * (nrow / 180.0)).astype(np.int64), 0, nrow - 1)
    cols = np.clip(((lon + 180.0) * (ncol / 360.0)).astype(np.int64), 0, ncol - 1)
    wanted: dict[int, list[int]] = {}
    for i, r in enumerate(rows):
        wanted.setdefault(int(r), []).append(i)
    out = np.zeros((len(lat), len(lon)), dtype=bool)
    carry = bytes(buf[head.tell():])
    row = 0
    for piece in stream:
        data = carry + piece
        n = len(data) // ncol
        if n:
            block = np.frombuffer(data, dtype=np.bool_, count=n * ncol).reshape(n, ncol)
            for r in range(row, row + n):
                if r in wanted:
                    out[wanted[r], :] = block[r - row, cols]
            row += n
        carry = data[n * ncol :]
    if row != nrow:
        raise RuntimeError(f"{path}: land mask ended after {row} of {nrow} rows")
    return out


def file_ocean_mask(
    path: str, variable: str | None, lat: np.ndarray, lon: np.ndarray
) -> np.ndarray:
    """Ocean where a land-mask file's value is below 0.5 (a 0/1 land flag or a land fraction)."""
    from euphotic.regions import netcdf_on_grid

    land = netcdf_on_grid(path, variable, lat, lon, what="land mask")
    return np.isfinite(land) & (land < 0.5)


def temperature_ocean_mask(sst: xr.DataArray) -> xr.DataArray:
    """Ocean where temperature is valid at least once (lazy)."""
    return sst.notnull().any("time")
