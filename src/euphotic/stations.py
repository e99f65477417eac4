"""Production measured at sea (carbon-14 and oxygen incubations): read, check and convert a
station table to depth-integrated carbon production, mg C m-2 d-1.

A station table is a CSV file (or a pandas DataFrame) with one row per measurement: either a
depth-integrated value, or one depth of a volumetric profile (rows of one station, day and
method with ``depth_m`` filled), which is integrated here. The columns are described in
:data:`COLUMNS` (and in the README, "Checking against ship measurements").

Conversions, each stated in the table it produces:

- units through pint (the project's registry): mass and amount of carbon or oxygen per area
  (or volume for profiles) and day; carbon amount to mass with the molar mass of carbon
  (:data:`MOLAR_MASS_C_G_MOL`);
- oxygen to carbon with a photosynthetic quotient (mol O2 released per mol C fixed; default
  :data:`DEFAULT_QUOTIENT`, Laws 1991);
- oxygen-based gross production set beside net production estimates with a gross-to-net
  factor (default :data:`DEFAULT_GROSS_TO_NET`, Juranek & Quay 2005);
- profiles: trapezoid rule over depth, the shallowest value held up to the surface, down to
  the deepest sample (or to ``integrate_to_m`` when given, never below the deepest sample).

Nothing is dropped silently: every row that cannot be used is listed in
:attr:`StationTable.bad` with its row number (the line of the CSV file; the header is line 1)
and the reason.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
import pint

from euphotic.errors import EuphoticError
from euphotic.units import ureg

#: Molar mass of carbon, g mol-1. Source: IUPAC conventional atomic weight of carbon
#: (Prohaska et al. 2022, Pure Appl. Chem. 94:573-600, table 2: 12.011).
MOLAR_MASS_C_G_MOL = 12.011
#: Molar mass of O2, g mol-1: twice the conventional atomic weight of oxygen, 15.999
#: (same IUPAC table).
MOLAR_MASS_O2_G_MOL = 31.998

#: Photosynthetic quotients, mol O2 released per mol C fixed. Source: Laws (1991), Deep-Sea
#: Research 38:143-167: about 1.1 for growth on ammonium, 1.4 for growth on nitrate.
QUOTIENT_AMMONIUM = 1.1
QUOTIENT_NITRATE = 1.4
QUOTIENTS = {"ammonium": QUOTIENT_AMMONIUM, "nitrate": QUOTIENT_NITRATE}
#: The default quotient: nitrate-based growth (1.4). Our choice: the comparison is with net
#: primary production in seasonal and shelf seas, where spring and upwelling production grows
#: largely on nitrate, and net community production measured with oxygen is new production
#: (nitrate-based). Use ``quotient = "ammonium"`` (1.1) for oligotrophic, regenerating waters.
DEFAULT_QUOTIENT = QUOTIENT_NITRATE

#: Net over gross production, to set oxygen-based gross production (converted to carbon)
#: beside net production estimates. Source: Juranek and Quay (2005), Global Biogeochem. Cycles
#: 19, GB3009: in vitro 18O gross production integrated over 0-100 m was on average 1.5 times
#: the carbon-14 production at station ALOHA (abstract), so 14C / gross = 1 / 1.5 = 0.67.
#: A single-site value; set ``gross_to_net`` for your waters (Bender et al. 1999, from memory,
#: found about 0.45 in the equatorial Pacific).
DEFAULT_GROSS_TO_NET = 1.0 / 1.5

#: Units the table's converted values are in.
AREAL_UNITS = "mg m-2 d-1"
VOLUMETRIC_UNITS = "mg m-3 d-1"

#: Methods: column value -> (family used for statistics, what it measures).
METHODS: dict[str, tuple[str, str]] = {
    "c14": ("c14", "carbon-14 uptake (close to net primary production for 24 h incubations)"),
    "o2_gross": ("o2", "gross oxygen production, light minus dark bottles"),
    "o2_ncp": ("o2_ncp", "net community production of oxygen, light bottle minus initial"),
}

Need = Literal["required", "one of date/start", "optional", "profiles"]

#: Columns of a station table: name -> (required?, units, meaning). The README table is made
#: from the same words.
COLUMNS: dict[str, tuple[str, str, str]] = {
    "station": ("required", "", "station identifier (text)"),
    "lat": ("required", "degrees_north", "latitude, -90 to 90"),
    "lon": ("required", "degrees_east", "longitude, -180 to 360"),
    "date": ("one of date/start", "", "day of the measurement, YYYY-MM-DD (UTC)"),
    "start": ("one of date/start", "", "incubation start, YYYY-MM-DDTHH:MM (UTC); its day is the "
              "station day"),
    "end": ("optional", "", "incubation end, YYYY-MM-DDTHH:MM (UTC), after start"),
    "value": ("required", "as `units`", "measured production, >= 0"),
    "units": ("required", "", "units of `value`: carbon (C) or oxygen (O2) mass or amount per m2 "
              "(or per m3 for profile rows) per day, e.g. `mg C m-2 d-1`, `mmol O2 m-3 d-1`"),
    "method": ("required", "", "`c14`, `o2_gross` (light minus dark bottles) or `o2_ncp` (net "
               "community production)"),
    "incubation_h": ("optional", "h", "incubation length (e.g. 24 dawn to dawn, 12 dawn to "
                     "dusk); recorded, not used in conversions"),
    "depth_m": ("profiles", "m", "sample depth of a profile row (volumetric units); empty for "
                "depth-integrated values"),
    "integrate_to_m": ("optional", "m", "integrate the profile to this depth instead of the "
                       "deepest sample (not deeper)"),
    "cruise": ("optional", "", "cruise name"),
    "notes": ("optional", "", "free text"),
}
REQUIRED = [c for c, (need, _, _) in COLUMNS.items() if need == "required"]

#: Reason codes of bad rows -> short meaning (also the README list).
BAD_REASONS = {
    "missing_value": "a required cell is empty",
    "unknown_units": "units that are not carbon or oxygen per area (or volume) and time",
    "unknown_method": "a method other than c14, o2_gross, o2_ncp",
    "units_method_mismatch": "oxygen units for c14 or carbon units for an oxygen method",
    "bad_lat": "latitude not a number in -90..90",
    "bad_lon": "longitude not a number in -180..360",
    "bad_date": "a date that cannot be read, or an end before the start",
    "bad_value": "a value that is not a finite number",
    "negative_production": "a value below 0",
    "depth_needed": "volumetric units without depth_m, or depth_m with per-area units",
    "bad_depth": "a depth that is not a number >= 0",
    "depth_order": "profile depths out of order or repeated (file order must deepen)",
    "mixed_units": "rows of one profile in different units",
    "integrate_below_deepest": "integrate_to_m below the profile's deepest sample",
}


class StationFileError(EuphoticError):
    """A file (or DataFrame) that is not a station table at all, or cannot be read."""


class MatchupOptionError(EuphoticError):
    """A match-up option (quotient, gross-to-net factor, window...) that cannot be used."""


@dataclass(frozen=True)
class Conversion:
    """The conversion settings, stated in every output."""

    quotient: float = DEFAULT_QUOTIENT
    gross_to_net: float = DEFAULT_GROSS_TO_NET

    def text(self) -> str:
        return (f"carbon amount to mass with {MOLAR_MASS_C_G_MOL} g mol-1; oxygen to carbon "
                f"with a photosynthetic quotient of {self.quotient:g} mol O2 (mol C)-1 (Laws "
                f"1991: 1.1 ammonium-, 1.4 nitrate-based growth); oxygen gross production times "
                f"{self.gross_to_net:.3g} net/gross (Juranek and Quay 2005) to set it beside "
                "net production; profiles by the trapezoid rule, shallowest value held to the "
                "surface")


def quotient_value(value, where: str = "quotient") -> float:
    """A photosynthetic quotient from a number or ``"ammonium"`` / ``"nitrate"``."""
    if isinstance(value, str) and value.strip().lower() in QUOTIENTS:
        return QUOTIENTS[value.strip().lower()]
    try:
        q = float(value)
    except (TypeError, ValueError):
        q = float("nan")
    if isinstance(value, bool) or not (0.5 <= q <= 3.0):
        raise MatchupOptionError(f"{where}: expected \"ammonium\", \"nitrate\" or a number "
                                 f"between 0.5 and 3 (mol O2 per mol C), not {value!r}")
    return q


def gross_to_net_value(value, where: str = "gross_to_net") -> float:
    """A gross-to-net factor, a number in (0, 1]."""
    try:
        f = float(value)
    except (TypeError, ValueError):
        f = float("nan")
    if isinstance(value, bool) or not (0.0 < f <= 1.0):
        raise MatchupOptionError(f"{where}: expected a number in (0, 1], not {value!r}")
    return f


# ---- units ---------------------------------------------------------------------------------

_SPECIES = re.compile(r"^\s*([A-Za-z\u00b5]+?)\s*(C|O2|O_2)\b\s*(.*)$")


@dataclass(frozen=True)
class ParsedUnits:
    """A production unit split into species (``"C"`` / ``"O2"``) and a pint unit."""

    species: Literal["C", "O2"]
    unit: pint.Unit
    volumetric: bool


def parse_production_units(text: str) -> ParsedUnits:
    """Parse e.g. ``"mg C m-2 d-1"``, ``"mmol O2 m-3 d-1"``, ``"gC m-2 day-1"``.

    Raises
    ------
    ValueError
        Not a carbon or oxygen mass or amount per area (or volume) and time.
    """
    m = _SPECIES.match(str(text or ""))
    if not m or not m.group(3).strip():
        raise ValueError(f"unknown units {text!r}: expected e.g. 'mg C m-2 d-1' or "
                         "'mmol O2 m-3 d-1'")
    species = "C" if m.group(2) == "C" else "O2"
    try:
        unit = ureg.parse_units(f"{m.group(1)} {m.group(3)}".replace("\u00b5", "u"))
    except Exception:  # noqa: BLE001 - pint raises several types
        raise ValueError(f"unknown units {text!r}") from None
    q = ureg.Quantity(1.0, unit)
    for volumetric, dims in ((False, "/ [length] ** 2 / [time]"), (True, "/ [length] ** 3 / [time]")):
        if q.check("[mass] " + dims) or q.check("[substance] " + dims):
            return ParsedUnits(species, unit, volumetric)
    raise ValueError(f"unknown units {text!r}: not a mass or amount per area (or volume) and "
                     "time")


def to_carbon(value: float, units: str, *, quotient: float = DEFAULT_QUOTIENT) -> float:
    """A production value in carbon mass units: mg C m-2 d-1 (per-area units) or
    mg C m-3 d-1 (per-volume units).

    Parameters
    ----------
    value : float
        Production in ``units``.
    units : str
        Carbon or oxygen mass or amount per area (or volume) per time (see
        :func:`parse_production_units`).
    quotient : float
        Photosynthetic quotient, mol O2 per mol C (oxygen units only).

    Notes
    -----
    Carbon amount: :math:`m_C = n_C M_C` with :math:`M_C` = 12.011 g mol-1. Oxygen:
    :math:`n_C = n_{O_2} / PQ`, mass of oxygen first to amount with :math:`M_{O_2}` =
    31.998 g mol-1.

    References
    ----------
    Laws (1991), Deep-Sea Research 38:143-167 (photosynthetic quotients).
    """
    p = parse_production_units(units)
    q = ureg.Quantity(float(value), p.unit)
    target = VOLUMETRIC_UNITS if p.volumetric else AREAL_UNITS
    per = "m-3 d-1" if p.volumetric else "m-2 d-1"
    if p.species == "O2":
        mol = ureg.Quantity(MOLAR_MASS_O2_G_MOL, "g mol-1")
        o2 = q.to(f"mmol {per}") if q.check("[substance] / [length] ** 2 / [time]") or q.check(
            "[substance] / [length] ** 3 / [time]") else (q / mol).to(f"mmol {per}")
        q = o2 / quotient  # mmol C
    if not (q.check("[mass] / [length] ** 2 / [time]") or q.check("[mass] / [length] ** 3 / [time]")):
        q = q * ureg.Quantity(MOLAR_MASS_C_G_MOL, "g mol-1")
    return float(q.to(target).magnitude)


# ---- profiles ------------------------------------------------------------------------------


def integrate_profile(depths, values, *, to_depth: float | None = None) -> tuple[float, float]:
    """Depth integral of a volumetric profile by the trapezoid rule.

    Parameters
    ----------
    depths : array_like
        Sample depths, m, strictly increasing, >= 0.
    values : array_like
        Volumetric rates at those depths (e.g. mg C m-3 d-1).
    to_depth : float, optional
        Integrate down to this depth, m (linear interpolation between samples); default the
        deepest sample. Not below the deepest sample (no extrapolation).

    Returns
    -------
    integral, depth
        The integral (e.g. mg C m-2 d-1) and the depth it reaches, m.

    Notes
    -----
    The shallowest value is held from the surface to the shallowest sample (a rectangle),
    then trapezoids between samples: :math:`\\int_0^{z_n} p\\,dz \\approx p_1 z_1 +
    \\sum_i (p_i + p_{i+1})(z_{i+1} - z_i)/2`.
    """
    z = np.asarray(depths, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    if to_depth is not None:
        if to_depth > z[-1]:
            raise ValueError(f"integration depth {to_depth:g} m below the deepest sample "
                             f"{z[-1]:g} m")
        keep = z < to_depth
        v = np.append(v[keep], np.interp(to_depth, z, v))
        z = np.append(z[keep], to_depth)
    z = np.concatenate([[0.0], z]) if z[0] > 0 else z
    v = np.concatenate([[v[0]], v]) if len(v) < len(z) else v
    return float(np.trapezoid(v, z)), float(z[-1])


# ---- the table -----------------------------------------------------------------------------


@dataclass
class StationTable:
    """Measurements ready for matching, and the rows that could not be used."""

    #: one row per measurement (a profile is one row): see :func:`read_stations`
    stations: pd.DataFrame
    #: one row per unusable input row: ``row``, ``station``, ``reason`` (code), ``detail``
    bad: pd.DataFrame
    conversion: Conversion
    source: str
    notes: list[str] = field(default_factory=list)


def _date(text: str) -> dt.datetime:
    text = text.strip()
    if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text):
        return dt.datetime.fromisoformat(text)
    if re.fullmatch(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2})?Z?", text):
        return dt.datetime.fromisoformat(text.rstrip("Z"))
    raise ValueError(f"bad date {text!r} (expected YYYY-MM-DD or YYYY-MM-DDTHH:MM)")


def _float(text: str) -> float:
    """A number, NaN when empty or not a number (the checks then say which)."""
    try:
        return float(text) if str(text).strip() else float("nan")
    except ValueError:
        return float("nan")


def read_stations(source: str | Path | pd.DataFrame, *, quotient: float = DEFAULT_QUOTIENT,
                  gross_to_net: float = DEFAULT_GROSS_TO_NET) -> StationTable:
    """Read, check and convert a station table.

    Parameters
    ----------
    source : path of a CSV file, or a pandas DataFrame with the same columns
    quotient : float
        Photosynthetic quotient, mol O2 per mol C (:func:`quotient_value`).
    gross_to_net : float
        Net/gross factor applied to ``o2_gross`` values after conversion to carbon.

    Returns
    -------
    StationTable
        ``stations`` columns: ``station``, ``cruise``, ``lat``, ``lon``, ``date`` (datetime64
        day), ``start``, ``end``, ``method``, ``family`` (c14 / o2 / o2_ncp),
        ``incubation_h``, ``value_given``, ``units_given`` (as written; for profiles the
        volumetric values joined by ``;``), ``depths_m`` (profiles), ``n_depths``,
        ``integration_depth_m``, ``carbon_mgC_m-2_d-1`` (after units and quotient),
        ``npp_equivalent_mgC_m-2_d-1`` (after the gross-to-net factor), ``conversion``
        (what was done), ``rows`` (source rows), ``notes``.

    Raises
    ------
    StationFileError
        The file cannot be read, or lacks required columns (listed).
    """
    conv = Conversion(quotient_value(quotient), gross_to_net_value(gross_to_net))
    if isinstance(source, pd.DataFrame):
        name = "DataFrame"
        raw = source.copy()
        raw.columns = [str(c).strip() for c in raw.columns]
        raw = raw.astype(object).where(raw.notna(), "").astype(str)
        first_row = 0
    else:
        name = str(source)
        try:
            raw = pd.read_csv(source, dtype=str, keep_default_na=False, skipinitialspace=True)
        except FileNotFoundError:
            raise StationFileError(f"{name}: no such station file") from None
        except (OSError, UnicodeDecodeError, pd.errors.ParserError,
                pd.errors.EmptyDataError) as exc:
            raise StationFileError(f"{name}: cannot read as a CSV table "
                                   f"({' '.join(str(exc).split())})") from None
        raw.columns = [str(c).strip() for c in raw.columns]
        first_row = 2  # line of the first data row (the header is line 1)
    missing = [c for c in REQUIRED if c not in raw.columns]
    if "date" not in raw.columns and "start" not in raw.columns:
        missing.append("date (or start)")
    if missing:
        raise StationFileError(f"{name}: not a station table: missing column(s) "
                               f"{', '.join(missing)} (required: {', '.join(REQUIRED)}, and "
                               "date or start)")
    unknown = [c for c in raw.columns if c not in COLUMNS]
    notes = [f"{name}: column(s) {', '.join(unknown)} not used"] if unknown else []
    for c in COLUMNS:
        if c not in raw.columns:
            raw[c] = ""
    raw = raw.map(lambda s: str(s).strip())

    bad: list[dict] = []
    good: list[dict] = []
    for i, r in enumerate(raw.to_dict("records")):
        row = i + first_row
        rec, reason = _check_row(r, row)
        if reason:
            bad.append({"row": row, "station": r["station"], "reason": reason[0],
                        "detail": reason[1]})
        else:
            good.append(rec)

    out, more_bad = _combine(good, conv)
    bad.extend(more_bad)
    stations = pd.DataFrame(out, columns=_STATION_COLUMNS)
    bad_df = pd.DataFrame(sorted(bad, key=lambda b: b["row"]),
                          columns=["row", "station", "reason", "detail"])
    return StationTable(stations=stations, bad=bad_df, conversion=conv, source=name, notes=notes)


_STATION_COLUMNS = ["station", "cruise", "lat", "lon", "date", "start", "end", "method", "family",
                    "incubation_h", "value_given", "units_given", "depths_m", "n_depths",
                    "integration_depth_m", "carbon_mgC_m-2_d-1", "npp_equivalent_mgC_m-2_d-1",
                    "conversion", "rows", "notes"]


def _check_row(r: dict, row: int) -> tuple[dict, tuple[str, str] | None]:
    """One input row checked: (record, None) or ({}, (reason code, detail))."""
    for c in ("station", "lat", "lon", "value", "units", "method"):
        if not r[c]:
            return {}, ("missing_value", f"row {row}: `{c}` is empty")
    if not r["date"] and not r["start"]:
        return {}, ("missing_value", f"row {row}: `date` (or `start`) is empty")
    method = r["method"].lower()
    if method not in METHODS:
        return {}, ("unknown_method", f"row {row}: unknown method {r['method']!r} (c14, "
                                      "o2_gross or o2_ncp)")
    try:
        pu = parse_production_units(r["units"])
    except ValueError as exc:
        return {}, ("unknown_units", f"row {row}: {exc}")
    if (pu.species == "O2") != method.startswith("o2"):
        return {}, ("units_method_mismatch", f"row {row}: units {r['units']!r} do not fit "
                                             f"method {method}")
    lat, lon = _float(r["lat"]), _float(r["lon"])
    if not -90.0 <= lat <= 90.0:
        return {}, ("bad_lat", f"row {row}: latitude {r['lat']!r} not in -90..90")
    if not -180.0 <= lon <= 360.0:
        return {}, ("bad_lon", f"row {row}: longitude {r['lon']!r} not in -180..360")
    try:
        start = _date(r["start"]) if r["start"] else None
        end = _date(r["end"]) if r["end"] else None
        day = _date(r["date"]) if r["date"] else start
        if start is not None and end is not None and end <= start:
            raise ValueError(f"end {r['end']} is not after start {r['start']}")
        if start is not None and r["date"] and start.date() != day.date():
            raise ValueError(f"start {r['start']} is not on date {r['date']}")
    except ValueError as exc:
        return {}, ("bad_date", f"row {row}: {exc}")
    value = _float(r["value"])
    if not math.isfinite(value):
        return {}, ("bad_value", f"row {row}: value {r['value']!r} is not a number")
    if value < 0:
        return {}, ("negative_production", f"row {row}: negative production {value:g}")
    depth = r["depth_m"]
    if pu.volumetric != bool(depth):
        return {}, ("depth_needed", f"row {row}: " + (
            f"volumetric units {r['units']!r} need depth_m" if pu.volumetric
            else f"depth_m given with per-area units {r['units']!r}"))
    z, zto, inc = _float(depth), _float(r["integrate_to_m"]), _float(r["incubation_h"])
    if (depth and not z >= 0) or (r["integrate_to_m"] and not zto > 0):
        return {}, ("bad_depth", f"row {row}: depth {depth or r['integrate_to_m']!r} is not a "
                                 "number >= 0")
    notes = r["notes"]
    if r["incubation_h"] and not inc > 0:
        notes = "; ".join(x for x in (notes, f"incubation_h {r['incubation_h']!r} is not a "
                                             "number of hours > 0 (not used)") if x)
        inc = float("nan")
    if not math.isfinite(inc) and start is not None and end is not None:
        inc = (end - start).total_seconds() / 3600.0
    return {"row": row, "station": r["station"], "cruise": r["cruise"], "lat": lat, "lon": lon,
            "date": np.datetime64(day.date(), "D"),
            "start": start.isoformat(timespec="minutes") if start else "",
            "end": end.isoformat(timespec="minutes") if end else "",
            "method": method, "incubation_h": inc, "value": value, "units": r["units"],
            "depth": z, "integrate_to": zto, "volumetric": pu.volumetric,
            "notes": notes}, None


def _combine(good: list[dict], conv: Conversion) -> tuple[list[dict], list[dict]]:
    """Integrated rows converted; profile rows grouped by (station, day, method) and
    integrated. Returns (measurements, bad rows)."""
    out, bad = [], []
    profiles: dict[tuple, list[dict]] = {}
    for g in good:
        if g["volumetric"]:
            profiles.setdefault((g["station"], g["date"], g["method"], g["cruise"]), []).append(g)
        else:
            out.append(_measurement([g], g["value"], g["units"], conv))
    for rows in profiles.values():
        nums = ", ".join(str(r["row"]) for r in rows)
        units = {r["units"] for r in rows}
        z = np.array([r["depth"] for r in rows])
        reason = None
        if len(units) > 1:
            reason = ("mixed_units", f"units {', '.join(sorted(units))} in one profile")
        elif len(z) > 1 and np.any(np.diff(z) <= 0):
            reason = ("depth_order", f"depths {', '.join(f'{d:g}' for d in z)} m out of order "
                                     "or repeated")
        to = [r["integrate_to"] for r in rows if math.isfinite(r["integrate_to"])]
        if reason is None and to and max(to) > z[-1]:
            reason = ("integrate_below_deepest", f"integrate_to_m {max(to):g} below the deepest "
                                                 f"sample {z[-1]:g} m")
        if reason is not None:
            for r in rows:
                bad.append({"row": r["row"], "station": r["station"], "reason": reason[0],
                            "detail": f"rows {nums} (profile of {r['station']} on "
                                      f"{r['date']}): {reason[1]}"})
            continue
        per_m3 = [to_carbon(r["value"], r["units"], quotient=conv.quotient) for r in rows]
        integral, depth = integrate_profile(z, per_m3, to_depth=max(to) if to else None)
        # the integral in the given units' own carbon or oxygen terms, for the table
        out.append(_measurement(rows, integral, AREAL_UNITS, conv, depth=depth, depths=z,
                                converted_already=True))
    return out, bad


def _measurement(rows: list[dict], value: float, units: str, conv: Conversion, *,
                 depth: float = float("nan"), depths=None, converted_already=False) -> dict:
    g = rows[0]
    family = METHODS[g["method"]][0]
    carbon = value if converted_already else to_carbon(value, units, quotient=conv.quotient)
    steps = []
    species = parse_production_units(g["units"]).species
    if g["units"].replace(" ", "") not in ("mgCm-2d-1",):
        steps.append(f"{g['units']} to {'mg C m-3 d-1' if depths is not None else 'mg C m-2 d-1'}"
                     + (f" (quotient {conv.quotient:g})" if species == "O2" else ""))
    if depths is not None:
        steps.append(f"trapezoid over {len(depths)} depths to {depth:g} m")
    npp = carbon
    if g["method"] == "o2_gross":
        npp = carbon * conv.gross_to_net
        steps.append(f"x {conv.gross_to_net:.3g} net/gross")
    if g["method"] == "o2_ncp":
        steps.append("net community production: not net primary production, not scored")
    return {
        "station": g["station"], "cruise": g["cruise"], "lat": g["lat"], "lon": g["lon"],
        "date": g["date"], "start": g["start"], "end": g["end"], "method": g["method"],
        "family": family, "incubation_h": g["incubation_h"],
        "value_given": (";".join(f"{r['value']:g}" for r in rows) if depths is not None
                        else g["value"]),
        "units_given": g["units"],
        "depths_m": ";".join(f"{d:g}" for d in depths) if depths is not None else "",
        "n_depths": len(rows) if depths is not None else 0,
        "integration_depth_m": depth,
        "carbon_mgC_m-2_d-1": carbon,
        "npp_equivalent_mgC_m-2_d-1": npp,
        "conversion": "; ".join(steps) if steps else "none",
        "rows": ";".join(str(r["row"]) for r in rows),
        "notes": g["notes"],
    }
