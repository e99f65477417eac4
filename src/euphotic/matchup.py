"""Station match-ups: model estimates at the places and days of production measured at sea.

For each measurement (see :mod:`euphotic.stations`) the model is evaluated **daily**, from the
run's own inputs (as :func:`euphotic.pipeline.prepare` opens them: regridded onto the
chlorophyll grid, dates and units converted), on a window of cells (``window`` x ``window``,
odd, default 3) and days (the station day +- ``days``, default 0) around the station; the
estimate is the median of the valid cells, kept when at least ``min_valid`` cells are valid
and (optionally) their coefficient of variation is at most ``max_cv``. The rule follows the
ocean-colour match-up protocol of Bailey and Werdell (2006) (from memory: 5 x 5 windows, more
than half of the cells valid, a coefficient-of-variation filter of 0.15); the defaults here
are a 3 x 3 window, more than half of the cells valid and no CV filter.

Only the stored chunks that hold a station's window are read: the window values of every
station are gathered with dask's vectorised point indexing (``vindex``) in one graph, which
touches only the blocks those points fall in, and the model runs on the gathered values.

The monthly-map value at the station cell (from the run's maps,
:func:`euphotic.results.open_maps`) is listed beside the daily estimate.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field

import dask
import dask.array as da
import numpy as np
import pandas as pd
import xarray as xr

from euphotic import skill as sk
from euphotic.aggregate import day_to_period
from euphotic.errors import EuphoticError
from euphotic.geo import day_length_from_declination, solar_declination
from euphotic.models import get_model, parameter_settings
from euphotic.roles import GRID_ROLE
from euphotic.stations import MatchupOptionError, StationTable

log = logging.getLogger("euphotic")

#: Default window: 3 x 3 cells (Bailey and Werdell 2006 used 5 x 5 on 1-km ocean-colour
#: pixels, from memory; 3 x 3 cells of a 4-9 km grid cover a similar or larger area).
DEFAULT_WINDOW = 3
#: Default day window: the station day only.
DEFAULT_DAYS = 0


def default_min_valid(n_cells: int) -> int:
    """More than half of the window's cells (Bailey and Werdell 2006, from memory: at least
    50 % of the pixels valid)."""
    return n_cells // 2 + 1


@dataclass(frozen=True)
class WindowOptions:
    """How a station's window is taken (see the module docstring)."""

    window: int = DEFAULT_WINDOW
    days: int = DEFAULT_DAYS
    min_valid: int | None = None
    max_cv: float | None = None

    def __post_init__(self):
        if not isinstance(self.window, int) or self.window < 1 or self.window % 2 == 0:
            raise MatchupOptionError(f"window: expected an odd whole number of cells >= 1, "
                                     f"not {self.window!r}")
        if not isinstance(self.days, int) or not 0 <= self.days <= 15:
            raise MatchupOptionError(f"days: expected a whole number of days 0..15 on each "
                                     f"side, not {self.days!r}")
        if self.min_valid is not None and not 1 <= self.min_valid <= self.n_cells:
            raise MatchupOptionError(f"min_valid: expected 1..{self.n_cells} (cells of a "
                                     f"{self.window} x {self.window} x {2 * self.days + 1}-day "
                                     f"window), not {self.min_valid!r}")
        if self.max_cv is not None and not self.max_cv > 0:
            raise MatchupOptionError(f"max_cv: expected a number > 0, not {self.max_cv!r}")

    @property
    def n_cells(self) -> int:
        return self.window * self.window * (2 * self.days + 1)

    @property
    def need(self) -> int:
        return self.min_valid if self.min_valid is not None else default_min_valid(self.n_cells)

    def text(self) -> str:
        cv = f", coefficient of variation <= {self.max_cv:g}" if self.max_cv else ""
        days = "the station day" if self.days == 0 else f"the station day +- {self.days} d"
        return (f"median of the valid cells of a {self.window} x {self.window}-cell window over "
                f"{days}, at least {self.need} of {self.n_cells} cells valid{cv} (after Bailey "
                "and Werdell 2006)")


@dataclass
class DailyInputs:
    """The run's inputs on the chlorophyll grid (lazy), as the models take them: ``inputs``
    maps each configured role (:mod:`euphotic.roles`) to its field."""

    inputs: dict[str, xr.DataArray]
    ocean: xr.DataArray  # bool (lat, lon), numpy- or dask-backed
    regions: object | None = None  # aggregate.RegionMasks: name -> (lat, lon) bool
    #: the run's ``[models.<name>]`` settings (see :func:`euphotic.models.parameter_settings`):
    #: match-ups evaluate each model with the parameters its maps were made with
    settings: dict = field(default_factory=dict)

    @property
    def chl(self) -> xr.DataArray:
        """The input whose grid the others are on (:data:`euphotic.roles.GRID_ROLE`)."""
        return self.inputs[GRID_ROLE]

    @property
    def day_length(self) -> xr.DataArray | None:
        return self.inputs.get("day_length")

    @classmethod
    def from_config(cls, cfg) -> DailyInputs:
        """Open a run configuration's inputs as ``euphotic run`` does (nothing is computed
        but the ocean and region masks)."""
        from euphotic.pipeline import prepare

        prep = prepare(cfg)
        return cls(dict(prep.inputs), prep.ocean,
                   prep.region_masks if prep.region_masks.names else None,
                   dict(cfg.model_settings))

    def parameters(self, model: str) -> dict:
        """Parameter name -> value (a number, a choice's name, or a (lat, lon) array where
        regions set their own) of ``model`` in this run."""
        return parameter_settings(model, self.settings.get(model), self.regions)


def model_inputs(model: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(required, optional) input roles of a model, from its declaration."""
    from euphotic.config import input_roles

    return input_roles([model])


# ---- the grid around a station ---------------------------------------------------------------


@dataclass
class Cells:
    """Where each station falls on the grid and its window's rows and columns."""

    inside: np.ndarray  # (S,) bool: the station is on the grid
    row: np.ndarray  # (S,) station cell
    col: np.ndarray
    rows: np.ndarray  # (S, w) window rows (clipped index; see ok)
    cols: np.ndarray  # (S, w)
    ok: np.ndarray  # (S, w, w) the window cell exists on the grid
    wraps: np.ndarray  # (S,) the window crosses the grid's longitude seam (antimeridian)
    clipped: np.ndarray  # (S,) the window is cut by the grid's edge


def _nearest(axis: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Index of the nearest value of a monotonic axis."""
    asc = axis[0] <= axis[-1]
    a = axis if asc else axis[::-1]
    j = np.clip(np.searchsorted(a, x), 1, len(a) - 1) if len(a) > 1 else np.zeros(len(x), int)
    if len(a) > 1:
        j = np.where(np.abs(x - a[j - 1]) <= np.abs(a[j] - x), j - 1, j)
    return j if asc else len(a) - 1 - j


def station_cells(lat_axis, lon_axis, lat, lon, window: int) -> Cells:
    """Station cells and windows on a regular lat/lon grid of cell centres.

    A grid spanning 360 degrees of longitude wraps: a window across its seam (the
    antimeridian on a -180..180 grid) takes the cells on the other side. Elsewhere a window
    at the grid's edge is clipped (its missing cells count as not valid).
    """
    la, lo = np.asarray(lat_axis, float), np.asarray(lon_axis, float)
    y, x = np.asarray(lat, float), np.asarray(lon, float)
    dy = abs(la[1] - la[0]) if len(la) > 1 else 180.0
    dx = abs(lo[1] - lo[0]) if len(lo) > 1 else 360.0
    lon_min = lo.min() - dx / 2
    glob = abs(len(lo) * dx - 360.0) < 1e-6 * 360
    x = (x - lon_min) % 360.0 + lon_min  # the grid's longitude convention
    inside = (y >= la.min() - dy / 2) & (y <= la.max() + dy / 2)
    if not glob:
        inside &= x <= lo.max() + dx / 2
    row, col = _nearest(la, y), _nearest(lo, x)
    h = window // 2
    off = np.arange(-h, h + 1)
    rows = row[:, None] + off[None, :]
    cols = col[:, None] + off[None, :]
    ny, nx = len(la), len(lo)
    row_ok = (rows >= 0) & (rows < ny)
    if glob:
        wraps = ((cols < 0) | (cols >= nx)).any(axis=1)
        cols = cols % nx
        col_ok = np.ones_like(cols, bool)
    else:
        wraps = np.zeros(len(y), bool)
        col_ok = (cols >= 0) & (cols < nx)
    ok = row_ok[:, :, None] & col_ok[:, None, :]
    return Cells(inside, row, col, np.clip(rows, 0, ny - 1), np.clip(cols, 0, nx - 1), ok,
                 wraps, ~ok.all(axis=(1, 2)))


# ---- gathering ---------------------------------------------------------------------------


def _gather(arr: xr.DataArray, t: np.ndarray, rows: np.ndarray, cols: np.ndarray):
    """Lazy values at (t[s, d], rows[s, i], cols[s, j]) -> (S, D, w, w): dask point indexing,
    which builds tasks only for the stored blocks the points fall in."""
    a = arr.transpose("time", "lat", "lon").data
    a = a if isinstance(a, da.Array) else da.from_array(np.asarray(a), chunks=-1)
    tt, rr, cc = np.broadcast_arrays(t[:, :, None, None], rows[:, None, :, None],
                                     cols[:, None, None, :])
    if tt.size == 0:
        return np.zeros(tt.shape, np.float64)
    return a.vindex[tt, rr, cc]


def _gather2d(arr: xr.DataArray, rows: np.ndarray, cols: np.ndarray):
    a = arr.transpose("lat", "lon").data
    rr, cc = np.broadcast_arrays(rows[:, :, None], cols[:, None, :])
    if isinstance(a, da.Array):
        return a.vindex[rr, cc] if rr.size else np.zeros(rr.shape, bool)
    return np.asarray(a)[rr, cc]


@dataclass
class Extracted:
    """Per station: the window's daily model values and what went into them."""

    cells: Cells
    days: np.ndarray  # (S, D) datetime64[D]
    covered: np.ndarray  # (S, D) every input has a period covering the day
    values: dict[str, np.ndarray]  # model -> (S, D, w, w) mg C m-2 d-1, NaN where not valid
    dark: np.ndarray  # (S, D, w) day length 0 (polar night) in the window row
    in_period: np.ndarray  # (S,) the station day is inside the inputs' period
    blocks_read: int = 0  # stored input blocks read
    blocks_total: int = 0  # stored input blocks of the inputs


def _period_index(arr: xr.DataArray, days: np.ndarray) -> np.ndarray:
    flat = days.reshape(-1)
    if flat.size == 0:
        return np.zeros(days.shape, int)
    return day_to_period(arr["period_start"].values, arr["period_end"].values,
                         flat).reshape(days.shape)


def _blocks(arr: xr.DataArray) -> int:
    d = arr.data
    return int(np.prod(d.numblocks)) if isinstance(d, da.Array) else 1


def extract(inputs: DailyInputs, lat, lon, day, models: list[str],
            opts: WindowOptions = WindowOptions()) -> Extracted:
    """Daily model values on each station's window (one compute for every station).

    Parameters
    ----------
    inputs : DailyInputs
    lat, lon : array_like
        Station positions, degrees north and east.
    day : array_like of datetime64[D]
        Station days.
    models : model names (see :mod:`euphotic.models`)
    opts : WindowOptions

    Returns
    -------
    Extracted
        ``values[model]`` (station, day, row, col) in mg C m-2 d-1: NaN where a cell is off
        the grid or the ocean, a day is not covered by every input, or the model has no
        estimate; 0 in polar night (the models' rule: no light, no production).
    """
    chl = inputs.chl
    cells = station_cells(chl["lat"].values, chl["lon"].values, lat, lon, opts.window)
    d0 = np.asarray(day, "datetime64[D]")
    offs = np.arange(-opts.days, opts.days + 1)
    days = d0[:, None] + offs[None, :].astype("timedelta64[D]")
    # every input a model uses (required, or optional and configured), read once for all
    takes = {}
    for m in models:
        required, optional = model_inputs(m)
        lacking = [r for r in required if r not in inputs.inputs]
        if lacking:
            raise MatchupConfigError(
                f"model {m} needs input{'s' if len(lacking) > 1 else ''} {', '.join(lacking)}, "
                "which the run's configuration does not give; leave the model out")
        reads = (*required, *(r for r in optional if r in inputs.inputs))
        takes[m] = (reads, "day_length" in (*required, *optional))
    used = {r for reads, _ in takes.values() for r in reads} | {GRID_ROLE}
    roles = {r: a for r, a in inputs.inputs.items() if r in used}
    idx = {r: _period_index(a, days) for r, a in roles.items()}
    covered = np.logical_and.reduce([i >= 0 for i in idx.values()])
    first = min(np.asarray(a["period_start"].values, "datetime64[D]").min() for a in roles.values())
    last = max(np.asarray(a["period_end"].values, "datetime64[D]").max() for a in roles.values())
    in_period = (d0 >= first) & (d0 < last)
    use = cells.inside & in_period
    s_idx = np.flatnonzero(use)
    rows, cols = cells.rows[s_idx], cells.cols[s_idx]
    lazy = {r: _gather(a, np.clip(idx[r][s_idx], 0, None), rows, cols) for r, a in roles.items()}
    lazy["ocean"] = _gather2d(inputs.ocean, rows, cols)
    got = dict(zip(lazy, dask.compute(*lazy.values()), strict=True))
    blocks_read = _count_blocks(lazy, roles)
    lat_cells = chl["lat"].values[rows]  # (s, w)
    decl = solar_declination(days[s_idx].reshape(-1)).reshape(days[s_idx].shape)
    dl = day_length_from_declination(lat_cells[:, None, :], decl[:, :, None])  # (s, D, w)
    if "day_length" in got:
        dl_cells = np.asarray(got["day_length"], np.float64)
    else:
        dl_cells = np.broadcast_to(dl[:, :, :, None], got[GRID_ROLE].shape)
    on_ocean = cells.ok[s_idx][:, None] & np.asarray(got["ocean"], bool)[:, None]
    dark_cells = (dl_cells <= 0.0) & on_ocean
    shape = (len(d0), len(offs), opts.window, opts.window)
    values = {}
    for m in models:
        out = np.full(shape, np.nan)
        if len(s_idx):
            reads, takes_day_length = takes[m]
            # a day counts for a model when every input it reads covers it
            own = np.logical_and.reduce([idx[r] >= 0 for r in reads])
            valid = on_ocean & own[s_idx][:, :, None, None]
            kwargs = {r: np.asarray(got[r], np.float64) for r in reads}
            if takes_day_length:
                kwargs["day_length"] = dl_cells  # computed from latitude and date if not given
            for name, v in inputs.parameters(m).items():
                # a per-region map: each window cell takes its own cell's value (s, 1, w, w)
                kwargs[name] = (np.asarray(v)[rows[:, :, None], cols[:, None, :]][:, None]
                                if np.ndim(v) == 2 else v)
            v = np.asarray(get_model(m)(**kwargs), np.float64)
            # polar night: 0 on ocean cells even on a day without input (the run's rule)
            out[s_idx] = np.where(valid, v, np.where(dark_cells, 0.0, np.nan))
        values[m] = out
    dark = np.zeros((len(d0), len(offs), opts.window), bool)
    dark[s_idx] = dl <= 0.0
    return Extracted(cells, days, covered, values, dark, in_period, blocks_read,
                     sum(_blocks(a) for a in roles.values()))


def _count_blocks(lazy: dict, roles: dict) -> int:
    """Blocks of the inputs (on the chlorophyll grid) that the gathering graph needs: the
    graph culled to its outputs, as dask's scheduler runs it."""
    from dask.core import flatten
    from dask.optimization import cull

    n = 0
    for r, arr in roles.items():
        g = lazy.get(r)
        if not isinstance(g, da.Array) or not isinstance(arr.data, da.Array):
            continue
        dsk, _ = cull(dict(g.__dask_graph__()), list(flatten(g.__dask_keys__())))
        src = arr.data.name
        n += sum(1 for k in dsk if isinstance(k, tuple) and k[0] == src)
    return n


# ---- window statistics ---------------------------------------------------------------------


def window_stats(values: np.ndarray, opts: WindowOptions) -> pd.DataFrame:
    """Median, count, mean, standard deviation and CV of the valid cells of each window.

    ``values``: (S, D, w, w), NaN where not valid. Returns one row per station: ``median``,
    ``n_valid``, ``mean``, ``sd`` (population), ``cv`` (sd / mean), ``centre`` (the station
    cell on the station day) and ``kept`` (enough valid cells and, with ``max_cv``, a CV at
    most that).
    """
    s = values.reshape(values.shape[0], -1)
    n = np.isfinite(s).sum(axis=1)
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN windows: NaN, counted 0
        med = np.nanmedian(s, axis=1)
        mean = np.nanmean(s, axis=1)
        sd = np.nanstd(s, axis=1)
        cv = np.where(mean > 0, sd / mean, np.nan)
    d, w = values.shape[1] // 2, values.shape[2] // 2
    kept = n >= opts.need
    if opts.max_cv is not None:
        kept &= ~(cv > opts.max_cv)
    return pd.DataFrame({"median": med, "n_valid": n, "mean": mean, "sd": sd, "cv": cv,
                         "centre": values[:, d, w, w], "kept": kept})


# ---- the match-up table --------------------------------------------------------------------

#: Reasons a station (or a station and model) has no match-up; the README lists them.
REASONS = {
    "bad_row": "the measurement row(s) could not be used (see bad_reason)",
    "outside_grid": "the station is not on the run's grid",
    "outside_period": "the station day is outside the period of the run's inputs",
    "too_few_valid": "fewer valid cells in the window than min_valid",
    "heterogeneous": "the window's coefficient of variation is above max_cv",
    "polar_night": "no daylight at the station: the model's rate is 0, which cannot enter log10",
    "not_scored_ncp": "net community production (o2_ncp) is not net primary production",
    "measured_zero": "a measured value of 0 cannot enter log10",
}


@dataclass
class Matchups:
    """The match-up table (one row per measurement and model) and how it was made."""

    table: pd.DataFrame
    options: WindowOptions
    models: list[str]
    blocks_read: int = 0
    blocks_total: int = 0
    notes: list[str] = field(default_factory=list)


def _region_names(regions, rows, cols) -> list[str]:
    if regions is None:
        return [""] * len(rows)
    out = []
    for r, c in zip(rows, cols, strict=True):
        out.append(";".join(n for n in regions.names if bool(regions[n][r, c])))
    return out


def match(table: StationTable, inputs: DailyInputs, models: list[str], *,
          opts: WindowOptions = WindowOptions(), maps: xr.Dataset | None = None) -> Matchups:
    """Match every measurement of ``table`` with each model's daily (and monthly) estimate.

    Returns
    -------
    Matchups
        ``table``: one row per measurement and model (bad rows once, model empty), columns
        described in :data:`TABLE_COLUMNS`.
    """
    st = table.stations
    ex = extract(inputs, st["lat"].to_numpy(float), st["lon"].to_numpy(float),
                 st["date"].to_numpy("datetime64[D]"), models, opts)
    cells = ex.cells
    lat_axis, lon_axis = inputs.chl["lat"].values, inputs.chl["lon"].values  # the grid
    regions = _region_names(inputs.regions, cells.row, cells.col)
    monthly = _monthly_values(maps, models, cells, st["date"].to_numpy("datetime64[D]"))
    rows = []
    for m in models:
        ws = window_stats(ex.values[m], opts)
        for i, s in enumerate(st.to_dict("records")):
            notes = []
            if cells.wraps[i]:
                notes.append("window wraps across the antimeridian")
            if cells.inside[i] and cells.clipped[i]:
                n_ok = int(cells.ok[i].sum())
                notes.append(f"window clipped at the grid edge ({n_ok} of "
                             f"{opts.window * opts.window} cells)")
            reason = ""
            w = ws.iloc[i]
            dark_station = bool(ex.dark[i, opts.days, opts.window // 2])
            if not cells.inside[i]:
                reason = "outside_grid"
            elif not ex.in_period[i]:
                reason = "outside_period"
            elif dark_station:
                reason = "polar_night"
            elif not w["n_valid"] >= opts.need:
                reason = "too_few_valid"
            elif not w["kept"]:
                reason = "heterogeneous"
            elif s["family"] == "o2_ncp":
                reason = "not_scored_ncp"
            elif not s["npp_equivalent_mgC_m-2_d-1"] > 0:
                reason = "measured_zero"
            est = float(w["median"]) if w["kept"] and not reason.startswith("outside") else np.nan
            if reason == "polar_night":
                est = 0.0
            rows.append({
                **{k: s[k] for k in ("station", "cruise", "lat", "lon")},
                "date": str(s["date"])[:10], **{k: s[k] for k in (
                    "start", "end", "method", "family", "incubation_h", "value_given",
                    "units_given", "depths_m", "n_depths", "integration_depth_m",
                    "carbon_mgC_m-2_d-1", "npp_equivalent_mgC_m-2_d-1", "conversion",
                    "rows", "notes")},
                "region": regions[i] if cells.inside[i] else "",
                "grid_lat": float(lat_axis[cells.row[i]]) if cells.inside[i] else np.nan,
                "grid_lon": float(lon_axis[cells.col[i]]) if cells.inside[i] else np.nan,
                "model": m,
                "daily_mgC_m-2_d-1": est,
                "window_median_mgC_m-2_d-1": w["median"],
                "window_centre_mgC_m-2_d-1": w["centre"],
                "window_n_valid": int(w["n_valid"]),
                "window_n_cells": opts.n_cells,
                "window_cv": w["cv"],
                "monthly_map_mgC_m-2_d-1": monthly[m][i],
                "reason": reason,
                "window_notes": "; ".join(notes),
                "bad_reason": "",
            })
    for b in table.bad.to_dict("records"):
        rows.append({"station": b["station"], "rows": str(b["row"]), "model": "",
                     "reason": "bad_row", "bad_reason": b["reason"], "window_notes": "",
                     "notes": b["detail"]})
    df = pd.DataFrame(rows, columns=TABLE_COLUMNS)
    return Matchups(df, opts, list(models), ex.blocks_read, ex.blocks_total)


#: Columns of the match-up table, in order.
TABLE_COLUMNS = [
    "station", "cruise", "lat", "lon", "date", "start", "end", "method", "family",
    "incubation_h", "value_given", "units_given", "depths_m", "n_depths", "integration_depth_m",
    "carbon_mgC_m-2_d-1", "npp_equivalent_mgC_m-2_d-1", "conversion", "rows", "region",
    "grid_lat", "grid_lon", "model", "daily_mgC_m-2_d-1", "window_median_mgC_m-2_d-1",
    "window_centre_mgC_m-2_d-1", "window_n_valid", "window_n_cells", "window_cv",
    "monthly_map_mgC_m-2_d-1", "reason", "window_notes", "bad_reason", "notes",
]


def _monthly_values(maps: xr.Dataset | None, models, cells: Cells, days) -> dict[str, np.ndarray]:
    """The run's monthly-map value at each station cell and month (NaN when none)."""
    out = {m: np.full(len(days), np.nan) for m in models}
    if maps is None or not len(days):
        return out
    months = np.asarray(maps["month"].values, "datetime64[M]")
    want = np.asarray(days, "datetime64[M]")
    t = np.array([int(np.flatnonzero(months == w)[0]) if (months == w).any() else -1
                  for w in want])
    have = cells.inside & (t >= 0)
    if not have.any():
        return out
    s = np.flatnonzero(have)
    for m in models:
        if m not in maps["model"].values:
            continue
        npp = maps["npp"].sel(model=m).transpose("time", "lat", "lon").data
        npp = npp if isinstance(npp, da.Array) else da.from_array(np.asarray(npp))
        vals = np.asarray(npp.vindex[t[s], cells.row[s], cells.col[s]].compute(), np.float64)
        out[m][s] = vals
    return out


# ---- statistics ------------------------------------------------------------------------------


def statistics(mu: Matchups, *, n_boot: int = sk.N_BOOT, seed: int = sk.BOOT_SEED
               ) -> pd.DataFrame:
    """Skill per model, per estimate (daily window median, monthly map), and per group: all
    scored stations, each method family (c14, o2) and each region. One row per combination
    with the statistics of :func:`euphotic.skill.log_skill` and bootstrap 95 % limits."""
    t = mu.table
    scored = t[(t["model"] != "") & (t["reason"] == "")]
    rows = []
    for m in mu.models:
        tm = scored[scored["model"] == m]
        groups = [("all", "c14 and o2", tm)]
        for fam in ("c14", "o2"):
            groups.append(("method", fam, tm[tm["family"] == fam]))
        names = sorted({n for r in tm["region"] if r for n in r.split(";")})
        for n in names:
            groups.append(("region", n, tm[tm["region"].str.split(";").map(lambda x, n=n: n in x)]))
            for fam in ("c14", "o2"):
                g = tm[(tm["family"] == fam)
                       & tm["region"].str.split(";").map(lambda x, n=n: n in x)]
                groups.append(("region_method", f"{n} | {fam}", g))
        for estimate, col in (("daily", "daily_mgC_m-2_d-1"),
                              ("monthly_map", "monthly_map_mgC_m-2_d-1")):
            for kind, name, g in groups:
                meas = g["npp_equivalent_mgC_m-2_d-1"].to_numpy(float)
                est = g[col].to_numpy(float)
                s = sk.log_skill(meas, est)
                ci = sk.bootstrap(meas, est, n_boot=n_boot, seed=seed)
                row = {"model": m, "estimate": estimate, "group_type": kind, "group": name,
                       **s.as_dict()}
                for k, (lo, hi) in ci.items():
                    row[f"{k}_low"], row[f"{k}_high"] = lo, hi
                rows.append(row)
    return pd.DataFrame(rows)


class MatchupConfigError(EuphoticError):
    """The run to match against cannot be found or opened (no config recorded, none given)."""


