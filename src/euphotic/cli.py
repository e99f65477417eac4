"""Command line: ``euphotic run CONFIG.toml``, ``euphotic check CONFIG.toml``, ``euphotic inspect FILES``,
``euphotic models``."""

from __future__ import annotations

import logging
import shlex
import sys
from pathlib import Path

import click

from euphotic import __version__
from euphotic.errors import EuphoticError
from euphotic.roles import ROLES


def _fail(exc: BaseException, debug: bool) -> None:
    if debug:
        raise exc
    if isinstance(exc, EuphoticError):
        msg = str(exc)
    elif isinstance(exc, OSError) and getattr(exc, "filename", None):
        msg = f"{exc.filename}: {exc.strerror or exc}"
    else:
        msg = f"unexpected {exc.__class__.__name__}: {exc} (rerun with --debug for the traceback)"
    click.echo(f"euphotic: error: {' '.join(str(msg).split())}", err=True)
    sys.exit(getattr(exc, "exit_code", 1))


class _StderrLines(logging.Handler):
    """The tool's warnings as one line each on the standard error of the moment (looked up at
    every message, so a caller that swaps ``sys.stderr`` sees them)."""

    def emit(self, record: logging.LogRecord) -> None:
        msg = " ".join(self.format(record).split())
        click.echo(f"euphotic: {record.levelname.lower()}: {msg}", err=True)


def _log_warnings() -> None:
    """Show the tool's own warnings as one line each (not other libraries' logs)."""
    log = logging.getLogger("euphotic")
    if not any(isinstance(h, _StderrLines) for h in log.handlers):
        log.addHandler(_StderrLines(logging.WARNING))
        log.setLevel(logging.WARNING)
        log.propagate = False


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="euphotic")
def main() -> None:
    """Ocean net primary production from gridded chlorophyll, light and temperature files.

    Monthly NPP maps (CF NetCDF) and carbon totals for named regions (CSV). Satellite NPP models
    disagree by about a factor of two: validate locally before management or carbon claims.
    """


@main.command()
@click.argument("config", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--output-dir",
    "-o",
    type=click.Path(file_okay=False, path_type=Path),
    help="Write here instead of the config's [run] output_dir.",
)
@click.option("--no-figures", is_flag=True, help="Skip the PNG maps and the totals chart.")
@click.option(
    "--quiet", "-q", is_flag=True,
    help="No progress bar and no list of files written; warnings and errors are still shown.",
)
@click.option(
    "--force", is_flag=True,
    help="Recompute every month, even those whose maps are in place and unchanged.",
)
@click.option(
    "--scheduler",
    metavar="ADDRESS",
    help="Run on an existing dask.distributed scheduler (e.g. tcp://10.0.0.5:8786).",
)
@click.option(
    "--workers",
    type=click.IntRange(min=1),
    metavar="N",
    help="Start a local dask.distributed cluster of N worker processes for this run.",
)
@click.option(
    "--no-steps", is_flag=True,
    help="Stop once the maps and totals are committed: skip the config's [derived], "
         "[compare], [figure_set], [matchup] and [report] steps.",
)
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def run(
    config: Path,
    output_dir: Path | None,
    no_figures: bool,
    quiet: bool,
    force: bool,
    scheduler: str | None,
    workers: int | None,
    no_steps: bool,
    debug: bool,
) -> None:
    """Run the models for CONFIG (a TOML file) and write maps and regional totals; then the
    steps the config sets ([compare], [figure_set], [matchup], [report]), each added to the folder."""
    _log_warnings()
    try:
        from euphotic.config import load_config
        from euphotic.pipeline import run as run_pipeline

        cfg = load_config(config)
        if output_dir is not None:
            cfg.output_dir = output_dir
        if no_figures:
            cfg.figures = False
        command = "euphotic run " + " ".join(shlex.quote(a) for a in sys.argv[2:])
        if scheduler and workers:
            raise EuphoticError("give --scheduler or --workers, not both")
        result = run_pipeline(
            cfg, progress=not quiet, command=command, scheduler=scheduler, workers=workers,
            force=force, steps=not no_steps,
        )
    except Exception as exc:  # noqa: BLE001 - every failure becomes one line unless --debug
        _fail(exc, debug)
        return
    rows = result.rows
    months = list(dict.fromkeys(r["month"] for r in rows))
    if len(months) > 3:  # a long run: the last month on screen, everything in the table
        rows = [r for r in rows if r["month"] == months[-1]]
        click.echo(f"{len(months)} months; the last one below, all {len(result.rows)} rows in "
                   f"{result.totals_csv}")
    click.echo(format_totals(rows))
    for done in result.steps:  # the trends of a [compare] step, as `euphotic compare` prints
        if done.table == "compare":
            click.echo("")
            _echo_trends(done.value)
        if done.table == "matchup":  # the overall sentences; the rest in matchup_summary.md
            click.echo("")
            click.echo("Station match-ups:")
            for line in done.value.summary.splitlines():
                if line.startswith("- Over all stations"):
                    click.echo(line)
    click.echo("")
    from euphotic.outputs import CAUTION

    click.echo("Caution: " + CAUTION)
    for done in result.steps:
        for note in done.notes:
            click.echo(f"note: [{done.table}] {note}")
    if not quiet:
        click.echo("")
        for note in result.notes:
            click.echo(note)
        reused = {f"npp_{m}_{month}" for m, month in result.reused}
        if reused:
            click.echo(f"reused {len(reused)} unchanged month map(s) (--force recomputes them)")
        for p in result.maps:
            if p.stem not in reused:
                click.echo(f"wrote {p}")
        click.echo(f"wrote {result.totals_csv}")
        from euphotic.outputs import totals_metadata_path

        click.echo(f"wrote {totals_metadata_path(result.totals_csv)}")
        for p in result.figures:
            click.echo(f"wrote {p}")
        if result.manifest is not None:
            click.echo(f"wrote {result.manifest}")
        for done in result.steps:
            if getattr(done, "reused", False):
                click.echo(f"reused the [{done.table}] step's {len(done.files)} files, "
                           "unchanged (--force redoes it)")
                continue
            for p in done.files:
                click.echo(f"wrote {p} [{done.table}]")


@main.command(name="check")
@click.argument("config", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def check_command(config: Path, debug: bool) -> None:
    """Check CONFIG before running it: inputs, months, regions, work and memory.

    Lists every problem; exits 1 when the run would fail, 0 when it would start.
    """
    _log_warnings()
    try:
        from euphotic.config import config_problems, load_config
        from euphotic.preflight import check

        problems = config_problems(config)
        if problems and not debug:  # every config problem, one line each
            for p in problems:
                click.echo(f"euphotic: error: {' '.join(str(p).split())}", err=True)
            sys.exit(1)
        report = check(load_config(config))
    except Exception as exc:  # noqa: BLE001 - one line, as for `run`
        _fail(exc, debug)
        return
    click.echo(report.text())
    sys.exit(0 if report.ok else 1)


def format_totals(rows: list[dict]) -> str:
    """The totals table as aligned text."""
    head = [
        "region",
        "month",
        "model",
        "mean mgC/m2/d",
        "observed km2",
        "ocean km2",
        "coverage",
        "total TgC",
        "filled TgC",
        "flag",
    ]
    from euphotic.outputs import TOTALS_COLUMNS as keys
    fmts = [
        str,
        str,
        str,
        "{:.1f}".format,
        "{:,.0f}".format,
        "{:,.0f}".format,
        "{:.0%}".format,
        "{:.3g}".format,
        "{:.3g}".format,
        str,
    ]
    table = [head]
    for r in rows:
        cells = []
        for k, f in zip(keys, fmts, strict=True):
            v = r[k]
            try:
                cells.append("-" if isinstance(v, float) and v != v else f(v))
            except (ValueError, TypeError):
                cells.append(str(v))
        table.append(cells)
    widths = [max(len(row[i]) for row in table) for i in range(len(head))]
    lines = []
    for j, row in enumerate(table):
        lines.append(
            "  ".join(
                c.ljust(w) if i < 3 else c.rjust(w)
                for i, (c, w) in enumerate(zip(row, widths, strict=True))
            )
        )
        if j == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


@main.command()
@click.argument("files", nargs=-1, required=True)
@click.option(
    "--as",
    "role",
    type=click.Choice(list(ROLES)),
    default=None,
    help="Which input the files are (default: try each).",
)
@click.option(
    "--variable", default=None, help="Variable name, when no CF standard_name identifies it."
)
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def inspect(files: tuple[str, ...], role: str | None, variable: str | None, debug: bool) -> None:
    """Show how FILES would be read: variable, units, periods and grid."""
    from euphotic.errors import InputFileError, VariableNotFoundError
    from euphotic.readers import InputSpec, grid_summary, open_input

    roles = [role] if role else list(ROLES)
    last: Exception | None = None
    for r in roles:
        try:
            da = open_input(
                InputSpec(role=r, files=list(files), variable=variable, base_dir=Path.cwd())
            )
        except InputFileError as exc:
            last = exc
            if role is None and isinstance(exc, VariableNotFoundError):
                continue  # not this input: try the next
            _fail(exc, debug)
            return
        except Exception as exc:  # noqa: BLE001
            _fail(exc, debug)
            return
        starts = da["period_start"].values.astype("datetime64[D]")
        ends = da["period_end"].values.astype("datetime64[D]")
        click.echo(f"input:     {r} ({da.attrs['long_name']})")
        click.echo(f"variable:  {da.attrs['source_variable']} -> converted to {da.attrs['units']}")
        click.echo(f"files:     {len(da.attrs['files'])}")
        click.echo(
            f"periods:   {len(starts)}, {starts.min()} .. {ends.max() - 1}"
            f" (lengths {sorted(set((ends - starts).astype(int).tolist()))} days)"
        )
        click.echo(f"grid:      {grid_summary(da)}")
        click.echo(f"chunks:    {da.data.chunksize}")
        return
    _fail(last or EuphoticError("no input recognised"), debug)


def _add_to_run(name: str, write, debug: bool, **options):
    """Run ``write(folder..., command=..., **options)`` for a command that adds outputs to a
    committed run; every failure becomes one line (or the traceback with --debug). Returns
    what ``write`` returned, or None after a failure."""
    _log_warnings()
    command = f"euphotic {name} " + " ".join(shlex.quote(a) for a in sys.argv[2:])
    try:
        return write(command=command, **options)
    except Exception as exc:  # noqa: BLE001 - every failure becomes one line unless --debug
        _fail(exc, debug)
        return None


def _echo_trends(w) -> None:
    """The totals and coverage rule used, and the annual-total trends of ``euphotic compare``
    (or a [compare] step), one line each."""
    from euphotic.compare_outputs import rule_words

    click.echo(f"Totals: {w.totals}. Coverage rule: {rule_words(*w.rule)}.")
    click.echo(f"Trends of annual totals (Theil-Sen slope per year, Mann-Kendall p; baseline "
               f"{w.baseline[0]}-{w.baseline[1]}):")
    for t in w.trends:
        if t["series"] != "annual totals":
            continue
        if not t["slope"] == t["slope"]:  # NaN: too few complete years for a slope
            click.echo(f"  {t['region']:<24} {t['model']:<12} no trend: "
                       f"{int(t['n_years'])} complete year(s) of data")
            continue
        note = "  (short record)" if t["short_record"] else ""
        click.echo(f"  {t['region']:<24} {t['model']:<12} {t['slope']:+9.3f} Tg C yr-2  "
                   f"p = {t['p_value']:.3f}  n = {int(t['n_years'])} years{note}")


@main.command(name="compare")
@click.argument("folder", type=click.Path(file_okay=False, path_type=Path))
@click.option("--baseline", metavar="FIRST-LAST",
              help="Years of the climatology (default: every year of the run).")
@click.option("--compare-to", "compare_to", metavar="FIRST-LAST",
              help="Years set against the baseline in the difference map (default: the last).")
@click.option("--min-coverage", type=click.FloatRange(0, 1), default=None, metavar="F",
              help="Coverage rule threshold (default: the run's [run] min_coverage); given "
                   "without --low-coverage, values below it are dropped.")
@click.option("--low-coverage", type=click.Choice(["flag", "drop"]), default=None,
              help="Keep and flag, or drop, values below the coverage rule (default: the "
                   "run's [run] low_coverage).")
@click.option("--totals", type=click.Choice(["observed", "scaled", "climatology"]),
              default="observed", show_default=True,
              help="Which regional total feeds annual totals, anomalies and trends: observed "
                   "cells only, observed mean scaled to the ocean area, or gaps filled with each "
                   "cell's climatology over the baseline.")
@click.option("--no-maps", is_flag=True, help="Tables only, no per-cell NetCDF maps.")
@click.option("--quiet", "-q", is_flag=True, help="No list of files written.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def compare_command(folder: Path, baseline: str | None, compare_to: str | None,
                    min_coverage: float | None, low_coverage: str | None, totals: str,
                    no_maps: bool, quiet: bool, debug: bool) -> None:
    """Compare the years and regions of the run in FOLDER: annual totals, seasonal cycle,
    anomalies against a baseline, trends (tables), and per-cell trend and difference maps.
    They are added to FOLDER and listed in its manifest."""
    from euphotic.compare_outputs import write_comparisons

    w = _add_to_run("compare", write_comparisons, debug, folder=folder, baseline=baseline,
                    compare_years=compare_to, min_coverage=min_coverage,
                    low_coverage=low_coverage, totals=totals, maps=not no_maps)
    if w is None:
        return
    _echo_trends(w)
    from euphotic.outputs import CAUTION

    click.echo("")
    click.echo("Caution: " + CAUTION)
    if not quiet:
        for p in w.files:
            click.echo(f"wrote {p}")


@main.command(name="figures")
@click.argument("folder", type=click.Path(file_okay=False, path_type=Path))
@click.option("--period", metavar="FIRST-LAST",
              help="Years of the maps (default: the whole run); also the years set against "
                   "the baseline in the difference map (default there: the last year).")
@click.option("--baseline", metavar="FIRST-LAST",
              help="Baseline years of the difference map (default: the years before --period).")
@click.option("--projection", type=click.Choice(["equal-area", "latlon"]), default="equal-area",
              show_default=True, help="Map projection.")
@click.option("--min-coverage", type=click.FloatRange(0, 1), default=None, metavar="F",
              help="Mark map cells whose mean coverage is below this fraction (default: the "
                   "run's [run] min_coverage).")
@click.option("--width", type=click.Choice(["one-column", "two-column"]), default="two-column",
              show_default=True, help="Print width: 85 mm or 180 mm.")
@click.option("--absolute", is_flag=True,
              help="Difference map in mg C m-2 d-1 instead of percent of the baseline.")
@click.option("--quiet", "-q", is_flag=True, help="No list of files written.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def figures_command(folder: Path, period: str | None, baseline: str | None, projection: str,
                    min_coverage: float | None, width: str, absolute: bool, quiet: bool,
                    debug: bool) -> None:
    """Draw the proposal figures of the run in FOLDER (PNG at 300 dpi and PDF, each with a
    caption); they are added to FOLDER as one set and listed in its manifest."""
    from euphotic.figureset import write_figure_set

    fs = _add_to_run("figures", write_figure_set, debug, folder=folder, period=period,
                     baseline=baseline, projection=projection, min_coverage=min_coverage,
                     width=width, relative=not absolute)
    if fs is None:
        return
    for note in fs.notes:
        click.echo(f"note: {note}")
    if not quiet:
        for p in fs.files:
            click.echo(f"wrote {p}")


@main.command(name="methods")
@click.argument("folder", type=click.Path(file_okay=False, path_type=Path))
@click.option("--quiet", "-q", is_flag=True, help="No list of files written.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def methods_command(folder: Path, quiet: bool, debug: bool) -> None:
    """Write a methods paragraph and its references (text and BibTeX) for the run in FOLDER,
    added to FOLDER and listed in its manifest; print the paragraph."""
    from euphotic.methods import write_methods

    w = _add_to_run("methods", write_methods, debug, folder=folder)
    if w is None:
        return
    click.echo(w.methods.text, nl=False)
    if not quiet:
        click.echo("")
        for p in w.files:
            click.echo(f"wrote {p}")


@main.command(name="report")
@click.argument("folder", type=click.Path(file_okay=False, path_type=Path))
@click.option("--quiet", "-q", is_flag=True, help="No name of the file written.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def report_command(folder: Path, quiet: bool, debug: bool) -> None:
    """Write report.html, a self-contained page (tables, figures, methods, caution) for
    reviewing the run in FOLDER in a browser; it is added to FOLDER and its manifest."""
    from euphotic.report import write_report

    w = _add_to_run("report", write_report, debug, folder=folder)
    if w is None:
        return
    if not quiet:
        click.echo(f"wrote {w.path} ({w.images} images embedded)")


@main.command(name="matchup")
@click.argument("folder", type=click.Path(file_okay=False, path_type=Path))
@click.option("--stations", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE.csv",
              help="Station CSV (default: [matchup] stations of the run's config).")
@click.option("--window", type=int, metavar="N", help="Window width in cells, odd (default 3).")
@click.option("--days", type=click.IntRange(0, 15), metavar="N",
              help="Days on each side of the station day (default 0).")
@click.option("--min-valid", "min_valid", type=click.IntRange(min=1), metavar="N",
              help="Fewest valid cells in the window (default: more than half).")
@click.option("--max-cv", "max_cv", type=float, metavar="F",
              help="Largest coefficient of variation of the window (default: none).")
@click.option("--quotient", metavar="Q",
              help="Photosynthetic quotient, mol O2 per mol C: ammonium (1.1), nitrate (1.4, "
                   "default) or a number.")
@click.option("--gross-to-net", "gross_to_net", type=float, metavar="F",
              help="Net/gross factor for oxygen gross production (default 0.667).")
@click.option("--config", "config", type=click.Path(dir_okay=False, path_type=Path),
              help="The run's config (default: the one its manifest records).")
@click.option("--no-figures", is_flag=True, help="Tables and summary only.")
@click.option("--quiet", "-q", is_flag=True, help="No list of files written.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def matchup_command(folder: Path, stations: Path | None, window: int | None, days: int | None,
                    min_valid: int | None, max_cv: float | None, quotient: str | None,
                    gross_to_net: float | None, config: Path | None, no_figures: bool,
                    quiet: bool, debug: bool) -> None:
    """Match production measured at sea (carbon-14 and oxygen incubations, CSV) with the
    daily model estimates of the run in FOLDER: match-up table, skill statistics, scatter,
    target diagram and summary, added to FOLDER and listed in its manifest."""
    from euphotic.matchup_outputs import write_matchups

    w = _add_to_run("matchup", write_matchups, debug, folder=folder, stations=stations,
                    cfg=config, window=window, days=days, min_valid=min_valid, max_cv=max_cv,
                    quotient=quotient, gross_to_net=gross_to_net, figures=not no_figures)
    if w is None:
        return
    click.echo(w.summary.split("## In words", 1)[-1].split("Caution:", 1)[0].strip())
    from euphotic.outputs import CAUTION

    click.echo("")
    click.echo("Caution: " + CAUTION)
    if not quiet:
        for p in w.files:
            click.echo(f"wrote {p}")


@main.command(name="derive")
@click.argument("config", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--output-dir", "-o", type=click.Path(file_okay=False, path_type=Path),
              help="The run's folder, if not the config's [run] output_dir.")
@click.option("--export", "export", multiple=True, metavar="METHOD",
              help="Export method: laws2011, dunne2005 or henson2011 (repeat for several; "
                   "default: [derived] export, else all three).")
@click.option("--quotient", metavar="Q",
              help="Photosynthetic quotient, mol O2 per mol C: ammonium (1.1), nitrate (1.4, "
                   "default) or a number.")
@click.option("--model", "models", multiple=True, metavar="NAME",
              help="Model whose maps to use (repeat for several; default: every model of "
                   "the run).")
@click.option("--quiet", "-q", is_flag=True, help="No list of files written.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
def derive_command(config: Path, output_dir: Path | None, export: tuple[str, ...],
                   quotient: str | None, models: tuple[str, ...], quiet: bool,
                   debug: bool) -> None:
    """What the production of the run made with CONFIG implies: export production by
    several published methods side by side, nitrogen and phosphorus demand (Redfield ratio)
    and oxygen production, as maps per model and month and regional totals, added to the
    run's folder and listed in its manifest."""
    from euphotic.derived_outputs import write_derived

    w = _add_to_run("derive", write_derived, debug, folder=output_dir, cfg=config,
                    export=list(export) or None, quotient=quotient,
                    models=list(models) or None)
    if w is None:
        return
    from euphotic.derived import EXPORT_CAUTION
    from euphotic.outputs import CAUTION

    click.echo(f"Derived with {w.options.text()}.")
    click.echo("Caution: " + CAUTION + " " + EXPORT_CAUTION)
    if not quiet:
        for p in w.files:
            click.echo(f"wrote {p}")


@main.command(name="models")
def list_models() -> None:
    """List the available models: inputs, parameters and references."""
    from euphotic.models import CITATIONS, SPECS, Choice

    for name, spec in SPECS.items():
        click.echo(f"{name}  ({spec.label}): {spec.published_name}")
        if spec.summary:
            click.echo(f"    {spec.summary}")
        ins = ", ".join(f"{i.role} [{i.units}]" + ("" if i.required else " (optional)")
                        for i in spec.inputs)
        click.echo(f"    inputs: {ins}")
        for p in spec.parameters:
            if isinstance(p, Choice):
                what = f"one of {', '.join(p.choices)}; default {p.default}"
            else:
                what = f"default {p.default:g} {p.units}" + ("; may be set per region"
                                                             if p.per_region else "")
            click.echo(f"    parameter {p.name}: {what} ({p.source})")
        click.echo(f"    references: {CITATIONS[name]}")
        click.echo("")


if __name__ == "__main__":  # pragma: no cover
    main()
