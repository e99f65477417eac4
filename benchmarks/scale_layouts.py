"""Layout sweep: how the way the daily inputs are stored changes the cost of `euphotic run`.

A month of synthetic daily global grids (chl, PAR, SST; the fields of scale_month.py) is
written with netCDF4-python in several storage layouts:

  current     as scale_month.py: ascending lat, lon in [-180, 180), float32, chunks dividing
              the grid, zlib + shuffle
  lat_desc    latitudes descending (north first)
  lon360      longitudes in [0, 360)
  packed      SST and PAR as int16 with scale_factor / add_offset / _FillValue (CF packing)
  odd_chunks  chunks (1, 256, 512), which do not divide the grid
  quantized   chlorophyll with netCDF quantization (significant_digits)
  all         all of the above at once

For each layout and resolution, side by side in one run and each pass from a warm page cache:
the read floor (scale_month.read_floor), `euphotic run` (VGPM, five boxes, NetCDF map) with
its peak RSS, the "peer" (a ~20-line xarray + dask script with the same formula) with its peak
RSS, and the largest relative difference between the two monthly mean maps. The fixed start is
reported as `python -c "import euphotic.cli"` and a 1-day run (the run prints no phase timings).

One table is printed and written to scale_layouts.csv next to this script (or --csv).

    python benchmarks/scale_layouts.py                       # 1/12 and 1/24 degree, 30 days
    python benchmarks/scale_layouts.py --res-list 4,8 --days 3 --layouts current,packed
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import shutil
import sys
import textwrap
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from scale_month import (  # noqa: E402 - the sibling benchmark's helpers
    CHUNK,
    MONTH,
    STD,
    cells_per_degree,
    day_fields,
    read_floor,
    run_measured,
    warm,
    write_config,
)

HERE = Path(__file__).resolve().parent
LAYOUTS = ["current", "lat_desc", "lon360", "packed", "odd_chunks", "quantized", "all"]
ODD_CHUNK = (1, 256, 512)
# CF packing of the int16 layouts: value = stored * scale + offset (float32 attributes, so the
# unpacked type is float32 like the other layouts).
PACKING = {"sst": (0.001, 10.0), "par": (0.002, 60.0)}
FILL16 = np.int16(-32768)
SIGNIFICANT_DIGITS = 4  # chlorophyll keeps 4 significant decimal digits in `quantized`


def features(layout: str) -> set[str]:
    return set(LAYOUTS[1:-1]) if layout == "all" else ({layout} - {"current"})


def changed_inputs(layout: str) -> set[str]:
    """Inputs a layout stores differently from `current` (the others are symlinked)."""
    f = features(layout)
    if f & {"lat_desc", "lon360", "odd_chunks"}:
        return {"chl", "par", "sst"}
    return ({"par", "sst"} if "packed" in f else set()) | ({"chl"} if "quantized" in f else set())


def _path(folder: Path, v: str, day_index: int) -> Path:
    return folder / f"bench_{v}_{str(MONTH + day_index).replace('-', '')}.nc"


def _write_day(args) -> None:
    import netCDF4

    n, day_index, folder, layout = args
    folder = Path(folder)
    todo = [v for v in sorted(changed_inputs(layout) if layout != "current" else {"chl", "par", "sst"})
            if not _path(folder, v, day_index).exists()]
    if not todo:
        return
    f = features(layout)
    lat, lon, fields = day_fields(n, day_index)
    ny, nx = 180 * n, 360 * n
    if "lat_desc" in f:
        lat = lat[::-1]
        fields = {k: a[::-1] for k, a in fields.items()}
    if "lon360" in f:
        lon = (np.arange(nx) + 0.5) / n
        fields = {k: np.roll(a, -(nx // 2), axis=1) for k, a in fields.items()}
    chunks = ODD_CHUNK if "odd_chunks" in f else (1, min(CHUNK[1], ny), min(CHUNK[2], nx))
    chunks = (1, min(chunks[1], ny), min(chunks[2], nx))
    for v in todo:
        path = _path(folder, v, day_index)
        tmp = path.with_suffix(".tmp")
        with netCDF4.Dataset(tmp, "w") as ds:
            ds.title = "synthetic benchmark input (invented)"
            ds.Conventions = "CF-1.8"
            ds.createDimension("time", 1)
            ds.createDimension("lat", ny)
            ds.createDimension("lon", nx)
            t = ds.createVariable("time", "f8", ("time",))
            t.standard_name, t.units, t.calendar = "time", "days since 2025-01-01", "standard"
            t[:] = [float((MONTH + day_index - np.datetime64("2025-01-01")).astype(int))]
            for name, vals, std, units in (("lat", lat, "latitude", "degrees_north"),
                                           ("lon", lon, "longitude", "degrees_east")):
                c = ds.createVariable(name, "f8", (name,))
                c.standard_name, c.units = std, units
                c[:] = vals
            data = fields[v]
            opts = {"zlib": True, "complevel": 4, "shuffle": True, "chunksizes": chunks}
            if "packed" in f and v in PACKING:
                scale, offset = PACKING[v]
                var = ds.createVariable(v, "i2", ("time", "lat", "lon"), fill_value=FILL16, **opts)
                var.scale_factor, var.add_offset = np.float32(scale), np.float32(offset)
                packed = np.where(np.isnan(data), FILL16, np.round((data - offset) / scale)).astype("i2")
                var.set_auto_maskandscale(False)
                var[0] = packed
            else:
                if "quantized" in f and v == "chl":
                    opts["significant_digits"] = SIGNIFICANT_DIGITS
                var = ds.createVariable(v, "f4", ("time", "lat", "lon"), fill_value=np.float32(np.nan), **opts)
                var[0] = data
            var.standard_name, var.units = STD[v]
        os.replace(tmp, path)


def make_layout(n: int, days: int, root: Path, layout: str) -> Path:
    """Write (or reuse) a layout's files; inputs stored as in `current` are symlinks to it."""
    folder = root / f"layout_{n}" / layout
    folder.mkdir(parents=True, exist_ok=True)
    t = time.perf_counter()
    with ProcessPoolExecutor(max_workers=2) as pool:
        list(pool.map(_write_day, [(n, d, str(folder), layout) for d in range(days)]))
    if layout != "current":
        for v in {"chl", "par", "sst"} - changed_inputs(layout):
            for d in range(days):
                link = _path(folder, v, d)
                if not link.exists():
                    link.symlink_to(_path(root / f"layout_{n}" / "current", v, d).resolve())
    print(f"  {layout} inputs ready ({time.perf_counter() - t:.0f} s)", flush=True)
    return folder


PEER = textwrap.dedent('''
    # What an experienced xarray user writes: lazy open with the stored chunks, VGPM through
    # apply_ufunc, monthly mean, one write, threaded scheduler.
    import sys, json, dask, numpy as np, xarray as xr
    from euphotic.geo import day_length
    from euphotic.models.vgpm import vgpm_kernel
    files = json.loads(sys.argv[1]); out = sys.argv[2]
    dask.config.set(scheduler="threads")
    ds = {v: xr.open_mfdataset(files[v], chunks={}, parallel=False)[v] for v in ("chl", "par", "sst")}
    chl, par, sst = ds["chl"], ds["par"], ds["sst"]
    dl = xr.DataArray(np.stack([day_length(chl.lat.values, str(t)[:10]) for t in chl.time.values]),
                      dims=("time", "lat"), coords={"time": chl.time, "lat": chl.lat})
    npp = xr.apply_ufunc(vgpm_kernel, chl, par, sst, dl, dask="parallelized", output_dtypes=[np.float64])
    # Mask as euphotic does: a value where every input is within its plausible range, and 0
    # (observed) in polar night whatever the inputs.
    ok = [(x >= lo) & (x <= hi) for x, (lo, hi) in ((chl, (0.001, 100.0)), (par, (0.0, 130.0)), (sst, (-2.5, 40.0)))]
    npp = npp.where((ok[0] & ok[1] & ok[2]) | (dl <= 0.0))
    mean = npp.mean("time").astype("f4").rename("npp").assign_attrs(standard_name="net_primary_productivity_of_biomass_expressed_as_carbon")
    mean.to_dataset().to_netcdf(out)
''')


def _npp_map(path: Path):
    """The monthly NPP field of a NetCDF file as a 2-D DataArray on ascending lat, lon in
    [-180, 180): the variable whose standard_name names primary production, else the only
    float variable of two or more dimensions."""
    import xarray as xr

    ds = xr.open_dataset(path)
    cand = [k for k, v in ds.data_vars.items() if "primary_produc" in str(v.attrs.get("standard_name", ""))]
    if not cand:
        cand = [k for k, v in ds.data_vars.items() if v.ndim >= 2 and v.dtype.kind == "f"]
    if len(cand) != 1:
        raise SystemExit(f"{path}: cannot tell the NPP variable among {list(ds.data_vars)}")
    da = ds[cand[0]].squeeze(drop=True).astype("f8")
    lat = next(d for d in da.dims if d.startswith("lat") or d == "y")
    lon = next(d for d in da.dims if d.startswith("lon") or d == "x")
    da = da.assign_coords({lon: ((da[lon] + 180.0) % 360.0) - 180.0}).sortby([lat, lon])
    return da.rename({lat: "lat", lon: "lon"}).load()


def mean_check(ours: Path, peer: Path, days: int) -> tuple[float, int]:
    """Largest relative difference where both maps are finite, and the number of cells finite
    in exactly one of them (a coverage-rule difference: euphotic's ocean mask, and land cells
    in polar night).

    With fewer daily files than days in the month, euphotic counts the missing days of polar
    night as observed zeros while the peer sees only its files: the latitude rows with any
    polar night in the month are then left out of the check."""
    from euphotic.geo import day_length

    a, b = _npp_map(ours), _npp_map(peer)
    month_days = np.arange(MONTH, MONTH.astype("datetime64[M]") + 1, dtype="datetime64[D]")
    if days < len(month_days):
        dark = (np.stack([day_length(a.lat.values, str(d)) for d in month_days]) <= 0).any(axis=0)
        a, b = a.isel(lat=~dark), b.isel(lat=~dark)
    if a.shape != b.shape or not np.allclose(a.lat, b.lat) or not np.allclose(a.lon, b.lon):
        raise SystemExit(f"grids differ: {ours} {a.shape} vs {peer} {b.shape}")
    x, y = a.values, b.values
    both = np.isfinite(x) & np.isfinite(y)
    rel = np.abs(x[both] - y[both]) / np.maximum(np.abs(y[both]), 1e-30)
    return (float(rel.max()) if rel.size else float("nan")), int((np.isfinite(x) != np.isfinite(y)).sum())


def import_time() -> float:
    return min(run_measured([sys.executable, "-c", "import euphotic.cli"])[0] for _ in range(2))


def measure(layout: str, n: int, days: int, root: Path, work: Path, start_import: float) -> dict:
    folder = make_layout(n, days, root, layout)
    files = {v: [str(_path(folder, v, d)) for d in range(days)] for v in ("chl", "par", "sst")}
    everything = files["chl"] + files["par"] + files["sst"]
    row = {"layout": layout, "cells_per_degree": n, "days": days,
           "input_MB": sum(os.path.getsize(f) for f in everything) / 1e6}
    try:
        warm(everything)
        row["floor_s"] = read_floor(everything)
    except Exception as exc:  # noqa: BLE001 - a layout plain netCDF4 cannot read is a result too
        row["error"] = f"read floor: {exc}"
    base = [sys.executable, "-c", "from euphotic.cli import main; main()", "run"]
    flags = ["-q", "--no-figures", "--force"]
    out_dir = work / f"out_{layout}_{n}"
    cfg = write_config(files, out_dir, work / f"bench_{layout}_{n}.toml")
    one = write_config({v: f[:1] for v, f in files.items()}, work / f"one_{layout}_{n}",
                       work / f"one_{layout}_{n}.toml")
    try:
        warm(files["chl"][:1] + files["par"][:1] + files["sst"][:1])
        row["one_day_s"] = run_measured(base + [str(one)] + flags)[0]
        warm(everything)
        row["euphotic_s"], row["euphotic_GiB"], _ = run_measured(base + [str(cfg)] + flags)
    except SystemExit as exc:  # the run failed on this layout: keep the message, go on
        row["error"] = "euphotic: " + str(exc).splitlines()[-1][:200]
    row["start_import_s"] = start_import
    peer_out = work / f"peer_{layout}_{n}.nc"
    try:
        warm(everything)
        row["peer_s"], row["peer_GiB"], _ = run_measured([sys.executable, "-c", PEER, json.dumps(files),
                                                          str(peer_out)])
    except SystemExit as exc:
        row["error"] = (row.get("error", "") + " peer: " + str(exc).splitlines()[-1][:200]).strip()
    if "floor_s" in row and "euphotic_s" in row:
        row["euphotic/floor"] = row["euphotic_s"] / row["floor_s"]
    if "peer_s" in row and "euphotic_s" in row:
        row["peer/euphotic"] = row["peer_s"] / row["euphotic_s"]
        maps = sorted(out_dir.glob("npp_vgpm_*.nc"))
        if len(maps) == 1:
            row["max_rel_diff"], row["coverage_diff_cells"] = mean_check(maps[0], peer_out, days)
            row["mean_check"] = "ok" if row["max_rel_diff"] <= 1e-5 else "DIFF"
        else:
            row["mean_check"] = f"no single map in {out_dir}"
    return row


COLUMNS = ["layout", "cells_per_degree", "days", "input_MB", "floor_s", "euphotic_s", "peer_s", "euphotic/floor",
           "peer/euphotic", "euphotic_GiB", "peer_GiB", "mean_check", "max_rel_diff", "coverage_diff_cells",
           "one_day_s", "start_import_s", "error"]


def print_table(rows: list[dict]) -> None:
    head = ["layout", "1/deg", "floor s", "euph s", "peer s", "eu/floor", "peer/eu", "eu GiB", "peer GiB",
            "mean check", "1-day s"]
    keys = ["layout", "cells_per_degree", "floor_s", "euphotic_s", "peer_s", "euphotic/floor", "peer/euphotic",
            "euphotic_GiB", "peer_GiB", "mean_check", "one_day_s"]

    def cell(r, k):
        v = r.get(k, "-")
        if k == "mean_check" and "max_rel_diff" in r:
            return f"{v} {r['max_rel_diff']:.1e}"
        return f"{v:.2f}" if isinstance(v, float) else str(v)

    table = [head] + [[cell(r, k) for k in keys] for r in rows]
    widths = [max(len(t[i]) for t in table) for i in range(len(head))]
    for t in table:
        print("  ".join(s.rjust(w) for s, w in zip(t, widths, strict=True)))
    print("targets: eu/floor <= 0.6, peer/eu >= 4, peak GiB <= 1; mean check: max relative difference "
          "where both maps are finite <= 1e-5 (cells finite in one map only: CSV coverage_diff_cells)")
    for r in rows:
        if r.get("error"):
            print(f"  {r['layout']} 1/{r['cells_per_degree']}: {r['error']}")


def main() -> None:
    ap = argparse.ArgumentParser(description="Storage-layout sweep of `euphotic run` against the read floor "
                                             "and a plain xarray script.")
    ap.add_argument("--res-list", default="12,24", help="cells per degree, comma separated")
    ap.add_argument("--days", type=int, default=30, help="daily files per input (<= 30)")
    ap.add_argument("--layouts", default=",".join(LAYOUTS), help=f"comma separated, of {','.join(LAYOUTS)}")
    ap.add_argument("--data", type=Path, default=HERE / "data", help="where inputs are generated")
    ap.add_argument("--out", type=Path, default=HERE / "results", help="where run outputs go")
    ap.add_argument("--csv", type=Path, default=HERE / "scale_layouts.csv", help="the table as CSV")
    ap.add_argument("--keep", action="store_true", help="keep each layout's input files after measuring")
    a = ap.parse_args()
    layouts = [x.strip() for x in a.layouts.split(",") if x.strip()]
    unknown = sorted(set(layouts) - set(LAYOUTS))
    if unknown:
        raise SystemExit(f"unknown layout(s) {unknown}; choose from {LAYOUTS}")
    days = max(1, min(a.days, 30))
    a.out.mkdir(parents=True, exist_ok=True)
    start_import = import_time()
    print(f"python -c 'import euphotic.cli': {start_import:.2f} s", flush=True)
    rows = []
    for r in (cells_per_degree(x) for x in a.res_list.split(",") if x.strip()):
        print(f"1/{r} degree ({180 * r} x {360 * r}), {days} days", flush=True)
        base = a.data / f"layout_{r}"
        needs_current = "current" in layouts or any(changed_inputs(x) != {"chl", "par", "sst"} for x in layouts)
        if needs_current:
            make_layout(r, days, a.data, "current")
        for layout in layouts:
            rows.append(measure(layout, r, days, a.data, a.out, start_import))
            if not a.keep and layout != "current":
                shutil.rmtree(base / layout)
        if not a.keep:
            shutil.rmtree(base, ignore_errors=True)
    print()
    print_table(rows)
    a.csv.parent.mkdir(parents=True, exist_ok=True)
    with open(a.csv, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=COLUMNS)
        w.writeheader()
        w.writerows(rows)
    print(f"wrote {a.csv}")


if __name__ == "__main__":
    main()
