"""Make the invented demo inputs in sample_grids/ (deterministic; run from the repo root).

Scenario (invented): the Maren Sea, a mid-latitude sea with the Skerrow coast on its east
side, the Tollan Bank in the north and the open Maren Gyre to the south-west, in April 2025.
The fields are made up from smooth random patterns; they only look like ocean data.

Inputs, each in a different but common layout, so the demo exercises the readers:
- chl/:  daily chlorophyll, 1/12 degree, mg m-3, dated only by ACDD time_coverage_* attributes
         (no time dimension), float32 with _FillValue for land and clouds;
- par/:  daily-mean PAR photon flux, 1/12 degree, umol m-2 s-1, one time step per file;
- sst/:  daily SST, 1/4 degree, packed int16 in kelvin (scale_factor/add_offset), longitudes
         in 0..360 and latitudes descending;
- masks.nc: land flag and the Tollan Bank region mask on the chlorophyll grid;
- decade/: ten years (2015-2024) of monthly composites on a coarse 1/2-degree grid, one file
         per year and input with twelve monthly time steps dated by time bounds (chl in mg m-3,
         PAR in mol m-2 d-1, SST in degC), with an invented seasonal cycle, year-to-year
         variability and a slow invented trend, for comparisons of years and trends.

Usage: python scripts/make_sample_grids.py [--out sample_grids]
"""

from __future__ import annotations

import argparse
import re
import shutil
import sys
from pathlib import Path

import numpy as np
import xarray as xr

SEED = 20250565
MONTH_START = np.datetime64("2025-04-01")
N_DAYS = 30
WEST, EAST, SOUTH, NORTH = -36.0, -14.0, 40.0, 60.0
CHL_RES = 1.0 / 12.0
SST_RES = 0.25


def centres(lo: float, hi: float, res: float) -> np.ndarray:
    n = int(round((hi - lo) / res))
    return lo + res * (np.arange(n) + 0.5)


def smooth_noise(rng: np.random.Generator, shape: tuple[int, int], scale: float) -> np.ndarray:
    """Gaussian random field with correlation length ``scale`` cells (FFT filter), unit variance."""
    white = rng.standard_normal(shape)
    ky = np.fft.fftfreq(shape[0])[:, None]
    kx = np.fft.fftfreq(shape[1])[None, :]
    filt = np.exp(-0.5 * (2 * np.pi * scale) ** 2 * (kx**2 + ky**2))
    field = np.real(np.fft.ifft2(np.fft.fft2(white) * filt))
    return (field - field.mean()) / field.std()


def land_flag(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Invented coast (Skerrow, east side) and the small Vesk islands."""
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    coast = (
        -16.5 - 1.8 * np.sin(np.deg2rad((la - 40.0) * 14.0)) - 0.9 * np.cos(np.deg2rad(la * 37.0))
    )
    land = lo > coast
    for clat, clon, r in ((52.3, -27.5, 0.55), (51.6, -26.4, 0.35), (53.0, -25.6, 0.25)):
        land |= ((la - clat) / r) ** 2 + ((lo - clon) / (r / np.cos(np.deg2rad(clat)))) ** 2 < 1.0
    return land


def daily_par_mol(lat: np.ndarray, day_of_year: int) -> np.ndarray:
    """Clear-sky-like daily PAR, mol photons m-2 d-1: top-of-atmosphere daily insolation (standard
    formula, solar constant 1361 W m-2), 0.75 transmission, 0.43 PAR fraction, 4.57 umol J-1."""
    decl = np.deg2rad(23.44) * np.sin(2 * np.pi * (284 + day_of_year) / 365.0)
    phi = np.deg2rad(lat)
    h0 = np.arccos(np.clip(-np.tan(phi) * np.tan(decl), -1, 1))
    q = 1361.0 / np.pi * (h0 * np.sin(phi) * np.sin(decl) + np.cos(phi) * np.cos(decl) * np.sin(h0))
    return q * 0.75 * 0.43 * 4.57e-6 * 86400.0


#: Names of existing ocean-colour products, missions and agencies. The deflated bytes of random
#: data can spell one (read as text with the undecodable bytes dropped); a file that does is
#: written again at another deflate level: the values are the same, only the bytes differ.
_FOREIGN_NAMES = re.compile(
    r"(?i)\b(esa|nasa|noaa|jpl|gsfc|jaxa|eumetsat|cmems|copernicus|sentinel|modis|seawifs|"
    r"viirs|meris|olci|obpg|seadas|globcolour|cci|l3b|l3m)\b")
_LEVELS = (5, 4, 3, 6, 7, 8, 9, 2, 1)


def write_netcdf(ds: xr.Dataset, path: Path, encoding: dict) -> None:
    """``ds.to_netcdf(path)``, at the first deflate level whose bytes spell no foreign name."""
    for level in (None, *_LEVELS):  # first as given
        enc = {k: ({**v, "complevel": level} if v.get("zlib") and level else v)
               for k, v in encoding.items()}
        ds.to_netcdf(path, encoding=enc)
        if not _FOREIGN_NAMES.search(path.read_bytes().decode("utf-8", "ignore")):
            return
    raise RuntimeError(f"{path}: every deflate level spells a foreign name; change the seed")


def main(out: Path) -> None:
    rng = np.random.default_rng(SEED)
    lat = centres(SOUTH, NORTH, CHL_RES)
    lon = centres(WEST, EAST, CHL_RES)
    slat = centres(SOUTH, NORTH, SST_RES)
    slon = centres(WEST, EAST, SST_RES)
    ny, nx = len(lat), len(lon)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    land = land_flag(lat, lon)
    sland = land_flag(slat, slon)

    if out.exists():
        shutil.rmtree(out)
    for sub in ("chl", "par", "sst"):
        (out / sub).mkdir(parents=True)

    # masks: land flag and the Tollan Bank (a shallow bank in the north)
    bank = (((la - 57.2) / 1.1) ** 2 + ((lo + 24.0) / 2.6) ** 2 < 1.0) & ~land
    masks = xr.Dataset(
        {
            "land": (
                ("lat", "lon"),
                land.astype("i1"),
                {
                    "long_name": "land flag",
                    "flag_values": np.array([0, 1], "i1"),
                    "flag_meanings": "ocean land",
                },
            ),
            "bank": (
                ("lat", "lon"),
                bank.astype("i1"),
                {
                    "long_name": "Tollan Bank region",
                    "flag_values": np.array([0, 1], "i1"),
                    "flag_meanings": "outside inside",
                },
            ),
        },
        coords={
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        },
        attrs={"title": "Maren Sea demo masks (invented)", "Conventions": "CF-1.8"},
    )
    write_netcdf(masks, out / "masks.nc", {v: {"zlib": True} for v in masks.data_vars})

    # chlorophyll: coastal and northern enrichment, a bloom growing through the month, eddies
    dist_coast = np.clip((-16.5 - lo) / 8.0, 0, 1)
    base_log = (
        np.log(0.12)
        + 1.6 * (1 - dist_coast) ** 2
        + 1.3 * np.clip((la - 44) / 16, 0, 1)
        + 0.9 * bank
        + 0.35 * smooth_noise(rng, (ny, nx), 12)
    )
    fog = smooth_noise(rng, (ny, nx), 25)  # where cloud is persistent (fog over the cold north)
    fog = fog + 1.2 * np.clip((la - 54.0) / 6.0, 0, 1)
    sst_base = (
        19.0 - 0.62 * (slat[:, None] - 40.0) + 0.4 * smooth_noise(rng, (len(slat), len(slon)), 4)
    )
    for d in range(N_DAYS):
        day = MONTH_START + d
        doy = int((day - day.astype("datetime64[Y]")).astype(int)) + 1
        bloom = 0.9 * np.clip((la - 47) / 10, 0, 1) * np.clip((d - 8) / 18, 0, 1)
        chl = np.exp(base_log + bloom + 0.15 * smooth_noise(rng, (ny, nx), 5)).astype("f4")
        clouds = 0.55 * fog + smooth_noise(rng, (ny, nx), 18) > 0.45  # a third to half under cloud
        chl = np.where(land | clouds, np.float32(np.nan), np.round(chl, 3)).astype("f4")
        cds = xr.Dataset(
            {
                "chlor": (
                    ("lat", "lon"),
                    chl,
                    {
                        "standard_name": "mass_concentration_of_chlorophyll_a_in_sea_water",
                        "long_name": "chlorophyll-a concentration",
                        "units": "mg m-3",
                        "valid_min": np.float32(0.001),
                        "valid_max": np.float32(100.0),
                    },
                )
            },
            coords=masks.coords,
            attrs={
                "title": "Maren Sea demo chlorophyll (invented)",
                "Conventions": "CF-1.8, ACDD-1.3",
                "time_coverage_start": f"{day}T00:00:00Z",
                "time_coverage_end": f"{day}T23:59:59Z",
            },
        )
        write_netcdf(
            cds, out / "chl" / f"maren_chl_{str(day).replace('-', '')}.nc",
            {"chlor": {"zlib": True, "complevel": 4, "_FillValue": np.float32(-999.0)}},
        )

        cloud_factor = 0.55 + 0.4 * (smooth_noise(rng, (ny, nx), 20) * 0.5 + 0.5).clip(0, 1)
        par = daily_par_mol(la, doy) * cloud_factor  # mol m-2 d-1
        par_umol = np.where(land, np.nan, par / 86400.0 * 1e6).astype("f4")
        par_umol = np.round(par_umol, 1)
        pds = xr.Dataset(
            {
                "par": (
                    ("time", "lat", "lon"),
                    par_umol[None],
                    {
                        "standard_name": "surface_downwelling_photosynthetic_photon_flux_in_air",
                        "long_name": "daily mean PAR photon flux",
                        "units": "umol m-2 s-1",
                    },
                )
            },
            coords={
                "time": ("time", [day.astype("datetime64[ns]") + np.timedelta64(12, "h")]),
                **masks.coords,
            },
            attrs={"title": "Maren Sea demo PAR (invented)", "Conventions": "CF-1.8"},
        )
        write_netcdf(
            pds, out / "par" / f"maren_par_{day}.nc",
            {
                "par": {"zlib": True, "complevel": 6, "_FillValue": np.float32(-1.0)},
                "time": {"units": "hours since 2025-01-01 00:00:00", "calendar": "standard"},
            },
        )

        sst = sst_base + 0.04 * d + 0.15 * smooth_noise(rng, (len(slat), len(slon)), 3)
        sst_k = np.where(sland, np.nan, sst + 273.15)
        sds = xr.Dataset(
            {
                "sea_surface_temperature": (
                    ("time", "lat", "lon"),
                    sst_k[None, ::-1, :],
                    {
                        "standard_name": "sea_surface_temperature",
                        "long_name": "sea surface temperature",
                        "units": "K",
                    },
                )
            },
            coords={
                "time": ("time", [day.astype("datetime64[ns]")]),
                "lat": ("lat", slat[::-1], {"standard_name": "latitude", "units": "degrees_north"}),
                "lon": (
                    "lon",
                    slon % 360.0,
                    {"standard_name": "longitude", "units": "degrees_east"},
                ),
            },
            attrs={"title": "Maren Sea demo SST (invented)", "Conventions": "CF-1.8"},
        )
        write_netcdf(
            sds, out / "sst" / f"maren_sst_{str(day).replace('-', '')}.nc",
            {
                "sea_surface_temperature": {
                    "dtype": "int16",
                    "scale_factor": 0.01,
                    "add_offset": 273.15,
                    "_FillValue": np.int16(-32768),
                    "zlib": True,
                },
                "time": {"units": "days since 1981-01-01", "calendar": "standard"},
            },
        )


DECADE_SEED = 20150109
DECADE_YEARS = range(2015, 2025)
DECADE_RES = 0.5


def decade(out: Path) -> None:
    """Ten years of invented monthly composites (see the module docstring), in out/decade/."""
    rng = np.random.default_rng(DECADE_SEED)
    lat = centres(SOUTH, NORTH, DECADE_RES)
    lon = centres(WEST, EAST, DECADE_RES)
    ny, nx = len(lat), len(lon)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    land = land_flag(lat, lon)
    folder = out / "decade"
    folder.mkdir(parents=True)
    dist_coast = np.clip((-16.5 - lo) / 8.0, 0, 1)
    base_log = (np.log(0.15) + 1.4 * (1 - dist_coast) ** 2 + 1.1 * np.clip((la - 44) / 16, 0, 1)
                + 0.3 * smooth_noise(rng, (ny, nx), 3))
    coords = {
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
    }
    for year in DECADE_YEARS:
        months = np.arange(np.datetime64(f"{year}-01"), np.datetime64(f"{year + 1}-01"))
        starts = months.astype("datetime64[D]")
        ends = (months + 1).astype("datetime64[D]")
        year_anom = 0.12 * rng.standard_normal()  # a good or a poor year
        chl, par, sst = [], [], []
        for m, (a, b) in enumerate(zip(starts, ends, strict=True)):
            mid = a + (b - a) // 2
            doy = int((mid - mid.astype("datetime64[Y]")).astype(int)) + 1
            # spring bloom peaking in April-May, stronger in the north; +1.5 % a year (invented)
            bloom = 0.8 * np.exp(-0.5 * ((m - 3.5) / 1.3) ** 2) * np.clip((la - 42) / 14, 0.2, 1)
            trend = np.log(1.015) * (year - 2015)
            c = np.exp(base_log + bloom + trend + year_anom + 0.12 * smooth_noise(rng, (ny, nx), 4))
            gaps = smooth_noise(rng, (ny, nx), 6) > 1.3 - 0.6 * np.clip((la - 52) / 8, 0, 1)
            chl.append(np.where(land | gaps, np.nan, np.round(c, 3)))
            cloud = 0.6 + 0.3 * (smooth_noise(rng, (ny, nx), 8) * 0.5 + 0.5).clip(0, 1)
            par.append(np.where(land, np.nan, np.round(daily_par_mol(la, doy) * cloud, 2)))
            seasonal = -3.0 * np.cos(2 * np.pi * (m - 1.5) / 12)  # coldest in February
            t = (17.0 - 0.55 * (la - 40.0) + seasonal + 0.03 * (year - 2015)
                 + 0.3 * smooth_noise(rng, (ny, nx), 4))
            sst.append(np.where(land, np.nan, np.round(t, 2)))
        time = ("time", starts.astype("datetime64[ns]"), {"standard_name": "time",
                                                          "bounds": "time_bnds"})
        for role, values, name, std, units_ in (
            ("chl", chl, "chl", "mass_concentration_of_chlorophyll_a_in_sea_water", "mg m-3"),
            ("par", par, "par", "surface_downwelling_photosynthetic_photon_flux_in_air",
             "mol m-2 d-1"),
            ("sst", sst, "sst", "sea_surface_temperature", "degC"),
        ):
            ds = xr.Dataset(
                {name: (("time", "lat", "lon"), np.asarray(values, "f4"),
                        {"standard_name": std, "units": units_,
                         "cell_methods": "time: mean"}),
                 "time_bnds": (("time", "nv"), np.stack([starts, ends], 1).astype("datetime64[ns]"))},
                coords={"time": time, **coords},
                attrs={"title": f"Maren Sea demo monthly {role} {year} (invented)",
                       "Conventions": "CF-1.8"},
            )
            write_netcdf(
                ds, folder / f"maren_{role}_monthly_{year}.nc",
                {name: {"zlib": True, "complevel": 6, "_FillValue": np.float32(-999.0)},
                          "time": {"units": "days since 2015-01-01", "calendar": "standard"},
                          "time_bnds": {"units": "days since 2015-01-01",
                                        "calendar": "standard"}},
            )


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path("sample_grids"))
    args = ap.parse_args()
    main(args.out)
    decade(args.out)
    # the demo stations are drawn from the demo's own daily model values (configs/demo.toml,
    # which reads sample_grids/): written again here because main() clears the folder
    if args.out.resolve() == (Path(__file__).resolve().parents[1] / "sample_grids"):
        sys.path.insert(0, str(Path(__file__).resolve().parent))
        from make_sample_stations import main as make_stations

        print(f"wrote {make_stations(args.out / 'stations')}")
