"""Tests of euphotic.geo: day length (CBM model) and grid-cell areas.

External references used here:

* Forsythe, W. C., Rykiel, E. J., Stahl, R. S., Wu, H., Schoolfield, R. M. (1995). A model
  comparison for daylength as a function of latitude and day of year. Ecological Modelling
  80:87-95 (the CBM model, their equations 1-3).
* ephem (PyEphem 4.2.1): the sun's apparent declination and its geometric rising/setting.
* pyproj 3.7.2 (PROJ 9.5.1, geodesic code of Karney): ``Geod.polygon_area_perimeter``.
* Python's standard library ``datetime`` (day of the year).
"""

from __future__ import annotations

import datetime as dt
import math

import ephem
import numpy as np
import pyproj
import pytest
import xarray as xr

from euphotic import geo

# --------------------------------------------------------------------------------------
# Helpers: reference values from ephem
# --------------------------------------------------------------------------------------


def _ephem_day_length_h(lat_deg: float, date: dt.date, horizon: str = "0") -> float:
    """Hours from sunrise to sunset of the sun's centre, by ephem (PyEphem 4.2.1).

    pressure=0 switches off ephem's refraction, ``use_center=True`` takes the centre of the
    disc, so with horizon "0" this is the geometric day of the CBM model with p = 0
    (Forsythe et al. 1995, eq. 3). Longitude 0: the UT day is the local day.
    """
    obs = ephem.Observer()
    obs.lat = str(lat_deg)
    obs.lon = "0"
    obs.elevation = 0.0
    obs.pressure = 0.0
    obs.horizon = horizon
    obs.date = ephem.Date(dt.datetime(date.year, date.month, date.day))  # 00:00 UT
    sun = ephem.Sun()
    rise = obs.next_rising(sun, use_center=True)
    setting = obs.next_setting(sun, use_center=True)
    assert setting > rise  # both events fall on this UT day at |lat| <= 60
    return (setting - rise) * 24.0  # ephem dates are in days


def _ephem_declination_rad(date: dt.date) -> float:
    """Apparent declination of the sun at 12:00 UT of ``date``, radians, by ephem 4.2.1."""
    return float(ephem.Sun(ephem.Date(dt.datetime(date.year, date.month, date.day, 12))).dec)


# --------------------------------------------------------------------------------------
# day_length_from_declination
# --------------------------------------------------------------------------------------


def test_twelve_hours_everywhere_when_declination_is_zero():
    # Forsythe et al. (1995) eq. 3 with p = 0 and declination 0: the arccos argument is
    # sin(phi) * 0 / (cos(phi) * 1) = 0, arccos(0) = pi/2, D = 24 - (24/pi)(pi/2) = 12 h at
    # every latitude (worked by hand). Tolerance 1e-12 h: only float64 rounding of
    # (24/pi) * (pi/2), a few ulps of 12.
    lat = np.linspace(-80.0, 80.0, 161)
    out = geo.day_length_from_declination(lat, 0.0)
    np.testing.assert_allclose(out, 12.0, rtol=0, atol=1e-12)


def test_equator_is_always_twelve_hours():
    # Forsythe et al. (1995) eq. 3, p = 0, phi = 0: the numerator sin(0) sin(delta) is 0 for
    # any declination, so D = 12 h all year (worked by hand). Same 1e-12 h rounding tolerance.
    decl = np.deg2rad(np.linspace(-23.44, 23.44, 47))
    np.testing.assert_allclose(geo.day_length_from_declination(0.0, decl), 12.0, atol=1e-12)


# --------------------------------------------------------------------------------------
# solar_declination against ephem
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize("year", [2021, 2024])
def test_solar_declination_matches_ephem_through_the_year(year):
    # Reference: ephem 4.2.1, Sun().dec at 12:00 UT, every day of a common year (2021) and a
    # leap year (2024).
    # Measured max |CBM - ephem|: 0.525 deg in 2021 (the worst year of the leap cycle; 0.43 in
    # 2022, 0.34 in 2023, 0.23 in 2020, 0.24 in 2024), largest near the equinoxes.
    # Why it is that large: the CBM formula (Forsythe et al. 1995, eqs. 1-2) has a fixed
    # calendar. Solving cos(theta) = 0 by hand gives its equinoxes at J = 80.1 and 266.7, whereas
    # in 2021 they fell on day 79.4 (20 March 09:37 UT) and 265.8 (22 September 19:21 UT) by
    # ephem.next_equinox: about 1.2-1.3 days late, and near an equinox the declination moves
    # about 0.39 deg per day (0.4 deg/day x 1.3 d = 0.52 deg). Tolerance 0.6 deg: the measured
    # 0.525 deg plus about 0.2 day of equinox motion as margin.
    start = dt.date(year, 1, 1)
    n = (dt.date(year + 1, 1, 1) - start).days
    dates = [start + dt.timedelta(days=k) for k in range(n)]
    ours = geo.solar_declination(np.array(dates, dtype="datetime64[D]"))
    ref = np.array([_ephem_declination_rad(d) for d in dates])
    assert ours.shape == (n,)
    np.testing.assert_allclose(np.rad2deg(ours), np.rad2deg(ref), rtol=0, atol=0.6)


def test_solar_declination_extremes_are_the_obliquity():
    # Forsythe et al. (1995) eq. 2: delta = arcsin(0.39795 cos theta), so |delta| can never
    # exceed arcsin(0.39795) = 23.449 deg (worked by hand: arcsin(0.39795) = 0.409266 rad),
    # close to the obliquity of the ecliptic, 23.44 deg (handbook value, from memory). The
    # extremes over a year must sit near the solstices (day 172 and day 355 or so; ephem 4.2.1
    # puts the 2021 solstices on 21 June and 21 December = days 172 and 355). Tolerances:
    # 0.01 deg on the extreme value (the sampled day is within half a day of the model's own
    # turning point, where the declination moves < 0.001 deg per day); 2 days on the dates, as
    # the model's calendar runs about a day late (see the test above).
    days = np.arange(1, 366)
    decl = np.rad2deg(geo.solar_declination(days))
    assert decl.max() == pytest.approx(math.degrees(math.asin(0.39795)), abs=0.01)
    assert decl.min() == pytest.approx(-math.degrees(math.asin(0.39795)), abs=0.01)
    assert abs(days[decl.argmax()] - 172) <= 2
    assert abs(days[decl.argmin()] - 355) <= 2


@pytest.mark.parametrize(
    "date",
    [dt.date(2021, 1, 1), dt.date(2021, 3, 1), dt.date(2020, 3, 1), dt.date(2020, 12, 31),
     dt.date(2021, 12, 31), dt.date(2024, 7, 4)],
)
def test_date_forms_agree_with_stdlib_day_of_year(date):
    # Reference: Python's datetime, date.timetuple().tm_yday (1 = 1 January, 366 = 31 December of
    # a leap year). A date, a datetime, a datetime64, an ISO string and the integer day of the
    # year must all give the same declination; exact equality, as they must reach the same J.
    j = date.timetuple().tm_yday
    expected = geo.solar_declination(j)
    for form in (
        date,
        dt.datetime(date.year, date.month, date.day, 15, 30),
        np.datetime64(date.isoformat()),
        np.datetime64(date.isoformat() + "T23:59"),
        date.isoformat(),
    ):
        assert geo.solar_declination(form) == expected, form
        assert geo.day_length(42.0, form) == geo.day_length(42.0, j), form


# --------------------------------------------------------------------------------------
# day_length: equinox, polar day and night, ephem comparison
# --------------------------------------------------------------------------------------


def test_close_to_twelve_hours_at_the_march_equinox():
    # 20 March 2021 is the day of the March equinox (09:37 UT by ephem 4.2.1, next_equinox).
    # The true declination at noon that day is about +0.04 deg; the CBM declination is within
    # 0.6 deg of ephem's (test above), so |delta| < 0.65 deg. From Forsythe et al. (1995) eq. 3,
    # D - 12 h = (24/pi) arcsin(tan(phi) tan(delta)); at |phi| <= 45 deg that is at most
    # 7.639 h x arcsin(1 x 0.01135) = 0.0867 h = 5.2 min (worked by hand). Tolerance 5.5 min.
    # (Measured: 3.8 min at 45 deg; the model's declination that day is -0.48 deg.)
    lat = np.arange(-45.0, 45.1, 5.0)
    out = geo.day_length(lat, "2021-03-20")
    np.testing.assert_allclose(out, 12.0, rtol=0, atol=5.5 / 60.0)


@pytest.mark.parametrize(
    "lat, date, expected, ephem_error",
    [
        (80.0, "2021-12-21", 0.0, ephem.NeverUpError),
        (80.0, "2021-06-21", 24.0, ephem.AlwaysUpError),
        (-80.0, "2021-06-21", 0.0, ephem.NeverUpError),
        (-80.0, "2021-12-21", 24.0, ephem.AlwaysUpError),
    ],
)
def test_polar_night_and_polar_day(lat, date, expected, ephem_error):
    # Expected values: at 80 deg the sun stays below (above) the horizon all day when
    # |delta| > 90 - 80 = 10 deg with the opposite (same) sign as the latitude (worked by hand);
    # at the solstices |delta| = 23.4 deg. Cross-check: ephem 4.2.1 raises NeverUpError /
    # AlwaysUpError for the same place and day (geometric horizon, no refraction).
    # The function clips to exactly 0 or 24 h, so the comparison is exact.
    assert geo.day_length(lat, date) == expected
    obs = ephem.Observer()
    obs.lat, obs.lon, obs.pressure, obs.horizon = str(lat), "0", 0.0, "0"
    obs.date = ephem.Date(date.replace("-", "/") + " 00:00")
    with pytest.raises(ephem_error):
        obs.next_rising(ephem.Sun(), use_center=True)


# Tolerances for the ephem comparison, minutes, per latitude.
# Measured max |CBM - ephem| over the 24 dates below (5th and 21st of each month):
#   2021:  0.23 (0 deg), 2.62 (30), 4.39 (45), 7.48 (60) min
#   2024:  0.23,         1.32,      2.15,      3.64      min
#   (2020: 0.23/1.25/2.04/3.45; 2022: 0.23/2.19/3.64/6.24; 2023: 0.23/1.76/2.90/4.92)
#   with horizon_deg=0.8333: 2021 0.23/2.62/4.39/7.55 min, 2024 0.23/1.32/2.16/3.67 min.
# Almost all of it is the model's declination error (test above, up to 0.525 deg): near an
# equinox dD/d(delta) = (24/pi) tan(phi) h per radian, so 0.6 deg = 0.01047 rad gives
# 7.639 x tan(phi) x 0.01047 h = 0 / 2.77 / 4.80 / 8.31 min at 0 / 30 / 45 / 60 deg (by hand).
# At the equator what is left (0.23 min) is that the sun's declination changes between sunrise
# and sunset, which a one-declination-per-day model ignores. Tolerance = that bound + 0.5 min.
_DAY_LENGTH_TOL_MIN = {0.0: 0.5, 30.0: 3.3, 45.0: 5.3, 60.0: 8.9}


@pytest.mark.parametrize("year", [2021, 2024])
@pytest.mark.parametrize(
    "horizon_deg, ephem_horizon",
    # 0: centre of the disc on the geometric horizon. 0.8333 deg = 50' (refraction 34' plus the
    # sun's semi-diameter 16', the usual almanac convention, from memory), given to ephem as a
    # depression of the centre with refraction still off; 0.8333 vs 50/60 deg differs by
    # 0.00003 deg, < 0.01 s of day length.
    [(0.0, "0"), (0.8333, "-0:50")],
)
def test_day_length_matches_ephem(year, horizon_deg, ephem_horizon):
    dates = [dt.date(year, m, d) for m in range(1, 13) for d in (5, 21)]
    lats = sorted(_DAY_LENGTH_TOL_MIN)
    ours = geo.day_length(lats, np.array(dates, dtype="datetime64[D]"), horizon_deg=horizon_deg)
    assert ours.shape == (len(dates), len(lats))
    for j, lat in enumerate(lats):
        ref = np.array([_ephem_day_length_h(lat, d, ephem_horizon) for d in dates])
        diff_min = np.abs(ours[:, j] - ref) * 60.0
        assert diff_min.max() <= _DAY_LENGTH_TOL_MIN[lat], (lat, diff_min.max())


# --------------------------------------------------------------------------------------
# day_length: input and output types
# --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "dates",
    [
        np.array(["2021-01-15", "2021-06-21", "2021-10-01"], dtype="datetime64[D]"),
        ["2021-01-15", "2021-06-21", "2021-10-01"],
        [15, 172, 274],  # the same days of 2021 as days of the year (stdlib tm_yday)
    ],
)
def test_array_of_dates_gives_date_by_latitude_table(dates):
    # Each row must equal the scalar-date call: exact, it is the same arithmetic.
    lat = np.array([-70.0, -20.0, 0.0, 35.0, 66.0])
    table = geo.day_length(lat, dates)
    assert table.shape == (3, 5)
    for i, d in enumerate(dates):
        np.testing.assert_array_equal(table[i], geo.day_length(lat, d))


def test_xarray_latitude_gives_dataarray_in_hours():
    lat = xr.DataArray(np.array([-30.0, 0.0, 30.0, 60.0]), dims="lat",
                       coords={"lat": [-30.0, 0.0, 30.0, 60.0]})
    out = geo.day_length(lat, "2021-06-21")
    assert isinstance(out, xr.DataArray)
    assert out.dims == ("lat",)
    assert out.attrs["units"] == "h"
    np.testing.assert_array_equal(out.values, geo.day_length(lat.values, "2021-06-21"))


def test_xarray_latitude_and_time_give_both_dims():
    lat = xr.DataArray(np.array([0.0, 30.0, 60.0]), dims="lat")
    time = xr.DataArray(np.array(["2021-03-20", "2021-06-21"], dtype="datetime64[D]"),
                        dims="time")
    out = geo.day_length(lat, time)
    assert isinstance(out, xr.DataArray)
    assert set(out.dims) == {"lat", "time"}
    assert out.attrs["units"] == "h"
    np.testing.assert_array_equal(
        out.transpose("time", "lat").values, geo.day_length(lat.values, time.values)
    )


@pytest.mark.parametrize("n_dates", [2, 3])
def test_xarray_latitude_with_numpy_dates_gains_date_dimension(n_dates):
    # Documented behaviour (geo.day_length docstring): an array of dates adds that dimension.
    lat = xr.DataArray(np.array([0.0, 30.0, 60.0]), dims="lat")
    dates = np.array(["2021-03-20", "2021-06-21", "2021-12-21"][:n_dates], dtype="datetime64[D]")
    out = geo.day_length(lat, dates)
    assert out.size == n_dates * 3
    expected = geo.day_length(lat.values, dates)  # (n_dates, n_lat), checked above
    np.testing.assert_array_equal(np.sort(np.ravel(out.values)), np.sort(expected.ravel()))


def test_numpy_latitude_with_xarray_dates_gains_both_dimensions():
    lat = np.array([0.0, 30.0, 60.0])
    time = xr.DataArray(np.array(["2021-03-20", "2021-06-21"], dtype="datetime64[D]"),
                        dims="time")
    out = geo.day_length(lat, time)
    assert out.size == 6


# --------------------------------------------------------------------------------------
# cell_area
# --------------------------------------------------------------------------------------

#: Area of the WGS84 ellipsoid, m2: 510,065,622 km2 (handbook value, from memory; quoted e.g.
#: in GeographicLib's documentation as 510,065,621.724 km2). Independently confirmed in
#: test_wgs84_total_area_from_pyproj below.
WGS84_AREA_M2 = 510_065_622e6
#: Authalic radius, m (NIMA TR8350.2, WGS84 derived constants, 6,371,007.2 m as rounded there).
AUTHALIC_R_M = 6_371_007.2
SPHERE_AREA_M2 = 4.0 * math.pi * AUTHALIC_R_M**2  # = 510,065,624.78 km2 (by hand)


def _global_grid(res_deg: float):
    lat = np.linspace(-90.0 + res_deg / 2, 90.0 - res_deg / 2, round(180 / res_deg))
    lon = np.linspace(-180.0 + res_deg / 2, 180.0 - res_deg / 2, round(360 / res_deg))
    return lat, lon


def test_wgs84_total_area_from_pyproj():
    # The equator is a geodesic, so a Geod polygon along it encloses exactly one hemisphere;
    # pyproj 3.7.2 gives 255,032,810.862 km2, x2 = 510,065,621.724 km2. Checks the constant used
    # below against a reference library; rel 1e-9 covers the rounding of 510,065,622 km2
    # (5.4e-10).
    lon = np.linspace(-180.0, 180.0, 1001)[:-1]
    area, _ = pyproj.Geod(ellps="WGS84").polygon_area_perimeter(lon, np.zeros_like(lon))
    assert 2.0 * abs(area) == pytest.approx(WGS84_AREA_M2, rel=1e-9)


@pytest.mark.parametrize("res_deg", [1.0, 0.25])
def test_global_grid_sums_to_earth_area(res_deg):
    lat, lon = _global_grid(res_deg)
    wgs = geo.cell_area(lat, lon, earth="wgs84")
    sph = geo.cell_area(lat, lon, earth="sphere")
    assert wgs.shape == sph.shape == (lat.size, lon.size)
    assert (wgs > 0).all() and (sph > 0).all()
    # WGS84: rel 1e-9 covers the rounding of the reference to the km2 (5.4e-10) and float64
    # summation of up to 1e6 terms (~1e-13). Measured: 4.7e-11 from 510,065,621.7 km2.
    assert wgs.sum() == pytest.approx(WGS84_AREA_M2, rel=1e-9)
    # Sphere: the sum telescopes to 4 pi R^2 exactly in exact arithmetic; rel 1e-12 allows for
    # float64 rounding in sin() and the sum. Measured: 0.
    assert sph.sum() == pytest.approx(SPHERE_AREA_M2, rel=1e-12)
    # The authalic sphere has the ellipsoid's area: 510,065,624.78 vs 510,065,621.72 km2 is
    # 6.0e-9 relative (by hand), within the 1e-8 the rounded radius allows (a radius rounded to
    # 0.1 m is good to 1.6e-8 in R, 3e-8 in area; TR8350.2's 6,371,007.18 m gives 6e-9).
    assert sph.sum() == pytest.approx(WGS84_AREA_M2, rel=1e-8)


def _geod_cell_area(geod: pyproj.Geod, lat0, lat1, lon0, lon1, n=2001):
    """Area of a lat-lon cell by pyproj: the two parallels densified with n points each.

    A Geod polygon edge is a geodesic; the meridian edges are geodesics already, but a parallel
    is not, so it is replaced by n - 1 short geodesic chords.
    """
    lons = np.linspace(lon0, lon1, n)
    ring_lon = np.concatenate([lons, lons[::-1]])
    ring_lat = np.concatenate([np.full(n, lat0), np.full(n, lat1)])
    area, _ = geod.polygon_area_perimeter(ring_lon, ring_lat)
    return abs(area)


# Cells (centre lat, centre lon, size deg): equator, mid-latitudes, a quarter-degree cell, and
# cells touching both poles. Against pyproj 3.7.2 with 2001 points per parallel the measured
# relative differences are <= 1.5e-11 for all of these (e.g. 6e-12 at the equator, 1.4e-11 at
# the south pole cell); with 50 / 200 / 2000 / 20000 points they fall as 1/n^2 (1e-8, 6e-10,
# 6e-12, then a floor near 1e-11 at the polar cells), i.e. the residual is the chord error
# of the densification, not the formula. Tolerance rel 1e-10: several times the measured value.
_CELLS = [
    (0.5, 0.5, 1.0),
    (45.5, 10.5, 1.0),
    (-30.5, -120.5, 1.0),
    (-60.125, 100.125, 0.25),
    (89.5, 0.5, 1.0),
    (-89.5, -179.5, 1.0),
]


def _cell_from_grid(clat, clon, size, earth):
    """cell_area of one cell, taken from a small grid around it (edges come from centres)."""
    lat = np.array([clat - size, clat]) if clat + size > 90 else np.array([clat, clat + size])
    lon = np.array([clon, clon + size])
    areas = geo.cell_area(lat, lon, earth=earth)
    return areas[list(lat).index(clat), 0]


@pytest.mark.parametrize("clat, clon, size", _CELLS)
def test_cell_area_wgs84_matches_pyproj_geod(clat, clon, size):
    geod = pyproj.Geod(ellps="WGS84")
    ref = _geod_cell_area(geod, clat - size / 2, clat + size / 2, clon - size / 2, clon + size / 2)
    assert _cell_from_grid(clat, clon, size, "wgs84") == pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize("clat, clon, size", _CELLS)
def test_cell_area_sphere_matches_pyproj_geod_on_sphere(clat, clon, size):
    # pyproj Geod on a sphere of the authalic radius (f = 0). Same densification and the same
    # reasoning for the tolerance as the WGS84 test.
    geod = pyproj.Geod(a=AUTHALIC_R_M, f=0.0)
    ref = _geod_cell_area(geod, clat - size / 2, clat + size / 2, clon - size / 2, clon + size / 2)
    assert _cell_from_grid(clat, clon, size, "sphere") == pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize("earth", ["sphere", "wgs84"])
def test_descending_latitude_gives_flipped_areas(earth):
    lat, lon = _global_grid(1.0)
    up = geo.cell_area(lat, lon, earth=earth)
    down = geo.cell_area(lat[::-1], lon, earth=earth)
    # Same zone differences in the other order; rel 1e-12 for float64 rounding only.
    np.testing.assert_allclose(down, up[::-1], rtol=1e-12, atol=0)


def test_xarray_inputs_give_dataarray_with_lat_lon_dims():
    lat_v, lon_v = _global_grid(10.0)
    lat = xr.DataArray(lat_v, dims="lat", coords={"lat": lat_v})
    lon = xr.DataArray(lon_v, dims="lon", coords={"lon": lon_v})
    out = geo.cell_area(lat, lon, earth="wgs84")
    assert isinstance(out, xr.DataArray)
    assert out.dims == ("lat", "lon")
    assert out.shape == (18, 36)
    assert out.attrs["units"] == "m2"
    np.testing.assert_array_equal(out["lat"].values, lat_v)
    np.testing.assert_array_equal(out.values, geo.cell_area(lat_v, lon_v, earth="wgs84"))


def test_unknown_earth_model_is_rejected():
    with pytest.raises(ValueError):
        geo.cell_area([0.0, 1.0], [0.0, 1.0], earth="moon")
