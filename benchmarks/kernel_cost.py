"""Compiled kernel cost per cell of each model, without reading any file.

On invented in-memory fields (chlorophyll log-normal, the other inputs plain functions of it or
uniform), it times each model's compiled monthly accumulator (one day of a (lat, lon) block
added into a running sum, day length one value per row, as in the fused monthly pass) and its
block kernel, best of ``--repeats``, single thread, and prints ns per cell. Together with
``model_cost.py`` (whole runs, reading included) it separates a model's own arithmetic from the
cost of reading the inputs it adds.

    python benchmarks/kernel_cost.py --models vgpm,eppley_vgpm,cbpm
"""

from __future__ import annotations

import argparse
import time

import numpy as np


def fields(ny: int, nx: int, seed: int = 0) -> dict[str, np.ndarray]:
    """Invented inputs by role (float32 as read from files; day length by row, float64)."""
    rng = np.random.default_rng(seed)
    chl = np.exp(rng.normal(-1.0, 1.0, (ny, nx))).astype("f4")
    return {
        "chl": chl,
        "par": rng.uniform(5.0, 60.0, (ny, nx)).astype("f4"),
        "sst": rng.uniform(0.0, 28.0, (ny, nx)).astype("f4"),
        "day_length": rng.uniform(8.0, 16.0, ny),
        "bbp": (0.0003 + 0.0015 * chl**0.6).astype("f4"),
        "kd490": (0.0166 + 0.0773 * chl**0.67).astype("f4"),
        "mld": (20.0 + 60.0 / (1.0 + chl)).astype("f4"),
    }


def best_of(fn, args: tuple, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--models", default="vgpm,eppley_vgpm,cbpm", help="comma-separated")
    ap.add_argument("--shape", default="1000x2000", help="cells of the block, NYxNX")
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args()
    from euphotic.models import SPECS, get_model

    ny, nx = (int(v) for v in args.shape.lower().split("x"))
    data = fields(ny, nx)
    ocean = np.ones((ny, nx), bool)
    n = ny * nx
    print(f"{ny} x {nx} cells, one thread, best of {args.repeats}")
    print(f"{'model':<16} {'month pass ns/cell':>19} {'block ns/cell':>14}")
    for name in [m.strip() for m in args.models.split(",") if m.strip()]:
        spec, model = SPECS[name], get_model(name)
        missing = [r for r in spec.roles if r not in data]
        if missing:
            print(f"{name:<16} skipped: no invented field for {', '.join(missing)}")
            continue
        params = list(spec.default_values().values())
        day = [data[r] for r in spec.roles]
        flat = [np.broadcast_to(data[r][:, None], (ny, nx)) if r == "day_length" else data[r]
                for r in spec.roles]
        total, count = np.zeros((ny, nx)), np.zeros((ny, nx))
        model.accumulate([a[:2] for a in day], params, ocean[:2], total[:2], count[:2])  # compile
        model.block(*[a[:2, :2] for a in flat], *params)
        acc = best_of(model.accumulate, (day, params, ocean, total, count), args.repeats)
        blk = best_of(model.block, (*flat, *params), args.repeats)
        print(f"{name:<16} {1e9 * acc / n:>19.1f} {1e9 * blk / n:>14.1f}")
    print(f"(measured {time.strftime('%Y-%m-%d %H:%M')})")


if __name__ == "__main__":
    main()
