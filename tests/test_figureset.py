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

STEMS = ("fig_npp_maps", "fig_npp_difference", "fig_npp_baseline_period_change",
         "fig_npp_ratio", "fig_annual_totals", "fig_seasonal_cycle", "fig_totals_coverage",
         "fig_monthly_totals")
SET_NAMES = sorted(f"{stem}.{ext}" for stem in STEMS
                   for ext in ("png", "pdf", "caption.md", "caption.txt"))
#: The inputs of ``three_years`` as every caption must name them: the manifest's files as a
#: pattern with their count, the periods and units the maps record (36 monthly composites
#: written by tests/_grids.py::monthly_case, 2023-01 to 2025-12; worked out by hand).
INPUT_LINES = (
    "chl, surface chlorophyll-a concentration: chl/c*.nc (36 files, c00.nc to c35.nc); "
    "36 periods of 28 to 31 days, 2023-01-01 to 2025-12-31; in mg m-3",
    "par, daily photosynthetically available radiation (PAR): par/p*.nc (36 files, p00.nc to "
    "p35.nc); 36 periods of 28 to 31 days, 2023-01-01 to 2025-12-31; in einstein m-2 day-1",
    "sst, sea surface temperature: sst/s*.nc (36 files, s00.nc to s35.nc); 36 periods of 28 "
    "to 31 days, 2023-01-01 to 2025-12-31; in degC",
)


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
    assert sorted(res.stdout.split()) == sorted(["wrote"] * 32 + [str(out / n) for n in SET_NAMES])

    for stem in STEMS:
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
            for line in INPUT_LINES:  # the inputs, with their files and periods
                assert (f"- {line}\n" if ext == "md" else f"  {line}\n") in cap
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
    for stem in STEMS:
        with Image.open(out / f"{stem}.png") as im:
            assert abs(im.size[0] - _px(85)) < 1.0
            assert im.info["dpi"] == pytest.approx((300, 300), abs=0.01)
            assert np.asarray(im.convert("L"), dtype=float).std() > 20
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


def test_map_panels_share_one_log_norm_with_a_labelled_colourbar(data, three_years):
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
    assert titles[0] == "VGPM"  # the published short name; the caption gives name and citation
    assert "vgpm" not in " ".join(titles)  # not the internal ids
    cap, _ = figureset.caption_texts(d, maps, min_coverage=0.5, folder=three_years)
    assert "VGPM: VGPM (Behrenfeld & Falkowski 1997); " in cap
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
    drawn, notes = figureset.draw_all(maps, totals, width="one-column",
                                      regions=results.open_region_masks(maps.attrs[
                                          "euphotic_folder"]))
    assert [d.name for d in drawn] == list(STEMS)
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
        if len(calls) == 5:  # the fifth figure: four are already in the stage
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


# --------------------------------------------------------------------------------------------
# region outlines and names, ratio maps, panels A | B | change


def _synthetic_maps(lat, lon, *, models=("vgpm",), years=(2020, 2021), npp=None, cov=None):
    """A maps Dataset in the layout of results.open_maps (one value a year, repeated for its
    12 months): invented values, ``npp[model][year]`` and ``cov[model][year]`` (lat, lon)."""
    import xarray as xr

    months = np.array([np.datetime64(f"{y}-{m:02d}-01", "ns") for y in years
                       for m in range(1, 13)])
    shape = (len(lat), len(lon))
    npp = npp or {m: {y: np.full(shape, 300.0) for y in years} for m in models}
    cov = cov or {m: {y: np.ones(shape) for y in years} for m in models}
    stack = [[npp[m][int(str(t)[:4])] for t in months] for m in models]
    cstack = [[cov[m][int(str(t)[:4])] for t in months] for m in models]
    attrs = {f"model_name_{m}": f"Model {m}" for m in models}
    attrs.update({f"citation_{m}": f"Citation of {m}" for m in models})
    return xr.Dataset(
        {"npp": (("model", "time", "lat", "lon"), np.array(stack, dtype=float)),
         "coverage": (("model", "time", "lat", "lon"), np.array(cstack, dtype=float))},
        coords={"model": list(models), "time": months + np.timedelta64(14, "D"),
                "month": ("time", months), "lat": lat, "lon": lon}, attrs=attrs)


def _inside(ax, artist_paths) -> bool:
    """Every vertex of the paths, in display units, inside the axes' box (1 px slack)."""
    box = ax.get_window_extent()
    for path, trans in artist_paths:
        xy = trans.transform(path.vertices)
        if not ((xy[:, 0] >= box.x0 - 1).all() and (xy[:, 0] <= box.x1 + 1).all()
                and (xy[:, 1] >= box.y0 - 1).all() and (xy[:, 1] <= box.y1 + 1).all()):
            return False
    return True


def test_region_outlines_and_names_on_every_map_figure(data, three_years):
    import matplotlib.pyplot as plt

    maps, _ = data
    regions = results.open_region_masks(three_years)
    assert list(regions) == ["Box", "North part"]
    kw = {"period": (2025, 2025), "baseline": (2023, 2024), "regions": regions}
    figures = [figureset.map_panels(maps, period=(2023, 2025), regions=regions),
               figureset.difference_map(maps, **kw), figureset.ratio_map(maps, **kw),
               figureset.comparison_panels(maps, **kw)]
    for d in figures:
        # one outline artist per region on every panel
        assert d.artists["outlines"] and all(len(o) == 2 for o in d.artists["outlines"])
        names = {t.get_text(): t for t in d.artists["region_names"]}
        assert sorted(names) == ["Box", "North part"]
        # "Box" is the whole 40-50 N, 30-20 W domain: named in a corner label (axes
        # coordinates), "North part" (45-50 N) at a point inside it (map coordinates)
        assert names["Box"].get_transform() == names["Box"].axes.transAxes
        x, y = names["North part"].get_position()
        assert -30 < x < -20 and 45 < y < 50
        assert "Coloured outlines: the run's regions (Box, North part)" in d.caption
        plt.close(d.figure)


def test_more_than_thirty_regions_are_not_outlined_and_the_caption_says_so(data):
    import matplotlib.pyplot as plt

    maps, _ = data
    shape = (maps.sizes["lat"], maps.sizes["lon"])
    many = {f"zone {i}": np.zeros(shape, bool) for i in range(31)}
    for i, m in enumerate(many.values()):
        m[i % shape[0], :] = True
    d = figureset.map_panels(maps, period=(2023, 2025), regions=many)
    assert all(o == [] for o in d.artists["outlines"]) and d.artists["region_names"] == []
    assert "The run's 31 regions are not outlined (more than 30)" in d.caption
    plt.close(d.figure)
    thirty = dict(list(many.items())[:30])  # the control: 30 are outlined
    d = figureset.map_panels(maps, period=(2023, 2025), regions=thirty)
    assert [len(o) for o in d.artists["outlines"]] == [30, 30]
    plt.close(d.figure)


@pytest.mark.parametrize("projection", ["equal-area", "latlon"])
def test_outlines_across_the_antimeridian_stay_on_the_map(projection):
    import matplotlib.pyplot as plt

    # invented grid over the antimeridian, 0-360 longitudes (as the readers wrap such grids)
    lat = np.arange(-9.5, 10, 1.0)
    lon = np.arange(170.5, 190, 1.0)
    east = np.zeros((20, 20), bool)
    east[5:15, 11:17] = True  # 181-187 E, i.e. 179-173 W
    west = np.zeros((20, 20), bool)
    west[2:8, 1:9] = True  # 171-179 E
    maps = _synthetic_maps(lat, lon, years=(2020,))
    d = figureset.map_panels(maps, period=(2020, 2020), projection=projection,
                             regions={"East of the line": east, "West of the line": west})
    d.figure.canvas.draw()
    ax = d.artists["axes"][0]
    outlines = d.artists["outlines"][0]
    assert len(outlines) == 2
    for cs in outlines:
        paths = [(p, cs.get_transform()) for p in cs.get_paths()]
        assert paths and _inside(ax, paths)
    texts = d.artists["region_names"]
    assert sorted(t.get_text() for t in texts) == ["East of the line", "West of the line"]
    box = ax.get_window_extent()
    for t in texts:  # the names' anchors on the map, not on the other side of the globe
        x, y = t.get_transform().transform(t.get_position())
        assert box.x0 <= x <= box.x1 and box.y0 <= y <= box.y1
    plt.close(d.figure)


def test_ratio_limits_hand_worked():
    # |ln r| percentiles worked out by hand: 2 and 1/2 -> f = 2, ticks 1/2, 1/1.5, 1, 1.5, 2
    f, ticks = figureset.ratio_limits(np.array([0.5, 1.0, 2.0]))
    assert f == 2.0 and ticks == pytest.approx([0.5, 1 / 1.5, 1.0, 1.5, 2.0])
    assert figureset.ratio_limits(np.array([1.08, 1 / 1.08]))[0] == 1.1
    assert figureset.ratio_limits(np.array([1.3, np.nan, 0.0, np.inf]))[0] == 1.5
    assert figureset.ratio_limits(np.array([50.0]))[0] == 10.0  # beyond the ladder: 10


def test_ratio_map_is_centred_on_one_with_symmetric_log_limits():
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm

    lat, lon = np.arange(40.5, 50, 1.0), np.arange(-29.5, -20, 1.0)
    shape = (10, 10)
    base = np.full(shape, 200.0)
    later = base * np.linspace(0.6, 1.6, 100).reshape(shape)  # invented: 0.6 to 1.6 times
    later[0, 0] = base[0, 0] * 5  # beyond the limits at both ends: extend arrows
    later[0, 1] = base[0, 1] * 0.2
    other = later * 0.9
    maps = _synthetic_maps(lat, lon, models=("a", "b"), years=(2020, 2021),
                           npp={"a": {2020: base, 2021: later}, "b": {2020: base, 2021: other}})
    d = figureset.ratio_map(maps, period=(2021, 2021), baseline=(2020, 2020))
    norm = d.artists["norm"]
    assert isinstance(norm, LogNorm)
    assert norm(1.0) == pytest.approx(0.5)  # centred on one
    assert norm.vmin * norm.vmax == pytest.approx(1.0)  # symmetric on the log scale
    assert (norm.vmin, norm.vmax) == pytest.approx((0.5, 2.0))
    assert [t for t in d.artists["colorbar"].get_ticks()] == pytest.approx(
        [0.5, 1 / 1.5, 1.0, 1.5, 2.0])
    assert [t.get_text() for t in d.artists["colorbar"].ax.get_xticklabels()] == [
        "0.5", "0.67", "1", "1.5", "2"]
    assert d.artists["extend"] == "both" and d.artists["colorbar"].extend == "both"
    assert all(m.norm is norm for m in d.artists["meshes"])
    # period / baseline for each model, then model b / model a over the period
    assert len(d.artists["meshes"]) == 3
    np.testing.assert_allclose(d.artists["ratios"][0], later / base)
    np.testing.assert_allclose(d.artists["ratios"][2], other / later)
    assert d.artists["colorbar"].ax.get_xlabel() == (
        "ratio of net primary production (dimensionless, logarithmic scale)")
    assert "Model b / Model a" in d.caption
    # 98th percentile of |ln r| over the three panels (numpy) within ln 2, beyond ln 1.5
    r = np.concatenate([x.ravel() for x in d.artists["ratios"]])
    assert np.log(1.5) < np.percentile(np.abs(np.log(r)), 98) <= np.log(2.0)
    assert np.asarray(_rgb(d.figure), dtype=float).std() > 20
    plt.close(d.figure)


def test_baseline_period_change_panels_share_one_scale(data):
    import matplotlib.pyplot as plt

    maps, _ = data
    d = figureset.comparison_panels(maps, period=(2025, 2025), baseline=(2023, 2024))
    norm, dnorm = d.artists["norm"], d.artists["diff_norm"]
    assert [len(row) for row in d.artists["axes"]] == [3, 3]  # A | B | change per model
    assert len(d.artists["means"]) == 4 and all(m.norm is norm for m in d.artists["means"])
    assert all(m.norm is dnorm for m in d.artists["changes"])
    # A and B together set the limits: 2nd and 98th percentiles (numpy.percentile) of the
    # positive means of both periods and both models
    years = maps["month"].dt.year.values
    vals = np.concatenate([maps["npp"].isel(time=np.flatnonzero(sel)).mean("time").values.ravel()
                           for sel in ((years == 2025), (years <= 2024))])
    pos = vals[np.isfinite(vals) & (vals > 0)]
    assert (norm.vmin, norm.vmax) == pytest.approx(tuple(np.percentile(pos, [2, 98])))
    assert dnorm.vmin == -dnorm.vmax and dnorm(0.0) == pytest.approx(0.5)
    assert d.artists["colorbar"].ax.get_xlabel() == figureset.NPP_LABEL
    assert d.artists["diff_colorbar"].ax.get_xlabel() == "change (%)"
    assert np.asarray(_rgb(d.figure), dtype=float).std() > 20
    plt.close(d.figure)


# --------------------------------------------------------------------------------------------
# totals chart with coverage, monthly series


def _low_by_hand(totals, min_coverage):
    cov = totals["coverage"].values
    flag = np.vectorize(lambda f: "low_coverage" in f.split(";"))(totals["flag"].values)
    return (cov < min_coverage) | flag


def test_totals_chart_marks_low_coverage_months(data):
    import matplotlib.pyplot as plt

    _, totals = data
    t = totals.copy(deep=True)
    # synthetic low coverage: North part, 2024-03, both models (0.2 of the days), and Box,
    # 2024-07, the second model only
    t["coverage"].loc[{"region": "North part", "month": np.datetime64("2024-03-01", "ns")}] = 0.2
    t["coverage"].loc[{"region": "Box", "month": np.datetime64("2024-07-01", "ns"),
                       "model": "eppley_vgpm"}] = 0.3
    expected = int(_low_by_hand(t, 0.5).sum())
    assert expected >= 3
    d = figureset.totals_chart(t, min_coverage=0.5)
    assert len(d.artists["low_bars"]) == expected == d.artists["n_low"]
    assert all(b.get_hatch() == "xxxx" for b in d.artists["low_bars"])
    marks = d.artists["low_marks"]
    assert sum(len(m.get_offsets()) for m in marks if m is not None) == expected
    axes = d.artists["axes"]
    assert [ax.get_title(loc="left") for ax in axes] == ["Box", "North part"]
    assert all(ax.get_ylabel() == "Tg C month$^{-1}$" for ax in axes)
    # one bar per model and month on each panel (side by side)
    assert len(axes[0].patches) == 2 * t.sizes["month"]
    cb = d.artists["colorbar"]
    assert cb.ax.get_xlabel().replace("\n", " ") == (
        "region coverage (fraction of the month's days with data, 1)")
    assert all(m.norm is d.artists["coverage_norm"] for m in d.artists["strip_meshes"])
    assert "coverage is below 0.5" in d.caption
    plt.close(d.figure)
    # the control: nothing low, nothing marked
    ok = totals.copy(deep=True)
    ok["coverage"][:] = 1.0
    ok["flag"][:] = ""
    d = figureset.totals_chart(ok, min_coverage=0.5)
    assert d.artists["low_bars"] == [] and all(m is None for m in d.artists["low_marks"])
    plt.close(d.figure)


def test_totals_chart_spreads_many_models(data):
    import matplotlib.pyplot as plt
    import xarray as xr

    _, totals = data
    four = xr.concat([totals.assign_coords(model=[f"{m}_{k}" for m in totals["model"].values])
                      for k in range(2)], "model")
    d = figureset.totals_chart(four, period=(2024, 2024))
    ax = d.artists["axes"][0]
    assert len(ax.patches) == 12  # one bar (the mean across models) a month
    assert len(ax.containers) == 2  # the bars and the min-max whiskers
    assert "the mean across 4 models" in d.caption
    plt.close(d.figure)


def test_monthly_series_band_climatology_and_low_marks(data):
    import matplotlib.pyplot as plt

    _, totals = data
    t = totals.copy(deep=True)
    t["coverage"].loc[{"month": np.datetime64("2025-02-01", "ns")}] = 0.1
    d = figureset.monthly_series(t, baseline=(2023, 2024), min_coverage=0.5)
    axes = d.artists["axes"]
    assert [ax.get_title(loc="left") for ax in axes] == ["Box", "North part"]
    assert all(ax.get_ylabel() == "Tg C month$^{-1}$" for ax in axes)
    assert all(s is not None for s in d.artists["spread"])  # two models: a band
    low = _low_by_hand(t, 0.5)
    for i, m in enumerate(d.artists["low_marks"]):
        assert len(m.get_offsets()) == int(low[i].sum())
    # the climatology behind: its top edge in January is the baseline's largest January
    # (mean across models), from numpy by hand
    jan = t["total"].mean("model").sel(region="Box").values[[0, 12]]
    verts = d.artists["climatology"][0].get_paths()[0].vertices
    assert verts[:, 1].max() >= jan.max() - 1e-9
    legend = [x.get_text().replace("\n", " ") for x in d.figure.legends[0].get_texts()]
    assert "baseline 2023-2024: range by calendar month" in legend
    assert "spread across models (lowest to highest)" in legend
    plt.close(d.figure)
    one = figureset.monthly_series(totals.isel(model=[0]), baseline=(2023, 2024))
    assert one.artists["spread"] == [None, None]
    plt.close(one.figure)


def test_a_region_mask_on_another_grid_is_one_clear_error(data):
    maps, _ = data
    shape = (maps.sizes["lat"], maps.sizes["lon"])
    with pytest.raises(figureset.FigureOptionError) as exc:
        figureset.region_layer({"Odd": np.zeros((3, 4), bool)}, maps["lat"].values,
                               maps["lon"].values)
    assert str(exc.value) == (f"region 'Odd': mask of shape (3, 4) is not on the maps' grid "
                              f"({shape[0]} x {shape[1]} cells)")


def test_a_run_without_region_masks_gets_figures_without_outlines(tmp_path, monkeypatch):
    from euphotic.errors import NoRunError

    cfg = monthly_case(tmp_path, 3, regions=(("Box", [-30.0, 40.0, -20.0, 50.0]),))
    assert CliRunner().invoke(main, ["run", str(cfg), "-q"]).exit_code == 0
    out = tmp_path / "out"

    def no_masks(folder):  # stands for a run from before regions.nc was written
        raise NoRunError(f"{folder}: the run recorded no region masks")

    monkeypatch.setattr(results, "open_region_masks", no_masks)
    res = CliRunner().invoke(main, ["figures", str(out), "-q"])
    assert res.exit_code == 0, res.output
    assert (f"note: no region outlines on the maps: {out}: the run recorded no region masks"
            in res.stdout.splitlines())
    assert "Coloured outlines" not in (out / "fig_npp_maps.caption.txt").read_text()
    assert (out / "fig_totals_coverage.png").is_file()


def test_a_global_domain_is_drawn_in_an_equal_area_world_projection():
    """A whole-globe grid in the Lambert azimuthal projection centred on it folds into a thin
    line; wide domains use Equal Earth (equal-area) and say so in the caption text. A
    regional domain keeps the Lambert azimuthal projection."""
    import cartopy.crs as ccrs

    from euphotic.figureset import _projection, _projection_text

    glat, glon = np.arange(-89.0, 90.0, 2.0), np.arange(-179.0, 180.0, 2.0)
    assert isinstance(_projection("equal-area", glat, glon), ccrs.EqualEarth)
    assert _projection_text("equal-area", glat, glon) == "Equal Earth projection (equal-area)."
    rlat, rlon = np.arange(40.25, 60.0, 0.5), np.arange(-35.75, -14.0, 0.5)
    assert isinstance(_projection("equal-area", rlat, rlon), ccrs.LambertAzimuthalEqualArea)
    assert isinstance(_projection("latlon", glat, glon), ccrs.PlateCarree)
