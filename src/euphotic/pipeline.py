"""The run: open inputs, build one lazy graph for all months and models, compute it once,
then put the files in place. I/O and orchestration only; the science is in models/,
geo and aggregate."""

from __future__ import annotations

import contextlib
import logging
import os
import sys
from dataclasses import dataclass, field
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from euphotic import (
    aggregate,
    lazyread,
    methods,
    ocean,
    outputs,
    preflight,
    roles,
    runfolder,
    screen,
)
from euphotic.config import RunConfig
from euphotic.errors import ConfigError, NoValidDataError
from euphotic.geo import cell_area
from euphotic.models import SPECS, model_parameter_attrs, parameter_settings
from euphotic.regions import region_masks

log = logging.getLogger("euphotic")


@dataclass
class Prepared:
    """Inputs opened lazily on the chlorophyll grid, with the months to produce.

    ``inputs`` holds every configured input (role -> DataArray on the chlorophyll grid,
    day length included when configured), in the role catalogue's order; ``.chl``, ``.par``,
    ``.sst`` and ``.day_length`` read it for older callers.
    """

    inputs: dict[str, xr.DataArray]
    ocean: xr.DataArray  # bool (lat, lon); numpy-backed unless taken from temperature
    area_rows_m2: np.ndarray  # (lat,) area of one cell in each row
    months: list[np.datetime64]
    region_masks: aggregate.RegionMasks = field(
        default_factory=lambda: aggregate.RegionMasks([], None)
    )
    skipped_months: list[np.datetime64] = field(default_factory=list)

    @property
    def chl(self) -> xr.DataArray:
        return self.inputs["chl"]

    @property
    def par(self) -> xr.DataArray | None:
        return self.inputs.get("par")

    @property
    def sst(self) -> xr.DataArray | None:
        return self.inputs.get("sst")

    @property
    def day_length(self) -> xr.DataArray | None:
        return self.inputs.get("day_length")


@dataclass
class RunResult:
    """What a run put in place, and the totals table rows."""

    maps: list[Path]
    totals_csv: Path
    rows: list[dict]
    figures: list[Path] = field(default_factory=list)
    skipped_months: list[np.datetime64] = field(default_factory=list)
    #: (model, month) maps reused unchanged from an earlier run or an interrupted one
    reused: list[tuple[str, str]] = field(default_factory=list)
    #: what the run did to the folder besides its outputs (recovery, clean-up)
    notes: list[str] = field(default_factory=list)
    manifest: Path | None = None
    #: what the steps after the run added (euphotic.steps.Done, in order)
    steps: list = field(default_factory=list)
    #: the ensemble's outputs (maps, table, metadata) of a run of two or more models
    ensemble: list[Path] = field(default_factory=list)


def prepare(cfg: RunConfig) -> Prepared:
    """Open and check every input and build masks; nothing on the grid is computed."""
    # the checks `euphotic check` makes too (euphotic.preflight): inputs, grids, months
    opened = preflight.open_inputs(cfg)
    opened.raise_first()
    inputs = {r: opened.on_grid[r] for r in roles.ordered(opened.on_grid)}
    chl = inputs[roles.GRID_ROLE]
    lat, lon = chl["lat"].values, chl["lon"].values
    plan = preflight.plan_months(cfg, inputs)
    if plan.error is not None:
        raise plan.error
    keep, skipped = plan.months, plan.skipped
    for m in skipped:
        log.warning("skipping %s: no day of it is covered by all inputs (%s)", m,
                    ", ".join(cfg.required_inputs))

    if cfg.ocean_source == "file":
        ocean_np = ocean.file_ocean_mask(str(cfg.land_mask), cfg.land_mask_variable, lat, lon)
        ocean_da = xr.DataArray(ocean_np, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    elif cfg.ocean_source == "package":
        ocean_np = ocean.packaged_ocean_mask(lat, lon)
        ocean_da = xr.DataArray(ocean_np, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    else:  # source = "temperature": the cells with a valid sea surface temperature
        ocean_da = ocean.temperature_ocean_mask(inputs["sst"])
    area_rows = cell_area(lat, lon[:2], earth=cfg.earth)[:, 0]  # regular grid: same along a row
    masks = region_masks(cfg.regions, lat, lon)
    return Prepared(
        inputs=inputs,
        ocean=ocean_da,
        area_rows_m2=area_rows,
        months=keep,
        region_masks=masks,
        skipped_months=skipped,
    )


@contextlib.contextmanager
def compute_engine(
    scheduler: str | None = None, workers: int | None = None, threads_per_worker: int | None = None
):
    """Where the one compute runs: the local threaded scheduler (default), an existing
    dask.distributed scheduler at ``scheduler`` (e.g. ``tcp://host:8786``), or a LocalCluster
    of ``workers`` processes started for this run. Yields the distributed Client or None."""
    if scheduler and workers:
        raise ValueError("give either a scheduler address or a number of workers, not both")
    if not scheduler and not workers:
        yield None
        return
    from distributed import Client, LocalCluster

    if scheduler:
        with Client(scheduler, set_as_default=True) as client:
            yield client
        return
    with (
        LocalCluster(
            n_workers=int(workers),
            threads_per_worker=threads_per_worker or 1,
            processes=True,
            dashboard_address=None,
        ) as cluster,
        Client(cluster, set_as_default=True) as client,
    ):
        yield client


def _grid_masks(prep: Prepared, client):
    """The ocean mask and region bits as dask arrays in the map's blocks, each held once: in
    the graph for the local scheduler, or sent once to the cluster's workers (a large array
    embedded in the graph would travel through the scheduler with it)."""
    import dask.array as da

    spatial = prep.chl.data.chunks[1:] if isinstance(prep.chl.data, da.Array) else "auto"

    def lazy(arr: np.ndarray) -> da.Array:
        chunks = spatial if spatial == "auto" else (-1,) * (arr.ndim - 2) + tuple(spatial)
        if client is None:
            return lazyread.held_array(arr, chunks, "grid-mask")
        future = client.scatter(arr, broadcast=False)
        return da.from_delayed(dask.delayed(future), shape=arr.shape, dtype=arr.dtype).rechunk(chunks)

    ocean_mask = prep.ocean
    if not isinstance(prep.ocean.data, da.Array):
        ocean_mask = prep.ocean.copy(data=lazy(np.asarray(prep.ocean.values, bool)))
    bits = prep.region_masks.bits
    return ocean_mask, (None if bits is None else lazy(bits))


class _SharedTasks:
    """The tasks of the run's inputs (reading, decoding, screening counts) and grid masks,
    made into one plain graph once per run, so that a month's graph is cut out of it by
    walking from the month's outputs: the cost of a month then grows with that month's tasks,
    not with the number of files in the whole run (graph optimisation of layers spanning the
    whole stack, repeated for every month, cost more than the month's arithmetic)."""

    def __init__(self, *collections):
        from dask._task_spec import convert_legacy_graph
        from dask.base import unpack_collections
        from dask.highlevelgraph import HighLevelGraph

        colls, _ = unpack_collections(*collections, traverse=True)
        graph = HighLevelGraph.merge(*[c.__dask_graph__() for c in colls]) if colls else None
        self.layers = set(graph.layers) if graph is not None else set()
        self.tasks = convert_legacy_graph(dict(graph)) if graph is not None else {}

    def add(self, collection) -> None:
        """Add the tasks of ``collection`` (e.g. a mask made from a computed value)."""
        from dask._task_spec import convert_legacy_graph

        graph = collection.__dask_graph__()
        self.layers.update(graph.layers)
        self.tasks.update(convert_legacy_graph(dict(graph)))

    def tasks_for(self, keys) -> dict:
        """The tasks that ``keys`` need, taken from this graph (``keys`` must be in it)."""
        return _cull(self.tasks, keys)

    def month_graph(self, collections) -> tuple[dict, list]:
        """(plain graph of only the tasks the collections need, their keys)."""
        from dask._task_spec import convert_legacy_graph
        from dask.core import flatten
        from dask.highlevelgraph import HighLevelGraph

        graph = HighLevelGraph.merge(*[c.__dask_graph__() for c in collections])
        own = {}
        for name, layer in graph.layers.items():
            if name not in self.layers:
                own.update(layer)
        own = convert_legacy_graph(own, all_keys=_Keys(own, self.tasks))
        keys = [c.__dask_keys__() for c in collections]
        return _cull(_Tasks(own, self.tasks), list(flatten(keys))), keys


class _Keys:
    """``in`` over two graphs without merging them."""

    def __init__(self, a, b):
        self.a, self.b = a, b

    def __contains__(self, k) -> bool:
        try:
            return k in self.a or k in self.b
        except TypeError:  # an unhashable literal
            return False


class _Tasks(_Keys):
    def __getitem__(self, k):
        return self.a[k] if k in self.a else self.b[k]


def _cull(tasks, keys) -> dict:
    """The tasks reachable from ``keys`` in ``tasks`` (converted graph nodes)."""
    out: dict = {}
    work = list(keys)
    while work:
        k = work.pop()
        if k in out:
            continue
        node = tasks[k]
        out[k] = node
        work.extend(d for d in node.dependencies if d not in out)
    return out


#: Input values (cells x time steps, all inputs) a batch of months may read and still be
#: computed in the calling thread: below this the work takes milliseconds, and handing
#: tasks to threads costs more than it saves (a decade of monthly composites on a basin grid).
SMALL_BATCH_VALUES = 2**20


def _touching(d: xr.DataArray, first, last) -> np.ndarray:
    """Which periods of input ``d`` touch the months ``first`` to ``last`` (boolean)."""
    m0 = np.datetime64(first, "M").astype("datetime64[D]")
    m1 = (np.datetime64(last, "M") + 1).astype("datetime64[D]")
    return ((d["period_start"].values.astype("datetime64[D]") < m1)
            & (d["period_end"].values.astype("datetime64[D]") > m0))


def _batch_values(prep: Prepared, batch) -> int:
    """Input values (cells x time steps of every input) the months of ``batch`` read."""
    return sum(int(_touching(d, min(batch), max(batch)).sum())
               * d.sizes.get("lat", 1) * d.sizes.get("lon", 1)
               for d in prep.inputs.values() if "period_start" in d.coords)


def _compute(objs, *, client, progress: bool, shared: _SharedTasks | None = None,
             small: bool = False):
    """Compute ``objs`` once, with a progress bar when asked.

    With ``shared`` (local scheduler), the graph is cut out of the run's shared tasks and
    given to the scheduler as it is: no graph optimisation per compute; ``small`` (see
    :data:`SMALL_BATCH_VALUES`): in the calling thread."""
    if client is None and shared is not None:
        from dask.base import get_scheduler, unpack_collections

        collections, repack = unpack_collections(*objs, traverse=True)
        if not collections:
            return objs
        dsk, keys = shared.month_graph(collections)
        if dask.config.get("scheduler", None) is None and "distributed" not in sys.modules:
            # what get_scheduler picks when no cluster can exist, without importing
            # dask.distributed to ask (a quarter of a second at start)
            if small:
                from dask.local import get_sync as schedule
            else:
                from dask.threaded import get as schedule
        else:
            schedule = get_scheduler(collections=collections)
        posts = [c.__dask_postcompute__() for c in collections]
        if progress:
            from dask.diagnostics import ProgressBar

            with ProgressBar(minimum=1.0, dt=0.5):
                results = schedule(dsk, keys)
        else:
            results = schedule(dsk, keys)
        return repack([f(r, *a) for r, (f, a) in zip(results, posts, strict=True)])
    if client is not None:
        futures = client.compute(objs)
        if progress:
            from distributed import progress as dist_progress

            dist_progress(futures)
            print(file=sys.stderr)
        return client.gather(futures)
    if progress:
        from dask.diagnostics import ProgressBar

        with ProgressBar(minimum=1.0, dt=0.5):
            return dask.compute(*objs)
    return dask.compute(*objs)


def run(
    cfg: RunConfig,
    *,
    progress: bool = True,
    command: str = "euphotic run",
    scheduler: str | None = None,
    workers: int | None = None,
    force: bool = False,
    steps: bool = True,
) -> RunResult:
    """Produce monthly maps, the regional totals table and figures for a configuration.

    Every output is written into a staging folder inside ``cfg.output_dir`` and put in place
    only when all of them have succeeded (see :mod:`euphotic.runfolder`). Months whose maps
    are already there (or were finished by a killed run) with an unchanged fingerprint (input
    files, configuration, tool version) are reused; ``force=True`` recomputes everything.

    ``scheduler`` / ``workers`` choose a dask.distributed engine (see :func:`compute_engine`);
    by default the local threaded scheduler runs the graph.

    Then, with ``steps``, the steps after the run that ``cfg.steps`` configures
    (:func:`euphotic.steps.run_steps`: comparisons, figure set, methods and report), each
    committed on its own, under the same lock; a failing step raises
    :class:`euphotic.steps.StepError` with the run committed.
    """
    if not cfg.models:
        raise ConfigError(f"{cfg.path} [run]", "`models` is empty: name at least one model")
    cfg.models = list(dict.fromkeys(cfg.models))  # a model listed twice runs once
    prep = prepare(cfg)
    folder = runfolder.OutputFolder(Path(cfg.output_dir))
    with folder.locked(command):
        with compute_engine(scheduler, workers) as client:
            result = _run(cfg, prep, folder, progress=progress, command=command, client=client,
                          force=force)
        if steps and cfg.steps:  # still under the lock: no other command adds in between
            from euphotic.steps import run_steps

            result.steps = run_steps(cfg, folder.path, command=command, force=force)
    return result


#: Bumped when a change of the code changes the bytes of maps for the same inputs.
MAP_FORMAT = 2
#: Bumped when map figures change.
FIGURE_FORMAT = 2
#: Version of the regions.nc layout (in its fingerprint).
REGIONS_FORMAT = 2
#: RunConfig fields that do not change what a month's map or totals contain.
_NOT_IN_FINGERPRINT = {"path", "output_dir", "figures", "months_per_compute", "start", "end",
                       "models", "steps", "model_settings", "notes"}


def _input_files(prep: Prepared) -> dict[str, list[str]]:
    return {role: da.attrs["files"] for role, da in prep.inputs.items()}


def _files_for_month(da: xr.DataArray, month: np.datetime64) -> list[str]:
    """The input files whose periods touch ``month`` (all of them when the reader does not say
    which period came from which file)."""
    per = da.attrs.get("period_files")
    if per is None or len(per) != da.sizes["time"]:
        return list(da.attrs["files"])
    m0 = np.datetime64(month, "M").astype("datetime64[D]")
    m1 = (np.datetime64(month, "M") + 1).astype("datetime64[D]")
    s = da["period_start"].values.astype("datetime64[D]")
    e = da["period_end"].values.astype("datetime64[D]")
    hit = (s < m1) & (e > m0)
    return sorted({per[i] for i in np.flatnonzero(hit)})


def _item_fingerprints(cfg: RunConfig, prep: Prepared) -> dict[tuple[str, np.datetime64], str]:
    """Fingerprint of every (model, month) map: tool version, map format, the configuration
    (all that changes a map or its totals) and the identity (path, size, modification time)
    of the input files that touch the month."""
    import dataclasses

    from euphotic import __version__

    conf = {f.name: getattr(cfg, f.name) for f in dataclasses.fields(cfg)
            if f.name not in _NOT_IN_FINGERPRINT and f.name != "inputs"}
    base = Path(cfg.path).resolve().parent if cfg.path else None
    extra_files = [cfg.land_mask] if cfg.land_mask else []
    for r in cfg.regions:
        if getattr(r, "mask_file", None):
            extra_files.append(r.mask_file)
    conf_fp = runfolder.config_fingerprint(conf)
    aux = [runfolder.file_stat(p, base) for p in extra_files]
    # each map depends on the inputs its model declares, the grid's (chl) and, for an ocean
    # taken from temperature, sst: an input added for another model leaves it unchanged
    used = {}
    for model_name in cfg.models:
        roles = {"chl", *SPECS[model_name].roles}
        if cfg.ocean_source == "temperature":
            roles.add("sst")
        used[model_name] = [r for r in prep.inputs if r in roles]
    specs = {r: runfolder.config_fingerprint(cfg.inputs[r]) for r in prep.inputs if r in cfg.inputs}
    out = {}
    for month in prep.months:
        files = {role: [runfolder.file_stat(p, base) for p in _files_for_month(da, month)]
                 for role, da in prep.inputs.items()}
        for model_name in cfg.models:
            mine = used[model_name]
            out[(model_name, month)] = runfolder.config_fingerprint(
                [__version__, MAP_FORMAT, model_name, str(month), conf_fp, aux,
                 {r: files[r] for r in mine}, {r: specs.get(r) for r in mine},
                 cfg.model_settings.get(model_name, {})]
            )
    return out


def _batch_graph(cfg: RunConfig, prep: Prepared, items, ocean_mask, bits, input_files, command,
                 stage: runfolder.Stage, provenance: dict, extra_attrs: dict | None = None,
                 shared: _SharedTasks | None = None):
    """Lazy writes into the stage, regional sums and valid-cell counts of the (model, month)
    items of one batch. Returns (writes, sums, counts, names) in item order."""
    names = prep.region_masks.names
    writes, lazies, counts, files = [], [], [], []
    suffix = "zarr" if cfg.output_format == "zarr" else "nc"
    inputs = _prep_inputs(prep)
    # every model of a month in one fused pass: one read of each input block for all of them
    maps_of = {}
    for month in dict.fromkeys(mo for _, mo in items):
        runs = [(m, parameter_settings(m, cfg.model_settings.get(m), prep.region_masks))
                for m, mo in items if mo == month]
        for maps in aggregate.monthly_npp_models(runs, month, inputs=_month_inputs(
                inputs, month, shared), ocean=ocean_mask):
            maps_of[(maps.model, month)] = maps
    for model_name, month in items:
        maps = maps_of[(model_name, month)]
        attrs = dict(extra_attrs or {})
        attrs.update(model_parameter_attrs(model_name, cfg.model_settings.get(model_name)))
        ds = outputs.month_dataset(maps, title=cfg.title, input_files=input_files, command=command,
                                   earth=cfg.earth, provenance=provenance, metadata=cfg.metadata,
                                   extra_attrs=attrs)
        name = f"{outputs.month_stem(maps)}.{suffix}"
        files.append(name)
        writes.append(outputs.write_lazy(ds, stage.file(name), cfg.output_format))
        counts.append(maps.npp.notnull().sum().data)
        lazies.append(
            aggregate.region_sums(maps, prep.region_masks, bits, ocean_mask, prep.area_rows_m2)
            if names else None
        )
    return writes, lazies, counts, files


def _prep_inputs(prep: Prepared) -> dict[str, xr.DataArray]:
    """Role -> input on the grid (day length only when it is an input)."""
    return dict(prep.inputs)


def _month_inputs(inputs: dict[str, xr.DataArray], month: np.datetime64,
                  shared: _SharedTasks | None) -> dict[str, xr.DataArray]:
    """Each input cut to the time blocks holding the periods that touch ``month``, its graph
    one layer of only those blocks' tasks (taken from ``shared``): what the month's graph
    refers to does not grow with the number of files in the run."""
    import dask.array as da
    from dask._task_spec import Alias
    from dask.highlevelgraph import HighLevelGraph

    if shared is None:
        return dict(inputs)
    out = {}
    for role, d in inputs.items():
        a = d.data
        hit = np.flatnonzero(_touching(d, month, month))
        if not isinstance(a, da.Array) or not len(hit) or a.name not in shared.layers:
            out[role] = d
            continue
        bounds = np.concatenate([[0], np.cumsum(a.chunks[0])])
        b0, b1 = (int(np.searchsorted(bounds, i, side="right")) - 1 for i in (hit[0], hit[-1]))
        grid = [(y, x) for y in range(len(a.chunks[1])) for x in range(len(a.chunks[2]))]
        name = f"{a.name}-blocks-{b0}-{b1}"
        layer = shared.tasks_for([(a.name, b, y, x) for b in range(b0, b1 + 1) for y, x in grid])
        for b in range(b0, b1 + 1):
            for y, x in grid:
                layer[(name, b - b0, y, x)] = Alias((name, b - b0, y, x), (a.name, b, y, x))
        arr = da.Array(HighLevelGraph({name: layer}, {name: set()}), name,
                       chunks=(a.chunks[0][b0: b1 + 1],) + a.chunks[1:], meta=a._meta)
        out[role] = d.isel(time=slice(int(bounds[b0]), int(bounds[b1 + 1]))).copy(data=arr)
    return out


def _rows_to_json(rows: list[dict]) -> list[dict]:
    return [{k: (None if isinstance(v, float) and v != v else
                 float(v) if isinstance(v, np.floating) else v) for k, v in r.items()}
            for r in rows]


def _rows_from_json(rows: list[dict]) -> list[dict]:
    return [{k: (np.nan if v is None else v) for k, v in r.items()} for r in rows]


@contextlib.contextmanager
def _writing(where: Path, what: str):
    """Turn failures to write outputs into one clear line (a full disk above all: netCDF-C
    reports it as "NetCDF: HDF error")."""
    import errno
    import shutil

    try:
        yield
    except runfolder.OutputWriteError:
        raise
    except (OSError, RuntimeError) as exc:
        if isinstance(exc, OSError) and exc.errno not in (errno.ENOSPC, errno.EDQUOT, errno.EROFS,
                                                         errno.EACCES, errno.EIO, errno.EFBIG):
            raise
        if isinstance(exc, RuntimeError) and "NetCDF" not in str(exc) and "HDF" not in str(exc):
            raise
        try:
            free = shutil.disk_usage(where).free
        except OSError:
            free = None
        full = (isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT)) or (
            free is not None and free < 64 * 2**20)
        if full:
            reason = f"no space left on the device ({free / 2**20:.1f} MiB free)" if free is not None \
                else "no space left on the device"
        else:
            reason = (exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc))
        raise runfolder.OutputWriteError(
            f"{where}: cannot write {what}: {reason}; earlier results in the folder are unchanged"
        ) from exc


def _run(cfg: RunConfig, prep: Prepared, folder: runfolder.OutputFolder, *, progress: bool,
         command: str, client, force: bool) -> RunResult:
    import dask.array as dsa

    from euphotic import __version__

    out_dir = folder.path
    pending = folder.recover()
    input_files = _input_files(prep)
    provenance = outputs.provenance_attrs(cfg, input_files)  # once per run
    # units, conversions, periods, regridding and library versions, for `euphotic methods`
    provenance.update(methods.run_record(prep.inputs))
    # input screening (euphotic.screen): ranges known now, counts computed with each batch
    report = screen.Report(prep.inputs)
    fps = _item_fingerprints(cfg, prep)
    suffix = "zarr" if cfg.output_format == "zarr" else "nc"

    def map_name(model_name, month):
        return f"npp_{model_name}_{np.datetime64(month, 'M')}.{suffix}"

    previous = folder.manifest() or {}
    prev_outputs = previous.get("outputs", {})
    run_id = None
    stage = folder.new_stage({"version": __version__, "command": command,
                              "started": runfolder.now_iso()})
    run_id = stage.path.name.removeprefix(runfolder.STAGE_PREFIX)
    entries: dict[str, dict] = {}  # name -> manifest entry of every output of this run
    keep: set[str] = set()  # names reused where they are
    reused: list[tuple[str, str]] = []
    todo: list[tuple[str, np.datetime64]] = []
    empty_regions: list[tuple] = []  # regions without ocean or data, warned about once
    try:
        for model_name in cfg.models:
            for month in prep.months:
                name, fp = map_name(model_name, month), fps[(model_name, month)]
                if not force:
                    old = prev_outputs.get(name)
                    if old and old.get("fingerprint") == fp and runfolder.intact(out_dir / name, old):
                        entries[name] = old
                        keep.add(name)
                        reused.append((model_name, str(np.datetime64(month, "M"))))
                        continue
                    hit = _salvage(pending, stage, name, fp)
                    if hit is not None:
                        entries[name] = hit
                        reused.append((model_name, str(np.datetime64(month, "M"))))
                        continue
                todo.append((model_name, month))
        folder.discard_stale(pending)
        if reused:
            log.info("reusing %d unchanged month map(s)", len(reused))

        # the region masks file: its metadata now, its planes' chunks with the first batch
        regions_write = _region_file(cfg, prep, stage, entries, keep,
                                     {} if force else previous, provenance)
        ocean_mask, bits = _grid_masks(prep, client) if todo else (None, None)
        # local scheduler: the inputs' and masks' tasks made into one plain graph, once
        shared = _SharedTasks(
            [d.data for d in prep.inputs.values()],
            [c.totals for c in (d.attrs.get("screen_counts") for d in prep.inputs.values())
             if c is not None],
            ocean_mask.data, bits) if client is None and todo else None
        months_todo = list(dict.fromkeys(m for _, m in todo))
        per = cfg.months_per_compute or max(len(months_todo), 1)
        batches = [months_todo[i: i + per] for i in range(0, len(months_todo), per)]
        for i, batch in enumerate(batches):
            # one graph per batch of months (all models), computed once: memory and graph
            # size stay those of one batch however many years a run covers
            items = [(m, mo) for (m, mo) in todo if mo in batch]
            with _writing(out_dir, "the monthly maps"):  # the files' headers are written here
                writes, lazies, counts, names = _batch_graph(
                    cfg, prep, items, ocean_mask, bits, input_files, command, stage, provenance,
                    extra_attrs=report.static_attrs(), shared=shared)
            if progress and len(batches) > 1:
                span = f"{batch[0]}" if len(batch) == 1 else f"{batch[0]}..{batch[-1]}"
                print(f"computing {span} ({i + 1} of {len(batches)})", file=sys.stderr)
            # an ocean taken from temperature needs every file of it: computed with the first
            # batch, then held as an array, so later batches do not read the whole stack again
            lazy_ocean = ([ocean_mask.data] if shared is not None and i == 0
                          and len(batches) > 1 and isinstance(prep.ocean.data, dsa.Array)
                          else [])
            regions_now, regions_write = ([] if regions_write is None else [regions_write]), None
            with _writing(out_dir, "the monthly maps"):
                _, sums, n_valid, screened, *held = _compute(
                    [writes + regions_now, [z.sums for z in lazies if z is not None], counts,
                     report.lazy(batch), *lazy_ocean],
                    client=client, progress=progress, shared=shared,
                    small=_batch_values(prep, batch) <= SMALL_BATCH_VALUES)
                if regions_now:  # the region masks' chunks were written in this compute
                    _region_entry(stage, entries)
                # screening: warnings, and the counts of masked values into each month's file
                screen_attrs = report.finish(batch, screened)
                for (_, month), name in zip(items, names, strict=True):
                    screen.record_in_file(stage.file(name), screen_attrs[np.datetime64(month, "M")],
                                          cfg.output_format)
            if held:
                ocean_mask = ocean_mask.copy(data=lazyread.held_array(
                    np.asarray(held[0], bool), ocean_mask.data.chunks, "ocean"))
                shared.add(ocean_mask.data)
            sums = iter(sums)
            for (model_name, month), z, nv, name in zip(items, lazies, n_valid, names,
                                                        strict=True):
                rows = (aggregate.finish_totals(z, next(sums), min_coverage=cfg.min_coverage,
                                                empty=empty_regions)
                        if z is not None else [])
                entry = {"kind": "map", "model": model_name,
                         "month": str(np.datetime64(month, "M")),
                         "fingerprint": fps[(model_name, month)], "valid_cells": int(nv),
                         "rows": _rows_to_json(rows), **runfolder.stat_entry(stage.file(name))}
                stage.record(name, entry)
                entries[name] = entry
            with _writing(out_dir, "the run's staging index"):
                stage.save()  # after a kill, the next run reuses what is recorded here

        if regions_write is not None:  # no month to compute: the region masks alone
            with _writing(out_dir, "the region masks"):
                _compute([regions_write], client=client, progress=False)
            _region_entry(stage, entries)
        aggregate.warn_empty_regions(empty_regions)  # one warning per region, all months
        _check_not_empty(cfg, prep, entries)
        result = _finish(cfg, prep, folder, stage, entries, keep, previous, command=command,
                         input_files=input_files, run_id=run_id, provenance=provenance,
                         force=force)
    except KeyboardInterrupt:
        stage.save()  # finished months stay staged for the next run to reuse
        raise
    except BaseException:
        if not folder.abort(stage):  # nothing of a failed run is put in place ...
            log.warning("%s: the run stopped while putting its outputs in place; the next run "
                        "in this folder completes it", out_dir)  # ... unless it was committing
        raise
    result.reused = reused
    result.notes = folder.notes
    result.skipped_months = prep.skipped_months
    return result




def _salvage(pending: list[runfolder.Stage], stage: runfolder.Stage, name: str, fp: str):
    """Move a map finished by an interrupted run (same fingerprint) into this run's stage."""
    for old in pending:
        entry = old.items.get(name)
        src = old.file(name)
        if entry and entry.get("fingerprint") == fp and runfolder.intact(src, entry):
            os.replace(src, stage.file(name))
            entry = {**entry, **runfolder.stat_entry(stage.file(name))}
            stage.record(name, entry)
            return entry
    return None


def _check_not_empty(cfg: RunConfig, prep: Prepared, entries: dict[str, dict]) -> None:
    """Warn about months without any valid estimate; fail when the whole run has none."""
    maps = [e for e in entries.values() if e.get("kind") == "map"]
    empty = [e for e in maps if e.get("valid_cells") == 0]
    for e in empty:
        log.warning("%s %s: no valid estimate anywhere on the grid (every input value missing "
                    "or masked); its totals are left empty and flagged", e["model"], e["month"])
    if maps and len(empty) == len(maps):
        raise NoValidDataError(
            f"{cfg.path}: no valid estimate in any month: every chlorophyll value, or every "
            "value of another input on the ocean, is missing or masked (see the warnings "
            "above); nothing was written"
        )


def _region_file(cfg, prep, stage, entries, keep, previous, provenance):
    """``regions.nc`` into the stage, or kept when the masks and areas it holds are unchanged
    (a content fingerprint: the planes, windows, names, cell areas and region sources).

    Returns the lazy write of its planes (computed with the first batch of months, then
    :func:`_region_entry` records it) or None when the file is kept or written already."""
    name = outputs.REGIONS_FILE
    masks, lat, lon = prep.region_masks, prep.chl["lat"].values, prep.chl["lon"].values
    sources = provenance.get("region_sources", "")
    h = runfolder.hashlib.blake2b(digest_size=16)  # the masks as held: no copy is made
    for arr in (masks.planes, prep.area_rows_m2, lat, lon):  # hashed in place, not copied
        h.update(b"" if arr is None else memoryview(np.ascontiguousarray(arr)).cast("B"))
    h.update(repr([(w[0].start, w[0].stop, w[1].start, w[1].stop)
                   for w in masks.windows or []]).encode())
    fp = runfolder.config_fingerprint([h.hexdigest(), list(masks.names), masks.n_label_layers,
                                       list(masks.bit_regions), sources, cfg.earth,
                                       REGIONS_FORMAT])
    old = previous.get("outputs", {}).get(name)
    out_dir = stage.path.parent
    if old and old.get("fingerprint") == fp and runfolder.intact(out_dir / name, old):
        entries[name] = old
        keep.add(name)
        return
    ds = outputs.region_dataset(masks, lat, lon, prep.area_rows_m2, earth=cfg.earth,
                                region_sources=sources, name="region-planes")
    with _writing(out_dir, "the region masks"):
        lazy = outputs.write_regions_lazy(stage.file(name), ds)
    entries[name] = {"kind": "regions", "fingerprint": fp}
    if lazy is None:
        _region_entry(stage, entries)
    return lazy


def _region_entry(stage, entries) -> None:
    """Record the size and time of the ``regions.nc`` written into the stage."""
    name = outputs.REGIONS_FILE
    entries[name].update(runfolder.stat_entry(stage.file(name)))


def _finish(cfg, prep, folder, stage, entries, keep, previous, *, command, input_files, run_id,
            provenance, force=False):
    """Tables, figures and the manifest into the stage, then the commit."""
    from euphotic import __version__

    out_dir = folder.path
    order = [(m, mo) for m in cfg.models for mo in prep.months]
    suffix = "zarr" if cfg.output_format == "zarr" else "nc"
    map_names = [f"npp_{m}_{np.datetime64(mo, 'M')}.{suffix}" for m, mo in order]
    rows = [r for n in map_names for r in _rows_from_json(entries[n].get("rows", []))]
    totals = stage.file("regional_totals.csv")
    sidecar = outputs.totals_metadata_path(totals)
    with _writing(out_dir, "the regional totals table"):
        outputs.write_totals_csv(rows, totals)
        outputs.write_totals_metadata(
            sidecar, csv_name=totals.name, models=cfg.models, earth=cfg.earth,
            provenance=provenance, metadata=cfg.metadata)
    entries[totals.name] = {"kind": "table", **runfolder.stat_entry(totals)}
    entries[sidecar.name] = {"kind": "table metadata", "of": totals.name, **runfolder.stat_entry(sidecar)}
    # two or more models: their spread (npp_ensemble_YYYY-MM.nc, ensemble_totals.csv)
    from euphotic import ensemble_outputs

    with _writing(out_dir, "the ensemble of the models"):
        ensemble = ensemble_outputs.add_to_run(
            cfg, prep.months, stage, entries, keep, {} if force else previous,
            map_names={(m, str(np.datetime64(mo, "M"))): n for (m, mo), n in zip(
                order, map_names, strict=True)},
            rows=rows, command=command, provenance=provenance)

    figures: list[Path] = []
    prev_outputs = previous.get("outputs", {})
    for name in map_names:  # map figures: kept when their map is unchanged
        png = name.rsplit(".", 1)[0] + ".png"
        fp = runfolder.config_fingerprint([entries[name]["fingerprint"], FIGURE_FORMAT])
        old = prev_outputs.get(png)
        if name in keep and old and old.get("fingerprint") == fp and runfolder.intact(out_dir / png, old):
            entries[png] = old
            keep.add(png)
            figures.append(out_dir / png)
            continue
        if not cfg.figures:
            continue
        from euphotic import figures as figs

        src = out_dir / name if name in keep else stage.file(name)
        with _writing(out_dir, f"the figure {png}"):
            figs.map_figure(src, stage.file(png), prep.region_masks)
        entries[png] = {"kind": "figure", "of": name, "fingerprint": fp,
                        **runfolder.stat_entry(stage.file(png))}
        figures.append(out_dir / png)
    if cfg.figures and rows:
        from euphotic import figures as figs

        with _writing(out_dir, "the totals chart"):
            figs.totals_figure(rows, stage.file("regional_totals.png"))
        entries["regional_totals.png"] = {"kind": "figure", **runfolder.stat_entry(stage.file("regional_totals.png"))}
        figures.append(out_dir / "regional_totals.png")

    # outputs of the steps after the run, kept for them to reuse (euphotic.steps.run_steps)
    from euphotic.steps import carried

    step_entries, step_records = ({}, {}) if force else carried(cfg, previous, out_dir)
    for name, entry in step_entries.items():
        if name not in entries:
            entries[name] = entry
            keep.add(name)
    base = Path(cfg.path).resolve().parent if cfg.path else out_dir  # inputs: relative to it
    try:
        config_sha = runfolder.hashlib.sha256(Path(cfg.path).read_bytes()).hexdigest()
    except OSError:
        config_sha = None
    manifest = {
        "tool": "euphotic",
        "version": __version__,
        "run_id": run_id,
        "created": runfolder.now_iso(),
        "command": command,
        "config": str(Path(cfg.path).resolve()) if cfg.path else None,
        "config_sha256": config_sha,
        "config_fingerprint": runfolder.config_fingerprint(
            {k: v for k, v in vars(cfg).items() if k not in ("path", "output_dir")}),
        "models": list(cfg.models),
        "coverage_rule": {"min_coverage": cfg.min_coverage, "low_coverage": cfg.low_coverage},
        "months": [str(np.datetime64(m, "M")) for m in prep.months],
        "skipped_months": [str(np.datetime64(m, "M")) for m in prep.skipped_months],
        "inputs": {role: [os.path.relpath(p, base) for p in files]
                   for role, files in input_files.items()},
        "caution": outputs.CAUTION,
        "outputs": {n: entries[n] for n in sorted(entries)},
        "steps": step_records,
    }
    with _writing(out_dir, "the run manifest"):
        folder.commit(stage, manifest, keep=keep)
    return RunResult(
        maps=[out_dir / n for n in map_names],
        totals_csv=out_dir / "regional_totals.csv",
        rows=rows,
        figures=figures,
        manifest=out_dir / runfolder.MANIFEST_NAME,
        ensemble=[out_dir / n for n in ensemble],
    )
