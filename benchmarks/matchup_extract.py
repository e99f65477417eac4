"""Benchmark: station match-up extraction against reading every stored chunk once.

Uses the synthetic daily global inputs of benchmarks/scale_month.py (generated or reused under
--data; float32, zlib + shuffle, chunks of 1 x 540 x 1080 cells) and places --stations stations
over the period, either spread uniformly over the globe (``uniform``: the worst case, almost
every chunk holds a station) or along ship tracks (``cruises``: 100 stations per cruise along a
line of a few hundred km over 10 days, the usual layout of ship measurements).

For each layout it measures the extraction (:func:`euphotic.matchup.extract`: window values of
every station and input in one dask graph, then the VGPM on them): wall time, bytes read by the
process (``read_chars`` of psutil: every byte passed through read/pread, whether from disk or
page cache) and the stored blocks the graph needs. The reference is reading every chunk of
every input file once with plain netCDF4-python (scale_month's read floor): its time and bytes.

Usage (defaults: 1/12 degree, 30 days, 10,000 stations, both layouts):
    python benchmarks/matchup_extract.py
    python benchmarks/matchup_extract.py --res 1/2 --days 2 --stations 50   # tiny
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

import scale_month  # noqa: E402  (the inputs and the read floor of the scale benchmark)


def _read_chars() -> int:
    import psutil

    return psutil.Process().io_counters().read_chars


def stations(layout: str, n: int, days: int, seed: int):
    """Station positions (lat, lon) and days for a layout."""
    rng = np.random.default_rng(seed)
    d0 = scale_month.MONTH
    if layout == "uniform":
        lat = np.degrees(np.arcsin(rng.uniform(-np.sin(np.radians(70)), np.sin(np.radians(70)), n)))
        lon = rng.uniform(-180, 180, n)
        day = d0 + rng.integers(0, days, n).astype("timedelta64[D]")
        return lat, lon, day
    per = 100
    k = -(-n // per)
    lat0, lon0 = rng.uniform(-60, 60, k), rng.uniform(-180, 180, k)
    heading = rng.uniform(0, 2 * np.pi, k)
    start = rng.integers(0, max(days - 10, 1), k)
    s = np.arange(per) / per  # fraction along the track
    lat = (lat0[:, None] + 4.0 * s[None, :] * np.cos(heading)[:, None]).ravel()[:n]
    lon = (lon0[:, None] + 4.0 * s[None, :] * np.sin(heading)[:, None]).ravel()[:n]
    day = (d0 + (start[:, None] + np.minimum((s * 10).astype(int), days - 1)[None, :])
           .astype("timedelta64[D]")).ravel()[:n]
    lon = (lon + 180) % 360 - 180
    return np.clip(lat, -89.9, 89.9), lon, day


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--res", default="1/12", help="grid step, e.g. 1/12 or 1/24 (degree)")
    ap.add_argument("--days", type=int, default=30)
    ap.add_argument("--stations", type=int, default=10_000)
    ap.add_argument("--layouts", default="uniform,cruises")
    ap.add_argument("--window", type=int, default=3)
    ap.add_argument("--data", type=Path, default=HERE / "data")
    ap.add_argument("--work", type=Path, default=HERE / "results" / "matchup")
    ap.add_argument("--seed", type=int, default=1)
    a = ap.parse_args(argv)

    from euphotic.config import load_config
    from euphotic.matchup import DailyInputs, WindowOptions, extract

    n = scale_month.cells_per_degree(a.res)
    folder = scale_month.make_inputs(n, a.days, a.data)
    files = scale_month.files_for(folder, a.days)
    every = files["chl"] + files["par"] + files["sst"]
    a.work.mkdir(parents=True, exist_ok=True)
    cfg = load_config(scale_month.write_config(files, a.work / "out", a.work / "bench.toml"))
    stored = sum(os.path.getsize(p) for p in every)

    scale_month.warm(every)
    b0 = _read_chars()
    floor_s = scale_month.read_floor(every)
    floor_bytes = _read_chars() - b0
    print(f"grid 1/{n} degree ({180 * n} x {360 * n}), {a.days} days, 3 inputs: "
          f"{len(every)} files, {stored / 2**20:.0f} MiB stored")
    print(f"reference: every chunk read once (netCDF4): {floor_s:.2f} s, "
          f"{floor_bytes / 2**20:.0f} MiB read")

    t = time.perf_counter()
    inputs = DailyInputs.from_config(cfg)
    prep_s = time.perf_counter() - t
    print(f"opening the inputs and masks (once per matchup): {prep_s:.2f} s")
    out = {"floor_s": floor_s, "floor_bytes": floor_bytes, "prep_s": prep_s}
    for layout in a.layouts.split(","):
        lat, lon, day = stations(layout, a.stations, a.days, a.seed)
        b0, t = _read_chars(), time.perf_counter()
        ex = extract(inputs, lat, lon, day, ["vgpm"], WindowOptions(window=a.window))
        sec, got = time.perf_counter() - t, _read_chars() - b0
        valid = np.isfinite(ex.values["vgpm"]).any(axis=(1, 2, 3)).sum()
        print(f"{layout:>8}: {a.stations} stations: {sec:.2f} s, {got / 2**20:.0f} MiB read "
              f"({got / max(floor_bytes, 1):.1%} of the reference), blocks {ex.blocks_read} of "
              f"{ex.blocks_total} ({ex.blocks_read / max(ex.blocks_total, 1):.1%}); time "
              f"{sec / max(floor_s, 1e-9):.2f} x the reference; {valid} stations with a value")
        out[layout] = {"s": sec, "bytes": got, "blocks": ex.blocks_read,
                       "blocks_total": ex.blocks_total}
    return out


if __name__ == "__main__":
    main()
