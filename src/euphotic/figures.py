"""Figures of a run: one map per month and model, and a bar chart of the regional totals.

matplotlib is imported inside the functions so the compute path never pays for it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

#: Longest side of a map image in data cells; larger grids are thinned by striding for drawing.
MAX_CELLS_DRAWN = 1600
#: More regions than this are not outlined on maps nor drawn as bars (hundreds of provinces or
#: zones make an unreadable figure); the totals table has them all.
MAX_REGIONS_DRAWN = 30


def _stride(n: int) -> int:
    return max(1, int(np.ceil(n / MAX_CELLS_DRAWN)))


def map_figure(
    nc_path: Path, png_path: Path, region_masks: dict[str, np.ndarray] | None = None
) -> Path:
    """Draw a monthly NPP map (log colour scale) with region outlines; returns ``png_path``."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm

    from euphotic.outputs import CAUTION

    with xr.open_dataset(nc_path) as ds:
        sy, sx = _stride(ds.sizes["lat"]), _stride(ds.sizes["lon"])
        npp = ds["npp"].isel(time=0, lat=slice(None, None, sy), lon=slice(None, None, sx)).load()
        cov = (
            ds["coverage"].isel(time=0, lat=slice(None, None, sy), lon=slice(None, None, sx)).load()
        )
        title = ds.attrs.get("title", "")
    lat, lon = npp["lat"].values, npp["lon"].values
    aspect = (
        (lat.max() - lat.min())
        / max(lon.max() - lon.min(), 1e-9)
        / np.cos(np.deg2rad(np.clip(np.mean(lat), -80, 80)))
    )
    width = 8.0
    height = float(np.clip(width * aspect * 0.85 + 1.4, 3.5, 9.0))
    fig, ax = plt.subplots(figsize=(width, height))
    fig.set_layout_engine("constrained", rect=(0, 0.05, 1, 0.95))
    ax.set_facecolor("#d9d4c7")  # land and cells never observed
    vals = npp.values
    pos = vals[np.isfinite(vals) & (vals > 0)]
    if pos.size:
        lo, hi = np.nanpercentile(pos, [1, 99.5])
        lo = max(lo, 10.0)
        hi = max(hi, lo * 10)
    else:
        lo, hi = 10.0, 3000.0
    mesh = ax.pcolormesh(
        lon,
        lat,
        np.where(vals > 0, vals, np.nan),
        norm=LogNorm(lo, hi),
        cmap="viridis",
        shading="nearest",
    )
    zero = np.where(vals == 0, 1.0, np.nan)
    if np.isfinite(zero).any():
        ax.pcolormesh(lon, lat, zero, cmap="Greys", vmin=0, vmax=2, shading="nearest")
    cb = fig.colorbar(mesh, ax=ax, shrink=0.9, pad=0.02)
    cb.set_label("net primary production (mg C m$^{-2}$ d$^{-1}$)")
    too_many = region_masks is not None and len(region_masks) > MAX_REGIONS_DRAWN
    if region_masks and not too_many:
        colours = ["#e4572e", "#f3a712", "#e0e0e0", "#a8c686", "#ff99c8", "#ffffff"]
        for i, (name, mask) in enumerate(region_masks.items()):
            m = np.asarray(mask)[::sy, ::sx].astype(float)
            if m.any():
                c = colours[i % len(colours)]
                ax.contour(lon, lat, m, levels=[0.5], colors=[c], linewidths=1.4)
                if m.mean() > 0.5:  # a region covering most of the map: outline only
                    continue
                iy, ix = np.argwhere(m > 0).mean(axis=0).astype(int)
                ax.annotate(
                    name, (lon[ix], lat[iy]), color=c, fontsize=8, ha="center", fontweight="bold"
                )
    mean_cov = float(np.nanmean(cov.values)) if np.isfinite(cov.values).any() else 0.0
    import textwrap

    note = f"; {len(region_masks)} regions, not outlined" if too_many else ""
    ax.set_title(textwrap.fill(title, 80) + f"\nmean coverage {mean_cov:.0%} of days{note}",
                 fontsize=10)
    ax.set_xlabel("longitude (degrees east)")
    ax.set_ylabel("latitude (degrees north)")
    ax.set_aspect(1.0 / np.cos(np.deg2rad(np.clip(np.mean(lat), -80, 80))))
    fig.text(
        0.01, 0.005, "Caution: " + CAUTION, fontsize=6, wrap=True, va="bottom", color="#444444"
    )
    fig.savefig(png_path, dpi=110)
    plt.close(fig)
    return png_path


def totals_figure(rows: list[dict], png_path: Path) -> Path:
    """Bar chart of total_TgC per region, one bar per model and month."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from euphotic.outputs import CAUTION

    regions = list(dict.fromkeys(r["region"] for r in rows))
    shown = len(regions)
    if shown > MAX_REGIONS_DRAWN:  # the regions with the largest totals, in table order
        best = sorted(regions, key=lambda g: -max(
            (r["total_TgC"] for r in rows if r["region"] == g and np.isfinite(r["total_TgC"])),
            default=0.0))[:MAX_REGIONS_DRAWN]
        regions = [g for g in regions if g in best]
    series = list(dict.fromkeys((r["model"], r["month"]) for r in rows))
    fig, ax = plt.subplots(figsize=(8, 4.6))
    fig.set_layout_engine("constrained", rect=(0, 0.07, 1, 0.93))
    width = 0.8 / max(len(series), 1)
    x = np.arange(len(regions))
    for k, (model, month) in enumerate(series):
        lookup = {r["region"]: r for r in rows if r["model"] == model and r["month"] == month}
        vals = [lookup[g]["total_TgC"] if g in lookup else np.nan for g in regions]
        filled = [lookup[g]["total_filled_TgC"] if g in lookup else np.nan for g in regions]
        pos = x + (k - (len(series) - 1) / 2) * width
        ax.bar(pos, filled, width * 0.95, color="none", edgecolor=f"C{k}", linestyle="--")
        ax.bar(pos, vals, width * 0.95, color=f"C{k}", label=f"{model} {month}")
    ax.set_xticks(x, regions, rotation=15, ha="right")
    ax.set_ylabel("carbon fixed in the month (Tg C)")
    head = "Regional totals (solid: observed cells; dashed: scaled to whole ocean area)"
    if shown > len(regions):
        head += f"\nthe {len(regions)} largest of {shown} regions (all are in the table)"
    ax.set_title(head, fontsize=10)
    ax.legend(fontsize=8)
    fig.text(
        0.01, 0.005, "Caution: " + CAUTION, fontsize=6, wrap=True, va="bottom", color="#444444"
    )
    fig.savefig(png_path, dpi=110)
    plt.close(fig)
    return png_path


def figures_for_run(result, cfg, region_masks) -> list[Path]:
    """Draw every figure of a finished run next to its outputs."""
    out = []
    for nc in result.maps:
        out.append(map_figure(nc, nc.with_suffix(".png"), region_masks))
    if result.rows:
        out.append(
            totals_figure(result.rows, Path(result.totals_csv).with_name("regional_totals.png"))
        )
    return out
