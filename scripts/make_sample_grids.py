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
- bbp/:  daily particulate backscattering at 443 nm, 1/6 degree, m-1, float32, no CF standard
         name (none exists for the particulate part: found by its variable name bbp_443),
         dated by ACDD time_coverage_* attributes, with the chlorophyll's cloud gaps;
- kd490/: daily Kd(490), 1/6 degree, m-1, packed int16 (scale_factor), one time step per file,
         with a radiation_wavelength scalar coordinate, the chlorophyll's cloud gaps;
- mld/:  daily mixed-layer depth (model-like: no gaps), 1/4 degree, int16 in cm, no time
         variable or attribute: dated by the date in the file name (``date_pattern``);
- masks.nc: land flag and the Tollan Bank region mask on the chlorophyll grid;
- decade/: ten years (2015-2024) of monthly composites on a coarse 1/2-degree grid, one file
         per year and input with twelve monthly time steps dated by time bounds (chl in mg m-3,
         PAR in mol m-2 d-1, SST in degC, bbp and Kd(490) in m-1, MLD in m), with an invented
         seasonal cycle, year-to-year variability and a slow invented trend, for comparisons
         of years and trends.

Backscattering and attenuation follow the day's chlorophyll by published bio-optical relations
(:func:`kd490_from_chl`, :func:`bbp443_from_chl`) times a little noise. The April mixed layer is
that of a temperate sea in spring (:func:`april_mld`): about 20-80 m, shallower where the
chlorophyll is high (a stratified water column is where a spring bloom grows) and shoaling
through the month; in the decade demo it is deep in winter and in the north, shallow in summer
(10-300 m). They are drawn from their own random stream (``EXTRA_SEED``), so the chlorophyll,
PAR and SST files stay byte for byte as before (and bbp and Kd(490) as well: the April mixed
layer takes the same random draws it always did).

Usage: python scripts/make_sample_grids.py [--out sample_grids]
"""

from __future__ import annotations

import argparse
import hashlib
import re
import shutil
import sys
import warnings
from pathlib import Path

import numpy as np
import xarray as xr

SEED = 20250565
#: Random stream of the backscattering, attenuation and mixed-layer fields (kept apart from
#: SEED so that adding them changed no byte of the older files).
EXTRA_SEED = 20250566
EXTRA_RES = 1.0 / 6.0  # bbp and Kd(490): every 2 x 2 chlorophyll cells
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


#: Kd(490) = KW + CHI * chl ** E: Morel, A. and Maritorena, S. (2001), J. Geophys. Res.
#: 106(C4):7163-7180, eq. 8 and table 2 at 490 nm (values from memory): pure-sea-water
#: attenuation Kw(490) = 0.0166 m-1, chi(490) = 0.07242, e(490) = 0.68955.
KD490_KW, KD490_CHI, KD490_E = 0.0166, 0.07242, 0.68955


def kd490_from_chl(chl: np.ndarray) -> np.ndarray:
    """Diffuse attenuation at 490 nm, m-1, from chlorophyll, mg m-3 (Morel & Maritorena 2001)."""
    return KD490_KW + KD490_CHI * chl**KD490_E


def bbp443_from_chl(chl: np.ndarray) -> np.ndarray:
    """Particulate backscattering at 443 nm, m-1, from chlorophyll, mg m-3.

    The particle-scattering model of Morel and Maritorena (2001, J. Geophys. Res. 106:7163,
    eqs. 13-14, from memory): b_p(550) = 0.416 chl^0.766 (Loisel and Morel 1998), a
    backscattering ratio 0.002 + 0.01 (0.5 - 0.25 log10 chl), and a spectral slope
    (lambda / 550)^nu with nu = 0.5 (log10 chl - 0.3) for 0.02 < chl < 2 (0 above 2, and
    -0.5 x 1.99 below 0.02). Gives about 0.0008 m-1 at 0.1 mg m-3 and 0.003 at 1.
    """
    c = np.asarray(chl, np.float64)
    lc = np.log10(c)
    bp550 = 0.416 * c**0.766
    ratio = 0.002 + 0.01 * (0.5 - 0.25 * lc)
    nu = np.where(c >= 2.0, 0.0, 0.5 * (np.clip(lc, np.log10(0.02), None) - 0.3))
    return ratio * bp550 * (443.0 / 550.0) ** nu


def block_mean(a: np.ndarray, k: int) -> np.ndarray:
    """Mean of the valid values of each k x k block (NaN where none is valid)."""
    ny, nx = a.shape
    b = a.reshape(ny // k, k, nx // k, k)
    n = np.isfinite(b).sum(axis=(1, 3))
    total = np.nansum(b, axis=(1, 3))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, total / np.maximum(n, 1), np.nan)


def mld_field(lat: np.ndarray, month_position: float, noise: np.ndarray) -> np.ndarray:
    """Invented mixed-layer depth, m: deepest in March (``month_position`` 2.0, 0 = mid
    January), shallowest in August-September; deeper in the north (about 250 m in a northern
    winter, 20-30 m everywhere in summer), within 10-300 m."""
    winter = ((1 + np.cos(2 * np.pi * (month_position - 2.0) / 12.0)) / 2.0) ** 2
    north = np.clip((lat - 40.0) / 20.0, 0, 1)
    deep = 80.0 + 190.0 * north
    shallow = 18.0 + 10.0 * north
    return np.clip((shallow + (deep - shallow) * winter) * np.exp(0.15 * noise), 10.0, 300.0)


#: April mixed layer (invented): MLD_DEEP m where chlorophyll is MLD_CHL_LOW mg m-3 or less,
#: MLD_SHALLOW m where it is MLD_CHL_HIGH or more, log-linear between; clipped to MLD_CLIP.
MLD_DEEP, MLD_SHALLOW = 75.0, 22.0
MLD_CHL_LOW, MLD_CHL_HIGH = 0.1, 3.0
MLD_CLIP = (15.0, 95.0)


def april_mld(chl: np.ndarray, day: int, noise: np.ndarray) -> np.ndarray:
    """Invented mixed-layer depth of an April day, m, on the chlorophyll's block means
    (``chl``, mg m-3, no gaps): deep (about 75 m) in clear water, shallow (about 22 m) under a
    bloom, shoaling by a fifth through the month, with a little noise (``noise``: unit
    variance)."""
    x = np.clip(np.log(chl / MLD_CHL_LOW) / np.log(MLD_CHL_HIGH / MLD_CHL_LOW), 0.0, 1.0)
    depth = MLD_DEEP * (MLD_SHALLOW / MLD_DEEP) ** x
    shoaling = 1.1 - 0.2 * day / (N_DAYS - 1)
    return np.clip(depth * shoaling * np.exp(0.15 * noise), *MLD_CLIP)


#: Names of existing ocean-colour products, missions and agencies must not appear in the demo
#: files. The deflated bytes of random data can spell one (read as text); a file that does is
#: written again at another deflate level: the values are the same, only the bytes differ. The
#: names are kept as the first 16 hex digits of the SHA-256 of each (lower case), so that this
#: file does not spell them either.
_FOREIGN_DIGESTS = frozenset({
    "17cc65ff6ff1658c", "2b7847b7b705781d", "300e538f886e8abe", "338451619dedfb11",
    "34c9eb90bb95a978", "54a1cdddfe5eb57d", "6b9b1cc45950cbe7", "724f92f8cb384087",
    "84584567b595f781", "8a2b1a03bb171512", "8a51a590cf5b7d57", "98d950f912788501",
    "9a48c783765d5c58", "a66a539984802413", "b115ba14b41c3444", "b4cfdafea2b499f9",
    "bb79cbd0db61dd83", "c473067effc002eb", "eeeb18e53bad6842", "fc09c8a655cd76fe",
    "fde99480a48fb6c9",
})
_WORD = re.compile(r"(?i)(?<![a-z0-9])[a-z0-9]{3,10}(?![a-z0-9])")


def spells_a_foreign_name(data: bytes) -> bool:
    """Whether the bytes, read as text line by line (UTF-8 with bad bytes dropped or replaced,
    or Latin-1), hold one of the foreign names as a word."""
    for line in data.split(b"\n"):
        for text in (line.decode("utf-8", "ignore"), line.decode("utf-8", "replace"),
                     line.decode("latin-1")):
            for w in _WORD.findall(text):
                if hashlib.sha256(w.lower().encode()).hexdigest()[:16] in _FOREIGN_DIGESTS:
                    return True
    return False


_LEVELS = (5, 4, 3, 6, 7, 8, 9, 2, 1)


def write_netcdf(ds: xr.Dataset, path: Path, encoding: dict) -> None:
    """``ds.to_netcdf(path)``, at the first deflate level whose bytes spell no foreign name."""
    for level in (None, *_LEVELS):  # first as given
        enc = {k: ({**v, "complevel": level} if v.get("zlib") and level else v)
               for k, v in encoding.items()}
        ds.to_netcdf(path, encoding=enc)
        if not spells_a_foreign_name(path.read_bytes()):
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
    for sub in ("chl", "par", "sst", "bbp", "kd490", "mld"):
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
    chl_days = []  # each day's chlorophyll, for backscattering and attenuation
    for d in range(N_DAYS):
        day = MONTH_START + d
        doy = int((day - day.astype("datetime64[Y]")).astype(int)) + 1
        bloom = 0.9 * np.clip((la - 47) / 10, 0, 1) * np.clip((d - 8) / 18, 0, 1)
        chl = np.exp(base_log + bloom + 0.15 * smooth_noise(rng, (ny, nx), 5)).astype("f4")
        clouds = 0.55 * fog + smooth_noise(rng, (ny, nx), 18) > 0.45  # a third to half under cloud
        chl = np.where(land | clouds, np.float32(np.nan), np.round(chl, 3)).astype("f4")
        chl_days.append(chl)
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
    daily_optics_and_mixing(out, chl_days, masks.coords)


def daily_optics_and_mixing(out: Path, chl_days: list[np.ndarray], chl_coords) -> None:
    """bbp/, kd490/ and mld/ of the April demo (see the module docstring), from the days'
    chlorophyll and their own random stream."""
    rng = np.random.default_rng(EXTRA_SEED)
    k = int(round(EXTRA_RES / CHL_RES))
    olat, olon = centres(SOUTH, NORTH, EXTRA_RES), centres(WEST, EAST, EXTRA_RES)
    mlat, mlon = centres(SOUTH, NORTH, SST_RES), centres(WEST, EAST, SST_RES)
    mland = land_flag(mlat, mlon)

    def axes(la, lo):
        return {"lat": ("lat", la, {"standard_name": "latitude", "units": "degrees_north"}),
                "lon": ("lon", lo, {"standard_name": "longitude", "units": "degrees_east"})}

    mld_noise = smooth_noise(rng, (len(mlat), len(mlon)), 6)
    # chlorophyll on the mixed layer's grid (1/4 degree): each day's block means, cloud gaps
    # filled by the month's mean there, then by the median (the mixed layer has no gaps)
    km = int(round(SST_RES / CHL_RES))
    chl_m = [block_mean(c.astype(np.float64), km) for c in chl_days]
    with warnings.catch_warnings():  # cells under land have no mean (NaN, filled below)
        warnings.simplefilter("ignore", RuntimeWarning)
        month_mean = np.nanmean(np.stack(chl_m), axis=0)
    month_mean = np.where(np.isfinite(month_mean), month_mean, np.nanmedian(month_mean))
    for d, chl in enumerate(chl_days):
        day = MONTH_START + d
        stamp = str(day).replace("-", "")
        c = block_mean(chl.astype(np.float64), k)
        noise = np.exp(0.06 * smooth_noise(rng, c.shape, 3))
        bbp = np.round(bbp443_from_chl(c) * noise, 6).astype("f4")
        bds = xr.Dataset(
            {"bbp_443": (("lat", "lon"), bbp,
                         {"long_name": "particulate backscattering coefficient at 443 nm",
                          "units": "m-1", "valid_min": np.float32(0.0)})},
            coords=axes(olat, olon),
            attrs={"title": "Maren Sea demo particulate backscattering (invented)",
                   "Conventions": "CF-1.8, ACDD-1.3",
                   "time_coverage_start": f"{day}T00:00:00Z",
                   "time_coverage_end": f"{day}T23:59:59Z"},
        )
        write_netcdf(bds, out / "bbp" / f"maren_bbp_{stamp}.nc",
                     {"bbp_443": {"zlib": True, "complevel": 5,
                                  "_FillValue": np.float32(-999.0)}})

        kd = kd490_from_chl(c) * np.exp(0.05 * smooth_noise(rng, c.shape, 3))
        kds = xr.Dataset(
            {"kd490": (("time", "lat", "lon"), kd[None],
                       {"standard_name":
                        "volume_attenuation_coefficient_of_downwelling_radiative_flux_in_sea_water",
                        "long_name": "diffuse attenuation coefficient at 490 nm",
                        "units": "m-1"})},
            coords={"time": ("time", [day.astype("datetime64[ns]")]),
                    "wavelength": ((), 490.0, {"standard_name": "radiation_wavelength",
                                               "units": "nm"}),
                    **axes(olat, olon)},
            attrs={"title": "Maren Sea demo Kd(490) (invented)", "Conventions": "CF-1.8"},
        )
        write_netcdf(kds, out / "kd490" / f"maren_kd490_{stamp}.nc",
                     {"kd490": {"dtype": "int16", "scale_factor": 0.0001,
                                "_FillValue": np.int16(-32768), "zlib": True},
                      "wavelength": {"_FillValue": None},
                      "time": {"units": "days since 2025-01-01", "calendar": "standard"}})

        # April: a spring mixed layer, shallower under high chlorophyll, shoaling
        mixing = 0.8 * mld_noise + 0.6 * smooth_noise(rng, mld_noise.shape, 2)
        mld = april_mld(np.where(np.isfinite(chl_m[d]), chl_m[d], month_mean), d, mixing)
        mld_cm = np.where(mland, -1, np.round(mld * 100.0)).astype("i2")
        mds = xr.Dataset(
            {"mld": (("lat", "lon"), mld_cm,
                     {"standard_name": "ocean_mixed_layer_thickness_defined_by_sigma_theta",
                      "long_name": "mixed-layer depth (density threshold, invented)",
                      "units": "cm", "_FillValue": np.int16(-1)})},
            coords=axes(mlat, mlon),
            attrs={"title": "Maren Sea demo mixed-layer depth (invented)",
                   "Conventions": "CF-1.8"},
        )
        write_netcdf(mds, out / "mld" / f"maren_mld_{stamp}.nc", {"mld": {"zlib": True}})


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
    monthly_chl = {}  # year -> (12, lat, lon) chlorophyll, for backscattering and attenuation
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
        monthly_chl[year] = np.asarray(chl, np.float64)
    decade_optics_and_mixing(folder, monthly_chl, lat, land, coords)


def decade_optics_and_mixing(folder: Path, monthly_chl: dict, lat: np.ndarray,
                             land: np.ndarray, coords: dict) -> None:
    """maren_{bbp,kd490,mld}_monthly_YEAR.nc of the decade demo: bbp and Kd(490) from each
    month's chlorophyll (same gaps), the mixed layer's invented seasonal cycle; own random
    stream."""
    rng = np.random.default_rng(EXTRA_SEED + 1)
    ny, nx = land.shape
    for year, chl in monthly_chl.items():
        months = np.arange(np.datetime64(f"{year}-01"), np.datetime64(f"{year + 1}-01"))
        starts = months.astype("datetime64[D]")
        ends = (months + 1).astype("datetime64[D]")
        bbp, kd, mld = [], [], []
        year_mixing = 0.2 * rng.standard_normal()  # a stormy or a calm winter
        for m in range(12):
            c = chl[m]
            bbp.append(np.round(bbp443_from_chl(c) * np.exp(0.05 * smooth_noise(rng, (ny, nx), 3)),
                                6))
            kd.append(np.round(kd490_from_chl(c) * np.exp(0.04 * smooth_noise(rng, (ny, nx), 3)),
                               4))
            noise = 0.8 * smooth_noise(rng, (ny, nx), 4) + (year_mixing if m < 4 else 0.0) / 0.15
            mld.append(np.where(land, np.nan, np.round(mld_field(lat[:, None], m, noise), 1)))
        time = ("time", starts.astype("datetime64[ns]"), {"standard_name": "time",
                                                          "bounds": "time_bnds"})
        for role, values, attrs in (
            ("bbp", bbp, {"long_name": "particulate backscattering coefficient at 443 nm",
                          "units": "m-1"}),
            ("kd490", kd, {"standard_name": "volume_attenuation_coefficient_of_downwelling_"
                                            "radiative_flux_in_sea_water",
                           "long_name": "diffuse attenuation coefficient at 490 nm",
                           "units": "m-1"}),
            ("mld", mld, {"standard_name": "ocean_mixed_layer_thickness",
                          "units": "m"}),
        ):
            ds = xr.Dataset(
                {role: (("time", "lat", "lon"), np.asarray(values, "f4"),
                        {**attrs, "cell_methods": "time: mean"}),
                 "time_bnds": (("time", "nv"), np.stack([starts, ends], 1).astype("datetime64[ns]"))},
                coords={"time": time, **coords},
                attrs={"title": f"Maren Sea demo monthly {role} {year} (invented)",
                       "Conventions": "CF-1.8"},
            )
            write_netcdf(
                ds, folder / f"maren_{role}_monthly_{year}.nc",
                {role: {"zlib": True, "complevel": 6, "_FillValue": np.float32(-999.0)},
                 "time": {"units": "days since 2015-01-01", "calendar": "standard"},
                 "time_bnds": {"units": "days since 2015-01-01", "calendar": "standard"}},
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
