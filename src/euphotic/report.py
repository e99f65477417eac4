"""A self-contained HTML page reviewing a committed run (``euphotic report FOLDER``).

One file, ``report.html``, added to the run's folder as one unit
(:meth:`euphotic.runfolder.OutputFolder.adding`, kind :data:`KIND`). It needs no network to be
viewed: the style sheet is inline and every image is embedded as a base64 ``data:`` URI. It
holds the caution, the regional totals (from :func:`euphotic.results.open_totals`), the
comparison tables if ``euphotic compare`` was run, the figures with their captions (the figure
set of ``euphotic figures`` if there is one, else the run's quick-look PNGs), the methods
paragraph with its references (:func:`euphotic.methods.methods_text`) and the provenance
recorded in the manifest.

Everything read from the run (region names, captions, file names) is escaped with
:func:`html.escape`. Only the standard library is used (``html``, ``base64``,
``string.Template``).
"""

from __future__ import annotations

import base64
import csv
import html
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from string import Template

import numpy as np

from euphotic import __version__, results, runfolder
from euphotic.errors import EuphoticError
from euphotic.outputs import CAUTION

#: Kind of the report in the run's manifest; a new report replaces the old one.
KIND = "report"
#: The file written into the run's folder.
FILE = "report.html"
#: Its description in the manifest.
DESCRIPTION = "self-contained HTML review of the run"
#: Manifest kinds whose PNGs the report embeds, in order of preference: the figure set of
#: ``euphotic figures`` if present, else the quick-look figures of ``euphotic run``.
FIGURE_KINDS = ("figure set", "figure")
#: Manifest kind of the tables written by ``euphotic compare``.
COMPARISON_KIND = "comparison"
#: Manifest kind of the station match-ups written by ``euphotic matchup`` (or its step).
MATCHUP_KIND = "matchup"
#: The first eight bytes of every PNG file (PNG specification, section 5.2).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_BOLD = re.compile(r"\*\*(.+?)\*\*")

_CSS = """
body{font-family:system-ui,sans-serif;max-width:70em;margin:1em auto;padding:0 1em;
color:#1a1a1a;line-height:1.4}
h1{font-size:1.6em;margin-bottom:0.2em}
.runid{color:#555;margin-top:0}
.caution{border:3px solid #b00020;background:#fff0f0;padding:0.8em 1em;font-weight:bold}
table{border-collapse:collapse;margin:0.5em 0 1.5em;font-size:0.85em}
th,td{border:1px solid #bbb;padding:0.2em 0.5em;text-align:right}
th{background:#eee}
td.text,th.text{text-align:left}
td.flag{color:#b00020;text-align:left}
figure{margin:1.5em 0}
figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{white-space:pre-wrap;font-size:0.9em}
pre{white-space:pre-wrap}
.wide{overflow-x:auto}
dl.prov dt{font-weight:bold}
"""

_PAGE = Template("""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>euphotic run report: $run_id</title>
<style>$css</style>
</head>
<body>
<h1>Net primary production run report</h1>
<p class="runid">Run <code>$run_id</code>, created $created, euphotic $version</p>
<p class="caution" id="caution">Caution: $caution</p>
<h2>Regional totals</h2>
$totals
$ensemble
$comparisons
$derived
$matchups
<h2>Figures</h2>
$figures
<h2>Methods</h2>
$methods
<h2>Provenance</h2>
$provenance
<p class="runid">Report written by euphotic $tool_version on $now.</p>
</body>
</html>
""")


class ReportError(EuphoticError):
    """A file the run's manifest lists cannot be put into the report."""


@dataclass
class Written:
    """What ``euphotic report`` wrote."""

    path: Path
    images: int = 0
    notes: list[str] = field(default_factory=list)
    #: the methods files written into the same commit (``write_report(methods=True)``)
    methods_files: list[Path] = field(default_factory=list)


def _e(value: object) -> str:
    return html.escape(str(value), quote=True)


def _cell(value: object, decimals: int) -> str:
    if isinstance(value, str):
        return value
    f = float(value)
    return "" if not np.isfinite(f) else f"{f:,.{decimals}f}"


#: Totals variable -> decimals shown in the report (the CSV keeps its own precision).
_TOTALS_DECIMALS = {"mean_npp": 1, "observed_area": 0, "ocean_area": 0, "coverage": 3,
                    "total": 4, "total_filled": 4}


#: Totals tables longer than this are folded (HTML ``<details>``) in the report.
LONG_TABLE_ROWS = 48


def totals_table(totals) -> str:
    """The regional totals as an HTML table; each header names the variable and its units
    (from the Dataset's attributes); the quality flags are shown in their own column.

    Parameters
    ----------
    totals : xarray.Dataset
        As returned by :func:`euphotic.results.open_totals`.
    """
    numeric = [v for v in totals.data_vars if v != "flag"]
    head = ['<th class="text">region</th>', '<th class="text">month</th>',
            '<th class="text">model</th>']
    for v in numeric:
        a = totals[v].attrs
        unit = a.get("units")
        label = f"{a.get('long_name', v)} ({unit})" if unit else a.get("long_name", v)
        head.append(f"<th>{_e(label)}</th>")
    head.append('<th class="text">flag</th>')
    dims = ("region", "month", "model")  # rows in this order: region, then month, then model
    values = {v: totals[v].transpose(*dims).values for v in numeric}
    flags = totals["flag"].transpose(*dims).values
    regions = [_e(r) for r in totals["region"].values]
    months = [_e(str(np.datetime64(mo, "M"))) for mo in totals["month"].values]
    models = [_e(m) for m in totals["model"].values]
    shown = np.zeros(flags.shape, dtype=bool)
    for a in values.values():
        shown |= np.isfinite(a)  # a combination with no value at all has no row
    rows = []
    for i, j, k in zip(*np.nonzero(shown), strict=True):
        cells = [f'<td class="text">{regions[i]}</td><td class="text">{months[j]}</td>'
                 f'<td class="text">{models[k]}</td>']
        cells += [f"<td>{_e(_cell(a[i, j, k], _TOTALS_DECIMALS.get(v, 4)))}</td>"
                  for v, a in values.items()]
        cells.append(f'<td class="flag">{_e(str(flags[i, j, k]))}</td>')
        rows.append("<tr>" + "".join(cells) + "</tr>")
    table = ('<div class="wide"><table id="totals">\n<thead><tr>' + "".join(head)
             + "</tr></thead>\n<tbody>\n" + "\n".join(rows) + "\n</tbody>\n</table></div>")
    if len(rows) > LONG_TABLE_ROWS:  # a long run: folded, so figures and comparisons show
        return (f"<details><summary>{len(rows):,} rows (region, month, model): click to "
                f"show</summary>\n{table}\n</details>")
    return table


def ensemble_table(stats, models: list[str]) -> str:
    """The section "Spread across models": the statistics across models of the regional
    totals as an HTML table (``stats``: :func:`euphotic.results.open_ensemble_totals`)."""
    from euphotic.ensemble_outputs import ENSEMBLE_NOTE, TOTALS_FILE

    units = stats["mean"].attrs.get("units", "Tg")
    head = (['<th class="text">region</th>', '<th class="text">month</th>',
             "<th>models with a total</th>"]
            + [f"<th>{_e(w)} ({_e(units)})</th>" for w in ("mean", "minimum", "maximum",
                                                            "standard deviation")]
            + ["<th>coefficient of variation</th>", '<th class="text">lowest</th>',
               '<th class="text">highest</th>', '<th class="text">flag</th>'])
    rows = []
    for i, r in enumerate(stats["region"].values):
        for j, mo in enumerate(stats["month"].values):
            def v(name, i=i, j=j):
                return stats[name].values[i, j]
            cells = [f'<td class="text">{_e(r)}</td>',
                     f'<td class="text">{_e(str(np.datetime64(mo, "M")))}</td>',
                     f"<td>{int(v('n_models'))} of {len(models)}</td>"]
            cells += [f"<td>{_e(_cell(float(v(k)), 4))}</td>" for k in ("mean", "min", "max",
                                                                       "std")]
            cells.append(f"<td>{_e(_cell(float(v('cv')), 3))}</td>")
            cells += [f'<td class="text">{_e(v(k))}</td>' for k in ("min_model", "max_model")]
            cells.append(f'<td class="flag">{_e(v("flag"))}</td>')
            rows.append("<tr>" + "".join(cells) + "</tr>")
    table = ('<div class="wide"><table id="ensemble">\n<thead><tr>' + "".join(head)
             + "</tr></thead>\n<tbody>\n" + "\n".join(rows) + "\n</tbody>\n</table></div>")
    if len(rows) > LONG_TABLE_ROWS:
        table = (f"<details><summary>{len(rows):,} rows (region, month): click to show"
                 f"</summary>\n{table}\n</details>")
    return ("<h2>Spread across models</h2>\n"
            f"<p>Regional totals of carbon fixed in the month across the {len(models)} models "
            f"({_e(', '.join(models))}), from <code>{TOTALS_FILE}</code>: given only where every "
            "model has a total and no model's row is flagged (the flag says which model is "
            "missing or flagged); standard deviation with divisor N - 1. "
            f"{_e(ENSEMBLE_NOTE)}</p>\n{table}")


def _csv_table(path: Path, name: str) -> str:
    try:
        with open(path, newline="") as fh:
            rows = list(csv.reader(fh))
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise ReportError(f"{path}: cannot read the comparison table ({exc})") from None
    if not rows:
        return f"<p>{_e(name)}: empty.</p>"
    head = "".join(f"<th>{_e(c)}</th>" for c in rows[0])
    body = "\n".join("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>"
                     for r in rows[1:])
    table = (f'<div class="wide"><table>\n<thead><tr>{head}</tr></thead>'
             f"\n<tbody>\n{body}\n</tbody>\n</table></div>")
    if len(rows) - 1 > LONG_TABLE_ROWS:
        table = (f"<details><summary>{len(rows) - 1:,} rows: click to show</summary>\n"
                 f"{table}\n</details>")
    return f"<h3>{_e(name)}</h3>\n{table}"


def _png_uri(path: Path) -> str:
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ReportError(f"{path}: cannot read the figure ({exc.strerror or exc})") from None
    if not data.startswith(PNG_SIGNATURE):
        raise ReportError(f"{path}: not a PNG file (the manifest lists it as a figure)")
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def _caption(locate: Callable[[str], Path], png: str, entry: dict) -> str:
    """The ``.caption.md`` beside a figure-set PNG as escaped plain text, else the manifest's
    description of the file."""
    stem = png[:-len(".png")]
    md = locate(f"{stem}.caption.md")
    if md.is_file():
        try:
            text = md.read_text().strip()
        except (OSError, UnicodeDecodeError) as exc:
            raise ReportError(f"{md}: cannot read the caption ({exc})") from None
        return _BOLD.sub(r"<b>\1</b>", _e(text))  # escaped first: only **bold** becomes HTML
    return _e(entry.get("description") or png)


def _figures(locate: Callable[[str], Path], outputs: dict) -> tuple[str, int]:
    for kind in FIGURE_KINDS:
        pngs = sorted(n for n, e in outputs.items()
                      if e.get("kind") == kind and n.lower().endswith(".png"))
        if pngs:
            break
    else:
        return "<p>No figures: the run was made without them (run <code>euphotic figures"\
               "</code> to draw them).</p>", 0
    parts = []
    for n in pngs:
        parts.append(f'<figure>\n<img src="{_png_uri(locate(n))}" alt="{_e(n)}">\n'
                     f"<figcaption><b>{_e(n)}</b>\n{_caption(locate, n, outputs[n])}"
                     "</figcaption>\n</figure>")
    return "\n".join(parts), len(pngs)


def _matchups(locate: Callable[[str], Path], outputs: dict) -> tuple[str, int]:
    """The station match-ups: the summary sentences, the figures with their captions and the
    statistics table (empty when the run has none)."""
    names = {n for n, e in outputs.items() if e.get("kind") == MATCHUP_KIND}
    if not names:
        return "", 0
    summary = ""
    if "matchup_summary.md" in names:
        try:
            summary = locate("matchup_summary.md").read_text()
        except (OSError, UnicodeDecodeError) as exc:
            raise ReportError(f"{locate('matchup_summary.md')}: cannot read the match-up "
                              f"summary ({exc})") from None
    lines = summary.splitlines()
    words = []
    if "## In words" in lines:
        for ln in lines[lines.index("## In words") + 1:]:
            if ln.startswith("## "):
                break
            if ln.startswith("- "):
                words.append(ln[2:])
    caps = {ln.split(": ", 1)[0]: ln.split(": ", 1)[1] for ln in lines
            if ln.startswith("matchup_") and ": " in ln}
    parts = ["<h2>Station match-ups</h2>"]
    if words:
        parts.append("<ul>" + "".join(f"<li>{_e(w)}</li>" for w in words) + "</ul>")
    n_images = 0
    for n in sorted(x for x in names if x.lower().endswith(".png")):
        stem = n.rsplit(".", 1)[0]
        cap = caps.get(stem) or outputs[n].get("description") or n
        parts.append(f'<figure>\n<img src="{_png_uri(locate(n))}" alt="{_e(n)}">\n'
                     f"<figcaption><b>{_e(n)}</b>\n{_e(cap)}</figcaption>\n</figure>")
        n_images += 1
    if "matchup_statistics.csv" in names:
        parts.append(_csv_table(locate("matchup_statistics.csv"), "matchup_statistics.csv"))
    return "\n".join(parts), n_images


def _coverage_items(manifest: dict) -> list[tuple[str, str]]:
    """The run's coverage rule, and the one its comparisons used where that differs."""
    from euphotic.compare_outputs import rule_words

    thr, how, source = results.manifest_coverage_rule(manifest)
    items = [("coverage rule", rule_words(thr, how)
              + ("" if source == "run" else " (not recorded by the run: this tool's default)"))]
    used = {(e["coverage_rule"].get("min_coverage"), e["coverage_rule"].get("low_coverage"),
             e.get("totals")) for e in manifest.get("outputs", {}).values()
            if e.get("kind") == COMPARISON_KIND and isinstance(e.get("coverage_rule"), dict)}
    for c_thr, c_how, totals in sorted(used, key=str):
        items.append(("comparisons", f"totals {totals}; coverage rule {rule_words(c_thr, c_how)}"))
    return items


def _provenance(manifest: dict) -> str:
    items = [("configuration", manifest.get("config")),
             ("configuration SHA-256", manifest.get("config_sha256")),
             ("euphotic version", manifest.get("version")),
             ("command", manifest.get("command")),
             ("models", ", ".join(manifest.get("models", []))),
             ("months", ", ".join(manifest.get("months", []))),
             ("skipped months", ", ".join(str(m) for m in manifest.get("skipped_months", []))),
             *_coverage_items(manifest)]
    out = ['<dl class="prov">']
    for k, v in items:
        if v:
            out.append(f"<dt>{_e(k)}</dt><dd><code>{_e(v)}</code></dd>")
    inputs = manifest.get("inputs") or {}
    if inputs:
        out.append("<dt>inputs</dt><dd><ul>")
        for role, files in inputs.items():
            listed = ", ".join(str(f) for f in files) if isinstance(files, list) else str(files)
            out.append(f"<li>{_e(role)}: <code>{_e(listed)}</code></li>")
        out.append("</ul></dd>")
    out.append("</dl>")
    return "\n".join(out)


def render(folder: str | Path, *, outputs: dict[str, dict] | None = None,
           locate: Callable[[str], Path] | None = None) -> tuple[str, int]:
    """The report page of the run committed in ``folder`` and the number of images in it.

    Parameters
    ----------
    outputs : the manifest's outputs to describe (default: the committed manifest's); a commit
        that adds to the folder passes what the folder will hold after it
    locate : where the file of an output is now (default: in ``folder``); a commit passes its
        stage for the files it adds

    Raises
    ------
    NoRunError, InterruptedCommitError, OutputChangedError
        As :func:`euphotic.results.committed_manifest`.
    ReportError
        A figure or comparison table the manifest lists cannot be read.
    """
    from euphotic.methods import methods_text

    folder = Path(folder).absolute()
    manifest = results.committed_manifest(folder)
    if outputs is None:
        outputs = manifest.get("outputs", {})
    if locate is None:
        def locate(name: str) -> Path:
            return folder / name
    totals = results.open_totals(folder)
    ensemble = ""
    if any(e.get("kind") == results.ENSEMBLE_TOTALS_KIND for e in outputs.values()):
        stats = results.open_ensemble_totals(folder)
        ensemble = ensemble_table(stats, stats.attrs["ensemble_models"].split())
    comp = sorted(n for n, e in outputs.items()
                  if e.get("kind") == COMPARISON_KIND and n.endswith(".csv"))
    comparisons = ""
    if comp:
        comparisons = "<h2>Comparisons</h2>\n" + "\n".join(
            _csv_table(locate(n), n) for n in comp)
    figures, n_images = _figures(locate, outputs)
    matchups, n_match = _matchups(locate, outputs)
    from euphotic.derived_outputs import report_section

    derived = report_section(locate, outputs)  # "What production implies", when derived
    n_images += n_match
    m = methods_text(folder)
    paragraph = " ".join(m.text.split())
    methods = (f'<p id="methods">{_e(paragraph)}</p>\n<h3>References</h3>\n'
               f'<pre id="references">{_e(m.references_text.strip())}</pre>')
    page = _PAGE.substitute(
        css=_CSS, run_id=_e(manifest.get("run_id", "")), created=_e(manifest.get("created", "")),
        version=_e(manifest.get("version", "")), caution=_e(manifest.get("caution") or CAUTION),
        totals=totals_table(totals), ensemble=ensemble, comparisons=comparisons, derived=derived, matchups=matchups, figures=figures, methods=methods,
        provenance=_provenance(manifest), tool_version=_e(__version__),
        now=_e(runfolder.now_iso()))
    return page, n_images


def write_report(folder: str | Path, *, command: str = "euphotic report",
                 methods: bool = False) -> Written:
    """Write ``report.html`` into the run committed in ``folder`` and list it in its manifest
    (kind :data:`KIND`; a new report replaces the old one; on any failure nothing changes).
    With ``methods``, the methods files (:func:`euphotic.methods.write_methods`) are written
    into the same commit, so that the page is rendered once (listed in ``methods_files``).

    Raises
    ------
    NoRunError, InterruptedCommitError, OutputChangedError, ReportError
        As :func:`render`.
    OutputBusyError
        Another euphotic process holds the folder.
    """
    folder = Path(folder)
    results.committed_manifest(folder)  # no run, or an interrupted commit: say so, touch nothing
    kinds: tuple[str, ...] = (KIND,)
    if methods:
        from euphotic.methods import KIND as METHODS_KIND
        from euphotic.methods import stage_methods

        kinds += (METHODS_KIND,)
    methods_files: list[Path] = []
    with runfolder.OutputFolder(folder).adding(command, replace_kinds=kinds) as (stage, added):
        # built under the folder's lock from what is committed: no other command can add to
        # the folder between the reading and the commit
        if methods:
            methods_files = stage_methods(folder, stage, added).files
        page, n_images = render(folder)
        stage.file(FILE).write_text(page, encoding="utf-8")
        added[FILE] = {"kind": KIND, "description": DESCRIPTION}
    return Written(path=folder / FILE, images=n_images, methods_files=methods_files)


def rebuild(folder: str | Path, stage: runfolder.Stage, outputs: dict[str, dict],
            added: dict[str, dict]) -> None:
    """Rebuild ``report.html`` into ``stage`` for a commit that adds other outputs to a folder
    holding a report, so that the report describes what the folder holds after the commit
    (called by :meth:`euphotic.runfolder.OutputFolder.adding`, under the folder's lock).

    Parameters
    ----------
    outputs : every output the folder will list after the commit (name -> manifest entry)
    added : the outputs the commit writes (their files are in ``stage``); the report is added

    Raises
    ------
    ReportError
        As :func:`render`, with the file that cannot be put into the report; the commit then
        fails and the folder is left as it was.
    """
    folder = Path(folder).absolute()

    def locate(name: str) -> Path:
        return stage.file(name) if name in added else folder / name

    page, _ = render(folder, outputs=outputs, locate=locate)
    stage.file(FILE).write_text(page, encoding="utf-8")
    added[FILE] = {"kind": KIND, "description": DESCRIPTION}
