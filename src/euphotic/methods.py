"""A methods paragraph and the reference list of a committed run (``euphotic methods FOLDER``).

Everything is read from what the run recorded: its manifest (models, months, input files,
version, configuration hash) and the global attributes of its month maps (earth model, land
mask, regions, grid, screening, and the inputs' units, conversions, periods and regridding
recorded by :func:`run_record`). Nothing re-reads the inputs. A fact the run did not record is
left out, not guessed.

Citations are keys of the one bibliography, ``references.bib``: the paragraph's author-year
citations, the text reference list and the BibTeX list are all made from its entries (parsed
with pybtex).
"""

from __future__ import annotations

import functools
import os
import textwrap
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np

from euphotic import roles as _roles
from euphotic import runfolder
from euphotic.errors import EuphoticError

#: Kind of the files in the run's manifest; a new set replaces the old one.
KIND = "methods"
#: The files written into the run's folder.
FILES = ("methods.md", "methods.txt", "references.txt", "references.bib")
#: Libraries whose versions a run records (with euphotic's own).
SOFTWARE = ("numpy", "xarray", "dask")
#: Roles of the inputs, in the order the paragraph names them (the role catalogue's).
ROLES = tuple(_roles.ROLES)
#: How the paragraph names each input, in lists and in full (from the role catalogue).
_SHORT = {r.name: r.short_name for r in _roles.ROLES.values()}
_ROLE_WORDS = {r.name: r.description for r in _roles.ROLES.values()}

#: Model id -> (sentence, citation keys in the order the sentence cites them). The sentence
#: holds ``{key}`` placeholders filled with author-year citations.
class MethodsError(EuphoticError):
    """The run's records cannot be turned into a methods paragraph (e.g. a citation key that
    ``references.bib`` lacks)."""


@dataclass(frozen=True)
class Methods:
    """A run's methods paragraph and reference list.

    ``markdown`` and ``text``: the paragraph (text wrapped at 88 columns); ``keys``: citation
    keys in order of first citation; ``references_text``: author-year list, one entry a line;
    ``references_bibtex``: the same entries as BibTeX.
    """

    markdown: str
    text: str
    keys: tuple[str, ...]
    references_text: str
    references_bibtex: str
    facts: dict = field(default_factory=dict)


# --------------------------------------------------------------------------------------------
# what a run records (called by the pipeline once per run)
# --------------------------------------------------------------------------------------------


def run_record(inputs: dict) -> dict[str, str]:
    """Global attributes that let :func:`methods_text` describe the inputs and software later.

    Parameters
    ----------
    inputs : role -> the input as opened on the chlorophyll grid (``None`` when absent), with
        the attributes :func:`euphotic.readers.open_input` sets

    Returns
    -------
    dict
        ``input_units_<role>`` (units in the files), ``input_conversion_<role>``,
        ``input_periods_<role>`` (count, lengths in days, first and last day),
        ``input_regridding_<role>`` (when recorded) and ``software_versions``.
    """
    import dask
    import xarray

    from euphotic import __version__

    out: dict[str, str] = {}
    for role in ROLES:
        da = inputs.get(role)
        if da is None:
            continue
        for key in ("units_in_file", "conversion", "regridding"):
            v = da.attrs.get(key)
            if v is not None:
                out[f"input_{key.replace('_in_file', '')}_{role}"] = str(v)
        if "period_start" in da.coords and "period_end" in da.coords:
            s = da["period_start"].values.astype("datetime64[D]")
            e = da["period_end"].values.astype("datetime64[D]")
            lengths = sorted(set((e - s).astype(int).tolist()))
            n = f"{len(s)} period{'s' if len(s) != 1 else ''}"
            if lengths == [1]:
                n = f"{len(s)} daily period{'s' if len(s) != 1 else ''}"
            elif len(lengths) == 1:
                n += f" of {lengths[0]} days"
            else:
                n += f" of {lengths[0]} to {lengths[-1]} days"
            out[f"input_periods_{role}"] = f"{n}, {s.min()} to {e.max() - 1}"
    versions = {"euphotic": __version__, "numpy": np.__version__,
                "xarray": xarray.__version__, "dask": dask.__version__}
    out["software_versions"] = "; ".join(f"{k} {v}" for k, v in versions.items())
    return out


# --------------------------------------------------------------------------------------------
# the bibliography
# --------------------------------------------------------------------------------------------


def _bibliography():
    from pybtex.database import parse_string

    text = resources.files("euphotic").joinpath("references.bib").read_text(encoding="utf-8")
    return parse_string(text, "bibtex")


_BIB = None
_TEXT: dict[str, str] = {}


def reference_text_for(key: str) -> str:
    """The reference text of one ``references.bib`` key (:func:`reference_text`; rendered
    once per process: pybtex takes a few tenths of a second per entry)."""
    global _BIB
    if key in _TEXT:
        return _TEXT[key]
    if _BIB is None:
        _BIB = _bibliography()
    try:
        _TEXT[key] = reference_text(_BIB.entries[key])
    except KeyError:
        raise MethodsError(f"references.bib: no entry {key!r}") from None
    return _TEXT[key]


@functools.cache
def _plain(latex: str) -> str:
    # the plain-text backend itself: render_as("text") looks it up among the installed
    # packages' entry points on every call (most of the methods text's time)
    from pybtex.backends.plaintext import Backend
    from pybtex.richtext import Text

    return Text.from_latex(latex).render(Backend())


def _last(person) -> str:
    return _plain(" ".join(person.prelast_names + person.last_names))


def author_year(entry) -> str:
    """``Eppley (1972)``, ``Behrenfeld and Falkowski (1997)``, ``Forsythe et al. (1995)``."""
    people = entry.persons.get("author", [])
    names = [_last(p) for p in people]
    if len(names) == 1:
        who = names[0]
    elif len(names) == 2:
        who = f"{names[0]} and {names[1]}"
    else:
        who = f"{names[0]} et al."
    return f"{who} ({entry.fields['year']})"


def _person_text(person) -> str:
    initials = " ".join(
        "-".join(f"{part[0]}." for part in _plain(n).split("-") if part)
        for n in person.first_names + person.middle_names)
    return f"{_last(person)}, {initials}".strip().rstrip(",")


def reference_text(entry) -> str:
    """One reference in author-year style, e.g. ``Eppley, R. W. (1972). Title. Journal 70,
    1063-1085.``"""
    people = [_person_text(p) for p in entry.persons.get("author", [])]
    who = people[0] if len(people) == 1 else ", ".join(people[:-1]) + " and " + people[-1]
    f = entry.fields
    title = _plain(f["title"]).rstrip(".")
    if entry.type == "article":
        where = _plain(f["journal"])
        if "volume" in f:
            where += f" {f['volume']}"
            if "number" in f:
                where += f"({f['number']})"
        if "pages" in f:
            where += f", {f['pages'].replace('--', '-')}"
    else:
        where = _plain(f.get("series", f.get("publisher", "")))
        if "number" in f:
            where += f" {f['number']}"
    return f"{who} ({f['year']}). {title}. {where}."


# --------------------------------------------------------------------------------------------
# the paragraph
# --------------------------------------------------------------------------------------------


#: (path, size, modification time) -> a map's global attributes, read once per process (the
#: methods text is written, then rebuilt with the report, in one run)
_ATTRS: dict[tuple, dict] = {}


def _global_attrs(path: Path) -> dict:
    """The global attributes of a map file (NetCDF, read with the netCDF library alone, which
    returns the same values as xarray's decoding of them without building a Dataset) or Zarr
    store; read once per process while the file is unchanged."""
    try:
        key = (str(path), *runfolder.stat_entry(path).values())
        if key not in _ATTRS:
            if path.is_dir():
                import xarray as xr

                with xr.open_dataset(path, engine="zarr", consolidated=True,
                                     decode_times=False) as ds:
                    _ATTRS[key] = dict(ds.attrs)
            else:
                import netCDF4

                with netCDF4.Dataset(path) as nc:
                    _ATTRS[key] = {k: nc.getncattr(k) for k in nc.ncattrs()}
        return dict(_ATTRS[key])
    except (OSError, ValueError, KeyError) as exc:
        raise MethodsError(f"{path}: cannot read its attributes ({exc.__class__.__name__})"
                           ) from None


def _first_map_attrs(folder: Path, manifest: dict) -> tuple[dict, list[dict]]:
    """Attributes of a map of the first model written by the committed run, and those of
    every map of that model (for the screening counts, which each month's file records for
    its month)."""
    maps = [(n, e) for n, e in manifest["outputs"].items() if e.get("kind") == "map"]
    if not maps:
        raise MethodsError(f"{folder}: the run has no month maps to describe")
    maps.sort(key=lambda ne: (ne[1].get("month", ""), ne[0]))
    first_model = maps[0][1].get("model")
    all_attrs = []
    for name, e in maps:
        if e.get("model") != first_model:
            continue
        all_attrs.append(_global_attrs(folder / name))
    # run-wide facts (inputs, software) from a map the committed run wrote itself (its input
    # files are the manifest's): a run that reused earlier months' maps unchanged describes
    # its own inputs in the maps it wrote; else the newest map
    inputs = manifest.get("inputs") or {}

    def own(a: dict) -> bool:
        return bool(inputs) and all(a.get(f"input_files_{r}") == ", ".join(f)
                                    for r, f in inputs.items())

    return max(all_attrs, key=lambda a: (own(a), str(a.get("date_created", "")))), all_attrs


def _model_parameters(folder: Path, manifest: dict) -> dict[str, str]:
    """Model -> the ``model_parameters`` attribute of its first month map (the values it ran
    with; every month of a run has the same)."""
    out: dict[str, str] = {}
    maps = sorted((e.get("month", ""), n, e.get("model")) for n, e in manifest["outputs"].items()
                  if e.get("kind") == "map")
    for _, name, model in maps:
        if model in out:
            continue
        out[model] = str(_global_attrs(folder / name).get("model_parameters", ""))
    return out


def _parameter_values(text: str) -> dict[str, str]:
    """Run-wide ``name = value`` pairs of a ``model_parameters`` attribute (region-specific
    values, ``name = value in Region``, are left out)."""
    out = {}
    for part in filter(None, (p.strip() for p in text.split(";"))):
        name, _, rest = part.partition(" = ")
        if rest and " in " not in rest:
            out[name] = rest.split()[0]
    return out


def _months_phrase(months: list[str]) -> str:
    if not months:
        return ""
    if len(months) == 1:
        return f"for {months[0]}"
    return f"for the {len(months)} months {months[0]} to {months[-1]}"


def _num(v) -> str:
    return f"{float(v):g}"


def methods_text(folder: str | os.PathLike) -> Methods:
    """The methods paragraph and reference list of the run committed in ``folder``.

    Raises
    ------
    NoRunError, InterruptedCommitError, OutputChangedError
        As :func:`euphotic.results.committed_manifest`.
    MethodsError
        The run has no maps, a map's attributes cannot be read, or a cited key is not in
        ``references.bib``.
    """
    from euphotic import results, units
    from euphotic.models import SPECS
    from euphotic.outputs import CAUTION, PUBLISHED_NAMES
    from euphotic.readers import TARGET_UNITS

    path = Path(folder).absolute()
    manifest = results.committed_manifest(path)
    attrs, month_attrs = _first_map_attrs(path, manifest)
    bib = _bibliography()
    keys: list[str] = []

    def cite(key: str, *, paren: bool = False) -> str:
        if key not in bib.entries:
            raise MethodsError(f"references.bib: no entry {key!r} (cited by the methods text)")
        if key not in keys:
            keys.append(key)
        text = author_year(bib.entries[key])
        return "(" + text.replace(" (", ", ").rstrip(")") + ")" if paren else text

    sentences: list[str] = []
    version = manifest.get("version") or attrs.get("product_version")
    months = list(manifest.get("months") or [])

    # models, with the published alternative each chose (e.g. the euphotic-depth relation)
    parts, param_parts = [], []
    ran_with = _model_parameters(path, manifest)
    for m in manifest.get("models", []):
        spec = SPECS.get(m)
        if spec is None:  # a model this version does not know
            parts.append(f"{PUBLISHED_NAMES.get(m, m)} (euphotic model {m!r})")
            continue
        values = _parameter_values(ran_with.get(m, ""))
        chosen, unchosen = {}, set()
        for p in spec.parameters:
            if getattr(p, "citations", ()):
                pick = values.get(p.name, p.default)
                i = p.choices.index(pick) if pick in p.choices else p.choices.index(p.default)
                chosen[p.name] = p.citations[i]
                unchosen |= set(p.citations) - {p.citations[i]}
        tmpl = spec.methods or (spec.published_name + " (" + ", ".join(
            "{" + k + "}" for k in spec.citation_keys) + ")")
        fills = {k: cite(k) for k in spec.citation_keys if "{" + k + "}" in tmpl}
        fills.update({n: cite(k) for n, k in chosen.items() if "{" + n + "}" in tmpl})
        parts.append(tmpl.format(**fills))
        for k in (*spec.citation_keys, *chosen.values()):
            if k not in unchosen:
                cite(k)
        if ran_with.get(m):
            text = ran_with[m]
            for n, k in chosen.items():  # name the chosen relation's source
                text = text.replace(f"{n} = {values.get(n, '')}",
                                    f"{n} = {values.get(n, '')} {cite(k, paren=True)}", 1)
            param_parts.append(f"{spec.label}, {text}")
    models_txt = parts[0] if len(parts) == 1 else "; and ".join(["; ".join(parts[:-1]), parts[-1]])
    sentences.append(
        f"Monthly net primary production (NPP, mg C m-2 d-1) was estimated "
        f"{_months_phrase(months)} with euphotic {version} using "
        f"{'the model' if len(parts) == 1 else f'{len(parts)} models'}: {models_txt}.")
    if param_parts:
        sentences.append("Model parameters as run: " + "; ".join(param_parts) + ".")

    # inputs: variables, files, periods, units and conversions
    inputs = manifest.get("inputs") or {}
    in_parts = []
    for role in ROLES:
        files = inputs.get(role)
        if not files:
            continue
        p = f"{_ROLE_WORDS[role]} ({len(files)} file{'s' if len(files) != 1 else ''}"
        periods = attrs.get(f"input_periods_{role}")
        if periods:
            p += f"; {periods}"
        u = attrs.get(f"input_units_{role}")
        if u:
            p += f"; in {u}"
        p += ")"
        in_parts.append(p)
    if in_parts:
        sentences.append("The inputs were " + ", ".join(in_parts[:-1])
                         + (" and " if len(in_parts) > 1 else "") + in_parts[-1] + ".")
    conv = []
    for role in ROLES:
        c, u = attrs.get(f"input_conversion_{role}"), attrs.get(f"input_units_{role}")
        if not c or not u or c in ("none", "unknown"):
            continue
        if _roles.ROLES[role].conversion == "light":
            try:
                kind = units.par_factors(u)[1]
            except units.UnitError:
                kind = None
            if kind == "energy":
                conv.append(f"{_SHORT[role]} given as an energy flux ({u}) was converted to a "
                            f"photon dose in {TARGET_UNITS[role]} with 4.57 umol J-1 for "
                            f"daylight PAR {cite('mccree1972', paren=True)} and 86,400 s d-1")
                continue
        conv.append(f"{_SHORT[role]} was converted from {u} to {TARGET_UNITS[role]}")
    if conv:
        sentences.append("Units: " + "; ".join(conv) + ".")

    # grid and regridding
    if "geospatial_lat_min" in attrs:
        sentences.append(
            f"All fields were used on the chlorophyll grid "
            f"({attrs.get('geospatial_lat_resolution', '?')} x "
            f"{attrs.get('geospatial_lon_resolution', '?')}, latitude "
            f"{_num(attrs['geospatial_lat_min'])} to {_num(attrs['geospatial_lat_max'])}, "
            f"longitude {_num(attrs['geospatial_lon_min'])} to "
            f"{_num(attrs['geospatial_lon_max'])})"
            + _regrid_clause(attrs) + ".")

    # day length
    if inputs.get("day_length"):
        sentences.append("Day length was read from the day-length input.")
    else:
        sentences.append(f"Day length was computed from latitude and day of year with the CBM "
                         f"model of {cite('forsythe1995')}.")

    # screening
    screen = _screening(attrs, month_attrs, TARGET_UNITS)
    if screen:
        sentences.append(screen)

    # gaps, coverage and totals
    sentences.append(
        "The model was evaluated day by day and each monthly value is the mean daily rate over "
        "the days of the month with a valid estimate (the maps give each cell's coverage and "
        "number of valid days).")
    if any(e.get("rows") for e in manifest["outputs"].values() if e.get("kind") == "map"):
        sentences.append(
            "Regional totals (Tg C per month) integrate the monthly rate over the observed ocean "
            "cells (total_TgC); total_filled_TgC scales the observed area-mean rate to the "
            "region's whole ocean area.")
    ens = [e for e in manifest["outputs"].values() if e.get("kind") == "ensemble map"]
    if ens:
        n = len(ens[0].get("models") or manifest.get("models", []))
        sentences.append(
            f"The spread across the {n} models is given per cell and month, and per region and "
            "month of the totals, as their mean, minimum, maximum, standard deviation (divisor "
            "N - 1) and coefficient of variation, only where every model has a value (for the "
            "totals, only where no model's total is flagged); it shows the dependence on the "
            "choice of model, not an error estimate.")
    from euphotic.results import manifest_coverage_rule

    min_cov, low, _ = manifest_coverage_rule(manifest)
    sentences.append(
        f"Region-months and cells whose coverage is below {min_cov:g} are flagged low_coverage"
        + (" and left out of comparisons (annual totals, climatologies, anomalies, differences "
           "and trends)." if low == "drop" else "; their values are kept in comparisons."))
    land = attrs.get("land_mask_source")
    if land:
        sentences.append(f"Ocean cells: {_land_words(land)}.")
    regions = attrs.get("region_sources")
    if regions and regions != "none":
        sentences.append(f"Regions: {regions}.")
    earth = attrs.get("earth_model")
    if earth:
        sentences.append(f"Cell areas are exact areas of the latitude-longitude cells on the "
                         f"{earth} {cite('snyder1987', paren=True)}.")

    # software and configuration
    soft = attrs.get("software_versions") or (f"euphotic {version}" if version else "")
    if soft:
        sentences.append(f"Software: {soft}.")
    sha = manifest.get("config_sha256") or attrs.get("euphotic_config_sha256")
    cfg_name = attrs.get("euphotic_config_file")
    if sha:
        sentences.append(f"The run configuration{f' ({cfg_name})' if cfg_name else ''} has "
                         f"SHA-256 {sha}.")
    caution = manifest.get("caution") or attrs.get("caution") or CAUTION
    sentences.append(f"Caution: {caution}")

    paragraph = " ".join(sentences)
    entries = [bib.entries[k] for k in keys]
    ref_lines = sorted((reference_text(e) for e in entries), key=str.lower)
    from pybtex.database import BibliographyData

    bibtex = BibliographyData(entries={k: bib.entries[k] for k in sorted(keys)}).to_string(
        "bibtex")
    text = "\n".join(textwrap.wrap(paragraph, 88, break_on_hyphens=False)) + "\n"
    markdown = "## Methods\n\n" + paragraph + "\n\n## References\n\n" + "".join(
        f"- {r}\n" for r in ref_lines)
    return Methods(markdown=markdown, text=text, keys=tuple(keys),
                   references_text="".join(f"{r}\n" for r in ref_lines),
                   references_bibtex=bibtex,
                   facts={"folder": str(path), "run_id": manifest.get("run_id")})


def _regrid_clause(attrs: dict) -> str:
    done = []
    for role in ROLES:
        if role == _roles.GRID_ROLE:
            continue
        r = attrs.get(f"input_regridding_{role}")
        if r and not r.startswith("none"):
            done.append(f"{_SHORT[role]}: {r}")
    return ("; brought onto it: " + "; ".join(done)) if done else ""


def _land_words(source: str) -> str:
    if source.startswith("file "):
        return "from the land mask " + source[5:]
    if source == "valid temperature":
        return "cells with a valid sea surface temperature"
    return source


def _screening(attrs: dict, month_attrs: list[dict], target: dict) -> str:
    parts = []
    for role in ROLES:
        rng = attrs.get(f"screen_{role}_valid_range")
        if rng is None:
            continue
        lo, hi = (float(x) for x in np.atleast_1d(rng)[:2])
        p = f"{_SHORT[role]} {lo:g} to {hi:g} {target[role]}"
        keys = [f"screen_{role}_values_{w}_range" for w in ("below", "above", "in")]
        if all(all(k in a for k in keys) for a in month_attrs):
            below = sum(int(a[keys[0]]) for a in month_attrs)
            above = sum(int(a[keys[1]]) for a in month_attrs)
            valid = sum(int(a[keys[2]]) for a in month_attrs)
            p += (f" ({below + above:,} of {below + above + valid:,} values masked: "
                  f"{below:,} below, {above:,} above)")
        parts.append(p)
    if not parts:
        return ""
    return ("Input values outside their valid ranges were masked before the model was "
            "evaluated: " + "; ".join(parts) + ".")


# --------------------------------------------------------------------------------------------
# the command's files
# --------------------------------------------------------------------------------------------


@dataclass
class Written:
    """What ``euphotic methods`` wrote."""

    methods: Methods
    files: list[Path] = field(default_factory=list)


def write_methods(folder: str | os.PathLike, *, command: str = "euphotic methods") -> Written:
    """Write ``methods.md``, ``methods.txt``, ``references.txt`` and ``references.bib`` into
    the run's folder as one unit (kind ``"methods"``; a new set replaces the old one).

    Raises
    ------
    NoRunError
        ``folder`` holds no committed run.
    MethodsError
        See :func:`methods_text`.
    """
    from euphotic import results

    path = Path(folder)
    results.committed_manifest(path)  # no run, or an interrupted commit: say so, touch nothing
    with runfolder.OutputFolder(path).adding(command, replace_kinds=(KIND,)) as (stage, added):
        written = stage_methods(path, stage, added)
    return written


def stage_methods(folder: Path, stage: runfolder.Stage, added: dict[str, dict]) -> Written:
    """Write the methods files of the run committed in ``folder`` into ``stage`` and list
    them in ``added`` (for a commit made with :meth:`euphotic.runfolder.OutputFolder.adding`
    that replaces kind :data:`KIND`; the report step commits them with the report)."""
    m = methods_text(folder)
    written = Written(methods=m)
    contents = {
        "methods.md": (m.markdown, "methods paragraph and references (Markdown)"),
        "methods.txt": (m.text, "methods paragraph (plain text)"),
        "references.txt": (m.references_text, "works cited by the methods paragraph"),
        "references.bib": (m.references_bibtex, "works cited by the methods paragraph (BibTeX)"),
    }
    for name, (text, description) in contents.items():
        stage.file(name).write_text(text, encoding="utf-8")
        added[name] = {"kind": KIND, "description": description}
        written.files.append(Path(folder) / name)
    return written
