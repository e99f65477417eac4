"""Make the invented Maren Sea station file (deterministic; run from the repo root after
scripts/make_sample_grids.py).

The "truth": at each station the measured carbon production is the VGPM's own daily value at
the station cell (from the demo's inputs, configs/demo.toml) times :data:`TRUE_FACTOR`, times
seeded log-normal noise (log10 standard deviation :data:`NOISE_LOG10`). So ``euphotic matchup``
on the demo should find a VGPM bias near ``-log10(TRUE_FACTOR)`` = +0.097 (log10), i.e. the
model about 1.25 times the measurements, within the noise.

Measurements are written in the ways ships report them: carbon-14 in mg C, g C or mmol C per
m2 and day, oxygen gross production in mmol O2 m-2 d-1 (carbon / net-to-gross factor x
quotient), a few volumetric carbon-14 profiles (exponential with depth, scaled so that the
tool's trapezoid integral is the truth), one oxygen net community production, two stations
the run cannot match (north of the grid, after April) and a few deliberately bad rows (one
per kind of problem).

Usage: PYTHONPATH=src python scripts/make_sample_stations.py [--out sample_grids/stations]
"""

from __future__ import annotations

import argparse
import csv
from pathlib import Path

import numpy as np

from euphotic.config import load_config
from euphotic.matchup import DailyInputs, WindowOptions, extract
from euphotic.stations import (
    DEFAULT_GROSS_TO_NET,
    DEFAULT_QUOTIENT,
    MOLAR_MASS_C_G_MOL,
    integrate_profile,
)

SEED = 20250419
#: measured = model x TRUE_FACTOR x noise (the bias the match-ups should recover)
TRUE_FACTOR = 0.8
#: log10 standard deviation of the measurement noise (about 26 % scatter)
NOISE_LOG10 = 0.1
N_C14, N_O2, N_PROFILES = 22, 8, 4
PROFILE_DEPTHS = (2.0, 10.0, 20.0, 30.0, 50.0, 75.0)
CRUISES = ("MS-2504 Vesk Passage", "MS-2505 Tollan Survey")


def _candidates(inputs: DailyInputs, rng: np.random.Generator, n: int):
    lat = rng.uniform(41.0, 59.0, n)
    lon = rng.uniform(-35.0, -17.0, n)
    day = np.datetime64("2025-04-02") + rng.integers(0, 27, n).astype("timedelta64[D]")
    ex = extract(inputs, lat, lon, day, ["vgpm"], WindowOptions(window=3))
    v = ex.values["vgpm"]
    centre = v[:, 0, 1, 1]
    n_valid = np.isfinite(v.reshape(n, -1)).sum(axis=1)
    ok = np.isfinite(centre) & (centre > 0) & (n_valid >= 7)
    return lat[ok], lon[ok], day[ok], centre[ok]


def main(out: Path) -> Path:
    rng = np.random.default_rng(SEED)
    cfg = load_config(Path(__file__).resolve().parents[1] / "configs" / "demo.toml")
    inputs = DailyInputs.from_config(cfg)
    lat, lon, day, model = _candidates(inputs, rng, 400)
    need = N_C14 + N_O2 + N_PROFILES + 1
    lat, lon, day, model = lat[:need], lon[:need], day[:need], model[:need]
    truth = model * TRUE_FACTOR * 10 ** rng.normal(0.0, NOISE_LOG10, len(model))
    header = ["station", "cruise", "lat", "lon", "date", "start", "end", "value", "units",
              "method", "incubation_h", "depth_m", "notes"]
    rows = []

    def row(i, value, units, method, *, depth="", start="", end="", inc="24", note="",
            station=None, date=None, la=None, lo=None):
        rows.append([station or f"MS{i + 1:03d}", CRUISES[i % 2],
                     f"{lat[i] if la is None else la:.4f}", f"{lon[i] if lo is None else lo:.4f}",
                     str(day[i]) if date is None else date, start, end, value, units, method,
                     inc, depth, note])

    for i in range(N_C14):
        t = truth[i]
        if i % 3 == 0:
            row(i, f"{t / 1000:.4f}", "g C m-2 d-1", "c14", note="simulated in situ, dawn to dawn")
        elif i % 3 == 1:
            row(i, f"{t / MOLAR_MASS_C_G_MOL:.3f}", "mmol C m-2 d-1", "c14")
        else:
            d = str(day[i])
            row(i, f"{t:.1f}", "mg C m-2 d-1", "c14", start=f"{d}T05:30", end=f"{d}T19:30",
                inc="", date="", note="dawn to dusk")
    for i in range(N_C14, N_C14 + N_O2):
        o2 = truth[i] / DEFAULT_GROSS_TO_NET / MOLAR_MASS_C_G_MOL * DEFAULT_QUOTIENT
        row(i, f"{o2:.2f}", "mmol O2 m-2 d-1", "o2_gross", note="light-dark bottles, 24 h")
    for i in range(N_C14 + N_O2, N_C14 + N_O2 + N_PROFILES):
        z = np.array(PROFILE_DEPTHS)
        shape = np.exp(-z / 18.0)
        scale = truth[i] / integrate_profile(z, shape)[0]
        for zk, sk in zip(z, shape * scale, strict=True):
            row(i, f"{sk:.3f}", "mg C m-3 d-1", "c14", depth=f"{zk:g}")
    i = N_C14 + N_O2 + N_PROFILES
    row(i, f"{truth[i] * 0.3 / MOLAR_MASS_C_G_MOL * DEFAULT_QUOTIENT:.2f}", "mmol O2 m-2 d-1",
        "o2_ncp", note="net community production (not scored against NPP)")
    # valid rows the run cannot match
    row(0, "410.0", "mg C m-2 d-1", "c14", station="MS901", la=61.2, lo=-25.0,
        note="north of the demo grid")
    row(1, "380.0", "mg C m-2 d-1", "c14", station="MS902", date="2025-05-06",
        note="after the demo period")
    # deliberately bad rows, one per kind of problem
    row(2, "55.0", "mg N m-2 d-1", "c14", station="MS951", note="bad: nitrogen units")
    row(3, "300.0", "mg C m-2 d-1", "fluorescence", station="MS952", note="bad: method")
    row(4, "300.0", "mg C m-2 d-1", "c14", station="MS953", la=95.0, note="bad: latitude")
    row(5, "300.0", "mg C m-2 d-1", "c14", station="MS954", date="2025-04-31",
        note="bad: no such date")
    row(6, "-12.0", "mg C m-2 d-1", "c14", station="MS955", note="bad: negative value")
    for zk, v in ((5, "9.1"), (20, "6.0"), (20, "4.2"), (50, "1.0")):
        row(7, v, "mg C m-3 d-1", "c14", station="MS956", depth=str(zk),
            note="bad: depth 20 m repeated")
    out.mkdir(parents=True, exist_ok=True)
    path = out / "maren_stations.csv"
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)
    return path


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path("sample_grids/stations"))
    print(f"wrote {main(ap.parse_args().out)}")
