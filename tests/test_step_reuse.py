"""A second ``euphotic run`` reuses the steps after the run ([compare], [figure_set], ...)
whose inputs, tables and tool version are unchanged, and redoes those whose inputs changed.

What is checked against something outside the code under test: files left in place by their
inode and modification time from ``os.stat`` (POSIX stat); the folder against its manifest
(``_consistent``: sizes and modification times from ``os.stat``); the report's run id by
parsing the page with the standard library's ``html.parser``; the trends printed by a
reused [compare] step against the trends table read back with the standard library's ``csv``.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

import pytest
from click.testing import CliRunner

from euphotic import (
    compare_outputs,
    derived_outputs,
    figureset,
    matchup_outputs,
    methods,
    report,
    steps,
)
from euphotic.cli import main

from .test_runs import _consistent, _debris
from .test_steps import COMPARE, COMPARE_FILES, FIGURE_SET, REPORT, _case, _kinds, _parse


def _run(cfg: Path, *args: str):
    return CliRunner().invoke(main, ["run", str(cfg), *args])


def _ids(out: Path, names) -> dict[str, tuple[int, int]]:
    """(inode, mtime in ns) of each file, from os.stat."""
    return {n: (os.stat(out / n).st_ino, os.stat(out / n).st_mtime_ns) for n in names}


def _reused(output: str) -> set[str]:
    return {t for t in ("compare", "figure_set", "report")
            if f"reused the [{t}] step's " in output}


@pytest.fixture
def ran(tmp_path):
    cfg = _case(tmp_path, COMPARE + FIGURE_SET + REPORT)
    res = _run(cfg, "-q")
    assert res.exit_code == 0, res.output
    return cfg, tmp_path / "out"


def _files(out: Path, kind: str) -> set[str]:
    return _kinds(_consistent(out))[kind]


def test_step_kinds_are_the_step_modules_kinds():
    # the kinds each step module writes under (their KIND constants)
    assert steps.STEP_KINDS == {compare_outputs.KIND, derived_outputs.KIND, figureset.KIND,
                                matchup_outputs.KIND, methods.KIND, report.KIND}


def test_second_run_reuses_the_steps_and_redoes_the_report(ran):
    cfg, out = ran
    figs = _files(out, "figure set")
    before = _ids(out, COMPARE_FILES | figs)
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    assert f"reused the [compare] step's {len(COMPARE_FILES)} files, unchanged" in res.output
    assert f"reused the [figure_set] step's {len(figs)} files, unchanged" in res.output
    assert _ids(out, COMPARE_FILES | figs) == before  # left in place, not rewritten
    man = _consistent(out)
    assert _kinds(man)["comparison"] == COMPARE_FILES and _kinds(man)["figure set"] == figs
    assert set(man["steps"]) == {"compare", "figure_set", "report"}
    # the report prints the run id, which the new commit of the run changed: redone
    assert "report" not in _reused(res.output)
    assert man["run_id"] in " ".join(_parse(out / "report.html").text)
    assert _debris(out) == []
    # the reused [compare] step still prints its trends, as the table holds them
    with open(out / "compare_trends.csv", newline="") as fh:
        rows = [r for r in csv.DictReader(
            line for line in fh if not line.startswith("#")) if r["series"] == "annual totals"]
    assert rows
    assert "Trends of annual totals (Theil-Sen slope per year" in res.stdout
    for r in rows:
        assert f"{r['region']:<24} {r['model']:<12}" in res.stdout
    # a third run: still reused
    res = _run(cfg)
    assert {"compare", "figure_set"} <= _reused(res.output)


def test_editing_the_compare_table_redoes_compare_only(ran):
    cfg, out = ran
    figs = _files(out, "figure set")
    before = _ids(out, COMPARE_FILES | figs)
    cfg.write_text(cfg.read_text().replace(COMPARE, COMPARE + "min_coverage = 0.5\n"))
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    assert _reused(res.output) == {"figure_set"}
    now = _ids(out, COMPARE_FILES | figs)
    assert {n: now[n] for n in figs} == {n: before[n] for n in figs}
    assert all(now[n] != before[n] for n in COMPARE_FILES)
    man = _consistent(out)
    assert man["steps"]["compare"]["value"]["rule"][0] == 0.5


def test_a_changed_input_redoes_its_map_and_every_step(ran):
    cfg, out = ran
    figs = _files(out, "figure set")
    before = _ids(out, COMPARE_FILES | figs)
    chl = cfg.parent / "chl" / "c05.nc"
    st = chl.stat()
    os.utime(chl, ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))  # as `touch` does
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    assert "reused 23 unchanged month map(s)" in res.output
    assert _reused(res.output) == set()
    now = _ids(out, COMPARE_FILES | figs)
    assert all(now[n] != before[n] for n in now)
    _consistent(out)


def test_force_redoes_every_step(ran):
    cfg, out = ran
    res = _run(cfg, "--force")
    assert res.exit_code == 0, res.output
    assert _reused(res.output) == set()
    assert "reused 24 unchanged" not in res.output
    _consistent(out)


def test_a_failed_step_is_redone_by_the_next_run(ran, monkeypatch):
    cfg, out = ran
    before = _ids(out, COMPARE_FILES)
    cfg.write_text(cfg.read_text().replace(COMPARE, COMPARE + "min_coverage = 0.5\n"))

    def boom(*args, **kwargs):
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(compare_outputs, "write_comparisons", boom)
    res = _run(cfg, "-q")
    assert res.exit_code == 1
    assert "[compare]: the step failed: unexpected RuntimeError: disk on fire" in res.stderr
    assert _ids(out, COMPARE_FILES) == before  # the previous outputs stay
    man = _consistent(out)
    assert "compare" not in man["steps"]  # not recorded as done with the new table
    monkeypatch.undo()
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    assert "compare" not in _reused(res.output)
    man = _consistent(out)
    assert man["steps"]["compare"]["value"]["rule"][0] == 0.5
    assert all(_ids(out, COMPARE_FILES)[n] != before[n] for n in COMPARE_FILES)
