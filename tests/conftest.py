"""Shared fixtures: one no-early-compute guard, the NetCDF writers, the demo run once per
session, and the ``slow`` marker (cluster and benchmark tests; the default command runs them)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from dask.callbacks import Callback

ROOT = Path(__file__).resolve().parents[1]


class NoCompute(Callback):
    """A dask callback that fails the test if anything is computed while it is active (the
    pattern of xclim's ``assert_lazy``)."""

    def _start(self, dsk):  # noqa: D401
        raise AssertionError("computed early: dask started computing while the graph was built")


@pytest.fixture
def no_compute():
    """Use as ``with no_compute: ...`` around code that must only build a lazy graph."""
    return NoCompute()


def pytest_configure(config):
    config.addinivalue_line(
        "markers", "slow: cluster, benchmark and real-process tests (run by default; deselect "
        "with -m 'not slow')"
    )


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The bundled demo (configs/demo.toml on sample_grids/) run once per session through
    the command line, with figures, into a copy of the repository layout. Returns the output
    folder. Tests must not modify it."""
    from click.testing import CliRunner

    from euphotic.cli import main

    base = tmp_path_factory.mktemp("demo")
    shutil.copytree(ROOT / "configs", base / "configs")
    (base / "sample_grids").symlink_to(ROOT / "sample_grids")
    out = base / "demo_output"
    res = CliRunner().invoke(main, ["run", str(base / "configs" / "demo.toml"), "-q"])
    assert res.exit_code == 0, res.output
    assert "Caution: " in res.output  # the factor-of-two caution is printed with the totals
    return out


def folder_bytes(path: Path) -> dict[str, bytes]:
    """Every file under ``path`` (relative name -> bytes), except the run lock, whose text
    records the last holder. Used to check that a failed run left a folder unchanged."""
    return {
        str(p.relative_to(path)): p.read_bytes()
        for p in sorted(Path(path).rglob("*"))
        if p.is_file() and p.name != ".euphotic.lock"
    }


class Killed(BaseException):
    """Stands for a kill arriving between two renames of a commit."""


def run_killed_mid_commit(monkeypatch, out: Path, cfg, *, after: int = 1, **run_kw) -> None:
    """Run ``cfg`` into ``out`` and stop it like a kill after ``after`` renames of its commit
    (the rename after them raises :class:`Killed`); the commit plan stays for the next run."""
    import os

    from euphotic import runfolder
    from euphotic.pipeline import run

    real, calls = os.replace, []

    def replace_then_die(src, dst):
        if runfolder.STAGE_PREFIX in str(src) and Path(dst).parent == Path(out):
            calls.append(dst)
            if len(calls) == after + 1:
                raise Killed
        return real(src, dst)

    monkeypatch.setattr(runfolder.os, "replace", replace_then_die)
    try:
        with pytest.raises(Killed):
            run(cfg, progress=False, **run_kw)
    finally:
        monkeypatch.setattr(runfolder.os, "replace", real)
