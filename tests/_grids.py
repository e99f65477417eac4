"""Tiny NetCDF inputs written into a test's tmp_path (fixtures with hand-worked answers)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._files import write_grid

CHL_STD = "mass_concentration_of_chlorophyll_a_in_sea_water"
PAR_STD = "surface_downwelling_photosynthetic_photon_flux_in_air"
SST_STD = "sea_surface_temperature"


def grid(lat0: float, lat1: float, lon0: float, lon1: float, res: float):
    lat = np.arange(lat0 + res / 2, lat1, res)
    lon = np.arange(lon0 + res / 2, lon1, res)
    return lat, lon


def _days(t: str) -> float:
    """Days since 2000-01-01 of an ISO date or time (the time units written below)."""
    return float((np.datetime64(t, "s") - np.datetime64("2000-01-01", "s")) / np.timedelta64(1, "D"))


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
    """One 2-D float32 field (fill -999); dated by ACDD attrs (start/end), a time stamp, or
    time bounds. Written by the suite's one NetCDF writer, :func:`tests._files.write_grid`."""
    attrs = {"Conventions": "CF-1.8"}
    kw = {}
    values = np.asarray(values, "f4")
    if time is not None or time_bounds is not None:
        kw["time"] = [_days(time or time_bounds[0])]
        if time_bounds is not None:
            kw["time_bounds"] = [[_days(time_bounds[0]), _days(time_bounds[1])]]
        values = values[None]
    elif start is not None:
        attrs.update(time_coverage_start=start, time_coverage_end=end)
    values = np.where(np.isnan(values), np.float32(-999.0), values)
    path.parent.mkdir(parents=True, exist_ok=True)
    return write_grid(path, values, lat, lon, name=name,
                      var_attrs={"standard_name": std, "units": units}, global_attrs=attrs,
                      dtype="f4", fill_value=np.float32(-999.0), **kw)


def write_config(path: Path, body: str) -> Path:
    path.write_text(body)
    return path


#: The [inputs] tables of a run over chl/, par/ and sst/ beside its config.
INPUTS = """[inputs.chl]
files = "chl/*.nc"
[inputs.par]
files = "par/*.nc"
[inputs.sst]
files = "sst/*.nc"
"""


def run_config(path: Path, *, run: str = "", regions: list[tuple[str, list]] = (),
               ocean: str = 'source = "temperature"', inputs: str = INPUTS,
               extra: str = "") -> Path:
    """A run config writing to out/ without figures: ``run`` adds [run] lines, ``regions``
    are (name, box) pairs, ``extra`` is appended (more tables)."""
    boxes = "".join(f'[[regions]]\nname = "{n}"\nbox = {list(b)}\n' for n, b in regions)
    return write_config(path, f"""[run]
output_dir = "out"
figures = false
{run}
{inputs}[ocean]
{ocean}
{boxes}{extra}""")


def box_run_config(path: Path, name: str, box: list[float], *, chl: str = "chl/*.nc",
                   models: str = "") -> Path:
    """A run config over chl/, par/ and sst/ beside ``path``, ocean from temperature, one box."""
    return run_config(path, run=f"models = [{models}]" if models else "", regions=[(name, box)],
                      inputs=INPUTS.replace('"chl/*.nc"', f'"{chl}"'))
