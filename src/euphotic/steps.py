"""Steps after a run, set in the run's configuration: ``euphotic run`` goes on, once the maps
and totals are committed, to add the derived quantities, the comparisons, the figure set, the
methods text and the report to the folder, the same outputs as the commands ``euphotic
derive``, ``euphotic compare``, ``euphotic figures``, ``euphotic methods`` and ``euphotic
report``.

A step runs when its table is in the configuration (``[derived]``, ``[compare]``,
``[figure_set]``, ``[matchup]``, ``[report]``; their keys are declared in :data:`euphotic.config.STEP_KEYS`) and in the order of
:data:`STEPS`. Each step calls the function of its command with the table's keys (a key left
out takes that function's default, so a step and its command behave alike) and commits its
outputs on its own (:meth:`euphotic.runfolder.OutputFolder.adding`), under the lock the run
already holds: a failing step leaves the committed run and the earlier steps in place and is
reported as a :class:`StepError` naming its table.

A new step is one entry in :data:`STEPS` (table name and function) and one key table in
:data:`euphotic.config.STEP_KEYS`.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from euphotic.errors import EuphoticError

log = logging.getLogger("euphotic")


class StepError(EuphoticError):
    """A step after the run failed; the run itself is committed. Keeps the exit code of the
    error that stopped the step (3 when another process holds the folder, else 1)."""

    def __init__(self, where: str, table: str, folder: Path, cause: BaseException):
        self.table = table
        self.exit_code = getattr(cause, "exit_code", 1)
        if isinstance(cause, EuphoticError):
            why = str(cause)
        else:
            why = (f"unexpected {cause.__class__.__name__}: {cause} (rerun with --debug for "
                   "the traceback)")
        super().__init__(
            f"{where} [{table}]: the step failed: {' '.join(why.split())}; the run's maps and "
            f"totals and the steps before it are committed in {folder}")


@dataclass
class Done:
    """What one step added to the folder."""

    table: str
    files: list[Path] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    #: what the step's function returned (e.g. the comparisons' trends); for a reused step,
    #: what was recorded of it (see :func:`run_steps`)
    value: Any = None
    #: the step was not redone: its outputs of an earlier run are unchanged
    reused: bool = False


#: [compare] key -> keyword of euphotic.compare_outputs.write_comparisons
COMPARE_ARGS = {"baseline": "baseline", "compare_to": "compare_years",
                "min_coverage": "min_coverage", "low_coverage": "low_coverage",
                "totals": "totals", "maps": "maps"}
#: [figure_set] key -> keyword of euphotic.figureset.write_figure_set ("absolute" is the
#: opposite of its "relative")
FIGURE_SET_ARGS = {"period": "period", "baseline": "baseline", "projection": "projection",
                   "width": "width", "min_coverage": "min_coverage", "absolute": "relative"}


def compare_kwargs(options: dict) -> dict:
    """Keywords of :func:`~euphotic.compare_outputs.write_comparisons` for a [compare] table
    (only the keys it sets: the others keep the function's defaults)."""
    return {COMPARE_ARGS[k]: v for k, v in options.items()}


def figure_set_kwargs(options: dict) -> dict:
    """Keywords of :func:`~euphotic.figureset.write_figure_set` for a [figure_set] table."""
    return {FIGURE_SET_ARGS[k]: (not v if k == "absolute" else v) for k, v in options.items()}


def _compare(folder: Path, options: dict, *, cfg, command: str) -> Done:
    from euphotic.compare_outputs import write_comparisons

    w = write_comparisons(folder, command=command, **compare_kwargs(options))
    return Done("compare", files=list(w.files), value=w)


def _figure_set(folder: Path, options: dict, *, cfg, command: str) -> Done:
    from euphotic.figureset import write_figure_set

    fs = write_figure_set(folder, command=command, **figure_set_kwargs(options))
    return Done("figure_set", files=list(fs.files), notes=list(fs.notes), value=fs)


def _matchup(folder: Path, options: dict, *, cfg, command: str) -> Done:
    from euphotic.matchup_outputs import write_matchups

    w = write_matchups(folder, cfg=cfg, command=command)  # reads its [matchup] table itself
    return Done("matchup", files=list(w.files), value=w)


def _derived(folder: Path, options: dict, *, cfg, command: str) -> Done:
    from euphotic.derived_outputs import write_derived

    w = write_derived(folder, cfg=cfg, command=command)  # reads its [derived] table itself
    return Done("derived", files=list(w.files), value=w)


def _report(folder: Path, options: dict, *, cfg, command: str) -> Done:
    from euphotic.report import write_report

    done = Done("report")
    # the methods files and the page in one commit: the page is rendered once
    w = write_report(folder, command=command, methods=options.get("methods", True))
    done.files += w.methods_files
    done.files.append(w.path)
    done.value = w
    return done


@dataclass(frozen=True)
class Step:
    """One step: its config table and the function that adds its outputs to a committed run,
    called as ``write(folder, options, cfg=cfg, command=command)``."""

    table: str
    write: Callable[..., Done]


#: The steps, in the order they run. The report comes last so that it embeds what the others
#: wrote (it is also rebuilt by any later commit into the folder; see euphotic.runfolder).
STEPS: tuple[Step, ...] = (
    Step("derived", _derived),
    Step("compare", _compare),
    Step("figure_set", _figure_set),
    Step("matchup", _matchup),
    Step("report", _report),
)


def run_steps(cfg, folder: str | Path, *, command: str = "euphotic run",
              force: bool = False) -> list[Done]:
    """Run the steps configured in ``cfg.steps`` on the run committed in ``folder``.

    Each step is committed on its own; the caller may hold the folder's lock (as
    :func:`euphotic.pipeline.run` does), and the steps then work under it.

    A step whose fingerprint (:func:`step_fingerprint`) is the one recorded in the manifest
    by an earlier run, and whose recorded outputs are in place unchanged, is not redone: it is
    logged as reused and its :class:`Done` is rebuilt from the record. ``force`` redoes every
    step.

    Raises
    ------
    StepError
        A step failed (its outputs are not added; the run and earlier steps stay committed).
    """
    from euphotic import runfolder

    folder = Path(folder)
    where = str(cfg.path) if cfg.path else "config"
    done = []
    earlier: dict[str, str] = {}  # table -> fingerprint of the steps before, in this config
    ran_before = False  # an earlier step was redone in this call
    for step in STEPS:
        if step.table not in cfg.steps:
            continue
        options = dict(cfg.steps[step.table])
        manifest = runfolder.OutputFolder(folder).manifest() or {}
        fp = step_fingerprint(cfg, step.table, options, manifest,
                              earlier if step.table == "report" else {})
        earlier[step.table] = fp
        record = (manifest.get("steps") or {}).get(step.table)
        if (not force and not (ran_before and step.table == "report")
                and reusable(folder, manifest, record, fp)):
            log.debug("reused the [%s] step's %d files, unchanged", step.table,
                      len(record["outputs"]))
            done.append(Done(step.table, files=[folder / n for n in record["outputs"]],
                             notes=list(record.get("notes", [])),
                             value=_value_from_record(step.table, record.get("value")),
                             reused=True))
            continue
        ran_before = True
        _forget(folder, step.table)  # a step killed below is not taken as done next time
        try:
            d = step.write(folder, options, cfg=cfg, command=f"{command} [{step.table}]")
        except Exception as exc:  # noqa: BLE001 - every failure names its step
            raise StepError(where, step.table, folder, exc) from exc
        _remember(folder, d, fp)
        done.append(d)
    return done


# --------------------------------------------------------------------------------------------
# reuse of a step's outputs by a later run
# --------------------------------------------------------------------------------------------

#: Bumped when a change of the code changes what a step writes for the same run and table.
STEP_FORMAT = 1
#: RunConfig fields that do not change what a step reads or writes (the steps' own tables
#: enter each step's fingerprint on their own: editing one table redoes only that step).
_NOT_IN_STEP_FINGERPRINT = {"path", "output_dir", "steps", "notes", "months_per_compute"}
#: Manifest fields that the methods text and the report print (run id, time, command): a new
#: commit of the run changes them, so the [report] step is redone.
_REPORT_EMBEDS = ("run_id", "created", "command", "config", "config_sha256")


#: Manifest kinds of the steps' outputs (each module's KIND): not among what a step reads of
#: the run, whether a step's record lists them or a standalone command wrote them.
STEP_KINDS = frozenset({"derived", "comparison", "figure set", "matchup", "methods", "report"})


def _step_owned(manifest: dict) -> set[str]:
    """Names of outputs written by a step (recorded as such, or of a step's kind)."""
    return {n for rec in (manifest.get("steps") or {}).values()
            for n in rec.get("outputs", {})} | {
        n for n, e in (manifest.get("outputs") or {}).items() if e.get("kind") in STEP_KINDS}


def step_fingerprint(cfg, table: str, options: dict, manifest: dict,
                     earlier: dict[str, str]) -> str:
    """What a step's outputs depend on: the run's outputs it reads (their names and their
    fingerprints in the manifest), the configuration except the other steps' tables, its own
    table, the files its table names (size and modification time), the tool version and
    :data:`STEP_FORMAT`; for the report also the other steps' fingerprints (``earlier``) and the
    manifest fields it prints."""
    from euphotic import __version__, runfolder

    base = Path(cfg.path).resolve().parent if cfg.path else Path.cwd()
    owned = _step_owned(manifest)
    # the maps' fingerprints (inputs, configuration, version) determine the run's tables and
    # figures too; their bytes do not enter: the totals' sidecar quotes the whole config file,
    # the steps' tables included
    run_outputs = {n: [e.get("kind"), e.get("fingerprint")]
                   for n, e in (manifest.get("outputs") or {}).items() if n not in owned}
    files = []
    for v in options.values():  # a station file and the like: its identity, not its name only
        if isinstance(v, str | Path) and v and (base / v).is_file():
            files.append(runfolder.file_stat(base / v, base))
    conf = {k: v for k, v in vars(cfg).items() if k not in _NOT_IN_STEP_FINGERPRINT}
    parts = [STEP_FORMAT, __version__, table, options, files, conf, run_outputs,
             manifest.get("models"), manifest.get("months"), manifest.get("inputs"), earlier]
    if table == "report":
        parts.append({k: manifest.get(k) for k in _REPORT_EMBEDS})
    return runfolder.config_fingerprint(parts)


def reusable(folder: Path, manifest: dict, record: dict | None, fp: str) -> bool:
    """A step's record matches ``fp`` and each of its outputs is listed in the manifest and in
    place as the record saw it when the step finished."""
    from euphotic import runfolder

    if not record or record.get("fingerprint") != fp or not record.get("outputs"):
        return False
    listed = manifest.get("outputs") or {}
    return all(n in listed and runfolder.intact(folder / n, st)
               for n, st in record["outputs"].items())


def _write_steps(folder: Path, update) -> None:
    from euphotic import runfolder

    path = Path(folder) / runfolder.MANIFEST_NAME
    manifest = runfolder.OutputFolder(folder).manifest()
    if manifest is None:
        return
    steps = dict(manifest.get("steps") or {})
    update(steps)
    manifest["steps"] = steps
    runfolder._write_json_atomic(path, manifest)


def _forget(folder: Path, table: str) -> None:
    """Drop a step's record before it runs (a kill during the step leaves no record)."""
    from euphotic import runfolder

    if table in ((runfolder.OutputFolder(folder).manifest() or {}).get("steps") or {}):
        _write_steps(folder, lambda steps: steps.pop(table, None))


def carried(cfg, previous: dict, folder: Path) -> tuple[dict[str, dict], dict[str, dict]]:
    """For a new commit of the run: the outputs (name -> manifest entry) and records of the
    steps that ``cfg`` still configures whose outputs are in place as recorded, so that the
    commit keeps them for :func:`run_steps` to reuse or replace. Outputs of other steps are
    left out (the commit deletes them)."""
    from euphotic import runfolder

    listed = previous.get("outputs") or {}
    entries: dict[str, dict] = {}
    records: dict[str, dict] = {}
    for table, rec in (previous.get("steps") or {}).items():
        if table not in cfg.steps or not rec.get("outputs"):
            continue
        if all(n in listed and runfolder.intact(Path(folder) / n, st)
               for n, st in rec["outputs"].items()):
            entries.update({n: listed[n] for n in rec["outputs"]})
            records[table] = rec
    return entries, records


def _remember(folder: Path, d: Done, fp: str) -> None:
    """Record a finished step in the manifest: its fingerprint, its outputs as they are now
    (size, modification time), its notes and what the command line prints of its value."""
    from euphotic import runfolder

    outs = {}
    for p in d.files:
        name = Path(p).name
        try:
            outs[name] = runfolder.stat_entry(Path(folder) / name)
        except OSError:
            return  # an output is not there: no record, the step runs again next time
    rec = {"fingerprint": fp, "outputs": outs, "notes": list(d.notes),
           "value": _value_to_record(d.table, d.value)}
    _write_steps(folder, lambda steps: steps.__setitem__(d.table, rec))


def _plain(x):
    import numpy as np

    if isinstance(x, dict):
        return {str(k): _plain(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [_plain(v) for v in x]
    if isinstance(x, np.generic):
        return x.item()
    if x is None or isinstance(x, bool | int | float | str):
        return x
    return str(x)


def _value_to_record(table: str, value) -> dict | None:
    """What the command line needs of a step's value (see euphotic.cli), as JSON."""
    if value is None:
        return None
    if table == "compare":
        return _plain({"totals": value.totals, "rule": list(value.rule),
                       "baseline": value.baseline, "compare_years": value.compare_years,
                       "trends": value.trends})
    if table == "matchup":
        return {"summary": value.summary}
    return None


def _value_from_record(table: str, rec: dict | None):
    """The value of a reused step, as far as it was recorded (a namespace with the fields the
    command line reads), else None."""
    from types import SimpleNamespace

    if rec is None:
        return None
    if table == "compare":
        return SimpleNamespace(
            files=[], totals=rec["totals"], rule=tuple(rec["rule"]),
            baseline=tuple(rec["baseline"]) if rec.get("baseline") else None,
            compare_years=tuple(rec["compare_years"]) if rec.get("compare_years") else None,
            trends=rec["trends"])
    return SimpleNamespace(**rec)
