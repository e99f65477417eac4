"""Figures of a committed run for a proposal or report (``euphotic figures FOLDER``).

Drawn from the run's results as data (:func:`euphotic.results.open_maps` and
:func:`euphotic.results.open_totals`, through :mod:`euphotic.compare`); nothing re-reads the
inputs. Each figure is written as a PNG at :data:`DPI` and a vector PDF at one of the
:data:`WIDTHS_MM` print widths, with a caption beside it (``NAME.caption.md`` and
``NAME.caption.txt``). The whole set is added to the run's folder as one unit under the kind
:data:`KIND`; a new set replaces the old one.

matplotlib, cartopy and cmcrameri are imported inside the drawing functions, so the compute
path never pays for them. No drawing step needs a network: land is where the run's
``coverage`` is NaN (the run's own ocean mask), and no coastline data set is read.

The drawing functions return the :class:`matplotlib.figure.Figure` (and what was drawn with
it) so that tests and notebooks can inspect the artists before anything is saved.
"""

from __future__ import annotations

import math
import textwrap
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from euphotic import __version__, compare, ensemble, results, runfolder
from euphotic.aggregate import FLAG_LOW_COVERAGE
from euphotic.errors import EuphoticError, NoRunError
from euphotic.figures import MAX_REGIONS_DRAWN  # more regions than this are not outlined
from euphotic.outputs import CAUTION

#: The kind under which the figure set is listed in the run manifest; a new
#: ``euphotic figures`` replaces the whole set.
KIND = "figure set"

#: Print widths (mm): one journal column and a full page width (common practice for A4 /
#: letter journals: about 85 mm and 180 mm).
WIDTHS_MM: dict[str, float] = {"one-column": 85.0, "two-column": 180.0}
#: Millimetres per inch (exact, by definition of the inch).
MM_PER_INCH = 25.4
#: Resolution of the PNG files (dots per inch; the usual requirement for print halftones).
DPI = 300
#: Tallest map panel (mm), so that a single or tall panel still fits a printed page with its
#: caption (a practical choice of this tool).
MAX_PANEL_HEIGHT_MM = 110.0
#: Smallest font on a figure, points (legible at print size; common practice >= 7 pt).
FONT_PT = 7.0
#: Default minimum coverage: cells whose mean coverage over the period (fraction of the days
#: with a valid estimate) is below this are marked (stippled). This tool's default, not a
#: published value.
DEFAULT_MIN_COVERAGE = 0.5
#: Robust limits of the shared colour scale: percentiles of all panels' values together;
#: values outside are drawn in the end colours and shown by the colourbar's extend arrows.
CLIP_PERCENTILES = (2.0, 98.0)
#: Percentile of |difference| that sets the symmetric limits of a difference map.
DIFF_PERCENTILE = 98.0

#: Colours: land (mid grey) and ocean without data (light grey), neutral and so apart from
#: every colour of the colour maps; the marks of low coverage in near-black.
LAND_COLOUR = "#8a8a8a"
NO_DATA_COLOUR = "#dcdcdc"
MARK_COLOUR = "#1a1a1a"
#: Colour maps (cmcrameri; Crameri et al. 2020): perceptually uniform and readable with
#: colour-vision deficiencies. ``batlow`` sequential, ``vik`` diverging.
SEQUENTIAL_CMAP = "batlow"
DIVERGING_CMAP = "vik"
#: Line colours (Okabe & Ito 2008 colour-blind safe palette) for models in line plots.
LINE_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")
#: Band of the spread across models (neutral, so it reads apart from any model's colour).
SPREAD_COLOUR = "#c8c8c8"
#: Line of the ensemble mean drawn in the band (near-black: apart from every model colour).
ENSEMBLE_COLOUR = "#1a1a1a"
ENSEMBLE_LABEL = "ensemble mean"

#: Outline colours of the regions on maps: the Okabe & Ito (2008) palette of the lines, drawn
#: with a white halo so that they read on every colour of the colour maps.
REGION_COLOURS = LINE_COLOURS
#: A region holding more than this fraction of the map's cells is named in a corner label
#: instead of at a point inside it (its outline is the map's frame or close to it); this
#: tool's choice.
WHOLE_MAP_FRACTION = 0.5
#: Longest side, in cells, of a mask outlined at full resolution (each cell split in 2 x 2 so
#: that the outline follows the cell edges); larger masks are thinned by striding.
MAX_OUTLINE_CELLS = 800
#: Narrowest map panel (mm) that holds the regions' names; narrower panels (three or more
#: maps at one-column width, for example) name them in a legend under the figure (this
#: tool's choice, from looking at the drawn figures).
MIN_NAMED_PANEL_MM = 50.0
#: Ratio maps: the symmetric limits (1/f to f) are the smallest of these factors that holds
#: the :data:`DIFF_PERCENTILE` th percentile of |log ratio|; with the middle tick of each.
RATIO_LIMITS: dict[float, float] = {1.1: 1.05, 1.25: 1.1, 1.5: 1.2, 2.0: 1.5, 3.0: 2.0,
                                    5.0: 2.0, 10.0: 3.0}
#: Baseline monthly climatology behind the monthly series: range (fill) and mean (line).
CLIMATOLOGY_COLOUR = "#eadfc4"
CLIMATOLOGY_LINE = "#7d6b43"
#: More models than this are drawn as their mean with a min-max whisker in the totals chart
#: instead of side by side bars.
MAX_SIDE_BY_SIDE = 3

NPP_LABEL = "net primary production (mg C m$^{-2}$ d$^{-1}$)"
NPP_TEXT = "net primary production (mg C m-2 d-1)"
RATIO_LABEL = "ratio of net primary production (dimensionless, logarithmic scale)"

Projection = Literal["equal-area", "latlon"]
Width = Literal["one-column", "two-column"]


class FigureOptionError(EuphoticError):
    """A ``euphotic figures`` option cannot be used with this run (bad period, coverage...)."""


@dataclass
class Drawn:
    """One figure before it is saved: the Figure, its caption, and what tests may inspect."""

    name: str
    figure: Any
    caption_title: str
    caption: str
    artists: dict[str, Any] = field(default_factory=dict)


@dataclass
class FigureSet:
    """What ``euphotic figures`` wrote."""

    files: list[Path] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------------------------
# options


def parse_years(spec: str | None, where: str) -> tuple[int, int] | None:
    """``"2015-2019"`` or ``"2020"`` -> ``(first, last)``; None stays None."""
    if spec is None:
        return None
    parts = str(spec).strip().split("-")
    try:
        first, last = (int(parts[0]), int(parts[-1])) if len(parts) in (1, 2) else (0, -1)
    except ValueError:
        first, last = 0, -1
    if first > last or first <= 0:
        raise FigureOptionError(
            f"{where}: expected YEAR or FIRST-LAST (e.g. 2015-2019), not {spec!r}")
    return first, last


def _check_years(span: tuple[int, int], years: list[int], where: str, folder: Path) -> None:
    if span[1] < years[0] or span[0] > years[-1]:
        raise FigureOptionError(
            f"{where} {span[0]}-{span[1]}: the run in {folder} covers {years[0]}-{years[-1]}")


def _span_text(span: tuple[int, int]) -> str:
    return str(span[0]) if span[0] == span[1] else f"{span[0]}-{span[1]}"


# --------------------------------------------------------------------------------------------
# drawing helpers


def _rc() -> dict:
    return {"font.size": FONT_PT + 1, "axes.titlesize": FONT_PT + 1, "axes.labelsize": FONT_PT + 1,
            "xtick.labelsize": FONT_PT, "ytick.labelsize": FONT_PT, "legend.fontsize": FONT_PT,
            "figure.titlesize": FONT_PT + 2, "hatch.linewidth": 0.4, "hatch.color": MARK_COLOUR,
            "pdf.fonttype": 42}


def _cmap(name: str):
    import cmcrameri.cm as cmc

    return getattr(cmc, name).copy()


def _model_names(ds: xr.Dataset) -> dict[str, str]:
    return {str(m): ds.attrs.get(f"model_name_{m}", str(m)) for m in ds["model"].values}


def _model_labels(ds: xr.Dataset) -> dict[str, str]:
    """Short labels for panel titles and legends (the captions give the published names)."""
    from euphotic.outputs import model_label

    return {str(m): model_label(str(m)) for m in ds["model"].values}


def _citations(ds: xr.Dataset) -> dict[str, str]:
    return {str(m): ds.attrs.get(f"citation_{m}", "not recorded") for m in ds["model"].values}


def _log_ticks(lo: float, hi: float) -> list[float]:
    """1-3-10 ticks (..., 30, 100, 300, 1000, ...) within [lo, hi]; 1-2-3-5 ticks, then every
    integer multiple, when the range is too narrow for three of those."""
    for subs in ((1, 3), (1, 2, 3, 5), range(1, 10)):
        ticks = [s * 10.0 ** k
                 for k in range(math.floor(math.log10(lo)) - 1, math.ceil(math.log10(hi)) + 1)
                 for s in subs if lo * 0.999 <= s * 10.0 ** k <= hi * 1.001]
        if len(ticks) >= 3:
            break
    return ticks


def _extend(data_lo: float, data_hi: float, vmin: float, vmax: float) -> str:
    low, high = data_lo < vmin, data_hi > vmax
    return "both" if low and high else "min" if low else "max" if high else "neither"


def _projection(kind: Projection, lat: np.ndarray, lon: np.ndarray):
    import cartopy.crs as ccrs

    if kind == "latlon":
        return ccrs.PlateCarree(central_longitude=float(np.mean([lon.min(), lon.max()])))
    if _is_wide(lat, lon):  # an azimuthal projection folds a hemisphere or more into a sliver
        return ccrs.EqualEarth(central_longitude=float((lon.min() + lon.max()) / 2))
    return ccrs.LambertAzimuthalEqualArea(central_longitude=float((lon.min() + lon.max()) / 2),
                                          central_latitude=float((lat.min() + lat.max()) / 2))


#: Domains spanning at least this many degrees of longitude, or of latitude, are drawn in the
#: Equal Earth projection (equal-area, for the whole globe) instead of the Lambert azimuthal
#: one centred on the domain (a judgement: the azimuthal one distorts strongly this far out).
WIDE_DOMAIN_DEG = (180.0, 120.0)


def _is_wide(lat: np.ndarray, lon: np.ndarray) -> bool:
    return bool(float(np.ptp(lon)) >= WIDE_DOMAIN_DEG[0] or float(np.ptp(lat)) >= WIDE_DOMAIN_DEG[1])


def _edges(c: np.ndarray) -> np.ndarray:
    """Cell edges from centres (half a step beyond the ends)."""
    c = np.asarray(c, dtype=float)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = (c[1:] + c[:-1]) / 2
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


def _title_chars(n: int, width: Width) -> int:
    """Characters per line of a panel title in the default grid of ``n`` panels (about
    1.75 mm a character at FONT_PT + 1 points; measured on the drawn figures)."""
    ncols = _grid_layout(n, width)[1]
    return max(24, int((WIDTHS_MM[width] - 15) / ncols / 1.75))


def _grid_layout(n: int, width: Width) -> tuple[int, int]:
    if width == "one-column":  # two stacked maps at most: three or more in two columns
        return (n, 1) if n <= 2 else (math.ceil(n / 2), 2)
    ncols = min(n, 3)
    return math.ceil(n / ncols), ncols


def _map_axes(n: int, *, width: Width, projection: Projection, lat, lon, extra_height_in=0.0,
              layout: tuple[int, int] | None = None):
    """A figure of ``n`` map panels at the print width (``layout`` (rows, columns) or the
    default grid); returns (fig, axes, crs)."""
    import matplotlib.pyplot as plt

    crs = _projection(projection, lat, lon)
    nrows, ncols = layout or _grid_layout(n, width)
    w_in = WIDTHS_MM[width] / MM_PER_INCH
    # panel aspect from the projected extent of the domain
    import cartopy.crs as ccrs

    xs, ys = np.meshgrid(np.linspace(lon.min(), lon.max(), 9), np.linspace(lat.min(), lat.max(), 9))
    pts = crs.transform_points(ccrs.PlateCarree(), xs, ys)
    aspect = float(np.ptp(pts[..., 1]) / max(np.ptp(pts[..., 0]), 1e-9))
    panel_w = (w_in - 0.6) / ncols
    # a tall domain or a single panel at full width: the map is made narrower, not the page
    # taller than MAX_PANEL_HEIGHT_MM per panel
    panel_h = min(panel_w * aspect, MAX_PANEL_HEIGHT_MM / MM_PER_INCH)
    h_in = nrows * (panel_h + 0.55) + 0.75 + extra_height_in
    fig = plt.figure(figsize=(w_in, h_in), layout="constrained")
    axes = [fig.add_subplot(nrows, ncols, i + 1, projection=crs) for i in range(n)]
    return fig, axes, crs


def _narrow(ncols: int, width: Width) -> bool:
    """Map panels under :data:`MIN_NAMED_PANEL_MM` wide: region names go into a legend and
    gridlines get fewer labels."""
    return (WIDTHS_MM[width] - 15.0) / ncols < MIN_NAMED_PANEL_MM


def _draw_base(ax, lat, lon, land: np.ndarray, no_data: np.ndarray, *, hatch_no_data=False,
               left_labels=True, bottom_labels=True, narrow=False):
    """Land and ocean without data as flat neutral colours, the domain's extent, gridlines
    (fewer of them on a ``narrow`` panel)."""
    import cartopy.crs as ccrs
    from matplotlib.colors import ListedColormap

    pc = ccrs.PlateCarree()
    xe, ye = _edges(lon), _edges(lat)
    ax.set_extent([xe[0], xe[-1], ye[0], ye[-1]], crs=pc)
    # one mesh for both (0: land, 1: ocean without data): each mesh of a large grid costs
    ax.pcolormesh(xe, ye, np.where(land, 0.0, np.where(no_data, 1.0, np.nan)),
                  cmap=ListedColormap([LAND_COLOUR, NO_DATA_COLOUR]), vmin=-0.5, vmax=1.5,
                  transform=pc, rasterized=True)
    if hatch_no_data and no_data.any():
        _mark(ax, lat, lon, no_data, "////")
    gl = ax.gridlines(crs=pc, draw_labels=True, linewidth=0.3, color="#555555", alpha=0.6,
                      x_inline=False, y_inline=False)
    gl.top_labels = gl.right_labels = False
    gl.left_labels, gl.bottom_labels = left_labels, bottom_labels
    gl.xlabel_style = gl.ylabel_style = {"size": FONT_PT}
    if narrow:
        from cartopy.mpl.ticker import LatitudeLocator, LongitudeLocator

        gl.xlocator, gl.ylocator = LongitudeLocator(nbins=3), LatitudeLocator(nbins=4)
    ax.spines["geo"].set_linewidth(0.5)
    return gl


def _mark(ax, lat, lon, mask: np.ndarray, hatch: str):
    """Hatch the cells of ``mask`` (contourf over cell centres)."""
    import cartopy.crs as ccrs

    if not mask.any() or mask.shape[0] < 2 or mask.shape[1] < 2:
        return None
    return ax.contourf(lon, lat, mask.astype(float), levels=[0.5, 1.5], colors="none",
                       hatches=[hatch], transform=ccrs.PlateCarree())


# --------------------------------------------------------------------------------------------
# regions on maps


@dataclass
class RegionLayer:
    """The run's regions as drawn on a map figure: (name, boolean (lat, lon) mask) pairs in
    the run's order, or none drawn (``skipped``: more than :data:`MAX_REGIONS_DRAWN`)."""

    masks: list[tuple[str, np.ndarray]] = field(default_factory=list)
    skipped: int = 0


def region_layer(regions, lat: np.ndarray, lon: np.ndarray) -> RegionLayer:
    """The masks of ``regions`` (a mapping name -> boolean (lat, lon) mask, such as
    :func:`euphotic.results.open_region_masks`; None for no regions) on the maps' grid.

    More than :data:`MAX_REGIONS_DRAWN` regions are not unpacked at all (``skipped`` counts
    them). A mask on another grid than the maps' raises :class:`FigureOptionError`.
    """
    if regions is None or len(regions) == 0:
        return RegionLayer()
    if len(regions) > MAX_REGIONS_DRAWN:
        return RegionLayer(skipped=len(regions))
    out = []
    for name in regions:
        m = np.asarray(regions[name], dtype=bool)
        if m.shape != (len(lat), len(lon)):
            raise FigureOptionError(
                f"region {name!r}: mask of shape {m.shape} is not on the maps' grid "
                f"({len(lat)} x {len(lon)} cells)")
        out.append((str(name), m))
    return RegionLayer(out)


def _step_axis(c: np.ndarray, sub: int) -> np.ndarray:
    """Positions of ``sub`` equal sub-cells in each cell of centres ``c`` with one extra cell
    beyond each end (so a mask touching the grid's edge closes on the outer cell edge)."""
    e = _edges(c)
    e = np.concatenate([[2 * e[0] - e[1]], e, [2 * e[-1] - e[-2]]])
    frac = (np.arange(sub) + 0.5) / sub
    return (e[:-1, None] + np.diff(e)[:, None] * frac[None, :]).ravel()


def _outline_grid(mask: np.ndarray, lat: np.ndarray, lon: np.ndarray):
    """(x, y, z) to contour at 0.5 so that the line follows the cell edges of ``mask``: the
    mask padded with one empty cell all round and each cell split in 2 x 2 (or, for a large
    grid, thinned by striding)."""
    stride = max(1, math.ceil(max(mask.shape) / MAX_OUTLINE_CELLS))
    if stride > 1:
        mask, lat, lon = mask[::stride, ::stride], lat[::stride], lon[::stride]
    sub = 2 if stride == 1 else 1
    z = np.pad(mask, 1).astype(np.float32)
    z = np.repeat(np.repeat(z, sub, axis=0), sub, axis=1)
    return _step_axis(lon, sub), _step_axis(lat, sub), z


def _label_points(layer: RegionLayer, lat, lon) -> dict[str, tuple[float, float, str] | None]:
    """Where each region's name goes: (lon, lat, horizontal alignment) at the cell deepest
    inside the region (largest distance to its edge, scipy.ndimage), away from the names
    already placed; None for a region named in the corner (more than
    :data:`WHOLE_MAP_FRACTION` of the map) or without cells."""
    from scipy.ndimage import distance_transform_edt

    ny, nx = len(lat), len(lon)
    stride = max(1, math.ceil(max(ny, nx) / MAX_OUTLINE_CELLS))
    placed: list[tuple[float, float]] = []
    out: dict[str, tuple[float, float, str] | None] = {}
    # smallest regions first: they have the fewest places to put a name
    for name, m in sorted(layer.masks, key=lambda nm: nm[1].sum()):
        if not m.any() or m.mean() > WHOLE_MAP_FRACTION:
            out[name] = None
            continue
        ms = m[::stride, ::stride]
        depth = distance_transform_edt(np.pad(ms, 1))[1:-1, 1:-1]
        yy, xx = np.mgrid[0:ms.shape[0], 0:ms.shape[1]]
        score = depth.astype(float)
        for py, px in placed:  # keep clear of other names (an eighth of the map)
            dist = np.hypot((yy - py) / ms.shape[0], (xx - px) / ms.shape[1])
            score = np.where(dist < 0.12, score * dist / 0.12, score)
        score = np.where(ms, score, -1.0)
        # of the deepest cells (within 10 % of the best), the one nearest their middle
        cy, cx = np.nonzero(score >= 0.9 * score.max())
        k = np.argmin(np.hypot(cy - cy.mean(), cx - cx.mean()))
        iy, ix = cy[k], cx[k]
        placed.append((iy, ix))
        fx = ix / max(ms.shape[1] - 1, 1)
        ha = "left" if fx < 0.15 else "right" if fx > 0.85 else "center"
        out[name] = (float(lon[::stride][ix]), float(lat[::stride][iy]), ha)
    return out


def _draw_regions(ax, layer: RegionLayer, lat, lon, *, names: bool):
    """Outline every region of ``layer`` on ``ax`` (one contour artist per region, white
    halo) and, with ``names``, write its name inside it or, for a region covering most of the
    map, in a corner label. Returns (outline artists, name texts)."""
    import cartopy.crs as ccrs
    import matplotlib.patheffects as pe

    pc = ccrs.PlateCarree()
    halo = [pe.withStroke(linewidth=2.2, foreground="white")]
    outlines, texts = [], []
    where = _label_points(layer, lat, lon) if names else {}
    corner = 0
    for i, (name, m) in enumerate(layer.masks):
        colour = REGION_COLOURS[i % len(REGION_COLOURS)]
        if not m.any():
            continue
        x, y, z = _outline_grid(m, lat, lon)
        cs = ax.contour(x, y, z, levels=[0.5], colors=[colour], linewidths=1.0, transform=pc)
        cs.set_path_effects(halo)
        outlines.append(cs)
        if not names:
            continue
        at = where.get(name)
        if at is None:  # covers most of the map: named in the upper left corner
            t = ax.text(0.02, 0.98 - 0.075 * corner, name, transform=ax.transAxes, ha="left",
                        va="top", fontsize=FONT_PT, fontweight="bold", color=colour,
                        bbox={"boxstyle": "square,pad=0.2", "fc": "white", "ec": colour,
                              "lw": 1.0, "alpha": 0.85}, zorder=6)
            corner += 1
        else:
            t = ax.text(at[0], at[1], textwrap.fill(name, 16), transform=pc, ha=at[2],
                        va="center", fontsize=FONT_PT, fontweight="bold", color=colour,
                        path_effects=halo, zorder=6, multialignment="center")
        texts.append(t)
    return outlines, texts


def _legend_height(layer: RegionLayer) -> float:
    """Inches a legend of the regions' names takes under a figure (two columns)."""
    return 0.3 + 0.14 * math.ceil(len(layer.masks) / 2) if layer.masks else 0.0


def _region_legend(fig, layer: RegionLayer, *, ncols: int) -> list:
    """The regions' names as a legend of outline colours under the figure (for panels too
    small to hold names); returns the legend's texts."""
    from matplotlib.lines import Line2D

    named = [(i, n) for i, (n, m) in enumerate(layer.masks) if m.any()]
    if not named:
        return []
    handles = [Line2D([], [], color=REGION_COLOURS[i % len(REGION_COLOURS)], lw=1.2)
               for i, _ in named]
    leg = fig.legend(handles, [n for _, n in named], loc="outside lower center", ncols=ncols,
                     fontsize=FONT_PT, frameon=False, title="regions (outlines)",
                     title_fontsize=FONT_PT)
    return list(leg.get_texts())


def _regions_text(layer: RegionLayer, *, legend: bool = False) -> str:
    """The caption's sentence on region outlines."""
    if layer.skipped:
        return (f"The run's {layer.skipped} regions are not outlined (more than "
                f"{MAX_REGIONS_DRAWN}); the totals table has them all. ")
    if not layer.masks:
        return ""
    whole = [n for n, m in layer.masks if m.any() and m.mean() > WHOLE_MAP_FRACTION]
    text = (f"Coloured outlines: the run's regions ({', '.join(n for n, _ in layer.masks)}) "
            f"along the edges of their cells, named "
            + ("in the legend under the maps" if legend else "on the first panel"))
    if whole and not legend:
        text += f" ({', '.join(whole)}, covering most of the map, in the upper left corner)"
    return text + ". "


# --------------------------------------------------------------------------------------------
# the figures


#: At most this many grid cells are drawn per pixel of the PNG across a map panel: the
#: period means are reduced to it by area-weighted block means before they are drawn (more
#: cells than pixels cannot show; this tool's choice: at 2 a global 1/12-degree map took
#: about a minute and 1.2 GiB to draw and save, measured in benchmarks/figure_set.py).
MAX_CELLS_PER_PIXEL = 1.0

PeriodMeans = dict  # (first_year, last_year) -> Dataset, see :func:`period_means`


def _reduce_factor(ny: int, nx: int, *, panel_width_in: float) -> int:
    """Cells per side of a square block so that a panel ``panel_width_in`` inches wide (and
    at most :data:`MAX_PANEL_HEIGHT_MM` tall) gets at most :data:`MAX_CELLS_PER_PIXEL` cells
    per PNG pixel (:data:`DPI`) in either direction."""
    w_px = max(panel_width_in, 0.1) * DPI
    h_px = MAX_PANEL_HEIGHT_MM / MM_PER_INCH * DPI
    return max(1, math.ceil(max(nx / (MAX_CELLS_PER_PIXEL * w_px),
                                ny / (MAX_CELLS_PER_PIXEL * h_px))))


def _widest_panel_in(width: Width) -> float:
    """Width (inches) of the widest map panel of any figure at ``width`` (one panel)."""
    return WIDTHS_MM[width] / MM_PER_INCH - 0.6


def _panel_width_in(ncols: int, width: Width) -> float:
    return (WIDTHS_MM[width] / MM_PER_INCH - 0.6) / ncols


def block_mean(values: np.ndarray, weights: np.ndarray, factor: int
               ) -> tuple[np.ndarray, np.ndarray]:
    """Weighted mean of ``values`` over square blocks of ``factor`` x ``factor`` cells of
    the last two axes, NaN cells left out.

    Parameters
    ----------
    values : array (..., lat, lon)
        Any quantity (NaN: no value).
    weights : array broadcastable to ``values``
        Weight of each cell (cell area, m2, or a sum of areas from an earlier reduction).
    factor : int
        Cells per block side; the last block of a side holds the cells left over.

    Returns
    -------
    (mean, weight) : arrays (..., ceil(lat / factor), ceil(lon / factor))
        ``sum(w v) / sum(w)`` over the block's cells with a value (NaN where none has one)
        and ``sum(w)`` over those cells (same units as ``weights``), so that block means of
        block means stay exact.
    """
    v = np.asarray(values, dtype=np.float64)
    w = np.broadcast_to(np.asarray(weights, dtype=np.float64), v.shape)
    ok = np.isfinite(v)
    w = np.where(ok, w, 0.0)
    vw = np.where(ok, v, 0.0) * w
    ny, nx = v.shape[-2:]
    py, px = -ny % factor, -nx % factor
    pad = [(0, 0)] * (v.ndim - 2) + [(0, py), (0, px)]
    shape = (*v.shape[:-2], (ny + py) // factor, factor, (nx + px) // factor, factor)
    s = np.pad(vw, pad).reshape(shape).sum(axis=(-3, -1))
    sw = np.pad(w, pad).reshape(shape).sum(axis=(-3, -1))
    with np.errstate(all="ignore"):
        mean = np.where(sw > 0, s / sw, np.nan)
    return mean, sw


def _block_axis(c: np.ndarray, factor: int) -> np.ndarray:
    """Centres of the blocks of ``factor`` cells along an axis of centres ``c`` (midpoints
    of the blocks' outer cell edges)."""
    if factor == 1:
        return np.asarray(c)
    e = _edges(c)
    be = np.concatenate([e[::factor], [e[-1]]]) if (len(c) % factor) else e[::factor]
    return (be[1:] + be[:-1]) / 2


def _reduce_dataset(ds: xr.Dataset, factor: int) -> xr.Dataset:
    """Block means (:func:`block_mean`) of ``npp`` and ``coverage`` of a reduced period mean
    (numpy-backed, with the weights ``npp_weight`` / ``coverage_weight``)."""
    if factor == 1:
        return ds
    lat = _block_axis(ds["lat"].values, factor)
    lon = _block_axis(ds["lon"].values, factor)
    out = {}
    for v in ("npp", "coverage"):
        m, w = block_mean(ds[v].values, ds[f"{v}_weight"].values, factor)
        out[v] = (ds[v].dims, m)
        out[f"{v}_weight"] = (ds[v].dims, w)
    return xr.Dataset(out, coords={"model": ds["model"].values, "lat": lat, "lon": lon},
                      attrs={**ds.attrs, "block": ds.attrs.get("block", 1) * factor})


def period_means(maps: xr.Dataset, spans, *, width: Width = "two-column",
                 min_coverage: float | None = None) -> PeriodMeans:
    """Mean rate and coverage of every span in ``spans``, per model, in one computation.

    Parameters
    ----------
    maps : the Dataset of :func:`euphotic.results.open_maps` (npp in mg m-2 d-1 of carbon,
        coverage 0-1)
    spans : iterable of (first_year, last_year), both included
    width : keyword-only
        Print width: the means are reduced (area-weighted block means, :func:`block_mean`)
        to at most :data:`MAX_CELLS_PER_PIXEL` cells per PNG pixel of the widest map panel.
    min_coverage : float, keyword-only
        Also count, per model at full resolution, the cells with a mean rate whose mean
        coverage is below it (attr ``n_low`` of each Dataset).

    Returns
    -------
    dict
        span -> numpy-backed Dataset (model, lat, lon) with ``npp`` (mg m-2 d-1), ``coverage``
        (1) and their block weights ``npp_weight`` / ``coverage_weight`` (m2 of cells with a
        value), attr ``block`` (cells per block side).

    Notes
    -----
    A cell's mean is the mean over the span's months with a value (as
    :func:`euphotic.compare.difference`); a block's is the cell-area-weighted mean of its
    cells with a value (NaN if none: land where the block is all land). The stack of months
    is never held in memory: each month is read once, summed into disjoint groups of years
    that the spans add up, and all spans are reduced together, one ``dask.compute`` per
    band of about :data:`BAND_CELLS` cells (one for a grid below that).
    """

    from euphotic.geo import cell_area

    spans = list(dict.fromkeys(tuple(s) for s in spans))
    lat, lon = maps["lat"].values, maps["lon"].values
    f = _reduce_factor(len(lat), len(lon), panel_width_in=_widest_panel_in(width))
    years = maps["month"].dt.year.values
    area = xr.DataArray(np.asarray(cell_area(lat, lon)), dims=("lat", "lon"),
                        coords={"lat": maps["lat"], "lon": maps["lon"]})
    # disjoint groups of years: each month is summed once, whatever the spans' overlaps
    cuts = sorted({y for a, b in spans for y in (a, b + 1)})
    groups = [(a, b - 1) for a, b in zip(cuts[:-1], cuts[1:], strict=False)
              if any(s[0] <= a and b - 1 <= s[1] for s in spans)]
    rows = _band_rows(maps, f)
    parts: dict = {}
    for r0 in range(0, len(lat), rows):
        band = maps.isel(lat=slice(r0, r0 + rows))
        for key, val in _band_means(band, area.isel(lat=slice(r0, r0 + rows)), spans, groups,
                                    years, f, min_coverage).items():
            parts.setdefault(key, []).append(val)
    out: PeriodMeans = {}
    blat, blon = _block_axis(lat, f), _block_axis(lon, f)
    models = maps["model"].values
    for span in spans:
        data = {}
        for v in ("npp", "coverage"):
            val = np.concatenate(parts[(span, v)], axis=1)
            wt = np.concatenate(parts[(span, f"{v}_weight")], axis=1)
            data[v] = (("model", "lat", "lon"), val)
            data[f"{v}_weight"] = (("model", "lat", "lon"), wt)
        attrs = {"block": f}
        if (span, "n_low") in parts:
            n = np.sum(parts[(span, "n_low")], axis=0)
            attrs["n_low"] = {str(m): int(k) for m, k in zip(models, n, strict=True)}
        out[span] = xr.Dataset(data, coords={"model": models, "lat": blat, "lon": blon},
                               attrs=attrs)
    return out


#: Cells of a band of rows reduced in one ``dask.compute`` (this tool's choice: about 2.3
#: million cells, a quarter of a global 1/12-degree grid, keeps the computation's peak near
#: 0.5 GiB; measured in benchmarks/figure_set.py).
BAND_CELLS = 2_400_000


def _band_rows(maps: xr.Dataset, f: int) -> int:
    """Rows of a band: a multiple of the stored chunks' rows and of the block ``f``, about
    :data:`BAND_CELLS` cells."""
    data = maps["npp"].data
    chunk = (data.chunks[maps["npp"].dims.index("lat")][0] if hasattr(data, "chunks")
             else maps.sizes["lat"])
    step = math.lcm(max(1, int(chunk)), f)
    return max(step, BAND_CELLS // max(1, maps.sizes["lon"]) // step * step)


def _band_means(band: xr.Dataset, area: xr.DataArray, spans, groups, years, f: int,
                min_coverage: float | None) -> dict:
    """Block-reduced means of one band of rows (numpy arrays), all spans in one
    ``dask.compute``: sum and count of each group of years, added up per span."""
    import dask

    todo = {}
    with np.errstate(all="ignore"):
        sums = {}
        for g in groups:
            sel = band.isel(time=np.flatnonzero((years >= g[0]) & (years <= g[1])))
            for v in ("npp", "coverage"):
                x = sel[v].transpose("model", "time", "lat", "lon")
                sums[(g, v)] = (x.sum("time", skipna=True, dtype=np.float64),
                                x.count("time"))
        for span in spans:
            inside = [g for g in groups if span[0] <= g[0] and g[1] <= span[1]]
            means = {}
            for v in ("npp", "coverage"):
                total = sum(sums[(g, v)][0] for g in inside)
                count = sum(sums[(g, v)][1] for g in inside)
                m = total / count.where(count > 0)
                means[v] = m
                if f == 1:
                    todo[(span, v)] = m
                    todo[(span, f"{v}_weight")] = area.where(m.notnull(), 0.0).transpose(
                        "model", "lat", "lon")
                    continue
                m = m.chunk({"lat": _multiple(m.chunks, 1, f, m.sizes["lat"]),
                             "lon": _multiple(m.chunks, 2, f, m.sizes["lon"])})
                w = area.where(m.notnull(), 0.0).transpose("model", "lat", "lon")
                kw = {"lat": f, "lon": f, "boundary": "pad"}
                sw = w.coarsen(**kw).sum()
                todo[(span, v)] = (m.fillna(0.0) * w).coarsen(**kw).sum() / sw.where(sw > 0)
                todo[(span, f"{v}_weight")] = sw
            if min_coverage is not None:
                todo[(span, "n_low")] = (means["npp"].notnull()
                                         & (means["coverage"] < min_coverage)).sum(("lat", "lon"))
        done = dask.compute(*todo.values())
    return {k: np.asarray(getattr(d, "values", d)) for k, d in zip(todo, done, strict=True)}


def _multiple(chunks, axis: int, f: int, n: int) -> int:
    """A chunk length along ``axis`` near the current one and a multiple of ``f``."""
    size = chunks[axis][0] if chunks and chunks[axis] else n
    return min(max(f, size // f * f), max(f, math.ceil(n / f) * f))


def _period_maps(maps: xr.Dataset, span: tuple[int, int], *, means: PeriodMeans | None = None,
                 ncols: int = 1, width: Width = "two-column") -> xr.Dataset:
    """The period means of ``span`` (from ``means``, or computed), reduced further for a
    panel of a grid of ``ncols`` columns at ``width``."""
    span = tuple(span)
    ds = (means or {}).get(span)
    if ds is None:
        ds = period_means(maps, [span], width=width)[span]
    block = ds.attrs.get("block", 1)
    full = (ds.sizes["lat"] * block, ds.sizes["lon"] * block)
    f = _reduce_factor(*full, panel_width_in=_panel_width_in(ncols, width))
    return _reduce_dataset(ds, max(1, math.ceil(f / block)))  # blocks of blocks: >= f


def _n_low(maps: xr.Dataset, span, means: PeriodMeans | None, min_coverage: float,
           shown: xr.Dataset) -> dict[str, int]:
    """Cells of ``span`` with a mean rate below ``min_coverage`` per model, counted at full
    resolution where :func:`period_means` counted them, else on ``shown``."""
    ds = (means or {}).get(tuple(span))
    if ds is not None and "n_low" in ds.attrs:
        return ds.attrs["n_low"]
    if shown.attrs.get("block", 1) > 1:
        sel = maps.isel(time=np.flatnonzero(((maps["month"].dt.year >= span[0])
                                             & (maps["month"].dt.year <= span[1])).values))
        with np.errstate(all="ignore"):
            n = (sel["npp"].mean("time").notnull()
                 & (sel["coverage"].mean("time") < min_coverage)).sum(("lat", "lon")).compute()
        return {str(m): int(k) for m, k in zip(n["model"].values, n.values, strict=True)}
    return {m: int((np.isfinite(shown["npp"].sel(model=m).values)
                    & (shown["coverage"].sel(model=m).values < min_coverage)).sum())
            for m in (str(x) for x in shown["model"].values)}


def _change(per: xr.Dataset, base: xr.Dataset, relative: bool) -> xr.DataArray:
    """Period minus baseline mean rate (mg m-2 d-1), or in percent of the baseline (NaN
    where it is 0), as :func:`euphotic.compare.difference` forms them."""
    with np.errstate(all="ignore"):
        diff = per["npp"] - base["npp"]
        return 100.0 * diff / base["npp"].where(base["npp"] != 0) if relative else diff


def map_panels(maps: xr.Dataset, *, period: tuple[int, int], projection: Projection = "equal-area",
               min_coverage: float = DEFAULT_MIN_COVERAGE, width: Width = "two-column",
               regions=None, means: PeriodMeans | None = None) -> Drawn:
    """Mean rate over ``period`` for every model, one shared logarithmic colour scale.

    Parameters
    ----------
    maps : the Dataset of :func:`euphotic.results.open_maps` (npp in mg m-2 d-1 of carbon)
    period : (first_year, last_year), both included
    projection, min_coverage, width : keyword-only
        Map projection (Lambert azimuthal equal-area centred on the domain, or plain
        lat-lon), the coverage (0-1, fraction of days) under which a cell is stippled, and the
        print width.
    regions : mapping, keyword-only
        Region name -> boolean (lat, lon) mask (:func:`euphotic.results.open_region_masks`),
        outlined on every panel and named on the first; None: no outlines.
    means : dict, keyword-only
        Period means already computed by :func:`period_means` (the figure set computes all
        of them at once); by default computed here.

    Returns
    -------
    Drawn
        ``artists``: ``meshes`` (one per panel, all with the same norm object), ``colorbar``,
        ``norm``, ``marks`` (the stipple per panel or None), ``outlines`` (per panel, one
        contour artist per region), ``region_names`` (the name texts).

    Notes
    -----
    Each panel is the mean over the period's months of the monthly mean daily rate (months
    without a value skipped); a cell's coverage is the mean of its monthly coverages. Colour
    limits are the :data:`CLIP_PERCENTILES` of all panels' positive values together.
    Grids finer than :data:`MAX_CELLS_PER_PIXEL` cells per PNG pixel of a panel are drawn as
    area-weighted block means (:func:`block_mean`; the counts of the caption are of cells).
    """
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm
    from matplotlib.ticker import FixedLocator, NullLocator

    ncols = _grid_layout(maps.sizes["model"], width)[1]
    mean = _period_maps(maps, period, means=means, ncols=ncols, width=width)
    lat, lon = mean["lat"].values, mean["lon"].values
    rlat, rlon = maps["lat"].values, maps["lon"].values
    layer = region_layer(regions, rlat, rlon)
    names = _model_names(maps)
    mlabels = _model_labels(maps)
    models = [str(m) for m in mean["model"].values]
    vals = mean["npp"].values
    pos = vals[np.isfinite(vals) & (vals > 0)]
    if pos.size:
        lo, hi = (float(v) for v in np.percentile(pos, CLIP_PERCENTILES))
        if hi <= lo:
            lo, hi = lo / 2, hi * 2
        data_lo, data_hi = float(np.nanmin(vals[np.isfinite(vals)])), float(pos.max())
    else:
        lo, hi, data_lo, data_hi = 10.0, 1000.0, 10.0, 1000.0
    norm = LogNorm(vmin=lo, vmax=hi)
    cmap = _cmap(SEQUENTIAL_CMAP)
    extend = _extend(data_lo, data_hi, lo, hi)
    with plt.rc_context(_rc()):
        narrow = _narrow(_grid_layout(len(models), width)[1], width)
        fig, axes, _ = _map_axes(len(models), width=width, projection=projection, lat=lat, lon=lon,
                                 extra_height_in=_legend_height(layer) if narrow else 0.0)
        import cartopy.crs as ccrs

        meshes, marks, outlines, labels = [], [], [], []
        for k, (ax, m) in enumerate(zip(axes, models, strict=True)):
            v = mean["npp"].sel(model=m).values
            c = mean["coverage"].sel(model=m).values
            land = ~np.isfinite(c)
            no_data = np.isfinite(c) & ~np.isfinite(v)
            _draw_base(ax, lat, lon, land, no_data, narrow=narrow)
            shown = np.where(np.isfinite(v), np.maximum(v, lo * 1e-3), np.nan)  # 0 -> under
            mesh = ax.pcolormesh(_edges(lon), _edges(lat), shown, norm=norm, cmap=cmap,
                                 transform=ccrs.PlateCarree(), rasterized=True)
            meshes.append(mesh)
            marks.append(_mark(ax, lat, lon, np.isfinite(v) & (c < min_coverage), "...."))
            o, t = _draw_regions(ax, layer, rlat, rlon, names=k == 0 and not narrow)
            outlines.append(o)
            labels += t
            ax.set_title(textwrap.fill(mlabels[m], 48 if width == "two-column" else 45),
                         fontsize=FONT_PT + 1)
        cb = fig.colorbar(meshes[0], ax=axes, orientation="horizontal", extend=extend,
                          shrink=0.85, aspect=35, pad=0.02)
        cb.set_label(NPP_LABEL)
        cb.ax.xaxis.set_major_locator(FixedLocator(_log_ticks(lo, hi)))
        cb.ax.xaxis.set_minor_locator(NullLocator())
        cb.ax.xaxis.set_major_formatter(lambda x, _: f"{x:g}")
        if narrow:
            labels += _region_legend(fig, layer, ncols=2)
        fig.suptitle(f"Mean net primary production, {_span_text(period)}")
    n_low = _n_low(maps, period, means, min_coverage, mean)
    caption = (
        f"Mean daily net primary production (mg C m-2 d-1) over {_span_text(period)} "
        f"(mean of the monthly mean rates), {', '.join(names[m] for m in models)}. "
        f"One logarithmic colour scale for all panels, clipped at the "
        f"{_ordinal(CLIP_PERCENTILES[0])} and {_ordinal(CLIP_PERCENTILES[1])} percentiles of "
        f"all panels' values together ({_num(lo)}-{_num(hi)} mg C m-2 d-1; arrows on the "
        f"colour bar mark clipped values). "
        f"Mid grey: land; light grey: ocean without data. Stippled: cells whose mean coverage "
        f"over the period is below {min_coverage:g} of days (this tool's default is "
        f"{DEFAULT_MIN_COVERAGE:g}; {', '.join(f'{names[m]}: {n_low[m]} cells' for m in models)}). "
        + _regions_text(layer, legend=narrow) + _projection_text(projection, lat, lon)
    )
    return Drawn("fig_npp_maps", fig, f"Mean net primary production, {_span_text(period)}",
                 caption, {"meshes": meshes, "colorbar": cb, "norm": norm, "marks": marks,
                           "axes": axes, "clip": (lo, hi), "extend": extend,
                           "outlines": outlines, "region_names": labels})


def _projection_text(projection: Projection, lat=None, lon=None) -> str:
    if projection == "latlon":
        return "Plain latitude-longitude (Plate Carree) projection."
    if lat is not None and lon is not None and _is_wide(np.asarray(lat), np.asarray(lon)):
        return "Equal Earth projection (equal-area)."
    return "Lambert azimuthal equal-area projection centred on the domain."


@dataclass
class _TwoPeriods:
    """What the maps of a period against a baseline start from: both periods' means (drawn
    grid), the drawn and the run's axes, the region layer, model names and labels."""

    per: xr.Dataset
    base: xr.Dataset
    lat: np.ndarray
    lon: np.ndarray
    layer: object
    names: dict[str, str]
    mlabels: dict[str, str]
    models: list[str]
    P: str
    B: str


def _two_periods(maps, period, baseline, regions, **kw) -> _TwoPeriods:
    per, base = _period_maps(maps, period, **kw), _period_maps(maps, baseline, **kw)
    return _TwoPeriods(
        per, base, per["lat"].values, per["lon"].values,
        region_layer(regions, maps["lat"].values, maps["lon"].values), _model_names(maps),
        _model_labels(maps), [str(m) for m in per["model"].values], _span_text(period),
        _span_text(baseline))


def difference_map(maps: xr.Dataset, *, period: tuple[int, int], baseline: tuple[int, int],
                   projection: Projection = "equal-area", relative: bool = True,
                   min_coverage: float = DEFAULT_MIN_COVERAGE,
                   width: Width = "two-column", regions=None,
                   means: PeriodMeans | None = None) -> Drawn:
    """Mean rate over ``period`` against ``baseline``, per model (from
    :func:`euphotic.compare.difference`), diverging colours centred on zero.

    Parameters
    ----------
    relative : keyword-only
        Percent of the baseline (default) or absolute difference (mg C m-2 d-1).
    regions, means : keyword-only
        As for :func:`map_panels`.

    Returns
    -------
    Drawn
        ``artists``: ``meshes`` (sharing ``norm``, whose limits are symmetric about zero),
        ``colorbar``, ``norm``, ``outlines``, ``region_names``.

    Notes
    -----
    Only the change is drawn here; :func:`comparison_panels` draws baseline | period |
    change side by side.
    """
    import cartopy.crs as ccrs
    import matplotlib.pyplot as plt
    from matplotlib.colors import Normalize

    kw = {"means": means, "ncols": _grid_layout(maps.sizes["model"], width)[1], "width": width}
    tp = _two_periods(maps, period, baseline, regions, **kw)
    per, base, lat, lon, layer = tp.per, tp.base, tp.lat, tp.lon, tp.layer
    rlat, rlon = maps["lat"].values, maps["lon"].values  # the run's grid: region outlines
    names, mlabels, models = tp.names, tp.mlabels, tp.models
    d = _change(per, base, relative)
    base_cov, per_cov = base["coverage"], per["coverage"]
    vals = d.values
    fin = np.abs(vals[np.isfinite(vals)])
    lim = float(np.percentile(fin, DIFF_PERCENTILE)) if fin.size else 1.0
    lim = lim if lim > 0 else 1.0
    norm = Normalize(vmin=-lim, vmax=lim)
    extend = _extend(-float(fin.max()) if fin.size else 0, float(fin.max()) if fin.size else 0,
                     -lim, lim)
    unit = "%" if relative else "mg C m$^{-2}$ d$^{-1}$"
    label = (f"change in net primary production ({unit})" if relative
             else f"difference in net primary production ({unit})")
    with plt.rc_context(_rc()):
        narrow = _narrow(_grid_layout(len(models), width)[1], width)
        fig, axes, _ = _map_axes(len(models), width=width, projection=projection, lat=lat, lon=lon,
                                 extra_height_in=_legend_height(layer) if narrow else 0.0)
        meshes, outlines, labels = [], [], []
        for k, (ax, m) in enumerate(zip(axes, models, strict=True)):
            v = d.sel(model=m).values
            c = per_cov.sel(model=m).values
            land = ~np.isfinite(c)
            _draw_base(ax, lat, lon, land, ~land & ~np.isfinite(v), hatch_no_data=True,
                       narrow=narrow)
            mesh = ax.pcolormesh(_edges(lon), _edges(lat), v, norm=norm,
                                 cmap=_cmap(DIVERGING_CMAP), transform=ccrs.PlateCarree(),
                                 rasterized=True)
            meshes.append(mesh)
            low = np.isfinite(v) & ((c < min_coverage)
                                    | (base_cov.sel(model=m).values < min_coverage))
            _mark(ax, lat, lon, low, "....")
            o, t = _draw_regions(ax, layer, rlat, rlon, names=k == 0 and not narrow)
            outlines.append(o)
            labels += t
            ax.set_title(textwrap.fill(mlabels[m], 48 if width == "two-column" else 45),
                         fontsize=FONT_PT + 1)
        cb = fig.colorbar(meshes[0], ax=axes, orientation="horizontal", extend=extend,
                          shrink=0.85, aspect=35, pad=0.02)
        cb.set_label(label)
        if narrow:
            labels += _region_legend(fig, layer, ncols=2)
        fig.suptitle(f"Net primary production {_span_text(period)} against "
                     f"{_span_text(baseline)}")
    what = ("in percent of the baseline mean" if relative
            else "as the difference of the means (mg C m-2 d-1)")
    caption = (
        f"Change of the mean daily net primary production over {_span_text(period)} against "
        f"the {_span_text(baseline)} baseline, {what}, {', '.join(names[m] for m in models)}. "
        f"Diverging colour scale centred on zero with symmetric limits at the "
        f"{_ordinal(DIFF_PERCENTILE)} percentile of the absolute change (+-{_num(lim)}; arrows mark "
        f"values beyond). Mid grey: land; light grey, hatched: ocean without data in either "
        f"period. Stippled: mean coverage below {min_coverage:g} of days in either period. "
        + _regions_text(layer, legend=narrow) + _projection_text(projection, lat, lon)
    )
    return Drawn("fig_npp_difference", fig,
                 f"Net primary production {_span_text(period)} against {_span_text(baseline)}",
                 caption, {"meshes": meshes, "colorbar": cb, "norm": norm, "axes": axes,
                           "outlines": outlines, "region_names": labels})


def _ordinal(x: float) -> str:
    n = int(round(x))
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def _num(x: float) -> str:
    """A number with three significant digits, never in exponent notation (1000, not 1e+03)."""
    return f"{float(f'{x:.3g}'):,.10g}".replace(",", "")


def _log_scale(values: list[np.ndarray]) -> tuple[Any, str, tuple[float, float]]:
    """One logarithmic norm for all ``values`` together: limits at :data:`CLIP_PERCENTILES`
    of the positive values; returns (norm, extend, (lo, hi))."""
    from matplotlib.colors import LogNorm

    vals = np.concatenate([np.ravel(v) for v in values])
    fin = vals[np.isfinite(vals)]
    pos = fin[fin > 0]
    if pos.size:
        lo, hi = (float(v) for v in np.percentile(pos, CLIP_PERCENTILES))
        if hi <= lo:
            lo, hi = lo / 2, hi * 2
        extend = _extend(float(fin.min()), float(pos.max()), lo, hi)
    else:
        lo, hi, extend = 10.0, 1000.0, "neither"
    return LogNorm(vmin=lo, vmax=hi), extend, (lo, hi)


def _diverging_scale(values: list[np.ndarray]) -> tuple[Any, str, float]:
    """A norm centred on zero with symmetric limits at the :data:`DIFF_PERCENTILE` th
    percentile of |values|; returns (norm, extend, limit)."""
    from matplotlib.colors import Normalize

    vals = np.concatenate([np.ravel(v) for v in values])
    fin = np.abs(vals[np.isfinite(vals)])
    lim = float(np.percentile(fin, DIFF_PERCENTILE)) if fin.size else 1.0
    lim = lim if lim > 0 else 1.0
    top = float(fin.max()) if fin.size else 0.0
    return Normalize(vmin=-lim, vmax=lim), _extend(-top, top, -lim, lim), lim


def ratio_limits(ratios: np.ndarray) -> tuple[float, list[float]]:
    """Symmetric limits of a ratio map: the factor f (limits 1/f and f) and the ticks.

    f is the smallest of :data:`RATIO_LIMITS` at or above exp of the
    :data:`DIFF_PERCENTILE` th percentile of |ln r| over the finite positive ratios (the
    largest, 10, when none is); ticks are 1/f, 1/m, 1, m, f with m the factor's middle tick.
    """
    r = np.asarray(ratios, dtype=float)
    r = r[np.isfinite(r) & (r > 0)]
    q = float(np.exp(np.percentile(np.abs(np.log(r)), DIFF_PERCENTILE))) if r.size else 2.0
    f = next((f for f in sorted(RATIO_LIMITS) if f >= q * (1 - 1e-9)), max(RATIO_LIMITS))
    mid = RATIO_LIMITS[f]
    return f, [1 / f, 1 / mid, 1.0, mid, f]


def ratio_map(maps: xr.Dataset, *, period: tuple[int, int], baseline: tuple[int, int],
              projection: Projection = "equal-area", min_coverage: float = DEFAULT_MIN_COVERAGE,
              width: Width = "two-column", regions=None,
              means: PeriodMeans | None = None) -> Drawn:
    """Ratio of mean rates: ``period`` / ``baseline`` per model and, where several models
    ran, each further model / the first over ``period``; diverging colours centred on one on
    a logarithmic scale with symmetric limits (1/f to f, :func:`ratio_limits`).

    Parameters
    ----------
    maps : the Dataset of :func:`euphotic.results.open_maps` (npp in mg m-2 d-1 of carbon)
    period, baseline : (first_year, last_year), both included
    projection, min_coverage, width, regions, means : keyword-only
        As for :func:`map_panels`.

    Returns
    -------
    Drawn
        ``artists``: ``meshes`` (all with the one ``norm``, a LogNorm with norm(1) = 0.5),
        ``colorbar``, ``norm``, ``ticks``, ``extend``, ``axes``, ``outlines``,
        ``region_names``, ``ratios`` (the arrays drawn, 1).

    Notes
    -----
    A panel is mean(A) / mean(B) cell by cell, the means over the years' months as in
    :func:`map_panels`; 0 / 0 and cells without data in either are left as no data, x / 0
    is drawn in the top colour and 0 / x in the bottom one.
    """
    import cartopy.crs as ccrs
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm
    from matplotlib.ticker import FixedLocator, NullLocator

    n_panels = 2 * maps.sizes["model"] - 1
    kw = {"means": means, "ncols": _grid_layout(n_panels, width)[1], "width": width}
    tp = _two_periods(maps, period, baseline, regions, **kw)
    per, base, lat, lon, layer = tp.per, tp.base, tp.lat, tp.lon, tp.layer
    rlat, rlon = maps["lat"].values, maps["lon"].values  # the run's grid: region outlines
    names, mlabels, models, P, B = tp.names, tp.mlabels, tp.models, tp.P, tp.B
    panels = []  # (title, ratio, low coverage, land)
    with np.errstate(all="ignore"):
        for m in models:
            a, b = per["npp"].sel(model=m).values, base["npp"].sel(model=m).values
            ca, cb_ = per["coverage"].sel(model=m).values, base["coverage"].sel(model=m).values
            r = a / b
            panels.append((f"{mlabels[m]}: {P} / {B}", r,
                           np.isfinite(a) & np.isfinite(b) & ((ca < min_coverage)
                                                               | (cb_ < min_coverage)),
                           ~np.isfinite(ca)))
        first = models[0]
        for m in models[1:]:
            a, b = per["npp"].sel(model=m).values, per["npp"].sel(model=first).values
            ca, cb_ = per["coverage"].sel(model=m).values, per["coverage"].sel(model=first).values
            panels.append((f"{mlabels[m]} / {mlabels[first]}, {P}", a / b,
                           np.isfinite(a) & np.isfinite(b) & ((ca < min_coverage)
                                                               | (cb_ < min_coverage)),
                           ~np.isfinite(ca)))
    allr = np.concatenate([p[1].ravel() for p in panels])
    f, ticks = ratio_limits(allr)
    norm = LogNorm(vmin=1 / f, vmax=f)
    shown_r = allr[~np.isnan(allr)]
    lo_data = float(shown_r.min()) if shown_r.size else 1.0
    hi_data = float(shown_r.max()) if shown_r.size else 1.0
    extend = _extend(lo_data, hi_data, 1 / f, f)
    cmap = _cmap(DIVERGING_CMAP)
    titles = [textwrap.fill(p[0], _title_chars(len(panels), width)) for p in panels]
    lines = max(t.count("\n") + 1 for t in titles)
    with plt.rc_context(_rc()):
        narrow = _narrow(_grid_layout(len(panels), width)[1], width)
        fig, axes, _ = _map_axes(len(panels), width=width, projection=projection, lat=lat,
                                 lon=lon, extra_height_in=0.16 * max(lines - 2, 0)
                                 + (_legend_height(layer) if narrow else 0.0))
        meshes, outlines, labels = [], [], []
        for k, (ax, (_, r, low, land), title) in enumerate(zip(axes, panels, titles,
                                                               strict=True)):
            _draw_base(ax, lat, lon, land, ~land & ~np.isfinite(r), hatch_no_data=True,
                       narrow=narrow)
            with np.errstate(all="ignore"):
                shown = np.where(np.isnan(r), np.nan, np.clip(r, 1e-3 / f, 1e3 * f))
            mesh = ax.pcolormesh(_edges(lon), _edges(lat), shown, norm=norm, cmap=cmap,
                                 transform=ccrs.PlateCarree(), rasterized=True)
            meshes.append(mesh)
            _mark(ax, lat, lon, low, "....")
            o, t = _draw_regions(ax, layer, rlat, rlon, names=k == 0 and not narrow)
            outlines.append(o)
            labels += t
            ax.set_title(title, fontsize=FONT_PT + 1)
        cb = fig.colorbar(meshes[0], ax=axes, orientation="horizontal", extend=extend,
                          shrink=0.85, aspect=35, pad=0.02)
        cb.set_label(textwrap.fill(RATIO_LABEL, 90 if width == "two-column" else 45))
        if narrow:
            labels += _region_legend(fig, layer, ncols=2)
        cb.ax.xaxis.set_major_locator(FixedLocator(ticks))
        cb.ax.xaxis.set_minor_locator(NullLocator())
        cb.ax.xaxis.set_major_formatter(lambda x, _: f"{x:.2g}")
        fig.suptitle(textwrap.fill(f"Ratio of net primary production, {P} / {B}"
                                   + (" and between models" if len(models) > 1 else ""),
                                   90 if width == "two-column" else 45))
    between = (f" Last panel{'s' if len(models) > 2 else ''}: "
               + ", ".join(f"{names[m]} / {names[first]}" for m in models[1:])
               + f", means over {P}." if len(models) > 1 else "")
    caption = (
        f"Ratio of the mean daily net primary production over {P} to that over the {B} "
        f"baseline, cell by cell, for {', '.join(names[m] for m in models)}.{between} "
        f"Diverging colour scale centred on one on a logarithmic scale, with symmetric limits "
        f"{_num(1 / f)} to {_num(f)} (the smallest of {', '.join(_num(x) for x in RATIO_LIMITS)} "
        f"holding the {_ordinal(DIFF_PERCENTILE)} percentile of |log ratio|; arrows on the "
        f"colour bar mark values beyond). Mid grey: land; light grey, hatched: ocean without "
        f"data in either. Stippled: mean coverage below {min_coverage:g} of days in either. "
        + _regions_text(layer, legend=narrow) + _projection_text(projection, lat, lon)
    )
    return Drawn("fig_npp_ratio", fig, f"Ratio of net primary production, {P} / {B}", caption,
                 {"meshes": meshes, "colorbar": cb, "norm": norm, "ticks": ticks,
                  "extend": extend, "axes": axes, "outlines": outlines, "region_names": labels,
                  "ratios": [p[1] for p in panels]})


def comparison_panels(maps: xr.Dataset, *, period: tuple[int, int], baseline: tuple[int, int],
                      projection: Projection = "equal-area", relative: bool = True,
                      min_coverage: float = DEFAULT_MIN_COVERAGE, width: Width = "two-column",
                      regions=None, means: PeriodMeans | None = None) -> Drawn:
    """Baseline | period | change, one row per model: the two means on one shared
    logarithmic scale, the change (:func:`euphotic.compare.difference`) on a diverging scale
    centred on zero with symmetric limits.

    Parameters
    ----------
    maps : the Dataset of :func:`euphotic.results.open_maps` (npp in mg m-2 d-1 of carbon)
    period, baseline : (first_year, last_year), both included
    projection, relative, min_coverage, width, regions, means : keyword-only
        As for :func:`difference_map` and :func:`map_panels`.

    Returns
    -------
    Drawn
        ``artists``: ``axes`` (rows of three), ``means`` (the meshes of the two means, all
        with ``norm``), ``changes`` (the change meshes, all with ``diff_norm``),
        ``colorbar`` and ``diff_colorbar``, ``outlines``, ``region_names``.
    """
    import cartopy.crs as ccrs
    import matplotlib.pyplot as plt
    from matplotlib.ticker import FixedLocator, MaxNLocator, NullLocator

    kw = {"means": means, "ncols": 3, "width": width}
    tp = _two_periods(maps, period, baseline, regions, **kw)
    per, base, lat, lon, layer = tp.per, tp.base, tp.lat, tp.lon, tp.layer
    rlat, rlon = maps["lat"].values, maps["lon"].values  # the run's grid: region outlines
    names, mlabels, models, P, B = tp.names, tp.mlabels, tp.models, tp.P, tp.B
    change = _change(per, base, relative)
    norm, extend, (lo, hi) = _log_scale([per["npp"].values, base["npp"].values])
    dnorm, dextend, lim = _diverging_scale([change.values])
    unit = "%" if relative else "mg C m$^{-2}$ d$^{-1}$"
    crs = _projection(projection, lat, lon)
    n = len(models)
    w_in = WIDTHS_MM[width] / MM_PER_INCH
    import cartopy.crs as _ccrs

    xs, ys = np.meshgrid(np.linspace(lon.min(), lon.max(), 9),
                         np.linspace(lat.min(), lat.max(), 9))
    pts = crs.transform_points(_ccrs.PlateCarree(), xs, ys)
    aspect = float(np.ptp(pts[..., 1]) / max(np.ptp(pts[..., 0]), 1e-9))
    panel_h = min((w_in - 0.9) / 3 * aspect, MAX_PANEL_HEIGHT_MM / MM_PER_INCH)
    row_h = panel_h + 0.75
    cb_h = 0.75
    # panels under about 50 mm wide cannot hold the names: a legend instead
    in_map = not _narrow(3, width)
    legend_h = 0.0 if in_map else _legend_height(layer)
    pc = ccrs.PlateCarree()
    with plt.rc_context(_rc()):
        fig = plt.figure(figsize=(w_in, n * row_h + cb_h + 0.35 + legend_h),
                         layout="constrained")
        subs = fig.subfigures(n + 1, 1, height_ratios=[row_h] * n + [cb_h])
        rows, means, changes, outlines, labels = [], [], [], [], []
        for i, (sf, m) in enumerate(zip(subs[:n], models, strict=True)):
            sf.suptitle(textwrap.fill(mlabels[m], 90 if width == "two-column" else 45),
                        fontsize=FONT_PT + 1, fontweight="bold")
            axs = [sf.add_subplot(1, 3, j + 1, projection=crs) for j in range(3)]
            rows.append(axs)
            for j, (ax, ds, title) in enumerate(zip(axs, (base, per),
                                                    (f"{B} (baseline)", P), strict=False)):
                v, c = ds["npp"].sel(model=m).values, ds["coverage"].sel(model=m).values
                land = ~np.isfinite(c)
                _draw_base(ax, lat, lon, land, ~land & ~np.isfinite(v), left_labels=j == 0,
                           bottom_labels=i == n - 1, narrow=not in_map)
                means.append(ax.pcolormesh(
                    _edges(lon), _edges(lat),
                    np.where(np.isfinite(v), np.maximum(v, lo * 1e-3), np.nan), norm=norm,
                    cmap=_cmap(SEQUENTIAL_CMAP), transform=pc, rasterized=True))
                _mark(ax, lat, lon, np.isfinite(v) & (c < min_coverage), "....")
                ax.set_title(title, fontsize=FONT_PT + 1)
            v = change.sel(model=m).values
            c = per["coverage"].sel(model=m).values
            land = ~np.isfinite(c)
            _draw_base(axs[2], lat, lon, land, ~land & ~np.isfinite(v), hatch_no_data=True,
                       left_labels=False, bottom_labels=i == n - 1, narrow=not in_map)
            changes.append(axs[2].pcolormesh(_edges(lon), _edges(lat), v, norm=dnorm,
                                             cmap=_cmap(DIVERGING_CMAP), transform=pc,
                                             rasterized=True))
            _mark(axs[2], lat, lon, np.isfinite(v) & (
                (c < min_coverage) | (base["coverage"].sel(model=m).values < min_coverage)),
                "....")
            axs[2].set_title(f"change, {P} against {B}" if width == "two-column"
                             else "change", fontsize=FONT_PT + 1)
            for j, ax in enumerate(axs):
                o, t = _draw_regions(ax, layer, rlat, rlon,
                                     names=in_map and i == 0 and j == 0)
                outlines.append(o)
                labels += t
        cax = subs[n].subplots(1, 2, gridspec_kw={"width_ratios": [2, 1]})
        cb = subs[n].colorbar(means[0], cax=cax[0], orientation="horizontal", extend=extend)
        cb.set_label(textwrap.fill(NPP_LABEL, 60 if width == "two-column" else 32))
        cb.ax.xaxis.set_major_locator(FixedLocator(_log_ticks(lo, hi)))
        cb.ax.xaxis.set_minor_locator(NullLocator())
        cb.ax.xaxis.set_major_formatter(lambda x, _: f"{x:g}")
        dcb = subs[n].colorbar(changes[0], cax=cax[1], orientation="horizontal",
                               extend=dextend)
        dcb.set_label(f"change ({unit})")
        dcb.ax.xaxis.set_major_locator(MaxNLocator(nbins=4, symmetric=True))
        if not in_map:
            labels += _region_legend(fig, layer, ncols=2)
        fig.suptitle(textwrap.fill(f"Net primary production: {B} baseline, {P} and the change",
                                   90 if width == "two-column" else 45))
    what = ("in percent of the baseline mean" if relative
            else "as the difference of the means (mg C m-2 d-1)")
    caption = (
        f"Mean daily net primary production over the {B} baseline (left) and over {P} "
        f"(middle), one row per model ({', '.join(names[m] for m in models)}), and the change "
        f"{what} (right). The two means of every row share one logarithmic colour scale, "
        f"clipped at the {_ordinal(CLIP_PERCENTILES[0])} and "
        f"{_ordinal(CLIP_PERCENTILES[1])} percentiles of all their values together "
        f"({_num(lo)}-{_num(hi)} mg C m-2 d-1); the change a diverging scale centred on zero "
        f"with symmetric limits at the {_ordinal(DIFF_PERCENTILE)} percentile of its absolute "
        f"value (+-{_num(lim)}); arrows on the colour bars mark clipped values. Mid grey: "
        f"land; light grey: ocean without data (hatched on the change). Stippled: mean "
        f"coverage below {min_coverage:g} of days. "
        + _regions_text(layer, legend=not in_map) + _projection_text(projection, lat, lon)
    )
    return Drawn("fig_npp_baseline_period_change", fig,
                 f"Net primary production, {B} baseline against {P}", caption,
                 {"axes": rows, "means": means, "changes": changes, "norm": norm,
                  "diff_norm": dnorm, "colorbar": cb, "diff_colorbar": dcb,
                  "outlines": outlines, "region_names": labels, "extend": extend})


def _panel_grid(n: int, width: Width, panel_h_in: float):
    import matplotlib.pyplot as plt

    ncols = 1 if width == "one-column" else min(n, 2)
    nrows = math.ceil(n / ncols)
    w_in = WIDTHS_MM[width] / MM_PER_INCH
    fig, axes = plt.subplots(nrows, ncols, figsize=(w_in, nrows * panel_h_in + 0.8),
                             layout="constrained", sharex=True, squeeze=False)
    flat = list(axes.ravel())
    for ax in flat[n:]:
        ax.set_visible(False)
    return fig, flat[:n]


def annual_series(totals: xr.Dataset, *, baseline: tuple[int, int],
                  width: Width = "two-column") -> Drawn:
    """Annual totals per region (Tg C yr-1), one small panel per region (own y axis).

    With several models each is a line and their spread (min to max across models) a band;
    the baseline mean (dashed) and range (min to max of the yearly values, shaded) are drawn
    from the mean across models. Years with fewer than 12 months have no value.
    """
    import matplotlib.pyplot as plt

    ann = compare.annual_totals(totals)
    t = ann["total"]
    names = _model_names(totals)
    mlabels = _model_labels(totals)
    models = [str(m) for m in t["model"].values]
    regions = [str(r) for r in t["region"].values]
    years = ann["year"].values.astype(int)
    inbase = (years >= baseline[0]) & (years <= baseline[1])
    with plt.rc_context(_rc()):
        fig, axes = _panel_grid(len(regions), width, 1.35)
        spreads, ens_lines = [], []
        for ax, r in zip(axes, regions, strict=True):
            tr = t.sel(region=r)
            if len(models) > 1:  # the band and the ensemble mean where every model has one
                e_mean, e_lo, e_hi = ensemble.spread(tr.transpose("model", "year").values)
                spreads.append(ax.fill_between(years, e_lo, e_hi, color=SPREAD_COLOUR,
                                               alpha=0.5, lw=0, label="spread across models"))
                ens_lines.append(ax.plot(years, e_mean, color=ENSEMBLE_COLOUR, lw=1.4,
                                         marker="o", ms=2.5, zorder=3.5,
                                         label=ENSEMBLE_LABEL)[0])
            else:
                spreads.append(None)
                ens_lines.append(None)
            for i, m in enumerate(models):
                col = LINE_COLOURS[i % len(LINE_COLOURS)]
                v = tr.sel(model=m).values
                b = v[inbase & np.isfinite(v)]
                if b.size:  # the baseline: its years shaded from min to max, its mean dashed
                    ax.fill_between([baseline[0] - 0.4, baseline[1] + 0.4], b.min(), b.max(),
                                    color=col, alpha=0.15, lw=0)
                    ax.axhline(b.mean(), color=col, lw=0.7, ls="--")
                ax.plot(years, v, marker="o", ms=2.5, lw=1.0, color=col, label=mlabels[m])
            ax.set_title(r, fontsize=FONT_PT + 1, loc="left")
            ax.set_ylabel("Tg C yr$^{-1}$")
            ax.tick_params(labelsize=FONT_PT)
            ax.xaxis.get_major_locator().set_params(integer=True)
        from matplotlib.lines import Line2D
        from matplotlib.patches import Patch

        handles, labels = axes[0].get_legend_handles_labels()
        handles += [Patch(color="#777777", alpha=0.3, lw=0),
                    Line2D([], [], color="#555555", lw=0.7, ls="--")]
        labels += [f"baseline {_span_text(baseline)}: range", f"baseline {_span_text(baseline)}: mean"]
        fig.legend(handles, [textwrap.fill(lb, 55) for lb in labels], loc="outside lower center",
                   ncols=2, fontsize=FONT_PT, frameon=False)
        fig.suptitle("Carbon fixed per year by region (net primary production)")
    caption = (
        f"Annual net primary production per region (Tg C yr-1: carbon fixed over the observed "
        f"cells, the sum of the monthly totals), {years.min()}-{years.max()}, "
        f"{', '.join(names[m] for m in models)}. Each region on its own panel and y axis (a "
        f"basin is not drawn beside its sub-regions). Years with fewer than 12 months of "
        f"data are left out. Dashed lines and shaded boxes over the baseline years: mean and "
        f"range (minimum to maximum) of the {_span_text(baseline)} baseline, in each model's "
        f"colour" + (f"; black line: the ensemble mean of the {len(models)} models, and grey "
                     "band around it: their spread (minimum to maximum), both only in years "
                     "where every model has a total." if len(models) > 1 else ".")
    )
    return Drawn("fig_annual_totals", fig, "Annual carbon fixed by region", caption,
                 {"axes": axes, "spread": spreads, "ensemble_mean": ens_lines})


def seasonal_figure(totals: xr.Dataset, *, period: tuple[int, int],
                    width: Width = "two-column") -> Drawn:
    """Monthly totals by calendar month per region: mean (line) and min-max over the years
    of ``period`` (band), per model; Tg C per month."""
    import matplotlib.pyplot as plt

    cyc = compare.seasonal_cycle(totals, years=period, variable="total")
    names = _model_names(totals)
    mlabels = _model_labels(totals)
    models = [str(m) for m in cyc["model"].values]
    regions = [str(r) for r in cyc["region"].values]
    cm = cyc["calendar_month"].values
    with plt.rc_context(_rc()):
        fig, axes = _panel_grid(len(regions), width, 1.35)
        for ax, r in zip(axes, regions, strict=True):
            for i, m in enumerate(models):
                s = cyc.sel(region=r, model=m)
                col = LINE_COLOURS[i % len(LINE_COLOURS)]
                ax.fill_between(cm, s["min"].values, s["max"].values, color=col, alpha=0.2,
                                lw=0)
                ax.plot(cm, s["mean"].values, color=col, lw=1.0, marker="o", ms=2,
                        label=mlabels[m])
            ax.set_title(r, fontsize=FONT_PT + 1, loc="left")
            ax.set_ylabel("Tg C month$^{-1}$")
            ax.set_xticks(range(1, 13), list("JFMAMJJASOND"))
        from matplotlib.patches import Patch

        handles, labels = axes[0].get_legend_handles_labels()
        if period[1] > period[0]:  # a band only where there are several years
            handles.append(Patch(color="#777777", alpha=0.3, lw=0))
            labels.append("minimum to maximum over the years (band, in each model's colour)")
        fig.legend(handles, [textwrap.fill(lb, 55) for lb in labels],
                   loc="outside lower center", ncols=1 if width == "one-column" else 2,
                   fontsize=FONT_PT, frameon=False)
        fig.suptitle(f"Seasonal cycle of carbon fixed by region, {_span_text(period)}")
    caption = (
        f"Seasonal cycle of net primary production per region: carbon fixed per month over "
        f"the observed cells (Tg C month-1), mean (line) and minimum to maximum (band) by "
        f"calendar month over {_span_text(period)}, {', '.join(names[m] for m in models)}. "
        f"Each region on its own panel and y axis."
    )
    return Drawn("fig_seasonal_cycle", fig, f"Seasonal cycle by region, {_span_text(period)}",
                 caption, {"axes": axes})


def low_coverage(totals: xr.Dataset, min_coverage: float) -> xr.DataArray:
    """Region-months-models whose total rests on few days: coverage below ``min_coverage``
    or flagged ``low_coverage`` by the run (its own ``[run] min_coverage``); (region, month,
    model) booleans."""
    cov = totals["coverage"]
    flagged = xr.apply_ufunc(np.vectorize(lambda f: FLAG_LOW_COVERAGE in str(f).split(";"),
                                          otypes=[bool]), totals["flag"])
    return (cov < min_coverage) | flagged


def _months_of(totals: xr.Dataset, period: tuple[int, int] | None) -> xr.Dataset:
    if period is None:
        return totals
    years = totals["month"].dt.year
    return totals.isel(month=np.flatnonzero(((years >= period[0])
                                             & (years <= period[1])).values))


def _month_axis(ax, months: np.ndarray, *, labels: bool = True) -> None:
    """Month index on x: ticks at each January (every few years on a long record), or every
    third month on a short one."""
    dt = months.astype("datetime64[M]")
    years = dt.astype("datetime64[Y]").astype(int) + 1970
    cal = dt.astype(int) % 12 + 1
    n = len(dt)
    if n > 24:
        step = max(1, math.ceil(len(set(years.tolist())) / 8))
        at = [i for i in range(n) if cal[i] == 1 and (years[i] - years[0]) % step == 0]
        if not at:
            at = [0]
        text = [str(years[i]) for i in at]
    else:
        at = [i for i in range(n) if (cal[i] - 1) % 3 == 0]
        text = [f"{years[i]}-{cal[i]:02d}" for i in at]
    ax.set_xticks(at, text if labels else [])
    ax.set_xlim(-0.6, n - 0.4)


def _mark_bar(bar, colour: str) -> None:
    """A bar resting on few days: its colour pale, cross-hatched in near-black."""
    from matplotlib.colors import to_rgba

    bar.set_facecolor(to_rgba(colour, 0.4))
    bar.set_edgecolor(MARK_COLOUR)
    bar.set_hatch("xxxx")
    bar.set_linewidth(0.3)


def _region_grid(n: int, width: Width, panel_h_in: float, strip: bool):
    """One panel per region (and, with ``strip``, a thin coverage strip under each); returns
    (fig, main axes, strip axes or None each)."""
    import matplotlib.pyplot as plt

    ncols = 1 if width == "one-column" else min(n, 2)
    nrows = math.ceil(n / ncols)
    w_in = WIDTHS_MM[width] / MM_PER_INCH
    strip_h = 0.32 if strip else 0.0
    fig = plt.figure(figsize=(w_in, nrows * (panel_h_in + strip_h + 0.3) + 1.0),
                     layout="constrained")
    ratios = [panel_h_in, strip_h] if strip else [panel_h_in]
    gs = fig.add_gridspec(nrows * len(ratios), ncols, height_ratios=ratios * nrows)
    mains, strips = [], []
    for k in range(n):
        r, c = divmod(k, ncols)
        ax = fig.add_subplot(gs[r * len(ratios), c])
        mains.append(ax)
        strips.append(fig.add_subplot(gs[r * len(ratios) + 1, c], sharex=ax) if strip else None)
    return fig, mains, strips


def totals_chart(totals: xr.Dataset, *, period: tuple[int, int] | None = None,
                 min_coverage: float = DEFAULT_MIN_COVERAGE,
                 width: Width = "two-column") -> Drawn:
    """Monthly totals per region with their coverage: one small panel per region (its own y
    axis), bars of carbon fixed per month (Tg C month-1) and under them a strip of the
    region's coverage; months below ``min_coverage`` (or flagged by the run) hatched and
    marked.

    Parameters
    ----------
    totals : the Dataset of :func:`euphotic.results.open_totals`
    period : (first_year, last_year), keyword-only; default the whole run
    min_coverage : keyword-only
        Coverage (0-1, area-weighted fraction of the month's days) under which a month is
        marked as resting on few days.
    width : keyword-only

    Returns
    -------
    Drawn
        ``artists``: ``axes`` and ``strips`` (per region), ``strip_meshes`` (sharing
        ``coverage_norm``, 0-1), ``colorbar``, ``low_bars`` (the hatched bars) and
        ``low_marks`` (per region, the marks in the strip or None).

    Notes
    -----
    Up to :data:`MAX_SIDE_BY_SIDE` models: one bar per model, side by side. More: one bar of
    the mean across models with a whisker from the lowest to the highest model.
    """
    import matplotlib.pyplot as plt
    from matplotlib.colors import Normalize
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    t = _months_of(totals, period)
    low = low_coverage(t, min_coverage).values
    names = _model_names(totals)
    mlabels = _model_labels(totals)
    models = [str(m) for m in t["model"].values]
    regions = [str(r) for r in t["region"].values]
    months = t["month"].values
    n, nm = len(months), len(models)
    x = np.arange(n)
    side = nm <= MAX_SIDE_BY_SIDE
    cov_norm = Normalize(vmin=0.0, vmax=1.0)
    cov_cmap = _cmap("grayC")
    with plt.rc_context(_rc()):
        fig, axes, strips = _region_grid(len(regions), width, 1.1, strip=True)
        low_bars, low_marks, strip_meshes = [], [], []
        for ax, sx, r in zip(axes, strips, regions, strict=True):
            ri = regions.index(r)
            tot = t["total"].sel(region=r).transpose("month", "model").values
            cov = t["coverage"].sel(region=r).transpose("month", "model").values
            lo = low[ri]  # (month, model)
            if side:
                bw = 0.8 / nm
                for j in range(nm):
                    col = LINE_COLOURS[j % len(LINE_COLOURS)]
                    pos = x + (j - (nm - 1) / 2) * bw
                    bars = ax.bar(pos, np.nan_to_num(tot[:, j]), bw * 0.95, color=col, lw=0)
                    for b, is_low in zip(bars, lo[:, j], strict=True):
                        if is_low:
                            _mark_bar(b, col)
                            low_bars.append(b)
            else:
                with warnings.catch_warnings():  # a month without any model: no bar
                    warnings.simplefilter("ignore", RuntimeWarning)
                    mean = np.nanmean(tot, axis=1)
                    err = [mean - np.nanmin(tot, axis=1), np.nanmax(tot, axis=1) - mean]
                bars = ax.bar(x, np.nan_to_num(mean), 0.8, color=LINE_COLOURS[0], lw=0)
                ax.errorbar(x, mean, yerr=err, fmt="none", ecolor=MARK_COLOUR, elinewidth=0.5,
                            capsize=0)
                for b, is_low in zip(bars, lo.any(axis=1), strict=True):
                    if is_low:
                        _mark_bar(b, LINE_COLOURS[0])
                        low_bars.append(b)
            ax.set_title(r, fontsize=FONT_PT + 1, loc="left")
            ax.set_ylabel("Tg C month$^{-1}$")
            ax.tick_params(labelbottom=False)
            # the coverage strip: one row per model
            mesh = sx.pcolormesh(np.arange(n + 1) - 0.5, np.arange(nm + 1), cov.T,
                                 norm=cov_norm, cmap=cov_cmap, rasterized=True)
            strip_meshes.append(mesh)
            iy, ix = np.nonzero(lo.T)
            low_marks.append(sx.scatter(ix, iy + 0.5, marker="x", s=9, lw=0.8,
                                        color="#D55E00", zorder=3) if ix.size else None)
            sx.set_yticks([]) if nm == 1 else sx.set_yticks(
                np.arange(nm) + 0.5, [str(k + 1) for k in range(nm)], fontsize=FONT_PT - 1)
            sx.set_ylim(0, nm)
            sx.set_ylabel("cov.", rotation=0, ha="right", va="center", fontsize=FONT_PT)
            _month_axis(sx, months)
        cb = fig.colorbar(strip_meshes[0], ax=axes + strips, orientation="horizontal",
                          shrink=0.5, aspect=30, pad=0.01, location="bottom")
        cb.set_label(textwrap.fill("region coverage (fraction of the month's days with data, 1)",
                                   70 if width == "two-column" else 40))
        handles = ([Patch(color=LINE_COLOURS[j % len(LINE_COLOURS)], lw=0)
                    for j in range(nm)] if side else
                   [Patch(color=LINE_COLOURS[0], lw=0),
                    Line2D([], [], color=MARK_COLOUR, lw=0.5)])
        labels = ([f"{j + 1}: {mlabels[m]}" for j, m in enumerate(models)] if side else
                  ["mean across models", "lowest to highest model"])
        handles += [Patch(facecolor="#bbbbbb", hatch="xxxx", edgecolor=MARK_COLOUR, lw=0.3),
                    Line2D([], [], marker="x", color="#D55E00", lw=0, ms=4)]
        labels += [f"coverage below {min_coverage:g} (bar)", "coverage below "
                   f"{min_coverage:g} (strip)"]
        fig.legend(handles, [textwrap.fill(lb, 55) for lb in labels], loc="outside lower center",
                   ncols=1 if width == "one-column" else 2, fontsize=FONT_PT, frameon=False)
        span = (int(str(months[0])[:4]), int(str(months[-1])[:4])) if n else (0, 0)
        fig.suptitle(textwrap.fill(f"Carbon fixed per month by region, with coverage, "
                                   f"{_span_text(span)}", 80 if width == "two-column" else 40))
    n_low = int(low.sum())
    caption = (
        f"Carbon fixed per month over the observed cells of each region (Tg C month-1, bars), "
        f"{_span_text(span)}, "
        + (f"one bar per model side by side ({', '.join(names[m] for m in models)}). "
           if side else f"the mean across {nm} models with a whisker from the lowest to the "
                        f"highest ({', '.join(names[m] for m in models)}). ")
        + "Each region on its own panel and y axis (a basin is not drawn beside its "
          "sub-regions). Under each panel, the region's coverage (area-weighted fraction of "
          "the month's days with a valid estimate; one row per model"
        + ", numbered as in the legend" * (nm > 1)
        + f"). Months whose coverage is below {min_coverage:g} or that the run flagged "
          f"'{FLAG_LOW_COVERAGE}' are hatched and marked with a cross "
          f"({n_low} region-months{' and models' * (nm > 1)}): their totals rest on few days "
          f"and cover only the observed part of the region."
    )
    return Drawn("fig_totals_coverage", fig, f"Monthly carbon fixed by region with coverage, "
                 f"{_span_text(span)}", caption,
                 {"axes": axes, "strips": strips, "strip_meshes": strip_meshes,
                  "coverage_norm": cov_norm, "colorbar": cb, "low_bars": low_bars,
                  "low_marks": low_marks, "n_low": n_low})


def monthly_series(totals: xr.Dataset, *, baseline: tuple[int, int],
                   period: tuple[int, int] | None = None,
                   min_coverage: float = DEFAULT_MIN_COVERAGE,
                   width: Width = "two-column") -> Drawn:
    """Monthly totals per region (Tg C month-1), one small panel per region: each model's
    line, the models' spread as a band, the baseline's monthly climatology (mean and range by
    calendar month, :func:`euphotic.compare.seasonal_cycle`) shaded behind, and months of
    low coverage marked.

    Parameters
    ----------
    totals : the Dataset of :func:`euphotic.results.open_totals`
    baseline : (first_year, last_year) of the climatology, keyword-only
    period : (first_year, last_year) drawn, keyword-only; default the whole run
    min_coverage, width : keyword-only
        As for :func:`totals_chart`.

    Returns
    -------
    Drawn
        ``artists``: ``axes``, ``climatology`` (per region, the shaded range), ``spread``
        (per region, the band or None), ``low_marks`` (per region, the marks or None).

    Notes
    -----
    The climatology is that of the mean across models (one model: of that model), months
    without a value skipped; the spread is the lowest to the highest model in each month.
    """
    import matplotlib.pyplot as plt
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    t = _months_of(totals, period)
    names = _model_names(totals)
    mlabels = _model_labels(totals)
    models = [str(m) for m in t["model"].values]
    regions = [str(r) for r in t["region"].values]
    months = t["month"].values
    x = np.arange(len(months))
    cal = (months.astype("datetime64[M]").astype(int) % 12)  # 0-11
    with np.errstate(all="ignore"):
        ens = totals["total"].mean("model", skipna=True)
    ens.attrs["units"] = totals["total"].attrs.get("units", "Tg")
    clim = compare.seasonal_cycle(ens.rename("total"), years=baseline)
    low = low_coverage(t, min_coverage)
    B = _span_text(baseline)
    with plt.rc_context(_rc()):
        fig, axes, _ = _region_grid(len(regions), width, 1.35, strip=False)
        clims, spreads, marks, ens_lines = [], [], [], []
        for ax, r in zip(axes, regions, strict=True):
            c = clim.sel(region=r)
            cm = c["calendar_month"].values.astype(int) - 1
            mean = np.full(12, np.nan)
            lo_, hi_ = np.full(12, np.nan), np.full(12, np.nan)
            mean[cm], lo_[cm], hi_[cm] = c["mean"].values, c["min"].values, c["max"].values
            clims.append(ax.fill_between(x, lo_[cal], hi_[cal], color=CLIMATOLOGY_COLOUR, lw=0,
                                         zorder=0))
            ax.plot(x, mean[cal], color=CLIMATOLOGY_LINE, lw=0.7, ls="--", zorder=1)
            tr = t["total"].sel(region=r).transpose("model", "month").values
            if len(models) > 1:  # the band and the ensemble mean where every model has one
                e_mean, e_lo, e_hi = ensemble.spread(tr)
                spreads.append(ax.fill_between(x, e_lo, e_hi, color=SPREAD_COLOUR,
                                               alpha=0.45, lw=0, zorder=2))
                ens_lines.append(ax.plot(x, e_mean, color=ENSEMBLE_COLOUR, lw=1.4, zorder=3.5,
                                         label=ENSEMBLE_LABEL)[0])
            else:
                spreads.append(None)
                ens_lines.append(None)
            lo = low.sel(region=r).transpose("model", "month").values
            xs, ys = [], []
            for j, m in enumerate(models):
                ax.plot(x, tr[j], color=LINE_COLOURS[j % len(LINE_COLOURS)], lw=0.9,
                        zorder=3, label=mlabels[m])
                xs += list(x[lo[j]])
                ys += list(tr[j][lo[j]])
            marks.append(ax.scatter(xs, ys, marker="x", s=12, lw=0.9, color=MARK_COLOUR,
                                    zorder=4) if xs else None)
            ax.set_title(r, fontsize=FONT_PT + 1, loc="left")
            ax.set_ylabel("Tg C month$^{-1}$")
            _month_axis(ax, months)
        handles, labels = axes[0].get_legend_handles_labels()
        if len(models) > 1:
            handles.append(Patch(color=SPREAD_COLOUR, alpha=0.45, lw=0))
            labels.append("spread across models (lowest to highest)")
        handles += [Patch(color=CLIMATOLOGY_COLOUR, lw=0),
                    Line2D([], [], color=CLIMATOLOGY_LINE, lw=0.7, ls="--"),
                    Line2D([], [], marker="x", color=MARK_COLOUR, lw=0, ms=4)]
        labels += [f"baseline {B}: range by calendar month",
                   f"baseline {B}: mean by calendar month",
                   f"coverage below {min_coverage:g} of days"]
        fig.legend(handles, [textwrap.fill(lb, 55) for lb in labels], loc="outside lower center",
                   ncols=1 if width == "one-column" else 2, fontsize=FONT_PT, frameon=False)
        span = (int(str(months[0])[:4]), int(str(months[-1])[:4])) if len(months) else (0, 0)
        fig.suptitle(f"Carbon fixed per month by region, {_span_text(span)}")
    caption = (
        f"Monthly net primary production per region: carbon fixed per month over the observed "
        f"cells (Tg C month-1), {_span_text(span)}, one line per model "
        f"({', '.join(names[m] for m in models)})"
        + (f"; black line: the ensemble mean of the {len(models)} models, and grey band "
           "around it: their spread (lowest to highest), both only in months where every model "
           "has a total" if len(models) > 1 else "")
        + f". Shaded behind: the {B} baseline's monthly climatology (range, minimum to maximum "
          f"by calendar month; dashed: mean) of the "
        + ("mean across models" if len(models) > 1 else "model")
        + f". Crosses: months whose coverage is below {min_coverage:g} of days or that the run "
          f"flagged '{FLAG_LOW_COVERAGE}'; gaps in a line: months without any observed cell "
          f"in the region. Each region on its own panel and y axis."
    )
    return Drawn("fig_monthly_totals", fig, f"Monthly carbon fixed by region, "
                 f"{_span_text(span)}", caption,
                 {"axes": axes, "climatology": clims, "spread": spreads, "low_marks": marks,
                  "ensemble_mean": ens_lines})


# --------------------------------------------------------------------------------------------
# captions and files


def _file_pattern(files: list[str]) -> str:
    """The files of one input as a pattern: the path itself for one file; for several, their
    common start and end around a ``*`` (digits at the seam left to the ``*``), with the
    count and the first and last file name."""
    import os

    if len(files) == 1:
        return files[0]
    head = os.path.commonprefix(files).rstrip("0123456789")
    tail = os.path.commonprefix([f[::-1] for f in files])[::-1].lstrip("0123456789")
    first, last = sorted(files)[0], sorted(files)[-1]
    return (f"{head}*{tail} ({len(files)} files, {os.path.basename(first)} to "
            f"{os.path.basename(last)})")


def _run_map_attrs(folder: Path, manifest: dict) -> dict:
    """Global attributes of a map the committed run wrote itself (its input files are the
    manifest's), newest month first; else the newest map's; {} when none can be read."""
    inputs = manifest.get("inputs") or {}
    entries = sorted(((n, e) for n, e in manifest.get("outputs", {}).items()
                      if e.get("kind") == "map"), key=lambda ne: ne[1].get("month", ""),
                     reverse=True)
    fallback: dict = {}
    for name, _ in entries[:24]:
        path = folder / name
        kw = {"engine": "zarr", "consolidated": True} if path.is_dir() else {"engine": "netcdf4"}
        try:
            with xr.open_dataset(path, decode_times=False, **kw) as ds:
                attrs = dict(ds.attrs)
        except (OSError, ValueError, KeyError):
            continue
        if all(attrs.get(f"input_files_{r}") == ", ".join(f) for r, f in inputs.items()):
            return attrs
        fallback = fallback or attrs
    return fallback


def input_lines(folder: str | Path) -> list[str]:
    """The inputs of the run committed in ``folder``, one line per variable for the
    captions: what it is, its files (or their pattern), their periods and units, as the
    manifest's ``inputs`` and the maps' ``input_periods_*`` / ``input_units_*`` attributes
    record them. [] when the run recorded no inputs."""
    from euphotic.methods import _ROLE_WORDS, ROLES

    folder = Path(folder)
    manifest = results.committed_manifest(folder)
    inputs = manifest.get("inputs") or {}
    if not inputs:
        return []
    attrs = _run_map_attrs(folder, manifest)
    lines = []
    for role in [*ROLES, *sorted(set(inputs) - set(ROLES))]:
        files = inputs.get(role)
        if not files:
            continue
        line = f"{role}, {_ROLE_WORDS.get(role, role)}: {_file_pattern(list(files))}"
        if attrs.get(f"input_periods_{role}"):
            line += f"; {attrs[f'input_periods_{role}']}"
        if attrs.get(f"input_units_{role}"):
            line += f"; in {attrs[f'input_units_{role}']}"
        lines.append(line)
    return lines


def caption_texts(drawn: Drawn, ds: xr.Dataset, *, min_coverage: float, folder: Path,
                  inputs: list[str] | None = None) -> tuple[str, str]:
    """(Markdown, plain text) caption: what is shown, the models' citations, the inputs
    (``inputs``, default :func:`input_lines` of ``folder``), the coverage rule and the
    caution."""
    if inputs is None:
        try:
            inputs = input_lines(folder)
        except EuphoticError:  # not a committed run (a notebook's own Dataset)
            inputs = []
    names, cites = _model_names(ds), _citations(ds)
    refs = [f"{_model_labels(ds)[m]}: {names[m]}; {cites[m]}" for m in names]
    rule = (f"Coverage rule: a cell's monthly value is the mean over the days with a valid "
            f"estimate; coverage is the fraction of the month's days with one. Cells with mean "
            f"coverage below {min_coverage:g} are marked on maps, and region-months below it "
            f"(or flagged '{FLAG_LOW_COVERAGE}' by the run) on the regional charts (this "
            f"tool's default {DEFAULT_MIN_COVERAGE:g}); regional totals are over observed "
            f"cells.")
    source = (f"Run in {folder} (run id {ds.attrs.get('euphotic_run_id', 'unknown')}), drawn "
              f"by euphotic {__version__}.")
    md_in = ["Inputs:", *[f"- {r}" for r in inputs], ""] if inputs else []
    txt_in = ["Inputs:", *[f"  {r}" for r in inputs], ""] if inputs else []
    md = "\n".join([f"**{drawn.caption_title}.** {drawn.caption}", "", rule, "",
                    "Models:", *[f"- {r}" for r in refs], "", *md_in, f"*Caution:* {CAUTION}",
                    "", source, ""])
    txt = "\n".join([f"{drawn.caption_title}. {drawn.caption}", "", rule, "", "Models:",
                     *[f"  {r}" for r in refs], "", *txt_in, f"Caution: {CAUTION}", "", source,
                     ""])
    return md, txt


def save(drawn: Drawn, folder: Path) -> list[Path]:
    """Write ``NAME.png`` (at :data:`DPI`) and ``NAME.pdf``; the Figure is then closed."""

    out = []
    for ext in ("png", "pdf"):
        p = folder / f"{drawn.name}.{ext}"
        drawn.figure.savefig(p, dpi=DPI, metadata={"Software": f"euphotic {__version__}"}
                             if ext == "png" else {"Creator": f"euphotic {__version__}"})
        out.append(p)
    _close(drawn)
    return out


def draw_all(maps: xr.Dataset, totals: xr.Dataset, *, period: tuple[int, int] | None = None,
             baseline: tuple[int, int] | None = None, projection: Projection = "equal-area",
             min_coverage: float = DEFAULT_MIN_COVERAGE, width: Width = "two-column",
             relative: bool = True, folder: Path | None = None,
             regions=None) -> tuple[list[Drawn], list[str]]:
    """Every figure of the set (not saved), and notes on figures left out; the options as
    :func:`iter_figures`, which draws them one at a time."""
    notes: list[str] = []
    drawn = list(iter_figures(maps, totals, period=period, baseline=baseline,
                              projection=projection, min_coverage=min_coverage, width=width,
                              relative=relative, folder=folder, regions=regions, notes=notes))
    return drawn, notes


def iter_figures(maps: xr.Dataset, totals: xr.Dataset, *, period: tuple[int, int] | None = None,
                 baseline: tuple[int, int] | None = None, projection: Projection = "equal-area",
                 min_coverage: float = DEFAULT_MIN_COVERAGE, width: Width = "two-column",
                 relative: bool = True, folder: Path | None = None, regions=None,
                 notes: list[str] | None = None) -> Iterator[Drawn]:
    """Every figure of the set (not saved), drawn when asked for, so that a caller saving
    and closing each before the next holds one figure at a time (a map of a large grid holds
    hundreds of MB); notes on figures left out are appended to ``notes``.

    ``period`` defaults to the whole run. The difference, baseline | period | change and
    ratio maps set ``period`` (or, by default, the run's last year) against ``baseline`` (by
    default the years before it); they are left out when the run has a single year and no
    baseline was given. The regional figures are left out when the run has no regions.
    ``regions`` (name -> boolean mask, :func:`euphotic.results.open_region_masks`) are
    outlined on every map.
    """
    import matplotlib

    matplotlib.use("Agg")
    if not 0.0 <= float(min_coverage) <= 1.0:
        raise FigureOptionError(f"--min-coverage: must be between 0 and 1, got {min_coverage!r}")
    if projection not in ("equal-area", "latlon"):
        raise FigureOptionError(f"--projection: equal-area or latlon, not {projection!r}")
    if width not in WIDTHS_MM:
        raise FigureOptionError(f"--width: one-column or two-column, not {width!r}")
    where = folder or Path(maps.attrs.get("euphotic_folder", "."))
    years = sorted({int(y) for y in maps["month"].dt.year.values})
    whole = (years[0], years[-1])
    if period is not None:
        _check_years(period, years, "--period", where)
    if baseline is not None:
        _check_years(baseline, years, "--baseline", where)
    shown = period or whole
    notes = [] if notes is None else notes
    compared = period or (years[-1], years[-1])
    base = baseline or ((years[0], compared[0] - 1) if compared[0] > years[0] else None)
    # every period mean the maps need, reduced to the drawn resolution, in one computation
    means = period_means(maps, [shown] + ([compared, base] if base else []), width=width,
                         min_coverage=min_coverage)
    yield map_panels(maps, period=shown, projection=projection, min_coverage=min_coverage,
                     width=width, regions=regions, means=means)
    if base is None:
        notes.append("no difference map: the run has a single year (give --baseline)")
    else:
        kw = {"period": compared, "baseline": base, "projection": projection,
              "min_coverage": min_coverage, "width": width, "regions": regions,
              "means": means}
        yield difference_map(maps, relative=relative, **kw)
        yield comparison_panels(maps, relative=relative, **kw)
        yield ratio_map(maps, **kw)
    if totals.sizes.get("region", 0) == 0:
        notes.append("no regional figures: the run has no regions")
    else:
        yield annual_series(totals, baseline=base or whole, width=width)
        yield seasonal_figure(totals, period=shown, width=width)
        yield totals_chart(totals, period=period, min_coverage=min_coverage, width=width)
        yield monthly_series(totals, baseline=base or whole, period=period,
                             min_coverage=min_coverage, width=width)


def write_figure_set(folder: str | Path, *, period: str | None = None,
                     baseline: str | None = None, projection: Projection = "equal-area",
                     min_coverage: float | None = None, width: Width = "two-column",
                     relative: bool = True, command: str = "euphotic figures") -> FigureSet:
    """Draw the figure set of the run committed in ``folder`` and add it to the folder as one
    unit (kind :data:`KIND`; a new set replaces the old one; on failure nothing changes).

    Parameters
    ----------
    period, baseline : "FIRST-LAST" or "YEAR", optional
        Years of the maps (default: the whole run) and the baseline of the difference map.
    min_coverage : float, optional
        Cells whose mean coverage is below it are marked (default: the run's rule).
    """
    folder = Path(folder)
    span, base = parse_years(period, "--period"), parse_years(baseline, "--baseline")
    maps = results.open_maps(folder)
    totals = results.open_totals(folder)
    if min_coverage is None:  # the run's coverage rule ([run] min_coverage; figures mark cells)
        min_coverage = float(maps.attrs.get("min_coverage", DEFAULT_MIN_COVERAGE))
    try:
        regions, region_note = results.open_region_masks(folder), []
    except NoRunError as exc:  # a run from before region masks were recorded
        regions, region_note = None, [f"no region outlines on the maps: {exc}"]
    inputs = input_lines(folder)
    notes: list[str] = []
    figures = iter_figures(maps, totals, period=span, baseline=base, projection=projection,
                           min_coverage=min_coverage, width=width, relative=relative,
                           folder=folder, regions=regions, notes=notes)
    d: Drawn | None = next(figures)  # bad options fail here, before the folder is touched
    out = FigureSet(notes=notes)
    try:
        with runfolder.OutputFolder(folder).adding(command, replace_kinds=(KIND,)) as (stage,
                                                                                      added):
            # each figure saved and closed before the next is drawn (one in memory at a time)
            while d is not None:
                for p in save(d, stage.path):
                    added[p.name] = {"kind": KIND, "description": d.caption_title}
                    out.files.append(folder / p.name)
                md, txt = caption_texts(d, maps, min_coverage=min_coverage, folder=folder,
                                        inputs=inputs)
                for ext, text in (("caption.md", md), ("caption.txt", txt)):
                    name = f"{d.name}.{ext}"
                    stage.file(name).write_text(text)
                    added[name] = {"kind": KIND, "description": f"caption of {d.name}"}
                    out.files.append(folder / name)
                _close(d)
                d = None  # let the figure go before the next one is drawn
                d = next(figures, None)
    finally:
        if d is not None:
            _close(d)
    out.notes += region_note
    return out


def _close(d: Drawn) -> None:
    """Close the figure and collect it now: a figure's artists form reference cycles, and a
    map of a large grid left to the next automatic collection kept about 0.4 GiB more at
    the set's peak (measured with benchmarks/figure_set.py)."""
    import gc

    import matplotlib.pyplot as plt

    plt.close(d.figure)
    gc.collect()
