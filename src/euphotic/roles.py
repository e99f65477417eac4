"""The catalogue of input roles: every gridded input a model can declare, described once.

A role is what an input stands for (surface chlorophyll, daily PAR, ...). The readers,
screening, the pre-flight check, the methods paragraph and the match-ups take every fact about
an input from its :class:`InputRole` here: the units it is converted to, its long name, how a
file's variable is recognised (CF standard names, then plain variable names), the physical
range used by screening and the basis of that range. Which roles a run needs comes from the
models' declarations (:func:`euphotic.models.input_roles`); a new input for a new model is one
new entry here and nothing else.

CF standard names were checked against the CF standard name table shipped with the IOOS
compliance checker (``compliance_checker/data/cf-standard-name-table.xml``, version 93,
2026-03-17). They exist there, except:

* ``day_length``: not a CF standard name (kept, as before, for files written by this tool and
  others that use it);
* particulate backscattering (``bbp``): the table has no name for the particulate part alone;
  ``volume_backwards_scattering_coefficient_of_radiative_flux_in_sea_water`` is the total of
  sea water and particles, so it is deliberately not taken as ``bbp``: files are recognised by
  variable name or by ``variable`` in the config.

Kd(490) uses ``volume_attenuation_coefficient_of_downwelling_radiative_flux_in_sea_water``,
which CF defines for all wavelengths unless a ``radiation_wavelength`` coordinate says which;
a file is expected to hold the 490 nm coefficient (its name says so, or the config does).
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

from euphotic import units

#: The role whose grid every other input is brought onto (regridded to), and whose periods
#: decide the months a run touches.
GRID_ROLE = "chl"

Conversion = Literal["linear", "light"]


@dataclass(frozen=True)
class InputRole:
    """Everything the tool knows about one kind of input.

    Attributes
    ----------
    name : str
        The role's key: ``[inputs.<name>]`` in a config, the keyword of the model functions.
    units : str
        Canonical units (UDUNITS spelling) every file is converted to, e.g. ``"mg m-3"``.
    long_name : str
        Written as the ``long_name`` of the input as read (metadata, ``euphotic inspect``).
    description : str
        How the methods paragraph names the input ("The inputs were ...").
    short_name : str
        A short name for lists and sentences ("chlorophyll", "PAR").
    standard_names : tuple of str
        CF standard names that identify the input in a file, in order of preference.
    variable_names : tuple of str
        Variable names looked for when no variable has one of ``standard_names`` (none for the
        roles whose files always carry a standard name: an unlabelled variable named ``chl``
        may hold anything).
    valid_range : (float, float)
        Plausible values in ``units`` (inclusive); values outside are masked by screening.
    range_basis : str
        Where ``valid_range`` comes from (a source, or "from memory" / "common practice").
    time_varying : bool
        A dated daily or monthly field (every role so far): each file or time step must carry
        its period.
    conversion : "linear" or "light"
        ``"linear"``: a linear change of units (pint); ``"light"``: PAR's photon-dose rules
        (:func:`euphotic.units.par_factors`: photon or energy fluxes to a daily photon dose).
    kelvin_check : bool
        A temperature: a field labelled Celsius whose values can only be kelvin is an error
        (:func:`euphotic.screen.check_kelvin_label`).
    """

    name: str
    units: str
    long_name: str
    description: str
    short_name: str
    standard_names: tuple[str, ...]
    variable_names: tuple[str, ...]
    valid_range: tuple[float, float]
    range_basis: str
    time_varying: bool = True
    conversion: Conversion = "linear"
    kelvin_check: bool = False

    def __post_init__(self):
        lo, hi = self.valid_range
        if not lo < hi:
            raise ValueError(f"role {self.name}: valid_range {self.valid_range} is not low < high")


_CATALOGUE = (
    InputRole(
        name="chl",
        units=units.CHL_UNITS,
        long_name="surface chlorophyll-a concentration",
        description="surface chlorophyll-a concentration",
        short_name="chlorophyll",
        standard_names=(
            "mass_concentration_of_chlorophyll_a_in_sea_water",
            "mass_concentration_of_chlorophyll_in_sea_water",
        ),
        variable_names=(),
        valid_range=(0.001, 100.0),
        range_basis=(
            "from memory: the valid range written in common ocean-colour Level-3 chlorophyll "
            "products (0.001-100 mg m-3); open-ocean gyres reach about 0.02, eutrophic coastal "
            "waters rarely exceed 50-100"),
    ),
    InputRole(
        name="par",
        units=units.PAR_UNITS,
        long_name="daily photosynthetically active radiation at the surface",
        description="daily photosynthetically available radiation (PAR)",
        short_name="PAR",
        standard_names=(
            "surface_downwelling_photosynthetic_photon_flux_in_air",
            "surface_downwelling_photosynthetic_radiative_flux_in_air",
            "downwelling_photosynthetic_photon_flux_in_sea_water",
            "downwelling_photosynthetic_radiative_flux_in_sea_water",
        ),
        variable_names=(),
        valid_range=(0.0, 130.0),
        range_basis=(
            "from memory / common practice: the clear-sky daily PAR dose at the sea surface "
            "peaks at about 65-70 mol photons m-2 d-1 (summer subtropics); 130 is about twice "
            "that, so only impossible values (and a mislabelled W m-2 or umol m-2 s-1 field) "
            "are caught. Negative doses are impossible"),
        conversion="light",
    ),
    InputRole(
        name="sst",
        units=units.SST_UNITS,
        long_name="sea surface temperature",
        description="sea surface temperature",
        short_name="sea surface temperature",
        standard_names=(
            "sea_surface_temperature",
            "sea_surface_skin_temperature",
            "sea_surface_subskin_temperature",
            "sea_surface_foundation_temperature",
        ),
        variable_names=(),
        valid_range=(-2.5, 40.0),
        range_basis=(
            "sea water of salinity 35 freezes near -1.9 degC at the surface (UNESCO 1983 "
            "freezing-point formula, Fofonoff & Millard, UNESCO technical paper 44); the "
            "warmest open sea surfaces (Persian Gulf, Red Sea in summer) stay below about "
            "36 degC (from memory)"),
        kelvin_check=True,
    ),
    InputRole(
        name="day_length",
        units=units.DAY_LENGTH_UNITS,
        long_name="day length",
        description="day length",
        short_name="day length",
        standard_names=("day_length",),  # not in the CF table (see the module docstring)
        variable_names=(),
        valid_range=(0.0, 24.0),
        range_basis="a day has 24 hours (definition)",
    ),
    InputRole(
        name="bbp",
        units="m-1",
        long_name="particulate backscattering coefficient at 443 nm",
        description="particulate backscattering coefficient at 443 nm (bbp)",
        short_name="particulate backscattering",
        standard_names=(),  # no CF name for the particulate part (see the module docstring)
        variable_names=("bbp_443", "bbp443", "bbp"),
        valid_range=(0.0, 0.5),
        range_basis=(
            "from memory: bbp(443) is about 0.0005-0.001 m-1 in the clearest ocean gyres and "
            "rarely above 0.1-0.2 m-1 even in turbid coastal water; 0.5 m-1 leaves room and "
            "catches a field in km-1 mislabelled m-1. Negative backscattering is impossible"),
    ),
    InputRole(
        name="kd490",
        units="m-1",
        long_name="diffuse attenuation coefficient of downwelling irradiance at 490 nm",
        description="diffuse attenuation coefficient of downwelling irradiance at 490 nm "
                    "(Kd(490))",
        short_name="Kd(490)",
        standard_names=("volume_attenuation_coefficient_of_downwelling_radiative_flux_in_sea_water",),
        variable_names=("kd490", "kd_490"),
        valid_range=(0.01, 10.0),
        range_basis=(
            "pure sea water alone attenuates 490 nm light by Kw(490) = 0.0166 m-1 (Morel and "
            "Maritorena 2001, table 2, from memory), so 0.01 m-1 keeps retrieval noise near "
            "that floor; very turbid coastal waters reach a few m-1 (from memory), 10 m-1 "
            "catches only impossible values"),
    ),
    InputRole(
        name="mld",
        units="m",
        long_name="ocean mixed-layer thickness",
        description="ocean mixed-layer depth (MLD)",
        short_name="mixed-layer depth",
        standard_names=(
            "ocean_mixed_layer_thickness",
            "ocean_mixed_layer_thickness_defined_by_sigma_theta",
            "ocean_mixed_layer_thickness_defined_by_sigma_t",
            "ocean_mixed_layer_thickness_defined_by_temperature",
            "ocean_mixed_layer_thickness_defined_by_mixing_scheme",
        ),
        variable_names=("mld", "mixed_layer_depth"),
        valid_range=(0.0, 4000.0),
        range_basis=(
            "from memory: winter convection deepens the mixed layer to about 2,000 m in the "
            "Labrador and Greenland Seas, and no mixed layer is thicker than the ocean is deep "
            "(about 4,000 m on average); 4,000 m catches a field in cm mislabelled m over most "
            "of the ocean. A thickness cannot be negative"),
    ),
)

#: Role name -> its description, in the order inputs are opened and reported.
ROLES: dict[str, InputRole] = {r.name: r for r in _CATALOGUE}


class UnknownRoleError(KeyError):
    """A role name that is not in the catalogue."""


def role(name: str) -> InputRole:
    """The catalogue entry of ``name``.

    Raises
    ------
    UnknownRoleError
        ``name`` is not a catalogued role.
    """
    try:
        return ROLES[name]
    except KeyError:
        raise UnknownRoleError(
            f"unknown input {name!r}; known inputs: {', '.join(ROLES)}") from None


def ordered(names: Iterable[str]) -> list[str]:
    """``names`` (catalogued roles) in catalogue order, each once."""
    wanted = set(names)
    return [r for r in ROLES if r in wanted]


def words(names: Iterable[str], *, table: bool = False) -> str:
    """``chl, par and sst`` (or ``[inputs.chl], [inputs.par] and [inputs.sst]``)."""
    items = [f"[inputs.{n}]" if table else n for n in names]
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]
