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

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from euphotic.errors import EuphoticError


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
    #: what the step's function returned (e.g. the comparisons' trends)
    value: Any = None


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
    from euphotic.methods import write_methods
    from euphotic.report import write_report

    done = Done("report")
    if options.get("methods", True):
        done.files += write_methods(folder, command=command).files
    w = write_report(folder, command=command)
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


def run_steps(cfg, folder: str | Path, *, command: str = "euphotic run") -> list[Done]:
    """Run the steps configured in ``cfg.steps`` on the run committed in ``folder``.

    Each step is committed on its own; the caller may hold the folder's lock (as
    :func:`euphotic.pipeline.run` does), and the steps then work under it.

    Raises
    ------
    StepError
        A step failed (its outputs are not added; the run and earlier steps stay committed).
    """
    folder = Path(folder)
    where = str(cfg.path) if cfg.path else "config"
    done = []
    for step in STEPS:
        if step.table not in cfg.steps:
            continue
        try:
            done.append(step.write(folder, dict(cfg.steps[step.table]), cfg=cfg,
                                   command=f"{command} [{step.table}]"))
        except Exception as exc:  # noqa: BLE001 - every failure names its step
            raise StepError(where, step.table, folder, exc) from exc
    return done
