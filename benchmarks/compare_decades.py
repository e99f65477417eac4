"""Comparison benchmark: climatology, anomalies and trends over decades of monthly maps.

Writes (once; reused from ``--workdir``) a synthetic committed run folder of N years of
monthly global maps (default 20 years at 1/12 degree, 2160 x 4320, 240 maps), built with the
project's own map writer (``outputs.month_dataset`` / ``outputs.encoding_for``), regional sums
(``aggregate.finish_totals``) and commit (``runfolder.OutputFolder``), so that
``euphotic.results.open_maps`` / ``open_totals`` read it like any run. The values are
invented: a smooth productivity field times a seasonal cycle times a small per-cell trend,
with seeded noise; NaN on a land-like pattern, polar night in winter and cloud gaps.

It then measures, side by side in one run:

  (a) the read floor: every map's ``npp`` read once, chunk by chunk, with plain
      netCDF4-python (from a warm page cache, as ``scale_month.py``);
  (b) the comparison pass through the public functions, in a fresh process: trends per
      region (``compare.trend`` on the totals, deseasonalised monthly and annual), then per
      spatial window (``--window``, all months of a band of cells; one ``dask.compute``
      each) the climatology (12 maps, written to NetCDF), the anomalies (240 maps, reduced:
      their standard deviation per cell, written, and their sum per month) and the per-cell
      trend of annual means (``compare.trend_map(annual=True)``, written);
  (b2) ``euphotic compare`` on the folder (the tables, the per-cell trend map and the
      difference map);
  (c) ``euphotic figures`` on the folder;

and prints the times, (b)/(a) against the target 2.0 and the peak RSS of each process tree
against 2 GiB.

Usage:
    python benchmarks/compare_decades.py                      # 20 years at 1/12 degree
    python benchmarks/compare_decades.py --years 3 --res 1    # tiny, seconds
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import textwrap
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from scale_month import cells_per_degree, run_measured, warm  # noqa: E402

FIRST_YEAR = 2001
MODEL = "vgpm"
REGIONS = [  # four invented ocean boxes [west, south, east, north]
    ("Boreal Reach", [-60.0, 40.0, 0.0, 65.0]),
    ("Equatorial Belt", [-180.0, -10.0, 180.0, 10.0]),
    ("Southern Ring", [-180.0, -65.0, 180.0, -40.0]),
    ("Western Basin", [40.0, -40.0, 100.0, 20.0]),
]
TARGET_RATIO = 2.0
TARGET_PEAK_GIB = 2.0


# ------------------------------------------------------------------------------------------
# the synthetic run
# ------------------------------------------------------------------------------------------


def _smooth(rng, ny, nx, factor):
    coarse = rng.standard_normal((max(ny // factor, 2), max(nx // factor, 2)))
    for _ in range(2):
        coarse = 0.25 * (np.roll(coarse, 1, 0) + np.roll(coarse, -1, 0)
                         + np.roll(coarse, 1, 1) + np.roll(coarse, -1, 1))
    reps = (-(-ny // coarse.shape[0]), -(-nx // coarse.shape[1]))
    full = np.repeat(np.repeat(coarse, reps[0], 0), reps[1], 1)[:ny, :nx]
    return full / full.std()


def _grid(n):
    ny, nx = 180 * n, 360 * n
    return -90 + (np.arange(ny) + 0.5) / n, -180 + (np.arange(nx) + 0.5) / n


def _block(n: int) -> tuple[int, int]:
    """Map chunks as a run on 540 x 1080 input blocks writes them (whole grid when smaller)."""
    return min(540, 180 * n), min(1080, 360 * n)


def _write_month(args):
    """One month's map into the stage; returns its manifest entry."""
    import xarray as xr

    from euphotic import aggregate, geo, outputs, runfolder

    n, k, stage_dir = args
    month = np.datetime64(f"{FIRST_YEAR}-01", "M") + k
    name = f"npp_{MODEL}_{month}.nc"
    path = Path(stage_dir) / name
    lat, lon = _grid(n)
    ny, nx = lat.size, lon.size
    f = max(n // 2, 1)
    fixed = np.random.default_rng(7)
    land = _smooth(fixed, ny, nx, 8 * f) > 0.6
    level = 250.0 * np.exp(0.45 * _smooth(fixed, ny, nx, 4 * f))
    trend = 0.01 * _smooth(fixed, ny, nx, 16 * f)  # about +-1 % per year, smooth
    rng = np.random.default_rng(10_000 + k)
    year, cal = k // 12, k % 12 + 1
    hemi = np.sign(lat)[:, None]
    season = 1.0 + 0.35 * np.sin(2 * np.pi * (cal - 4) / 12) * hemi * np.abs(np.sin(np.deg2rad(lat)))[:, None]
    npp = level * season * (1.0 + trend * year) * np.exp(0.08 * rng.standard_normal((ny, nx)))
    winter_pole = (lat[:, None] > 62) if cal in (11, 12, 1) else (lat[:, None] < -62) if cal in (5, 6, 7) else None
    clouds = _smooth(rng, ny, nx, 4 * f) > 1.6
    ocean = ~land
    valid = ocean & ~clouds
    if winter_pole is not None:
        valid &= ~np.broadcast_to(winter_pole, valid.shape)
    days = int(((month + 1).astype("datetime64[D]") - month.astype("datetime64[D]")).astype(int))
    cov = np.where(valid, np.clip(0.55 + 0.15 * rng.standard_normal((ny, nx)), 1 / days, 1.0), 0.0)
    cov = np.round(cov * days) / days
    cov = np.where(ocean, cov, np.nan).astype(np.float32)
    npp = np.where(valid, npp, np.nan).astype(np.float32)
    chunks = _block(n)
    da = {v: xr.DataArray(a, dims=("lat", "lon"), coords={"lat": lat, "lon": lon}).chunk(
        {"lat": chunks[0], "lon": chunks[1]}) for v, a in (("npp", npp), ("coverage", cov))}
    maps = aggregate.MonthlyMaps(month=month, model=MODEL, npp=da["npp"], coverage=da["coverage"],
                                 n_days=days)
    ds = outputs.month_dataset(maps, title="Synthetic decades (invented values)",
                               command="benchmarks/compare_decades.py", input_files={})
    ds.to_netcdf(path, engine="netcdf4", encoding=outputs.encoding_for(ds),
                 unlimited_dims=["time"])
    # regional sums as a run makes them (fields as aggregate.SUM_FIELDS)
    area = geo.cell_area(lat, lon)
    sums = []
    for _, (w, s, e, nn) in REGIONS:
        box = ((lat >= s) & (lat <= nn))[:, None] & ((lon >= w) & (lon <= e))[None, :]
        oc, ok = box & ocean, box & valid
        sums.append([area[oc].sum(), area[ok].sum(), (npp[ok].astype(np.float64) * area[ok]).sum(),
                     (cov[oc].astype(np.float64) * area[oc]).sum()])
    lazy = aggregate.RegionSumsLazy(regions=[r for r, _ in REGIONS], month=month, model=MODEL,
                                    n_days=days, sums=np.array(sums))
    rows = aggregate.finish_totals(lazy, np.array(sums))
    rows = [{c: (None if isinstance(v, float) and v != v else
                 float(v) if isinstance(v, np.floating) else v) for c, v in r.items()} for r in rows]
    return name, {"kind": "map", "model": MODEL, "month": str(month), "fingerprint": "synthetic",
                  "valid_cells": int(valid.sum()), "rows": rows,
                  **runfolder.stat_entry(path)}


def make_run(n: int, years: int, workdir: Path) -> Path:
    """The synthetic committed run folder (written once, then reused)."""
    from euphotic import __version__, outputs, runfolder

    folder = workdir / f"run_{n}_{years}y"
    if (folder / runfolder.MANIFEST_NAME).exists():
        return folder
    t = time.perf_counter()
    out = runfolder.OutputFolder(folder)
    with out.locked("benchmarks/compare_decades.py"):
        stage = out.new_stage({"command": "benchmarks/compare_decades.py"})
        with ProcessPoolExecutor(max_workers=2) as pool:
            entries = dict(pool.map(_write_month, [(n, k, str(stage.path))
                                                   for k in range(12 * years)]))
        rows = [r for name in sorted(entries) for r in entries[name]["rows"]]
        totals = stage.file("regional_totals.csv")
        outputs.write_totals_csv([{k: (np.nan if v is None else v) for k, v in r.items()}
                                  for r in rows], totals)
        entries[totals.name] = {"kind": "table", **runfolder.stat_entry(totals)}
        months = sorted(e["month"] for e in entries.values() if e.get("kind") == "map")
        manifest = {"tool": "euphotic", "version": __version__, "run_id": "synthetic",
                    "created": runfolder.now_iso(), "command": "benchmarks/compare_decades.py",
                    "config": None, "models": [MODEL], "months": months,
                    "skipped_months": [], "inputs": {}, "caution": outputs.CAUTION,
                    "outputs": dict(sorted(entries.items()))}
        out.commit(stage, manifest, keep=set())
    print(f"synthetic run ready in {folder} ({time.perf_counter() - t:.0f} s)", flush=True)
    return folder


def map_files(folder: Path) -> list[str]:
    from euphotic import runfolder

    man = json.loads((folder / runfolder.MANIFEST_NAME).read_text())
    return [str(folder / n) for n, e in man["outputs"].items() if e.get("kind") == "map"]


# ------------------------------------------------------------------------------------------
# measurements
# ------------------------------------------------------------------------------------------


def read_floor(files: list[str]) -> float:
    """Seconds to read every chunk of every map's ``npp``, sequentially, with netCDF4."""
    import netCDF4

    t = time.perf_counter()
    for path in files:
        with netCDF4.Dataset(path) as ds:
            var = ds["npp"]
            ch = var.chunking()
            ch = var.shape if ch == "contiguous" else ch
            for i in range(0, var.shape[1], ch[1]):
                for j in range(0, var.shape[2], ch[2]):
                    var[:, i:i + ch[1], j:j + ch[2]]
    return time.perf_counter() - t


PASS = textwrap.dedent('''
    # The comparison pass through the public functions, window by window: each spatial window
    # (all months of a band of cells, time contiguous) is one dask.compute of its climatology,
    # anomaly reductions and per-cell trend; results go into one NetCDF file by region.
    import json, sys, time
    t0 = time.perf_counter()
    import dask
    import netCDF4
    import numpy as np
    from euphotic import compare, results
    import numbagg
    import xarray as xr
    folder, out, rows, cols = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
    brows, bcols = int(sys.argv[5]), int(sys.argv[6])
    times = {"imports": time.perf_counter() - t0}
    t = time.perf_counter()
    maps = results.open_maps(folder)
    totals = results.open_totals(folder)
    regional = [compare.trend(totals, deseasonalise=True), compare.trend(totals, annual=True)]
    times["open_and_regional_trends"] = time.perf_counter() - t
    ny, nx = maps.sizes["lat"], maps.sizes["lon"]
    stats = [k for k in compare._TREND_STATS]
    with netCDF4.Dataset(out, "w") as nc:
        nc.createDimension("calendar_month", 12)
        nc.createDimension("time", maps.sizes["time"])
        nc.createDimension("lat", ny)
        nc.createDimension("lon", nx)
        nc.createVariable("climatology", "f4", ("calendar_month", "lat", "lon"), zlib=True,
                          complevel=1, shuffle=True, chunksizes=(1, min(rows, ny), min(cols, nx)))
        for v in ["anomaly_sd"] + [f"trend_{k}" for k in stats]:
            nc.createVariable(v, "f4", ("lat", "lon"), zlib=True, complevel=1, shuffle=True,
                              chunksizes=(min(rows, ny), min(cols, nx)))
        nc.createVariable("anomaly_window_sum", "f8", ("time",))
        t = time.perf_counter()
        asum = np.zeros(maps.sizes["time"])
        for i in range(0, ny, rows):
            for j in range(0, nx, cols):
                w = maps.isel(lat=slice(i, i + rows), lon=slice(j, j + cols))
                if brows:  # time-contiguous blocks once, shared by the three computations
                    tc = {k: v.variable for k, v in w.coords.items() if k not in w.dims}
                    w = w.chunk({"time": -1, "lat": brows, "lon": bcols}).assign_coords(tc)
                clim = compare.climatology(w)
                anom = compare.anomalies(w, clim)["anomaly"]
                tmap = compare.trend_map(w, annual=True)
                # population standard deviation over time per cell; on time-contiguous blocks
                # numbagg's one-pass kernel (dask's std makes several passes over float64)
                sd = (xr.apply_ufunc(numbagg.nanstd, anom, input_core_dims=[["time"]],
                                     kwargs={"axis": -1, "ddof": 0}, dask="parallelized",
                                     output_dtypes=[np.float64])
                      if brows else anom.std("time"))
                # the statistics as DataArrays: dask.compute of the trend Dataset itself
                # fails with "Missing dependency" (dask 2026.8 / xarray 2026.9; .compute() works)
                c, sd, s, *tm = dask.compute(clim["climatology"], sd,
                                             anom.sum(("lat", "lon")), *[tmap[k] for k in stats])
                tm = dict(zip(stats, tm, strict=True))
                sl = (slice(i, i + rows), slice(j, j + cols))
                nc["climatology"][(slice(None),) + sl] = c.isel(model=0).values
                nc["anomaly_sd"][sl] = sd.isel(model=0).values
                for k in stats:
                    nc[f"trend_{k}"][sl] = tm[k].isel(model=0).values
                asum += s.isel(model=0).values
        nc["anomaly_window_sum"][:] = asum
    times["compute"] = time.perf_counter() - t
    times["n_regional_series"] = int(regional[0]["slope"].size)
    print("TIMES " + json.dumps(times))
''')


def parse_times(text: str) -> dict:
    for line in text.splitlines():
        if line.startswith("TIMES "):
            return json.loads(line[6:])
    return {}


def main() -> None:
    ap = argparse.ArgumentParser(description="Benchmark of the comparison pass on decades of maps.")
    ap.add_argument("--years", type=int, default=20, help="years of monthly maps (default 20)")
    ap.add_argument("--res", default="1/12", help="grid spacing in degrees (1/12) or cells per degree")
    ap.add_argument("--workdir", type=Path, default=Path("/tmp/euphotic_compare_decades"),
                    help="where the synthetic run is written once and reused")
    ap.add_argument("--repeats", type=int, default=1, help="passes of (a) and (b); best kept")
    ap.add_argument("--skip", default="", help="comma-separated steps to skip: b2, c")
    ap.add_argument("--window", default="540x1080",
                    help="cells per spatial window of the pass, ROWSxCOLS (default 540x1080: one "
                         "stored chunk of the maps, all months)")
    ap.add_argument("--block", default="180x180",
                    help="each window rechunked once to time-contiguous blocks of ROWSxCOLS cells "
                         "(default 180x180, within compare.TREND_BLOCK_BYTES so trend_map keeps them; 0x0: keep the maps' one-month chunks)")
    a = ap.parse_args()
    n = cells_per_degree(a.res)
    rows, cols = (int(x) for x in a.window.lower().split("x"))
    brows, bcols = (int(x) for x in a.block.lower().split("x"))
    skip = {s.strip() for s in a.skip.split(",") if s.strip()}
    a.workdir.mkdir(parents=True, exist_ok=True)
    print(f"{a.years} years of monthly maps at 1/{n} degree ({180 * n} x {360 * n})", flush=True)
    folder = make_run(n, a.years, a.workdir)
    files = map_files(folder)
    size = sum(os.path.getsize(f) for f in files)
    py = sys.executable
    floors, passes = [], []
    for _ in range(a.repeats):
        warm(files)
        floors.append(read_floor(files))
        warm(files)
        wall, peak, out = run_measured([py, "-c", PASS, str(folder), str(a.workdir / "pass_out.nc"),
                                        str(rows), str(cols), str(brows), str(bcols)])
        passes.append((wall, peak, parse_times(out)))
    floor = min(floors)
    wall, peak, times = min(passes, key=lambda p: p[0])
    res = {"years": a.years, "cells_per_degree": n, "maps": len(files), "map_MB": size / 1e6,
           "read_floor_s": floor, "pass_s": wall, "pass_peak_GiB": peak, "pass_times": times,
           "ratio": wall / floor}
    print()
    print(f"maps:                      {len(files)} files, {size / 1e6:.0f} MB")
    print(f"(a) read floor (npp):      {floor:8.1f} s   passes: {' '.join(f'{x:.1f}' for x in floors)}")
    print(f"(b) comparison pass:       {wall:8.1f} s   (imports {times.get('imports', 0):.1f}, open + "
          f"regional trends {times.get('open_and_regional_trends', 0):.1f}, windows of {rows}x{cols} "
          f"{times.get('compute', 0):.1f}), peak RSS {peak:.2f} GiB"
          f"   passes: {' '.join(f'{p[0]:.1f}' for p in passes)}")
    print(f"ratio (b)/(a):             {wall / floor:8.2f}   (target <= {TARGET_RATIO})")
    print(f"peak RSS (b):              {peak:8.2f} GiB (target <= {TARGET_PEAK_GIB})", flush=True)
    cli = [py, "-c", "from euphotic.cli import main; main()"]
    if "b2" not in skip:
        warm(files)
        w2, p2, _ = run_measured(cli + ["compare", str(folder)])
        res.update(compare_s=w2, compare_peak_GiB=p2)
        print(f"(b2) euphotic compare:     {w2:8.1f} s, peak RSS {p2:.2f} GiB", flush=True)
    if "c" not in skip:
        warm(files)
        w3, p3, _ = run_measured(cli + ["figures", str(folder)])
        res.update(figures_s=w3, figures_peak_GiB=p3)
        print(f"(c) euphotic figures:      {w3:8.1f} s, peak RSS {p3:.2f} GiB", flush=True)
    (a.workdir / "compare_decades.json").write_text(json.dumps(res, indent=1))
    print(f"wrote {a.workdir / 'compare_decades.json'}")


if __name__ == "__main__":
    main()
