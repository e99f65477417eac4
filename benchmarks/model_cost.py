"""What each extra model adds to a month's run time (issue: each extra model <= ~25 %).

All models of a run share one read of the inputs and one task per block (the fused monthly
pass); this script measures it. On the same synthetic daily global inputs as
``scale_month.py`` (invented fields), it runs ``euphotic run`` with one model, then with the
first two, the first three, ... of ``--models``, interleaved over ``--repeats`` passes from a
warm page cache, and prints one table: models, seconds (best), seconds added per extra model
and that as a percentage of the one-model run.

Inputs the models need beyond chl/PAR/SST (backscatter, attenuation, mixed-layer depth) are
written once beside the others as plain functions of the chlorophyll field (invented values).

    python benchmarks/model_cost.py --res 1/12 --days 10
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from scale_month import (  # noqa: E402  (a sibling script)
    MONTH,
    REGIONS,
    cells_per_degree,
    files_for,
    make_inputs,
    run_measured,
    warm,
)

#: Extra inputs: role -> (file variable, units, function of chlorophyll (mg m-3)); invented.
EXTRA = {
    "bbp": ("bbp_443", "m-1", lambda c: 0.0003 + 0.0015 * c**0.6),
    "kd490": ("kd_490", "m-1", lambda c: 0.0166 + 0.0773 * c**0.67),
    "mld": ("mld", "m", lambda c: 20.0 + 60.0 / (1.0 + c)),
}


def extra_files(folder: Path, days: int, roles: list[str]) -> dict[str, list[str]]:
    import xarray as xr

    out = {}
    chl_files = files_for(folder, days)["chl"]
    for role in roles:
        var, units, fn = EXTRA[role]
        paths = []
        for chl_path in chl_files:
            path = Path(chl_path.replace("bench_chl_", f"bench_{role}_"))
            if not path.exists():
                with xr.open_dataset(chl_path) as ds:
                    chl = ds["chl"].load()
                field = fn(chl).astype("f4").rename(var)
                field.attrs = {"units": units, "long_name": f"synthetic {role} (invented)"}
                tmp = path.with_suffix(".tmp")
                field.to_dataset().to_netcdf(tmp, encoding={var: {
                    "zlib": True, "complevel": 4, "_FillValue": np.float32(np.nan),
                    "chunksizes": ds["chl"].encoding.get("chunksizes")}})
                os.replace(tmp, path)
            paths.append(str(path))
        out[role] = paths
    return out


def write_config(files: dict[str, list[str]], models: list[str], out_dir: Path, path: Path) -> Path:
    import json

    lines = ["[run]", f"models = {json.dumps(models)}", f'output_dir = "{out_dir}"',
             "figures = false", ""]
    for role, paths in files.items():
        lines += [f"[inputs.{role}]", f"files = {json.dumps(paths)}", ""]
    for name, box in REGIONS:
        lines += ["[[regions]]", f'name = "{name}"', f"box = {box}", ""]
    path.write_text("\n".join(lines))
    return path


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--res", default="1/12", help="grid spacing (1/12) or cells per degree")
    ap.add_argument("--days", type=int, default=10, help="days of the month (<= 30)")
    ap.add_argument("--models", default="vgpm,eppley_vgpm",
                    help="models in the order they are added (comma-separated)")
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--data", type=Path, default=HERE / "data")
    ap.add_argument("--out", type=Path, default=HERE / "results")
    args = ap.parse_args()
    from euphotic.models import input_roles

    n = cells_per_degree(args.res)
    models = [m.strip() for m in args.models.split(",") if m.strip()]
    folder = make_inputs(n, args.days, args.data)
    files = files_for(folder, args.days)
    required, _ = input_roles(models)
    files.update(extra_files(folder, args.days, [r for r in required if r in EXTRA]))
    every = [p for v in files.values() for p in v]
    args.out.mkdir(parents=True, exist_ok=True)
    best: dict[int, float] = {}
    for rep in range(args.repeats):
        for k in range(1, len(models) + 1):
            chosen = models[:k]
            roles = ["chl", "par", "sst", *[r for r in input_roles(chosen)[0] if r in EXTRA]]
            cfg = write_config({r: files[r] for r in roles}, chosen,
                               args.out / f"models_{k}", args.out / f"model_cost_{k}.toml")
            warm(every)
            wall, peak, _ = run_measured([sys.executable, "-m", "euphotic.cli", "run", str(cfg),
                                          "-q", "--no-figures", "--force"])
            best[k] = min(best.get(k, np.inf), wall)
            print(f"pass {rep + 1}: {k} model(s) {wall:.1f} s, peak {peak:.2f} GiB", flush=True)
    one = best[1]
    print(f"\n{180 * n} x {360 * n} cells, {args.days} days from {MONTH}; best of {args.repeats}")
    print(f"{'models':<48} {'s':>7} {'added per extra model':>22}")
    for k in sorted(best):
        per = (best[k] - one) / (k - 1) if k > 1 else 0.0
        extra = f"{per:+.1f} s ({100 * per / one:+.0f} %)" if k > 1 else ""
        print(f"{', '.join(models[:k]):<48} {best[k]:>7.1f} {extra:>22}")
    print(f"(measured {time.strftime('%Y-%m-%d %H:%M')})")


if __name__ == "__main__":
    main()
