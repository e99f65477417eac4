"""Finding an input's files, and the variable and axes that hold it in each file.

An input is described by an :class:`InputSpec` (a file pattern or list, optionally the variable
name, units and how to date the files). :func:`find_variable` picks the variable by the config,
then by the CF standard names of the role (from :mod:`euphotic.roles`), then by the role's plain
names; :func:`find_axis` finds the latitude and longitude dimensions by standard name, units or
name.
"""

from __future__ import annotations

import glob
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import xarray as xr

from euphotic.errors import GridMismatchError, InputFileError, VariableNotFoundError
from euphotic.roles import ROLES, role

#: An input role: a key of :data:`euphotic.roles.ROLES` (chl, par, sst, day_length, bbp, ...).
Role = str

#: CF standard names that identify each input, in order of preference (from the catalogue).
STANDARD_NAMES: dict[str, tuple[str, ...]] = {r.name: r.standard_names for r in ROLES.values()}

#: Units each input is converted to (from the catalogue).
TARGET_UNITS: dict[str, str] = {r.name: r.units for r in ROLES.values()}

LONG_NAMES = {r.name: r.long_name for r in ROLES.values()}

#: netCDF-C chunk cache per variable, bytes. The library default (64 MiB per variable) grows
#: memory with every open file; inputs are read chunk by chunk once, so a small cache suffices.
CHUNK_CACHE_BYTES = 4 * 1024 * 1024


@dataclass
class InputSpec:
    """How to find one input: files, variable, and how to date the files."""

    role: Role
    files: str | Sequence[str]
    variable: str | None = None
    units: str | None = None
    #: regular expression with a named group ``start`` (and optionally ``end``, inclusive)
    date_pattern: str | None = None
    #: strptime format of the dates the pattern captures
    date_format: str = "%Y%m%d"
    #: length of each file's period when only a start date is known: "day", "month" or N (days)
    period: str | int | None = None
    base_dir: Path = field(default_factory=Path.cwd)
    #: files (or time steps) with the same period: "error", or keep the "first"/"last" by path
    duplicates: str = "error"
    #: plausible range in the model's units; None: ``screen.DEFAULT_VALID_RANGE[role]``
    valid_range: tuple[float, float] | None = None

    def paths(self) -> list[str]:
        """Expand the file pattern(s) into a sorted list of existing paths."""
        pats = [self.files] if isinstance(self.files, str) else list(self.files)
        out: list[str] = []
        for pat in pats:
            p = os.path.normpath(pat if os.path.isabs(pat) else str(self.base_dir / pat))
            hits = sorted(glob.glob(p)) if glob.has_magic(p) else ([p] if os.path.exists(p) else [])
            if not hits:
                what = "matches no file" if glob.has_magic(p) else "does not exist"
                raise InputFileError(p, f"{self.role} input {what}")
            out.extend(hits)
        return sorted(dict.fromkeys(out))



def find_variable(ds: xr.Dataset, spec: InputSpec, path: str) -> tuple[str, str]:
    """The variable holding ``spec.role`` and how it was identified: the configured name, a CF
    standard name of the role (in the catalogue's order of preference), else one of the role's
    plain variable names."""
    if spec.variable:
        if spec.variable not in ds.data_vars:
            raise VariableNotFoundError(
                path,
                f"no variable {spec.variable!r} (data variables: {', '.join(ds.data_vars) or 'none'})",
            )
        return spec.variable, f"config variable {spec.variable!r}"
    facts = role(spec.role)
    for std in facts.standard_names:
        hits = [v for v in ds.data_vars if ds[v].attrs.get("standard_name") == std]
        if hits:
            return hits[0], f"standard_name {std!r}"
    for name in facts.variable_names:
        if name in ds.data_vars:
            return name, f"variable name {name!r}"
    looked = []
    if facts.standard_names:
        looked.append("has standard_name "
                      + " or ".join(repr(s) for s in facts.standard_names[:2]))
    if facts.variable_names:
        looked.append("is named " + " or ".join(repr(n) for n in facts.variable_names))
    raise VariableNotFoundError(
        path,
        f"no {spec.role} variable: none {' or '.join(looked)} "
        f"(data variables: {', '.join(ds.data_vars) or 'none'}); name it with `variable` in the config",
    )


def find_axis(ds: xr.Dataset, da: xr.DataArray, axis: str, path: str) -> str:
    std = {"lat": "latitude", "lon": "longitude"}[axis]
    unit_ok = {
        "lat": ("degrees_north", "degree_north", "degree_N", "degrees_N", "degreeN", "degreesN"),
        "lon": ("degrees_east", "degree_east", "degree_E", "degrees_E", "degreeE", "degreesE"),
    }[axis]
    names = {
        "lat": ("lat", "latitude", "y", "nav_lat"),
        "lon": ("lon", "longitude", "x", "nav_lon"),
    }[axis]
    for d in da.dims:
        c = ds[d] if d in ds.variables else None
        attrs = c.attrs if c is not None else {}
        if attrs.get("standard_name") == std or attrs.get("units") in unit_ok or d.lower() in names:
            if c is None:
                raise InputFileError(path, f"dimension {d!r} has no {std} coordinate values")
            if c.ndim != 1:
                raise GridMismatchError(
                    path, f"{std} is not one-dimensional: only regular lat-lon grids are read"
                )
            return d
    raise InputFileError(path, f"variable {da.name!r} has no {std} dimension (dims: {da.dims})")



def small_chunk_cache() -> None:
    import netCDF4

    size, nelems, preemption = netCDF4.get_chunk_cache()
    if size != CHUNK_CACHE_BYTES:
        netCDF4.set_chunk_cache(CHUNK_CACHE_BYTES, nelems, preemption)

