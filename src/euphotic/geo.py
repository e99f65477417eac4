"""Geometry on the sphere and on the WGS84 ellipsoid: day length and grid-cell areas.

Pure functions: they take coordinates and dates and return arrays; no I/O.
"""

from __future__ import annotations

import datetime as _dt
from typing import Literal

import numpy as np
import xarray as xr

from euphotic.constants import AUTHALIC_RADIUS_M, HOURS_PER_DAY, WGS84_A_M, WGS84_F

DateLike = _dt.date | np.datetime64 | str | int


def day_of_year(date: DateLike | np.ndarray) -> np.ndarray:
    """Day of the year (1 = 1 January) of a date, a datetime64, an ISO string or an int (as is)."""
    arr = np.asarray(date)
    if arr.dtype.kind in "iu":
        return arr.astype(np.int64)
    if arr.dtype.kind == "f":
        return arr
    if arr.dtype.kind in "OU":
        arr = np.asarray(arr, dtype="datetime64[D]")
    days = arr.astype("datetime64[D]")
    years = days.astype("datetime64[Y]")
    return (days - years.astype("datetime64[D]")).astype(np.int64) + 1


def solar_declination(day: DateLike | np.ndarray) -> np.ndarray:
    """Solar declination, radians, by the CBM model.

    Parameters
    ----------
    day : date, datetime64, ISO string, or day of year (1-366)

    Returns
    -------
    numpy.ndarray
        Declination of the sun, radians.

    Notes
    -----
    .. math::
        \\theta = 0.2163108 + 2\\arctan[0.9671396\\tan(0.00860(J - 186))]

        \\delta = \\arcsin(0.39795\\cos\\theta)

    References
    ----------
    Forsythe, W. C., Rykiel, E. J., Stahl, R. S., Wu, H., Schoolfield, R. M. (1995).
    A model comparison for daylength as a function of latitude and day of year.
    Ecological Modelling 80:87-95, equations 1 and 2.
    """
    j = day_of_year(day).astype(np.float64)
    theta = 0.2163108 + 2.0 * np.arctan(0.9671396 * np.tan(0.00860 * (j - 186.0)))
    return np.arcsin(0.39795 * np.cos(theta))


def day_length_from_declination(lat, declination, *, horizon_deg: float = 0.0):
    """Hours between sunrise and sunset for a latitude (degrees) and declination (radians).

    0 h in polar night and 24 h in polar day. ``horizon_deg`` is the sun's depression below the
    horizon that counts as sunrise (0: centre of the disc on the geometric horizon).
    """
    phi = np.deg2rad(np.asarray(lat, dtype=np.float64))
    p = np.deg2rad(horizon_deg)
    num = np.sin(p) + np.sin(phi) * np.sin(declination)
    den = np.cos(phi) * np.cos(declination)
    # At the poles cos(phi) ~ 0: the sign of the numerator decides polar day or polar night.
    tiny = np.abs(den) < 1e-12
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.where(tiny, np.sign(num) * 2.0, num / np.where(tiny, 1.0, den))
    x = np.clip(x, -1.0, 1.0)
    return HOURS_PER_DAY - (HOURS_PER_DAY / np.pi) * np.arccos(x)


def day_length(lat, date, *, horizon_deg: float = 0.0):
    """Day length (photoperiod), hours, from latitude and date.

    Parameters
    ----------
    lat : array_like or xarray.DataArray
        Latitude, degrees north.
    date : date, datetime64, ISO string, day of year, or a 1-D array of them
        When an array (or a DataArray along ``time``/``day``), the result gains that dimension.
    horizon_deg : float, keyword-only
        Sun-centre depression at sunrise/sunset, degrees (0, the default, is the geometric
        horizon; 0.8333 adds refraction and the upper limb of the disc).

    Returns
    -------
    numpy.ndarray or xarray.DataArray
        Day length, h: 0 in polar night, 24 in polar day.

    Notes
    -----
    .. math:: D = 24 - \\frac{24}{\\pi}\\arccos\\left[
              \\frac{\\sin p + \\sin\\phi \\sin\\delta}{\\cos\\phi\\cos\\delta}\\right]

    with the declination :math:`\\delta` from :func:`solar_declination`.

    References
    ----------
    Forsythe et al. (1995), Ecological Modelling 80:87-95, equation 3 (CBM model).
    """
    if isinstance(lat, xr.DataArray) or isinstance(date, xr.DataArray):
        if not isinstance(date, xr.DataArray):
            d = np.asarray(date)
            date = xr.DataArray(d, dims="time") if d.ndim else d
        if not isinstance(lat, xr.DataArray):
            la = np.asarray(lat, dtype=np.float64)
            lat = xr.DataArray(la, dims="lat") if la.ndim else la
        if isinstance(date, xr.DataArray):
            decl = xr.DataArray(solar_declination(date.values), coords=date.coords, dims=date.dims)
        else:
            decl = solar_declination(date)
        out = xr.apply_ufunc(
            day_length_from_declination, lat, decl, kwargs={"horizon_deg": horizon_deg}
        )
        if isinstance(out, xr.DataArray):
            first = list(date.dims) if isinstance(date, xr.DataArray) else []
            out = out.transpose(*first, ...)
            out.attrs.update(
                units="h", long_name="day length", comment="Forsythe et al. (1995) CBM model"
            )
        return out
    decl = np.asarray(solar_declination(date))
    lat = np.asarray(lat, dtype=np.float64)
    if decl.ndim and lat.ndim:  # (date, lat) table
        decl = decl.reshape(decl.shape + (1,) * lat.ndim)
        return day_length_from_declination(lat[None, ...], decl, horizon_deg=horizon_deg)
    return day_length_from_declination(lat, decl, horizon_deg=horizon_deg)


# --------------------------------------------------------------------------------------
# Cell areas
# --------------------------------------------------------------------------------------


def cell_edges(centres) -> np.ndarray:
    """Edges of cells from their centres on a regular axis (n centres -> n + 1 edges)."""
    c = np.asarray(centres, dtype=np.float64)
    if c.size == 1:
        raise ValueError("cannot infer cell edges from a single coordinate value")
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])


def _authalic_zone(phi_rad: np.ndarray, a: float, f: float) -> np.ndarray:
    """Area from the equator to latitude phi, per radian of longitude, on an ellipsoid (m2)."""
    e2 = f * (2.0 - f)
    e = np.sqrt(e2)
    b2 = (a * (1.0 - f)) ** 2
    s = np.sin(phi_rad)
    return 0.5 * b2 * (s / (1.0 - e2 * s * s) + np.log((1.0 + e * s) / (1.0 - e * s)) / (2.0 * e))


def cell_area(lat, lon, *, earth: Literal["sphere", "wgs84"] = "sphere"):
    """Area of each cell of a regular latitude-longitude grid, m2.

    Parameters
    ----------
    lat : 1-D array_like or xarray.DataArray
        Cell-centre latitudes, degrees north (ascending or descending).
    lon : 1-D array_like or xarray.DataArray
        Cell-centre longitudes, degrees east.
    earth : {"sphere", "wgs84"}
        ``"sphere"``: sphere of the authalic radius 6,371,007.2 m (same total area as WGS84);
        ``"wgs84"``: exact zone areas on the WGS84 ellipsoid.

    Returns
    -------
    numpy.ndarray or xarray.DataArray
        Cell areas, m2, shape (lat, lon).

    Notes
    -----
    Sphere: :math:`A = R^2 \\Delta\\lambda\\,|\\sin\\phi_2 - \\sin\\phi_1|`. Ellipsoid: the same with
    the zone area :math:`\\frac{b^2}{2}[\\frac{\\sin\\phi}{1-e^2\\sin^2\\phi} +
    \\frac{1}{2e}\\ln\\frac{1+e\\sin\\phi}{1-e\\sin\\phi}]` per radian of longitude.
    Latitude edges are clipped to +-90 degrees.

    References
    ----------
    Snyder, J. P. (1987). Map Projections: A Working Manual. USGS Professional Paper 1395,
    equations 3-12 and 14-15 (authalic latitude and area on the ellipsoid).
    """
    lat_edges = np.clip(cell_edges(np.asarray(lat)), -90.0, 90.0)
    lon_edges = cell_edges(np.asarray(lon))
    phi = np.deg2rad(lat_edges)
    if earth == "sphere":
        zone = AUTHALIC_RADIUS_M**2 * np.sin(phi)
    elif earth == "wgs84":
        zone = _authalic_zone(phi, WGS84_A_M, WGS84_F)
    else:
        raise ValueError(f"earth must be 'sphere' or 'wgs84', not {earth!r}")
    band = np.abs(np.diff(zone))
    dlon = np.abs(np.diff(np.deg2rad(lon_edges)))
    area = band[:, None] * dlon[None, :]
    if isinstance(lat, xr.DataArray) or isinstance(lon, xr.DataArray):
        lat_name = lat.dims[0] if isinstance(lat, xr.DataArray) else "lat"
        lon_name = lon.dims[0] if isinstance(lon, xr.DataArray) else "lon"
        return xr.DataArray(
            area,
            dims=(lat_name, lon_name),
            coords={lat_name: np.asarray(lat), lon_name: np.asarray(lon)},
            attrs={"units": "m2", "long_name": "grid cell area", "standard_name": "cell_area"},
        )
    return area
