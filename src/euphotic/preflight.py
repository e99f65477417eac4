"""Pre-flight check of a run: everything ``euphotic run`` does before computing, as a report.

:func:`check` opens every input lazily (as the run does), matches its grid onto the
chlorophyll grid, works out the months to produce, builds the ocean and region masks and
estimates the work and the peak memory, collecting **every** problem instead of stopping at
the first. Nothing on the grid is computed apart from the masks.

:func:`open_inputs` and :func:`plan_months` are the steps :func:`euphotic.pipeline.prepare`
runs too, so a run and its check agree on what is wrong.

Gaps, duplicates and overlaps of an input's periods are found by small pure functions on the
period arrays (:func:`find_gaps`, :func:`find_duplicates`, :func:`find_overlaps`).
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr

from euphotic import aggregate, roles
from euphotic.config import RunConfig
from euphotic.errors import EuphoticError, NoOverlapError
from euphotic.readers import (
    InputSpec,
    grid_summary,
    match_grid,
    open_input,
)
from euphotic.regrid import COORD_RTOL, axis_step, same_axis

#: Inputs in the order they are opened and reported (the role catalogue's order). Which of
#: them decide the days of a month with an estimate is the configured models' business:
#: ``cfg.required_inputs`` (see :func:`plan_months`).
ROLES = tuple(roles.ROLES)

# ---- memory model (see estimate_memory; the measurements are in the README) ---------------
# Measured with benchmarks/scale_month.py's run_measured (peak RSS of the process tree,
# sampled every 50 ms) on the project's 2-core, 24 GiB machine, 2 dask threads, one month per
# graph, December 2026.

#: Resident memory of a run before any grid-sized array: the interpreter with xarray, dask,
#: netCDF4, pint, shapely/rasterio and the numba-compiled kernels loaded, bytes. Measured:
#: `euphotic run` on an 8 x 8-cell, one-day config, no figures: 291 MiB (twice); re-measured
#: with the four models' modules and the derived-quantity step's libraries, December 2026, on
#: a 10 x 10-cell one-month config: 303 MiB with one model, 306 MiB with three.
BASE_RSS_BYTES = 303 * 2**20
#: Extra memory of matplotlib and its canvases when figures are drawn, bytes. Measured: the
#: demo with and without figures, 357 and 311 MiB (the 240 x 264 grid itself adds little).
FIGURES_BASE_BYTES = 46 * 2**20
#: Bytes per figure cell on large grids: the map as float64, its masked copy, the colour-mapped
#: RGBA float image (4 x 8) and the bytes of the PNG canvas (4). Worked out, not measured.
FIGURE_BYTES_PER_CELL = 36
#: Bytes per grid cell held while the masks are built and for the whole run, besides the
#: packed region bits: the ocean mask (1), one region's mask while the bits are packed (1) and
#: rasterio's burnt window (1). Worked out from ocean.py / regions.py / aggregate.RegionMasks;
#: the measured growth from a 1/12- to a 1/24-degree global grid (five regions, 1 byte of
#: bits) is 4.7 bytes a cell, against the 4 assumed.
MASK_BYTES_PER_CELL = 3
#: Bytes per cell of one spatial block held for one running task chain of the monthly pass.
#: Fitted: 1/12-degree global grid, 540 x 1080 blocks, 2 threads (421 MiB measured, 290 base,
#: 36 masks: 95 MiB for 4 blocks). From the code one would expect up to 68 (per input the
#: stored float32 chunk and a float64 copy, 3 x 12, plus the (sum, count) accumulator and the
#: (mean, coverage) result, 2 x 16); dask frees the inputs as each step is done.
TASK_BYTES_PER_BLOCK_CELL = 44
#: Bytes per cell of one spatial block for each model beyond the first (its own accumulator,
#: result and per-step temporaries in the fused monthly pass, and the inputs only it reads).
#: Fitted on the demo (one 63,360-cell block, 2 threads, December 2026): 1, 2 and 4 models
#: (vgpm; + eppley_vgpm; + pi_platt, cbpm) peaked at 416, 434 and 485 MiB, 17.6 and 25.5 MiB a
#: model, i.e. 73 and 105 B per block cell of the 2 x 2 blocks alive; 90 B taken.
MODEL_BYTES_PER_BLOCK_CELL = 90
#: Blocks per thread alive at once: the one being processed and the next one already read
#: (dask reads ahead of the running task).
BLOCKS_PER_THREAD = 2


@dataclass
class Problem:
    """One thing wrong (``error``: the run would fail) or worth knowing (``warning``)."""

    level: Literal["error", "warning"]
    text: str  # names the file or config key, then the problem

    def line(self) -> str:
        return f"{self.level}: {' '.join(self.text.split())}"


# ---- opening the inputs (shared with pipeline.prepare) ------------------------------------


@dataclass
class OpenedInputs:
    """Inputs opened lazily: as read (``raw``, each on its own grid) and on the chlorophyll
    grid (``on_grid``), with the error of each input that could not be opened or matched."""

    raw: dict[str, xr.DataArray] = field(default_factory=dict)
    on_grid: dict[str, xr.DataArray] = field(default_factory=dict)
    errors: dict[str, Exception] = field(default_factory=dict)

    def raise_first(self) -> None:
        """Raise the first input's error (in the catalogue's order: chl, par, sst, ...)."""
        for role in ROLES:
            if role in self.errors:
                raise self.errors[role]


def open_inputs(cfg: RunConfig) -> OpenedInputs:
    """Open every configured input and bring it onto the chlorophyll grid (lazily).

    Each input's :class:`~euphotic.errors.EuphoticError` (or an ``OSError`` naming a file) is
    kept in ``errors`` under its role instead of stopping the others.
    """
    out = OpenedInputs()
    for role in ROLES:
        if role not in cfg.inputs:
            continue
        try:
            out.raw[role] = open_input(cfg.inputs[role])
        except (EuphoticError, OSError) as exc:
            out.errors[role] = exc
    chl = out.raw.get(roles.GRID_ROLE)
    if chl is not None:
        out.on_grid[roles.GRID_ROLE] = chl
    for role, da in out.raw.items():
        if role == roles.GRID_ROLE or chl is None:
            continue
        try:
            matched = match_grid(da, chl, da.attrs["files"][0])
        except (EuphoticError, OSError) as exc:
            out.errors[role] = exc
            continue
        matched.attrs["files"] = da.attrs["files"]
        matched.attrs["regridding"] = _regrid_words(da, chl)  # recorded for `euphotic methods`
        out.on_grid[role] = matched
    return out


# ---- months (shared with pipeline.prepare) ------------------------------------------------


def span(da: xr.DataArray) -> str:
    """First..last day of an input's periods."""
    s = da["period_start"].values.min().astype("datetime64[D]")
    e = da["period_end"].values.max().astype("datetime64[D]") - 1
    return f"{s}..{e}"


@dataclass
class MonthRow:
    """Days of one calendar month covered by all inputs and by each one."""

    month: np.datetime64  # datetime64[M]
    n_days: int
    all_inputs: int  # days covered by every required input (cfg.required_inputs)
    by_input: dict[str, int]
    #: of ``all_inputs``, days a day-length input (when given) does not cover: no estimate
    without_day_length: int = 0


@dataclass
class MonthPlan:
    """The months a run produces and skips; ``error`` when it would produce none."""

    months: list[np.datetime64]
    skipped: list[np.datetime64]
    table: list[MonthRow]
    error: NoOverlapError | None = None


def plan_months(cfg: RunConfig, inputs: dict[str, xr.DataArray]) -> MonthPlan:
    """Months the chlorophyll touches within [start, end]; those with no day covered by every
    input the models require (``cfg.required_inputs``, e.g. chlorophyll, PAR and temperature)
    together are skipped (as the run does)."""
    chl = inputs[roles.GRID_ROLE]
    required = cfg.required_inputs
    months = aggregate.months_touched(chl["period_start"].values, chl["period_end"].values)
    if cfg.start is not None:
        months = [m for m in months if m >= cfg.start.astype("datetime64[M]")]
    if cfg.end is not None:
        months = [m for m in months if m <= cfg.end.astype("datetime64[M]")]
    if not months:
        return MonthPlan([], [], [], NoOverlapError(
            f"{cfg.path}: no chlorophyll period ({span(chl)}) falls within start/end of [run]"
        ))
    keep, skipped, table = [], [], []
    for m in months:
        days = aggregate.month_days(m)
        covered = {
            role: aggregate.day_to_period(
                da["period_start"].values, da["period_end"].values, days
            ) >= 0
            for role, da in inputs.items()
        }
        together = np.ones(len(days), bool)
        for role in required:
            together &= covered.get(role, np.zeros(len(days), bool))
        no_dl = int((together & ~covered["day_length"]).sum()) if "day_length" in covered else 0
        table.append(MonthRow(m, len(days), int(together.sum()),
                              {r: int(c.sum()) for r, c in covered.items()}, no_dl))
        (keep if together.any() else skipped).append(m)
    error = None
    if not keep:
        parts = ", ".join(
            f"{r} {span(inputs[r])} ({inputs[r].attrs['files'][0]})"
            for r in required if r in inputs
        )
        error = NoOverlapError(f"no day is covered by all inputs: {parts}")
    return MonthPlan(keep, skipped, table, error)


# ---- periods: gaps, duplicates, overlaps (pure) -------------------------------------------


def _days(a) -> np.ndarray:
    return np.asarray(a).astype("datetime64[D]")


def find_gaps(starts, ends) -> list[tuple[np.datetime64, np.datetime64]]:
    """Runs of days inside [first start, last end) covered by no period, as (first, last)
    inclusive day pairs. ``ends`` are exclusive (the day after a period's last day)."""
    s, e = _days(starts), _days(ends)
    gaps = []
    if s.size == 0:
        return gaps
    order = np.argsort(s, kind="stable")
    reach = s[order[0]]
    for i in order:
        if s[i] > reach:
            gaps.append((reach, s[i] - 1))
        reach = max(reach, e[i])
    return gaps


def find_duplicates(starts, ends) -> list[tuple[np.datetime64, np.datetime64, int]]:
    """Periods given more than once: (first day, last day inclusive, how many times); the
    detection is :func:`euphotic.screen.find_duplicates`."""
    from euphotic import screen

    files = [""] * len(starts)
    return [(d.start, d.end - 1, len(d.indices))
            for d in screen.find_duplicates(starts, ends, files)]


def find_overlaps(starts, ends) -> list[tuple[tuple, tuple]]:
    """Pairs of different periods sharing at least one day, each as (first, last inclusive),
    once per pair of distinct periods; the detection is :func:`euphotic.screen.find_overlaps`."""
    from euphotic import screen

    pairs = {
        tuple(sorted(((o.period_a[0], o.period_a[1] - 1), (o.period_b[0], o.period_b[1] - 1))))
        for o in screen.find_overlaps(starts, ends, [""] * len(starts))
    }
    return sorted(pairs)


def day_ranges(ranges) -> str:
    """``[(first, last), ...]`` as ``2025-04-10, 2025-04-12..2025-04-14``."""
    return ", ".join(str(a) if a == b else f"{a}..{b}" for a, b in ranges)


# ---- what the report says about one input -------------------------------------------------


@dataclass
class InputReport:
    """What the check found for one input (fields None when it could not be worked out)."""

    role: str
    pattern: str
    files: list[str] = field(default_factory=list)
    variable: str | None = None
    identified_by: str | None = None
    units_in_file: str | None = None
    units: str | None = None
    conversion: str | None = None
    grid: str | None = None
    file_lat_order: str | None = None
    file_lon_convention: str | None = None
    regrid: str | None = None
    n_periods: int = 0
    period_lengths: list[int] = field(default_factory=list)
    first_day: np.datetime64 | None = None
    last_day: np.datetime64 | None = None
    gaps: list = field(default_factory=list)
    duplicates: list = field(default_factory=list)
    overlaps: list = field(default_factory=list)
    chunk: tuple | None = None
    bytes_on_disk: int = 0
    bytes_decoded: int = 0
    error: str | None = None


def _regrid_words(src: xr.DataArray, dst: xr.DataArray) -> str:
    words = []
    for dim in ("lat", "lon"):
        a, b = src[dim].values, dst[dim].values
        if same_axis(a, b):
            continue
        s, t = abs(axis_step(a)), abs(axis_step(b))
        if s < t * (1 - COORD_RTOL):
            words.append(f"{dim} area-averaged {t / s:.3g} cells into 1 ({s:g} -> {t:g} deg)")
        else:
            words.append(f"{dim} interpolated linearly ({s:g} -> {t:g} deg)")
    return "; ".join(words) if words else "none (same grid as the chlorophyll)"


def _input_report(role: str, spec: InputSpec, opened: OpenedInputs) -> InputReport:
    pattern = json.dumps(spec.files)
    rep = InputReport(role=role, pattern=pattern)
    try:
        rep.files = spec.paths()
    except EuphoticError:
        rep.files = []
    rep.bytes_on_disk = sum(os.path.getsize(p) for p in rep.files if os.path.exists(p))
    if role in opened.errors:
        rep.error = str(opened.errors[role])
    da = opened.raw.get(role)
    if da is None:
        return rep
    rep.files = list(da.attrs.get("files", rep.files))
    rep.variable = da.attrs.get("source_variable")
    rep.units = da.attrs.get("units")
    # how the reader found the variable and converted it (euphotic.readers.open_input)
    rep.identified_by = da.attrs.get("identified_by")
    rep.units_in_file = da.attrs.get("units_in_file")
    rep.conversion = da.attrs.get("conversion", "unknown")
    if spec.units:
        rep.conversion += f" (units {spec.units!r} from the config)"
    rep.file_lat_order = da.attrs.get("file_lat_order")
    rep.file_lon_convention = da.attrs.get("file_lon_convention")
    rep.grid = grid_summary(da)
    chl = opened.raw.get(roles.GRID_ROLE)
    if role == roles.GRID_ROLE:
        rep.regrid = "none (this is the target grid)"
    elif chl is None:
        rep.regrid = "not checked (the chlorophyll input, whose grid is the target, did not open)"
    elif role in opened.on_grid:
        rep.regrid = _regrid_words(da, chl)
    starts, ends = da["period_start"].values, da["period_end"].values
    rep.n_periods = len(starts)
    rep.period_lengths = sorted(set((_days(ends) - _days(starts)).astype(int).tolist()))
    rep.first_day, rep.last_day = _days(starts).min(), _days(ends).max() - 1
    rep.gaps = find_gaps(starts, ends)
    rep.duplicates = find_duplicates(starts, ends)
    rep.overlaps = find_overlaps(starts, ends)
    rep.chunk = tuple(int(c) for c in da.data.chunksize) if hasattr(da.data, "chunksize") else None
    rep.bytes_decoded = int(da.nbytes)
    return rep


# ---- regions ------------------------------------------------------------------------------


@dataclass
class RegionReport:
    name: str
    cells: int | None = None  # cell centres inside
    ocean_cells: int | None = None  # of which ocean (None: ocean not known before the run)
    error: str | None = None


def _ocean(cfg: RunConfig, lat: np.ndarray, lon: np.ndarray) -> np.ndarray | None:
    """The ocean mask as the run builds it, or None when it comes from temperature (that one
    needs every temperature value, so it is left to the run)."""
    from euphotic import ocean

    if cfg.ocean_source == "file":
        return ocean.file_ocean_mask(str(cfg.land_mask), cfg.land_mask_variable, lat, lon)
    if cfg.ocean_source == "package":
        return ocean.packaged_ocean_mask(lat, lon)
    return None


# ---- work and memory ----------------------------------------------------------------------


@dataclass
class Estimate:
    """Size of the work and the estimated peak resident memory of the run (bytes)."""

    cells: int
    days: int
    models: int
    files: int
    bytes_on_disk: int
    bytes_decoded: int
    threads: int
    block_cells: int
    peak_bytes: int
    parts: dict[str, int]
    #: months per computed graph (the estimate is for 1)
    months_per_compute: int = 1

    @property
    def cell_days(self) -> int:
        return self.cells * self.days * self.models


def _threads() -> int:
    import dask
    from dask.system import CPU_COUNT

    return int(dask.config.get("num_workers", None) or CPU_COUNT)


def estimate_memory(
    *, cells: int, block_cells: int, threads: int, n_regions: int, figures: bool,
    overlap_depth: int | None = None, models: int = 1,
) -> dict[str, int]:
    """Peak resident memory of a run on the local threaded scheduler, by part (bytes).

    Parameters
    ----------
    cells : int
        Cells of the chlorophyll grid.
    block_cells : int
        Cells of one spatial block (the chlorophyll file's chunk in lat x lon).
    threads : int
        Threads of the dask scheduler.
    n_regions : int
        Regions (the packed bits take 1, 2, 4 or 8 bytes a cell).
    figures : bool
        Whether figures are drawn.
    models : int
        Models of the run (each beyond the first adds :data:`MODEL_BYTES_PER_BLOCK_CELL`).

    Notes
    -----
    ``base + cells * (masks) + threads * BLOCKS_PER_THREAD * block_cells * (task bytes +
    (models - 1) * model bytes) (+ figures)``; the constants say where each number comes from. It assumes one month per
    computed graph (``months_per_compute = 1``); more months per graph keep more accumulators
    alive.
    """
    # region masks (aggregate.RegionMasks): one uint16 label layer per level of overlap, up to
    # 4; deeper overlaps go to bit planes of 16 regions each (counted at their most)
    depth = min(n_regions, 4) if overlap_depth is None else overlap_depth
    planes = depth if depth <= 4 else 4 + -(-n_regions // 16)
    bits = 2 * planes
    parts = {
        "base": BASE_RSS_BYTES,
        "masks": cells * (MASK_BYTES_PER_CELL + (bits if n_regions else 0)),
        "tasks": threads * BLOCKS_PER_THREAD * block_cells * TASK_BYTES_PER_BLOCK_CELL,
    }
    if models > 1:
        parts["models"] = (threads * BLOCKS_PER_THREAD * block_cells * (models - 1)
                           * MODEL_BYTES_PER_BLOCK_CELL)
    if figures:
        parts["figures"] = FIGURES_BASE_BYTES + cells * FIGURE_BYTES_PER_CELL
    return parts


# ---- the report ---------------------------------------------------------------------------


@dataclass
class Report:
    """Everything the check found; :meth:`text` is what ``euphotic check`` prints."""

    config: Path
    models: list[str]
    inputs: list[InputReport]
    months: list[MonthRow]
    skipped: list[np.datetime64]
    regions: list[RegionReport]
    ocean_source: str
    estimate: Estimate | None
    problems: list[Problem]
    #: the inputs whose days together make the 'all' column (the models' required inputs)
    required: tuple[str, ...] = ()

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.level == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.problems if p.level == "warning"]

    @property
    def ok(self) -> bool:
        """True when the run would start (warnings allowed)."""
        return not self.errors

    def text(self) -> str:
        return format_report(self)


def check(cfg: RunConfig) -> Report:
    """Check a run configuration without running it: every problem, not just the first.

    Opens every input lazily (as :func:`euphotic.pipeline.prepare`), plans the months, builds
    the ocean and region masks, and estimates the work and the peak memory. Nothing on the
    grid is computed apart from the masks.
    """
    problems: list[Problem] = [Problem("warning", f"{cfg.path} [run]: {n}") for n in cfg.notes]
    problems += _output_problems(cfg)
    opened = open_inputs(cfg)
    for role in ROLES:
        if role in opened.errors:
            problems.append(Problem("error", str(opened.errors[role])))
    reports = [_input_report(r, cfg.inputs[r], opened) for r in ROLES if r in cfg.inputs]
    for rep in reports:
        where = f"{cfg.path} [inputs.{rep.role}]"
        if rep.gaps:
            n = sum(int((b - a).astype(int)) + 1 for a, b in rep.gaps)
            problems.append(Problem(
                "warning", f"{where}: {n} day(s) with no file inside {rep.first_day}.."
                           f"{rep.last_day}: {day_ranges(rep.gaps)}"))
        for a, b, n in rep.duplicates:
            problems.append(Problem(
                "warning", f"{where}: period {day_ranges([(a, b)])} given {n} times "
                           f"(files = {rep.pattern}); the run uses one of them"))
        if rep.overlaps:
            shown = "; ".join(f"{day_ranges([p])} and {day_ranges([q])}"
                              for p, q in rep.overlaps[:5])
            more = f" (+{len(rep.overlaps) - 5} more)" if len(rep.overlaps) > 5 else ""
            problems.append(Problem(
                "warning", f"{where}: {len(rep.overlaps)} pair(s) of periods share days: "
                           f"{shown}{more}; on shared days the shortest period is used"))

    plan = None
    if roles.GRID_ROLE in opened.on_grid and all(
            r in opened.on_grid for r in cfg.required_inputs):
        plan = plan_months(cfg, opened.on_grid)
        if plan.error is not None:
            problems.append(Problem("error", str(plan.error)))
        for m in plan.skipped:
            problems.append(Problem(
                "warning", f"{cfg.path}: month {m} will be skipped: no day covered by all inputs"))
        for row in plan.table:
            if row.without_day_length and row.month in plan.months:
                problems.append(Problem(
                    "warning", f"{cfg.path} [inputs.day_length]: {row.without_day_length} day(s) "
                               f"of {row.month} with {roles.words(cfg.required_inputs)} have no "
                               "day length: no estimate on those days"))

    regions: list[RegionReport] = []
    estimate = None
    chl = opened.raw.get(roles.GRID_ROLE)
    if chl is not None:
        lat, lon = chl["lat"].values, chl["lon"].values
        try:
            ocean_np = _ocean(cfg, lat, lon)
        except (EuphoticError, OSError) as exc:
            problems.append(Problem("error", str(exc)))
            ocean_np = None
        depth = np.zeros((len(lat), len(lon)), np.uint16)  # regions over each cell
        for region in cfg.regions:
            rr = RegionReport(region.name)
            try:
                win = region.window(lat, lon)  # only the rows and columns it can reach
            except (EuphoticError, OSError) as exc:
                rr.error = str(exc)
                problems.append(Problem("error", f"region {region.name!r}: {exc}"))
                regions.append(rr)
                continue
            rr.cells = int(win.mask.sum())
            depth[win.rows, win.cols] += win.mask
            if ocean_np is not None:
                rr.ocean_cells = int((win.mask & ocean_np[win.rows, win.cols]).sum())
            if rr.cells == 0:
                problems.append(Problem(
                    "warning", f"{cfg.path}: region {region.name!r} contains no cell centre of "
                               f"the grid ({grid_summary(chl)}); its totals will be empty"))
            elif rr.ocean_cells == 0:
                problems.append(Problem(
                    "warning", f"{cfg.path}: region {region.name!r} has {rr.cells} cells on the "
                               "grid but no ocean cell; its totals will be empty"))
            regions.append(rr)
        estimate = _estimate(cfg, opened, reports, plan, int(depth.max(initial=0)))

    return Report(
        config=Path(cfg.path),
        models=list(cfg.models),
        inputs=reports,
        months=plan.table if plan else [],
        skipped=plan.skipped if plan else [],
        regions=regions,
        ocean_source=cfg.ocean_source,
        estimate=estimate,
        problems=problems,
        required=cfg.required_inputs,
    )


def _output_problems(cfg: RunConfig) -> list[Problem]:
    """Whether the run could create and write its output folder (nothing is created here)."""
    out = Path(cfg.output_dir)
    where = f"{cfg.path} [run]: `output_dir` {str(out)!r}"
    if out.exists():
        if not out.is_dir():
            return [Problem("error", f"{where} is a file, not a folder")]
        if not os.access(out, os.W_OK | os.X_OK):
            return [Problem("error", f"{where} is not writable")]
        return []
    parent = out.parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir():
        return [Problem("error", f"{where} cannot be created: {str(parent)!r} is a file")]
    if not os.access(parent, os.W_OK | os.X_OK):
        return [Problem("error", f"{where} cannot be created: {str(parent)!r} is not writable")]
    return []


def _estimate(cfg, opened: OpenedInputs, reports, plan, overlap_depth: int | None = None
              ) -> Estimate:
    chl = opened.raw[roles.GRID_ROLE]
    cells = int(chl.sizes["lat"] * chl.sizes["lon"])
    chunk = getattr(chl.data, "chunksize", chl.shape)
    block = int(chunk[1] * chunk[2])
    # days with every input, in the months produced (the days the monthly pass evaluates)
    days = sum(r.all_inputs for r in plan.table if r.month in plan.months) if plan else 0
    threads = _threads()
    parts = estimate_memory(cells=cells, block_cells=block, threads=threads,
                            n_regions=len(cfg.regions), figures=cfg.figures,
                            overlap_depth=overlap_depth, models=len(cfg.models))
    return Estimate(
        cells=cells, days=days, models=len(cfg.models),
        files=sum(len(r.files) for r in reports),
        bytes_on_disk=sum(r.bytes_on_disk for r in reports),
        bytes_decoded=sum(r.bytes_decoded for r in reports),
        threads=threads, block_cells=block, peak_bytes=sum(parts.values()), parts=parts,
        months_per_compute=cfg.months_per_compute,
    )


def _size(n: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} TiB"  # pragma: no cover


def format_report(rep: Report) -> str:
    """The report as aligned text, one problem a line at the end."""
    out = [f"Pre-flight check of {rep.config}", ""]
    for r in rep.inputs:
        out.append(f"[inputs.{r.role}] files = {r.pattern}")
        if r.files:
            names = [os.path.basename(f) for f in r.files]
            first_last = names[0] if len(names) == 1 else f"{names[0]} .. {names[-1]}"
            out.append(f"  files:       {len(r.files)} ({first_last}), {_size(r.bytes_on_disk)}"
                       " on disk")
        if r.variable is None:
            out.append("  not opened: " + (r.error or "see the problems below"))
            out.append("")
            continue
        out.append(f"  variable:    {r.variable}, identified by {r.identified_by or 'unknown'}")
        out.append(f"  units:       {r.units_in_file or '(none)'} in the file; conversion: "
                   f"{r.conversion}")
        out.append(f"  grid:        {r.grid}")
        out.append(f"  in the file: latitude {r.file_lat_order or 'unknown'}, longitude "
                   f"{r.file_lon_convention or 'unknown'}")
        if r.role != roles.GRID_ROLE:
            out.append(f"  regridding:  {r.regrid or 'not possible (see the problems below)'}")
        lengths = ", ".join(str(n) for n in r.period_lengths)
        out.append(f"  periods:     {r.n_periods}, {lengths} day(s) long, "
                   f"{r.first_day}..{r.last_day}")
        out.append(f"  gaps:        {day_ranges(r.gaps) or 'none'}")
        out.append("  duplicates:  " + (
            ", ".join(f"{day_ranges([(a, b)])} x{n}" for a, b, n in r.duplicates) or "none"))
        out.append("  overlaps:    " + (
            "; ".join(f"{day_ranges([p])} and {day_ranges([q])}" for p, q in r.overlaps[:5])
            + (f" (+{len(r.overlaps) - 5} more)" if len(r.overlaps) > 5 else "")
            if r.overlaps else "none"))
        out.append("")

    if rep.months:
        opened_roles = [r.role for r in rep.inputs if r.variable is not None]
        out.append(f"Months (days covered / days in the month; 'all': "
                   f"{roles.words(rep.required)} together)")
        head = ["month", "all", *opened_roles, ""]
        rows = [head]
        for m in rep.months:
            note = "skipped" if m.month in rep.skipped else (
                "" if m.all_inputs == m.n_days else "partial")
            rows.append([str(m.month), f"{m.all_inputs}/{m.n_days}",
                         *[f"{m.by_input.get(x, 0)}/{m.n_days}" for x in opened_roles], note])
        widths = [max(len(row[i]) for row in rows) for i in range(len(head))]
        for row in rows:
            out.append("  " + "  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True))
                       .rstrip())
        out.append(f"  months to produce: {sum(1 for m in rep.months) - len(rep.skipped)}; "
                   f"skipped: {', '.join(str(m) for m in rep.skipped) or 'none'}")
        out.append("")

    if rep.estimate is not None:
        ocean_note = "" if rep.ocean_source != "temperature" else (
            " (ocean from temperature: decided by the run)")
        out.append(f"Regions ({len(rep.regions)}){ocean_note}")
        width = max([len(r.name) for r in rep.regions] + [4])
        for r in rep.regions:
            if r.error:
                out.append(f"  {r.name.ljust(width)}  error")
                continue
            ocean = "" if r.ocean_cells is None else f", {r.ocean_cells:,} ocean"
            out.append(f"  {r.name.ljust(width)}  {r.cells:,} cells{ocean}")
        out.append("")
        e = rep.estimate
        out.append("Work")
        out.append(f"  {e.cells:,} cells x {e.days} days with all inputs x {e.models} model(s) = "
                   f"{e.cell_days:,} cell-days ({', '.join(rep.models)})")
        out.append(f"  input: {e.files} files, {_size(e.bytes_on_disk)} on disk, "
                   f"{_size(e.bytes_decoded)} decoded")
        out.append(f"Peak memory (estimate): {_size(e.peak_bytes)}")
        p = e.parts
        basis = [
            f"base {_size(p['base'])} (libraries and compiled kernels, measured)",
            f"masks {_size(p['masks'])} (ocean and region labels over {e.cells:,} cells)",
            f"tasks {_size(p['tasks'])} ({e.threads} threads x {BLOCKS_PER_THREAD} blocks of "
            f"{e.block_cells:,} cells x {TASK_BYTES_PER_BLOCK_CELL} B)",
        ]
        if "models" in p:
            basis.append(f"{e.models - 1} more model(s) {_size(p['models'])} (x "
                         f"{MODEL_BYTES_PER_BLOCK_CELL} B a block cell)")
        if "figures" in p:
            basis.append(f"figures {_size(p['figures'])}")
        out.append("  basis: " + " + ".join(basis))
        if e.months_per_compute != 1:
            per = "the whole run" if e.months_per_compute == 0 else f"{e.months_per_compute} months"
            out.append(f"  (for one month per computed graph; this run computes {per} per graph "
                       "and keeps more alive: a year at 1/24 degree in one graph peaked at twice "
                       "the month-by-month figure)")
        out.append("")

    n_err, n_warn = len(rep.errors), len(rep.warnings)
    out.append(f"Problems: {n_err} error(s), {n_warn} warning(s)")
    out.extend("  " + p.line() for p in rep.problems)
    out.append("")
    out.append("The run would start." if rep.ok else "The run would fail.")
    return "\n".join(out)
