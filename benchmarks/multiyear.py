"""Fixed cost per month: many small monthly files, and the bundled decade demo.

1. Multi-year run: monthly composite files (one file per month and input, one time step with
   time bounds covering the month) of chl, PAR and SST on a 0.5-degree grid of an invented
   basin (60 x 80 cells). `euphotic run` (VGPM, default months_per_compute) runs in this process
   under a dask callback that counts the tasks executed. Printed per number of years:
     wall            the run's wall time (s)
     fixed/month     (wall - wall of a one-month run) / (months - 1)
     tasks/month     dask tasks executed / months (should not grow with the number of files)
2. Demo: `euphotic run configs/demo_decade.toml` twice in a temporary copy of configs/ and
   sample_grids/; the second run's wall time is printed.

    python benchmarks/multiyear.py                 # 2 and 12 years, then the demo
    python benchmarks/multiyear.py --years 1,2 --no-demo
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from scale_month import STD, run_measured  # noqa: E402 - the sibling benchmark's helpers

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
FIRST_YEAR = 2010
NY, NX, STEP = 60, 80, 0.5  # the invented Ostra Basin: 20N-50N, 60W-20W
LAT = 20.0 + (np.arange(NY) + 0.5) * STEP
LON = -60.0 + (np.arange(NX) + 0.5) * STEP


def write_months(folder: Path, years: int) -> dict[str, list[str]]:
    """One file per month and input; existing files are reused."""
    import netCDF4

    folder.mkdir(parents=True, exist_ok=True)
    files: dict[str, list[str]] = {v: [] for v in ("chl", "par", "sst")}
    yy, xx = np.meshgrid(LAT, LON, indexing="ij")
    land = (yy - 42) ** 2 / 30 + (xx + 30) ** 2 / 40 < 1  # an invented island
    for k in range(12 * years):
        start = np.datetime64(f"{FIRST_YEAR + k // 12}-{k % 12 + 1:02d}", "M")
        lo, hi = start.astype("datetime64[D]"), (start + 1).astype("datetime64[D]")
        rng = np.random.default_rng(k)
        season = np.cos(2 * np.pi * (k % 12) / 12)
        fields = {
            "chl": np.exp(-1.0 + 0.5 * np.sin(yy / 5) + 0.2 * rng.standard_normal((NY, NX))),
            "par": 35 + 12 * season * (yy / 50) + rng.standard_normal((NY, NX)),
            "sst": 28 - 0.4 * (yy - 20) + 4 * season + 0.3 * rng.standard_normal((NY, NX)),
        }
        for v, data in fields.items():
            path = folder / f"ostra_{v}_{str(start).replace('-', '')}.nc"
            files[v].append(str(path))
            if path.exists():
                continue
            tmp = path.with_suffix(".tmp")
            with netCDF4.Dataset(tmp, "w") as ds:
                ds.title = "synthetic monthly composite, Ostra Basin (invented)"
                ds.Conventions = "CF-1.8"
                for name, size in (("time", 1), ("nv", 2), ("lat", NY), ("lon", NX)):
                    ds.createDimension(name, size)
                t = ds.createVariable("time", "f8", ("time",))
                t.standard_name, t.units, t.calendar, t.bounds = "time", "days since 2000-01-01", "standard", "time_bnds"
                day0 = np.datetime64("2000-01-01")
                t[:] = [((lo - day0).astype(int) + (hi - day0).astype(int)) / 2]
                ds.createVariable("time_bnds", "f8", ("time", "nv"))[:] = [[(lo - day0).astype(int),
                                                                            (hi - day0).astype(int)]]
                for name, vals, std, units in (("lat", LAT, "latitude", "degrees_north"),
                                               ("lon", LON, "longitude", "degrees_east")):
                    c = ds.createVariable(name, "f8", (name,))
                    c.standard_name, c.units = std, units
                    c[:] = vals
                var = ds.createVariable(v, "f4", ("time", "lat", "lon"), fill_value=np.float32(-999.0), zlib=True)
                var.standard_name, var.units = STD[v]
                var.cell_methods = "time: mean"
                var[0] = np.where(land, -999.0, data).astype("f4")
            tmp.replace(path)
    return files


def write_config(files: dict[str, list[str]], out_dir: Path, path: Path) -> Path:
    import json

    lines = ["[run]", 'models = ["vgpm"]', f'output_dir = "{out_dir}"', "figures = false", ""]
    for v in ("chl", "par", "sst"):
        lines += [f"[inputs.{v}]", f"files = {json.dumps(files[v])}", ""]
    lines += ["[[regions]]", 'name = "Ostra Basin"', "box = [-60.0, 20.0, -20.0, 50.0]", ""]
    path.write_text("\n".join(lines))
    return path


def run_counted(cfg_path: Path) -> tuple[float, int]:
    """Wall time of an in-process `euphotic run` (no figures, no steps, --force) and the number
    of dask tasks it executed."""
    from dask.callbacks import Callback

    from euphotic.config import load_config
    from euphotic.pipeline import run

    class Count(Callback):
        tasks = 0

        def _pretask(self, key, dask, state):
            Count.tasks += 1

    cfg = load_config(cfg_path)
    cfg.figures = False
    t = time.perf_counter()
    with Count():
        run(cfg, progress=False, force=True, steps=False)
    return time.perf_counter() - t, Count.tasks


def multiyear(years_list: list[int], work: Path) -> None:
    data = work / "monthly"
    one_files = write_months(data, 1)
    one = {v: f[:1] for v, f in one_files.items()}
    run_counted(write_config(one, work / "out_warm", work / "warm.toml"))  # imports, caches: untimed
    one_wall, one_tasks = run_counted(write_config(one, work / "out_1", work / "one.toml"))
    print(f"one month: {one_wall:.2f} s, {one_tasks} dask tasks", flush=True)
    print(f"{'years':>5} {'files':>5} {'months':>6} {'wall s':>7} {'fixed/month s':>13} {'tasks':>6} "
          f"{'tasks/month':>11}")
    for years in years_list:
        files = write_months(data, years)
        months = 12 * years
        wall, tasks = run_counted(write_config(files, work / f"out_{years}", work / f"years_{years}.toml"))
        fixed = (wall - one_wall) / (months - 1) if months > 1 else float("nan")
        print(f"{years:5d} {3 * months:5d} {months:6d} {wall:7.2f} {fixed:13.3f} {tasks:6d} {tasks / months:11.1f}",
              flush=True)
    print("fixed/month = (wall - one-month wall) / (months - 1); target <= ~0.05 s. "
          "tasks/month should not change with the number of years.")


def demo(work: Path) -> None:
    copy = work / "demo"
    for name in ("configs", "sample_grids"):
        shutil.copytree(ROOT / name, copy / name, dirs_exist_ok=True)
    cmd = [sys.executable, "-c", "from euphotic.cli import main; main()", "run",
           str(copy / "configs" / "demo_decade.toml"), "-q", "--no-figures"]
    first = run_measured(cmd)[0]
    second, peak, _ = run_measured(cmd)
    print(f"demo_decade: first run {first:.2f} s, second run {second:.2f} s (target <= 4 s), "
          f"peak {peak:.2f} GiB")


def main() -> None:
    ap = argparse.ArgumentParser(description="Fixed cost per month of `euphotic run` and the demo timing.")
    ap.add_argument("--years", default="2,12", help="numbers of years of monthly files, comma separated")
    ap.add_argument("--work", type=Path, default=None, help="working folder (default: a temporary one)")
    ap.add_argument("--no-demo", action="store_true", help="skip the demo_decade timing")
    a = ap.parse_args()
    years = [int(x) for x in a.years.split(",") if x.strip()]
    with tempfile.TemporaryDirectory(prefix="euphotic-multiyear-") as tmp:
        work = a.work or Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        multiyear(years, work)
        if not a.no_demo:
            demo(work)


if __name__ == "__main__":
    main()
