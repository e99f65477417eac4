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


def packaged_ocean_mask(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Ocean (True) at each cell centre, from the 1/120-degree mask of `global-land-mask`.

    The package's mask (21600 x 43200 booleans, rows from 90N southwards, True = ocean) is
    streamed row by row from its compressed file, keeping only the rows and columns nearest
    the cell centres, so memory stays small (the package's own import loads ~1 GB).
    """
    path = _packaged_mask_path()
    lat = np.asarray(lat, dtype=np.float64)
    lon = ((np.asarray(lon, dtype=np.float64) + 180.0) % 360.0) - 180.0
    with zipfile.ZipFile(path) as z:
        with z.open("mask.npy") as f:
            version = np.lib.format.read_magic(f)
            read_header = (
                np.lib.format.read_array_header_1_0
                if version == (1, 0)
                else np.lib.format.read_array_header_2_0
            )
            shape, fortran, dtype = read_header(f)
            if fortran or dtype != np.bool_ or len(shape) != 2:
                raise RuntimeError(f"{path}: unexpected land mask layout {shape} {dtype}")
            nrow, ncol = shape
            step_lat = 180.0 / nrow
            step_lon = 360.0 / ncol
            rows = np.clip(((90.0 - lat) / step_lat).astype(np.int64), 0, nrow - 1)
            cols = np.clip(((lon + 180.0) / step_lon).astype(np.int64), 0, ncol - 1)
            out = np.zeros((len(lat), len(lon)), dtype=bool)
            wanted = {}
            for i, r in enumerate(rows):
                wanted.setdefault(int(r), []).append(i)
            block = 256
            for r0 in range(0, nrow, block):
                n = min(block, nrow - r0)
                hit = [r for r in range(r0, r0 + n) if r in wanted]
                buf = f.read(n * ncol)
                if not hit:
                    continue
                arr = np.frombuffer(buf, dtype=np.bool_).reshape(n, ncol)
                for r in hit:
                    out[wanted[r], :] = arr[r - r0, cols]
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
