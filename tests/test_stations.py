"""Station tables: columns, unit and quotient conversions, profile integration, bad rows."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from euphotic.stations import (
    DEFAULT_GROSS_TO_NET,
    DEFAULT_QUOTIENT,
    MatchupOptionError,
    StationFileError,
    integrate_profile,
    parse_production_units,
    quotient_value,
    read_stations,
    to_carbon,
)
from euphotic.units import ureg


def _row(**kw):
    base = {"station": "S1", "lat": "50", "lon": "-30", "date": "2025-04-05", "value": "100",
            "units": "mg C m-2 d-1", "method": "c14"}
    base.update(kw)
    return base


def _table(*rows) -> pd.DataFrame:
    return pd.DataFrame(list(rows))


# ---- unit conversions: hand arithmetic carried through pint -------------------------------


def test_carbon_mass_units():
    # 1 g C m-2 d-1 = 1000 mg C m-2 d-1 (SI prefixes)
    assert to_carbon(1.0, "g C m-2 d-1") == pytest.approx(1000.0, rel=1e-12)
    assert to_carbon(250.0, "mgC m-2 day-1") == pytest.approx(250.0, rel=1e-12)


def test_carbon_amount_units():
    # 10 mmol C x 12.011 g mol-1 (IUPAC conventional atomic weight of C) = 120.11 mg C
    expected = (ureg.Quantity(10.0, "mmol m-2 d-1") * ureg.Quantity(12.011, "g mol-1")).to(
        "mg m-2 d-1").magnitude
    assert expected == pytest.approx(120.11, rel=1e-12)  # hand arithmetic
    assert to_carbon(10.0, "mmol C m-2 d-1") == pytest.approx(expected, rel=1e-12)


def test_oxygen_with_quotient():
    # 14 mmol O2 / 1.4 (nitrate-based quotient, Laws 1991) = 10 mmol C = 120.11 mg C
    assert to_carbon(14.0, "mmol O2 m-2 d-1", quotient=1.4) == pytest.approx(120.11, rel=1e-12)
    # 11 mmol O2 / 1.1 (ammonium-based) = 10 mmol C
    assert to_carbon(11.0, "mmol O2 m-2 d-1", quotient=1.1) == pytest.approx(120.11, rel=1e-12)
    # mass of O2: 31.998 mg O2 = 1 mmol O2 -> / 1.4 mmol C -> 12.011 / 1.4 mg C
    assert to_carbon(31.998, "mg O2 m-2 d-1", quotient=1.4) == pytest.approx(12.011 / 1.4,
                                                                              rel=1e-12)
    # per litre: 1 umol O2 L-1 d-1 = 1 mmol O2 m-3 d-1
    assert to_carbon(1.4, "umol O2 L-1 d-1", quotient=1.4) == pytest.approx(12.011, rel=1e-12)


def test_volumetric_units_are_recognised():
    assert parse_production_units("mg C m-3 d-1").volumetric
    assert not parse_production_units("mmol O2 m-2 d-1").volumetric
    for bad in ("mg N m-2 d-1", "mg C m-2", "W m-2", "", "C"):
        with pytest.raises(ValueError):
            parse_production_units(bad)


def test_quotient_choices():
    assert quotient_value("ammonium") == 1.1 and quotient_value("nitrate") == 1.4
    assert DEFAULT_QUOTIENT == 1.4
    assert quotient_value("1.25") == 1.25
    with pytest.raises(MatchupOptionError, match=r"^--quotient: expected"):
        quotient_value("ten", "--quotient")


def test_table_keeps_given_values_and_converts():
    t = read_stations(_table(_row(value="14", units="mmol O2 m-2 d-1", method="o2_gross"),
                             _row(station="S2", value="0.5", units="g C m-2 d-1")))
    s = t.stations.set_index("station")
    assert s.loc["S1", "value_given"] == 14.0 and s.loc["S1", "units_given"] == "mmol O2 m-2 d-1"
    assert s.loc["S1", "carbon_mgC_m-2_d-1"] == pytest.approx(120.11, rel=1e-12)
    assert s.loc["S1", "npp_equivalent_mgC_m-2_d-1"] == pytest.approx(120.11 / 1.5, rel=1e-12)
    assert DEFAULT_GROSS_TO_NET == pytest.approx(1 / 1.5)
    assert "quotient 1.4" in s.loc["S1", "conversion"]
    assert s.loc["S2", "npp_equivalent_mgC_m-2_d-1"] == pytest.approx(500.0)
    assert t.bad.empty


# ---- profiles ----------------------------------------------------------------------------


def test_linear_profile_exact():
    # p(z) = 10 - 0.1 z sampled from the surface: the trapezoid rule is exact for a linear
    # profile; integral 0..50 m = 10*50 - 0.05*50**2 = 375 (hand-worked)
    z = np.array([0.0, 10.0, 25.0, 50.0])
    total, depth = integrate_profile(z, 10 - 0.1 * z)
    assert total == pytest.approx(375.0, rel=1e-12) and depth == 50.0


def test_exponential_profile_converges_to_analytic_integral():
    # p(z) = 20 exp(-z / 15): integral 0..60 = 20*15*(1 - exp(-4)) = 294.505... (analytic);
    # the trapezoid rule on 1-m samples is within 0.05 % (error ~ h**2/12 * p'' * L)
    z = np.arange(0.0, 61.0, 1.0)
    total, _ = integrate_profile(z, 20 * np.exp(-z / 15))
    assert total == pytest.approx(20 * 15 * (1 - math.exp(-4)), rel=5e-4)


def test_shallowest_value_held_to_surface_and_integrate_to():
    # samples at 5 and 15 m, values 4 and 2: 0-5 m held at 4 (20), 5-15 trapezoid (30) = 50
    assert integrate_profile([5, 15], [4, 2]) == (50.0, 15.0)
    # to 10 m: 20 + (4 + 3) / 2 * 5 = 37.5, reaching 10 m
    assert integrate_profile([5, 15], [4, 2], to_depth=10) == (37.5, 10.0)
    with pytest.raises(ValueError, match="below the deepest sample"):
        integrate_profile([5, 15], [4, 2], to_depth=20)


def test_profile_rows_become_one_measurement(tmp_path):
    rows = [_row(units="mg C m-3 d-1", value=v, depth_m=z) for z, v in (("5", "4"), ("15", "2"))]
    t = read_stations(_table(*rows))
    assert len(t.stations) == 1
    s = t.stations.iloc[0]
    assert s["carbon_mgC_m-2_d-1"] == pytest.approx(50.0)
    assert s["integration_depth_m"] == 15.0 and s["n_depths"] == 2
    assert s["value_given"] == "4;2" and s["depths_m"] == "5;15"
    assert "trapezoid over 2 depths to 15 m" in s["conversion"]


# ---- bad rows: every reason, with its row number ------------------------------------------


BAD = [
    ({"value": ""}, "missing_value"),
    ({"units": "mg N m-2 d-1"}, "unknown_units"),
    ({"method": "fluorescence"}, "unknown_method"),
    ({"units": "mmol O2 m-2 d-1"}, "units_method_mismatch"),
    ({"lat": "95"}, "bad_lat"),
    ({"lon": "east"}, "bad_lon"),
    ({"date": "2025-04-31"}, "bad_date"),
    ({"date": "", "start": "2025-04-05T06:00", "end": "2025-04-05T05:00"}, "bad_date"),
    ({"value": "lots"}, "bad_value"),
    ({"value": "-3"}, "negative_production"),
    ({"units": "mg C m-3 d-1"}, "depth_needed"),
    ({"depth_m": "10"}, "depth_needed"),
    ({"units": "mg C m-3 d-1", "depth_m": "-5"}, "bad_depth"),
]


@pytest.mark.parametrize(("change", "reason"), BAD)
def test_each_bad_row_reason(tmp_path, change, reason):
    path = tmp_path / "s.csv"
    _table(_row(station="OK"), _row(station="BAD", **change)).to_csv(path, index=False)
    t = read_stations(path)
    assert list(t.stations["station"]) == ["OK"]
    assert t.bad.to_dict("records")[0]["row"] == 3  # the header is line 1, OK is line 2
    assert t.bad.to_dict("records")[0]["reason"] == reason
    assert t.bad.to_dict("records")[0]["detail"].startswith("row 3: ")


@pytest.mark.parametrize(("depths", "units", "reason"), [
    (("5", "20", "20"), ["mg C m-3 d-1"] * 3, "depth_order"),
    (("20", "5", "50"), ["mg C m-3 d-1"] * 3, "depth_order"),
    (("5", "20", "50"), ["mg C m-3 d-1", "mmol C m-3 d-1", "mg C m-3 d-1"], "mixed_units"),
])
def test_bad_profiles_list_every_row(depths, units, reason):
    rows = [_row(units=u, value="3", depth_m=z) for z, u in zip(depths, units, strict=True)]
    t = read_stations(_table(*rows))
    assert t.stations.empty
    assert list(t.bad["reason"]) == [reason] * 3 and list(t.bad["row"]) == [0, 1, 2]


def test_integrate_below_deepest_is_a_bad_profile():
    rows = [_row(units="mg C m-3 d-1", value="3", depth_m=z, integrate_to_m="80")
            for z in ("5", "20")]
    assert set(read_stations(_table(*rows)).bad["reason"]) == {"integrate_below_deepest"}


def test_not_a_station_file(tmp_path):
    path = tmp_path / "other.csv"
    path.write_text("a,b,lat\n1,2,3\n")
    with pytest.raises(StationFileError) as err:
        read_stations(path)
    assert str(err.value) == (
        f"{path}: not a station table: missing column(s) station, lon, value, units, method, "
        "date (or start) (required: station, lat, lon, value, units, method, and date or start)")
    with pytest.raises(StationFileError, match="no such station file"):
        read_stations(tmp_path / "gone.csv")


def test_start_end_give_day_and_length():
    t = read_stations(_table(_row(date="", start="2025-04-05T05:30", end="2025-04-05T19:30")))
    s = t.stations.iloc[0]
    assert str(s["date"])[:10] == "2025-04-05" and s["incubation_h"] == 14.0


def test_an_unreadable_incubation_length_is_noted_not_dropped():
    t = read_stations(_table(_row(incubation_h="24h", notes="deck")))
    assert len(t.stations) == 1 and np.isnan(t.stations.iloc[0]["incubation_h"])
    assert t.stations.iloc[0]["notes"] == "deck; incubation_h '24h' is not a number of hours > 0 (not used)"
