"""`euphotic report`: one self-contained HTML page of a committed run, added to its folder.

Independent references: the PNG signature is that of the PNG specification (W3C/ISO 15948,
section 5.2); HTML escaping is checked against the Python standard library's
``html.parser`` (the page is parsed back and its text compared with the region name);
image loading is checked in a real browser (Debian's chromium, headless) where installed.
"""

from __future__ import annotations

import base64
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner

from euphotic.cli import main

from ._grids import monthly_case
from .conftest import folder_bytes
from .test_runs import _consistent, _debris

#: A region name an HTML page must escape (invented place name).
ODD_REGION = 'Maren <Deep> & "Shelf"'
#: PNG specification, section 5.2 (the eight-byte file signature).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory):
    """A committed three-month run with quick-look figures and two regions, one of them with
    characters that HTML must escape."""
    tmp = tmp_path_factory.mktemp("report_run")
    cfg = monthly_case(tmp, 3)
    text = cfg.read_text().replace("figures = false", "figures = true")
    text += f'\n[[regions]]\nname = {json.dumps(ODD_REGION)}\nbox = [-28.0, 42.0, -24.0, 46.0]\n'
    cfg.write_text(text)
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    return tmp / "out"


@pytest.fixture
def folder(run_folder, tmp_path):
    """A private copy of the run (tests add files to it)."""
    dst = tmp_path / "out"
    shutil.copytree(run_folder, dst)
    return dst


class _Page(HTMLParser):
    """Collects the text of the page, its <img> sources and every src/href value."""

    def __init__(self):
        super().__init__()
        self.text: list[str] = []
        self.imgs: list[str] = []
        self.links: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        self.links += [v for k, v in attrs if k in ("src", "href") and v]

    def handle_data(self, data):
        self.text.append(data)


def _parse(path: Path) -> _Page:
    p = _Page()
    p.feed(path.read_text(encoding="utf-8"))
    return p


def _report(folder: Path):
    return CliRunner().invoke(main, ["report", str(folder)])


def _pngs(folder: Path, kind: str) -> list[str]:
    man = json.loads((folder / "euphotic_manifest.json").read_text())
    return sorted(n for n, e in man["outputs"].items() if e["kind"] == kind and n.endswith(".png"))


def test_report_is_written_listed_and_self_contained(folder):
    before = set(json.loads((folder / "euphotic_manifest.json").read_text())["outputs"])
    res = _report(folder)
    assert res.exit_code == 0, res.output
    quick = _pngs(folder, "figure")
    assert len(quick) == 4  # three month maps and the totals chart of `euphotic run`
    assert res.stdout == f"wrote {folder / 'report.html'} ({len(quick)} images embedded)\n"
    man = _consistent(folder)
    assert man["outputs"]["report.html"]["kind"] == "report"
    assert set(man["outputs"]) == before | {"report.html"}  # the run's outputs stay
    assert _debris(folder) == []

    page = _parse(folder / "report.html")
    text = "".join(page.text)
    from euphotic.outputs import CAUTION

    assert f"Caution: {CAUTION}" in text
    html_text = (folder / "report.html").read_text()
    assert '<p class="caution" id="caution">' in html_text  # shown prominently, before totals
    assert html_text.index('id="caution"') < html_text.index('id="totals"')
    # the table's regions and units (region names as configured; units from open_totals)
    for region in ("Box", ODD_REGION):
        assert region in page.text  # the whole text of a table cell
    assert "total carbon fixed in the month (Tg)" in text and "mean NPP (mg m-2 d-1)" in text
    # the methods paragraph, its references and the provenance
    assert "Behrenfeld and Falkowski (1997)" in text
    assert man["config_sha256"] in text and "run.toml" in text

    # no external resource: every src/href is an embedded data: URI
    assert not re.search(r"""(src|href)\s*=\s*["']?\s*https?://""", html_text, re.I)
    assert all(v.startswith("data:image/png;base64,") for v in page.links)
    # every image decodes to a PNG (signature: PNG specification section 5.2) and each one
    # is the bytes of the run's PNG
    assert len(page.imgs) == len(quick)
    decoded = [base64.b64decode(s.split(",", 1)[1], validate=True) for s in page.imgs]
    assert all(d.startswith(PNG_SIGNATURE) for d in decoded)
    assert sorted(decoded) == sorted((folder / n).read_bytes() for n in quick)


def test_region_names_are_escaped(folder):
    assert _report(folder).exit_code == 0
    html_text = (folder / "report.html").read_text()
    assert "Maren &lt;Deep&gt; &amp; &quot;Shelf&quot;" in html_text
    assert "<Deep>" not in html_text and '"Shelf"' not in html_text
    # parsed back by the standard library's HTML parser, the text is the name again
    assert ODD_REGION in "".join(_parse(folder / "report.html").text)


def test_figure_set_captions_and_comparisons_are_used_when_present(folder):
    runner = CliRunner()
    assert runner.invoke(main, ["figures", str(folder), "-q"]).exit_code == 0
    assert runner.invoke(main, ["compare", str(folder), "--no-maps", "-q"]).exit_code == 0
    res = _report(folder)
    assert res.exit_code == 0, res.output
    figure_set = _pngs(folder, "figure set")
    assert figure_set == ["fig_annual_totals.png", "fig_npp_maps.png", "fig_seasonal_cycle.png"]
    page = _parse(folder / "report.html")
    decoded = [base64.b64decode(s.split(",", 1)[1]) for s in page.imgs]
    # the figure set replaces the quick looks
    assert sorted(decoded) == sorted((folder / n).read_bytes() for n in figure_set)
    text = "".join(page.text)
    for n in figure_set:  # each figure's caption (first sentence of its .caption.md)
        md = (folder / n.replace(".png", ".caption.md")).read_text()
        title = re.match(r"\*\*(.+?)\*\*", md).group(1)
        assert f"<b>{title}</b>" in (folder / "report.html").read_text().replace("&#x27;", "'")
    for n in ("compare_annual_totals.csv", "compare_anomalies.csv",
              "compare_seasonal_cycle.csv", "compare_trends.csv"):
        assert n in text
    assert "slope_per_yr" in text
    # a second report replaces the first: one report in the manifest
    assert _report(folder).exit_code == 0
    man = _consistent(folder)
    assert [n for n, e in man["outputs"].items() if e["kind"] == "report"] == ["report.html"]


def test_no_run_is_one_line_and_leaves_nothing(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    res = _report(empty)
    assert res.exit_code == 1
    assert res.stderr == (f"euphotic: error: no euphotic run in {empty}: it has no "
                          "euphotic_manifest.json\n")
    assert list(empty.iterdir()) == []


def test_a_broken_figure_fails_and_keeps_the_previous_report(folder):
    assert _report(folder).exit_code == 0
    (folder / "npp_vgpm_2023-02.png").write_bytes(b"not a png")
    before = folder_bytes(folder)
    res = _report(folder)
    assert res.exit_code == 1
    assert res.stderr == (f"euphotic: error: {folder / 'npp_vgpm_2023-02.png'}: not a PNG file "
                          "(the manifest lists it as a figure)\n")
    assert folder_bytes(folder) == before  # the earlier report and manifest unchanged
    assert _debris(folder) == []


_COUNT_SCRIPT = """<script>
window.addEventListener("load", function () {
  var imgs = document.images, ok = 0;
  for (var i = 0; i < imgs.length; i++) {
    if (imgs[i].complete && imgs[i].naturalWidth > 0) ok++;
  }
  var p = document.createElement("p");
  p.id = "img-check";
  p.textContent = "loaded " + ok + " of " + imgs.length;
  document.body.appendChild(p);
});
</script>"""
#: A control image that cannot load (its data is not an image): proves the check can fail.
_BROKEN = '<img src="data:image/png;base64,bm90IGEgcG5n" alt="control">'


def _browser() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.slow
def test_every_image_loads_in_a_headless_browser(folder, tmp_path):
    browser = _browser()
    if browser is None:
        pytest.skip("chromium is not installed: the real-browser check of report.html needs "
                    "Debian's chromium package (`.ci/run` installs it)")
    assert _report(folder).exit_code == 0
    page = (folder / "report.html").read_text()
    n = page.count("<img ")
    assert n == 4
    check = tmp_path / "check.html"  # a test copy: the report itself carries no script
    check.write_text(page.replace("</body>", _BROKEN + _COUNT_SCRIPT + "</body>"))
    res = subprocess.run(
        [browser, "--headless", "--no-sandbox", "--disable-gpu",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}", "--dump-dom",
         check.as_uri()],
        capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr[-2000:]
    found = re.search(r'id="img-check">loaded (\d+) of (\d+)<', res.stdout)
    assert found, res.stdout[-2000:]
    # every report image loads; the control does not
    assert (int(found.group(1)), int(found.group(2))) == (n, n + 1)


def test_a_new_run_removes_the_report(run_folder, tmp_path):
    """The report describes one committed run: a new `euphotic run` into the folder drops it
    (it is not an output of the new run), so no report outlives its run."""
    cfg = run_folder.parent / "run.toml"
    out = tmp_path / "out"
    assert CliRunner().invoke(main, ["run", str(cfg), "-q", "--output-dir", str(out)]).exit_code == 0
    assert _report(out).exit_code == 0 and (out / "report.html").exists()
    assert CliRunner().invoke(main, ["run", str(cfg), "-q", "--output-dir", str(out),
                                     "--force"]).exit_code == 0
    assert not (out / "report.html").exists()
    assert "report.html" not in _consistent(out)["outputs"]


def test_ci_installs_chromium_then_runs_the_readme_test_command():
    root = Path(__file__).resolve().parents[1]
    ci = (root / ".ci" / "run").read_text()
    readme = (root / "README.md").read_text()
    command = ('python3 -m venv .venv && .venv/bin/pip install -e ".[test]" && '
               ".venv/bin/python -m pytest")
    assert command in readme and ci.rstrip().endswith(command)
    install = ci.index("apt-get install -y -qq chromium")
    assert install < ci.index(command)
    assert '|| echo "chromium not installed; the browser test will skip"' in ci  # never fails CI


def test_long_tables_are_folded():
    """A long table is put in an HTML <details> element (folded) so that the figures and
    comparisons below it stay in view; a short one is not."""
    import numpy as np
    import xarray as xr

    from euphotic import report

    def totals(n_months):
        months = np.arange(np.datetime64("2020-01"), np.datetime64("2020-01") + n_months)
        shape = (1, n_months, 1)
        data = {v: (("region", "month", "model"), np.ones(shape), {"units": "1"})
                for v in ("mean_npp", "total")}
        data["flag"] = (("region", "month", "model"), np.full(shape, "", object))
        return xr.Dataset(data, coords={"region": ["A"], "model": ["vgpm"],
                                        "month": months.astype("datetime64[ns]")})

    assert "<details>" not in report.totals_table(totals(report.LONG_TABLE_ROWS))
    folded = report.totals_table(totals(report.LONG_TABLE_ROWS + 1))
    assert folded.startswith(f"<details><summary>{report.LONG_TABLE_ROWS + 1} rows")
