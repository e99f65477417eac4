"""Config checking: every key's type and allowed values, one line naming file, table and key.

The expected messages are this project's own wording (the README's configuration tables);
TOML types are those of the TOML 1.0 specification as read by the standard library's tomllib.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from euphotic.cli import main
from euphotic.config import config_problems, load_config
from euphotic.errors import ConfigError

from ._grids import CHL_STD, INPUTS, PAR_STD, SST_STD, grid, write_field


def _cfg(tmp: Path, run: str = "", inputs: str = INPUTS, extra: str = "") -> Path:
    path = tmp / "run.toml"
    path.write_text(f"[run]\n{run}\n{inputs}\n{extra}\n")
    return path


def _error(path: Path) -> str:
    with pytest.raises(ConfigError) as info:
        load_config(path)
    msg = str(info.value)
    assert "\n" not in msg
    return msg


# ---- the four cases that were broken ------------------------------------------------------


def test_files_of_wrong_type_names_file_table_and_key(tmp_path):
    path = _cfg(tmp_path, inputs=INPUTS.replace('files = "chl/*.nc"', "files = 42"))
    assert _error(path) == (
        f"{path} [inputs.chl]: `files` must be a path, a glob pattern or a list of them "
        "(strings), not 42"
    )


def test_files_of_wrong_type_through_cli_is_one_line_not_unexpected(tmp_path):
    path = _cfg(tmp_path, inputs=INPUTS.replace('files = "chl/*.nc"', "files = 42"))
    res = CliRunner().invoke(main, ["run", str(path), "-q"])
    assert res.exit_code == 1
    assert res.stderr == (
        f"euphotic: error: {path} [inputs.chl]: `files` must be a path, a glob pattern or a "
        "list of them (strings), not 42\n"
    )


@pytest.mark.parametrize("given", ['"false"', '"true"', "0", "1"])
def test_figures_must_be_a_toml_boolean(tmp_path, given):
    path = _cfg(tmp_path, run=f"figures = {given}")
    assert _error(path) == (
        f"{path} [run]: `figures` must be true or false (a TOML boolean, without quotes), "
        f"not {given}"
    )


@pytest.mark.parametrize("given", ["true", "false"])
def test_figures_boolean_is_taken_as_given(tmp_path, given):
    assert load_config(_cfg(tmp_path, run=f"figures = {given}")).figures is (given == "true")


def _write_inputs(tmp: Path) -> None:
    """One day (2024-03-01) of chl, PAR and SST on a 0.5-degree 4 x 4 degree grid."""
    lat, lon = grid(0.0, 4.0, 0.0, 4.0, 0.5)
    shape = (len(lat), len(lon))
    day = {"start": "2024-03-01", "end": "2024-03-01"}
    write_field(tmp / "chl" / "c.nc", "chl", CHL_STD, "mg m-3", np.full(shape, 0.3), lat, lon, **day)
    write_field(tmp / "par" / "p.nc", "par", PAR_STD, "einstein m-2 day-1", np.full(shape, 30.0),
                lat, lon, **day)
    write_field(tmp / "sst" / "s.nc", "sst", SST_STD, "degC", np.full(shape, 15.0), lat, lon, **day)


REST = """output_dir = "out"
figures = false
"""
REGION = """
[ocean]
source = "temperature"
[[regions]]
name = "Box"
box = [0.0, 0.0, 4.0, 4.0]
"""


def test_empty_model_list_is_an_error_and_keeps_the_previous_table(tmp_path):
    _write_inputs(tmp_path)
    good = CliRunner().invoke(main, ["run", str(_cfg(tmp_path, REST, extra=REGION)), "-q"])
    assert good.exit_code == 0, good.output
    csv = tmp_path / "out" / "regional_totals.csv"
    before = csv.read_bytes()
    assert before.count(b"\n") == 2  # header and the one row (Box, 2024-03, vgpm)
    path = _cfg(tmp_path, "models = []\n" + REST, extra=REGION)
    res = CliRunner().invoke(main, ["run", str(path), "-q"])
    assert res.exit_code == 1
    assert res.stderr == (
        f"euphotic: error: {path} [run]: `models` is empty; name at least one of "
        "cbpm, eppley_vgpm, pi_platt, vgpm\n"
    )
    assert csv.read_bytes() == before
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        ".euphotic.lock", "euphotic_manifest.json", "npp_vgpm_2024-03.nc", "regional_totals.csv",
        "regional_totals.csv-metadata.json", "regions.nc",
    ]


def test_duplicate_models_run_once_with_a_warning(tmp_path):
    _write_inputs(tmp_path)
    path = _cfg(tmp_path, 'models = ["vgpm", "vgpm"]\n' + REST, extra=REGION)
    res = CliRunner().invoke(main, ["run", str(path), "-q"])
    assert res.exit_code == 0, res.output
    assert res.stderr == 'euphotic: warning: models: "vgpm" listed twice; running it once\n'
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        ".euphotic.lock", "euphotic_manifest.json", "npp_vgpm_2024-03.nc", "regional_totals.csv",
        "regional_totals.csv-metadata.json", "regions.nc",
    ]
    rows = (tmp_path / "out" / "regional_totals.csv").read_text().splitlines()
    assert len(rows) == 2 and rows[1].startswith("Box,2024-03,vgpm,")


def test_duplicate_models_dropped_in_order(tmp_path, caplog):
    log = logging.getLogger("euphotic")
    log.addHandler(caplog.handler)
    try:
        cfg = load_config(_cfg(tmp_path, 'models = ["eppley_vgpm", "vgpm", "eppley_vgpm", '
                                         '"eppley_vgpm"]'))
    finally:
        log.removeHandler(caplog.handler)
    assert cfg.models == ["eppley_vgpm", "vgpm"]
    assert [r.getMessage() for r in caplog.records] == [
        'models: "eppley_vgpm" listed 3 times; running it once'
    ]


# ---- every other key ----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("run", "table", "problem"),
    [
        ("title = 3", "[run]", "`title` must be a non-empty string, not 3"),
        ('title = ""', "[run]", '`title` must be a non-empty string, not ""'),
        ("output_dir = true", "[run]", "`output_dir` must be a folder path (string), not true"),
        ('earth = "flat"', "[run]", '`earth` must be "sphere" or "wgs84", not "flat"'),
        ('output_format = "csv"', "[run]", '`output_format` must be "netcdf" or "zarr", not "csv"'),
        ("months_per_compute = -2", "[run]", "`months_per_compute` must be a whole number >= 0, "
         "not -2"),
        ("months_per_compute = 1.5", "[run]", "`months_per_compute` must be a whole number >= 0, "
         "not 1.5"),
        ("months_per_compute = true", "[run]", "`months_per_compute` must be a whole number >= 0, "
         "not true"),
        ("models = 3", "[run]", "`models` must be a model name or a list of model names "
         "(strings), not 3"),
        ('models = ["vgpm", 2]', "[run]", '`models` must be a model name or a list of model names '
         '(strings), not ["vgpm", 2]'),
        ('models = ["nope"]', "[run]", "unknown model 'nope'; choose from cbpm, eppley_vgpm, pi_platt, vgpm"),
        ('models = ["vgpm"]\nmodel = "vgpm"', "[run]", "give `models` or `model`, not both"),
        ('start = "April"', "[run]", '`start` must be a date: a TOML date (2025-04-01) or a string '
         '"YYYY-MM-DD", not "April"'),
        ('start = "2025-02-30"', "[run]", '`start` must be a date: a TOML date (2025-04-01) or a '
         'string "YYYY-MM-DD", not "2025-02-30"'),
        ("end = 2025-04-30T12:00:00", "[run]", '`end` must be a date: a TOML date (2025-04-30) or a '
         'string "YYYY-MM-DD", not 2025-04-30T12:00:00'),
        ("end = 20250430", "[run]", '`end` must be a date: a TOML date (2025-04-30) or a string '
         '"YYYY-MM-DD", not 20250430'),
        ("start = 2025-05-01\nend = 2025-04-30", "[run]",
         "`end` (2025-04-30) is before `start` (2025-05-01)"),
        ("colour = 1", "[run]", "unknown key(s) colour; allowed: end, figures, model, models, "
         "months_per_compute, output_dir, output_format, start, title, earth"),
    ],
)
def test_run_keys(tmp_path, run, table, problem):
    path = _cfg(tmp_path, run=run)
    if problem.startswith("unknown key"):
        assert _error(path).startswith(f"{path} {table}: unknown key(s) colour; allowed: ")
        return
    assert _error(path) == f"{path} {table}: {problem}"


@pytest.mark.parametrize(
    ("line", "problem"),
    [
        ("files = []", "`files` must be a path, a glob pattern or a list of them (strings), not []"),
        ('files = ["a.nc", 1]', '`files` must be a path, a glob pattern or a list of them '
         '(strings), not ["a.nc", 1]'),
        ('variable = ["chl"]', '`variable` must be a variable name (string), not ["chl"]'),
        ("units = 1", '`units` must be a units string such as "mg m-3", not 1'),
        ("date_format = 8", '`date_format` must be a strptime format (string) such as "%Y%m%d", '
         "not 8"),
        ('period = "week"', '`period` must be "day", "month" or a whole number of days > 0, '
         'not "week"'),
        ("period = 0", '`period` must be "day", "month" or a whole number of days > 0, not 0'),
        ('period = "8"', '`period` must be "day", "month" or a whole number of days > 0, not "8"'),
        ("date_pattern = 5", "`date_pattern` must be a regular expression (string) with a named "
         "group (?P<start>...), not 5"),
        # messages of Python's re module (CPython 3.11+) for these two patterns
        ("date_pattern = '_(\\d{8}'", '`date_pattern` "_(\\\\d{8}" is not a regular expression '
         "(missing ), unterminated subpattern at position 1)"),
        ("date_pattern = '_(?P<day>\\d{8})'", '`date_pattern` "_(?P<day>\\\\d{8})" has no named '
         "group `(?P<start>...)`"),
    ],
)
def test_input_keys(tmp_path, line, problem):
    inputs = INPUTS.replace('[inputs.par]\nfiles = "par/*.nc"',
                            f'[inputs.par]\nfiles = "par/*.nc"\n{line}')
    if line.startswith("files"):
        inputs = INPUTS.replace('files = "par/*.nc"', line)
    path = _cfg(tmp_path, inputs=inputs)
    assert _error(path) == f"{path} [inputs.par]: {problem}"


@pytest.mark.parametrize(
    ("line", "problem"),
    [
        ('source = "sky"', '`source` must be "file", "package" or "temperature", not "sky"'),
        ("land_mask = 1", "`land_mask` must be a NetCDF file path (string), not 1"),
        ('source = "file"', "source = 'file' needs `land_mask`"),
        ("variable = false", "`variable` must be a variable name (string), not false"),
    ],
)
def test_ocean_keys(tmp_path, line, problem):
    path = _cfg(tmp_path, extra=f"[ocean]\n{line}")
    assert _error(path) == f"{path} [ocean]: {problem}"


def test_tables_must_be_tables(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text('run = "fast"\n' + INPUTS)
    assert _error(path) == f'{path}: `run` must be a table ([run]), not "fast"'
    path.write_text('[inputs]\nchl = "chl/*.nc"\npar = "p"\nsst = "s"\n')
    assert _error(path) == f'{path} [inputs]: `chl` must be a table ([inputs.chl]), not "chl/*.nc"'


def test_good_values_are_taken(tmp_path):
    cfg = load_config(_cfg(
        tmp_path,
        run='models = "eppley_vgpm"\nstart = 2025-04-01\nend = "2025-04-30"\nearth = "wgs84"\n'
            'title = "Maren Sea"\nmonths_per_compute = 0\noutput_format = "zarr"',
        inputs=INPUTS.replace('files = "sst/*.nc"', 'files = ["sst/a.nc", "sst/b_*.nc"]\n'
                              "date_pattern = '_(?P<start>\\d{8})'\nperiod = 8\nunits = \"K\""),
    ))
    assert cfg.models == ["eppley_vgpm"]
    assert cfg.start == np.datetime64("2025-04-01") and cfg.end == np.datetime64("2025-04-30")
    assert (cfg.earth, cfg.title, cfg.months_per_compute, cfg.output_format) == (
        "wgs84", "Maren Sea", 0, "zarr")
    sst = cfg.inputs["sst"]
    assert (sst.files, sst.date_pattern, sst.period, sst.units) == (
        ["sst/a.nc", "sst/b_*.nc"], r"_(?P<start>\d{8})", 8, "K")


def test_every_config_problem_listed_by_check_first_by_run(tmp_path):
    path = _cfg(
        tmp_path, run='figures = "false"\nmodels = []',
        inputs=INPUTS.replace('files = "chl/*.nc"', "files = 42"), extra='[ocean]\nsource = "sky"',
    )
    expected = [
        f'{path} [run]: `figures` must be true or false (a TOML boolean, without quotes), not "false"',
        f"{path} [run]: `models` is empty; name at least one of cbpm, eppley_vgpm, pi_platt, vgpm",
        f"{path} [inputs.chl]: `files` must be a path, a glob pattern or a list of them "
        "(strings), not 42",
        f'{path} [ocean]: `source` must be "file", "package" or "temperature", not "sky"',
    ]
    assert [str(p) for p in config_problems(path)] == expected
    assert _error(path) == expected[0]
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 1 and res.stdout == ""
    assert res.stderr.splitlines() == [f"euphotic: error: {e}" for e in expected]
    res = CliRunner().invoke(main, ["run", str(path), "-q"])
    assert res.exit_code == 1
    assert res.stderr.splitlines() == [f"euphotic: error: {expected[0]}"]


def test_a_good_config_has_no_problems():
    assert config_problems(Path(__file__).resolve().parents[1] / "configs" / "demo.toml") == []
