"""Tiny NetCDF inputs written into a test's tmp_path (fixtures with hand-worked answers)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

CHL_STD = "mass_concentration_of_chlorophyll_a_in_sea_water"
PAR_STD = "surface_downwelling_photosynthetic_photon_flux_in_air"
SST_STD = "sea_surface_temperature"


def grid(lat0: float, lat1: float, lon0: float, lon1: float, res: float):
    lat = np.arange(lat0 + res / 2, lat1, res)
    lon = np.arange(lon0 + res / 2, lon1, res)
    return lat, lon


def write_field(
    path: Path,
    name: str,
    std: str,
    units: str,
    values: np.ndarray,
    lat,
    lon,
    *,
    start: str | None = None,
    end: str | None = None,
    time: str | None = None,
    time_bounds: tuple[str, str] | None = None,
) -> Path:
    """One 2-D field; dated by ACDD attrs (start/end), a time stamp, or time bounds."""
    attrs = {"Conventions": "CF-1.8"}
    coords = {
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
    }
    va = {"standard_name": std, "units": units}
    if time is not None or time_bounds is not None:
        t = np.datetime64(time or time_bounds[0], "ns")
        coords["time"] = ("time", [t], {"standard_name": "time"})
        data = {name: (("time", "lat", "lon"), np.asarray(values, "f4")[None], va)}
        ds = xr.Dataset(data, coords=coords, attrs=attrs)
        if time_bounds is not None:
            ds["time"].attrs["bounds"] = "time_bnds"
            ds["time_bnds"] = (("time", "nv"), np.array([time_bounds], dtype="datetime64[ns]"))
    else:
        if start is not None:
            attrs.update(time_coverage_start=start, time_coverage_end=end)
        ds = xr.Dataset(
            {name: (("lat", "lon"), np.asarray(values, "f4"), va)}, coords=coords, attrs=attrs
        )
    enc = {name: {"_FillValue": np.float32(-999.0)}}
    if "time" in ds.coords:
        enc["time"] = {"units": "days since 2000-01-01"}
        if "time_bnds" in ds:
            enc["time_bnds"] = {"units": "days since 2000-01-01"}
    path.parent.mkdir(parents=True, exist_ok=True)
    ds.to_netcdf(path, encoding=enc)
    return path


def write_config(path: Path, body: str) -> Path:
    path.write_text(body)
    return path


def box_run_config(path: Path, name: str, box: list[float], *, chl: str = "chl/*.nc",
                   models: str = "") -> Path:
    """A run config over chl/, par/ and sst/ beside ``path``, ocean from temperature, one box."""
    run_models = f"models = [{models}]\n" if models else ""
    return write_config(path, f"""
[run]
{run_models}output_dir = "out"
figures = false
[inputs.chl]
files = "{chl}"
[inputs.par]
files = "par/*.nc"
[inputs.sst]
files = "sst/*.nc"
[ocean]
source = "temperature"
[[regions]]
name = "{name}"
box = {box}
""")
