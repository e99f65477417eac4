"""Trustworthy runs: outputs committed as one unit, one run per folder, recovery after a kill,
reuse of unchanged months, clear messages when outputs cannot be written.

These tests check the tool's own guarantees (no published value is involved): what is in the
output folder after a failure, a kill or a concurrent run, compared byte for byte with an
uninterrupted run. Real processes are started and killed where the behaviour depends on it.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from euphotic import runfolder
from euphotic.cli import main
from euphotic.config import load_config
from euphotic.pipeline import run

from ._grids import grid, monthly_case, write_field
from .conftest import ROOT, folder_bytes, run_killed_mid_commit

N_MONTHS = 6


def _months_case(tmp: Path, n_months: int = N_MONTHS, chl_value=None) -> Path:
    """Monthly composites for ``n_months`` months of 2023 on a 10 x 10 degree box at 0.25
    degree; ocean from valid temperature; one box region (:func:`tests._grids.monthly_case`)."""
    return monthly_case(tmp, n_months, chl_value=chl_value)


def _cli(*args, cwd=None, env=None) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "euphotic.cli", *map(str, args)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=cwd,
        env={**os.environ, **(env or {})},
    )


def _ident(path: Path) -> tuple[int, int]:
    """Inode and modification time: a file rewritten gets a new pair (an inode number alone
    may be reused by the file system once the old file is gone)."""
    st = path.stat()
    return st.st_ino, st.st_mtime_ns


def _dead_pid() -> int:
    """The id of a process that has just ended."""
    p = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                       capture_output=True, text=True, check=True)
    return int(p.stdout)


def _data(path: Path) -> dict[str, bytes]:
    """The bytes of every data variable's values (attributes such as date_created differ
    between runs by design)."""
    with xr.open_dataset(path, decode_times=False) as ds:
        return {v: np.ascontiguousarray(ds[v].values).tobytes() for v in ds.data_vars}


def _debris(out: Path) -> list[str]:
    return sorted(p.name for p in out.iterdir()
                  if p.name.startswith(runfolder.STAGE_PREFIX) or ".part" in p.name
                  or p.name.startswith(".") and p.name != runfolder.LOCK_NAME)


def _consistent(out: Path) -> dict:
    """The manifest lists exactly the outputs in the folder, each as recorded."""
    man = json.loads((out / runfolder.MANIFEST_NAME).read_text())
    listed = set(man["outputs"])
    present = {p.name for p in out.iterdir() if not p.name.startswith(".")}
    assert present == listed | {runfolder.MANIFEST_NAME}
    for name, entry in man["outputs"].items():
        st = (out / name).stat()
        assert st.st_size == entry["bytes"] and st.st_mtime_ns == entry["mtime_ns"], name
    return man


# --------------------------------------------------------------------------------------------
# committing as one unit
# --------------------------------------------------------------------------------------------


def test_failed_figure_step_leaves_previous_outputs(tmp_path, monkeypatch):
    """Broken before: the maps and CSV of a run whose figure step failed were already in place
    over the previous good ones."""
    cfg = load_config(_months_case(tmp_path, 2))
    cfg.figures = True
    run(cfg, progress=False)
    out = tmp_path / "out"
    before = folder_bytes(out)
    from euphotic import figures

    def fail(*a, **k):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(figures, "totals_figure", fail)
    with pytest.raises(runfolder.OutputWriteError, match="no space left on the device"):
        run(cfg, progress=False, force=True)
    assert folder_bytes(out) == before
    assert _debris(out) == []


def test_png_name_in_the_way_fails_before_any_rename(tmp_path):
    """A folder where a new PNG must go: the run fails before the first rename, so the
    previous outputs stay complete (one line naming the path)."""
    cfg = load_config(_months_case(tmp_path, 2))
    run(cfg, progress=False)
    out = tmp_path / "out"
    (out / "npp_vgpm_2023-02.png").mkdir()
    before = folder_bytes(out)
    cfg.figures = True
    with pytest.raises(runfolder.OutputWriteError,
                       match=r"npp_vgpm_2023-02.png: cannot put the new output in place: a folder"):
        run(cfg, progress=False, force=True)
    assert folder_bytes(out) == before
    assert [p.name for p in out.iterdir() if p.name.startswith(runfolder.STAGE_PREFIX)] == []


def test_figures_are_drawn_in_the_stage_not_in_place(tmp_path, monkeypatch):
    """Broken before: PNGs were written in place, so a kill while writing one left a truncated
    image where a good one had been."""
    cfg = load_config(_months_case(tmp_path, 1))
    cfg.figures = True
    from euphotic import figures

    seen = []
    real = figures.map_figure

    def spy(nc, png, masks=None):
        seen.append(Path(png).parent.name)
        return real(nc, png, masks)

    monkeypatch.setattr(figures, "map_figure", spy)
    run(cfg, progress=False)
    assert seen and all(s.startswith(runfolder.STAGE_PREFIX) for s in seen)


def test_interrupted_commit_is_completed_by_the_next_run(tmp_path, monkeypatch):
    """Broken before: a kill between two renames left new and old maps side by side with the
    old CSV. Now the commit plan is written first and the next run completes it."""
    cfg = load_config(_months_case(tmp_path, 3))
    run(cfg, progress=False)
    out = tmp_path / "out"
    # new inputs for every month (a reprocessed data set): the next run replaces everything
    cfg2 = load_config(_months_case(tmp_path, 3, chl_value=0.5))
    run_killed_mid_commit(monkeypatch, out, cfg2)
    stages = [p for p in out.iterdir() if p.name.startswith(runfolder.STAGE_PREFIX)]
    assert len(stages) == 1 and (stages[0] / runfolder.COMMIT_NAME).exists()

    res = CliRunner().invoke(main, ["run", str(tmp_path / "run.toml")])
    assert res.exit_code == 0, res.output
    assert "completed the interrupted commit of an earlier run" in res.output
    assert "reused 3 unchanged month map(s)" in res.output  # the completed commit's maps
    man = _consistent(out)
    assert _debris(out) == []
    with xr.open_dataset(out / "npp_vgpm_2023-01.nc") as ds:
        assert ds.attrs["input_files_chl"]  # a complete file of the new run
    # every map is the new run's (chl 0.5 everywhere): none of the old maps is left
    ref = tmp_path / "ref"
    cfg2.output_dir = ref
    run(cfg2, progress=False)
    for name in man["outputs"]:
        if name.endswith(".nc"):
            assert _data(out / name) == _data(ref / name)


# --------------------------------------------------------------------------------------------
# one run per folder
# --------------------------------------------------------------------------------------------


@pytest.mark.slow
def test_second_run_into_the_same_folder_refuses(tmp_path):
    """Broken before: two runs into one folder both succeeded and mixed their outputs."""
    out = tmp_path / "demo_out"
    cfg = ROOT / "configs" / "demo.toml"
    first = _cli("run", cfg, "-o", out, "-q")
    lock = out / runfolder.LOCK_NAME
    deadline = time.time() + 60
    while time.time() < deadline:
        try:
            info = json.loads(lock.read_text())
            if info.get("pid") == first.pid and info.get("state") == "running":
                break
        except (OSError, ValueError):
            pass
        time.sleep(0.02)
    else:
        pytest.fail("the first run never took the lock")
    second = _cli("run", cfg, "-o", out, "-q")
    _, err = second.communicate(timeout=120)
    assert second.returncode == 3
    assert err.strip().splitlines()[-1].startswith(
        f"euphotic: error: {out}: another euphotic run (pid {first.pid} on ")
    assert "is writing to this folder" in err
    _, err1 = first.communicate(timeout=300)
    assert first.returncode == 0, err1
    man = _consistent(out)
    assert man["command"].endswith(f"-o {out} -q")
    assert _debris(out) == []


def test_stale_lock_of_a_dead_process_is_taken_over(tmp_path):
    cfg_path = _months_case(tmp_path, 1)
    out = tmp_path / "out"
    out.mkdir()
    pid = _dead_pid()
    (out / runfolder.LOCK_NAME).write_text(json.dumps(
        {"tool": "euphotic", "pid": pid, "host": "h", "started": "2026-01-01T00:00:00Z",
         "state": "running"}))
    res = CliRunner().invoke(main, ["run", str(cfg_path), "-q"])
    assert res.exit_code == 0, res.output
    assert (f"euphotic: warning: {out}: taking over the lock of a run that is no longer running "
            f"(pid {pid} on h, started 2026-01-01T00:00:00Z)") in res.stderr


# --------------------------------------------------------------------------------------------
# debris, kills and resume
# --------------------------------------------------------------------------------------------


def test_debris_of_killed_runs_is_cleaned_and_nothing_else(tmp_path):
    """Broken before: `.part` files of killed runs stayed for ever."""
    cfg_path = _months_case(tmp_path, 1)
    out = tmp_path / "out"
    out.mkdir()
    pid = _dead_pid()
    (out / f".npp_vgpm_2023-01.nc.part-{pid}").write_bytes(b"half a file")
    stale = out / f"{runfolder.STAGE_PREFIX}20260101T000000Z-{pid}"
    stale.mkdir()
    (stale / "npp_vgpm_2023-01.nc").write_bytes(b"unrecorded")
    mine = {"notes.txt": b"mine", ".hidden.part-x": b"not ours", "old.part-123": b"x"}
    for k, v in mine.items():
        (out / k).write_bytes(v)
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert res.exit_code == 0, res.output
    assert f"removed .npp_vgpm_2023-01.nc.part-{pid}, left by a killed run" in res.output
    assert "removed the staging folder(s) of 1 interrupted run(s)" in res.output
    assert not stale.exists()
    assert not (out / f".npp_vgpm_2023-01.nc.part-{pid}").exists()
    for k, v in mine.items():
        assert (out / k).read_bytes() == v


def test_rerun_reuses_unchanged_months_and_force_recomputes(tmp_path):
    cfg_path = _months_case(tmp_path, 3)
    out = tmp_path / "out"
    assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
    ino = {p.name: _ident(p) for p in out.glob("*.nc")}
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert "reused 3 unchanged month map(s)" in res.output
    assert {p.name: _ident(p) for p in out.glob("*.nc")} == ino  # not rewritten
    # one input file of February changes: February alone is recomputed
    feb = tmp_path / "sst" / "s01.nc"
    os.utime(feb, ns=(feb.stat().st_atime_ns, feb.stat().st_mtime_ns + 10**9))
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert "reused 2 unchanged month map(s)" in res.output
    assert f"wrote {out / 'npp_vgpm_2023-02.nc'}" in res.output
    assert _ident(out / "npp_vgpm_2023-02.nc") != ino["npp_vgpm_2023-02.nc"]
    assert _ident(out / "npp_vgpm_2023-01.nc") == ino["npp_vgpm_2023-01.nc"]
    res = CliRunner().invoke(main, ["run", str(cfg_path), "--force"])
    assert "reused" not in res.output
    assert all(_ident(out / n) != i for n, i in ino.items())
    _consistent(out)


def test_an_input_for_another_model_leaves_these_maps_reused(tmp_path):
    # Each map's fingerprint covers its own model's inputs: configuring an input the VGPM does
    # not read (a mixed-layer depth, for a model that needs one) reuses the VGPM maps; changing
    # an input it reads recomputes them.
    cfg_path = _months_case(tmp_path, 2)
    out = tmp_path / "out"
    assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
    ino = {p.name: _ident(p) for p in out.glob("npp_*.nc")}
    lat, lon = grid(40.0, 50.0, -30.0, -20.0, 0.25)
    for m in range(2):
        a = np.datetime64("2023-01") + m
        write_field(tmp_path / "mld" / f"m{m:02d}.nc", "mld", "ocean_mixed_layer_thickness", "m",
                    np.full((len(lat), len(lon)), 30.0), lat, lon,
                    time_bounds=(str(a.astype("datetime64[D]")),
                                 str((a + 1).astype("datetime64[D]"))))
    text = cfg_path.read_text()
    cfg_path.write_text(text.replace("[ocean]", '[inputs.mld]\nfiles = "mld/*.nc"\n\n[ocean]'))
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert res.exit_code == 0, res.output
    assert "reused 2 unchanged month map(s)" in res.output
    assert {p.name: _ident(p) for p in out.glob("npp_*.nc")} == ino
    sst = tmp_path / "sst" / "s00.nc"
    os.utime(sst, ns=(sst.stat().st_atime_ns, sst.stat().st_mtime_ns + 10**9))
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert "reused 1 unchanged month map(s)" in res.output
    assert _ident(out / "npp_vgpm_2023-01.nc") != ino["npp_vgpm_2023-01.nc"]


def test_changed_config_recomputes(tmp_path):
    cfg_path = _months_case(tmp_path, 2)
    assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
    cfg_path.write_text(cfg_path.read_text().replace('earth', 'earth').replace(
        "[run]\n", '[run]\nearth = "wgs84"\n'))
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert res.exit_code == 0, res.output
    assert "reused" not in res.output


@pytest.mark.slow
@pytest.mark.parametrize("kill_at", ["stage", 1, 3])
def test_kill_and_rerun_gives_identical_data(tmp_path, kill_at):
    """kill -9 a six-month run when its stage appears (nothing finished yet), or once 1 or 3
    months are finished; the rerun completes, reuses what was finished, leaves no debris, and
    its data variables are byte-identical to an uninterrupted run."""
    cfg_path = _months_case(tmp_path)
    ref = tmp_path / "ref"
    r = _cli("run", cfg_path, "-o", ref, "-q")
    assert r.wait(timeout=300) == 0, r.stderr.read()

    out = tmp_path / "out"
    p = _cli("run", cfg_path, "-q")
    deadline = time.time() + 120
    killed = False
    while time.time() < deadline and p.poll() is None:
        stages = list(out.glob(runfolder.STAGE_PREFIX + "*")) if out.exists() else []
        if stages:
            if kill_at == "stage":
                p.send_signal(signal.SIGKILL)
                killed = True
                break
            try:
                n = len(json.loads((stages[0] / runfolder.STAGE_INDEX).read_text())["items"])
            except (OSError, ValueError, KeyError):
                n = 0
            if n >= kill_at:
                p.send_signal(signal.SIGKILL)
                killed = True
                break
        time.sleep(0.005)
    p.wait(timeout=60)
    if not killed:
        pytest.skip("the run finished before the kill point could be reached")
    assert p.returncode == -signal.SIGKILL
    assert list(out.glob(runfolder.STAGE_PREFIX + "*"))  # what a kill leaves behind

    again = _cli("run", cfg_path)
    stdout, err = again.communicate(timeout=300)
    assert again.returncode == 0, err
    if kill_at != "stage":
        assert f"reused {kill_at}" in stdout or "reused" in stdout
    assert "removed the staging folder(s) of 1 interrupted run(s)" in stdout
    assert _debris(out) == []
    man = _consistent(out)
    maps = sorted(n for n, e in man["outputs"].items() if e["kind"] == "map")
    assert len(maps) == N_MONTHS
    for name in maps:
        assert _data(out / name) == _data(ref / name), name
    assert (out / "regional_totals.csv").read_text() == (ref / "regional_totals.csv").read_text()


# --------------------------------------------------------------------------------------------
# empty results and messages
# --------------------------------------------------------------------------------------------


def test_all_chlorophyll_missing_is_an_error_not_zero(tmp_path):
    """Broken before: every chlorophyll value missing gave total_TgC = 0 and exit 0."""
    cfg_path = _months_case(tmp_path, 1)
    out = tmp_path / "out"
    assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
    before = folder_bytes(out)
    _months_case(tmp_path, 1, chl_value=np.nan)
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert res.exit_code == 1
    assert res.stderr.strip().splitlines()[-1] == (
        f"euphotic: error: {cfg_path}: no valid estimate in any month: every chlorophyll value, "
        "or every value of another input on the ocean, is missing or masked (see the warnings "
        "above); nothing was written")
    assert "vgpm 2023-01: no valid estimate anywhere on the grid" in res.stderr
    assert folder_bytes(out) == before


def test_quiet_still_shows_warnings(tmp_path):
    """Broken before: -q hid warnings (a skipped month), though documented as hiding the
    progress bar only."""
    cfg_path = _months_case(tmp_path, 2)
    (tmp_path / "par" / "p01.nc").unlink()  # February has no PAR: skipped
    res = CliRunner().invoke(main, ["run", str(cfg_path), "-q"])
    assert res.exit_code == 0, res.output
    assert ("euphotic: warning: skipping 2023-02: no day of it is covered by all inputs "
            "(chl, par, sst)") in res.stderr
    assert "wrote" not in res.stdout


def test_full_disk_is_one_clear_line(tmp_path, monkeypatch):
    """Broken before: a full disk gave `unexpected RuntimeError: NetCDF: HDF error`. netCDF-C
    reports a failed write in exactly those words; the run turns it into one line."""
    cfg_path = _months_case(tmp_path, 1)
    from euphotic import pipeline

    def hdf_error(objs, **kw):
        raise RuntimeError("NetCDF: HDF error")

    monkeypatch.setattr(pipeline, "_compute", hdf_error)
    monkeypatch.setattr("shutil.disk_usage", lambda p: type("Usage", (), {"free": 1024})())
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert res.exit_code == 1
    assert res.stderr.strip() == (
        f"euphotic: error: {tmp_path / 'out'}: cannot write the monthly maps: no space left on "
        "the device (0.0 MiB free); earlier results in the folder are unchanged")


@pytest.mark.slow
def test_full_disk_on_a_real_small_file_system(tmp_path):
    """A real full disk: a 3 MiB tmpfs holds one good run; a second run with more months
    fills it. Needs root to mount (CI runs as root); skipped elsewhere."""
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root")
    mnt = tmp_path / "small"
    mnt.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=3m", "tmpfs", str(mnt)]).returncode:
        pytest.skip("cannot mount a tmpfs here")
    try:
        cfg_path = _months_case(tmp_path, 6)
        text = cfg_path.read_text().replace('output_dir = "out"', f'output_dir = "{mnt / "out"}"')
        cfg_path.write_text(text.replace("[run]\n", '[run]\nend = "2023-01-31"\n'))
        assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
        before = folder_bytes(mnt / "out")
        (mnt / "ballast").write_bytes(b"\0" * (3 * 2**20 - sum(map(len, before.values()))
                                               - 200_000))
        cfg_path.write_text(text.replace("figures = false", "figures = true"))
        res = CliRunner().invoke(main, ["run", str(cfg_path)])
        assert res.exit_code == 1, res.output
        line = res.stderr.strip().splitlines()[-1]
        assert line.startswith(f"euphotic: error: {mnt / 'out'}: cannot write ")
        assert "no space left on the device" in line
        assert line.endswith("earlier results in the folder are unchanged")
        assert folder_bytes(mnt / "out") == before
        assert _debris(mnt / "out") == []
    finally:
        import gc

        gc.collect()  # close files xarray may still cache on the small file system
        subprocess.run(["umount", "-l", str(mnt)])


def test_figures_follow_their_maps(tmp_path):
    """A map figure is kept while its map is reused (also with --no-figures) and redrawn
    whenever the map is recomputed (--force)."""
    cfg_path = _months_case(tmp_path, 2)
    cfg_path.write_text(cfg_path.read_text().replace("figures = false", "figures = true"))
    out = tmp_path / "out"
    assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
    png = out / "npp_vgpm_2023-01.png"
    ino = _ident(png)
    assert CliRunner().invoke(main, ["run", str(cfg_path), "--no-figures"]).exit_code == 0
    assert _ident(png) == ino
    assert not (out / "regional_totals.png").exists()  # the chart follows the new table
    _consistent(out)
    assert CliRunner().invoke(main, ["run", str(cfg_path), "--force"]).exit_code == 0
    assert _ident(png) != ino
    _consistent(out)


def test_outputs_added_to_a_run_commit_as_one_unit(tmp_path):
    """Commands that add to a committed run (comparisons, figures) go through the same staging:
    the run's outputs stay, a new set of one kind replaces the old set, a failure changes
    nothing, and a folder without a run is refused without leaving a folder behind."""
    cfg = load_config(_months_case(tmp_path, 2))
    run(cfg, progress=False)
    out = tmp_path / "out"
    folder = runfolder.OutputFolder(out)
    with folder.adding("test add", replace_kinds=("comparison",)) as (stage, added):
        stage.file("a.csv").write_text("a\n")
        added["a.csv"] = {"kind": "comparison"}
    man = _consistent(out)
    assert man["outputs"]["a.csv"]["kind"] == "comparison"
    assert "npp_vgpm_2023-01.nc" in man["outputs"]
    assert man["added"][-1]["outputs"] == ["a.csv"]

    before = folder_bytes(out)
    with pytest.raises(RuntimeError, match="half way"), \
            folder.adding("test fail", replace_kinds=("comparison",)) as (stage, added):
        stage.file("b.csv").write_text("b\n")
        added["b.csv"] = {"kind": "comparison"}
        raise RuntimeError("half way")
    assert folder_bytes(out) == before and _debris(out) == []

    with folder.adding("test replace", replace_kinds=("comparison",)) as (stage, added):
        stage.file("b.csv").write_text("b\n")
        added["b.csv"] = {"kind": "comparison"}
    man = _consistent(out)
    assert "b.csv" in man["outputs"] and "a.csv" not in man["outputs"]
    assert not (out / "a.csv").exists()

    empty = tmp_path / "nothing_here"
    with pytest.raises(runfolder.NoRunError, match="no euphotic run in this folder"), \
            runfolder.OutputFolder(empty).adding("x"):
        pass
    assert not empty.exists()


def test_a_long_run_prints_its_last_month_and_points_at_the_table(tmp_path):
    cfg_path = _months_case(tmp_path, 6)
    res = CliRunner().invoke(main, ["run", str(cfg_path), "-q"])
    assert res.exit_code == 0, res.output
    assert (f"6 months; the last one below, all 6 rows in {tmp_path / 'out' / 'regional_totals.csv'}"
            in res.stdout)
    assert "2023-06" in res.stdout and "2023-05" not in res.stdout


def test_changed_regions_rewrite_regions_nc(tmp_path):
    """regions.nc follows the configured regions: an edited box is in the rewritten file
    (checked cell by cell on the cell centres with plain numpy)."""
    from euphotic.results import open_region_masks

    cfg_path = _months_case(tmp_path, 2)
    out = tmp_path / "out"
    assert CliRunner().invoke(main, ["run", str(cfg_path)]).exit_code == 0
    before = _ident(out / "regions.nc")
    cfg_path.write_text(cfg_path.read_text().replace("-30.0, 40.0, -20.0, 50.0",
                                                     "-25.0, 42.0, -20.0, 50.0"))
    res = CliRunner().invoke(main, ["run", str(cfg_path)])
    assert res.exit_code == 0, res.output
    assert _ident(out / "regions.nc") != before
    m = open_region_masks(out)
    lat, lon = m.lat, m.lon
    box = (lon[None, :] >= -25) & (lon[None, :] <= -20) & (lat[:, None] >= 42) & (lat[:, None] <= 50)
    np.testing.assert_array_equal(m["Box"], box)
