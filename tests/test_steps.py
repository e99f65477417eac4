"""Steps after a run set in the config ([compare], [figure_set], [report]): `euphotic run` adds
the comparisons, the figure set, the methods text and the report to the committed run, each
step committed on its own under the run's lock; the report is rebuilt by every later commit.

What is checked against something outside the code under test: the folder's contents against
its manifest (``_consistent``: sizes and modification times from ``os.stat``); the report's
images by parsing the page with the standard library's ``html.parser`` and checking the PNG
signature (PNG specification, section 5.2); the totals' units with UDUNITS-2 itself (through
cf-units); defaults against the functions' signatures (``inspect``).
"""

from __future__ import annotations

import base64
import inspect
import json
import os
import shutil
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from click.testing import CliRunner

from euphotic import runfolder, steps
from euphotic.cli import main

from ._grids import monthly_case
from .conftest import ROOT, folder_bytes
from .test_report import PNG_SIGNATURE, _parse
from .test_runs import _consistent, _debris

#: Step tables of the small two-year case (2023-2024).
COMPARE = '[compare]\nbaseline = "2023"\ncompare_to = "2024"\n'
FIGURE_SET = '[figure_set]\nperiod = "2024"\nbaseline = "2023"\nwidth = "one-column"\n'
REPORT = "[report]\n"

#: The files each step adds (as euphotic.compare_outputs, euphotic.figureset and
#: euphotic.methods / euphotic.report name them).
COMPARE_FILES = {"compare_README.txt", "compare_annual_totals.csv", "compare_anomalies.csv",
                 "compare_difference_map.nc", "compare_seasonal_cycle.csv",
                 "compare_trend_map.nc", "compare_trends.csv"}
METHODS_FILES = {"methods.md", "methods.txt", "references.txt", "references.bib"}
#: Manifest kinds of a run's own outputs (maps, totals table and sidecar, regions.nc).
RUN_KINDS = {"map", "table", "table metadata", "regions"}


def _case(tmp: Path, tables: str, months: int = 24) -> Path:
    """``months`` monthly composites from 2023-01 (24: 2023-2024) on a 10 x 10 degree box at
    1/2 degree, one region, with the given step tables appended to the config."""
    cfg = monthly_case(tmp, months, res=0.5, run="months_per_compute = 0")
    cfg.write_text(cfg.read_text() + "\n" + tables)
    return cfg


def _run(cfg: Path, *args: str):
    return CliRunner().invoke(main, ["run", str(cfg), "-q", *args])


def _kinds(man: dict) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for name, e in man["outputs"].items():
        out.setdefault(e["kind"], set()).add(name)
    return out


def _report_images(path: Path) -> list[bytes]:
    """The images the page embeds, decoded (each must be a data: URI)."""
    out = []
    for src in _parse(path).imgs:
        head, _, data = src.partition(",")
        assert head == "data:image/png;base64", src[:40]
        out.append(base64.b64decode(data))
    return out


@pytest.fixture(scope="module")
def with_steps(tmp_path_factory):
    """A run of the two-year case with all three steps, through the command line."""
    tmp = tmp_path_factory.mktemp("steps")
    cfg = _case(tmp, COMPARE + FIGURE_SET + REPORT)
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    return cfg, tmp / "out", res


@pytest.fixture
def copy(with_steps, tmp_path):
    """A private copy of that run beside its inputs (tests run again into it; the copy's
    configuration is in another folder, so a run recomputes its maps)."""
    cfg, out, _ = with_steps
    for name in ("chl", "par", "sst"):
        (tmp_path / name).symlink_to(cfg.parent / name)
    shutil.copy(cfg, tmp_path / "run.toml")
    shutil.copytree(out, tmp_path / "out")
    return tmp_path / "run.toml", tmp_path / "out"


# --------------------------------------------------------------------------------------------
# the steps of a run


def test_run_adds_every_step_in_order_each_committed(with_steps):
    cfg, out, res = with_steps
    man = _consistent(out)
    kinds = _kinds(man)
    assert kinds["comparison"] == COMPARE_FILES
    assert kinds["methods"] == METHODS_FILES
    assert kinds["report"] == {"report.html"}
    figs = kinds["figure set"]
    assert {n for n in figs if n.endswith(".png")} == {
        "fig_annual_totals.png", "fig_npp_difference.png", "fig_npp_maps.png",
        "fig_seasonal_cycle.png", "fig_npp_baseline_period_change.png", "fig_npp_ratio.png",
        "fig_totals_coverage.png", "fig_monthly_totals.png"}
    assert all(f"{n[:-4]}.{ext}" in figs for n in figs if n.endswith(".png")
               for ext in ("pdf", "caption.md", "caption.txt"))
    assert len(man["outputs"]) == 24 + 3 + len(COMPARE_FILES) + len(figs) + 4 + 1
    assert _debris(out) == []
    # one commit per command of a step, in the order of euphotic.steps.STEPS, each recorded
    # with the run's command and the step's table
    command = man["command"]
    assert [(h["command"], len(h["outputs"])) for h in man["added"]] == [
        (f"{command} [compare]", len(COMPARE_FILES)),
        (f"{command} [figure_set]", len(figs)),
        (f"{command} [report]", 5),  # the methods files and the page, in one commit
    ]
    # the report embeds the figure set (not the quick-look figures) and the comparisons
    images = _report_images(out / "report.html")
    assert len(images) == 8 and all(i.startswith(PNG_SIGNATURE) for i in images)
    assert sorted(images) == sorted((out / n).read_bytes() for n in figs if n.endswith(".png"))
    text = " ".join(_parse(out / "report.html").text)
    assert "compare_trends.csv" in text and "Behrenfeld and Falkowski (1997)" in text
    # the trends are printed as by `euphotic compare`, before the caution
    assert res.stdout.index("Trends of annual totals (Theil-Sen slope per year, Mann-Kendall "
                            "p; baseline 2023-2023):") < res.stdout.index("Caution: ")


def test_no_steps_stops_after_the_run(tmp_path):
    cfg = _case(tmp_path, COMPARE + REPORT, months=2)
    res = _run(cfg, "--no-steps")
    assert res.exit_code == 0, res.output
    man = _consistent(tmp_path / "out")
    assert set(_kinds(man)) == RUN_KINDS and "added" not in man
    assert "Trends of annual totals" not in res.stdout


def test_rerun_with_the_steps_keeps_their_outputs_and_reuses_the_maps(tmp_path):
    cfg = _case(tmp_path, COMPARE + REPORT)
    out = tmp_path / "out"
    assert _run(cfg).exit_code == 0
    maps_before = {n: (out / n).stat().st_mtime_ns for n in os.listdir(out) if n.startswith("npp_")}
    res = CliRunner().invoke(main, ["run", str(cfg)])
    assert res.exit_code == 0, res.output
    assert "reused 24 unchanged month map(s)" in res.stdout
    assert {n: (out / n).stat().st_mtime_ns for n in maps_before} == maps_before
    man = _consistent(out)
    kinds = _kinds(man)
    assert kinds["comparison"] == COMPARE_FILES and kinds["methods"] == METHODS_FILES
    assert kinds["report"] == {"report.html"}
    # [compare] is reused unchanged; [report], which prints the run's id and time, is redone
    # (its methods text and its page, in one commit)
    assert [h["command"].rsplit(" ", 1)[-1] for h in man["added"]] == ["[report]"]
    assert len(man["added"][0]["outputs"]) == 5
    assert _debris(out) == []


def test_removing_a_step_table_removes_its_outputs(copy):
    cfg, out = copy
    cfg.write_text(cfg.read_text().replace(FIGURE_SET, ""))
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    man = _consistent(out)
    assert "figure set" not in _kinds(man)
    assert not list(out.glob("fig_*"))
    assert _kinds(man)["comparison"] == COMPARE_FILES
    # the report describes what the folder holds: no figure set any more (and this case was
    # run without quick-look figures)
    assert _report_images(out / "report.html") == []
    assert "No figures" in " ".join(_parse(out / "report.html").text)

    cfg.write_text(cfg.read_text().replace(COMPARE, "").replace(REPORT, ""))
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    man = _consistent(out)
    assert set(_kinds(man)) == RUN_KINDS
    assert sorted(p.name for p in out.iterdir() if not p.name.startswith(".")) == sorted(
        [*man["outputs"], runfolder.MANIFEST_NAME])


# --------------------------------------------------------------------------------------------
# faults


@pytest.mark.parametrize(("tables", "problem"), [
    ('[compare]\nbaselin = "2023"\n',
     "[compare]: unknown key(s) baselin; allowed: baseline, compare_to, low_coverage, maps, min_coverage, totals"),
    ('[compare]\nbaseline = "2024-2023"\n',
     '[compare]: `baseline` must be years as "FIRST-LAST" (e.g. "2015-2019") or one year '
     '(2020), not "2024-2023"'),
    ('[figure_set]\nwidth = "three-column"\n',
     '[figure_set]: `width` must be "one-column" or "two-column", not "three-column"'),
    ("[report]\nmethods = \"yes\"\n",
     '[report]: `methods` must be true or false (a TOML boolean, without quotes), not "yes"'),
    ("compare = 2\n", "`compare` must be a table ([compare]), not 2"),
])
def test_bad_step_key_fails_before_any_compute(tmp_path, tables, problem):
    cfg = monthly_case(tmp_path, 2)
    text = cfg.read_text()
    cfg.write_text(tables + text if not tables.startswith("[") else text + "\n" + tables)
    res = _run(cfg)
    assert res.exit_code == 1
    sep = " " if problem.startswith("[") else ": "
    assert res.stderr == f"euphotic: error: {cfg}{sep}{problem}\n"
    assert not (tmp_path / "out").exists()  # nothing computed, nothing written
    check = CliRunner().invoke(main, ["check", str(cfg)])  # `euphotic check` lists it too
    assert check.exit_code == 1 and check.stderr == res.stderr


def test_failing_step_leaves_the_run_and_earlier_steps_committed(tmp_path):
    cfg = _case(tmp_path, '[compare]\n[figure_set]\nperiod = "2030-2031"\n' + REPORT, months=3)
    out = tmp_path / "out"
    res = _run(cfg)
    assert res.exit_code == 1
    assert res.stderr.splitlines()[-1] == (
        f"euphotic: error: {cfg} [figure_set]: the step failed: --period 2030-2031: the run in "
        f"{out} covers 2023-2023; the run's maps and totals and the steps before it are "
        f"committed in {out}")
    man = _consistent(out)
    assert set(_kinds(man)) == {*RUN_KINDS, "comparison"}
    assert len(_kinds(man)["map"]) == 3
    assert _kinds(man)["comparison"] == COMPARE_FILES
    assert not (out / "report.html").exists()  # the step after the failed one did not run
    assert _debris(out) == []
    from euphotic.results import open_totals

    assert open_totals(out).sizes == {"region": 1, "month": 3, "model": 1}


def test_compare_step_with_years_outside_the_record(tmp_path):
    cfg = _case(tmp_path, '[compare]\nbaseline = "2030-2031"\n' + REPORT, months=2)
    out = tmp_path / "out"
    res = _run(cfg)
    assert res.exit_code == 1
    assert res.stderr.splitlines()[-1] == (
        f"euphotic: error: {cfg} [compare]: the step failed: --baseline 2030-2031: the run in "
        f"{out} covers 2023-2023; the run's maps and totals and the steps before it are "
        f"committed in {out}")
    man = _consistent(out)
    assert set(_kinds(man)) == RUN_KINDS
    assert _debris(out) == []


def _hold_lock(out: Path) -> subprocess.Popen:
    """Another process holding ``out``'s lock until its standard input closes."""
    code = ("import sys; from pathlib import Path; from euphotic import runfolder; "
            f"f = runfolder.OutputFolder(Path({str(out)!r})); "
            "cm = f.locked('euphotic run other.toml'); cm.__enter__(); print('held', flush=True); "
            "sys.stdin.read(); cm.__exit__(None, None, None)")
    p = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE,
                         stdout=subprocess.PIPE, text=True, env=os.environ.copy())
    assert p.stdout.readline().strip() == "held"
    return p


def test_run_with_steps_into_a_held_folder_is_refused(copy):
    cfg, out = copy
    before = folder_bytes(out)
    holder = _hold_lock(out)
    try:
        res = _run(cfg)
    finally:
        holder.communicate("")
    assert res.exit_code == 3
    assert res.stderr.startswith(
        f"euphotic: error: {out}: another euphotic run (pid {holder.pid} on ")
    assert len(res.stderr.splitlines()) == 1
    assert folder_bytes(out) == before


def test_lock_is_held_across_the_run_and_its_steps(tmp_path, monkeypatch):
    """While a step works, another process cannot add to the folder (exit 3)."""
    cfg = _case(tmp_path, REPORT, months=1)
    out = tmp_path / "out"
    seen = []
    real = steps.STEPS

    def probe(folder, options, *, cfg, command):
        """Stands for the report step: tries to add to the folder from another process."""
        p = subprocess.run([sys.executable, "-m", "euphotic.cli", "methods", str(folder), "-q"],
                           capture_output=True, text=True, env=os.environ.copy())
        seen.append((p.returncode, p.stderr))
        return steps.Done("report")

    monkeypatch.setattr(steps, "STEPS", (*real[:-1], steps.Step("report", probe)))
    res = _run(cfg)
    assert res.exit_code == 0, res.output
    ((code, err),) = seen
    assert code == 3
    assert err.startswith(f"euphotic: error: {out}: another euphotic run (pid {os.getpid()} on ")
    assert len(err.splitlines()) == 1
    _consistent(out)
    lock = json.loads((out / runfolder.LOCK_NAME).read_text())
    assert lock["state"] == "released" and lock["pid"] == os.getpid()


def test_the_lock_is_reentrant_in_its_thread_only(tmp_path):
    out = tmp_path / "f"
    held = runfolder.OutputFolder(out)
    errors = []
    with held.locked("outer"):
        with runfolder.OutputFolder(out).locked("inner"):  # same thread: works under it
            pass
        assert held.lock.fd is not None  # the inner exit did not release the outer lock

        def other():
            try:
                with runfolder.OutputFolder(out).locked("other thread"):
                    pass
            except runfolder.OutputBusyError as exc:
                errors.append(exc)

        t = threading.Thread(target=other)
        t.start()
        t.join()
    assert len(errors) == 1 and "another euphotic run" in str(errors[0])
    with runfolder.OutputFolder(out).locked("after"):  # released by the outer holder
        pass


# --------------------------------------------------------------------------------------------
# the report is never stale


def test_figures_after_report_rebuild_the_report_in_the_same_commit(copy):
    _, out = copy
    old_images = _report_images(out / "report.html")
    assert len(old_images) == 8
    res = CliRunner().invoke(main, ["figures", str(out), "--period", "2024", "--baseline",
                                    "2023", "--width", "two-column", "--projection", "latlon",
                                    "-q"])
    assert res.exit_code == 0, res.output
    man = _consistent(out)
    figs = sorted(n for n in _kinds(man)["figure set"] if n.endswith(".png"))
    assert len(figs) == 8
    # one commit added the figures and the rebuilt report
    last = man["added"][-1]
    assert last["command"].startswith("euphotic figures ") and "report.html" in last["outputs"]
    images = _report_images(out / "report.html")
    assert sorted(images) == sorted((out / n).read_bytes() for n in figs)
    assert not set(images) & set(old_images)  # the new figures, none of the old ones
    text = " ".join(_parse(out / "report.html").text)
    for n in figs:  # each figure with its caption (from the .caption.md beside it)
        assert n in text

    res = CliRunner().invoke(main, ["compare", str(out), "-q"])
    assert res.exit_code == 0, res.output
    _consistent(out)
    text = " ".join(_parse(out / "report.html").text)
    assert "compare_annual_totals.csv" in text and "compare_trends.csv" in text
    assert len(_report_images(out / "report.html")) == 8


def test_a_report_that_cannot_be_rebuilt_stops_the_commit(copy):
    cfg, out = copy
    png = out / "fig_npp_maps.png"
    st = png.stat()
    png.write_bytes(b"not a png")  # a listed figure broken by hand: the report cannot embed it
    os.utime(png, ns=(st.st_atime_ns, st.st_mtime_ns))
    before = folder_bytes(out)
    res = CliRunner().invoke(main, ["methods", str(out), "-q"])
    assert res.exit_code == 1
    assert res.stderr == (f"euphotic: error: {png}: not a PNG file (the manifest lists it as a "
                          "figure)\n")
    assert folder_bytes(out) == before and _debris(out) == []


# --------------------------------------------------------------------------------------------
# one source of options and defaults


def _cli_defaults(name: str) -> dict:
    """The values the command passes on when only its FOLDER argument is given."""
    return main.commands[name].make_context(name, ["some_folder"]).params


def test_steps_and_commands_share_functions_and_defaults():
    from euphotic.compare_outputs import write_comparisons
    from euphotic.config import STEP_KEYS
    from euphotic.figureset import write_figure_set

    assert [s.table for s in steps.STEPS] == list(STEP_KEYS)
    sig = {k: v.default for k, v in inspect.signature(write_comparisons).parameters.items()}
    assert set(steps.COMPARE_ARGS) == set(STEP_KEYS["compare"])
    assert set(steps.COMPARE_ARGS.values()) <= set(sig)
    cli = _cli_defaults("compare")
    assert (sig["baseline"], sig["compare_years"], sig["min_coverage"]) == (
        cli["baseline"], cli["compare_to"], cli["min_coverage"]) == (None, None, None)
    assert sig["maps"] is (not cli["no_maps"]) is True

    sig = {k: v.default for k, v in inspect.signature(write_figure_set).parameters.items()}
    assert set(steps.FIGURE_SET_ARGS) == set(STEP_KEYS["figure_set"])
    assert set(steps.FIGURE_SET_ARGS.values()) <= set(sig)
    cli = _cli_defaults("figures")
    for key in ("period", "baseline", "projection", "min_coverage", "width"):
        assert sig[key] == cli[key], key
    assert sig["relative"] is (not cli["absolute"]) is True
    # an empty table passes nothing: the functions' own defaults apply
    assert steps.compare_kwargs({}) == steps.figure_set_kwargs({}) == {}
    assert steps.figure_set_kwargs({"absolute": True, "width": "one-column"}) == {
        "relative": False, "width": "one-column"}
    assert steps.compare_kwargs({"compare_to": "2020-2024", "maps": False}) == {
        "compare_years": "2020-2024", "maps": False}


def test_step_tables_do_not_change_the_maps_fingerprint(tmp_path):
    """Adding or changing a step table must not make a rerun recompute the maps."""
    from euphotic.config import load_config
    from euphotic.pipeline import _NOT_IN_FINGERPRINT

    cfg = load_config(_case(tmp_path, COMPARE + "[report]\nmethods = false\n"))
    assert cfg.steps == {"compare": {"baseline": "2023", "compare_to": "2024"},
                         "report": {"methods": False}}
    assert "steps" in _NOT_IN_FINGERPRINT


def test_years_keys_accept_a_year_a_span_or_an_integer(tmp_path):
    from euphotic.config import load_config

    cfg = load_config(_case(tmp_path, '[compare]\nbaseline = 2023\ncompare_to = " 2023 - 2024 "\n'))
    assert cfg.steps["compare"] == {"baseline": "2023", "compare_to": "2023-2024"}


# --------------------------------------------------------------------------------------------
# units of the totals


def test_totals_are_a_mass_of_carbon_in_a_udunits_unit(demo_run):
    """The CF conventions ask for units UDUNITS can parse: "Tg" parses (1e9 kg), "TgC" does
    not (checked with UDUNITS-2 itself through cf-units); "carbon" is said by long_name."""
    cf_units = pytest.importorskip("cf_units")
    from euphotic.results import open_totals

    t = open_totals(demo_run)
    for v, col in (("total", "total_TgC"), ("total_filled", "total_filled_TgC")):
        a = t[v].attrs
        assert a["units"] == "Tg"
        assert cf_units.Unit(a["units"]).convert(1.0, "kg") == 1e9  # SI prefix tera
        assert "carbon" in a["long_name"] and a["long_name"].startswith("total carbon fixed")
        assert a["comment"].startswith("mass of carbon (Tg = 1e9 kg of carbon") and col in a["comment"]
    with pytest.raises(ValueError, match="TgC"):
        cf_units.Unit("TgC")


# --------------------------------------------------------------------------------------------
# the README's first command


def _readme_first_command() -> str:
    text = (ROOT / "README.md").read_text()
    block = text.split("```bash\n", 1)[1].split("```", 1)[0]
    return block.strip()


def test_readme_first_command_is_one_line_running_the_decade_demo():
    cmd = _readme_first_command()
    assert "\n" not in cmd
    assert cmd == ("python3 -m venv .venv && .venv/bin/pip install . && .venv/bin/euphotic run "
                   "configs/demo_decade.toml")


#: What the README says the first command writes (besides the 240 month maps).
DECADE_FILES = {
    "regional_totals.csv", "regional_totals.csv-metadata.json", "euphotic_manifest.json",
    "regions.nc", *COMPARE_FILES, *METHODS_FILES, "report.html", "derived_totals.csv",
    "derived_totals.csv-metadata.json", "ensemble_totals.csv",
    "ensemble_totals.csv-metadata.json",
    *(f"fig_{n}.{ext}" for n in ("npp_maps", "npp_difference", "npp_baseline_period_change",
                                  "npp_ratio", "annual_totals", "seasonal_cycle",
                                  "totals_coverage", "monthly_totals")
      for ext in ("png", "pdf", "caption.md", "caption.txt")),
}


@pytest.mark.slow
def test_decade_demo_with_its_steps(tmp_path):
    """The README's first command (after installation) on a copy of the repository layout."""
    shutil.copytree(ROOT / "configs", tmp_path / "configs")
    (tmp_path / "sample_grids").symlink_to(ROOT / "sample_grids")
    res = CliRunner().invoke(main, ["run", str(tmp_path / "configs" / "demo_decade.toml"), "-q"])
    assert res.exit_code == 0, res.output
    out = tmp_path / "demo_decade_output"
    man = _consistent(out)
    names = set(os.listdir(out)) - {runfolder.LOCK_NAME}
    maps = {n for n in names if n.startswith("npp_") and n.endswith(".nc")}
    ensemble = {n for n in maps if n.startswith("npp_ensemble_")}
    assert len(maps - ensemble) == 480  # 4 models x 120 months
    assert len(ensemble) == 120  # four models: their ensemble, one map a month
    derived = {n for n in names if n.startswith("derived_") and n.endswith(".nc")}
    # the [derived] step: of each model's maps and of the ensemble mean
    assert derived == {n.replace("npp_", "derived_") for n in maps}
    assert names - maps - derived == DECADE_FILES
    assert set(man["outputs"]) == names - {runfolder.MANIFEST_NAME}
    assert man["months"][0] == "2015-01" and man["months"][-1] == "2024-12"
    assert len(_report_images(out / "report.html")) == 8
    assert "baseline 2015-2019" in res.stdout
    with open(out / "compare_annual_totals.csv") as fh:
        # regions x years x (four models and their ensemble mean)
        assert len(fh.read().splitlines()) == 1 + 4 * 10 * 5
