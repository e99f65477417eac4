"""What net primary production implies: export production (several published methods, side by
side), nitrogen and phosphorus demand (Redfield ratio) and oxygen production (photosynthetic
quotient).

Pure compute: numpy, dask and xarray values in, the same kind out (dask stays lazy; no
metadata, no I/O; the files are written by :mod:`euphotic.derived_outputs`). Every input is
converted at the entry to the units the published formula uses, through pint (the project's
registry, :mod:`euphotic.units`): give a :class:`pint.Quantity`, a DataArray with a ``units``
attribute, or plain numbers in the units named in each docstring (or in ``*_units=``).
Molar masses and ratios are pint quantities, so that every conversion is checked for its
dimensions (``mg C`` -> ``mmol C`` -> ``mmol N``).

Export methods differ from each other by a factor of several in the same place (at 20 degC and
500 mg C m-2 d-1 the three below give export ratios of about 0.24, 0.20 and 0.05): report them
side by side, never one alone (:data:`EXPORT_CAUTION`).

References (keys of ``references.bib``): laws2011, dunne2005, henson2011, redfield1934,
redfield1963, laws1991, morel1989.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pint
import xarray as xr

from euphotic.errors import EuphoticError
from euphotic.stations import (
    DEFAULT_QUOTIENT,
    MOLAR_MASS_C_G_MOL,
    MOLAR_MASS_O2_G_MOL,
    QUOTIENTS,
)
from euphotic.units import convert, ureg

#: Molar mass of nitrogen, g mol-1. Source: IUPAC conventional atomic weight of nitrogen
#: (Prohaska et al. 2022, Pure Appl. Chem. 94:573-600, table 2: 14.007).
MOLAR_MASS_N_G_MOL = 14.007
#: Molar mass of phosphorus, g mol-1. Source: IUPAC standard atomic weight of phosphorus,
#: 30.973 761 998 (same table), rounded to 30.974.
MOLAR_MASS_P_G_MOL = 30.974

#: Redfield ratio C:N:P in moles, 106:16:1. Source: Redfield (1934), refined by Redfield,
#: Ketchum and Richards (1963), The Sea vol. 2, pp. 26-77.
REDFIELD_C = 106.0
REDFIELD_N = 16.0
REDFIELD_P = 1.0

#: Units of net primary production as the maps hold it (mass of carbon).
NPP_UNITS = "mg m-2 d-1"
#: Units of the outputs: export in mass of carbon; N, P and O2 demand or production in amount.
EXPORT_UNITS = "mg m-2 d-1"
AMOUNT_RATE_UNITS = "mmol m-2 d-1"
SST_UNITS = "degC"

#: Lower and upper bound of the Dunne et al. (2005) pe-ratio (from memory: the paper bounds
#: its fitted pe-ratio between 0.04 and 0.72, the range of its observations).
DUNNE_PE_MIN = 0.04
DUNNE_PE_MAX = 0.72

#: The caution that goes with every export estimate.
EXPORT_CAUTION = (
    "Export methods differ from each other by a factor of several in the same place (each is "
    "an empirical fit to few observations); compare them side by side and against local "
    "sediment-trap or thorium-234 export measurements before using any one."
)


class DerivedError(EuphoticError):
    """A derived-quantity option (export method, quotient, model) that cannot be used."""


# --------------------------------------------------------------------------------------------
# units at the entry
# --------------------------------------------------------------------------------------------


def _magnitude(values, to_units: str, given_units: str | None, what: str):
    """``values`` in ``to_units``: a pint Quantity converted, a DataArray converted from its
    ``units`` attribute (or ``given_units``), plain numbers from ``given_units``."""
    if isinstance(values, pint.Quantity):
        try:
            return values.to(to_units).magnitude
        except pint.DimensionalityError:
            raise DerivedError(f"{what}: units {values.units:~} cannot be converted to "
                               f"{to_units}") from None
    units = given_units
    if units is None and isinstance(values, xr.DataArray):
        units = values.attrs.get("units")
    if units is None:
        units = to_units
    try:
        out = convert(values, units, to_units)
    except ValueError as exc:  # units.UnitError
        raise DerivedError(f"{what}: {exc}") from None
    if isinstance(out, xr.DataArray):
        out = out.copy(deep=False)
        out.attrs = {}
    return out


def _npp(npp, npp_units):
    return _magnitude(npp, NPP_UNITS, npp_units, "npp")


def _sst(sst, sst_units):
    return _magnitude(sst, SST_UNITS, sst_units, "sst")


def _factor(from_q: pint.Quantity, to_units: str) -> float:
    """A scalar conversion factor worked out with pint (dimensions checked)."""
    return float(from_q.to(to_units).magnitude)


#: mmol of carbon per mg of carbon: 1 / M_C.
MMOL_C_PER_MG_C = _factor(ureg.Quantity(1.0, "mg") / ureg.Quantity(MOLAR_MASS_C_G_MOL, "g/mol"),
                          "mmol")


# --------------------------------------------------------------------------------------------
# export ratios
# --------------------------------------------------------------------------------------------


def ef_laws2011(sst, npp, *, sst_units: str | None = None, npp_units: str | None = None):
    """Export ratio (ef-ratio) of Laws et al. (2011) from temperature and production.

    Parameters
    ----------
    sst : array_like
        Sea surface temperature, degC (or ``sst_units``).
    npp : array_like
        Net primary production, mg C m-2 d-1 (or ``npp_units``).

    Returns
    -------
    array_like
        Export (new) production over total production, 1; 0 where the formula goes negative
        (above 35.5 degC); NaN where an input is NaN.

    Notes
    -----
    .. math:: ef = (0.5857 - 0.0165\\,T)\\,\\frac{P}{51.7 + P}

    with :math:`T` in degC and :math:`P` in mg C m-2 d-1 (Laws et al. 2011, their simplest
    equation in temperature and production; the coefficients are written from memory). Laws et
    al. fitted it to export ratios of an ecosystem model tuned to field data; the paper also
    gives a power-law form, not used here.

    References
    ----------
    Laws, E. A., D'Sa, E. and Naik, P. (2011). Simple equations to estimate ratios of new or
    export production to total production from satellite-derived estimates of sea surface
    temperature and primary production. Limnology and Oceanography: Methods 9:593-601.
    """
    t = _sst(sst, sst_units)
    p = _npp(npp, npp_units)
    ef = (0.5857 - 0.0165 * t) * p / (51.7 + p)
    return _clip(ef, 0.0, None)


def pe_dunne2005(sst, npp, zeu, *, sst_units: str | None = None, npp_units: str | None = None,
                 zeu_units: str | None = None):
    """Particle export ratio (pe-ratio) of Dunne et al. (2005) from temperature and production
    per volume of the euphotic layer, within its published bounds.

    Parameters
    ----------
    sst : array_like
        Sea surface temperature, degC (or ``sst_units``).
    npp : array_like
        Net primary production, mg C m-2 d-1 (or ``npp_units``; converted to mmol C m-2 d-1
        with the molar mass of carbon, 12.011 g mol-1, as the paper's formula takes it).
    zeu : array_like
        Depth of the euphotic layer, m (or ``zeu_units``).

    Returns
    -------
    array_like
        Particle export over net primary production, 1, bounded to [0.04, 0.72]
        (:data:`DUNNE_PE_MIN`, :data:`DUNNE_PE_MAX`); NaN where an input is NaN.

    Notes
    -----
    .. math:: pe = -0.0101\\,T + 0.0582 \\ln\\left(\\frac{P}{Z_{eu}}\\right) + 0.419,
              \\qquad 0.04 \\le pe \\le 0.72

    with :math:`T` in degC and :math:`P / Z_{eu}` in mmol C m-3 d-1 (Dunne et al. 2005,
    equation 1a; coefficients and bounds written from memory, the coefficients as other
    published code uses them).

    References
    ----------
    Dunne, J. P., Armstrong, R. A., Gnanadesikan, A. and Sarmiento, J. L. (2005). Empirical
    and mechanistic models for the particle export ratio. Global Biogeochemical Cycles 19,
    GB4026.
    """
    t = _sst(sst, sst_units)
    p_mmol = _npp(npp, npp_units) * MMOL_C_PER_MG_C
    z = _magnitude(zeu, "m", zeu_units, "zeu")
    with np.errstate(divide="ignore", invalid="ignore"):
        pe = -0.0101 * t + 0.0582 * np.log(p_mmol / z) + 0.419
    return _clip(pe, DUNNE_PE_MIN, DUNNE_PE_MAX)


def ef_henson2011(sst, *, sst_units: str | None = None):
    """Export efficiency of Henson et al. (2011) from temperature alone.

    Parameters
    ----------
    sst : array_like
        Sea surface temperature, degC (or ``sst_units``).

    Returns
    -------
    array_like
        Export at 100 m over net primary production, 1; NaN where the temperature is NaN.

    Notes
    -----
    .. math:: ef = 0.23\\,e^{-0.08\\,T}

    with :math:`T` in degC (Henson et al. 2011, fitted to thorium-234 export estimates;
    coefficients written from memory).

    References
    ----------
    Henson, S. A., Sanders, R., Madsen, E., Morris, P. J., Le Moigne, F. and Quartly, G. D.
    (2011). A reduced estimate of the strength of the ocean's biological carbon pump.
    Geophysical Research Letters 38, L04606.
    """
    t = _sst(sst, sst_units)
    return 0.23 * np.exp(-0.08 * t)


def _clip(x, low, high):
    """Clip keeping NaN (numpy, dask and xarray alike)."""
    return x.clip(low, high) if hasattr(x, "clip") else np.clip(x, low, high)


@dataclass(frozen=True)
class ExportMethod:
    """One export method: its ratio function, what it needs and how it is cited."""

    name: str
    label: str
    citation_key: str
    formula: str
    #: inputs besides NPP: "sst", and "zeu" (from chlorophyll)
    needs: tuple[str, ...]
    ratio: Callable


#: Export methods by config name, in the order they are reported.
EXPORT_METHODS: dict[str, ExportMethod] = {
    "laws2011": ExportMethod(
        "laws2011", "Laws et al. (2011)", "laws2011",
        "ef = (0.5857 - 0.0165 T) NPP / (51.7 + NPP), T degC, NPP mg C m-2 d-1, ef >= 0",
        ("sst",), lambda sst, npp, zeu=None: ef_laws2011(sst, npp)),
    "dunne2005": ExportMethod(
        "dunne2005", "Dunne et al. (2005)", "dunne2005",
        "pe = -0.0101 T + 0.0582 ln(NPP / Zeu) + 0.419 bounded to [0.04, 0.72], T degC, "
        "NPP / Zeu mmol C m-3 d-1, Zeu from chlorophyll (Morel and Berthon 1989)",
        ("sst", "zeu"), lambda sst, npp, zeu=None: pe_dunne2005(sst, npp, zeu)),
    "henson2011": ExportMethod(
        "henson2011", "Henson et al. (2011)", "henson2011",
        "ef = 0.23 exp(-0.08 T), T degC",
        ("sst",), lambda sst, npp, zeu=None: ef_henson2011(sst)),
}
DEFAULT_EXPORT = tuple(EXPORT_METHODS)


def export_ratio(method: str, sst, npp, *, zeu=None):
    """The export ratio (1) of a method in :data:`EXPORT_METHODS` (inputs as the method's
    function takes them)."""
    try:
        m = EXPORT_METHODS[method]
    except KeyError:
        raise DerivedError(f"unknown export method {method!r}; choose from "
                           f"{', '.join(EXPORT_METHODS)}") from None
    if "zeu" in m.needs and zeu is None:
        raise DerivedError(f"export method {method!r} needs the euphotic depth (zeu)")
    return m.ratio(sst, npp, zeu)


def export_production(npp, ratio, *, npp_units: str | None = None):
    """Export production, mg C m-2 d-1: the export ratio (1) times net primary production
    (mg C m-2 d-1, or ``npp_units``)."""
    return _npp(npp, npp_units) * ratio


# --------------------------------------------------------------------------------------------
# nutrients and oxygen
# --------------------------------------------------------------------------------------------


def _per_carbon(amount: float, of: str) -> float:
    """mmol of ``of`` per mg of carbon, through pint: (1 mg C / M_C) x (amount mol / 106 mol C)."""
    ratio = ureg.Quantity(amount, "mol") / ureg.Quantity(REDFIELD_C, "mol")
    return _factor(ureg.Quantity(1.0, "mg") / ureg.Quantity(MOLAR_MASS_C_G_MOL, "g/mol") * ratio,
                   "mmol")


def nitrogen_demand(npp, *, npp_units: str | None = None):
    """Nitrogen uptake implied by net primary production with the Redfield ratio,
    mmol N m-2 d-1.

    Parameters
    ----------
    npp : array_like
        Net primary production, mg C m-2 d-1 (or ``npp_units``).

    Notes
    -----
    .. math:: N = \\frac{P}{M_C}\\,\\frac{16}{106}

    with :math:`M_C` = 12.011 g mol-1 (Redfield 1934; Redfield et al. 1963).
    """
    return _npp(npp, npp_units) * _per_carbon(REDFIELD_N, "N")


def phosphorus_demand(npp, *, npp_units: str | None = None):
    """Phosphorus uptake implied by net primary production with the Redfield ratio,
    mmol P m-2 d-1.

    Parameters
    ----------
    npp : array_like
        Net primary production, mg C m-2 d-1 (or ``npp_units``).

    Notes
    -----
    .. math:: P_{uptake} = \\frac{P}{M_C}\\,\\frac{1}{106}

    (Redfield 1934; Redfield et al. 1963).
    """
    return _npp(npp, npp_units) * _per_carbon(REDFIELD_P, "P")


def quotient_value(value, where: str = "quotient") -> float:
    """A photosynthetic quotient (mol O2 per mol C) from ``"ammonium"`` (1.1), ``"nitrate"``
    (1.4; Laws 1991) or a number in 0.5-3.

    Raises
    ------
    DerivedError
        Naming ``where`` and what is expected.
    """
    if isinstance(value, str) and value.strip().lower() in QUOTIENTS:
        return QUOTIENTS[value.strip().lower()]
    q = float("nan")
    if isinstance(value, int | float) and not isinstance(value, bool):
        q = float(value)
    elif isinstance(value, str):  # a number as typed on the command line
        try:
            q = float(value)
        except ValueError:
            pass
    if not 0.5 <= q <= 3.0:
        raise DerivedError(f"{where}: expected \"ammonium\", \"nitrate\" or a number between "
                           f"0.5 and 3 (mol O2 per mol C), not {value!r}")
    return q


def oxygen_production(npp, *, quotient: float | str = DEFAULT_QUOTIENT,
                      npp_units: str | None = None):
    """Oxygen released with the carbon fixed, mmol O2 m-2 d-1.

    Parameters
    ----------
    npp : array_like
        Net primary production, mg C m-2 d-1 (or ``npp_units``).
    quotient : float or "ammonium" / "nitrate"
        Photosynthetic quotient, mol O2 released per mol C fixed: about 1.1 for growth on
        ammonium, 1.4 on nitrate (Laws 1991; default 1.4, see
        :data:`euphotic.stations.DEFAULT_QUOTIENT`).

    Notes
    -----
    .. math:: O_2 = PQ\\,\\frac{P}{M_C}
    """
    q = quotient_value(quotient)
    per = _factor(ureg.Quantity(1.0, "mg") / ureg.Quantity(MOLAR_MASS_C_G_MOL, "g/mol")
                  * ureg.Quantity(q, "mol/mol"), "mmol")
    return _npp(npp, npp_units) * per


# --------------------------------------------------------------------------------------------
# quantities and totals
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Substance:
    """What a rate is of: its rate units and the molar mass that turns amounts into masses."""

    symbol: str
    #: units of the rate maps (mass of carbon for export; amount otherwise)
    rate_units: str
    molar_mass_g_mol: float
    #: whether the rate is a mass (mg) rather than an amount (mmol)
    mass_rate: bool


SUBSTANCES = {
    "C": Substance("C", EXPORT_UNITS, MOLAR_MASS_C_G_MOL, True),
    "N": Substance("N", AMOUNT_RATE_UNITS, MOLAR_MASS_N_G_MOL, False),
    "P": Substance("P", AMOUNT_RATE_UNITS, MOLAR_MASS_P_G_MOL, False),
    "O2": Substance("O2", AMOUNT_RATE_UNITS, MOLAR_MASS_O2_G_MOL, False),
}


def totals_from_integral(integral, substance: str) -> tuple[float, float]:
    """A regional integral of a rate over area and time -> ``(mol, Tg)`` of the substance.

    Parameters
    ----------
    integral : float
        Sum of rate x cell area (m2) x days: mg of carbon for export (rate mg C m-2 d-1), mmol
        otherwise (rate mmol m-2 d-1).
    substance : "C", "N", "P" or "O2"

    Returns
    -------
    (float, float)
        Amount, mol; mass, Tg (1e12 g) of the element (of O2 for oxygen). Both through pint
        with the molar masses of this module and :mod:`euphotic.stations`.
    """
    s = SUBSTANCES[substance]
    m = ureg.Quantity(s.molar_mass_g_mol, "g/mol")
    if s.mass_rate:
        mass = ureg.Quantity(integral, "mg")
        amount = mass / m
    else:
        amount = ureg.Quantity(integral, "mmol")
        mass = amount * m
    return float(amount.to("mol").magnitude), float(mass.to("Tg").magnitude)


@dataclass(frozen=True)
class Quantity:
    """One derived quantity as written in the maps and the totals table."""

    name: str
    substance: str
    long_name: str
    comment: str
    citation_keys: tuple[str, ...]


def quantities(export: tuple[str, ...], quotient: float) -> list[Quantity]:
    """The derived quantities of a configuration, in the order they are written."""
    out = []
    for e in export:
        m = EXPORT_METHODS[e]
        out.append(Quantity(
            f"export_{e}", "C",
            f"export production of carbon, {m.label}",
            f"Export ratio times net primary production; ratio {m.formula}; applied to the "
            "month's mean net primary production and mean sea surface temperature. Mass is of "
            f"carbon. Source: {m.label}.",
            (m.citation_key, "morel1989") if "zeu" in m.needs else (m.citation_key,)))
    out.append(Quantity(
        "nitrogen_demand", "N", "nitrogen uptake implied by net primary production",
        "Net primary production / 12.011 g mol-1 x 16/106 (Redfield ratio C:N:P = 106:16:1; "
        "Redfield 1934; Redfield et al. 1963). Amount of nitrogen.",
        ("redfield1934", "redfield1963")))
    out.append(Quantity(
        "phosphorus_demand", "P", "phosphorus uptake implied by net primary production",
        "Net primary production / 12.011 g mol-1 x 1/106 (Redfield ratio C:N:P = 106:16:1; "
        "Redfield 1934; Redfield et al. 1963). Amount of phosphorus.",
        ("redfield1934", "redfield1963")))
    out.append(Quantity(
        "oxygen_production", "O2", "oxygen released with net primary production",
        f"Net primary production / 12.011 g mol-1 x a photosynthetic quotient of {quotient:g} "
        "mol O2 (mol C)-1 (Laws 1991: about 1.1 for ammonium-based, 1.4 for nitrate-based "
        "growth). Amount of O2; set beside oxygen-based measurements of net production.",
        ("laws1991",)))
    return out


def compute_quantities(npp, sst, *, zeu=None, export: tuple[str, ...] = DEFAULT_EXPORT,
                       quotient: float | str = DEFAULT_QUOTIENT) -> dict:
    """Every derived quantity of one configuration: name -> values (export in mg C m-2 d-1,
    the rest in mmol m-2 d-1), plus ``export_ratio_<method>`` (1) for each export method.

    Parameters
    ----------
    npp : net primary production, mg C m-2 d-1
    sst : sea surface temperature, degC
    zeu : euphotic depth, m (needed by ``dunne2005``)
    """
    out = {}
    for e in export:
        r = export_ratio(e, sst, npp, zeu=zeu)
        # where production is missing the ratio means nothing: NaN there too
        out[f"export_ratio_{e}"] = r + 0 * _npp(npp, None) if e == "henson2011" else r
        out[f"export_{e}"] = export_production(npp, r)
    out["nitrogen_demand"] = nitrogen_demand(npp)
    out["phosphorus_demand"] = phosphorus_demand(npp)
    out["oxygen_production"] = oxygen_production(npp, quotient=quotient)
    return out
