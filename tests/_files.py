"""Write tiny synthetic NetCDF input files for the tests, with netCDF4 directly.

The files are written with the netCDF4 library and no xarray, so the bytes on disk (packing,
fill values, attributes) are exactly what a test asks for and do not pass through the decoding
code under test. Every value written is chosen by the test, so its expected reading is known.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import netCDF4
import numpy as np

#: CF standard names of the three model inputs (CF standard name table).
STD = {
    "chl": "mass_concentration_of_chlorophyll_a_in_sea_water",
    "par": "surface_downwelling_photosynthetic_photon_flux_in_air",
    "par_energy": "surface_downwelling_photosynthetic_radiative_flux_in_air",
    "sst": "sea_surface_temperature",
}


def axis(first: float, step: float, n: int) -> np.ndarray:
    """A regular axis of ``n`` cell centres starting at ``first``."""
    return first + step * np.arange(n, dtype=np.float64)


def write_grid(
    path: str | Path,
    data,
    lat: Sequence[float],
    lon: Sequence[float],
    *,
    name: str = "var",
    var_attrs: Mapping[str, object] | None = None,
    global_attrs: Mapping[str, object] | None = None,
    dtype: str | np.dtype | None = None,
    fill_value=None,
    time: Sequence[float] | None = None,
    time_units: str = "days since 2000-01-01 00:00:00",
    calendar: str | None = None,
    time_bounds: Sequence[Sequence[float]] | None = None,
    lat_name: str = "lat",
    lon_name: str = "lon",
    chunksizes: Sequence[int] | None = None,
) -> Path:
    """Write one gridded variable ``name`` to ``path`` and return the path.

    ``data`` has shape ``(len(time), len(lat), len(lon))`` when ``time`` is given, else
    ``(len(lat), len(lon))`` (a file with no time dimension). Values are written as they are
    (no automatic packing or masking), so packed files get their raw integers.
    """
    path = Path(path)
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    data = np.asarray(data)
    dtype = np.dtype(dtype) if dtype is not None else data.dtype
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        dims: tuple[str, ...] = (lat_name, lon_name)
        if time is not None:
            ds.createDimension("time", len(time))
            t = ds.createVariable("time", "f8", ("time",))
            t.standard_name = "time"
            t.units = time_units
            if calendar:
                t.calendar = calendar
            t[:] = np.asarray(time, dtype=np.float64)
            if time_bounds is not None:
                ds.createDimension("nv", 2)
                t.bounds = "time_bnds"
                tb = ds.createVariable("time_bnds", "f8", ("time", "nv"))
                tb[:] = np.asarray(time_bounds, dtype=np.float64)
            dims = ("time", *dims)
        ds.createDimension(lat_name, len(lat))
        ds.createDimension(lon_name, len(lon))
        la = ds.createVariable(lat_name, "f8", (lat_name,))
        la.standard_name = "latitude"
        la.units = "degrees_north"
        la[:] = lat
        lo = ds.createVariable(lon_name, "f8", (lon_name,))
        lo.standard_name = "longitude"
        lo.units = "degrees_east"
        lo[:] = lon
        kw = {}
        if chunksizes is not None:
            kw = {"chunksizes": tuple(chunksizes)}
        v = ds.createVariable(name, dtype, dims, fill_value=fill_value, **kw)
        # Per variable: the dataset-level switch does not reach variables created after it.
        v.set_auto_maskandscale(False)
        for k, val in (var_attrs or {}).items():
            v.setncattr(k, val)
        v[:] = data.astype(dtype)
        for k, val in (global_attrs or {}).items():
            ds.setncattr(k, val)
    return path
