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
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from euphotic import __version__, compare, results, runfolder
from euphotic.errors import EuphoticError
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

NPP_LABEL = "net primary production (mg C m$^{-2}$ d$^{-1}$)"
NPP_TEXT = "net primary production (mg C m-2 d-1)"

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
    return ccrs.LambertAzimuthalEqualArea(central_longitude=float((lon.min() + lon.max()) / 2),
                                          central_latitude=float((lat.min() + lat.max()) / 2))


def _edges(c: np.ndarray) -> np.ndarray:
    """Cell edges from centres (half a step beyond the ends)."""
    c = np.asarray(c, dtype=float)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = (c[1:] + c[:-1]) / 2
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


def _grid_layout(n: int, width: Width) -> tuple[int, int]:
    if width == "one-column":
        return n, 1
    ncols = min(n, 3)
    return math.ceil(n / ncols), ncols


def _map_axes(n: int, *, width: Width, projection: Projection, lat, lon, extra_height_in=0.0):
    """A figure of ``n`` map panels at the print width; returns (fig, axes, crs)."""
    import matplotlib.pyplot as plt

    crs = _projection(projection, lat, lon)
    nrows, ncols = _grid_layout(n, width)
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


def _draw_base(ax, lat, lon, land: np.ndarray, no_data: np.ndarray, *, hatch_no_data=False):
    """Land and ocean without data as flat neutral colours, the domain's extent, gridlines."""
    import cartopy.crs as ccrs
    from matplotlib.colors import ListedColormap

    pc = ccrs.PlateCarree()
    xe, ye = _edges(lon), _edges(lat)
    ax.set_extent([xe[0], xe[-1], ye[0], ye[-1]], crs=pc)
    ax.pcolormesh(xe, ye, np.where(no_data, 1.0, np.nan), cmap=ListedColormap([NO_DATA_COLOUR]),
                  vmin=0, vmax=2, transform=pc, rasterized=True)
    ax.pcolormesh(xe, ye, np.where(land, 1.0, np.nan), cmap=ListedColormap([LAND_COLOUR]),
                  vmin=0, vmax=2, transform=pc, rasterized=True)
    if hatch_no_data and no_data.any():
        _mark(ax, lat, lon, no_data, "////")
    gl = ax.gridlines(crs=pc, draw_labels=True, linewidth=0.3, color="#555555", alpha=0.6,
                      x_inline=False, y_inline=False)
    gl.top_labels = gl.right_labels = False
    gl.xlabel_style = gl.ylabel_style = {"size": FONT_PT}
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
# the figures


def _period_maps(maps: xr.Dataset, span: tuple[int, int]) -> xr.Dataset:
    years = maps["month"].dt.year
    sel = maps.isel(time=np.flatnonzero(((years >= span[0]) & (years <= span[1])).values))
    with np.errstate(all="ignore"):
        mean = sel["npp"].mean("time", skipna=True)
        cov = sel["coverage"].mean("time", skipna=True)
    return xr.Dataset({"npp": mean, "coverage": cov}).load()


def map_panels(maps: xr.Dataset, *, period: tuple[int, int], projection: Projection = "equal-area",
               min_coverage: float = DEFAULT_MIN_COVERAGE, width: Width = "two-column") -> Drawn:
    """Mean rate over ``period`` for every model, one shared logarithmic colour scale.

    Parameters
    ----------
    maps : the Dataset of :func:`euphotic.results.open_maps` (npp in mg m-2 d-1 of carbon)
    period : (first_year, last_year), both included
    projection, min_coverage, width : keyword-only
        Map projection (Lambert azimuthal equal-area centred on the domain, or plain
        lat-lon), the coverage (0-1, fraction of days) under which a cell is stippled, and the
        print width.

    Returns
    -------
    Drawn
        ``artists``: ``meshes`` (one per panel, all with the same norm object), ``colorbar``,
        ``norm``, ``marks`` (the stipple per panel or None).

    Notes
    -----
    Each panel is the mean over the period's months of the monthly mean daily rate (months
    without a value skipped); a cell's coverage is the mean of its monthly coverages. Colour
    limits are the :data:`CLIP_PERCENTILES` of all panels' positive values together.
    """
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm
    from matplotlib.ticker import FixedLocator, NullLocator

    mean = _period_maps(maps, period)
    lat, lon = mean["lat"].values, mean["lon"].values
    names = _model_names(maps)
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
        fig, axes, _ = _map_axes(len(models), width=width, projection=projection, lat=lat, lon=lon)
        import cartopy.crs as ccrs

        meshes, marks = [], []
        for ax, m in zip(axes, models, strict=True):
            v = mean["npp"].sel(model=m).values
            c = mean["coverage"].sel(model=m).values
            land = ~np.isfinite(c)
            no_data = np.isfinite(c) & ~np.isfinite(v)
            _draw_base(ax, lat, lon, land, no_data)
            shown = np.where(np.isfinite(v), np.maximum(v, lo * 1e-3), np.nan)  # 0 -> under
            mesh = ax.pcolormesh(_edges(lon), _edges(lat), shown, norm=norm, cmap=cmap,
                                 transform=ccrs.PlateCarree(), rasterized=True)
            meshes.append(mesh)
            marks.append(_mark(ax, lat, lon, np.isfinite(v) & (c < min_coverage), "...."))
            ax.set_title(textwrap.fill(names[m], 48 if width == "two-column" else 45),
                         fontsize=FONT_PT + 1)
        cb = fig.colorbar(meshes[0], ax=axes, orientation="horizontal", extend=extend,
                          shrink=0.85, aspect=35, pad=0.02)
        cb.set_label(NPP_LABEL)
        cb.ax.xaxis.set_major_locator(FixedLocator(_log_ticks(lo, hi)))
        cb.ax.xaxis.set_minor_locator(NullLocator())
        cb.ax.xaxis.set_major_formatter(lambda x, _: f"{x:g}")
        fig.suptitle(f"Mean net primary production, {_span_text(period)}")
    n_low = {m: int((np.isfinite(mean['npp'].sel(model=m).values)
                     & (mean['coverage'].sel(model=m).values < min_coverage)).sum()) for m in models}
    caption = (
        f"Mean daily net primary production (mg C m-2 d-1) over {_span_text(period)} "
        f"(mean of the monthly mean rates), {', '.join(names[m] for m in models)}. "
        f"One logarithmic colour scale for all panels, clipped at the {CLIP_PERCENTILES[0]:g}th "
        f"and {CLIP_PERCENTILES[1]:g}th percentiles of all panels' values together "
        f"({lo:.3g}-{hi:.3g} mg C m-2 d-1; arrows on the colour bar mark clipped values). "
        f"Mid grey: land; light grey: ocean without data. Stippled: cells whose mean coverage "
        f"over the period is below {min_coverage:g} of days (this tool's default is "
        f"{DEFAULT_MIN_COVERAGE:g}; {', '.join(f'{names[m]}: {n_low[m]} cells' for m in models)}). "
        + _projection_text(projection)
    )
    return Drawn("fig_npp_maps", fig, f"Mean net primary production, {_span_text(period)}",
                 caption, {"meshes": meshes, "colorbar": cb, "norm": norm, "marks": marks,
                           "axes": axes, "clip": (lo, hi), "extend": extend})


def _projection_text(projection: Projection) -> str:
    if projection == "latlon":
        return "Plain latitude-longitude (Plate Carree) projection."
    return "Lambert azimuthal equal-area projection centred on the domain."


def difference_map(maps: xr.Dataset, *, period: tuple[int, int], baseline: tuple[int, int],
                   projection: Projection = "equal-area", relative: bool = True,
                   min_coverage: float = DEFAULT_MIN_COVERAGE,
                   width: Width = "two-column") -> Drawn:
    """Mean rate over ``period`` against ``baseline``, per model (from
    :func:`euphotic.compare.difference`), diverging colours centred on zero.

    Parameters
    ----------
    relative : keyword-only
        Percent of the baseline (default) or absolute difference (mg C m-2 d-1).

    Returns
    -------
    Drawn
        ``artists``: ``meshes`` (sharing ``norm``, whose limits are symmetric about zero),
        ``colorbar``, ``norm``.
    """
    import cartopy.crs as ccrs
    import matplotlib.pyplot as plt
    from matplotlib.colors import Normalize

    diff = compare.difference(maps, baseline, period).load()
    var = "percent" if relative else "difference"
    d = diff[var]
    base_cov = _period_maps(maps, baseline)["coverage"]
    per_cov = _period_maps(maps, period)["coverage"]
    lat, lon = d["lat"].values, d["lon"].values
    names = _model_names(maps)
    models = [str(m) for m in d["model"].values]
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
        fig, axes, _ = _map_axes(len(models), width=width, projection=projection, lat=lat, lon=lon)
        meshes = []
        for ax, m in zip(axes, models, strict=True):
            v = d.sel(model=m).values
            c = per_cov.sel(model=m).values
            land = ~np.isfinite(c)
            _draw_base(ax, lat, lon, land, ~land & ~np.isfinite(v), hatch_no_data=True)
            mesh = ax.pcolormesh(_edges(lon), _edges(lat), v, norm=norm,
                                 cmap=_cmap(DIVERGING_CMAP), transform=ccrs.PlateCarree(),
                                 rasterized=True)
            meshes.append(mesh)
            low = np.isfinite(v) & ((c < min_coverage)
                                    | (base_cov.sel(model=m).values < min_coverage))
            _mark(ax, lat, lon, low, "....")
            ax.set_title(textwrap.fill(names[m], 48 if width == "two-column" else 45),
                         fontsize=FONT_PT + 1)
        cb = fig.colorbar(meshes[0], ax=axes, orientation="horizontal", extend=extend,
                          shrink=0.85, aspect=35, pad=0.02)
        cb.set_label(label)
        fig.suptitle(f"Net primary production {_span_text(period)} against "
                     f"{_span_text(baseline)}")
    what = ("in percent of the baseline mean" if relative
            else "as the difference of the means (mg C m-2 d-1)")
    caption = (
        f"Change of the mean daily net primary production over {_span_text(period)} against "
        f"the {_span_text(baseline)} baseline, {what}, {', '.join(names[m] for m in models)}. "
        f"Diverging colour scale centred on zero with symmetric limits at the "
        f"{DIFF_PERCENTILE:g}th percentile of the absolute change (+-{lim:.3g}; arrows mark "
        f"values beyond). Mid grey: land; light grey, hatched: ocean without data in either "
        f"period. Stippled: mean coverage below {min_coverage:g} of days in either period. "
        + _projection_text(projection)
    )
    return Drawn("fig_npp_difference", fig,
                 f"Net primary production {_span_text(period)} against {_span_text(baseline)}",
                 caption, {"meshes": meshes, "colorbar": cb, "norm": norm, "axes": axes})


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
    models = [str(m) for m in t["model"].values]
    regions = [str(r) for r in t["region"].values]
    years = ann["year"].values.astype(int)
    inbase = (years >= baseline[0]) & (years <= baseline[1])
    with plt.rc_context(_rc()):
        fig, axes = _panel_grid(len(regions), width, 1.35)
        for ax, r in zip(axes, regions, strict=True):
            tr = t.sel(region=r)
            if len(models) > 1:
                with np.errstate(all="ignore"):
                    ax.fill_between(years, tr.min("model").values, tr.max("model").values,
                                    color=SPREAD_COLOUR, alpha=0.5, lw=0,
                                    label="spread across models")
            for i, m in enumerate(models):
                col = LINE_COLOURS[i % len(LINE_COLOURS)]
                v = tr.sel(model=m).values
                b = v[inbase & np.isfinite(v)]
                if b.size:  # the baseline: its years shaded from min to max, its mean dashed
                    ax.fill_between([baseline[0] - 0.4, baseline[1] + 0.4], b.min(), b.max(),
                                    color=col, alpha=0.15, lw=0)
                    ax.axhline(b.mean(), color=col, lw=0.7, ls="--")
                ax.plot(years, v, marker="o", ms=2.5, lw=1.0, color=col, label=names[m])
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
        f"colour" + ("; grey band: spread across models (minimum to maximum)."
                     if len(models) > 1 else ".")
    )
    return Drawn("fig_annual_totals", fig, "Annual carbon fixed by region", caption,
                 {"axes": axes})


def seasonal_figure(totals: xr.Dataset, *, period: tuple[int, int],
                    width: Width = "two-column") -> Drawn:
    """Monthly totals by calendar month per region: mean (line) and min-max over the years
    of ``period`` (band), per model; Tg C per month."""
    import matplotlib.pyplot as plt

    cyc = compare.seasonal_cycle(totals, years=period, variable="total")
    names = _model_names(totals)
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
                        label=names[m])
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


# --------------------------------------------------------------------------------------------
# captions and files


def caption_texts(drawn: Drawn, ds: xr.Dataset, *, min_coverage: float, folder: Path
                  ) -> tuple[str, str]:
    """(Markdown, plain text) caption: what is shown, the models' citations, the coverage
    rule and the caution."""
    names, cites = _model_names(ds), _citations(ds)
    refs = [f"{names[m]}: {cites[m]}" for m in names]
    rule = (f"Coverage rule: a cell's monthly value is the mean over the days with a valid "
            f"estimate; coverage is the fraction of the month's days with one. Cells with mean "
            f"coverage below {min_coverage:g} are marked on maps (this tool's default "
            f"{DEFAULT_MIN_COVERAGE:g}); regional totals are over observed cells.")
    source = (f"Run in {folder} (run id {ds.attrs.get('euphotic_run_id', 'unknown')}), drawn "
              f"by euphotic {__version__}.")
    md = "\n".join([f"**{drawn.caption_title}.** {drawn.caption}", "", rule, "",
                    "Models:", *[f"- {r}" for r in refs], "", f"*Caution:* {CAUTION}", "",
                    source, ""])
    txt = "\n".join([f"{drawn.caption_title}. {drawn.caption}", "", rule, "", "Models:",
                     *[f"  {r}" for r in refs], "", f"Caution: {CAUTION}", "", source, ""])
    return md, txt


def save(drawn: Drawn, folder: Path) -> list[Path]:
    """Write ``NAME.png`` (at :data:`DPI`) and ``NAME.pdf``; the Figure is then closed."""
    import matplotlib.pyplot as plt

    out = []
    for ext in ("png", "pdf"):
        p = folder / f"{drawn.name}.{ext}"
        drawn.figure.savefig(p, dpi=DPI, metadata={"Software": f"euphotic {__version__}"}
                             if ext == "png" else {"Creator": f"euphotic {__version__}"})
        out.append(p)
    plt.close(drawn.figure)
    return out


def draw_all(maps: xr.Dataset, totals: xr.Dataset, *, period: tuple[int, int] | None = None,
             baseline: tuple[int, int] | None = None, projection: Projection = "equal-area",
             min_coverage: float = DEFAULT_MIN_COVERAGE, width: Width = "two-column",
             relative: bool = True, folder: Path | None = None) -> tuple[list[Drawn], list[str]]:
    """Every figure of the set (not saved), and notes on figures left out.

    ``period`` defaults to the whole run. The difference map sets ``period`` (or, by default,
    the run's last year) against ``baseline`` (by default the years before it); it is left out
    when the run has a single year and no baseline was given. The regional figures are left
    out when the run has no regions.
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
    notes: list[str] = []
    drawn = [map_panels(maps, period=shown, projection=projection, min_coverage=min_coverage,
                        width=width)]
    compared = period or (years[-1], years[-1])
    base = baseline or ((years[0], compared[0] - 1) if compared[0] > years[0] else None)
    if base is None:
        notes.append("no difference map: the run has a single year (give --baseline)")
    else:
        drawn.append(difference_map(maps, period=compared, baseline=base, projection=projection,
                                    relative=relative, min_coverage=min_coverage, width=width))
    if totals.sizes.get("region", 0) == 0:
        notes.append("no regional figures: the run has no regions")
    else:
        drawn.append(annual_series(totals, baseline=base or whole, width=width))
        drawn.append(seasonal_figure(totals, period=shown, width=width))
    return drawn, notes


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
    drawn, notes = draw_all(maps, totals, period=span, baseline=base, projection=projection,
                            min_coverage=min_coverage, width=width, relative=relative,
                            folder=folder)
    out = FigureSet(notes=notes)
    try:
        with runfolder.OutputFolder(folder).adding(command, replace_kinds=(KIND,)) as (stage,
                                                                                      added):
            for d in drawn:
                for p in save(d, stage.path):
                    added[p.name] = {"kind": KIND, "description": d.caption_title}
                    out.files.append(folder / p.name)
                md, txt = caption_texts(d, maps, min_coverage=min_coverage, folder=folder)
                for ext, text in (("caption.md", md), ("caption.txt", txt)):
                    name = f"{d.name}.{ext}"
                    stage.file(name).write_text(text)
                    added[name] = {"kind": KIND, "description": f"caption of {d.name}"}
                    out.files.append(folder / name)
    finally:
        import matplotlib.pyplot as plt

        for d in drawn:
            plt.close(d.figure)
    return out
