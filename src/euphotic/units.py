"""Unit handling through pint (with the CF/UDUNITS-aware registry of cf-xarray).

Conversions used on the grid are linear (``y = a * x + b``), so they are worked out once on
scalars with pint and then applied lazily to dask arrays.
"""

from __future__ import annotations

import re
from functools import lru_cache
from typing import TYPE_CHECKING

from euphotic.constants import PAR_UMOL_PER_J, SECONDS_PER_DAY

if TYPE_CHECKING:
    import pint


@lru_cache(maxsize=1)
def registry():
    """The unit registry (cf-xarray's, with the spellings below added), built on first use:
    building it costs most of a second, which ``import euphotic`` should not pay."""
    from cf_xarray.units import units as ureg

    _extend(ureg)
    return ureg


def __getattr__(name: str):
    # ``from euphotic.units import ureg`` keeps working, building the registry then.
    if name == "ureg":
        return registry()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def _extend(ureg) -> None:
    """Add the photon and temperature spellings the registry does not know."""
    # "mol photons" is written in many ways; pint has no photon, so photons count as plain moles.
    # einstein (one mole of photons) is a long-standing unit in ocean optics.
    if "einstein" not in ureg:
        ureg.define("einstein = mole = E")
    # Temperature spellings seen in gridded products that the registry does not know.
    # (UDUNITS-2 lib/udunits2-common.xml lists these spellings.)
    for _alias in (
        "degrees_C",
        "degrees_Celsius",
        "deg_Celsius",
        "degree_C",
        "degreesC",
        "degs_C",
        "degsC",
    ):
        if _alias not in ureg:
            ureg.define(f"@alias degree_Celsius = {_alias}")
    for _alias in (
        "degree_K",
        "degrees_K",
        "degree_kelvin",
        "degrees_kelvin",
        "degreesK",
        "degs_K",
        "degsK",
    ):
        if _alias not in ureg:
            ureg.define(f"@alias kelvin = {_alias}")


_PHOTON_WORDS = re.compile(r"\b(photons?|quanta)\b", re.IGNORECASE)

#: Canonical units of the model inputs.
CHL_UNITS = "mg m-3"
PAR_UNITS = "mol m-2 d-1"
SST_UNITS = "degC"
DAY_LENGTH_UNITS = "h"


class UnitError(ValueError):
    """A units string that cannot be parsed or converted to what a quantity needs."""


@lru_cache(maxsize=256)
def parse_units(text: str) -> pint.Unit:
    """Parse a CF/UDUNITS units string (e.g. ``"mg m-3"``, ``"einstein m-2 day-1"``)."""
    if text is None or not str(text).strip():
        raise UnitError("has no units attribute")
    cleaned = _PHOTON_WORDS.sub("", str(text)).replace("\u2103", "degC").strip()
    cleaned = re.sub(r"\s+", " ", cleaned)
    # "ug/L", "umol/m^2/s" and "mg.m-3" are all in use.
    if re.fullmatch(r"[A-Za-z]+(\.[A-Za-z0-9^-]+)+", cleaned):
        cleaned = cleaned.replace(".", " ")
    try:
        unit = registry().parse_units(cleaned)
    except Exception as exc:  # pint raises several types here
        raise UnitError(f"unknown unit {text!r}") from exc
    return unit


def _stored(fn):
    """Keep ``fn``'s results (numbers and strings, from unit strings) between runs in a small
    JSON file of the kernel cache folder, keyed by this module's source and pint's version:
    building the registry costs most of a second of every run, for two or three answers that
    never change. Errors are not stored (they are worked out again)."""
    import functools

    @functools.wraps(fn)
    def wrapper(*args):
        key = f"{fn.__name__}|{'|'.join(map(str, args))}"
        table = _stored_table()
        if key in table:
            return tuple(table[key])
        out = fn(*args)
        table[key] = list(out)
        _save_table(table)
        return out

    return wrapper


_TABLE: dict | None = None


def _table_path():
    import hashlib
    from importlib.metadata import version
    from pathlib import Path

    from euphotic.cachedir import cache_dir

    h = hashlib.blake2b(Path(__file__).read_bytes(), digest_size=8)
    h.update(version("pint").encode())
    return cache_dir("lookups") / f"units-{h.hexdigest()}.json"


def _stored_table() -> dict:
    import json

    global _TABLE
    if _TABLE is None:
        try:
            _TABLE = json.loads(_table_path().read_text())
            if not isinstance(_TABLE, dict):
                _TABLE = {}
        except (OSError, ValueError):
            _TABLE = {}
    return _TABLE


def _save_table(table: dict) -> None:
    """Write the table through a temporary file and a rename; skipped if it cannot be."""
    import json
    import os
    import tempfile

    try:
        path = _table_path()
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, suffix=".tmp")
        with os.fdopen(fd, "w") as fh:
            json.dump(table, fh)
        os.replace(tmp, path)
    except OSError:
        pass


@_stored
def linear_factors(from_units: str, to_units: str) -> tuple[float, float]:
    """Return ``(a, b)`` such that ``value_in_to_units = a * value_in_from_units + b``."""
    src = parse_units(from_units)
    dst = parse_units(to_units)
    import pint

    ureg = registry()
    try:
        y0 = ureg.Quantity(0.0, src).to(dst).magnitude
        y1 = ureg.Quantity(1.0, src).to(dst).magnitude
    except pint.DimensionalityError as exc:
        raise UnitError(f"unit {from_units!r} cannot be converted to {to_units!r}") from exc
    return float(y1 - y0), float(y0)


def convert(values, from_units: str, to_units: str):
    """Convert numpy, dask or xarray values linearly between units (stays lazy on dask)."""
    a, b = linear_factors(from_units, to_units)
    if a == 1.0 and b == 0.0:
        return values
    out = values * a
    if b != 0.0:
        out = out + b
    return out


@_stored
def par_factors(from_units: str) -> tuple[float, str]:
    """Factor taking PAR in ``from_units`` to a daily dose in mol photons m-2 d-1.

    Accepts a photon dose (mol m-2 d-1, einstein m-2 day-1), a daily-mean photon flux
    (mol or umol m-2 s-1, multiplied by 86,400 s per day) or a daily-mean energy flux
    (W m-2, converted with McCree's 4.57 umol J-1 for daylight PAR, then by 86,400 s).

    Returns
    -------
    factor, kind
        ``kind`` is ``"photons"`` or ``"energy"`` (the latter used McCree's factor).
    """
    unit = parse_units(from_units)
    q = registry().Quantity(1.0, unit)
    if q.check("[substance] / [length] ** 2"):
        # A dose with no time: per day is assumed only if the string says nothing else.
        raise UnitError(f"PAR unit {from_units!r} has no time; expected e.g. 'mol m-2 d-1'")
    if q.check("[substance] / [length] ** 2 / [time]"):
        return float(q.to("mol m-2 d-1").magnitude), "photons"
    if q.check("[power] / [length] ** 2"):
        w_m2 = q.to("W m-2").magnitude
        return float(w_m2 * PAR_UMOL_PER_J * 1e-6 * SECONDS_PER_DAY), "energy"
    raise UnitError(f"unit {from_units!r} is not a photon or energy flux of light")
