"""The run: open inputs, build one lazy graph for all months and models, compute it once,
then put the files in place. I/O and orchestration only; the science is in models/,
geo and aggregate."""

from __future__ import annotations

import contextlib
import logging
import sys
from dataclasses import dataclass, field
from pathlib import Path

import dask
import numpy as np
import xarray as xr

from euphotic import aggregate, ocean, outputs, screen
from euphotic.config import RunConfig
from euphotic.errors import NoOverlapError
from euphotic.geo import cell_area
from euphotic.models import get_model, get_month_block
from euphotic.readers import match_grid, open_input

log = logging.getLogger("euphotic")


@dataclass
class Prepared:
    """Inputs opened lazily on the chlorophyll grid, with the months to produce."""

    chl: xr.DataArray
    par: xr.DataArray
    sst: xr.DataArray
    day_length: xr.DataArray | None
    ocean: xr.DataArray  # bool (lat, lon); numpy-backed unless taken from temperature
    area_rows_m2: np.ndarray  # (lat,) area of one cell in each row
    months: list[np.datetime64]
    region_masks: aggregate.RegionMasks = field(
        default_factory=lambda: aggregate.RegionMasks([], None)
    )
    skipped_months: list[np.datetime64] = field(default_factory=list)


@dataclass
class RunResult:
    """What a run wrote and the totals table rows."""

    maps: list[Path]
    totals_csv: Path
    rows: list[dict]
    figures: list[Path] = field(default_factory=list)
    skipped_months: list[np.datetime64] = field(default_factory=list)


def _span(da: xr.DataArray) -> str:
    s = da["period_start"].values.min().astype("datetime64[D]")
    e = da["period_end"].values.max().astype("datetime64[D]") - 1
    return f"{s}..{e}"


def prepare(cfg: RunConfig) -> Prepared:
    """Open and check every input and build masks; nothing on the grid is computed."""
    chl = open_input(cfg.inputs["chl"])
    others = {}
    for role in ("par", "sst", "day_length"):
        if role in cfg.inputs:
            da = open_input(cfg.inputs[role])
            others[role] = match_grid(da, chl, da.attrs["files"][0])
            others[role].attrs["files"] = da.attrs["files"]
    par, sst = others["par"], others["sst"]
    lat, lon = chl["lat"].values, chl["lon"].values

    # months to produce: those the chlorophyll touches, within [start, end]
    months = aggregate.months_touched(chl["period_start"].values, chl["period_end"].values)
    if cfg.start is not None:
        months = [m for m in months if m >= cfg.start.astype("datetime64[M]")]
    if cfg.end is not None:
        months = [m for m in months if m <= cfg.end.astype("datetime64[M]")]
    if not months:
        raise NoOverlapError(
            f"{cfg.path}: no chlorophyll period ({_span(chl)}) falls within start/end of [run]"
        )
    keep, skipped = [], []
    for m in months:
        days = aggregate.month_days(m)
        covered = np.ones(len(days), bool)
        for da in (chl, par, sst):
            covered &= (
                aggregate.day_to_period(da["period_start"].values, da["period_end"].values, days)
                >= 0
            )
        (keep if covered.any() else skipped).append(m)
    if not keep:
        raise NoOverlapError(
            f"no day is covered by all inputs: chl {_span(chl)} ({chl.attrs['files'][0]}), "
            f"par {_span(par)} ({par.attrs['files'][0]}), sst {_span(sst)} ({sst.attrs['files'][0]})"
        )

    if cfg.ocean_source == "file":
        ocean_np = ocean.file_ocean_mask(str(cfg.land_mask), cfg.land_mask_variable, lat, lon)
        ocean_da = xr.DataArray(ocean_np, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    elif cfg.ocean_source == "package":
        ocean_np = ocean.packaged_ocean_mask(lat, lon)
        ocean_da = xr.DataArray(ocean_np, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    else:
        ocean_da = ocean.temperature_ocean_mask(sst)
    area_rows = cell_area(lat, lon[:2], earth=cfg.earth)[:, 0]  # regular grid: same along a row
    masks = aggregate.RegionMasks.build((r.name, _region_mask(r, lat, lon)) for r in cfg.regions)
    return Prepared(
        chl=chl,
        par=par,
        sst=sst,
        day_length=others.get("day_length"),
        ocean=ocean_da,
        area_rows_m2=area_rows,
        months=keep,
        region_masks=masks,
        skipped_months=skipped,
    )


def _region_mask(region, lat, lon) -> np.ndarray:
    m = region.mask(lat, lon)
    if not m.any():
        log.warning("region %r contains no cell centre of the grid", region.name)
    return m


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
        if client is None:
            return da.from_array(arr, chunks=spatial)
        future = client.scatter(arr, broadcast=False)
        return da.from_delayed(dask.delayed(future), shape=arr.shape, dtype=arr.dtype).rechunk(spatial)

    ocean_mask = prep.ocean
    if not isinstance(prep.ocean.data, da.Array):
        ocean_mask = prep.ocean.copy(data=lazy(np.asarray(prep.ocean.values, bool)))
    bits = prep.region_masks.bits
    return ocean_mask, (None if bits is None else lazy(bits))


def _compute(objs, *, client, progress: bool):
    """Compute ``objs`` once, with a progress bar when asked."""
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
) -> RunResult:
    """Produce monthly maps, the regional totals table and figures for a configuration.

    ``scheduler`` / ``workers`` choose a dask.distributed engine (see :func:`compute_engine`);
    by default the local threaded scheduler runs the graph.
    """
    with compute_engine(scheduler, workers) as client:
        return _run(cfg, progress=progress, command=command, client=client)


def _batch_graph(cfg: RunConfig, prep: Prepared, batch, ocean_mask, bits, input_files, command,
                 temps: list, extra_attrs: dict | None = None):
    """Lazy writes and regional sums of the months in ``batch`` for every model, and the
    (temporary, final) output path of each (model, month). Each temporary path is added to
    ``temps`` before anything is written there."""
    out_dir = Path(cfg.output_dir)
    names = prep.region_masks.names
    writes, lazies, placed = [], [], {}
    for model_name in cfg.models:
        model = get_model(model_name)
        for month in batch:
            maps = aggregate.monthly_npp(
                model,
                model_name,
                month,
                chl=prep.chl,
                par=prep.par,
                sst=prep.sst,
                ocean=ocean_mask,
                day_length=prep.day_length,
                month_block=get_month_block(model_name),
            )
            ds = outputs.month_dataset(maps, title=cfg.title, input_files=input_files,
                                       command=command, extra_attrs=extra_attrs)
            suffix = "zarr" if cfg.output_format == "zarr" else "nc"
            final = out_dir / f"{outputs.month_stem(maps)}.{suffix}"
            tmp = outputs.temp_path(final)
            placed[(model_name, month)] = (tmp, final)
            temps.append(tmp)
            writes.append(outputs.write_lazy(ds, tmp, cfg.output_format))
            if names:
                lazies.append(aggregate.region_sums(maps, names, bits, ocean_mask, prep.area_rows_m2))
    return writes, lazies, placed


def _run(cfg: RunConfig, *, progress: bool, command: str, client) -> RunResult:
    prep = prepare(cfg)
    out_dir = Path(cfg.output_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    input_files = {
        "chl": prep.chl.attrs["files"],
        "par": prep.par.attrs["files"],
        "sst": prep.sst.attrs["files"],
    }
    if prep.day_length is not None:
        input_files["day_length"] = prep.day_length.attrs["files"]

    # input screening (euphotic.screen): ranges known now, counts computed with each batch
    report = screen.Report({"chl": prep.chl, "par": prep.par, "sst": prep.sst,
                            "day_length": prep.day_length})
    ocean_mask, bits = _grid_masks(prep, client)
    per = cfg.months_per_compute or len(prep.months)
    batches = [prep.months[i : i + per] for i in range(0, len(prep.months), per)]
    finals_by, temps, rows_by = {}, [], {}
    try:
        for i, batch in enumerate(batches):
            # one graph per batch of months (all models), computed once: memory and graph
            # size stay those of one batch however many years a run covers
            writes, lazies, placed = _batch_graph(cfg, prep, batch, ocean_mask, bits,
                                                  input_files, command, temps,
                                                  extra_attrs=report.static_attrs())
            finals_by.update(placed)
            if progress and len(batches) > 1:
                span = f"{batch[0]}" if len(batch) == 1 else f"{batch[0]}..{batch[-1]}"
                print(f"computing {span} ({i + 1} of {len(batches)})", file=sys.stderr)
            _, computed, counts = _compute([writes, [z.sums for z in lazies], report.lazy(batch)],
                                           client=client, progress=progress)
            screen_attrs = report.finish(batch, counts)  # warnings; counts into each month's file
            for (_, month), (tmp, _) in placed.items():
                screen.record_in_file(tmp, screen_attrs[np.datetime64(month, "M")], cfg.output_format)
            for z, sums in zip(lazies, computed, strict=True):
                rows_by[(z.model, z.month)] = aggregate.finish_totals(z, sums)  # month: [M]
    except BaseException:
        for t in temps:  # nothing of a failed run is put in place
            outputs.remove_path(t)
        raise
    order = [(model_name, month) for model_name in cfg.models for month in prep.months]
    finals = [finals_by[k] for k in order]
    for tmp, final in finals:
        outputs.move_into_place(tmp, final)
    rows = [
        row for m, month in order for row in rows_by.get((m, np.datetime64(month, "M")), [])
    ]
    totals = out_dir / "regional_totals.csv"
    outputs.write_totals_csv(rows, totals)
    result = RunResult(
        maps=[f for _, f in finals],
        totals_csv=totals,
        rows=rows,
        skipped_months=prep.skipped_months,
    )
    if cfg.figures:
        from euphotic import figures

        result.figures = figures.figures_for_run(result, cfg, prep.region_masks)
    return result
