"""Station match-ups: window extraction on a synthetic grid with a known answer (values are a
function of row, column and day), at the antimeridian, at grid edges, in polar night; only the
stored chunks holding stations are read; the command end to end on the demo."""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path

import dask.array as da
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from click.testing import CliRunner

from euphotic import models
from euphotic.cli import main
from euphotic.config import load_config, matchup_table
from euphotic.errors import ConfigError
from euphotic.matchup import DailyInputs, WindowOptions, extract, match, station_cells
from euphotic.models import ModelSpec, Parameter
from euphotic.models._compiled import jit_point
from euphotic.stations import MatchupOptionError, read_stations

from ._grids import run_config
from .conftest import ROOT, folder_bytes

DAYS = np.arange(np.datetime64("2025-06-01"), np.datetime64("2025-06-06"))  # 5 days
LAT = np.arange(-89.5, 90.0, 1.0)  # global 1-degree grid
LON = np.arange(-179.5, 180.0, 1.0)


def f(i, j, d):
    """The synthetic field: known at every (row, column, day)."""
    return 1.0 + 1000.0 * i + j + 0.01 * d


def _field(values=None, chunks=(1, 90, 90)) -> xr.DataArray:
    d, i, j = np.meshgrid(np.arange(len(DAYS)), np.arange(len(LAT)), np.arange(len(LON)),
                          indexing="ij")
    v = f(i, j, d) if values is None else values
    return xr.DataArray(da.from_array(v, chunks=chunks), dims=("time", "lat", "lon"),
                        coords={"lat": LAT, "lon": LON, "time": DAYS,
                                "period_start": ("time", DAYS),
                                "period_end": ("time", DAYS + np.timedelta64(1, "D"))})


@jit_point
def _ident_point(chl, par, sst, day_length):
    return 0.0 if day_length <= 0.0 else chl


def _ident_reference(chl, par, sst, day_length):
    return np.where(np.asarray(day_length) <= 0, 0.0, chl)


@pytest.fixture
def ident(monkeypatch):
    """A 'model' returning the chlorophyll field itself (0 where there is no daylight, the
    models' rule), so the expected window values are f(i, j, day)."""
    spec = ModelSpec(name="ident", label="ident", published_name="chlorophyll as NPP (tests)",
                     citation_keys=(), inputs=models.SPECS["vgpm"].inputs,
                     point=_ident_point, reference=_ident_reference)
    monkeypatch.setitem(models.SPECS, "ident", spec)
    monkeypatch.delitem(models._BUILT, "ident", raising=False)
    yield "ident"
    models._BUILT.pop("ident", None)


def _inputs(chl=None) -> DailyInputs:
    chl = _field() if chl is None else chl
    ocean = xr.DataArray(np.ones((len(LAT), len(LON)), bool), dims=("lat", "lon"),
                         coords={"lat": LAT, "lon": LON})
    return DailyInputs({"chl": chl, "par": _field(), "sst": _field()}, ocean)


def _at(lat, lon, day):
    return np.array([lat], float), np.array([lon], float), np.array([day], "datetime64[D]")


def test_interior_window_median_is_the_centre(ident):
    ex = extract(_inputs(), *_at(10.2, 20.3, "2025-06-03"), [ident])
    i, j = int(np.argmin(abs(LAT - 10.2))), int(np.argmin(abs(LON - 20.3)))
    v = ex.values[ident][0, 0]
    expected = f(np.arange(i - 1, i + 2)[:, None], np.arange(j - 1, j + 2)[None, :], 2)
    np.testing.assert_array_equal(v, expected)
    assert np.median(v) == f(i, j, 2)  # linear in i and j: the median is the centre
    assert not ex.cells.wraps[0] and not ex.cells.clipped[0]


@jit_point
def _scaled_point(chl, par, sst, day_length, k):
    return 0.0 if day_length <= 0.0 else chl * k


def _scaled_reference(chl, par, sst, day_length, k=1.0):
    return np.where(np.asarray(day_length) <= 0, 0.0, np.asarray(chl) * k)


def test_matchups_use_the_runs_parameters_per_region(monkeypatch):
    # A model with a per-region parameter k (chlorophyll x k): the match-up evaluates each
    # window cell with the value the run's [models.scaled] settings give that cell, as the maps
    # were made (euphotic.models.parameter_settings), not with the declared default.
    spec = ModelSpec(name="scaled", label="scaled", published_name="chlorophyll x k (tests)",
                     citation_keys=(), inputs=models.SPECS["vgpm"].inputs,
                     parameters=(Parameter("k", 1.0, "1", "test", per_region=True),),
                     point=_scaled_point, reference=_scaled_reference)
    monkeypatch.setitem(models.SPECS, "scaled", spec)
    monkeypatch.delitem(models._BUILT, "scaled", raising=False)
    east = np.broadcast_to(LON[None, :] >= 20.0, (len(LAT), len(LON)))
    inputs = _inputs()
    inputs.regions = {"East": east}
    inputs.settings = {"scaled": {"values": {"k": 2.0}, "regions": {"East": {"k": 3.0}}}}
    try:
        ex = extract(inputs, *_at(10.2, 20.3, "2025-06-03"), ["scaled"])
    finally:
        models._BUILT.pop("scaled", None)
    i, j = int(np.argmin(abs(LAT - 10.2))), int(np.argmin(abs(LON - 20.3)))
    cols = np.arange(j - 1, j + 2)
    expected = f(np.arange(i - 1, i + 2)[:, None], cols[None, :], 2) * np.where(
        LON[cols] >= 20.0, 3.0, 2.0)[None, :]  # columns 19.5 (k 2), 20.5 and 21.5 (k 3)
    np.testing.assert_allclose(ex.values["scaled"][0, 0], expected, rtol=1e-12)


def test_only_the_chunks_holding_stations_are_read(ident):
    ex = extract(_inputs(), *_at(10.2, 20.3, "2025-06-03"), [ident])
    # one day, a window inside one 90 x 90 block: one block of each of chl, par, sst
    assert ex.blocks_read == 3
    assert ex.blocks_total == 3 * 5 * 2 * 4


def test_antimeridian_window_wraps(ident):
    ex = extract(_inputs(), *_at(0.2, 179.9, "2025-06-01"), [ident])
    i = int(np.argmin(abs(LAT - 0.2)))
    cols = np.array([358, 359, 0])
    np.testing.assert_array_equal(ex.values[ident][0, 0],
                                  f(np.arange(i - 1, i + 2)[:, None], cols[None, :], 0))
    assert ex.cells.wraps[0] and not ex.cells.clipped[0]
    # -180.3 is the same place as 179.7
    assert station_cells(LAT, LON, [0.2], [-180.3], 3).col[0] == 359


def test_grid_edge_window_is_clipped_and_polar_night_is_zero(ident):
    # 89.9 N in June: polar day, the window loses its row beyond the pole
    ex = extract(_inputs(), *_at(89.9, 0.4, "2025-06-02"), [ident])
    v = ex.values[ident][0, 0]
    assert np.isnan(v[2]).all() and np.isfinite(v[:2]).all()
    assert ex.cells.clipped[0]
    # 89.9 S in June: polar night, the model's rate is 0 (no light, no production)
    ex = extract(_inputs(), *_at(-89.9, 0.4, "2025-06-02"), [ident])
    v = ex.values[ident][0, 0]
    assert (v[1:] == 0).all() and np.isnan(v[0]).all()
    assert ex.dark[0, 0].all()


def _table(rows) -> pd.DataFrame:
    return pd.DataFrame([{"station": s, "lat": la, "lon": lo, "date": d, "value": "100",
                          "units": "mg C m-2 d-1", "method": "c14"} for s, la, lo, d in rows])


def test_reasons_in_the_match_up_table(ident):
    chl = _field()
    v = chl.values.copy()
    v[:, 120:123, 60:63] = np.nan  # a cloud over one station's whole window
    v[:, 130, 70] = np.nan  # one cloudy cell in another's: 8 of 9 still valid
    v[:, 140:143, 80:83] *= np.array([1, 5, 1])  # a patchy window (CV well above 0.15)
    rows = [("ok", LAT[130], LON[70], "2025-06-02"),
            ("cloud", LAT[121], LON[61], "2025-06-02"),
            ("late", 10.0, 10.0, "2025-07-01"),
            ("dark", -89.9, 0.0, "2025-06-02"),
            ("patchy", LAT[141], LON[81], "2025-06-02"),
            ("edge", 89.9, 0.4, "2025-06-02")]
    st = read_stations(_table(rows))
    inputs = _inputs(chl.copy(data=da.from_array(v, chunks=(1, 90, 90))))
    t = match(st, inputs, [ident], opts=WindowOptions(max_cv=0.15)).table.set_index("station")
    assert t.loc["ok", "reason"] == "" and t.loc["ok", "window_n_valid"] == 8
    assert t.loc["ok", "daily_mgC_m-2_d-1"] == np.median(
        [f(r, c, 1) for r in (129, 130, 131) for c in (69, 70, 71) if (r, c) != (130, 70)])
    assert t.loc["cloud", "reason"] == "too_few_valid" and t.loc["cloud", "window_n_valid"] == 0
    assert t.loc["late", "reason"] == "outside_period"
    assert t.loc["dark", "reason"] == "polar_night" and t.loc["dark", "daily_mgC_m-2_d-1"] == 0
    assert t.loc["patchy", "reason"] == "heterogeneous"
    assert t.loc["edge", "reason"] == "" and t.loc["edge", "window_n_valid"] == 6
    assert t.loc["edge", "window_notes"] == "window clipped at the grid edge (6 of 9 cells)"


def test_day_window_and_outside_grid(ident):
    regional = _field().isel(lat=slice(100, 140), lon=slice(100, 160))
    ocean = xr.DataArray(np.ones(regional.shape[1:], bool), dims=("lat", "lon"),
                         coords={"lat": regional.lat, "lon": regional.lon})
    inputs = DailyInputs({"chl": regional, "par": regional, "sst": regional}, ocean)
    # +-1 day on the first day of the period: the day before is not covered (not valid)
    ex = extract(inputs, *_at(float(LAT[120]), float(LON[130]), "2025-06-01"), [ident],
                 WindowOptions(days=1))
    v = ex.values[ident][0]
    assert np.isnan(v[0]).all() and np.isfinite(v[1:]).all()
    # the sub-grid keeps the global field's values: its row 20 is global row 120
    np.testing.assert_array_equal(v[2, 1], f(120, np.array([129, 130, 131]), 1))
    # west of a regional grid: not on it; at its west edge: clipped, not wrapped
    cells = station_cells(regional.lat.values, regional.lon.values, [LAT[120], LAT[120]],
                          [LON[90], LON[100]], 3)
    assert list(cells.inside) == [False, True]
    assert cells.clipped[1] and not cells.wraps[1]


def test_window_options_are_checked():
    with pytest.raises(MatchupOptionError, match=r"^window: expected an odd"):
        WindowOptions(window=4)
    with pytest.raises(MatchupOptionError, match=r"^min_valid: expected 1\.\.9"):
        WindowOptions(min_valid=10)
    assert WindowOptions().need == 5 and WindowOptions(window=5, days=1).need == 38


# ---- the command on the demo ----------------------------------------------------------------

STATIONS = ROOT / "sample_grids" / "stations" / "maren_stations.csv"


@pytest.fixture
def demo(demo_run, tmp_path):
    out = tmp_path / "demo"
    shutil.copytree(demo_run, out)
    return out


def test_matchup_on_the_demo(demo):
    res = CliRunner().invoke(main, ["matchup", str(demo), "--stations", str(STATIONS)])
    assert res.exit_code == 0, res.output
    assert "Over all stations the VGPM estimate is within a factor of 2 of carbon-14" in res.output
    # groups of 2 stations (oxygen in Skerrow Shelf) get no correlation: r = +-1 by construction
    two = [ln for ln in res.output.splitlines()
           if ln.startswith("- In Skerrow Shelf the VGPM") and "at 2 of 2 stations" in ln]
    assert two and all(", r = " not in ln for ln in two)
    manifest = json.loads((demo / "euphotic_manifest.json").read_text())
    mine = sorted(n for n, e in manifest["outputs"].items() if e.get("kind") == "matchup")
    assert mine == ["matchup_scatter.pdf", "matchup_scatter.png", "matchup_statistics.csv",
                    "matchup_summary.md", "matchup_table.csv", "matchup_target.pdf",
                    "matchup_target.png"]
    assert manifest["added"][-1]["command"].startswith("euphotic matchup ")
    with open(demo / "matchup_table.csv") as fh:
        table = list(csv.DictReader(fh))
    bad = {r["bad_reason"] for r in table if r["reason"] == "bad_row"}
    assert bad == {"unknown_units", "unknown_method", "bad_lat", "bad_date",
                   "negative_production", "depth_order"}
    reasons = {r["station"]: r["reason"] for r in table if r["model"] == "vgpm"}
    assert reasons["MS901"] == "outside_grid" and reasons["MS902"] == "outside_period"
    # the demo's truth (scripts/make_sample_stations.py): measured = VGPM x 0.8 x noise, so
    # the VGPM bias is -log10(0.8) = +0.097 within the noise: inside the bootstrap interval
    with open(demo / "matchup_statistics.csv") as fh:
        stats = {(r["model"], r["estimate"], r["group"]): r for r in csv.DictReader(fh)}
    s = stats[("vgpm", "daily", "c14 and o2")]
    assert int(s["n"]) == 34
    assert float(s["bias_low"]) <= -np.log10(0.8) <= float(s["bias_high"])
    assert (demo / "matchup_scatter.png").stat().st_size > 20_000


def test_errors_are_one_line_and_write_nothing(demo, tmp_path):
    before = folder_bytes(demo)
    other = tmp_path / "other.csv"
    other.write_text("name,value\nx,1\n")
    config = json.loads((demo / "euphotic_manifest.json").read_text())["config"]
    no_table = tmp_path / "no_matchup.toml"  # the run's config without its [matchup] table
    here = Path(config).parent
    no_table.write_text(Path(config).read_text().split("[matchup]")[0]
                        .replace('"../', f'"{here.parent}/').replace('"regions/', f'"{here}/regions/'))
    for args, message in (
        (["--stations", str(tmp_path / "gone.csv")],
         f"euphotic: error: {tmp_path / 'gone.csv'}: no such station file\n"),
        (["--stations", str(other)],
         f"euphotic: error: {other}: not a station table: missing column(s) station, lat, lon, "
         "units, method, date (or start) (required: station, lat, lon, value, units, method, "
         "and date or start)\n"),
        (["--stations", str(STATIONS), "--window", "4"],
         "euphotic: error: window: expected an odd whole number of cells >= 1, not 4\n"),
        (["--config", str(no_table)],
         f"euphotic: error: {demo}: no station file: give --stations FILE.csv or `stations` in "
         f"the [matchup] table of {no_table}\n"),
    ):
        res = CliRunner().invoke(main, ["matchup", str(demo), *args])
        assert res.exit_code == 1, res.output
        # one error line; the run's config may add its notes (warnings) before it, e.g. an
        # input that no model of the demo uses
        errors = [ln for ln in res.stderr.splitlines(keepends=True)
                  if not ln.startswith("euphotic: warning: ")]
        assert errors == [message]
        assert folder_bytes(demo) == before


def test_a_new_matchup_replaces_the_set(demo):
    # the demo config's [matchup] table names the station file
    r = CliRunner().invoke(main, ["matchup", str(demo), "-q"])
    assert r.exit_code == 0, r.output
    assert (demo / "matchup_scatter.png").exists()
    r = CliRunner().invoke(main, ["matchup", str(demo), "--stations", str(STATIONS),
                                  "--no-figures", "--days", "1", "-q"])
    assert r.exit_code == 0, r.output
    manifest = json.loads((demo / "euphotic_manifest.json").read_text())
    assert "matchup_scatter.png" not in manifest["outputs"]
    assert not (demo / "matchup_scatter.png").exists()
    with open(demo / "matchup_table.csv") as fh:
        assert {r["window_n_cells"] for r in csv.DictReader(fh) if r["model"]} == {"27"}


def test_matchup_config_table(tmp_path):
    cfg = run_config(tmp_path / "run.toml",
                     extra='[matchup]\nstations = "st.csv"\nwindow = 5\nquotient = "ammonium"\n')
    load_config(cfg)  # accepted, and read by matchup_table
    assert matchup_table(cfg) == {"stations": (tmp_path / "st.csv").resolve(), "window": 5,
                         "quotient": "ammonium"}
    run_config(cfg, extra="[matchup]\nwindow = 4\n")
    with pytest.raises(ConfigError) as err:
        load_config(cfg)
    assert str(err.value) == (f"{cfg} [matchup]: `window` must be an odd whole number of cells "
                              ">= 1 (e.g. 3), not 4")


@pytest.mark.slow
def test_extraction_benchmark_runs_tiny(tmp_path):
    """benchmarks/matchup_extract.py end to end at a tiny size (figures are for its printed
    report, not asserted)."""
    import subprocess
    import sys

    cmd = [sys.executable, str(ROOT / "benchmarks" / "matchup_extract.py"), "--res", "1/2",
           "--days", "2", "--stations", "40", "--data", str(tmp_path / "data"),
           "--work", str(tmp_path / "work")]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=300, check=False)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "reference: every chunk read once" in res.stdout
    for layout in ("uniform", "cruises"):
        assert f"{layout}: 40 stations:" in res.stdout


def test_the_report_shows_the_matchups(demo):
    """The April demo's [matchup] step leaves its outputs in the run; the report embeds both
    match-up figures (byte for byte), their captions and the summary sentences."""
    import base64
    import re

    res = CliRunner().invoke(main, ["report", str(demo)])
    assert res.exit_code == 0, res.output
    page = (demo / "report.html").read_text()
    assert "<h2>Station match-ups</h2>" in page
    assert "<li>Over all stations the VGPM estimate is within a factor of 2 of carbon-14" in page
    for png in ("matchup_scatter.png", "matchup_target.png"):
        m = re.search(rf'<img src="data:image/png;base64,([^"]+)" alt="{png}">', page)
        assert m and base64.b64decode(m.group(1)) == (demo / png).read_bytes()
    assert "Target diagram (Jolliff et al. 2009)" in page
