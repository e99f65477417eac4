"""Read and check a run configuration (TOML). Every problem names the file and the key.

Each key of each table is declared once in a small table (:data:`RUN_KEYS`,
:data:`INPUT_KEYS`, :data:`OCEAN_KEYS`): a check that turns the TOML value into the value the
run uses, and a description of what is expected, which is the error message when the check
fails. TOML types are taken as they are: a boolean must be ``true``/``false`` (the string
``"false"`` is an error, not a true value), a text must be a string.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import re
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from euphotic import roles, screen
from euphotic.errors import ConfigError, EuphoticError
from euphotic.models import MODELS
from euphotic.outputs import metadata_from_config
from euphotic.readers import InputSpec
from euphotic.regions import Region, regions_from_config

log = logging.getLogger("euphotic")


class _Bad(Exception):
    """A value does not fit its key; the message (if any) replaces the key's description."""


@dataclass(frozen=True)
class Key:
    """One config key: ``check`` turns the TOML value into the run's value (raising
    :class:`_Bad` when it does not fit) and ``expect`` says what is expected."""

    check: Callable[[object], object]
    expect: str


def _shown(value) -> str:
    """A value as it was written in TOML (strings quoted, booleans lower case)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(_shown(v) for v in value) + "]"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, dt.date | dt.datetime | dt.time):
        return value.isoformat()
    return repr(value)


# ---- checks: each returns the cleaned value or raises _Bad --------------------------------


def _string(value) -> str:
    if not isinstance(value, str) or not value.strip():
        raise _Bad
    return value


def _boolean(value) -> bool:
    if not isinstance(value, bool):
        raise _Bad
    return value


def _choice(*allowed: str) -> Callable[[object], str]:
    def check(value) -> str:
        if not isinstance(value, str) or value not in allowed:
            raise _Bad
        return value

    return check


def _fraction(value) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not 0 <= value <= 1:
        raise _Bad
    return float(value)


def _whole_number_min(low: int) -> Callable[[object], int]:
    def check(value) -> int:
        if not isinstance(value, int) or isinstance(value, bool) or value < low:
            raise _Bad
        return value

    return check


def _date(value) -> np.datetime64:
    if isinstance(value, dt.datetime) or not isinstance(value, dt.date | str):
        raise _Bad
    if isinstance(value, str):
        if not re.fullmatch(r"\d{4}-\d{2}-\d{2}", value.strip()):
            raise _Bad
        try:
            value = dt.date.fromisoformat(value.strip())
        except ValueError:
            raise _Bad from None
    return np.datetime64(value, "D")


def _files(value) -> str | list[str]:
    if isinstance(value, str) and value.strip():
        return value
    if (
        isinstance(value, list)
        and value
        and all(isinstance(v, str) and v.strip() for v in value)
    ):
        return list(value)
    raise _Bad


def _date_pattern(value) -> str:
    _string(value)
    try:
        compiled = re.compile(value)
    except re.error as exc:
        raise _Bad(f"`date_pattern` {_shown(value)} is not a regular expression ({exc})") from None
    if "start" not in compiled.groupindex:
        raise _Bad(f"`date_pattern` {_shown(value)} has no named group `(?P<start>...)`")
    return value


#: period names the readers understand (see readers._period_length)
_PERIOD_NAMES = ("day", "daily", "month", "monthly")


def _period(value) -> str | int:
    if isinstance(value, str) and value in _PERIOD_NAMES:
        return value
    if isinstance(value, int) and not isinstance(value, bool) and value > 0:
        return value
    raise _Bad


def _models(value) -> list[str]:
    names = [value] if isinstance(value, str) else value
    if not isinstance(names, list) or not all(isinstance(m, str) for m in names):
        raise _Bad
    if not names:
        raise _Bad(
            f"`models` is empty; name at least one of {', '.join(sorted(MODELS))}"
        )
    for m in names:
        if m not in MODELS:
            raise _Bad(f"unknown model {m!r}; choose from {', '.join(sorted(MODELS))}")
    return list(dict.fromkeys(names))


_MODELS_KEY = Key(_models, "a model name or a list of model names (strings)")

#: [run] keys -> (check, what is expected)
RUN_KEYS: dict[str, Key] = {
    "models": _MODELS_KEY,
    "model": _MODELS_KEY,
    "output_dir": Key(_string, "a folder path (string)"),
    "start": Key(_date, "a date: a TOML date (2025-04-01) or a string \"YYYY-MM-DD\""),
    "end": Key(_date, "a date: a TOML date (2025-04-30) or a string \"YYYY-MM-DD\""),
    "earth": Key(_choice("sphere", "wgs84"), '"sphere" or "wgs84"'),
    "figures": Key(_boolean, "true or false (a TOML boolean, without quotes)"),
    "title": Key(_string, "a non-empty string"),
    "output_format": Key(_choice("netcdf", "zarr"), '"netcdf" or "zarr"'),
    "months_per_compute": Key(_whole_number_min(0), "a whole number >= 0"),
    "min_coverage": Key(_fraction, "a fraction between 0 and 1"),
    "low_coverage": Key(_choice("flag", "drop"), '"flag" or "drop"'),
}

#: [inputs.<role>] keys
INPUT_KEYS: dict[str, Key] = {
    "files": Key(_files, "a path, a glob pattern or a list of them (strings)"),
    "variable": Key(_string, "a variable name (string)"),
    "units": Key(_string, "a units string such as \"mg m-3\""),
    "date_pattern": Key(
        _date_pattern, "a regular expression (string) with a named group (?P<start>...)"
    ),
    "date_format": Key(_string, "a strptime format (string) such as \"%Y%m%d\""),
    "period": Key(_period, "\"day\", \"month\" or a whole number of days > 0"),
    # input screening, checked by euphotic.screen.input_options
    "duplicates": Key(lambda v: v, '"error", "first" or "last"'),
    "valid_range": Key(lambda v: v, "[low, high] in the input's converted units"),
}

#: [ocean] keys
OCEAN_KEYS: dict[str, Key] = {
    "source": Key(_choice("file", "package", "temperature"), '"file", "package" or "temperature"'),
    "land_mask": Key(_string, "a NetCDF file path (string)"),
    "variable": Key(_string, "a variable name (string)"),
}

def _years(value) -> str:
    """A span of years as the comparison and figure functions take it: "FIRST-LAST" or a
    single year (a TOML integer or string); whether the run covers it is known only after
    the run, and checked then."""
    if isinstance(value, int) and not isinstance(value, bool) and value > 0:
        return str(value)
    if not isinstance(value, str):
        raise _Bad
    m = re.fullmatch(r"\s*(\d{1,4})\s*(?:-\s*(\d{1,4})\s*)?", value)
    if m is None or int(m.group(1)) == 0:
        raise _Bad
    first, last = int(m.group(1)), int(m.group(2) or m.group(1))
    if last < first:
        raise _Bad
    return str(first) if first == last else f"{first}-{last}"


_YEARS = 'years as "FIRST-LAST" (e.g. "2015-2019") or one year (2020)'

#: Steps after a run (euphotic.steps): each table, when present, makes `euphotic run` add its
#: outputs to the committed run, in the order of euphotic.steps.STEPS. The keys are the
#: options of the command of the same job (`euphotic compare`, `euphotic figures`,
#: `euphotic methods` + `euphotic report`); a key left out takes that command's default.

#: [compare] keys: `euphotic compare` (euphotic.compare_outputs.write_comparisons)
COMPARE_KEYS: dict[str, Key] = {
    "baseline": Key(_years, _YEARS),
    "compare_to": Key(_years, _YEARS),
    "min_coverage": Key(_fraction, "a fraction between 0 and 1"),
    "low_coverage": Key(_choice("flag", "drop"), '"flag" or "drop"'),
    "totals": Key(_choice("observed", "scaled", "climatology"),
                  '"observed", "scaled" or "climatology"'),
    "maps": Key(_boolean, "true or false (a TOML boolean, without quotes)"),
}

#: [figure_set] keys: `euphotic figures` (euphotic.figureset.write_figure_set)
FIGURE_SET_KEYS: dict[str, Key] = {
    "period": Key(_years, _YEARS),
    "baseline": Key(_years, _YEARS),
    "projection": Key(_choice("equal-area", "latlon"), '"equal-area" or "latlon"'),
    "width": Key(_choice("one-column", "two-column"), '"one-column" or "two-column"'),
    "min_coverage": Key(_fraction, "a fraction between 0 and 1"),
    "absolute": Key(_boolean, "true or false (a TOML boolean, without quotes)"),
}

#: [report] keys: `euphotic methods` and `euphotic report` (an empty table writes both)
REPORT_KEYS: dict[str, Key] = {
    "methods": Key(_boolean, "true or false (a TOML boolean, without quotes)"),
}



def _odd_cells(value) -> int:
    if not isinstance(value, int) or isinstance(value, bool) or value < 1 or value % 2 == 0:
        raise _Bad
    return value


def _positive(value) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not value > 0:
        raise _Bad
    return float(value)


def _quotient(value) -> float | str:
    if isinstance(value, str) and value in ("ammonium", "nitrate"):
        return value
    if isinstance(value, bool) or not isinstance(value, int | float) or not 0.5 <= value <= 3:
        raise _Bad
    return float(value)


#: [matchup] keys (station match-ups, euphotic.matchup_outputs.write_matchups)
MATCHUP_KEYS: dict[str, Key] = {
    "stations": Key(_string, "a station CSV path (string)"),
    "window": Key(_odd_cells, "an odd whole number of cells >= 1 (e.g. 3)"),
    "days": Key(_whole_number_min(0), "a whole number of days >= 0 on each side"),
    "min_valid": Key(_whole_number_min(1), "a whole number of cells >= 1"),
    "max_cv": Key(_positive, "a number > 0 (e.g. 0.15)"),
    "quotient": Key(_quotient, '"ammonium", "nitrate" or a number between 0.5 and 3'),
    "gross_to_net": Key(_fraction, "a fraction between 0 and 1"),
}

def _export_methods(value) -> list[str]:
    from euphotic.derived import EXPORT_METHODS

    names = [value] if isinstance(value, str) else value
    if not isinstance(names, list) or not names or not all(isinstance(v, str) for v in names):
        raise _Bad
    unknown = [v for v in names if v not in EXPORT_METHODS]
    if unknown:
        raise _Bad(f"`export`: unknown method(s) {', '.join(map(json.dumps, unknown))}; choose "
                   f"from {', '.join(map(json.dumps, EXPORT_METHODS))}")
    return list(dict.fromkeys(names))


def _model_names(value) -> list[str]:
    names = [value] if isinstance(value, str) else value
    if not isinstance(names, list) or not names or not all(
            isinstance(v, str) and v.strip() for v in names):
        raise _Bad
    return list(dict.fromkeys(names))


#: [derived] keys: `euphotic derive` (euphotic.derived_outputs.write_derived); which models a
#: run has is known only after it, and checked then
DERIVED_KEYS: dict[str, Key] = {
    "export": Key(_export_methods, 'a list of export methods ("laws2011", "dunne2005", '
                                   '"henson2011")'),
    "quotient": Key(_quotient, '"ammonium", "nitrate" or a number between 0.5 and 3'),
    "models": Key(_model_names, "a non-empty list of model names (strings)"),
}

#: Step table -> its keys; the order in which they run is euphotic.steps.STEPS.
STEP_KEYS: dict[str, dict[str, Key]] = {
    "derived": DERIVED_KEYS,
    "compare": COMPARE_KEYS,
    "figure_set": FIGURE_SET_KEYS,
    "matchup": MATCHUP_KEYS,
    "report": REPORT_KEYS,
}

_TOP_LEVEL = {"run", "inputs", "ocean", "regions", "metadata", "matchup", "models",
              *STEP_KEYS}


def input_roles(model_names) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(required, optional) input roles of the models named, from their declarations
    (:func:`euphotic.models.input_roles`)."""
    from euphotic import models

    return models.input_roles(list(model_names))


@dataclass
class RunConfig:
    """Everything a run needs, with paths resolved against the config file's folder."""

    path: Path
    inputs: dict[str, InputSpec]
    regions: list[Region]
    models: list[str] = field(default_factory=lambda: ["vgpm"])
    output_dir: Path = Path("euphotic_output")
    start: np.datetime64 | None = None
    end: np.datetime64 | None = None  # inclusive
    earth: str = "sphere"
    figures: bool = True
    title: str = "Ocean net primary production"
    output_format: str = "netcdf"  # "netcdf" or "zarr"
    #: months (x models) in each computed graph; 0: the whole run in one graph
    months_per_compute: int = 1
    #: regions below this coverage are flagged low_coverage in the totals (aggregate)
    min_coverage: float = 0.5
    #: what comparisons do with values below min_coverage: "flag" (keep) or "drop" (NaN)
    low_coverage: str = "flag"
    ocean_source: str = "package"  # "package", "file" or "temperature"
    land_mask: Path | None = None
    land_mask_variable: str | None = None
    #: [metadata] keys set by the user (ACDD attributes; see outputs.metadata_from_config)
    metadata: dict[str, str] = field(default_factory=dict)
    #: things worth knowing that are not errors (logged as warnings when the config is loaded)
    notes: list[str] = field(default_factory=list)
    #: [models.<name>] tables: model -> {"values": {parameter: value},
    #: "regions": {region name: {parameter: value}}} (see euphotic.models.parameter_settings)
    model_settings: dict[str, dict] = field(default_factory=dict)
    #: steps after the run: table name -> its checked keys, for the tables present
    #: ([compare], [figure_set], [report]; see euphotic.steps)
    steps: dict[str, dict] = field(default_factory=dict)

    # the input roles the models need (properties, not fields: they follow ``models`` and stay
    # out of the map fingerprints, which hold the model's name)
    @property
    def required_inputs(self) -> tuple[str, ...]:
        """Roles every day of an estimate needs (the models' required inputs, catalogue
        order): the days covered by all of them are the days of a month with an estimate."""
        return tuple(roles.ordered(input_roles(self.models)[0]))

    @property
    def optional_inputs(self) -> tuple[str, ...]:
        """Roles the models can use but do without (day length: computed when not given)."""
        return tuple(roles.ordered(input_roles(self.models)[1]))


def _model_settings(raw, models: list[str], regions: list, path: str, problems: list,
                    notes: list) -> dict[str, dict]:
    """Check ``[models.<name>]`` tables: parameter values of a model, for the whole run and
    (parameters declared per region) per region in ``[models.<name>.regions."<region>"]``."""
    from euphotic.models import SPECS

    if raw is None:
        return {}
    if not isinstance(raw, dict):
        problems.append(ConfigError(path, "[models] must be a table of [models.<name>] tables"))
        return {}
    region_names = {r.name for r in regions}
    out: dict[str, dict] = {}
    for name, table in raw.items():
        where = f"{path} [models.{name}]"
        if name not in SPECS:
            problems.append(ConfigError(where, f"unknown model {name!r}; choose from "
                                               f"{', '.join(sorted(SPECS))}"))
            continue
        if not isinstance(table, dict):
            problems.append(ConfigError(where, "must be a table of parameter values"))
            continue
        if name not in models:
            notes.append(f"{where}: {name} is not in [run] models; its parameters are not used")
        spec = SPECS[name]
        known = {p.name: p for p in spec.parameters}

        def check(values: dict, where: str, *, per_region: bool, name=name,
                  known=known) -> dict:
            good = {}
            for key, value in values.items():
                p = known.get(key)
                if p is None:
                    allowed = ", ".join(known) or "none"
                    problems.append(ConfigError(where, f"unknown parameter {key!r} of {name} "
                                                       f"(its parameters: {allowed})"))
                    continue
                if per_region and not p.per_region:
                    problems.append(ConfigError(where, f"{key} is one value for the whole run; "
                                                       f"set it in [models.{name}]"))
                    continue
                try:
                    p.check(value)
                except ValueError as exc:
                    problems.append(ConfigError(where, str(exc)))
                    continue
                good[key] = value
            return good

        values = {k: v for k, v in table.items() if k != "regions"}
        entry = {"values": check(values, where, per_region=False), "regions": {}}
        by_region = table.get("regions", {})
        if not isinstance(by_region, dict):
            problems.append(ConfigError(where, 'regions must be a table of '
                                               f'[models.{name}.regions."<region name>"] tables'))
            by_region = {}
        for region, vals in by_region.items():
            rwhere = f'{path} [models.{name}.regions."{region}"]'
            if region not in region_names:
                problems.append(ConfigError(rwhere, f"no region named {region!r} in [[regions]]"))
                continue
            if not isinstance(vals, dict):
                problems.append(ConfigError(rwhere, "must be a table of parameter values"))
                continue
            entry["regions"][region] = check(vals, rwhere, per_region=True)
        out[name] = entry
    return out


def _check_keys(table: dict, allowed, where: str, problems: list) -> None:
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        problems.append(ConfigError(
            where, f"unknown key(s) {', '.join(unknown)}; allowed: {', '.join(sorted(allowed))}"
        ))


def _table(raw: dict, key: str, where: str, problems: list, *, name: str) -> dict:
    value = raw.get(key, {})
    if not isinstance(value, dict):
        problems.append(
            ConfigError(where, f"`{key}` must be a table ({name}), not {_shown(value)}")
        )
        return {}
    return value


def check_table(table: dict, keys: dict[str, Key], where: str, problems: list) -> dict:
    """Check every key of one table against its declaration; the cleaned values of the keys
    that fit.

    Each key that does not fit adds a :class:`ConfigError` to ``problems``:
    ``"<where>: `key` must be <expected>, not <given>"`` (or the key's own message, e.g. a
    date pattern that does not compile); unknown keys add one listing them.
    """
    _check_keys(table, keys, where, problems)
    out = {}
    for key, value in table.items():
        if key not in keys:
            continue
        try:
            out[key] = keys[key].check(value)
        except _Bad as bad:
            problem = str(bad) or f"`{key}` must be {keys[key].expect}, not {_shown(value)}"
            problems.append(ConfigError(where, problem))
    return out


def load_config(path: str | Path) -> RunConfig:
    """Parse and check a TOML run configuration.

    Raises
    ------
    ConfigError
        The first problem found (all of them: :func:`config_problems`); a region file that
        cannot be read raises its :class:`~euphotic.errors.InputFileError`.
    """
    problems: list[EuphoticError] = []
    cfg = _load(Path(path), problems)
    if problems or cfg is None:
        raise problems[0]
    for note in cfg.notes:
        log.warning("%s", note)
    return cfg


def matchup_table(path: str | Path) -> dict:
    """The checked ``[matchup]`` table of a config (empty when it has none), ``stations``
    resolved against the config's folder. Kept out of :class:`RunConfig`: it changes no map.

    Raises
    ------
    ConfigError
        The file cannot be read, or a key of the table does not fit (as :func:`load_config`).
    """
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text())
    except OSError as exc:
        raise ConfigError(path, f"cannot read config ({exc.strerror or exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(path, f"not valid TOML: {exc}") from None
    problems: list[EuphoticError] = []
    table = check_table(_table(raw, "matchup", str(path), problems, name="[matchup]"),
                        MATCHUP_KEYS, f"{path} [matchup]", problems)
    if problems:
        raise problems[0]
    if "stations" in table:
        table["stations"] = (path.resolve().parent / table["stations"]).resolve()
    return table


def config_problems(path: str | Path) -> list[EuphoticError]:
    """Every problem of a configuration file (empty when :func:`load_config` would accept it),
    each a one-line error naming the file, the table and the key."""
    problems: list[EuphoticError] = []
    _load(Path(path), problems)
    return problems


def _duplicate_notes(value) -> list[str]:
    names = [value] if isinstance(value, str) else list(value)
    notes = []
    for m in dict.fromkeys(names):
        n = names.count(m)
        if n > 1:
            times = "twice" if n == 2 else f"{n} times"
            notes.append(f"models: {json.dumps(m)} listed {times}; running it once")
    return notes


def _model_roles(models: list[str]) -> tuple[dict[str, tuple[str, ...]], set[str]]:
    """Each model's required roles, and every role any of them uses; empty when a model name
    is not known (that problem is reported for `models`)."""
    try:
        needs = {m: tuple(input_roles([m])[0]) for m in models}
        used = set(input_roles(models)[0]) | set(input_roles(models)[1])
    except (KeyError, ValueError):
        return {}, set()
    return needs, used


def _inputs(raw: dict, path: Path, base: Path, run_raw: dict, models: list[str],
            problems: list) -> tuple[dict[str, InputSpec], list[str]]:
    """The ``[inputs.<role>]`` tables (any catalogued role) as :class:`InputSpec`, and the notes
    about inputs no model uses; a model whose required inputs are not configured adds one
    problem naming the model, the inputs it lacks and the tables to add."""
    needs, used = _model_roles(models)
    required = roles.ordered(r for m in needs.values() for r in m)
    inputs: dict[str, InputSpec] = {}
    inputs_raw = raw.get("inputs")
    if not isinstance(inputs_raw, dict):
        problems.append(ConfigError(
            path, f"missing [inputs] with {roles.words(required or ['chl'], table=True)}"
        ))
        return inputs, []
    extra = sorted(set(inputs_raw) - set(roles.ROLES))
    if extra:
        problems.append(ConfigError(
            f"{path} [inputs]",
            f"unknown input(s) {', '.join(extra)}; known inputs: {', '.join(roles.ROLES)}"))
    for role in roles.ordered(inputs_raw):
        where = f"{path} [inputs.{role}]"
        table_raw = _table(inputs_raw, role, f"{path} [inputs]", problems,
                           name=f"[inputs.{role}]")
        table = check_table(table_raw, INPUT_KEYS, where, problems)
        if "files" not in table_raw and isinstance(inputs_raw.get(role), dict):
            problems.append(ConfigError(where, "missing `files` (a path or glob pattern)"))
        if "files" not in table:
            continue
        try:  # duplicates, valid_range: euphotic.screen
            screen_options = screen.input_options(table, role, where)
        except ConfigError as exc:
            problems.append(exc)
            screen_options = {}
        inputs[role] = InputSpec(
            role=role,
            files=table["files"],
            variable=table.get("variable"),
            units=table.get("units"),
            date_pattern=table.get("date_pattern"),
            date_format=table.get("date_format", "%Y%m%d"),
            period=table.get("period"),
            base_dir=base,
            **screen_options,
        )
    if roles.GRID_ROLE not in inputs_raw and roles.GRID_ROLE not in required:
        problems.append(ConfigError(path, f"missing [inputs.{roles.GRID_ROLE}]: its grid is "
                                          "the grid of the run (every input is brought onto it)"))
    key = "model" if "model" in run_raw and "models" not in run_raw else "models"
    if "model" not in run_raw and "models" not in run_raw:
        key = "models (not set, the default)"
    for m, need in needs.items():
        lacking = [r for r in need if r not in inputs_raw]
        if lacking:
            n = "input" if len(lacking) == 1 else "inputs"
            problems.append(ConfigError(
                f"{path} [run]",
                f"{key}: {m} needs {n} {', '.join(lacking)}; add "
                f"{roles.words(lacking, table=True)} or leave {m} out"))
    notes = []
    unused = [r for r in inputs if needs and r not in used]
    if unused:
        they = "it is" if len(unused) == 1 else "they are"
        notes.append(f"{key}: no model listed uses {roles.words(unused, table=True)} "
                     f"({', '.join(needs)}); {they} read and checked but not used")
    return inputs, notes


def _load(path: Path, problems: list) -> RunConfig | None:
    """The configuration, or None; every problem found is added to ``problems``."""
    try:
        text = path.read_text()
    except OSError as exc:
        problems.append(ConfigError(path, f"cannot read config ({exc.strerror or exc})"))
        return None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        problems.append(ConfigError(path, f"not valid TOML: {exc}"))
        return None
    base = path.resolve().parent
    _check_keys(raw, _TOP_LEVEL, str(path), problems)
    try:
        metadata = metadata_from_config(raw.get("metadata", {}), f"{path} [metadata]")
    except ConfigError as exc:
        problems.append(exc)
        metadata = {}

    where_run = f"{path} [run]"
    run_raw = _table(raw, "run", str(path), problems, name="[run]")
    run = check_table(run_raw, RUN_KEYS, where_run, problems)
    if "models" in run_raw and "model" in run_raw:
        problems.append(ConfigError(where_run, "give `models` or `model`, not both"))
    models = run.get("models", run.get("model", ["vgpm"]))
    notes = []
    for key in ("models", "model"):
        if key in run:
            notes = _duplicate_notes(run_raw[key])

    inputs, input_notes = _inputs(raw, path, base, run_raw, models, problems)
    notes += input_notes

    where_ocean = f"{path} [ocean]"
    ocean_raw = _table(raw, "ocean", str(path), problems, name="[ocean]")
    ocean = check_table(ocean_raw, OCEAN_KEYS, where_ocean, problems)
    land_mask = ocean.get("land_mask")
    source = ocean.get("source", "file" if land_mask else "package")
    if source == "file" and not land_mask and "land_mask" not in ocean_raw:
        problems.append(ConfigError(where_ocean, "source = 'file' needs `land_mask`"))
    if source == "temperature" and isinstance(raw.get("inputs"), dict) \
            and "sst" not in raw["inputs"]:
        problems.append(ConfigError(where_ocean, "source = 'temperature' needs [inputs.sst] "
                                                 "(the ocean is where temperature is valid)"))

    regions: list[Region] = []
    regions_raw = raw.get("regions", [])
    if not isinstance(regions_raw, list):
        problems.append(ConfigError(path, "regions must be an array of tables ([[regions]])"))
    else:
        try:
            regions = regions_from_config(regions_raw, base, str(path))
        except EuphoticError as exc:
            problems.append(exc)

    model_settings = _model_settings(raw.get("models"), list(models), regions, str(path),
                                     problems, notes)

    steps: dict[str, dict] = {}
    for table, keys in STEP_KEYS.items():
        if table in raw:
            step_raw = _table(raw, table, str(path), problems, name=f"[{table}]")
            steps[table] = check_table(step_raw, keys, f"{path} [{table}]", problems)

    start, end = run.get("start"), run.get("end")
    if start is not None and end is not None and end < start:
        problems.append(ConfigError(where_run, f"`end` ({end}) is before `start` ({start})"))
    if problems:
        return None
    return RunConfig(
        path=path,
        inputs=inputs,
        regions=regions,
        models=list(models),
        output_dir=(base / run.get("output_dir", "euphotic_output")).resolve(),
        start=start,
        end=end,
        earth=run.get("earth", "sphere"),
        figures=run.get("figures", True),
        title=run.get("title", "Ocean net primary production"),
        output_format=run.get("output_format", "netcdf"),
        months_per_compute=run.get("months_per_compute", 1),
        min_coverage=run.get("min_coverage", 0.5),
        low_coverage=run.get("low_coverage", "flag"),
        ocean_source=source,
        land_mask=(base / land_mask).resolve() if land_mask else None,
        land_mask_variable=ocean.get("variable"),
        metadata=metadata,
        notes=notes,
        model_settings=model_settings,
        steps=steps,
    )
