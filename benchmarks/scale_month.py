"""Scale benchmark: a month of daily global grids on this machine.

Generates (or reuses) synthetic daily global inputs (chlorophyll, PAR, SST; float32, zlib
level 4 + shuffle, chunked like common gridded products) and measures, in one run:

  (a) the read floor: every chunk of the same files read sequentially with plain netCDF4-python;
  (b) the full `euphotic run` (read, VGPM, monthly mean, coverage, totals for five regions,
      write the map): wall time and peak RSS of the process tree (psutil);
  (c) a naive eager script (open_mfdataset with defaults, .load(), numpy VGPM) on a few days,
      extrapolated per day, with its peak RSS;

and prints (b)/(a) and (c)/(b) per day. It then sweeps days (1, 3, 10, 30) and resolutions
(1/12, 1/24 degree) and writes a CSV and a PNG of wall time and peak memory.

Usage (defaults: 1/24 degree, 30 days; figures measured side by side in the same run):
    python benchmarks/scale_month.py
    python benchmarks/scale_month.py --res 1/4 --days 3 --sweep-days 1,3 --sweep-res 4,8
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import subprocess
import sys
import textwrap
import time
from concurrent.futures import ProcessPoolExecutor
from fractions import Fraction
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
MONTH = np.datetime64("2025-04-01")
CHUNK = (1, 540, 1080)
REGIONS = [  # five invented ocean boxes [west, south, east, north]
    ("Northern Reach", [-60.0, 40.0, 0.0, 65.0]),
    ("Equatorial Belt", [-180.0, -10.0, 180.0, 10.0]),
    ("Southern Ring", [-180.0, -65.0, 180.0, -40.0]),
    ("Dateline Box", [160.0, -30.0, -160.0, 30.0]),
    ("Western Basin", [40.0, -40.0, 100.0, 20.0]),
]


# ------------------------------------------------------------------------------------------
# synthetic inputs
# ------------------------------------------------------------------------------------------


def cells_per_degree(text: str) -> int:
    """'1/24', '24' or '0.041666' -> 24 cells per degree."""
    f = Fraction(text).limit_denominator(1000)
    n = 1 / f if f < 1 else f
    return int(round(float(n)))


def _smooth(rng, ny, nx, factor):
    coarse = rng.standard_normal((max(ny // factor, 2), max(nx // factor, 2)))
    for _ in range(2):  # cheap smoothing of the coarse field
        coarse = 0.25 * (np.roll(coarse, 1, 0) + np.roll(coarse, -1, 0) + np.roll(coarse, 1, 1) + np.roll(coarse, -1, 1))
    full = np.repeat(np.repeat(coarse, factor, 0), factor, 1)[:ny, :nx]
    return full / full.std()


STD = {
    "chl": ("mass_concentration_of_chlorophyll_a_in_sea_water", "mg m-3"),
    "par": ("surface_downwelling_photosynthetic_photon_flux_in_air", "einstein m-2 day-1"),
    "sst": ("sea_surface_temperature", "degC"),
}


def day_fields(n: int, day_index: int) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """(lat, lon, {chl, par, sst}) of one synthetic day at n cells per degree (float32, NaN
    over "land"; ascending latitude, longitude in [-180, 180))."""
    rng = np.random.default_rng(1000 + day_index)
    ny, nx = 180 * n, 360 * n
    lat = -90 + (np.arange(ny) + 0.5) / n
    lon = -180 + (np.arange(nx) + 0.5) / n
    f = max(n // 2, 1)
    land = _smooth(np.random.default_rng(7), ny, nx, 8 * f) > 0.6  # same "land" every day
    # Unrounded float32 values with cell-to-cell noise, so the files compress about as much as
    # real gridded products (~220 MB a day for the three inputs at 1/24 degree).
    clouds = _smooth(rng, ny, nx, 4 * f) > 0.8
    tropics = np.cos(np.deg2rad(lat))[:, None]
    noise = rng.standard_normal((ny, nx)).astype("f4")
    chl = np.exp(-1.2 + 0.8 * _smooth(rng, ny, nx, 2 * f) + 0.05 * noise)
    chl = np.where(land | clouds, np.nan, chl).astype("f4")
    par = np.clip(45 * tropics + 3 * _smooth(rng, ny, nx, 4 * f) + 0.3 * noise, 0.5, None)
    par = np.where(land, np.nan, par).astype("f4")
    sst = -1.5 + 30 * tropics**2 + 0.8 * _smooth(rng, ny, nx, 2 * f) + 0.05 * noise[::-1]
    sst = np.where(land, np.nan, sst).astype("f4")
    return lat, lon, {"chl": chl, "par": par, "sst": sst}


def _write_day(args):
    import xarray as xr

    n, day_index, folder = args
    day = MONTH + day_index
    stamp = str(day).replace("-", "")
    paths = {v: Path(folder) / f"bench_{v}_{stamp}.nc" for v in ("chl", "par", "sst")}
    if all(p.exists() for p in paths.values()):
        return
    lat, lon, fields = day_fields(n, day_index)
    chl, par, sst = fields["chl"], fields["par"], fields["sst"]
    ny, nx = chl.shape
    std = STD
    chunks = (1, min(CHUNK[1], ny), min(CHUNK[2], nx))
    for v, data in (("chl", chl), ("par", par), ("sst", sst)):
        ds = xr.Dataset(
            {v: (("time", "lat", "lon"), data[None], {"standard_name": std[v][0], "units": std[v][1]})},
            coords={"time": ("time", [day.astype("datetime64[ns]")]),
                    "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
                    "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"})},
            attrs={"title": "synthetic benchmark input (invented)"},
        )
        tmp = paths[v].with_suffix(".tmp")
        ds.to_netcdf(tmp, encoding={v: {"zlib": True, "complevel": 4, "shuffle": True, "chunksizes": chunks,
                                        "_FillValue": np.float32(np.nan)},
                                    "time": {"units": "days since 2025-01-01"}})
        os.replace(tmp, paths[v])


def make_inputs(n: int, days: int, root: Path) -> Path:
    folder = root / f"global_{n}"
    folder.mkdir(parents=True, exist_ok=True)
    todo = [(n, d, str(folder)) for d in range(days)]
    t = time.perf_counter()
    with ProcessPoolExecutor(max_workers=2) as pool:
        list(pool.map(_write_day, todo))
    print(f"inputs ready in {folder} ({time.perf_counter() - t:.0f} s)", flush=True)
    return folder


def files_for(folder: Path, days: int) -> dict[str, list[str]]:
    out = {}
    for v in ("chl", "par", "sst"):
        out[v] = [str(folder / f"bench_{v}_{str(MONTH + d).replace('-', '')}.nc") for d in range(days)]
    return out


# ------------------------------------------------------------------------------------------
# measurements
# ------------------------------------------------------------------------------------------


def run_measured(cmd: list[str], env: dict | None = None) -> tuple[float, float, str]:
    """Wall time (s) and peak RSS (GiB, summed over the process tree) of a command."""
    import psutil

    t = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                            env={**os.environ, **(env or {})})
    ps = psutil.Process(proc.pid)
    peak = 0
    while proc.poll() is None:
        try:
            rss = ps.memory_info().rss + sum(c.memory_info().rss for c in ps.children(recursive=True))
            peak = max(peak, rss)
        except psutil.Error:
            pass
        time.sleep(0.05)
    wall = time.perf_counter() - t
    out = proc.stdout.read()
    if proc.returncode != 0:
        raise SystemExit(f"command failed ({proc.returncode}): {' '.join(cmd)}\n{out}")
    return wall, peak / 2**30, out


def warm(files: list[str]) -> None:
    """Read the files' bytes once (untimed) so every timed pass starts from the page cache:
    this machine reclaims cold pages, which otherwise makes the first pass read from disk."""
    for path in files:
        with open(path, "rb") as fh:
            while fh.read(1 << 24):
                pass


def read_floor(files: list[str]) -> float:
    """Seconds to read every chunk of every file, sequentially, with plain netCDF4-python."""
    import netCDF4

    t = time.perf_counter()
    for path in files:
        with netCDF4.Dataset(path) as ds:
            for var in ds.variables.values():
                if var.ndim != 3:
                    continue
                ch = var.chunking()
                ch = var.shape if ch == "contiguous" else ch
                for i in range(0, var.shape[1], ch[1]):
                    for j in range(0, var.shape[2], ch[2]):
                        var[:, i:i + ch[1], j:j + ch[2]]
    return time.perf_counter() - t


def write_config(files: dict[str, list[str]], out_dir: Path, path: Path, output_format="netcdf") -> Path:
    lines = ["[run]", 'models = ["vgpm"]', f'output_dir = "{out_dir}"', "figures = false",
             f'output_format = "{output_format}"', ""]
    for v in ("chl", "par", "sst"):
        lines += [f"[inputs.{v}]", f"files = {json.dumps(files[v])}", ""]
    for name, box in REGIONS:
        lines += ["[[regions]]", f'name = "{name}"', f"box = {box}", ""]
    path.write_text("\n".join(lines))
    return path


NAIVE = textwrap.dedent('''
    # The typical hand-written approach: defaults everywhere, load everything, numpy VGPM.
    import sys, json, numpy as np, xarray as xr
    files = json.loads(sys.argv[1]); out = sys.argv[2]
    chl = xr.open_mfdataset(files["chl"]).chl.load()
    par = xr.open_mfdataset(files["par"]).par.load()
    sst = xr.open_mfdataset(files["sst"]).sst.load()
    from euphotic.geo import day_length
    from euphotic.models.vgpm import vgpm_kernel
    dl = np.stack([day_length(chl.lat.values, str(t)[:10]) for t in chl.time.values])[:, :, None]
    npp = vgpm_kernel(chl.values, par.values, sst.values, dl)
    mean = np.nanmean(npp, axis=0)
    cov = np.isfinite(npp).sum(axis=0) / npp.shape[0]
    lat = chl.lat.values
    area = np.cos(np.deg2rad(lat))[:, None] * np.ones(mean.shape)
    total = np.nansum(mean * area)
    xr.Dataset({"npp": (("lat", "lon"), mean.astype("f4")), "coverage": (("lat", "lon"), cov.astype("f4"))},
               coords={"lat": lat, "lon": chl.lon.values}).to_netcdf(out)
    print(total)
''')


def measure(n: int, days: int, root: Path, work: Path, *, floor: bool, naive_days: int = 0,
            workers: int | None = None, repeats: int = 1) -> dict:
    folder = make_inputs(n, days, root)
    files = files_for(folder, days)
    all_files = files["chl"] + files["par"] + files["sst"]
    row = {"cells_per_degree": n, "days": days,
           "input_MB": sum(os.path.getsize(f) for f in all_files) / 1e6}
    out_dir = work / f"out_{n}_{days}"
    cfg = write_config(files, out_dir, work / f"bench_{n}_{days}.toml")
    cmd = [sys.executable, "-c", "from euphotic.cli import main; main()", "run", str(cfg), "-q", "--no-figures",
           "--force"]  # every pass computes: no reuse of the previous pass's maps
    if workers:
        cmd += ["--workers", str(workers)]
    floors, runs, peaks = [], [], []
    for _ in range(repeats):  # interleaved, each pass from a warm page cache; best of each kept
        if floor:
            warm(all_files)
            floors.append(read_floor(all_files))
        warm(all_files)
        wall, peak, _ = run_measured(cmd)
        runs.append(wall)
        peaks.append(peak)
    if floor:
        row["read_floor_s"] = min(floors)
        row["read_floor_all_s"] = " ".join(f"{x:.1f}" for x in floors)
    row["euphotic_s"] = min(runs)
    row["euphotic_all_s"] = " ".join(f"{x:.1f}" for x in runs)
    row["euphotic_peak_GiB"] = max(peaks)
    if naive_days:
        few = {k: v[:naive_days] for k, v in files.items()}
        wall, peak, _ = run_measured([sys.executable, "-c", NAIVE, json.dumps(few), str(work / "naive.nc")])
        row["naive_days"] = naive_days
        row["naive_s_per_day"] = wall / naive_days
        row["naive_peak_GiB"] = peak
        row["naive_peak_GiB_per_day"] = peak / naive_days
    return row


def main() -> None:
    ap = argparse.ArgumentParser(description="Scale benchmark of `euphotic run` on daily global grids.")
    ap.add_argument("--res", default="1/24", help="grid spacing in degrees (1/24) or cells per degree (24)")
    ap.add_argument("--days", type=int, default=30, help="days in the main measurement (<= 30)")
    ap.add_argument("--naive-days", type=int, default=2, help="days for the naive eager script (0: skip)")
    ap.add_argument("--sweep-days", default="1,3,10,30", help="days for the sweep (capped at --days)")
    ap.add_argument("--sweep-res", default="12,24", help="cells per degree for the sweep; empty: no sweep")
    ap.add_argument("--workers", type=int, default=None, help="run euphotic on a LocalCluster of N processes")
    ap.add_argument("--repeats", type=int, default=2, help="interleaved passes of (a) and (b); best kept")
    ap.add_argument("--data", type=Path, default=HERE / "data", help="where inputs are generated/reused")
    ap.add_argument("--out", type=Path, default=HERE / "results", help="where CSV, PNG and outputs go")
    a = ap.parse_args()
    n = cells_per_degree(a.res)
    days = max(1, min(a.days, 30))
    a.out.mkdir(parents=True, exist_ok=True)

    print(f"main measurement: 1/{n} degree ({180 * n} x {360 * n}), {days} days", flush=True)
    main_row = measure(n, days, a.data, a.out, floor=True, naive_days=min(a.naive_days, days),
                       workers=a.workers, repeats=a.repeats)
    floor_per_day = main_row["read_floor_s"] / days
    run_per_day = main_row["euphotic_s"] / days
    print()
    print(f"input files:               {main_row['input_MB'] / days:8.0f} MB per day")
    print(f"(a) read floor:            {main_row['read_floor_s']:8.1f} s  ({floor_per_day:.2f} s/day)"
          f"   passes: {main_row['read_floor_all_s']} s")
    print(f"(b) euphotic run:          {main_row['euphotic_s']:8.1f} s  ({run_per_day:.2f} s/day), "
          f"peak RSS {main_row['euphotic_peak_GiB']:.2f} GiB   passes: {main_row['euphotic_all_s']} s")
    if "naive_s_per_day" in main_row:
        print(f"(c) naive eager script:    {main_row['naive_s_per_day']:8.2f} s/day over {main_row['naive_days']} days, "
              f"peak RSS {main_row['naive_peak_GiB']:.2f} GiB ({main_row['naive_peak_GiB_per_day']:.2f} GiB/day, "
              f"{main_row['naive_peak_GiB_per_day'] * 30:.1f} GiB extrapolated to 30 days)")
    print(f"ratio (b)/(a) per day:     {run_per_day / floor_per_day:8.2f}   (target <= 1.0)")
    if "naive_s_per_day" in main_row:
        print(f"ratio (c)/(b) per day:     {main_row['naive_s_per_day'] / run_per_day:8.2f}   (target >= 6)")
    print(f"peak RSS (b):              {main_row['euphotic_peak_GiB']:8.2f} GiB (target <= 1.5)", flush=True)

    rows = [dict(main_row, kind="main")]
    sweep_res = [int(x) for x in a.sweep_res.split(",") if x.strip()]
    sweep_days = sorted({min(int(x), days) for x in a.sweep_days.split(",") if x.strip()})
    for r in sweep_res:
        for d in sweep_days:
            if r == n and d == days:
                row = dict(main_row)
            else:
                row = measure(r, d, a.data, a.out, floor=True)
            rows.append(dict(row, kind="sweep"))
            print(f"sweep 1/{r} deg, {d:2d} days: run {row['euphotic_s']:7.1f} s, floor {row['read_floor_s']:6.1f} s, "
                  f"peak {row['euphotic_peak_GiB']:.2f} GiB", flush=True)
    sw = [r for r in rows if r["kind"] == "sweep"]
    for r in sweep_res:
        by = {x["days"]: x for x in sw if x["cells_per_degree"] == r}
        if 3 in by and 30 in by:
            growth = by[30]["euphotic_peak_GiB"] / by[3]["euphotic_peak_GiB"] - 1
            print(f"memory growth 3 -> 30 days at 1/{r} degree: {growth:+.0%} (target <= +10%)")

    keys = sorted({k for r in rows for k in r}, key=lambda k: (k != "kind", k))
    csv_path = a.out / "scale_month.csv"
    with open(csv_path, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=keys)
        w.writeheader()
        w.writerows(rows)
    png = a.out / "scale_month.png"
    plot(sw or rows, png)
    print(f"wrote {csv_path} and {png}")


def plot(rows: list[dict], png: Path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4), constrained_layout=True)
    for k, r in enumerate(sorted({x["cells_per_degree"] for x in rows})):
        sel = sorted((x for x in rows if x["cells_per_degree"] == r), key=lambda x: x["days"])
        d = [x["days"] for x in sel]
        ax1.plot(d, [x["euphotic_s"] for x in sel], "o-", color=f"C{k}", label=f"euphotic run, 1/{r} deg")
        ax1.plot(d, [x["read_floor_s"] for x in sel], "s--", color=f"C{k}", alpha=0.6, label=f"read floor, 1/{r} deg")
        ax2.plot(d, [x["euphotic_peak_GiB"] for x in sel], "o-", color=f"C{k}", label=f"1/{r} deg")
    ax1.set_xlabel("days of daily global inputs")
    ax1.set_ylabel("wall time (s)")
    ax1.set_xscale("log")
    ax1.set_yscale("log")
    ax1.legend(fontsize=8)
    ax2.set_xlabel("days of daily global inputs")
    ax2.set_ylabel("peak RSS of the run (GiB)")
    ax2.set_xscale("log")
    ax2.axhline(1.5, color="grey", linestyle=":", label="1.5 GiB target")
    ax2.set_ylim(0, None)
    ax2.legend(fontsize=8)
    fig.suptitle("euphotic scale benchmark (2-core machine)")
    fig.savefig(png, dpi=100)
    plt.close(fig)


if __name__ == "__main__":
    main()
