"""Many regions: build time and memory of the region masks, and the cost of the regional sums.

Regions (invented): a 40 x 25 lattice of small non-overlapping pentagons (1,000 regions, like
a set of provinces or zones) plus a few large boxes that overlap them and each other (the
"whole sea" kind), on a global grid of cell centres (default 1/12 degree: 2160 x 4320).

Prints:

* the time and peak traced memory (tracemalloc; numpy reports its buffers to it) of building
  the masks with :func:`euphotic.regions.region_masks`, and the bytes the masks hold, beside
  what one boolean grid per region would take;
* the time of one month's regional sums (:func:`euphotic.aggregate.region_sums`, dask threads,
  inputs already in memory) for all regions and for 5 regions, and for 5 regions with the
  previous per-region loop over packed bits (kept below for the comparison only).

Usage: ``python benchmarks/many_regions.py [--res 1/12] [--boxes 5] [--repeats 3]``.
Figures, not assertions; values measured on the project machine are in
benchmarks/MANY_REGIONS.md.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
from fractions import Fraction

import dask
import dask.array as da
import numpy as np
import xarray as xr

from euphotic import aggregate
from euphotic.regions import Region, box_geometry, region_masks


def lattice_regions(nx: int = 40, ny: int = 25, n_boxes: int = 5) -> list[Region]:
    """``nx * ny`` small pentagons in a lattice over lon -180..180, lat -62.5..62.5, plus
    ``n_boxes`` large boxes overlapping them and each other."""
    from shapely.geometry import Polygon

    rng = np.random.default_rng(1)
    dx, dy = 360.0 / nx, 125.0 / ny
    out = []
    for i in range(nx):
        for j in range(ny):
            x0, y0 = -180.0 + i * dx, -62.5 + j * dy
            ang = np.sort(rng.uniform(0, 2 * np.pi, 5))
            rad = rng.uniform(0.3, 0.5, 5)
            pts = [(x0 + dx / 2 + rad[k] * dx * np.cos(ang[k]),
                    y0 + dy / 2 + rad[k] * dy * np.sin(ang[k])) for k in range(5)]
            out.append(Region(f"zone {i:02d}-{j:02d}", geometry=Polygon(pts)))
    step = 260.0 / max(n_boxes - 1, 1)  # 90-degree boxes with west from -170 to 90
    for b in range(n_boxes):
        west = -170.0 + step * b
        out.append(Region(f"basin {b}", geometry=box_geometry(west, -50.0, west + 90.0, 50.0)))
    return out


def _old_block_sums(npp, cov, ocean, bits, area_rows, n_regions):
    """The previous per-block sums: one pass over the block per region (bits in one integer,
    at most 64 regions). Kept here only to measure against."""
    w = np.broadcast_to(area_rows, npp.shape) * np.asarray(ocean, bool)
    observed = np.isfinite(npp)
    rate = np.where(observed, npp, 0.0)
    cv = np.where(np.isfinite(cov), cov, 0.0)
    out = np.zeros((1, 1, n_regions, 4))
    for r in range(n_regions):
        wr = np.where((bits >> bits.dtype.type(r)) & 1, w, 0.0)
        out[0, 0, r, 0] = wr.sum()
        out[0, 0, r, 1] = (wr * observed).sum()
        out[0, 0, r, 2] = (wr * rate).sum()
        out[0, 0, r, 3] = (wr * cv).sum()
    return out


def _old_sums(npp, cov, ocean, masks5, area_rows, chunks):
    bits = np.zeros(npp.shape, np.uint8)
    for r, name in enumerate(masks5):
        bits |= masks5[name].astype(np.uint8) << np.uint8(r)
    arrs = [da.from_array(a, chunks=chunks) for a in (npp, cov, ocean, bits)]
    rows = da.from_array(area_rows[:, None], chunks=(chunks[0], 1))
    n = len(masks5)
    parts = da.map_blocks(_old_block_sums, *arrs[:3], arrs[3], rows, n, new_axis=[2, 3],
                          chunks=((1,) * len(arrs[0].chunks[0]), (1,) * len(arrs[0].chunks[1]),
                                  (n,), (4,)), dtype=np.float64)
    return parts.sum(axis=(0, 1))


def _best(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--res", default="1/12", help="grid step in degrees (default 1/12)")
    p.add_argument("--boxes", type=int, default=5, help="large overlapping boxes (default 5)")
    p.add_argument("--chunk", type=int, default=540, help="map block edge, cells (default 540)")
    p.add_argument("--repeats", type=int, default=3)
    args = p.parse_args(argv)
    res = float(Fraction(args.res))
    lat = np.arange(-90 + res / 2, 90, res)
    lon = np.arange(-180 + res / 2, 180, res)
    shape = (lat.size, lon.size)
    regions = lattice_regions(n_boxes=args.boxes)
    print(f"grid {shape[0]} x {shape[1]} ({args.res} degree), {len(regions)} regions "
          f"(1000 small non-overlapping + {args.boxes} large overlapping boxes)")

    t0 = time.perf_counter()
    masks = region_masks(regions, lat, lon)
    build_s = time.perf_counter() - t0
    tracemalloc.start()
    region_masks(regions, lat, lon)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    cells = shape[0] * shape[1]
    print(f"mask build: {build_s:.2f} s, peak traced memory {peak / 2**20:.0f} MiB")
    print(f"masks held: {masks.nbytes / 2**20:.0f} MiB ({masks.n_label_layers} label layers, "
          f"{len(masks.bit_regions)} regions as bits, dtype {masks.planes.dtype}); one boolean "
          f"grid per region would be {len(regions) * cells / 2**30:.1f} GiB")

    rng = np.random.default_rng(0)
    npp = rng.uniform(0, 2000, shape)
    npp[rng.random(shape) < 0.3] = np.nan
    cov = np.where(np.isfinite(npp), 0.5, np.nan)
    ocean = rng.random(shape) < 0.7
    area_rows = np.cos(np.deg2rad(lat)) * (res * 111_195.0) ** 2
    chunks = (args.chunk, args.chunk)

    def wrap(a):
        return xr.DataArray(da.from_array(a, chunks=chunks), dims=("lat", "lon"))

    maps = aggregate.MonthlyMaps(month=np.datetime64("2025-04"), model="vgpm", npp=wrap(npp),
                                 coverage=wrap(cov), n_days=30)
    five = [r for r in regions if r.name.startswith("basin")][:4] + regions[:1]
    masks5 = region_masks(five, lat, lon)

    def new(m):
        def go():
            z = aggregate.region_sums(maps, m, m.planes, wrap(ocean), area_rows)
            return z.sums.compute()
        return go

    with dask.config.set(scheduler="threads"):
        t_all = _best(new(masks), args.repeats)
        t_five = _best(new(masks5), args.repeats)
        t_old = _best(lambda: _old_sums(npp, cov, ocean, masks5, area_rows, chunks).compute(),
                      args.repeats)
        check = _old_sums(npp, cov, ocean, masks5, area_rows, chunks).compute()
        same = np.allclose(new(masks5)(), check, rtol=1e-12)
    print(f"regional sums per month, {len(regions)} regions: {t_all:.2f} s")
    print(f"regional sums per month, 5 regions: {t_five:.2f} s")
    print(f"regional sums per month, 5 regions, previous per-region loop: {t_old:.2f} s "
          f"(same sums: {same})")
    print(f"ratio {len(regions)} regions / previous 5 regions: {t_all / t_old:.2f}")


if __name__ == "__main__":
    main()
