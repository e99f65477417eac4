"""Figure-set benchmark: every figure of ``euphotic figures`` drawn from a large committed run.

Draws the figure set of a committed run folder (default: the 20-year 1/12-degree run that
``compare_decades.py`` caches in ``/tmp/euphotic_compare_decades``) through the public
functions (``results.open_maps`` / ``open_totals`` / ``open_region_masks``, then
``figureset.draw_all`` and ``figureset.save``) in a fresh process, saving the PNG and PDF
files into a temporary folder (the run folder is only read, never written), and prints the
wall time and the peak RSS of that process, with the time of each step.

Usage:
    python benchmarks/figure_set.py                              # the cached 20-year run
    python benchmarks/figure_set.py --folder RUN --width one-column
    python benchmarks/figure_set.py --projection latlon   # a global run: see RESULTS.md
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from compare_decades import map_files  # noqa: E402
from scale_month import run_measured, warm  # noqa: E402

DEFAULT_FOLDER = Path("/tmp/euphotic_compare_decades/run_12_20y")

CHILD = r"""
import sys, time, json, tempfile
from pathlib import Path
t0 = time.perf_counter()
from euphotic import figureset, results
from euphotic.errors import EuphoticError
sys.path.insert(0, sys.argv[4])
folder, width, out, projection = Path(sys.argv[1]), sys.argv[2], Path(sys.argv[3]), sys.argv[5]
times = {}
maps, totals = results.open_maps(folder), results.open_totals(folder)
try:
    regions = results.open_region_masks(folder)
except EuphoticError:  # a run from before region masks were recorded: the benchmark's boxes
    import numpy as np
    from compare_decades import REGIONS
    la, lo = maps["lat"].values[:, None], maps["lon"].values[None, :]
    regions = {n: (la >= s) & (la <= nn) & (lo >= w) & (lo <= e) for n, (w, s, e, nn) in REGIONS}
times["open"] = time.perf_counter() - t0
t = time.perf_counter()
_means = figureset.period_means
def _timed_means(*args, **kw):
    t1 = time.perf_counter()
    try:
        return _means(*args, **kw)
    finally:
        times["period_means (one dask.compute)"] = time.perf_counter() - t1
        import resource
        times["peak RSS after the means, GiB"] = (
            resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20)
figureset.period_means = _timed_means
shapes, draw_s, save_s = {}, 0.0, 0.0
figures = figureset.iter_figures(maps, totals, width=width, regions=regions, folder=folder,
                                 projection=projection,
                                 min_coverage=float(maps.attrs.get("min_coverage", 0.5)))
while True:  # as write_figure_set: each figure saved and closed before the next is drawn
    t1 = time.perf_counter()
    d = next(figures, None)
    draw_s += time.perf_counter() - t1
    if d is None:
        break
    meshes = d.artists.get("meshes") or d.artists.get("means") or []
    if meshes:
        shapes[d.name] = list(meshes[0].get_array().shape)
    t1 = time.perf_counter()
    figureset.save(d, out)
    save_s += time.perf_counter() - t1
    d = None
times["draw (with the means)"] = draw_s
times["save"] = save_s
print("TIMES " + json.dumps(times))
print("SHAPES " + json.dumps(shapes))
"""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--folder", type=Path, default=DEFAULT_FOLDER)
    ap.add_argument("--width", default="two-column", choices=("one-column", "two-column"))
    ap.add_argument("--projection", default="equal-area", choices=("equal-area", "latlon"))
    a = ap.parse_args()
    files = map_files(a.folder)
    warm(files)
    with tempfile.TemporaryDirectory(prefix="euphotic_figbench_") as out:
        wall, peak, text = run_measured([sys.executable, "-c", CHILD, str(a.folder), a.width,
                                         out, str(HERE), a.projection])
        n_files = len(list(Path(out).iterdir()))
    times = json.loads(next(x for x in text.splitlines() if x.startswith("TIMES "))[6:])
    shapes = json.loads(next(x for x in text.splitlines() if x.startswith("SHAPES "))[7:])
    print(f"run folder:   {a.folder} ({len(files)} maps)")
    print(f"figure set:   {wall:8.1f} s wall, peak RSS {peak:.2f} GiB, {n_files} files "
          f"({a.width}, {a.projection})")
    print("steps (s):    " + ", ".join(f"{k} {v:.1f}" for k, v in times.items()))
    print("drawn grids:  " + ", ".join(f"{k} {v[0]} x {v[1]}" if len(v) == 2 else f"{k} {v}"
                                       for k, v in shapes.items()))


if __name__ == "__main__":
    main()
