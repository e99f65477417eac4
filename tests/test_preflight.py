"""`euphotic check` / preflight.check: every problem of a config, without computing the grid.

Expected values are worked out by hand from the files each test writes (stated beside each);
the unit factors are the SI definitions (1 umol = 1e-6 mol, 1 d = 86,400 s, 0 degC = 273.15 K,
BIPM SI Brochure, 9th ed.).
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import dask
import numpy as np
import pytest
from click.testing import CliRunner

from euphotic import preflight
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.errors import InputFileError
from euphotic.pipeline import prepare

from ._files import write_grid
from ._grids import CHL_STD, INPUTS, PAR_STD, SST_STD, grid, run_config, write_field

ROOT = Path(__file__).resolve().parents[1]
D = np.datetime64


def _check(args):
    return CliRunner().invoke(main, ["check", *map(str, args)])


# ---- the demo ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo_config(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("demo_check")
    shutil.copytree(ROOT / "configs", base / "configs")
    (base / "sample_grids").symlink_to(ROOT / "sample_grids")
    return base / "configs" / "demo.toml"


def _kib(folder: Path, pattern: str) -> str:
    """Total size of the matching files as the report writes it (KiB, one decimal)."""
    return f"{sum(p.stat().st_size for p in folder.glob(pattern)) / 1024:.1f} KiB"


def test_demo_checks_clean_through_the_cli(demo_config):
    res = _check([demo_config])
    assert res.exit_code == 0, res.output
    out = res.stdout
    # the sample grids (scripts/make_sample_grids.py): chlorophyll and PAR on a 1/12-degree grid
    # of 240 x 264 cells (40..60 N, 36..14 W), temperature packed in K on a 1/4-degree grid
    # stored with descending latitudes and 0..360 longitudes; 30 daily files each (April 2025)
    for line in [
        '[inputs.chl] files = "../sample_grids/chl/maren_chl_*.nc"',
        "  files:       30 (maren_chl_20250401.nc .. maren_chl_20250430.nc), 3.0 MiB on disk",
        "  variable:    chlor, identified by standard_name "
        "'mass_concentration_of_chlorophyll_a_in_sea_water'",
        "  units:       mg m-3 in the file; conversion: none",
        "  grid:        240 x 264 cells, lat 40.0417..59.9583 step 0.0833333, "
        "lon -35.9583..-14.0417 step 0.0833333",
        # umol m-2 s-1 -> mol m-2 d-1: 1e-6 mol/umol x 86,400 s/d = 0.0864 (SI)
        "  units:       umol m-2 s-1 in the file; conversion: umol m-2 s-1 -> mol m-2 d-1 "
        "(x 0.0864)",
        "  regridding:  none (same grid as the chlorophyll)",
        # K -> degC: minus 273.15 (SI definition of the degree Celsius)
        "  units:       K in the file; conversion: K -> degC (- 273.15)",
        "  grid:        80 x 88 cells, lat 40.125..59.875 step 0.25, lon -35.875..-14.125 step 0.25",
        "  in the file: latitude descending, longitude [0, 360)",
        "  regridding:  lat interpolated linearly (0.25 -> 0.0833333 deg); "
        "lon interpolated linearly (0.25 -> 0.0833333 deg)",
        "  periods:     30, 1 day(s) long, 2025-04-01..2025-04-30",
        "  gaps:        none",
        # backscattering: float32 m-1 on a 1/6-degree grid, no CF standard name (none exists
        # for the particulate part), found by its variable name
        '[inputs.bbp] files = "../sample_grids/bbp/maren_bbp_*.nc"',
        "  files:       30 (maren_bbp_20250401.nc .. maren_bbp_20250430.nc), 1.2 MiB on disk",
        "  variable:    bbp_443, identified by variable name 'bbp_443'",
        "  units:       m-1 in the file; conversion: none",
        "  grid:        120 x 132 cells, lat 40.0833..59.9167 step 0.166667, "
        "lon -35.9167..-14.0833 step 0.166667",
        "  regridding:  lat interpolated linearly (0.166667 -> 0.0833333 deg); "
        "lon interpolated linearly (0.166667 -> 0.0833333 deg)",
        "  files:       30 (maren_kd490_20250401.nc .. maren_kd490_20250430.nc), 759.0 KiB on "
        "disk",
        "  variable:    kd490, identified by standard_name "
        "'volume_attenuation_coefficient_of_downwelling_radiative_flux_in_sea_water'",
        # mixed layer: int16 cm on the 1/4-degree grid, dated by the file name; cm -> m is
        # x 0.01 (SI prefix centi); its size on disk summed from the files (1 KiB = 1024 B)
        "  files:       30 (maren_mld_20250401.nc .. maren_mld_20250430.nc), "
        f"{_kib(ROOT / 'sample_grids' / 'mld', 'maren_mld_*.nc')} on disk",
        "  variable:    mld, identified by standard_name "
        "'ocean_mixed_layer_thickness_defined_by_sigma_theta'",
        "  units:       cm in the file; conversion: cm -> m (x 0.01)",
        # 'all' is the days of the inputs the models require (the CbPM's bbp, kd490 and mld too)
        "Months (days covered / days in the month; 'all': chl, par, sst, bbp, kd490 and mld "
        "together)",
        "  month    all    chl    par    sst    bbp    kd490  mld",
        "  2025-04  30/30  30/30  30/30  30/30  30/30  30/30  30/30",
        "  months to produce: 1; skipped: none",
        # box -22..-15 E x 44..56 N on 1/12-degree cells: 84 columns x 144 rows (by hand)
        "  Skerrow Shelf     12,096 cells, 8,319 ocean",
        # the whole grid: 240 x 264
        "  Whole Maren Sea   63,360 cells, 54,876 ocean",
        "  63,360 cells x 30 days with all inputs x 4 model(s) = 7,603,200 cell-days "
        "(vgpm, eppley_vgpm, pi_platt, cbpm)",
        # decoded, by hand: chl and PAR 30 x 240 x 264 x 4 B each (float32), SST 30 x 80 x 88
        # x 8 B (float64 after the offset), bbp 30 x 120 x 132 x 4 B, Kd(490) 30 x 120 x 132 x
        # 8 B (unpacked with a float64 scale_factor), MLD 30 x 80 x 88 x 4 B: 23,434,560 B
        "  input: 180 files, 8.3 MiB on disk, 22.4 MiB decoded",
        "Problems: 0 error(s), 0 warning(s)",
        "The run would start.",
    ]:
        assert line in out.splitlines(), line
    assert out.count("periods:     30, 1 day(s) long, 2025-04-01..2025-04-30") == 6
    assert "Peak memory (estimate): " in out and "basis: base 303.0 MiB" in out
    assert res.stderr == ""


def test_demo_check_computes_nothing_on_the_grid(demo_config, no_compute):
    with dask.config.set(num_workers=2), no_compute:
        rep = preflight.check(load_config(demo_config))
    assert rep.ok and rep.problems == []
    assert [r.variable for r in rep.inputs] == ["chlor", "par", "sea_surface_temperature",
                                                "bbp_443", "kd490", "mld"]
    assert [(m.month, m.n_days, m.all_inputs, m.by_input) for m in rep.months] == [
        (D("2025-04"), 30, 30, {"chl": 30, "par": 30, "sst": 30, "bbp": 30, "kd490": 30,
                                "mld": 30})
    ]
    e = rep.estimate
    assert (e.cells, e.days, e.models, e.files, e.threads, e.block_cells) == (
        63_360, 30, 4, 180, 2, 63_360)
    # the model of estimate_memory, worked out by hand for the demo: 4 regions overlapping
    # 3 deep, 4 models; 448,384,384 B = 427.6 MiB
    assert e.parts == {
        "base": 303 * 2**20,
        # ocean 3 B a cell + three uint16 label layers: the gyre polygon overlaps the shelf box,
        # and the "Whole Maren Sea" box covers both
        "masks": 63_360 * (3 + 6),
        "tasks": 2 * 2 * 63_360 * 44,
        "models": 2 * 2 * 63_360 * 3 * 90,
        "figures": 46 * 2**20 + 63_360 * 36,
    }
    assert sum(e.parts.values()) == 448_384_384
    assert "Peak memory (estimate): 427.6 MiB" in rep.text()


def _peak_rss(cmd: list[str], env: dict) -> int:
    """Peak resident memory (bytes) of a command's process tree, sampled every 50 ms with
    psutil (as benchmarks/scale_month.py measures runs)."""
    import os
    import subprocess
    import time

    import psutil

    peak = 0
    with subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                          env={**os.environ, **env}) as proc:
        ps = psutil.Process(proc.pid)
        while proc.poll() is None:
            try:
                procs = [ps, *ps.children(recursive=True)]
                peak = max(peak, sum(p.memory_info().rss for p in procs))
            except psutil.Error:
                pass
            time.sleep(0.05)
        err = proc.stderr.read()
    assert proc.returncode == 0, err
    return peak


@pytest.mark.slow
def test_memory_estimate_against_a_measured_demo_run(demo_config, tmp_path):
    """The estimate against the peak RSS of a real `euphotic run` of the demo (four models, its
    match-up step included). Measured 476-485 MiB against 428 estimated on the 2-core project
    machine; 25 % allows for other machines' library builds."""
    with dask.config.set(num_workers=2):
        est = preflight.check(load_config(demo_config)).estimate.peak_bytes
    cmd = [sys.executable, "-m", "euphotic.cli", "run", str(demo_config), "-q",
           "--output-dir", str(tmp_path / "out")]
    peak = _peak_rss(cmd, {"DASK_NUM_WORKERS": "2"})
    assert abs(peak / est - 1) < 0.25, (peak / 2**20, est / 2**20)


# ---- problems -----------------------------------------------------------------------------


def _daily(tmp: Path, role: str, days, *, units=None, res=0.5, std=None, name=None):
    """One file per day, dated by ACDD attributes, over 0..4 N, 0..4 E."""
    std = std or {"chl": CHL_STD, "par": PAR_STD, "sst": SST_STD}[role]
    units = units or {"chl": "mg m-3", "par": "einstein m-2 day-1", "sst": "degC"}[role]
    value = {"chl": 0.3, "par": 30.0, "sst": 15.0}[role]
    lat, lon = grid(0.0, 4.0, 0.0, 4.0, res)
    for d in days:
        write_field(tmp / role / f"{name or role}_{d.replace('-', '')}.nc", role, std, units,
                    np.full((len(lat), len(lon)), value), lat, lon, start=d, end=d)


MARCH = [f"2024-03-{d:02d}" for d in range(1, 6)]


def _config(tmp: Path, *, sst="sst/*.nc", ocean='source = "temperature"', regions="") -> Path:
    return run_config(tmp / "run.toml", ocean=ocean, regions=[("Box", [0.0, 0.0, 4.0, 4.0])],
                      inputs=INPUTS.replace('"sst/*.nc"', f'"{sst}"'), extra=regions)


def test_two_problems_in_two_inputs_are_both_reported(tmp_path, no_compute):
    _daily(tmp_path, "chl", MARCH, units="zorks m-3")
    _daily(tmp_path, "par", MARCH)
    cfg = _config(tmp_path, sst="nothing_here/*.nc")
    res = _check([cfg])
    assert res.exit_code == 1
    problems = [ln.strip() for ln in res.stdout.splitlines() if ln.startswith("  error")]
    assert problems == [
        f"error: {tmp_path}/chl/chl_20240301.nc: variable 'chl': unknown unit 'zorks m-3' "
        "(expected units like 'mg m-3')",
        f"error: {tmp_path}/nothing_here/*.nc: sst input matches no file",
    ]
    assert "Problems: 2 error(s), 0 warning(s)" in res.stdout
    assert res.stdout.rstrip().endswith("The run would fail.")
    assert not (tmp_path / "out").exists()  # a check writes nothing
    # the par input, which is fine, is still described
    assert "  periods:     5, 1 day(s) long, 2024-03-01..2024-03-05" in res.stdout
    assert ("  regridding:  not checked (the chlorophyll input, whose grid is the target, did "
            "not open)") in res.stdout.splitlines()
    # `run` makes the same checks first and stops at the first (chl) with its error class
    with no_compute, pytest.raises(InputFileError, match="unknown unit 'zorks m-3'"):
        prepare(load_config(cfg))


def test_missing_day_is_a_gap(tmp_path, no_compute):
    _daily(tmp_path, "chl", [d for d in MARCH if d != "2024-03-03"])
    _daily(tmp_path, "par", MARCH)
    _daily(tmp_path, "sst", MARCH)
    cfg = _config(tmp_path)
    res = _check([cfg])
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert "  gaps:        2024-03-03" in lines
    assert f"  warning: {cfg} [inputs.chl]: 1 day(s) with no file inside "\
           "2024-03-01..2024-03-05: 2024-03-03" in lines
    # March 2024 has 31 days; chl covers 4 of them, the others 5; together 4
    assert "  2024-03  4/31  4/31  5/31  5/31  partial" in lines
    with no_compute:
        rep = preflight.check(load_config(cfg))
    assert rep.inputs[0].gaps == [(D("2024-03-03"), D("2024-03-03"))]
    assert rep.ok


def test_duplicates_and_overlaps_are_reported(tmp_path):
    _daily(tmp_path, "chl", MARCH)
    _daily(tmp_path, "sst", MARCH)
    _daily(tmp_path, "par", MARCH)
    lat, lon = grid(0.0, 4.0, 0.0, 4.0, 0.5)
    # the same day a second time, with other values (a reprocessed file beside the old one)
    write_field(tmp_path / "par" / "again_20240302.nc", "par", PAR_STD, "einstein m-2 day-1",
                np.full((len(lat), len(lon)), 35.0), lat, lon, start="2024-03-02",
                end="2024-03-02")
    # an 8-day composite 2024-03-01..03-08 (bounds end at midnight of 03-09: exclusive)
    write_field(tmp_path / "par" / "par_8day.nc", "par", PAR_STD, "einstein m-2 day-1",
                np.full((len(lat), len(lon)), 30.0), lat, lon,
                time_bounds=("2024-03-01", "2024-03-09"))
    cfg = _config(tmp_path)
    res = _check([cfg])
    assert res.exit_code == 1, res.output  # duplicates are an error unless a rule is chosen
    lines = res.stdout.splitlines()
    again, first = tmp_path / "par" / "again_20240302.nc", tmp_path / "par" / "par_20240302.nc"
    assert (f"  error: {again}: par period 2024-03-02 is given 2 times, by {again}, {first}; keep "
            'one file per period or set duplicates = "first" or "last" in [inputs.par]') in lines
    assert "The run would fail." in lines

    # with a rule the run goes ahead: the periods, duplicates and overlaps are listed
    cfg.write_text(cfg.read_text().replace('[inputs.par]\n', '[inputs.par]\nduplicates = "last"\n'))
    res = _check([cfg])
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert "  periods:     6, 1, 8 day(s) long, 2024-03-01..2024-03-08" in lines
    # the composite shares days with each of the five daily periods
    assert (f"  warning: {cfg} [inputs.par]: 5 pair(s) of periods share days: "
            "2024-03-01 and 2024-03-01..2024-03-08; 2024-03-01..2024-03-08 and 2024-03-02; "
            "2024-03-01..2024-03-08 and 2024-03-03; 2024-03-01..2024-03-08 and 2024-03-04; "
            "2024-03-01..2024-03-08 and 2024-03-05; on shared days the shortest period is used"
            ) in lines
    assert (f'euphotic: warning: par 2024-03-02: 2 files for one period; used {first} '
            f'(duplicates = "last"), ignored {again}') in res.stderr.splitlines()
    assert "The run would start." in lines


def test_region_outside_the_grid_and_region_on_land(tmp_path):
    for role in ("chl", "par", "sst"):
        _daily(tmp_path, role, MARCH)
    lat, lon = grid(0.0, 4.0, 0.0, 4.0, 0.5)
    land = np.zeros((len(lat), len(lon)))
    land[:, lon < 1.0] = 1.0  # the two westernmost columns are land
    write_grid(tmp_path / "land.nc", land, lat, lon, name="land")
    cfg = _config(
        tmp_path, ocean='land_mask = "land.nc"\nvariable = "land"',
        regions='[[regions]]\nname = "Far Reach"\nbox = [100.0, -10.0, 110.0, 0.0]\n'
                '[[regions]]\nname = "Dry Strip"\nbox = [0.0, 0.0, 1.0, 4.0]\n',
    )
    res = _check([cfg])
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert "Regions (3)" in lines
    # 8 x 8 cells of 0.5 degree; the strip: 2 columns x 8 rows, all land
    assert "  Box        64 cells, 48 ocean" in lines
    assert "  Far Reach  0 cells, 0 ocean" in lines
    assert "  Dry Strip  16 cells, 0 ocean" in lines
    assert (f"  warning: {cfg}: region 'Far Reach' contains no cell centre of the grid (8 x 8 "
            "cells, lat 0.25..3.75 step 0.5, lon 0.25..3.75 step 0.5); its totals will be empty"
            ) in lines
    assert (f"  warning: {cfg}: region 'Dry Strip' has 16 cells on the grid but no ocean cell; "
            "its totals will be empty") in lines
    assert "Problems: 0 error(s), 2 warning(s)" in lines


def test_no_common_day_fails_the_check(tmp_path):
    _daily(tmp_path, "chl", MARCH)
    _daily(tmp_path, "par", MARCH)
    _daily(tmp_path, "sst", ["2023-06-01"])
    res = _check([_config(tmp_path)])
    assert res.exit_code == 1
    errors = [ln.strip() for ln in res.stdout.splitlines() if ln.startswith("  error")]
    assert errors == [
        f"error: no day is covered by all inputs: chl 2024-03-01..2024-03-05 "
        f"({tmp_path}/chl/chl_20240301.nc), par 2024-03-01..2024-03-05 "
        f"({tmp_path}/par/par_20240301.nc), sst 2023-06-01..2023-06-01 "
        f"({tmp_path}/sst/sst_20230601.nc)"
    ]
    assert "  2024-03  0/31  5/31  5/31  0/31  skipped" in res.stdout.splitlines()


def test_regrid_problem_is_reported_with_the_others(tmp_path):
    _daily(tmp_path, "chl", MARCH)
    _daily(tmp_path, "par", MARCH, units="W m-2")
    _daily(tmp_path, "sst", MARCH, res=0.3)
    res = _check([_config(tmp_path)])
    assert res.exit_code == 1
    # W m-2 -> mol m-2 d-1: 4.57e-6 mol/J (McCree 1972) x 86,400 s/d = 0.394848
    assert ("  units:       W m-2 in the file; conversion: W m-2 -> mol m-2 d-1 (x 0.394848: "
            "4.57 umol J-1 for daylight PAR, McCree 1972, and 86400 s d-1)"
            ) in res.stdout.splitlines()
    errors = [ln.strip() for ln in res.stdout.splitlines() if ln.startswith("  error")]
    assert len(errors) == 1 and errors[0].startswith(f"error: {tmp_path}/sst/sst_20240301.nc: ")
    assert "non-whole ratio" in errors[0]
    assert "  regridding:  not possible (see the problems below)" in res.stdout.splitlines()


def test_config_error_is_one_line(tmp_path):
    path = tmp_path / "run.toml"
    path.write_text('[run]\nfigures = "false"\n[inputs.chl]\nfiles = "c"\n[inputs.par]\n'
                    'files = "p"\n[inputs.sst]\nfiles = "s"\n')
    res = _check([path])
    assert res.exit_code == 1
    assert res.stdout == ""
    assert res.stderr == (f"euphotic: error: {path} [run]: `figures` must be true or false "
                          '(a TOML boolean, without quotes), not "false"\n')
    res = _check([tmp_path / "missing.toml"])
    assert res.exit_code == 1
    assert res.stderr.startswith(f"euphotic: error: {tmp_path / 'missing.toml'}: cannot read")


def test_check_has_help():
    res = CliRunner().invoke(main, ["check", "--help"])
    assert res.exit_code == 0 and "Usage: main check [OPTIONS] CONFIG" in res.output


# ---- the pure period functions (hand-worked cases) ----------------------------------------


def test_find_gaps():
    starts = np.array(["2024-03-01", "2024-03-02", "2024-03-06", "2024-03-12"], "datetime64[D]")
    ends = starts + np.array([1, 1, 4, 1])  # 03-01, 03-02, 03-06..03-09, 03-12
    assert preflight.find_gaps(starts, ends) == [
        (D("2024-03-03"), D("2024-03-05")), (D("2024-03-10"), D("2024-03-11"))
    ]
    assert preflight.day_ranges(preflight.find_gaps(starts, ends)) == (
        "2024-03-03..2024-03-05, 2024-03-10..2024-03-11")
    assert preflight.find_gaps(starts[:2], ends[:2]) == []
    assert preflight.find_gaps(starts[:0], ends[:0]) == []


def test_find_duplicates_and_overlaps():
    starts = np.array(["2024-03-01", "2024-03-01", "2024-03-05", "2024-03-08"], "datetime64[D]")
    ends = np.array(["2024-03-02", "2024-03-02", "2024-03-09", "2024-03-10"], "datetime64[D]")
    assert preflight.find_duplicates(starts, ends) == [(D("2024-03-01"), D("2024-03-01"), 2)]
    # 03-05..03-08 and 03-08..03-09 share 03-08; the duplicate is not an overlap
    assert preflight.find_overlaps(starts, ends) == [
        ((D("2024-03-05"), D("2024-03-08")), (D("2024-03-08"), D("2024-03-09")))
    ]
    # touching periods (end exclusive) do not overlap
    assert preflight.find_overlaps(starts[2:3], ends[2:3]) == []


def test_output_dir_that_is_a_file_and_duplicate_models(tmp_path):
    for role in ("chl", "par", "sst"):
        _daily(tmp_path, role, MARCH)
    (tmp_path / "out").write_text("not a folder")
    cfg = _config(tmp_path)
    cfg.write_text(cfg.read_text().replace("[run]\n", '[run]\nmodels = ["vgpm", "vgpm"]\n'))
    res = _check([cfg])
    assert res.exit_code == 1
    lines = res.stdout.splitlines()
    assert f'  warning: {cfg} [run]: models: "vgpm" listed twice; running it once' in lines
    assert f"  error: {cfg} [run]: `output_dir` '{tmp_path / 'out'}' is a file, not a folder" in lines
    assert "Problems: 1 error(s), 1 warning(s)" in lines
    assert (tmp_path / "out").read_text() == "not a folder"


def test_day_length_input_in_the_month_table(tmp_path):
    for role in ("chl", "par", "sst"):
        _daily(tmp_path, role, MARCH)
    lat, lon = grid(0.0, 4.0, 0.0, 4.0, 0.5)
    for d in MARCH[:3]:  # day length for 03-01..03-03 only
        write_field(tmp_path / "dl" / f"dl_{d}.nc", "dl", "day_length", "h",
                    np.full((len(lat), len(lon)), 12.0), lat, lon, start=d, end=d)
    cfg = _config(tmp_path)
    cfg.write_text(cfg.read_text().replace("[ocean]", '[inputs.day_length]\nfiles = "dl/*.nc"\n'
                                                      "[ocean]"))
    res = _check([cfg])
    assert res.exit_code == 0, res.output
    lines = res.stdout.splitlines()
    assert "  month    all   chl   par   sst   day_length" in lines
    assert "  2024-03  5/31  5/31  5/31  5/31  3/31        partial" in lines
    assert (f"  warning: {cfg} [inputs.day_length]: 2 day(s) of 2024-03 with chl, par and sst "
            "have no day length: no estimate on those days") in lines
    assert "  units:       h in the file; conversion: none" in lines


def test_estimate_says_when_months_are_computed_together(demo_config):
    """The memory estimate is for one month per graph; a config with more says so."""
    text = demo_config.read_text().replace('earth = "wgs84"', 'earth = "wgs84"\nmonths_per_compute = 12')
    yearly = demo_config.with_name("demo_yearly.toml")  # beside it: same relative paths
    yearly.write_text(text)
    rep = preflight.check(load_config(yearly))
    assert ("  (for one month per computed graph; this run computes 12 months per graph and keeps "
            "more alive: a year at 1/24 degree in one graph peaked at twice the month-by-month "
            "figure)") in rep.text().splitlines()
