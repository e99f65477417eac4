"""`euphotic figures`: the proposal figure set of a committed run.

Checked by inspecting what was drawn (artists, labels, norms, pixels) and the files written;
no image baselines. Independent references: the pixel size of a figure is its print width in
millimetres / 25.4 (mm per inch, exact by definition) x 300 dpi; the PNG's resolution is read
back with PIL (Pillow) and the PDF's page size from its MediaBox (1/72 inch units, PDF 1.7
reference); the caution text and citations come from the package's own constants.
"""

from __future__ import annotations

import json
import re
import socket

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from euphotic import figureset, results
from euphotic.cli import main
from euphotic.outputs import CAUTION

from ._grids import monthly_case
from .conftest import folder_bytes
from .test_runs import _consistent, _debris

SET_NAMES = sorted(f"{stem}.{ext}" for stem in
                   ("fig_npp_maps", "fig_npp_difference", "fig_annual_totals",
                    "fig_seasonal_cycle")
                   for ext in ("png", "pdf", "caption.md", "caption.txt"))


@pytest.fixture(scope="module")
def three_years(tmp_path_factory):
    """A committed run of 36 monthly composites (2023-2025), two models, a box and a part of
    it as regions; the last month has no chlorophyll west of 25 W."""
    tmp = tmp_path_factory.mktemp("fig_three_years")
    cfg = monthly_case(tmp, 36, models=("vgpm", "eppley_vgpm"), west_gap_last_month=True,
                       regions=(("Box", [-30.0, 40.0, -20.0, 50.0]),
                                ("North part", [-30.0, 45.0, -20.0, 50.0])))
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    return tmp / "out"


@pytest.fixture(scope="module")
def data(three_years):
    return results.open_maps(three_years), results.open_totals(three_years)


def _px(width_mm: float) -> float:
    return width_mm / 25.4 * 300  # mm per inch (exact) x dpi


def _rgb(fig) -> np.ndarray:
    fig.canvas.draw()
    return np.asarray(fig.canvas.buffer_rgba())[..., :3]


def _has_colour(img: np.ndarray, hex_colour: str) -> bool:
    want = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)])
    return bool((np.abs(img.astype(int) - want).sum(axis=-1) <= 3).any())


# --------------------------------------------------------------------------------------------
# the command


def test_figures_command_adds_the_set_to_the_run(three_years):
    out = three_years
    res = CliRunner().invoke(main, ["figures", str(out)])
    assert res.exit_code == 0, res.output
    man = _consistent(out)
    names = sorted(n for n, e in man["outputs"].items() if e["kind"] == figureset.KIND)
    assert names == SET_NAMES
    assert "npp_vgpm_2023-01.nc" in man["outputs"]  # the run's outputs stay
    assert man["added"][-1]["command"].startswith("euphotic figures ")
    assert man["added"][-1]["outputs"] == SET_NAMES
    assert _debris(out) == []
    assert sorted(res.stdout.split()) == sorted(["wrote"] * 16 + [str(out / n) for n in SET_NAMES])

    for stem in ("fig_npp_maps", "fig_npp_difference", "fig_annual_totals",
                 "fig_seasonal_cycle"):
        with Image.open(out / f"{stem}.png") as im:
            # two-column default: 180 mm at 300 dpi (matplotlib truncates to whole pixels)
            assert abs(im.size[0] - _px(180)) < 1.0
            assert im.info["dpi"] == pytest.approx((300, 300), abs=0.01)
            px = np.asarray(im.convert("L"), dtype=float)
        assert px.std() > 20  # not blank: a drawn figure, not a flat page
        pdf = (out / f"{stem}.pdf").read_bytes()
        assert pdf.startswith(b"%PDF") and len(pdf) > 5000
        box = re.search(rb"/MediaBox \[\s*0 0 ([\d.]+) ([\d.]+)", pdf)
        assert float(box.group(1)) == pytest.approx(180 / 25.4 * 72, abs=0.01)  # points
        for ext in ("md", "txt"):
            cap = (out / f"{stem}.caption.{ext}").read_text()
            assert CAUTION in cap
            assert "Behrenfeld" in cap and "Eppley" in cap  # the models' citations
            assert "Coverage rule" in cap
    cap = (out / "fig_npp_maps.caption.txt").read_text()
    assert "2023-2025" in cap and "below 0.5 of days" in cap
    assert "2025 against the 2023-2024 baseline" in (out / "fig_npp_difference.caption.txt"
                                                      ).read_text()


def test_a_new_set_replaces_the_old_one_at_one_column(three_years):
    out = three_years
    res = CliRunner().invoke(main, ["figures", str(out), "--width", "one-column", "--projection",
                                    "latlon", "--period", "2024", "--baseline", "2023",
                                    "--absolute", "-q"])
    assert res.exit_code == 0, res.output
    assert res.stdout == ""
    man = _consistent(out)
    assert sorted(n for n, e in man["outputs"].items() if e["kind"] == figureset.KIND) == SET_NAMES
    for stem in ("fig_npp_maps", "fig_annual_totals"):
        with Image.open(out / f"{stem}.png") as im:
            assert abs(im.size[0] - _px(85)) < 1.0
    cap = (out / "fig_npp_difference.caption.txt").read_text()
    assert "2024 against the 2023 baseline" in cap and "Plate Carree" in cap
    assert "mg C m-2 d-1" in cap


def test_bad_options_fail_in_one_line_and_leave_the_folder_as_it_was(three_years, tmp_path):
    out = three_years
    before = folder_bytes(out)
    cases = [
        (["--period", "twenty"],
         "euphotic: error: --period: expected YEAR or FIRST-LAST (e.g. 2015-2019), not 'twenty'"),
        (["--period", "2030-2031"],
         f"euphotic: error: --period 2030-2031: the run in {out} covers 2023-2025"),
        (["--baseline", "2025-2023"],
         "euphotic: error: --baseline: expected YEAR or FIRST-LAST (e.g. 2015-2019), not "
         "'2025-2023'"),
    ]
    for args, message in cases:
        res = CliRunner().invoke(main, ["figures", str(out), *args])
        assert res.exit_code == 1, args
        assert res.stderr.strip() == message
    res = CliRunner().invoke(main, ["figures", str(out), "--min-coverage", "2"])
    assert res.exit_code == 2  # click's usage error
    assert folder_bytes(out) == before
    empty = tmp_path / "empty"
    empty.mkdir()
    res = CliRunner().invoke(main, ["figures", str(empty)])
    assert res.exit_code == 1
    assert res.stderr.strip().startswith(f"euphotic: error: no euphotic run in {empty}")
    assert list(empty.iterdir()) == []


# --------------------------------------------------------------------------------------------
# what is drawn


def test_map_panels_share_one_log_norm_with_a_labelled_colourbar(data):
    from matplotlib.colors import LogNorm

    maps, _ = data
    d = figureset.map_panels(maps, period=(2023, 2025))
    norm = d.artists["norm"]
    assert isinstance(norm, LogNorm)
    assert len(d.artists["meshes"]) == 2
    assert all(m.norm is norm for m in d.artists["meshes"])  # one object: one scale
    assert d.artists["colorbar"].norm is norm
    label = d.artists["colorbar"].ax.get_xlabel()
    assert label == "net primary production (mg C m$^{-2}$ d$^{-1}$)"
    # clipped at the 2nd and 98th percentiles of both panels together (numpy.percentile)
    mean = maps["npp"].mean("time").values
    pos = mean[np.isfinite(mean) & (mean > 0)]
    assert (norm.vmin, norm.vmax) == pytest.approx(tuple(np.percentile(pos, [2, 98])))
    assert d.artists["extend"] == "both" and d.artists["colorbar"].extend == "both"
    titles = [ax.get_title() for ax in d.artists["axes"]]
    assert titles[0] == "VGPM (Behrenfeld & Falkowski 1997)"
    assert "vgpm" not in " ".join(titles)  # published names, not the internal ids
    assert np.asarray(_rgb(d.figure), dtype=float).std() > 20
    import matplotlib.pyplot as plt

    plt.close(d.figure)


def test_log_ticks_are_readable():
    # hand-worked: the 1-3-10 sequence within the limits
    assert figureset._log_ticks(20.0, 5000.0) == [30, 100, 300, 1000, 3000]
    assert figureset._log_ticks(250.0, 1200.0) == [300, 500, 1000]  # narrow: 1-2-3-5


def test_land_no_data_and_low_coverage_are_told_apart(data):
    import matplotlib.pyplot as plt

    maps, _ = data
    m = maps.isel(time=slice(24, 36)).load()
    # invented for the test: a land block (coverage NaN) and an ocean block never observed
    m["coverage"][:, :, :8, :8] = np.nan
    m["npp"][:, :, :8, :8] = np.nan
    m["npp"][:, :, 30:, 30:] = np.nan
    m["coverage"][:, :, 30:, 30:] = 0.0
    d = figureset.map_panels(m, period=(2025, 2025), min_coverage=0.95, projection="latlon")
    img = _rgb(d.figure)
    assert _has_colour(img, figureset.LAND_COLOUR)
    assert _has_colour(img, figureset.NO_DATA_COLOUR)
    # the last month has no data west of 25 W: mean coverage 11/12 < 0.95 there -> stippled
    assert all(mk is not None for mk in d.artists["marks"])
    plt.close(d.figure)
    d = figureset.map_panels(m, period=(2025, 2025), min_coverage=0.5)
    assert all(mk is None for mk in d.artists["marks"])  # 11/12 >= 0.5: nothing marked
    plt.close(d.figure)


def test_difference_norm_is_centred_on_zero_and_symmetric(data):
    import matplotlib.pyplot as plt

    maps, _ = data
    for relative, unit in ((True, "(%)"), (False, "(mg C m$^{-2}$ d$^{-1}$)")):
        d = figureset.difference_map(maps, period=(2025, 2025), baseline=(2023, 2024),
                                     relative=relative)
        norm = d.artists["norm"]
        assert norm.vmin == -norm.vmax and norm.vmax > 0
        assert norm(0.0) == pytest.approx(0.5)
        assert all(m.norm is norm for m in d.artists["meshes"])
        assert d.artists["colorbar"].ax.get_xlabel().endswith(unit)
        plt.close(d.figure)


def test_drawing_needs_no_network(data, tmp_path, monkeypatch):
    maps, totals = data

    def refuse(*a, **k):
        raise OSError("network blocked by the test")

    monkeypatch.setattr(socket, "socket", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    drawn, notes = figureset.draw_all(maps, totals, width="one-column")
    assert [d.name for d in drawn] == ["fig_npp_maps", "fig_npp_difference",
                                       "fig_annual_totals", "fig_seasonal_cycle"]
    assert notes == []
    for d in drawn:
        files = figureset.save(d, tmp_path)
        assert all(p.stat().st_size > 0 for p in files)


def test_regional_panels_one_region_each(data):
    import matplotlib.pyplot as plt

    _, totals = data
    d = figureset.annual_series(totals, baseline=(2023, 2024))
    axes = d.artists["axes"]
    assert [ax.get_title(loc="left") for ax in axes] == ["Box", "North part"]
    assert all(ax.get_ylabel() == "Tg C yr$^{-1}$" for ax in axes)
    # each model a line, and the models' spread a band (two models ran)
    assert len(axes[0].get_lines()) >= 2 and len(axes[0].collections) >= 1
    plt.close(d.figure)
    d = figureset.seasonal_figure(totals, period=(2023, 2025))
    axes = d.artists["axes"]
    assert [ax.get_title(loc="left") for ax in axes] == ["Box", "North part"]
    assert [t.get_text() for t in axes[0].get_xticklabels()] == list("JFMAMJJASOND")
    plt.close(d.figure)


def test_manifest_entries_describe_each_file(three_years):
    man = json.loads((three_years / "euphotic_manifest.json").read_text())
    e = man["outputs"]["fig_npp_maps.caption.md"]
    assert e["kind"] == figureset.KIND and e["description"] == "caption of fig_npp_maps"


def test_a_failure_while_saving_changes_nothing(three_years, monkeypatch):
    out = three_years
    before = folder_bytes(out)
    calls = []
    real = figureset.save

    def failing(drawn, folder):
        calls.append(drawn.name)
        if len(calls) == 3:  # the third figure: two are already in the stage
            raise OSError(28, "No space left on device", str(folder / drawn.name))
        return real(drawn, folder)

    monkeypatch.setattr(figureset, "save", failing)
    res = CliRunner().invoke(main, ["figures", str(out)])
    assert res.exit_code == 1
    err = res.stderr.strip()  # one line, naming the file being written (in the stage)
    assert err.startswith(f"euphotic: error: {out}/") and "\n" not in err
    assert err.endswith("/fig_annual_totals: No space left on device")
    assert folder_bytes(out) == before  # the earlier set stays, nothing half-written
    assert _debris(out) == []


def test_a_short_run_without_regions_gets_the_maps_and_notes(tmp_path):
    cfg = monthly_case(tmp_path, 3, regions=())
    res = CliRunner().invoke(main, ["run", str(cfg), "-q"])
    assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["figures", str(out), "-q"])
    assert res.exit_code == 0, res.output
    assert res.stdout.splitlines() == [
        "note: no difference map: the run has a single year (give --baseline)",
        "note: no regional figures: the run has no regions"]
    man = _consistent(out)
    assert sorted(n for n, e in man["outputs"].items() if e["kind"] == figureset.KIND) == [
        "fig_npp_maps.caption.md", "fig_npp_maps.caption.txt", "fig_npp_maps.pdf",
        "fig_npp_maps.png"]
    cap = (out / "fig_npp_maps.caption.txt").read_text()
    assert "over 2023 " in cap and "VGPM (Behrenfeld & Falkowski 1997)" in cap
