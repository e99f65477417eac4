"""Tests of euphotic.readers (opening, decoding, dating, unit conversion) and grid matching.

External references used here:

* A real file not made by this project: the monthly HadISST 1.1 SST file that Cartopy ships
  (``cartopy/data/netcdf/HadISST1_SST_update.nc``; Rayner et al. 2003, JGR 108(D14) 4407),
  read independently with the netCDF4 library and its time bounds decoded with cftime.
* CF Conventions 1.11: section 2.5.1 (``_FillValue``, ``missing_value``, ``valid_min``,
  ``valid_max``, ``valid_range``), section 8.1 (``scale_factor``/``add_offset`` packing; the
  valid range of packed data is given in the packed type), section 7.1 (time ``bounds``),
  section 4.2 (longitude in degrees_east, any 360-degree range).
* ACDD 1.3 (Attribute Convention for Data Discovery): ``time_coverage_start`` and
  ``time_coverage_end`` as ISO 8601 strings.
* McCree, K. J. (1972), Agricultural Meteorology 10:443-453: 4.57 umol photons per joule of
  daylight PAR. SI: 1 einstein = 1 mol photons; 1 day = 86,400 s.
* UDUNITS-2 unit database (Unidata, ``lib/udunits2-common.xml``): the accepted names of the
  Celsius and Kelvin scales; CF requires units strings that UDUNITS understands.
* ISO 8601: calendar dates in the extended (2020-03-31) and basic (20200331) formats.
* CF Conventions 4.4.1: the ``360_day`` calendar (every month has 30 days).
* Python's standard library ``datetime`` (day-of-year and month arithmetic).

All other files are tiny synthetic NetCDF files written into ``tmp_path`` by
``tests/_files.py``; their expected readings are worked out by hand and stated beside each check.
"""

from __future__ import annotations

import datetime as dt
import importlib.util
from pathlib import Path

import cftime
import dask
import netCDF4
import numpy as np
import pytest
import xarray as xr

from euphotic.errors import GridMismatchError, InputFileError
from euphotic.readers import InputSpec, match_grid, open_input

from ._files import STD, axis, write_grid
from .conftest import NoCompute


@pytest.fixture(autouse=True)
def _no_physical_screen(monkeypatch):
    """The tests here check decoding, dating, units and grids with values chosen for the
    arithmetic (e.g. SST -5 degC, PAR 172,800 mol m-2 d-1), not for realism: the physical
    range screen is switched off (infinite ranges) and tested in test_screen.py."""
    from euphotic import screen

    monkeypatch.setattr(screen, "DEFAULT_VALID_RANGE",
                        {r: (-np.inf, np.inf) for r in screen.DEFAULT_VALID_RANGE})


def _d(text: str) -> np.datetime64:
    return np.datetime64(text, "ns")


def _days(*dates: dt.date) -> list[np.datetime64]:
    return [np.datetime64(d, "ns") for d in dates]


# A one-day ACDD coverage, for files whose dates are not what a test is about.
ONE_DAY = {"time_coverage_start": "2020-01-01", "time_coverage_end": "2020-01-01"}


def _assert_error_names(excinfo, path, *phrases: str) -> None:
    """The error is an InputFileError that starts with the path and says what is wrong."""
    err = excinfo.value
    assert isinstance(err, InputFileError)
    assert err.path == str(path)
    msg = str(err)
    assert msg.startswith(f"{path}: "), msg
    for phrase in phrases:
        assert phrase in msg, msg


# ------------------------------------------------------------------------------------------
# 1. A real, non-project file: HadISST 1.1 monthly SST shipped by Cartopy
# ------------------------------------------------------------------------------------------

_CARTOPY = importlib.util.find_spec("cartopy")
HADISST = (Path(_CARTOPY.origin).parent / "data" / "netcdf" / "HadISST1_SST_update.nc"
           if _CARTOPY is not None else Path("cartopy-not-installed"))


@pytest.mark.skipif(not HADISST.exists(), reason="Cartopy's HadISST sample file is not installed")
def test_hadisst_file_from_cartopy_reads_like_netcdf4():
    # Independent read: netCDF4 with automatic masking/scaling off, so the raw stored floats.
    with netCDF4.Dataset(HADISST) as ds:
        ds.set_auto_maskandscale(False)
        raw = np.array(ds["sst"][0], dtype=np.float64)
        raw_lat = np.array(ds["lat"][:], dtype=np.float64)
        raw_lon = np.array(ds["lon"][:], dtype=np.float64)
        fill = float(ds["sst"].getncattr("_FillValue"))
        t_units = ds["time"].units
        t_cal = getattr(ds["time"], "calendar", "standard")  # CF default calendar
        bnds = cftime.num2date(np.array(ds["time_bnds"][:]), t_units, calendar=t_cal)
    assert raw_lat[0] > raw_lat[-1], "the HadISST file stores latitudes north to south"
    assert fill == pytest.approx(-1e30)

    da = open_input(InputSpec(role="sst", files=str(HADISST)))

    assert da.dims == ("time", "lat", "lon")
    assert da.sizes == {"time": 1, "lat": 180, "lon": 360}
    # Latitude ascending after reading: the raw axis flipped, -89.5 .. 89.5.
    np.testing.assert_array_equal(da.lat.values, raw_lat[::-1])
    assert np.all(np.diff(da.lat.values) > 0)
    # Longitude already in [-180, 180): unchanged, -179.5 .. 179.5.
    np.testing.assert_array_equal(da.lon.values, raw_lon)
    assert da.attrs["units"] == "degC" and da.attrs["source_variable"] == "sst"

    got = da.isel(time=0).values.astype(np.float64)
    flipped = raw[::-1, :]
    land = flipped == fill
    # Land and sea-ice cells carry the -1e30 fill: NaN after reading, and nothing else is NaN.
    assert land.sum() > 1000
    np.testing.assert_array_equal(np.isnan(got), land)
    # The file is already in degC with scale_factor 1, add_offset 0: the stored float32
    # values come back unchanged (exact comparison; same float32 numbers).
    np.testing.assert_array_equal(got[~land], flipped[~land])
    # A few named cells, located on the raw (north-to-south) axis by their coordinates.
    for lat_c, lon_c in [(0.5, -150.5), (-40.5, 20.5), (30.5, 160.5)]:
        i_raw = int(np.argmin(np.abs(raw_lat - lat_c)))
        j_raw = int(np.argmin(np.abs(raw_lon - lon_c)))
        value = float(da.sel(lat=lat_c, lon=lon_c).isel(time=0))
        assert raw[i_raw, j_raw] != fill
        assert value == float(raw[i_raw, j_raw])
    # Warmest and coldest ocean values: the file's own actual_range is [-1.8, 33.142124] degC.
    assert np.nanmax(got) == pytest.approx(33.142124, abs=1e-5)
    assert np.nanmin(got) == pytest.approx(-1.8, abs=1e-6)

    # Period from time_bnds (CF 7.1), decoded here with cftime: one calendar month; the upper
    # bound is midnight of the next month, so it is the exclusive end as it stands.
    b0, b1 = bnds[0]
    start = np.datetime64(dt.date(b0.year, b0.month, b0.day), "ns")
    end = np.datetime64(dt.date(b1.year, b1.month, b1.day), "ns")
    assert (b0.day, b0.hour, b1.day, b1.hour) == (1, 0, 1, 0)
    assert da.period_start.values[0] == start
    assert da.period_end.values[0] == end
    month = start.astype("datetime64[M]")
    assert (month + 1).astype("datetime64[ns]") == end  # exactly one calendar month


# ------------------------------------------------------------------------------------------
# 2. Decoding: packing, fill values, valid range (CF 2.5.1 and 8.1)
# ------------------------------------------------------------------------------------------

# Raw int16 values, packed Kelvin: T[K] = raw * 0.01 + 273.15, so T[degC] = raw * 0.01 (by hand).
PACKED_RAW = np.array(
    [
        [-32768, 0, 1234, 2000],  # fill, 0.00, 12.34, 20.00 degC
        [-500, 4000, -501, 4001],  # -5.00 (= valid_min), 40.00 (= valid_max), below, above
        [2685, -180, 3000, 32767],  # 26.85, -1.80, 30.00, far above valid_max
    ],
    dtype=np.int16,
)
PACKED_EXPECTED_C = np.array(
    [
        [np.nan, 0.0, 12.34, 20.0],
        [-5.0, 40.0, np.nan, np.nan],
        [26.85, -1.80, 30.0, np.nan],
    ]
)


@pytest.mark.parametrize("attr_dtype", [np.float32, np.float64])
@pytest.mark.parametrize("range_attrs", ["min_max", "range"])
def test_packed_int16_kelvin_with_valid_range_in_packed_units(tmp_path, attr_dtype, range_attrs):
    # CF 8.1: valid_min/valid_max (or valid_range) of packed data are in the packed type, so
    # -500 and 4000 mean -5 and 40 degC; values outside are missing (CF 2.5.1).
    if range_attrs == "min_max":
        rng = {"valid_min": np.int16(-500), "valid_max": np.int16(4000)}
    else:
        rng = {"valid_range": np.array([-500, 4000], dtype=np.int16)}
    path = write_grid(
        tmp_path / "sst_packed.nc",
        PACKED_RAW,
        axis(-1.0, 1.0, 3),
        axis(10.0, 1.0, 4),
        name="analysed_sst",
        dtype="i2",
        fill_value=np.int16(-32768),
        var_attrs={
            "standard_name": STD["sst"],
            "units": "kelvin",
            "scale_factor": attr_dtype(0.01),
            "add_offset": attr_dtype(273.15),
            **rng,
        },
        global_attrs=ONE_DAY,
    )
    da = open_input(InputSpec(role="sst", files=str(path)))
    got = da.isel(time=0).values
    # Tolerance: float32 attributes hold 273.15 and 0.01 only to float32 precision (spacing
    # 3e-5 near 273), so 1e-4 degC = 1 % of the 0.01 K packing step; float64 attributes give
    # the hand values to rounding error.
    atol = 1e-4 if attr_dtype is np.float32 else 1e-9
    np.testing.assert_allclose(got, PACKED_EXPECTED_C, rtol=0, atol=atol)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(PACKED_EXPECTED_C))


# xarray warns that two different fill values are both decoded to NaN: that is the point here.
@pytest.mark.filterwarnings("ignore:variable 'chl' has multiple fill values")
def test_fill_value_and_missing_value_both_masked(tmp_path):
    # CF 2.5.1: both _FillValue and missing_value mark missing data.
    data = np.array([[0.1, -999.0], [-1.0, 2.5]], dtype=np.float32)
    path = write_grid(
        tmp_path / "chl.nc", data, [0.5, 1.5], [0.5, 1.5], name="chl",
        fill_value=np.float32(-999.0),
        var_attrs={"standard_name": STD["chl"], "units": "mg m-3",
                   "missing_value": np.float32(-1.0)},
        global_attrs=ONE_DAY,
    )
    got = open_input(InputSpec(role="chl", files=str(path))).isel(time=0).values
    np.testing.assert_array_equal(np.isnan(got), [[False, True], [True, False]])
    # float32 storage of 0.1 and 2.5: compare at float32 precision.
    np.testing.assert_allclose(got[[0, 1], [0, 1]], [0.1, 2.5], rtol=1e-7)


def test_unpacked_valid_range_masks_in_stored_units(tmp_path):
    # Unpacked float data: valid_range is in the data's own units (CF 2.5.1).
    data = np.array([[0.005, 0.01], [100.0, 150.0]], dtype=np.float32)
    path = write_grid(
        tmp_path / "chl.nc", data, [0.5, 1.5], [0.5, 1.5], name="chl",
        var_attrs={"standard_name": STD["chl"], "units": "mg m-3",
                   "valid_range": np.array([0.01, 100.0], dtype=np.float32)},
        global_attrs=ONE_DAY,
    )
    got = open_input(InputSpec(role="chl", files=str(path))).isel(time=0).values
    # 0.005 below, 150 above: missing; the bounds themselves are valid.
    np.testing.assert_array_equal(np.isnan(got), [[True, False], [False, True]])


# ------------------------------------------------------------------------------------------
# 3. Longitude conventions (CF 4.2: any 360-degree range is allowed)
# ------------------------------------------------------------------------------------------


def test_longitudes_0_to_360_reordered_to_pm180_with_values_following_cells(tmp_path):
    lon = axis(0.0, 1.0, 360)  # 0, 1, ..., 359
    lat = axis(-1.0, 1.0, 3)
    # Each cell holds its own longitude (plus 1000 x row), so a moved cell is recognisable.
    data = lon[None, :] + 1000.0 * np.arange(3)[:, None]
    path = write_grid(tmp_path / "sst.nc", data, lat, lon, name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      global_attrs=ONE_DAY)
    da = open_input(InputSpec(role="sst", files=str(path)))
    new_lon = da.lon.values
    # By hand: 0..179 stay, 180..359 become -180..-1; sorted that is -180, -179, ..., 179.
    np.testing.assert_array_equal(new_lon, axis(-180.0, 1.0, 360))
    got = da.isel(time=0).values
    expected = np.mod(new_lon, 360.0)[None, :] + 1000.0 * np.arange(3)[:, None]
    np.testing.assert_array_equal(got, expected)
    assert float(da.sel(lon=-90.0).isel(time=0, lat=0)) == 270.0
    assert float(da.sel(lon=-180.0).isel(time=0, lat=2)) == 2180.0


def test_regional_grid_contiguous_only_across_dateline_stays_0_to_360(tmp_path):
    # 170E..160W written as 170..200 degrees_east: contiguous only in 0..360, so kept as is.
    lon = axis(170.0, 5.0, 7)
    path = write_grid(tmp_path / "sst.nc", np.tile(lon, (2, 1)), [0.5, 1.5], lon, name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      global_attrs=ONE_DAY)
    da = open_input(InputSpec(role="sst", files=str(path)))
    np.testing.assert_array_equal(da.lon.values, lon)
    np.testing.assert_array_equal(da.isel(time=0).values[0], lon)


# ------------------------------------------------------------------------------------------
# 4. Dates from ACDD time_coverage_start/end (no time dimension)
# ------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("start", "end", "exp_start", "exp_end"),
    [
        # Date-only end: that whole day is included, so the exclusive end is the next day.
        ("2020-03-01", "2020-03-31", dt.date(2020, 3, 1), dt.date(2020, 4, 1)),
        ("2020-03-01", "2020-03-01", dt.date(2020, 3, 1), dt.date(2020, 3, 2)),
        # End exactly at midnight: it is the start of the next period, so it is exclusive.
        ("2020-03-01T00:00:00Z", "2020-04-01T00:00:00Z", dt.date(2020, 3, 1), dt.date(2020, 4, 1)),
        # End at 23:59:59: the last second of 31 March, so that day is included.
        ("2020-03-01T00:00:00Z", "2020-03-31T23:59:59Z", dt.date(2020, 3, 1), dt.date(2020, 4, 1)),
        # An 8-day composite across a leap day: 26 Feb .. 4 Mar 2020 inclusive.
        ("2020-02-26T00:00:00.000Z", "2020-03-04T23:59:59.999Z",
         dt.date(2020, 2, 26), dt.date(2020, 3, 5)),
    ],
)
def test_acdd_time_coverage_sets_period(tmp_path, start, end, exp_start, exp_end):
    path = write_grid(
        tmp_path / "chl.nc", np.full((2, 2), 0.3), [0.5, 1.5], [0.5, 1.5], name="chl",
        var_attrs={"standard_name": STD["chl"], "units": "mg m-3"},
        global_attrs={"time_coverage_start": start, "time_coverage_end": end},
    )
    da = open_input(InputSpec(role="chl", files=str(path)))
    assert da.dims == ("time", "lat", "lon") and da.sizes["time"] == 1
    assert list(da.period_start.values) == _days(exp_start)
    assert list(da.period_end.values) == _days(exp_end)
    assert da.time.values[0] == da.period_start.values[0]


def test_acdd_basic_format_date_only_end_is_inclusive(tmp_path):
    # ISO 8601 (and ACDD 1.3, which allows the basic format) : "20200331" is the calendar date
    # 31 March 2020, the same as "2020-03-31"; as a coverage end that whole day is included.
    path = write_grid(
        tmp_path / "chl.nc", np.full((2, 2), 0.3), [0.5, 1.5], [0.5, 1.5], name="chl",
        var_attrs={"standard_name": STD["chl"], "units": "mg m-3"},
        global_attrs={"time_coverage_start": "20200301", "time_coverage_end": "20200331"},
    )
    da = open_input(InputSpec(role="chl", files=str(path)))
    assert list(da.period_start.values) == _days(dt.date(2020, 3, 1))
    assert list(da.period_end.values) == _days(dt.date(2020, 4, 1))


def test_acdd_preferred_over_single_time_stamp_without_bounds(tmp_path):
    # One mid-month stamp (2020-03-16) and a monthly ACDD coverage: the period is the month.
    path = write_grid(
        tmp_path / "chl.nc", np.full((1, 2, 2), 0.3), [0.5, 1.5], [0.5, 1.5], name="chl",
        var_attrs={"standard_name": STD["chl"], "units": "mg m-3"},
        time=[15.0], time_units="days since 2020-03-01",
        global_attrs={"time_coverage_start": "2020-03-01", "time_coverage_end": "2020-03-31"},
    )
    da = open_input(InputSpec(role="chl", files=str(path)))
    assert list(da.period_start.values) == _days(dt.date(2020, 3, 1))
    assert list(da.period_end.values) == _days(dt.date(2020, 4, 1))


# ------------------------------------------------------------------------------------------
# 5. Units: PAR (McCree 1972; 86,400 s per day), chlorophyll, temperature
# ------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("units", "std", "factor"),
    [
        # Daily-mean photon flux: umol m-2 s-1 x 86,400 s d-1 x 1e-6 mol/umol = x 0.0864.
        ("umol m-2 s-1", STD["par"], 0.0864),
        ("umol photons m-2 s-1", STD["par"], 0.0864),
        ("mol m-2 s-1", STD["par"], 86400.0),
        # Daily-mean energy flux: W m-2 x 4.57 umol J-1 (McCree 1972) x 0.0864 = x 0.394848.
        ("W m-2", STD["par_energy"], 4.57 * 0.0864),
        # A daily photon dose is already in the model's unit (1 einstein = 1 mol photons).
        ("einstein m-2 day-1", STD["par"], 1.0),
        ("mol m-2 d-1", STD["par"], 1.0),
    ],
)
def test_par_units_converted_to_daily_dose(tmp_path, units, std, factor):
    values = np.array([[0.0, 10.0], [250.0, 612.5]])
    path = write_grid(tmp_path / "par.nc", values, [0.5, 1.5], [0.5, 1.5], name="par",
                      var_attrs={"standard_name": std, "units": units}, global_attrs=ONE_DAY)
    da = open_input(InputSpec(role="par", files=str(path)))
    assert da.attrs["units"] == "mol m-2 d-1"
    # float64 data and a product of two or three factors: equal to 1e-12 relative.
    np.testing.assert_allclose(da.isel(time=0).values, values * factor, rtol=1e-12, atol=0)


@pytest.mark.parametrize(
    ("role", "name", "units", "raw", "expected"),
    [
        # 1 ug L-1 = 1e-6 g / 1e-3 m3 = 1e-3 g m-3 = 1 mg m-3 (SI prefixes).
        ("chl", "chl_a", "ug L-1", [0.05, 1.0, 12.5, 60.0], [0.05, 1.0, 12.5, 60.0]),
        ("chl", "chl_a", "mg m^-3", [0.05, 1.0, 12.5, 60.0], [0.05, 1.0, 12.5, 60.0]),
        ("chl", "chl_a", "g m-3", [0.05, 1.0, 12.5, 60.0], [50.0, 1000.0, 12500.0, 60000.0]),
        # T[degC] = T[K] - 273.15 (SI definition of the Celsius scale).
        ("sst", "sst", "K", [271.35, 273.15, 293.15, 305.0], [-1.8, 0.0, 20.0, 31.85]),
        # No units attribute in the file: the units given in the config ("kelvin") are used.
        ("sst", "sst", None, [271.35, 273.15, 293.15, 305.0], [-1.8, 0.0, 20.0, 31.85]),
    ],
)
def test_chl_and_sst_units_converted(tmp_path, role, name, units, raw, expected):
    attrs = {"standard_name": STD[role]}
    if units is not None:
        attrs["units"] = units
    path = write_grid(tmp_path / "x.nc", np.reshape(raw, (2, 2)), [0.5, 1.5], [0.5, 1.5],
                      name=name, var_attrs=attrs, global_attrs=ONE_DAY)
    spec = InputSpec(role=role, files=str(path), units=None if units is not None else "kelvin")
    da = open_input(spec)
    # float64 arithmetic on values of order 300: 1e-9 absolute.
    np.testing.assert_allclose(da.isel(time=0).values.ravel(), expected, rtol=0, atol=1e-9)
    assert da.attrs["source_variable"] == name


# UDUNITS-2 (lib/udunits2-common.xml and udunits2-derived.xml, Unidata) names of the Celsius and
# Kelvin scales. CF requires units strings that UDUNITS accepts, so each is a legal CF unit.
_CELSIUS = ["degree_Celsius", "degrees_Celsius", "\u00b0C", "celsius", "degC", "deg_C", "degreeC",
            "degrees_C"]
_CELSIUS_MORE = ["degree_C", "degreesC", "degs_C", "degsC", "\u2103"]
_KELVIN = ["K", "kelvin", "\u00b0K", "degK", "deg_K", "degreeK"]
_KELVIN_MORE = ["degree_K", "degrees_K", "degree_kelvin", "degrees_kelvin", "degreesK", "degs_K",
               "degsK"]


@pytest.mark.parametrize(
    ("units", "offset"),
    [(u, 0.0) for u in _CELSIUS + _CELSIUS_MORE] + [(u, -273.15) for u in _KELVIN + _KELVIN_MORE],
)
def test_udunits_temperature_spellings(tmp_path, units, offset):
    raw = np.array([[271.35, 293.15]]) if offset else np.array([[-1.8, 20.0]])
    path = write_grid(tmp_path / "sst.nc", raw, [0.5], [0.5, 1.5], name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": units},
                      global_attrs=ONE_DAY)
    da = open_input(InputSpec(role="sst", files=str(path)))
    # -1.8 and 20 degC either way (T[degC] = T[K] - 273.15); float64 rounding: 1e-9.
    np.testing.assert_allclose(da.isel(time=0).values, [[-1.8, 20.0]], rtol=0, atol=1e-9)


# ------------------------------------------------------------------------------------------
# 6. Grid matching (match_grid): interpolation, area averaging, dateline wrap
# ------------------------------------------------------------------------------------------


def _target(lat, lon) -> xr.DataArray:
    """A chlorophyll-like target grid (only its lat/lon matter to match_grid)."""
    return xr.DataArray(np.zeros((1, len(lat), len(lon))), dims=("time", "lat", "lon"),
                        coords={"lat": lat, "lon": lon})


def test_coarse_sst_interpolated_onto_finer_chl_grid_reproduces_linear_field(tmp_path):
    # SST on 1 degree, centres -0.5..10.5 N and 99.5..110.5 E; target 0.25 degree over
    # 0..10 N, 100..110 E, every target centre strictly inside the source centres.
    lat_s, lon_s = axis(-0.5, 1.0, 12), axis(99.5, 1.0, 12)
    field = lambda la, lo: 0.7 * la - 0.3 * lo + 40.0  # noqa: E731 (linear in lat and lon)
    data = field(lat_s[:, None], lon_s[None, :])
    path = write_grid(tmp_path / "sst.nc", data, lat_s, lon_s, name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      global_attrs=ONE_DAY)
    sst = open_input(InputSpec(role="sst", files=str(path)))
    lat_t, lon_t = axis(0.125, 0.25, 40), axis(100.125, 0.25, 40)
    out = match_grid(sst, _target(lat_t, lon_t), str(path))
    np.testing.assert_array_equal(out.lat.values, lat_t)
    np.testing.assert_array_equal(out.lon.values, lon_t)
    # Bilinear interpolation is exact for a field linear in each axis (by hand); float64
    # rounding only, so 1e-9 degC.
    np.testing.assert_allclose(out.isel(time=0).values, field(lat_t[:, None], lon_t[None, :]),
                               rtol=0, atol=1e-9)
    assert out.attrs["units"] == "degC"


def test_interpolation_skips_missing_neighbours(tmp_path):
    # A constant 15 degC field with one missing (land) cell: every target cell has at least one
    # valid neighbour on each axis pass, and a weighted mean of 15s is 15 (by hand).
    lat_s, lon_s = axis(-0.5, 1.0, 6), axis(-0.5, 1.0, 6)
    data = np.full((6, 6), 15.0)
    data[2, 3] = np.nan
    path = write_grid(tmp_path / "sst.nc", data, lat_s, lon_s, name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      global_attrs=ONE_DAY)
    sst = open_input(InputSpec(role="sst", files=str(path)))
    lat_t, lon_t = axis(0.125, 0.25, 16), axis(0.125, 0.25, 16)
    got = match_grid(sst, _target(lat_t, lon_t), str(path)).isel(time=0).values
    assert not np.isnan(got).any()
    np.testing.assert_allclose(got, 15.0, rtol=0, atol=1e-12)


def test_fine_grid_area_averaged_onto_quarter_degree(tmp_path):
    # Target: 0.25 degree, 8 x 8 cells over 10..12 N, 5..3 W. Source: 0.05 degree (ratio 5)
    # over 9.5..12.5 N, 5.5..2.5 W (wider than the target, so cells must be picked by position).
    lat_t, lon_t = axis(10.125, 0.25, 8), axis(-4.875, 0.25, 8)
    lat_s, lon_s = axis(9.525, 0.05, 60), axis(-5.475, 0.05, 60)
    i = np.floor((lat_s - 10.0) / 0.25 + 1e-9).astype(int)
    j = np.floor((lon_s + 5.0) / 0.25 + 1e-9).astype(int)
    inside = (i[:, None] >= 0) & (i[:, None] < 8) & (j[None, :] >= 0) & (j[None, :] < 8)
    # Each source cell holds the number of the target cell it lies in, 100 + 10 i + j; source
    # cells outside the target hold 1e6, which must not leak into any average.
    data = np.where(inside, 100.0 + 10.0 * i[:, None] + j[None, :], 1e6)
    rng = np.random.default_rng(0)
    holes = rng.random(data.shape) < 0.3  # 30 % missing: skipped, the mean is unchanged
    data[holes] = np.nan
    # One target cell (i=2, j=5) entirely missing: stays missing.
    data[np.ix_((i == 2), (j == 5))] = np.nan
    # Chunked 7 x 7 inside the file, which does not divide the ratio 5.
    path = write_grid(tmp_path / "chl_fine.nc", data[None], lat_s, lon_s, name="chl",
                      var_attrs={"standard_name": STD["chl"], "units": "mg m-3"},
                      time=[0.0], time_units="days since 2020-01-01", chunksizes=(1, 7, 7),
                      fill_value=np.float64(-999.0))
    chl = open_input(InputSpec(role="chl", files=str(path)))
    got = match_grid(chl, _target(lat_t, lon_t), str(path)).isel(time=0).values
    expected = 100.0 + 10.0 * np.arange(8)[:, None] + np.arange(8)[None, :]
    expected[2, 5] = np.nan
    # A weighted mean of equal values: exact up to float64 rounding.
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))


def test_area_average_weights_by_spherical_cell_area():
    # 1-degree cells averaged onto 5-degree cells at 60..70 N with field = latitude. The area of
    # a band between latitudes a and b on a sphere is proportional to sin(b) - sin(a)
    # (Archimedes' hat-box theorem), worked out here from cell edges, not cell centres.
    lat_s = axis(60.5, 1.0, 10)
    lon_s = axis(0.5, 1.0, 5)
    src = xr.DataArray(np.repeat(lat_s[:, None], 5, axis=1)[None], dims=("time", "lat", "lon"),
                       coords={"lat": lat_s, "lon": lon_s})
    out = match_grid(src, _target(np.array([62.5, 67.5]), np.array([2.5])), "in-memory")
    for k, (lo, hi) in enumerate([(60.0, 65.0), (65.0, 70.0)]):
        edges = np.deg2rad(np.arange(lo, hi + 0.5, 1.0))
        w = np.diff(np.sin(edges))
        centres = np.rad2deg(0.5 * (edges[1:] + edges[:-1]))
        expected = float(np.sum(w * centres) / np.sum(w))
        # Below the centre (62.5, 67.5) because the southern rows are larger; float64: 1e-12.
        assert expected < (lo + hi) / 2 - 0.03
        assert float(out.isel(time=0, lat=k, lon=0)) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("target_convention", ["pm180", "0to360"])
def test_global_coarse_grid_wraps_across_dateline(tmp_path, target_convention):
    # Global 1-degree SST, lon centres -179.5..179.5, each cell holding its column index 0..359.
    lon_s = axis(-179.5, 1.0, 360)
    lat_s = axis(-0.5, 1.0, 3)
    data = np.tile(np.arange(360.0), (3, 1))
    path = write_grid(tmp_path / "sst.nc", data, lat_s, lon_s, name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      global_attrs=ONE_DAY)
    sst = open_input(InputSpec(role="sst", files=str(path)))
    first = -179.875 if target_convention == "pm180" else 0.125
    lon_t = axis(first, 0.25, 1440)
    lat_t = axis(0.125, 0.25, 4)
    out = match_grid(sst, _target(lat_t, lon_t), str(path)).isel(time=0, lat=0)
    assert not np.isnan(out.values).any()
    # By hand: -179.875 lies 0.375 deg west of -179.5 (column 0) and 0.625 deg east of 179.5
    # (column 359, across the dateline): 0.625 * 0 + 0.375 * 359 = 134.625. 179.875 mirrors it:
    # 0.375 * 0 + 0.625 * 359 = 224.375. 0.125 E: 0.375 * 179 + 0.625 * 180 = 179.625.
    # (-179.875 is 180.125 and 179.875 is itself in the 0..360 convention.)
    at = {(-179.875 if target_convention == "pm180" else 180.125): 134.625,
          179.875: 224.375, 0.125: 179.625}
    for x, v in at.items():
        assert float(out.sel(lon=x)) == pytest.approx(v, abs=1e-9)


# ------------------------------------------------------------------------------------------
# 7. Dates from file names and from time stamps
# ------------------------------------------------------------------------------------------


def _chl_file(path: Path, value: float) -> Path:
    return write_grid(path, np.full((2, 2), value), [0.5, 1.5], [0.5, 1.5], name="chl",
                      var_attrs={"standard_name": STD["chl"], "units": "mg m-3"})


def test_date_pattern_year_day_of_year_with_8_day_period(tmp_path):
    # Written out of order; open_input sorts by period start.
    for doy, v in [(17, 3.0), (1, 1.0), (9, 2.0), (361, 4.0)]:
        _chl_file(tmp_path / f"chl_2020{doy:03d}_8D.nc", v)
    spec = InputSpec(role="chl", files=str(tmp_path / "chl_*_8D.nc"),
                     date_pattern=r"chl_(?P<start>\d{7})_8D", date_format="%Y%j", period=8)
    da = open_input(spec)
    # Day of year n of 2020 is 1 Jan + (n - 1) days (stdlib datetime); each period is 8 days,
    # so the last one (day 361 = 26 Dec, a leap year) runs into 2021: ends 3 Jan 2021 (excl.).
    jan1 = dt.date(2020, 1, 1)
    starts = [jan1 + dt.timedelta(days=n - 1) for n in (1, 9, 17, 361)]
    assert list(da.period_start.values) == _days(*starts)
    assert list(da.period_end.values) == _days(*(s + dt.timedelta(days=8) for s in starts))
    assert starts[-1] == dt.date(2020, 12, 26)
    assert da.period_end.values[-1] == _d("2021-01-03")
    np.testing.assert_array_equal(da.isel(lat=0, lon=0).values, [1.0, 2.0, 3.0, 4.0])
    assert len(da.attrs["files"]) == 4


def test_date_pattern_start_and_inclusive_end_groups(tmp_path):
    p1 = _chl_file(tmp_path / "chl_20200101_20200108.nc", 1.0)
    p2 = _chl_file(tmp_path / "chl_20200109_20200116.nc", 2.0)
    spec = InputSpec(role="chl", files=[str(p2), str(p1)],
                     date_pattern=r"(?P<start>\d{8})_(?P<end>\d{8})")
    da = open_input(spec)
    # The end group is the last day included: exclusive ends 9 Jan and 17 Jan (8 days each).
    assert list(da.period_start.values) == _days(dt.date(2020, 1, 1), dt.date(2020, 1, 9))
    assert list(da.period_end.values) == _days(dt.date(2020, 1, 9), dt.date(2020, 1, 17))


def test_date_pattern_month_period(tmp_path):
    _chl_file(tmp_path / "chl_202002.nc", 1.0)
    spec = InputSpec(role="chl", files=str(tmp_path / "chl_*.nc"),
                     date_pattern=r"_(?P<start>\d{6})\.nc$", date_format="%Y%m", period="month")
    da = open_input(spec)
    # February 2020 has 29 days: 1 Feb .. 1 Mar (exclusive).
    assert list(da.period_start.values) == _days(dt.date(2020, 2, 1))
    assert list(da.period_end.values) == _days(dt.date(2020, 3, 1))


@pytest.mark.parametrize(
    ("times", "exp_starts", "exp_ends"),
    [
        # Daily stamps at noon: each its own day.
        ([0.5, 1.5, 2.5], ["2000-01-01", "2000-01-02", "2000-01-03"],
         ["2000-01-02", "2000-01-03", "2000-01-04"]),
        # Mid-month stamps (spacing 29-31 days): the calendar month of each stamp.
        ([14.0, 45.0, 74.0], ["2000-01-01", "2000-02-01", "2000-03-01"],
         ["2000-02-01", "2000-03-01", "2000-04-01"]),
        # 8-day stamps at the start of each composite: 8-day periods.
        ([0.0, 8.0, 16.0], ["2000-01-01", "2000-01-09", "2000-01-17"],
         ["2000-01-09", "2000-01-17", "2000-01-25"]),
    ],
)
def test_periods_from_time_stamps_without_bounds(tmp_path, times, exp_starts, exp_ends):
    path = write_grid(tmp_path / "sst.nc", np.zeros((3, 2, 2)), [0.5, 1.5], [0.5, 1.5], name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      time=times, time_units="days since 2000-01-01 00:00:00")
    da = open_input(InputSpec(role="sst", files=str(path)))
    assert list(da.period_start.values) == [_d(s) for s in exp_starts]
    assert list(da.period_end.values) == [_d(s) for s in exp_ends]


def test_one_mid_month_stamp_per_file_gives_monthly_periods(tmp_path):
    # Three monthly files, each with one stamp on the 15th (days since 2001-01-01: 14, 45, 73).
    # The spacing across files (31, 28 days) says monthly: each file covers its calendar month.
    for k, day in enumerate([14.0, 45.0, 73.0]):
        write_grid(tmp_path / f"sst_{k}.nc", np.full((1, 2, 2), float(k)), [0.5, 1.5], [0.5, 1.5],
                   name="sst", var_attrs={"standard_name": STD["sst"], "units": "degC"},
                   time=[day], time_units="days since 2001-01-01")
    da = open_input(InputSpec(role="sst", files=str(tmp_path / "sst_*.nc")))
    assert list(da.period_start.values) == _days(dt.date(2001, 1, 1), dt.date(2001, 2, 1),
                                                 dt.date(2001, 3, 1))
    assert list(da.period_end.values) == _days(dt.date(2001, 2, 1), dt.date(2001, 3, 1),
                                               dt.date(2001, 4, 1))


def test_date_pattern_takes_precedence_over_time_bounds(tmp_path):
    # Bounds say January 2000; the name says 5 Jan 2020, one day (the configured pattern wins).
    path = write_grid(tmp_path / "sst_20200105.nc", np.zeros((1, 2, 2)), [0.5, 1.5], [0.5, 1.5],
                      name="sst", var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      time=[15.0], time_bounds=[[0.0, 31.0]], time_units="days since 2000-01-01")
    da = open_input(InputSpec(role="sst", files=str(path), date_pattern=r"(?P<start>\d{8})"))
    assert list(da.period_start.values) == [_d("2020-01-05")]
    assert list(da.period_end.values) == [_d("2020-01-06")]
    # Without the pattern, the bounds: [2000-01-01, 2000-02-01).
    da = open_input(InputSpec(role="sst", files=str(path)))
    assert list(da.period_start.values) == [_d("2000-01-01")]
    assert list(da.period_end.values) == [_d("2000-02-01")]


def test_period_option_overrides_stamp_spacing(tmp_path):
    # A single stamp gives no spacing; period=8 says each file covers 8 days.
    path = write_grid(tmp_path / "sst.nc", np.zeros((1, 2, 2)), [0.5, 1.5], [0.5, 1.5], name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      time=[40.0], time_units="days since 2000-01-01")
    da = open_input(InputSpec(role="sst", files=str(path), period=8))
    assert list(da.period_start.values) == [_d("2000-02-10")]
    assert list(da.period_end.values) == [_d("2000-02-18")]


def test_360_day_calendar_stamp_on_30_february_is_reported_cleanly(tmp_path):
    # CF 4.4.1: the 360_day calendar has 30 days in every month, so 2000-02-29 and 2000-02-30
    # exist (day numbers 58 and 59 since 2000-01-01). Such days have no proleptic Gregorian
    # date; the reader must either date them or say so naming the file - not crash.
    path = write_grid(tmp_path / "sst.nc", np.zeros((2, 2, 2)), [0.5, 1.5], [0.5, 1.5], name="sst",
                      var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      time=[58.5, 59.5], time_units="days since 2000-01-01", calendar="360_day")
    try:
        da = open_input(InputSpec(role="sst", files=str(path)))
    except InputFileError as err:
        assert err.path == str(path)
    else:
        assert np.all(da.period_end.values - da.period_start.values == np.timedelta64(1, "D"))


# ------------------------------------------------------------------------------------------
# 8. Laziness
# ------------------------------------------------------------------------------------------


def test_open_and_match_grid_build_lazy_arrays_without_computing(tmp_path):
    lat_c, lon_c = axis(0.125, 0.25, 8), axis(0.125, 0.25, 8)
    for day in (1, 2):
        write_grid(tmp_path / f"chl_202001{day:02d}.nc", np.full((8, 8), 0.2 * day), lat_c, lon_c,
                   name="chl", var_attrs={"standard_name": STD["chl"], "units": "ug L-1"},
                   fill_value=np.float64(-1.0))
    lat_s, lon_s = axis(-0.5, 1.0, 4), axis(-0.5, 1.0, 4)
    write_grid(tmp_path / "sst.nc", np.full((2, 4, 4), 300.0), lat_s, lon_s, name="sst",
               var_attrs={"standard_name": STD["sst"], "units": "K", "valid_min": 260.0},
               time=[0.5, 1.5], time_units="days since 2020-01-01")
    with NoCompute():
        chl = open_input(InputSpec(role="chl", files=str(tmp_path / "chl_*.nc"),
                                   date_pattern=r"(?P<start>\d{8})"))
        sst = open_input(InputSpec(role="sst", files=str(tmp_path / "sst.nc")))
        sst_on_chl = match_grid(sst, chl, str(tmp_path / "sst.nc"))
        chl_coarse = match_grid(chl, _target(axis(0.5, 1.0, 2), axis(0.5, 1.0, 2)), "chl")
    for da in (chl, sst, sst_on_chl, chl_coarse):
        assert dask.is_dask_collection(da.data), type(da.data)
    # The guard does work: computing inside it fails.
    with NoCompute(), pytest.raises(AssertionError, match="computed early"):
        sst_on_chl.values  # noqa: B018
    # And outside it the values are right: 300 K = 26.85 degC; 0.2 ug L-1 = 0.2 mg m-3.
    np.testing.assert_allclose(sst_on_chl.values, 26.85, atol=1e-9)
    np.testing.assert_allclose(chl_coarse.isel(time=1).values, 0.4, rtol=1e-12)


# ------------------------------------------------------------------------------------------
# 9. Bad input: one clear InputFileError naming the file
# ------------------------------------------------------------------------------------------


def test_missing_variable_by_standard_name(tmp_path):
    path = write_grid(tmp_path / "chl.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="chl",
                      var_attrs={"units": "mg m-3"}, global_attrs=ONE_DAY)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path)))
    _assert_error_names(exc, path, "no chl variable", STD["chl"], "chl")


def test_missing_named_variable(tmp_path):
    path = write_grid(tmp_path / "chl.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="chl",
                      var_attrs={"units": "mg m-3"}, global_attrs=ONE_DAY)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path), variable="chl_a"))
    _assert_error_names(exc, path, "no variable 'chl_a'", "data variables: chl")


@pytest.mark.parametrize(
    ("role", "units", "phrase"),
    [
        ("sst", "furlong", "'furlong' cannot be converted"),  # a length, not a temperature
        ("chl", "blargs per fortnight", "unknown unit"),  # not a unit at all
        ("par", "mol m-2", "has no time"),  # a dose with no period
        ("par", "mg m-3", "not a photon or energy flux"),
    ],
)
def test_unusable_units(tmp_path, role, units, phrase):
    path = write_grid(tmp_path / "x.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="v",
                      var_attrs={"standard_name": STD[role], "units": units},
                      global_attrs=ONE_DAY)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role=role, files=str(path)))
    _assert_error_names(exc, path, phrase, "'v'")


def test_no_units_attribute(tmp_path):
    path = write_grid(tmp_path / "chl.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="chl",
                      var_attrs={"standard_name": STD["chl"]}, global_attrs=ONE_DAY)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path)))
    _assert_error_names(exc, path, "no units attribute")


def test_no_time_information(tmp_path):
    path = write_grid(tmp_path / "chl.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="chl",
                      var_attrs={"standard_name": STD["chl"], "units": "mg m-3"})
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path)))
    _assert_error_names(exc, path, "no time information")


@pytest.mark.parametrize(
    ("attrs", "phrase"),
    [
        ({"time_coverage_start": "March 2020", "time_coverage_end": "2020-03-31"},
         "is not an ISO 8601 date"),
        ({"time_coverage_start": "2020-03-31T00:00:00Z", "time_coverage_end": "2020-03-01"},
         "is not after time_coverage_start"),
    ],
)
def test_bad_acdd_dates(tmp_path, attrs, phrase):
    path = write_grid(tmp_path / "chl.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="chl",
                      var_attrs={"standard_name": STD["chl"], "units": "mg m-3"},
                      global_attrs=attrs)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path)))
    _assert_error_names(exc, path, phrase)


def test_file_name_not_matching_date_pattern(tmp_path):
    path = _chl_file(tmp_path / "chl_latest.nc", 1.0)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path), date_pattern=r"(?P<start>\d{8})"))
    _assert_error_names(exc, path, "does not match date_pattern")


def test_empty_glob_names_the_pattern(tmp_path):
    pattern = str(tmp_path / "no_such_dir" / "chl_*.nc")
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=pattern))
    _assert_error_names(exc, pattern, "matches no file")


def test_missing_file_and_relative_path_resolved_against_base_dir(tmp_path):
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="sst", files="sst.nc", base_dir=tmp_path))
    _assert_error_names(exc, tmp_path / "sst.nc", "does not exist")


def test_text_file_named_nc_is_not_netcdf(tmp_path):
    path = tmp_path / "chl.nc"
    path.write_text("this is not a NetCDF file\n")
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path)))
    _assert_error_names(exc, path, "cannot be opened as NetCDF")


def test_files_of_one_input_on_different_grids(tmp_path):
    write_grid(tmp_path / "chl_20200101.nc", np.ones((2, 2)), [0.5, 1.5], [0.5, 1.5], name="chl",
               var_attrs={"standard_name": STD["chl"], "units": "mg m-3"})
    p2 = write_grid(tmp_path / "chl_20200102.nc", np.ones((2, 2)), [0.5, 1.5], [10.5, 11.5],
                    name="chl", var_attrs={"standard_name": STD["chl"], "units": "mg m-3"})
    with pytest.raises(GridMismatchError) as exc:
        open_input(InputSpec(role="chl", files=str(tmp_path / "chl_*.nc"),
                             date_pattern=r"(?P<start>\d{8})"))
    _assert_error_names(exc, p2, "grid differs from the first chl file")


def test_irregular_latitudes_in_a_file(tmp_path):
    path = write_grid(tmp_path / "sst.nc", np.ones((4, 2)), [0.5, 1.5, 3.5, 4.5], [0.5, 1.5],
                      name="sst", var_attrs={"standard_name": STD["sst"], "units": "degC"},
                      global_attrs=ONE_DAY)
    with pytest.raises(GridMismatchError) as exc:
        open_input(InputSpec(role="sst", files=str(path)))
    _assert_error_names(exc, path, "latitudes are not a regular axis")


def test_extra_dimension_is_rejected(tmp_path):
    # A depth axis of 2 levels: which one is the surface is not the reader's guess to make.
    path = tmp_path / "chl.nc"
    with netCDF4.Dataset(path, "w") as ds:
        for n, size in (("depth", 2), ("lat", 2), ("lon", 2)):
            ds.createDimension(n, size)
            ds.createVariable(n, "f8", (n,))[:] = np.arange(size) + 0.5
        v = ds.createVariable("chl", "f4", ("depth", "lat", "lon"))
        v.standard_name, v.units = STD["chl"], "mg m-3"
        v[:] = np.ones((2, 2, 2))
        ds.setncatts(ONE_DAY)
    with pytest.raises(InputFileError) as exc:
        open_input(InputSpec(role="chl", files=str(path)))
    _assert_error_names(exc, path, "extra dimension 'depth'")


def test_match_grid_rejects_non_whole_ratio(tmp_path):
    # 0.1-degree source onto a 0.25-degree target: ratio 2.5 cells per target cell.
    src = _target(axis(0.05, 0.1, 20), axis(0.05, 0.1, 20))
    with pytest.raises(GridMismatchError) as exc:
        match_grid(src, _target(axis(0.125, 0.25, 8), axis(0.125, 0.25, 8)), "/data/par_fine.nc")
    _assert_error_names(exc, "/data/par_fine.nc", "non-whole ratio 2.500")


def test_match_grid_rejects_irregular_latitude():
    src = _target(np.array([0.5, 1.5, 3.5, 4.5]), axis(0.5, 1.0, 4))
    with pytest.raises(GridMismatchError) as exc:
        match_grid(src, _target(axis(0.125, 0.25, 16), axis(0.125, 0.25, 16)), "/data/sst.nc")
    _assert_error_names(exc, "/data/sst.nc", "lat is not a regular axis")


def test_match_grid_rejects_regional_grid_not_covering_target():
    # Coarse 1-degree SST over 0..5 N only; the chlorophyll grid reaches 10 N.
    src = _target(axis(0.5, 1.0, 5), axis(0.5, 1.0, 10))
    with pytest.raises(GridMismatchError) as exc:
        match_grid(src, _target(axis(0.125, 0.25, 40), axis(0.125, 0.25, 40)), "/data/sst.nc")
    _assert_error_names(exc, "/data/sst.nc", "does not cover the target")


# ------------------------------------------------------------------------------------------
# a series of files laid out alike is read as one stack (light h5py check per file)
# ------------------------------------------------------------------------------------------

SERIES_DATES = {
    # how each day's file is dated -> write_grid keywords for day d (0-based, April 2024)
    "time stamps (units differ per file)": lambda d: dict(time=[0.5], time_units=f"days since 2024-04-{d + 1:02d}"),
    "time bounds": lambda d: dict(time=[d + 0.5], time_bounds=[[d, d + 1]], time_units="days since 2024-04-01"),
    "ACDD attributes": lambda d: dict(global_attrs={"time_coverage_start": f"2024-04-{d + 1:02d}",
                                                    "time_coverage_end": f"2024-04-{d + 1:02d}"}),
    "file name": lambda d: dict(time=[0.0], time_units="days since 1970-01-01"),  # wrong on purpose
}


@pytest.mark.parametrize("how", list(SERIES_DATES))
def test_series_stacked_like_files_read_one_by_one(tmp_path, monkeypatch, how):
    """Five daily files, one of them packed differently (it must be opened on its own): the
    values, periods and file list equal those of the netCDF library reading every file in full
    (netCDF4-python is the reference)."""
    from euphotic import readers

    rng = np.random.default_rng(21)
    lat, lon = axis(-4.5, 1.0, 10), axis(100.5, 1.0, 12)
    for d in range(5):
        values = rng.uniform(270.0, 300.0, (10, 12))
        packed = np.round((values - 273.15) / (0.01 if d != 3 else 0.02)).astype("i2")
        kw = SERIES_DATES[how](d)
        if "time" in kw:
            packed = packed[None]
        write_grid(
            tmp_path / f"sst_202404{d + 1:02d}.nc", packed, lat, lon, name="t", dtype="i2",
            fill_value=np.int16(-32767), chunksizes=(1, 5, 6) if "time" in kw else (5, 6),
            var_attrs={"standard_name": STD["sst"], "units": "degC", "add_offset": 273.15 - 273.15,
                       "scale_factor": 0.01 if d != 3 else 0.02},
            **kw,
        )
    spec = InputSpec(role="sst", files=str(tmp_path / "sst_*.nc"),
                     date_pattern=r"_(?P<start>\d{8})" if how == "file name" else None)
    calls = []
    real = readers._open_one
    monkeypatch.setattr(readers, "_open_one", lambda *a, **k: calls.append(a[1]) or real(*a, **k))
    got = open_input(spec)
    # the first file (whose layout and decoder then read the stack of the four alike: no
    # second open of it) and the differently packed fourth day
    assert len(calls) == 2
    monkeypatch.setenv("EUPHOTIC_READER", "netcdf4")
    want = open_input(spec)
    assert len(calls) == 2 + 5
    np.testing.assert_array_equal(got.values, want.values)
    np.testing.assert_array_equal(got.period_start.values, want.period_start.values)
    np.testing.assert_array_equal(got.period_end.values, want.period_end.values)
    assert got.period_start.values[0] == np.datetime64("2024-04-01")
    assert got.attrs["files"] == want.attrs["files"]
    # The file of each time step, aligned with the time axis (the stack and the odd file).
    assert got.attrs["period_files"] == [str(tmp_path / f"sst_202404{d:02d}.nc")
                                         for d in range(1, 6)]
    assert got.attrs["period_files"] == want.attrs["period_files"]


# ------------------------------------------------------------------------------------------
# How each input was read (attrs shown by the pre-flight check)
# ------------------------------------------------------------------------------------------


def test_attrs_say_how_a_packed_kelvin_file_was_read(tmp_path):
    lat = axis(1.5, -1.0, 3)  # stored north to south
    lon = axis(0.5, 1.0, 360)  # 0.5 .. 359.5 degrees_east
    packed = np.full((3, 360), 1500, dtype="i2")  # 15.00 K above 273.15 K: 15 degC
    path = write_grid(tmp_path / "sst.nc", packed, lat, lon, name="analysed_sst", dtype="i2",
                      var_attrs={"standard_name": STD["sst"], "units": "kelvin",
                                 "scale_factor": 0.01, "add_offset": 273.15},
                      global_attrs=ONE_DAY)
    da = open_input(InputSpec(role="sst", files=str(path)))
    assert {k: da.attrs[k] for k in ("identified_by", "units_in_file", "conversion",
                                     "file_lat_order", "file_lon_convention")} == {
        "identified_by": "standard_name 'sea_surface_temperature'",
        "units_in_file": "kelvin",
        "conversion": "kelvin -> degC (- 273.15)",  # 0 degC = 273.15 K (SI)
        "file_lat_order": "descending",
        "file_lon_convention": "[0, 360)",
    }


def test_attrs_say_how_a_named_par_flux_was_read(tmp_path):
    path = write_grid(tmp_path / "par.nc", np.full((2, 3), 400.0), [0.5, 1.5],
                      [-1.0, 0.0, 1.0], name="light",
                      var_attrs={"units": "umol m-2 s-1"}, global_attrs=ONE_DAY)
    da = open_input(InputSpec(role="par", files=str(path), variable="light"))
    assert da.attrs["identified_by"] == "config variable 'light'"
    # 1 umol s-1 = 1e-6 mol x 86,400 s d-1 = 0.0864 mol d-1 (SI)
    assert da.attrs["conversion"] == "umol m-2 s-1 -> mol m-2 d-1 (x 0.0864)"
    assert da.attrs["file_lat_order"] == "ascending"
    assert da.attrs["file_lon_convention"] == "[-180, 180)"
    assert da.attrs["period_files"] == [str(path)]


def test_damaged_temperature_chunk_found_by_the_open_time_sample(tmp_path):
    """A temperature file's values are sampled when it is opened (kelvin check): a damaged
    chunk there is reported like any other damaged chunk, naming the file."""
    path = tmp_path / "sst.nc"
    with netCDF4.Dataset(path, "w") as ds:
        for k, v in ONE_DAY.items():
            ds.setncattr(k, v)
        for name, n in (("lat", 4), ("lon", 5)):
            ds.createDimension(name, n)
            c = ds.createVariable(name, "f8", (name,))
            c.units = "degrees_north" if name == "lat" else "degrees_east"
            c[:] = np.arange(n) + 0.5
        v = ds.createVariable("sst", "f4", ("lat", "lon"), zlib=True, chunksizes=(4, 5))
        v.standard_name, v.units = STD["sst"], "degC"
        v[:] = np.linspace(10, 20, 20).reshape(4, 5)
    import h5py

    with h5py.File(path, "r") as f:
        info = f["sst"].id.get_chunk_info(0)
    raw = bytearray(path.read_bytes())
    raw[int(info.byte_offset) + int(info.size) // 2] ^= 0xFF
    path.write_bytes(bytes(raw))
    with pytest.raises(InputFileError) as excinfo:
        open_input(InputSpec(role="sst", files=str(path)))
    # netCDF-C's error string for a failed HDF5 filter (NC_EHDFERR) is "NetCDF: HDF error".
    assert str(excinfo.value) == (f"{path}: reading values failed (RuntimeError: NetCDF: HDF "
                                  "error): the file is damaged or unreadable")
