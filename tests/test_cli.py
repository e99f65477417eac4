"""The command line, through its entry point: exit codes, one-line errors, no output on failure."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from euphotic.cli import main

from ._grids import CHL_STD, PAR_STD, SST_STD, box_run_config, grid, write_field


def _case(
    tmp: Path,
    *,
    chl_units="mg m-3",
    chl_std=CHL_STD,
    sst_res=1.0,
    acdd=True,
    chl_glob="chl/*.nc",
    sst_days=("2024-03-01",),
) -> Path:
    lat, lon = grid(0.0, 4.0, 0.0, 4.0, 0.5)
    shape = (len(lat), len(lon))
    kw = {"start": "2024-03-01", "end": "2024-03-01"} if acdd else {}
    write_field(
        tmp / "chl" / "c.nc", "chl", chl_std, chl_units, np.full(shape, 0.3), lat, lon, **kw
    )
    write_field(
        tmp / "par" / "p.nc",
        "par",
        PAR_STD,
        "einstein m-2 day-1",
        np.full(shape, 30.0),
        lat,
        lon,
        time="2024-03-01",
    )
    slat, slon = grid(0.0, 4.0, 0.0, 4.0, sst_res)
    for i, d in enumerate(sst_days):
        write_field(
            tmp / "sst" / f"s{i}.nc",
            "sst",
            SST_STD,
            "degC",
            np.full((len(slat), len(slon)), 15.0),
            slat,
            slon,
            time=d,
        )
    return box_run_config(tmp / "run.toml", "Box", [0.0, 0.0, 4.0, 4.0], chl=chl_glob)


def _run(cfg: Path, *extra: str):
    return CliRunner().invoke(main, ["run", str(cfg), "-q", *extra])


def test_good_case_runs(tmp_path):
    res = _run(_case(tmp_path))
    assert res.exit_code == 0, res.output
    assert (tmp_path / "out" / "npp_vgpm_2024-03.nc").exists()
    assert "Box" in res.output and "Caution" in res.output


@pytest.mark.parametrize(
    ("kwargs", "file_part", "phrase"),
    [
        ({"chl_std": "sea_water_salinity"}, "chl/c.nc", "no chl variable"),
        ({"chl_units": "zorks m-3"}, "chl/c.nc", "unknown unit 'zorks m-3'"),
        ({"chl_units": "furlong"}, "chl/c.nc", "'furlong' cannot be converted to 'mg m-3'"),
        ({"chl_units": "K"}, "chl/c.nc", "cannot be converted"),
        ({"acdd": False}, "chl/c.nc", "no time information"),
        ({"sst_res": 0.3}, "sst/s0.nc", "non-whole ratio"),
        ({"chl_glob": "nothing_here/*.nc"}, "nothing_here/*.nc", "matches no file"),
        ({"sst_days": ("2023-06-01",)}, "", "no day is covered by all inputs"),
    ],
)
def test_bad_input_one_line_error_and_no_output(tmp_path, kwargs, file_part, phrase):
    res = _run(_case(tmp_path, **kwargs))
    assert res.exit_code == 1
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, res.stderr
    assert lines[0].startswith("euphotic: error: ")
    assert file_part in lines[0] and phrase in lines[0], lines[0]
    assert "Traceback" not in res.output
    out = tmp_path / "out"
    assert not out.exists() or not any(out.iterdir())


def test_debug_shows_traceback(tmp_path):
    res = _run(_case(tmp_path, chl_units="furlong"), "--debug")
    assert res.exit_code != 0
    assert res.exception is not None  # re-raised for the traceback


def test_bad_config(tmp_path):
    cfg = tmp_path / "bad.toml"
    cfg.write_text("[run]\nmodels = ['nope']\n")
    res = _run(cfg)
    assert res.exit_code == 1
    assert "unknown model 'nope'" in res.stderr and str(cfg) in res.stderr
    cfg.write_text("[run]\nmonths_per_compute = -2\n")
    res = _run(cfg)
    assert res.exit_code == 1 and "months_per_compute" in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    cfg.write_text("this is = = not toml")
    res = _run(cfg)
    assert res.exit_code == 1 and "not valid TOML" in res.stderr
    res = _run(tmp_path / "missing.toml")
    assert res.exit_code == 1 and "missing.toml" in res.stderr


def test_help_on_every_command():
    for args in ([], ["run"], ["inspect"], ["models"]):
        res = CliRunner().invoke(main, [*args, "--help"])
        assert res.exit_code == 0 and "Usage" in res.output


def test_inspect_reports_periods_and_units(tmp_path):
    _case(tmp_path)
    res = CliRunner().invoke(main, ["inspect", str(tmp_path / "chl" / "c.nc")])
    assert res.exit_code == 0, res.output
    assert "chl" in res.output and "2024-03-01" in res.output and "mg m-3" in res.output


def test_console_script_installed():
    """The installed entry point answers (checks [project.scripts])."""
    exe = Path(sys.executable).with_name("euphotic")
    res = subprocess.run([str(exe), "--version"], capture_output=True, text=True, check=False)
    assert res.returncode == 0 and "euphotic" in res.stdout
