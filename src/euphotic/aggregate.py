"""From input periods to calendar months, and from maps to regional totals.

Pure functions on (dask-backed) xarray objects and numpy arrays; nothing here computes.

Time model: every input period (a day, an 8-day composite, a month) stands for each day it
covers. For each calendar day the model is evaluated with the inputs whose periods cover that
day and that day's day length, so an input period contributes to a month in proportion to the
days it overlaps that month. The monthly map is the mean daily rate over the days with a valid
estimate; ``coverage`` is the fraction of the month's days with one.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass

import numpy as np
import xarray as xr

from euphotic.constants import G_PER_TG
from euphotic.geo import day_length as _day_length

MG_PER_G = 1000.0

#: Totals-table flag: the region has no ocean cell on the grid.
FLAG_NO_OCEAN = "no_ocean_cells"
#: Totals-table flag: the region has ocean cells but none with a valid estimate in the month.
FLAG_NO_DATA = "no_valid_data"
#: Totals-table flag: the region's coverage (area-weighted fraction of the month's days with a
#: valid estimate) is below the run's ``min_coverage``: the total rests on few days.
FLAG_LOW_COVERAGE = "low_coverage"
#: Default ``[run] min_coverage``: this tool's choice (half of the month's days on average),
#: not a published standard; it flags, it does not drop.
DEFAULT_MIN_COVERAGE = 0.5

_log = logging.getLogger("euphotic")


def month_days(month: np.datetime64) -> np.ndarray:
    """All days (datetime64[D]) of a calendar month given as datetime64[M]."""
    m = np.datetime64(month, "M")
    return np.arange(m.astype("datetime64[D]"), (m + 1).astype("datetime64[D]"))


def months_touched(starts: np.ndarray, ends: np.ndarray) -> list[np.datetime64]:
    """Calendar months (datetime64[M]) overlapped by any period [start, end)."""
    out: set = set()
    for s, e in zip(
        np.asarray(starts, "datetime64[D]"), np.asarray(ends, "datetime64[D]"), strict=True
    ):
        out.update(np.arange(s.astype("datetime64[M]"), (e - 1).astype("datetime64[M]") + 1))
    return sorted(out)


def day_to_period(starts, ends, days) -> np.ndarray:
    """For each day, the index of the period that covers it (-1 if none).

    Where periods overlap, the shortest wins (a daily file over an 8-day composite), then the
    one that starts latest.
    """
    s = np.asarray(starts, "datetime64[D]")
    e = np.asarray(ends, "datetime64[D]")
    d = np.asarray(days, "datetime64[D]")
    covers = (s[None, :] <= d[:, None]) & (d[:, None] < e[None, :])
    length = (e - s).astype(np.int64)
    # rank: shorter first, then later start
    rank = np.lexsort((-(s - s.min()).astype(np.int64), length))
    score = np.full(len(s), -1, dtype=np.int64)
    score[rank] = np.arange(len(s))[::-1]
    masked = np.where(covers, score[None, :], -1)
    best = masked.argmax(axis=1)
    return np.where(covers.any(axis=1), best, -1)


def daily_stack(da: xr.DataArray, days: np.ndarray) -> xr.DataArray:
    """The input values that stand for each day, dims ``(day, lat, lon)``; NaN where uncovered."""
    idx = day_to_period(da["period_start"].values, da["period_end"].values, days)
    if idx[0] >= 0 and np.all(np.diff(idx) == 1):  # one period per day in order: a plain slice
        taken = da.isel(time=slice(int(idx[0]), int(idx[-1]) + 1)).rename(time="day")
    else:
        taken = da.isel(time=xr.DataArray(np.clip(idx, 0, None), dims="day"))
    taken = taken.drop_vars(
        [c for c in ("time", "period_start", "period_end") if c in taken.coords]
    )
    taken = taken.assign_coords(day=("day", np.asarray(days, "datetime64[ns]")))
    if (idx < 0).any():
        taken = taken.where(xr.DataArray(idx >= 0, dims="day", coords={"day": taken.day}))
    return taken


@dataclass
class MonthlyMaps:
    """Lazy monthly results for one month and one model."""

    month: np.datetime64
    model: str
    npp: xr.DataArray  # (lat, lon) mean daily rate, mg C m-2 d-1
    coverage: xr.DataArray  # (lat, lon) fraction of the month's days with a valid estimate
    n_days: int


def monthly_npp(
    model: Callable,
    model_name: str,
    month: np.datetime64,
    *,
    chl: xr.DataArray,
    par: xr.DataArray,
    sst: xr.DataArray,
    ocean: xr.DataArray,
    day_length: xr.DataArray | None = None,
    month_block=None,
) -> MonthlyMaps:
    """Monthly mean NPP and coverage of one model for one calendar month (lazy): the
    four-input form of :func:`monthly_npp_models`. ``month_block`` falsy: the model function
    applied day by day (the reference path)."""
    inputs = {"chl": chl, "par": par, "sst": sst}
    if day_length is not None:
        inputs["day_length"] = day_length
    return monthly_npp_models([(model_name, {})], month, inputs=inputs, ocean=ocean,
                              fused=bool(month_block), models={model_name: model})[0]


def monthly_npp_models(
    runs: list[tuple[str, dict]],
    month: np.datetime64,
    *,
    inputs: Mapping[str, xr.DataArray],
    ocean: xr.DataArray,
    fused: bool | None = None,
    models: Mapping[str, Callable] | None = None,
) -> list[MonthlyMaps]:
    """Monthly mean NPP and coverage of several models for one calendar month (lazy).

    Parameters
    ----------
    runs : list of (model name, parameter values)
        Parameter values by name: numbers (a Choice by its name or index) or (lat, lon) arrays
        (a per-region parameter); a parameter left out takes its declared default.
    inputs : mapping role -> xarray.DataArray
        Inputs on one grid, dims (time, lat, lon) with period_start/period_end coords; every
        role a model requires. ``day_length`` left out: computed from latitude and date.
    ocean : xarray.DataArray of bool
        (lat, lon) ocean cells; elsewhere the result is NaN.
    fused : bool, optional
        The fused compiled pass (default when compiled kernels are on and day length is
        computed): per spatial block one chain of tasks over the days in which every model adds
        its valid daily rates to its running sum and count, so all models share one read of
        each input block and one task per block and day chunk. Otherwise each model's public
        function is applied day by day and the mean taken with xarray. Both give the same
        numbers (tested).
    models : mapping name -> model function, optional
        Override the registered model functions (tests).
    """
    from euphotic.models import get_model

    def fn(name):
        return (models or {}).get(name) or get_model(name)

    chl = inputs["chl"]
    all_days = month_days(month)
    n = len(all_days)
    m = np.datetime64(month, "M")
    specs = [getattr(fn(name), "spec", None) for name, _ in runs]
    if fused is None:
        from euphotic.models._compiled import use_compiled

        fused = use_compiled()
    fused = fused and "day_length" not in inputs and all(s is not None for s in specs)
    if fused:
        # Days without chlorophyll yield an estimate only in polar night (0, counted as
        # observed): they are added as counts per latitude row instead of being computed.
        covered = day_to_period(chl["period_start"].values, chl["period_end"].values, all_days) >= 0
        dl_all = _day_length(chl["lat"].values, all_days)  # (day, lat)
        dark_rows = (dl_all[~covered] <= 0.0).sum(axis=0).astype(np.float64)
        days = all_days[covered]
        roles = list(dict.fromkeys(r for s in specs for r in s.roles if r != "day_length"
                                   and r in inputs))
        # each input's distinct periods once, with the period of each day (no day-by-day copy)
        periods = {r: (inputs[r], day_to_period(inputs[r]["period_start"].values,
                                                inputs[r]["period_end"].values, days))
                   for r in roles}
        out = _fused_months(runs, specs, periods, dl_all[covered], ocean, n, dark_rows)
        return [MonthlyMaps(month=m, model=name, npp=npp, coverage=cov, n_days=n)
                for (name, _), (npp, cov) in zip(runs, out, strict=True)]
    days = all_days
    stacks = {r: daily_stack(v, days) for r, v in inputs.items()}
    c = stacks["chl"]
    if "day_length" not in stacks:
        dl = _day_length(chl["lat"], xr.DataArray(days, dims="day", coords={"day": c.day}))
        stacks["day_length"] = dl.transpose("day", "lat")
    coords = {"lat": chl["lat"], "lon": chl["lon"]}
    result = []
    for name, params in runs:
        model = fn(name)
        spec = getattr(model, "spec", None)
        roles = spec.roles if spec is not None else ("chl", "par", "sst", "day_length")
        kw = {r: stacks[r] for r in roles if r in stacks}
        pk = {k: (xr.DataArray(v, dims=("lat", "lon"), coords=coords) if np.ndim(v) == 2 else v)
              for k, v in params.items()}
        npp_daily = model(**kw, **pk).where(ocean)
        valid = npp_daily.notnull()
        npp = npp_daily.mean("day", skipna=True)
        coverage = (valid.sum("day") / n).where(ocean)
        result.append(MonthlyMaps(month=m, model=name, npp=npp, coverage=coverage, n_days=n))
    return result


class _MonthPass:
    """One task of the fused monthly pass: every model adds one chunk of days of one spatial
    block into its (sum, count). Pickled by model names (distributed workers rebuild it)."""

    def __init__(self, names: tuple[str, ...], roles: tuple[str, ...], layout: tuple):
        self.names, self.roles, self.layout = names, roles, layout

    def __call__(self, acc, ocean, dl, picks, *blocks):
        from euphotic.models import get_model

        n_roles = len(self.roles)
        # picks: per role, the position in its block of each day's period (None: no period)
        have = {r: (b, p) for r, b, p in zip(self.roles, blocks[:n_roles], picks, strict=True)
                if p is not None}
        extra = blocks[n_roles:]
        oc = np.ascontiguousarray(ocean, dtype=np.bool_)
        if acc is None:
            acc = np.zeros((len(self.names), 2) + oc.shape, dtype=np.float64)
        models = [get_model(n) for n in self.names]
        params = [[extra[v] if kind == "block" else v for kind, v in lay] for lay in self.layout]
        missing = np.broadcast_to(np.float64(np.nan), oc.shape)
        n_days = dl.shape[0]
        for k in range(n_days):  # days outer: a day's blocks stay in cache for every model
            dl_k = np.ascontiguousarray(dl[k], dtype=np.float64)
            for i, model in enumerate(models):
                day = [dl_k if r == "day_length" else _pick(have.get(r), k, missing)
                       for r in model.spec.roles]
                model.accumulate(day, params[i], oc, acc[i, 0], acc[i, 1])
        return acc


def _pick(have, k, missing):
    """Day ``k``'s values of one input: the row of its block that holds the day's period."""
    if have is None:
        return missing
    block, pos = have
    return missing if pos[k] < 0 else block[pos[k]]


def _day_steps(periods: dict, n_days: int) -> list[tuple[int, int, dict]]:
    """Split the days (in order) into runs whose periods lie in one time block of every input.

    ``periods``: role -> (block start offsets (n_blocks + 1,), day -> period index, -1 none).
    Returns ``[(first day, end day, {role: (block or -1, positions in the block)})]``.
    """
    if n_days == 0:  # one empty step: the block's sums start and stay at zero
        return [(0, 0, {r: (-1, np.zeros(0, np.intp)) for r in periods})]
    where = {}
    for r, (starts, idx) in periods.items():
        blk = np.searchsorted(starts, idx, side="right") - 1
        where[r] = (np.where(idx >= 0, blk, -1), idx - starts[np.clip(blk, 0, None)])
    key = np.stack([b for b, _ in where.values()], axis=1) if where else np.zeros((n_days, 0))
    cut = np.flatnonzero(np.any(key[1:] != key[:-1], axis=1)) + 1
    bounds = [0, *cut.tolist(), n_days]
    steps = []
    for d0, d1 in zip(bounds[:-1], bounds[1:], strict=True):
        picks = {}
        for r, (blk, pos) in where.items():
            b = int(blk[d0])
            picks[r] = (b, np.where(blk[d0:d1] >= 0, pos[d0:d1], -1).astype(np.intp))
        steps.append((d0, d1, picks))
    return steps


def _fused_months(runs, specs, periods, dl, ocean, n, dark_rows):
    """Per spatial block, one chain of tasks over the month's days: each task adds its days'
    valid rates of every model into the block's running (sum, count), in place, and the last
    one turns them into (mean rate, coverage). One accumulator per block is alive, however
    many days. Returns [(npp, coverage)] per model.

    ``periods``: role -> (input (time, lat, lon) with its distinct periods, day -> period
    index). A task takes each input's time block once, with the position of each of its days'
    period in it, so a period standing for many days (a composite) is neither copied nor
    repeated in the graph; the days are taken in order, so the sums are those of a day-by-day
    pass. Each day is evaluated with its own day length.
    """
    import dask.array as da
    from dask.base import tokenize
    from dask.highlevelgraph import HighLevelGraph

    roles = tuple(periods)
    first = periods[roles[0]][0]
    cd = first.data if isinstance(first.data, da.Array) else da.from_array(first.values)
    spatial = cd.chunks[1:]
    arrays, offsets = [], {}
    for r in roles:
        a = periods[r][0].data
        a = (a if isinstance(a, da.Array) else da.from_array(np.asarray(a)))
        a = a.rechunk((a.chunks[0],) + spatial)
        arrays.append(a)
        offsets[r] = (np.concatenate([[0], np.cumsum(a.chunks[0])]), periods[r][1])
    n_days = len(dl)
    steps = _day_steps(offsets, n_days)
    layout, extra = [], []
    for (_, params), spec in zip(runs, specs, strict=True):
        lay = []
        for p in spec.parameters:
            v = params.get(p.name, p.default)
            if np.ndim(v) == 2:
                lay.append(("block", len(extra)))
                extra.append(da.from_array(np.asarray(v, np.float64), chunks=spatial))
            else:
                lay.append(("const", p.check(v)))
        layout.append(tuple(lay))
    names = tuple(name for name, _ in runs)
    task = _MonthPass(names, roles, tuple(layout))
    day_chunks = tuple(d1 - d0 for d0, d1, _ in steps) or (0,)
    dld = da.from_array(np.asarray(dl, np.float64), chunks=(day_chunks, spatial[0]))
    oc = ocean.data if isinstance(ocean.data, da.Array) else da.from_array(np.asarray(ocean.values, bool))
    oc = oc.rechunk(spatial)
    dark = da.from_array(np.asarray(dark_rows, np.float64), chunks=(spatial[0],))
    plan = [(d0, d1, tuple(tuple(map(int, p[r][1])) + (p[r][0],) for r in roles))
            for d0, d1, p in steps]
    token = tokenize(names, layout, *arrays, *extra, dld, oc, dark, n, plan)
    step, final = f"month-step-{token}", f"month-mean-{token}"
    dsk = {}
    for y in range(len(spatial[0])):
        for x in range(len(spatial[1])):
            prev = None
            for d, (_, _, picks) in enumerate(steps):
                blocks = [None if picks[r][0] < 0 else (a.name, picks[r][0], y, x)
                          for r, a in zip(roles, arrays, strict=True)]
                pos = tuple(None if picks[r][0] < 0 else picks[r][1] for r in roles)
                dsk[(step, d, y, x)] = (
                    task, prev, (oc.name, y, x), (dld.name, d, y), pos,
                    *blocks, *[(e.name, y, x) for e in extra],
                )
                prev = (step, d, y, x)
            # one task per block turns (sum, count) into (mean rate, coverage), so both outputs
            # come from the same block and the scheduler frees the inputs promptly
            dsk[(final, 0, 0, y, x)] = (_finish_month, prev, (oc.name, y, x), (dark.name, y), n)
    graph = HighLevelGraph.from_collections(final, dsk,
                                            dependencies=[*arrays, *extra, dld, oc, dark])
    out = da.Array(graph, final, chunks=((len(names),), (2,)) + spatial, dtype=np.float64)
    coords = {"lat": first["lat"], "lon": first["lon"]}
    return [(xr.DataArray(out[i, 0], dims=("lat", "lon"), coords=coords),
             xr.DataArray(out[i, 1], dims=("lat", "lon"), coords=coords))
            for i in range(len(names))]


def _finish_month(sums: np.ndarray, ocean: np.ndarray, dark_rows: np.ndarray, n_days: int) -> np.ndarray:
    """(sum, count) of valid daily rates -> (mean rate, coverage); NaN off the ocean; for each
    model (``sums`` shaped (model, 2, lat, lon); the result has that shape).

    ``dark_rows``: per latitude row, the polar-night days that had no input (rate 0, observed).
    """
    total = sums[:, 0]
    count = sums[:, 1] + np.where(ocean, dark_rows[:, None], 0.0)[None]
    valid = count > 0
    mean = np.where(valid, total / np.where(valid, count, 1.0), np.nan)
    coverage = np.where(ocean[None], count / n_days, np.nan)
    return np.stack([mean, coverage], axis=1)


#: Quantities summed per region, in this order.
SUM_FIELDS = ("ocean_area_m2", "observed_area_m2", "integral_mg_d", "coverage_area_m2")


#: Most label layers a :class:`RegionMasks` holds before further overlapping regions are
#: packed as bits instead (a layer costs 2 bytes a cell, a bit plane 2 bytes per 16 regions).
MAX_LABEL_LAYERS = 4


@dataclass(frozen=True)
class MaskWindow:
    """A region's boolean mask inside the rows and columns of the grid it can touch.

    ``rows`` and ``cols`` are slices of the (lat, lon) grid; ``mask`` has their shape.
    """

    rows: slice
    cols: slice
    mask: np.ndarray

    @classmethod
    def of(cls, mask: np.ndarray) -> MaskWindow:
        """The smallest window holding every True cell of a full (lat, lon) mask."""
        mask = np.asarray(mask, dtype=bool)
        r = np.flatnonzero(mask.any(axis=1))
        c = np.flatnonzero(mask.any(axis=0))
        if r.size == 0:
            return cls(slice(0, 0), slice(0, 0), np.zeros((0, 0), bool))
        rows, cols = slice(int(r[0]), int(r[-1]) + 1), slice(int(c[0]), int(c[-1]) + 1)
        return cls(rows, cols, mask[rows, cols])


def _label_dtype(n_regions: int | None):
    """uint16 holds labels 1..65535 (0 is "no region"); uint32 beyond (or when unknown)."""
    return np.uint16 if n_regions is not None and n_regions < 65535 else np.uint32


class RegionMasks(Mapping):
    """Region name -> boolean (lat, lon) mask, stored as a few integer planes.

    ``planes`` (shape (n_planes, lat, lon)) holds first ``n_label_layers`` label layers: each
    cell holds ``r + 1`` for the region ``r`` it belongs to in that layer, 0 for none; regions
    in one layer never share a cell. Each region goes into the first layer where it overlaps no
    region already there, so a set of non-overlapping regions (provinces, zones) is one layer
    however many regions it has, and a "whole sea" box over them adds a second. A region that
    would need more than :data:`MAX_LABEL_LAYERS` layers is packed instead as one bit of the
    remaining planes (``bit_regions[j]`` is bit ``j % B`` of bit plane ``j // B``, ``B`` the
    bits of the dtype). The dtype is uint16 below 65,535 regions, else uint32.

    Memory: 2 bytes a cell per layer (4 with uint32), plus 2 bytes a cell per 16 packed
    regions. Masks are unpacked only when asked for (figures).
    """

    def __init__(
        self,
        names: list[str],
        planes: np.ndarray | None,
        *,
        n_label_layers: int = 0,
        bit_regions: tuple[int, ...] = (),
        windows: list[tuple[slice, slice]] | None = None,
    ):
        self.names = list(names)
        # (rows, cols) slices holding each region's cells: unpacking reads only those
        self.windows = windows
        if planes is not None and np.ndim(planes) == 2:  # one plane
            planes = np.asarray(planes)[None]
        if planes is not None and self.names and not n_label_layers and not bit_regions:
            bit_regions = range(len(self.names))  # bits only, region r = bit r
        self.planes = planes
        self.n_label_layers = int(n_label_layers)
        self.bit_regions = tuple(int(r) for r in bit_regions)
        self._index = {n: i for i, n in enumerate(self.names)}
        self._bit_of = {r: j for j, r in enumerate(self.bit_regions)}

    @property
    def bits(self) -> np.ndarray | None:
        """The planes array (name kept for callers of the single packed bit array)."""
        return self.planes

    @property
    def nbytes(self) -> int:
        """Bytes held by the planes."""
        return 0 if self.planes is None else int(self.planes.nbytes)

    @classmethod
    def build(
        cls,
        named_masks: Iterable[tuple[str, np.ndarray | MaskWindow]],
        *,
        shape: tuple[int, int] | None = None,
        n_regions: int | None = None,
        max_label_layers: int = MAX_LABEL_LAYERS,
    ) -> RegionMasks:
        """Store masks given as ``(name, mask)`` pairs, one at a time (an iterator is fine).

        Parameters
        ----------
        named_masks : iterable of (str, mask)
            ``mask`` is a full boolean (lat, lon) array or a :class:`MaskWindow`.
        shape : (int, int), optional
            Grid shape; needed when the first mask is a window, else taken from it.
        n_regions : int, optional
            Number of regions, to choose the dtype up front (default: ``len(named_masks)``
            when it has one).
        max_label_layers : int
            Label layers before further overlapping regions are packed as bits (0: all bits).
        """
        if n_regions is None and hasattr(named_masks, "__len__"):
            n_regions = len(named_masks)
        dtype = np.dtype(_label_dtype(n_regions))
        nbits = dtype.itemsize * 8
        names: list[str] = []
        layers: list[np.ndarray] = []
        bit_planes: list[np.ndarray] = []
        bit_regions: list[int] = []
        windows: list[tuple[slice, slice]] = []
        # with the number of regions known, the planes are views of one zeroed buffer of the
        # most planes they can need (label layers, then bit planes): no copy to stack them at
        # the end, and the pages of cells no region touches are never written
        cap = (None if n_regions is None
               else min(max_label_layers, n_regions) + -(-n_regions // nbits))
        buf: list[np.ndarray] = []

        def new_plane() -> np.ndarray:
            k = len(layers) + len(bit_planes)
            if cap is None or k >= cap:  # more regions than n_regions said: stacked at the end
                buf.clear()
                return np.zeros(shape, dtype=dtype)
            if not buf:
                if k:  # planes made before without the buffer
                    return np.zeros(shape, dtype=dtype)
                buf.append(np.zeros((cap, *shape), dtype=dtype))
            return buf[0][k]

        for name, mask in named_masks:
            r = len(names)
            if r + 1 > np.iinfo(dtype).max:
                raise ValueError(f"more than {np.iinfo(dtype).max} regions: pass n_regions")
            win = mask if isinstance(mask, MaskWindow) else MaskWindow.of(mask)
            if shape is None:
                shape = np.shape(mask)
                if isinstance(mask, MaskWindow) or len(shape) != 2:
                    raise ValueError("give the grid `shape` when masks come as windows")
            names.append(name)
            windows.append((win.rows, win.cols))
            sub = win.mask
            placed = False
            for layer in layers:
                view = layer[win.rows, win.cols]
                if not view[sub].any():
                    view[sub] = r + 1
                    placed = True
                    break
            if placed:
                continue
            if len(layers) < max_label_layers and not bit_planes:
                layer = new_plane()
                layer[win.rows, win.cols][sub] = r + 1
                layers.append(layer)
                continue
            j = len(bit_regions)
            if j % nbits == 0:
                bit_planes.append(new_plane())
            bit_planes[-1][win.rows, win.cols] |= sub.astype(dtype) << dtype.type(j % nbits)
            bit_regions.append(r)
        n_layers = len(layers)
        if buf:  # the planes used, in the buffer's order
            planes = buf[0][: n_layers + len(bit_planes)]
        else:
            planes = np.stack(layers + bit_planes) if (layers or bit_planes) else None
        return cls(names, planes, n_label_layers=n_layers, bit_regions=tuple(bit_regions),
                   windows=windows)

    def __getitem__(self, name: str) -> np.ndarray:
        r = self._index[name]
        planes = self.planes
        out = np.zeros(planes.shape[1:], dtype=bool)
        win = self.windows[r] if self.windows is not None else (slice(None), slice(None))
        if r in self._bit_of:
            j = self._bit_of[r]
            nbits = planes.dtype.itemsize * 8
            plane = planes[self.n_label_layers + j // nbits][win]
            out[win] = ((plane >> plane.dtype.type(j % nbits)) & 1).astype(bool)
            return out
        for k in range(self.n_label_layers):
            out[win] |= planes[k][win] == r + 1
        return out

    def __iter__(self):
        return iter(self.names)

    def __len__(self) -> int:
        return len(self.names)


def region_bits(masks: list[np.ndarray]) -> RegionMasks:
    """Boolean (lat, lon) masks stored as bits only (bit r = region r), any number of them.

    For small sets and tests; :func:`euphotic.regions.region_masks` builds the compact form
    (label layers first) for a run. Pass the result as ``bits`` to :func:`region_sums`.
    """
    return RegionMasks.build([(str(r), m) for r, m in enumerate(masks)], max_label_layers=0)


def _block_sums(npp, cov, ocean, area_rows, *planes, n_regions, n_label_layers, bit_regions):
    """Per-block partial sums, shape (1, 1, n_regions, 4) (see :data:`SUM_FIELDS`).

    One pass over the block per label layer (``np.bincount`` on the labels, weighted by each
    field) gives every region of that layer at once; regions packed as bits are summed one by
    one (only those that overflow the label layers).
    """
    w = np.broadcast_to(area_rows, npp.shape) * np.asarray(ocean, bool)
    observed = np.isfinite(npp)
    fields = (
        w,
        w * observed,
        w * np.where(observed, npp, 0.0),
        w * np.where(np.isfinite(cov), cov, 0.0),
    )
    out = np.zeros((1, 1, n_regions, len(SUM_FIELDS)))
    for k in range(n_label_layers):
        labels = np.asarray(planes[k]).ravel().astype(np.intp)  # once, not in each bincount
        for f, values in enumerate(fields):
            out[0, 0, :, f] += np.bincount(labels, weights=values.ravel(),
                                           minlength=n_regions + 1)[1:]
    if bit_regions:
        bit_planes = [np.asarray(p) for p in planes[n_label_layers:]]
        nbits = bit_planes[0].dtype.itemsize * 8
        flat = np.stack([v.ravel() for v in fields], axis=1)  # (cells, 4)
        for j, r in enumerate(bit_regions):
            plane = bit_planes[j // nbits]
            inside = ((plane >> plane.dtype.type(j % nbits)) & 1).astype(bool).ravel()
            out[0, 0, r, :] = flat[inside].sum(axis=0)
    return out


def _block_sums_stacked(npp, cov, ocean, area_rows, planes, **kw):
    """:func:`_block_sums` with the planes as one (planes, y, x) array."""
    return _block_sums(npp, cov, ocean, area_rows, *planes, **kw)


@dataclass
class RegionSumsLazy:
    """Lazy regional sums for one month and model; finish with :func:`finish_totals`."""

    regions: list[str]
    month: np.datetime64
    model: str
    n_days: int
    sums: object  # dask or numpy array (n_regions, 4), fields as SUM_FIELDS


def region_sums(
    maps: MonthlyMaps,
    regions: RegionMasks | list[str],
    bits,
    ocean: xr.DataArray,
    area_rows_m2: np.ndarray,
) -> RegionSumsLazy:
    """Lazy area integrals of a monthly map over every region's ocean cells, in one pass.

    Parameters
    ----------
    regions : RegionMasks, or a list of region names
        The regions, and the layout of the planes (label layers, bits).
    bits : integer array (numpy or dask) (planes, lat, lon), or a RegionMasks
        ``regions.planes``, or a dask array of them (e.g. scattered to a cluster's workers).
        With a list of names, ``bits`` must be a :class:`RegionMasks` (e.g. from
        :func:`region_bits`) so that the planes are read with their layout.

    Raises
    ------
    TypeError
        Names with a bare array: the layout of the planes would be unknown.
    ocean : boolean (lat, lon) DataArray (lazy when taken from temperature)
    area_rows_m2 : (lat,) area of one cell in each grid row, m2 (regular grid)
    """
    import dask.array as da

    if isinstance(bits, RegionMasks):
        layout, bits = bits, bits.planes
    elif isinstance(regions, RegionMasks):
        layout = regions
    else:
        raise TypeError(
            "region_sums: give the RegionMasks (as `regions` or `bits`), not only names and an "
            "array: the planes hold label layers and bits"
        )
    names = list(regions.names if isinstance(regions, RegionMasks) else regions)
    if len(names) != len(layout):
        raise ValueError(f"region_sums: {len(names)} names for {len(layout)} region masks")
    n_layers, bit_regions = layout.n_label_layers, layout.bit_regions
    npp = maps.npp.data
    if not isinstance(npp, da.Array):
        npp = da.from_array(np.asarray(npp), chunks=-1)
    chunks = npp.chunks
    cov = da.asarray(maps.coverage.data).rechunk(chunks)
    oc = (
        da.asarray(ocean.data).rechunk(chunks)
        if isinstance(ocean.data, da.Array)
        else da.from_array(np.asarray(ocean.values), chunks=chunks)
    )
    if bits.ndim == 2:
        bits = bits[None]
    b = (
        bits.rechunk((-1,) + chunks)
        if isinstance(bits, da.Array)
        else da.from_array(np.asarray(bits), chunks=(-1,) + chunks)
    )
    rows = da.from_array(np.asarray(area_rows_m2, np.float64)[:, None], chunks=(chunks[0], 1))
    n = len(names)
    # one task per block; the planes enter as one (planes, y, x) block, not one getitem
    # task per plane (those changed dask's task order so that every block's month mean was
    # held until the end: +0.12 GiB at 1/12 degree)
    parts = da.blockwise(
        _block_sums_stacked, "yxrf",
        npp, "yx", cov, "yx", oc, "yx", rows, "yw", b, "pyx",
        new_axes={"r": n, "f": len(SUM_FIELDS)},
        adjust_chunks={"y": lambda _: 1, "x": lambda _: 1},
        concatenate=True,
        dtype=np.float64,
        meta=np.empty((0, 0, 0, 0), np.float64),
        n_regions=n,
        n_label_layers=n_layers,
        bit_regions=tuple(bit_regions),
    )
    return RegionSumsLazy(
        regions=list(names),
        month=maps.month,
        model=maps.model,
        n_days=maps.n_days,
        sums=parts.sum(axis=(0, 1)),
    )


def warn_empty_regions(found: list[tuple[str, str, str, str, float]]) -> None:
    """One warning per region and flag for the empty totals gathered by :func:`finish_totals`
    (``found`` items: flag, region, month, model, ocean m2), listing the months and models,
    instead of one warning per month and model."""
    groups: dict[tuple[str, str], list] = {}
    for flag, name, month, model, ocean_m2 in found:
        groups.setdefault((flag, name), []).append((month, model, ocean_m2))
    for (flag, name), items in groups.items():
        months = list(dict.fromkeys(m for m, _, _ in items))
        models = list(dict.fromkeys(md for _, md, _ in items))
        if len(items) == 1:
            month, model, ocean_m2 = items[0]
            where = f"region {name!r}, {month}, model {model}"
        else:
            shown = ", ".join(months[:6]) + (f" and {len(months) - 6} more" if len(months) > 6
                                             else "")
            where = (f"region {name!r}, {len(months)} month(s) ({shown}), model(s) "
                     f"{', '.join(models)}")
            ocean_m2 = items[0][2]
        if flag == FLAG_NO_OCEAN:
            _log.warning("%s: no ocean cell of the grid in the region; mean and totals left "
                         "empty (flag %s)", where, flag)
        else:
            _log.warning("%s: no valid estimate on the region's %.0f km2 of ocean; mean and "
                         "totals left empty (flag %s)", where, ocean_m2 / 1e6, flag)


def finish_totals(lazy: RegionSumsLazy, sums: np.ndarray, *,
                  min_coverage: float | None = None,
                  empty: list | None = None) -> list[dict]:
    """Rows of the regional totals table from the computed sums (keys: the columns of
    :data:`euphotic.outputs.TOTALS_COLUMNS`).

    ``total_TgC``: monthly mean rate integrated over the observed cells, times the days of the
    month. ``total_filled_TgC``: observed area-mean rate times the region's whole ocean area and
    the days of the month. Never a silent zero: where nothing was observed the mean and totals
    are NaN (empty cells), ``flag`` says why (:data:`FLAG_NO_OCEAN`, :data:`FLAG_NO_DATA`) and
    one warning per case goes to the ``euphotic`` logger. A region whose coverage is below
    ``min_coverage`` (0-1) is flagged :data:`FLAG_LOW_COVERAGE` (its numbers are kept).
    With an ``empty`` list, the empty cases are appended to it (for one summary warning per
    region through :func:`warn_empty_regions`) instead of each being warned about here.
    """
    found = [] if empty is None else empty
    rows = []
    to_tg = lazy.n_days / MG_PER_G / G_PER_TG
    for name, (ocean_m2, observed_m2, integral, cov_m2) in zip(
        lazy.regions, np.asarray(sums), strict=True
    ):
        flags = []
        if not ocean_m2 > 0:
            flags.append(FLAG_NO_OCEAN)
            found.append((FLAG_NO_OCEAN, name, str(lazy.month), lazy.model, float(ocean_m2)))
        elif not observed_m2 > 0:
            flags.append(FLAG_NO_DATA)
            found.append((FLAG_NO_DATA, name, str(lazy.month), lazy.model, float(ocean_m2)))
        seen = observed_m2 > 0
        coverage = cov_m2 / ocean_m2 if ocean_m2 > 0 else np.nan
        if seen and min_coverage is not None and coverage < min_coverage:
            flags.append(FLAG_LOW_COVERAGE)
        mean = integral / observed_m2 if seen else np.nan
        rows.append(
            {
                "region": name,
                "month": str(lazy.month),
                "model": lazy.model,
                "mean_npp_mgC_m-2_d-1": mean,
                "observed_area_km2": observed_m2 / 1e6,
                "ocean_area_km2": ocean_m2 / 1e6,
                "coverage_fraction": coverage,
                "total_TgC": integral * to_tg if seen else np.nan,
                "total_filled_TgC": mean * ocean_m2 * to_tg if seen else np.nan,
                "flag": ";".join(flags),
            }
        )
    if empty is None:
        warn_empty_regions(found)
    return rows
