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


def monthly_case(tmp: Path, n_months: int, *, res: float = 0.25, seed: int = 7,
                 chl_value: float | None = None, west_gap_last_month: bool = False,
                 models=("vgpm",), regions=(("Box", [-30.0, 40.0, -20.0, 50.0]),),
                 run: str = "") -> Path:
    """Monthly composites (time bounds) of chl, PAR and SST for ``n_months`` months from
    2023-01 on a 10 x 10 degree box (40-50 N, 30-20 W) at ``res`` degree, seeded random values
    (or chlorophyll ``chl_value`` everywhere); with ``west_gap_last_month`` the last month has no
    chlorophyll west of 25 W. Ocean from valid temperature. Returns the run config."""
    lat, lon = grid(40.0, 50.0, -30.0, -20.0, res)
    rng = np.random.default_rng(seed)
    shape = (len(lat), len(lon))
    for m in range(n_months):
        a = np.datetime64("2023-01") + m
        bounds = (str(a.astype("datetime64[D]")), str((a + 1).astype("datetime64[D]")))
        chl = rng.uniform(0.1, 3.0, shape) if chl_value is None else np.full(shape, chl_value)
        if west_gap_last_month and m == n_months - 1:
            chl[:, lon < -25.0] = np.nan
        write_field(tmp / "chl" / f"c{m:02d}.nc", "chl", CHL_STD, "mg m-3", chl, lat, lon,
                    time_bounds=bounds)
        write_field(tmp / "par" / f"p{m:02d}.nc", "par", PAR_STD, "einstein m-2 day-1",
                    rng.uniform(10, 50, shape), lat, lon, time_bounds=bounds)
        write_field(tmp / "sst" / f"s{m:02d}.nc", "sst", SST_STD, "degC",
                    rng.uniform(5, 20, shape), lat, lon, time_bounds=bounds)
    lines = "models = [" + ", ".join(f'"{m}"' for m in models) + "]\n" + run
    return run_config(tmp / "run.toml", run=lines, regions=list(regions))
