"""Write a run's station match-ups (``euphotic matchup``): the match-up table, the statistics
table, a log-log scatter, a target diagram and a short summary, added to the run's output
folder as one unit (:meth:`euphotic.runfolder.OutputFolder.adding`), as ``euphotic compare``
does.

I/O and drawing only: the numbers come from :mod:`euphotic.stations`,
:mod:`euphotic.matchup` and :mod:`euphotic.skill`.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from euphotic import __version__, results, runfolder
from euphotic import skill as sk
from euphotic.matchup import (
    DEFAULT_DAYS,
    DEFAULT_WINDOW,
    REASONS,
    DailyInputs,
    MatchupConfigError,
    Matchups,
    WindowOptions,
    match,
    statistics,
)
from euphotic.outputs import CAUTION, PUBLISHED_NAMES, model_label
from euphotic.stations import (
    DEFAULT_GROSS_TO_NET,
    DEFAULT_QUOTIENT,
    MatchupOptionError,
    StationTable,
    gross_to_net_value,
    quotient_value,
    read_stations,
)

#: The kind under which match-up files are listed in the run manifest; a new
#: ``euphotic matchup`` replaces the whole set.
KIND = "matchup"
#: One-column figure width, mm (as the figure set's one-column width).
WIDTH_MM = 85.0
#: Colours and markers of the method families (Okabe & Ito 2008 palette, as figureset).
METHOD_STYLE = {"c14": ("#0072B2", "o", "carbon-14"), "o2": ("#D55E00", "^",
                                                                 "oxygen, gross to net")}
FACTOR_CAUTION = ("Satellite NPP models differ from each other by about a factor of two; a "
                  "match-up checks one model against local measurements, it does not remove "
                  "that uncertainty.")


@dataclass
class Written:
    """What ``euphotic matchup`` wrote and what it found worth saying."""

    files: list[Path] = field(default_factory=list)
    matchups: Matchups | None = None
    stats: pd.DataFrame | None = None
    summary: str = ""
    stations: StationTable | None = None


def _option(given, table: dict, key: str, default):
    return given if given is not None else table.get(key, default)


def _run_config(folder: Path, manifest: dict, cfg):
    """The run configuration: given (a RunConfig or a path), else the one the manifest records."""
    from euphotic.config import RunConfig, load_config

    if isinstance(cfg, RunConfig):
        return cfg
    path = cfg if cfg is not None else manifest.get("config")
    if not path:
        raise MatchupConfigError(f"{folder}: the run's manifest records no config file; give "
                                 "the run's config with --config")
    if not Path(path).is_file():
        raise MatchupConfigError(f"{folder}: the run's config {path} is not there any more; "
                                 "give it with --config")
    return load_config(path)


def write_matchups(folder: str | Path, *, stations: str | Path | pd.DataFrame | None = None,
                   cfg=None, window: int | None = None, days: int | None = None,
                   min_valid: int | None = None, max_cv: float | None = None,
                   quotient: float | str | None = None, gross_to_net: float | None = None,
                   n_boot: int = sk.N_BOOT, seed: int = sk.BOOT_SEED, figures: bool = True,
                   command: str = "euphotic matchup") -> Written:
    """Match the stations with the run in ``folder`` and commit the results into it.

    Parameters
    ----------
    folder : the run's output folder
    stations : a station CSV (or DataFrame); default the config's ``[matchup] stations``
    cfg : RunConfig or config path, optional
        The run's configuration (default: the one its manifest records); its ``[matchup]``
        table gives the defaults of the options below.
    window : int
        Window width in cells (odd; default 3).
    days : int
        Days on each side of the station day (default 0).
    min_valid : int
        Fewest valid cells (default: more than half of the window's cells).
    max_cv : float
        Largest coefficient of variation of the window (default: no filter).
    quotient : float or "ammonium" / "nitrate"
        Photosynthetic quotient, mol O2 per mol C (default 1.4, nitrate; Laws 1991).
    gross_to_net : float
        Net/gross factor for oxygen gross production (default 1/1.5; Juranek and Quay 2005).
    n_boot, seed : bootstrap resamples and seed of the confidence intervals

    Raises
    ------
    StationFileError, MatchupOptionError, MatchupConfigError, NoRunError
        One line naming the file, option or folder; nothing is written.
    """
    folder = Path(folder)
    manifest = results.committed_manifest(folder)
    config = _run_config(folder, manifest, cfg)
    from euphotic.config import matchup_table

    table = matchup_table(config.path) if config.path else {}
    src = stations if stations is not None else table.get("stations")
    if src is None:
        raise MatchupOptionError(f"{folder}: no station file: give --stations FILE.csv or "
                                 f"`stations` in the [matchup] table of {config.path}")
    opts = WindowOptions(window=int(_option(window, table, "window", DEFAULT_WINDOW)),
                         days=int(_option(days, table, "days", DEFAULT_DAYS)),
                         min_valid=_option(min_valid, table, "min_valid", None),
                         max_cv=_option(max_cv, table, "max_cv", None))
    q = quotient_value(_option(quotient, table, "quotient", DEFAULT_QUOTIENT),
                       "--quotient" if quotient is not None else "[matchup] quotient")
    g2n = gross_to_net_value(_option(gross_to_net, table, "gross_to_net", DEFAULT_GROSS_TO_NET),
                             "gross_to_net")
    st = read_stations(src, quotient=q, gross_to_net=g2n)
    models = list(manifest.get("models") or config.models)
    inputs = DailyInputs.from_config(config)
    maps = results.open_maps(folder, models=[m for m in models])
    mu = match(st, inputs, models, opts=opts, maps=maps)
    stats = statistics(mu, n_boot=n_boot, seed=seed)
    summary = summary_text(mu, stats, st, folder)
    written = Written(matchups=mu, stats=stats, summary=summary, stations=st)

    with runfolder.OutputFolder(folder).adding(command, replace_kinds=(KIND,)) as (stage, added):
        def add(name: str, description: str) -> Path:
            added[name] = {"kind": KIND, "description": description}
            written.files.append(folder / name)
            return stage.file(name)

        _csv(mu.table, add("matchup_table.csv", "every station: inputs, conversions, window "
                                                "statistics and each model's estimates"))
        _csv(stats, add("matchup_statistics.csv", "log10 skill per model, method and region "
                                                  "with bootstrap 95 % intervals"))
        if figures:
            scatter(mu, add("matchup_scatter.png", "log-log scatter, model against measured"),
                    add("matchup_scatter.pdf", "the same scatter (PDF)"))
            target(stats, add("matchup_target.png", "target diagram (Jolliff et al. 2009)"),
                   add("matchup_target.pdf", "the same target diagram (PDF)"))
        add("matchup_summary.md", "the match-ups in words, with figure captions").write_text(
            summary + ("\n" + captions(mu) if figures else ""))
    return written


# ---- tables ----------------------------------------------------------------------------------

_DECIMALS = {"lat": 4, "lon": 4, "grid_lat": 4, "grid_lon": 4, "window_cv": 4, "r": 4,
             "slope": 4, "intercept": 4, "bias": 4, "urmsd": 4, "rmsd": 4, "within_2": 4,
             "within_3": 4, "sd_model": 4, "sd_measured": 4, "incubation_h": 2,
             "integration_depth_m": 2}


#: Counts: whole numbers (float in the frame when some rows have none).
_INTEGERS = {"window_n_valid", "window_n_cells", "n_depths", "n", "n_excluded"}


def _fmt_col(name: str, values: pd.Series) -> pd.Series:
    if name in _INTEGERS:
        return values.map(lambda v: "" if v is None or v != v else str(int(v)))
    if values.dtype.kind not in "fc":
        return values.map(lambda v: "" if v is None or (isinstance(v, float) and v != v) else v)
    dec = _DECIMALS.get(name.rsplit("_low", 1)[0].rsplit("_high", 1)[0],
                        2 if "mgC" in name else 4)
    return values.map(lambda v: "" if not np.isfinite(v) else f"{v:.{dec}f}")


def _csv(df: pd.DataFrame, path: Path) -> None:
    """Fixed decimals per column, never an exponent; an empty cell is a missing value."""
    out = pd.DataFrame({c: _fmt_col(c, df[c]) for c in df.columns})
    out.to_csv(path, index=False)


# ---- words ---------------------------------------------------------------------------------


def _factor(s: pd.Series) -> str:
    return f"{10 ** s['bias']:.2f}"


def summary_text(mu: Matchups, stats: pd.DataFrame, st: StationTable, folder: Path) -> str:
    """The match-ups in a few sentences for a proposal or report (Markdown)."""
    t = mu.table
    first = t[t["model"] == (mu.models[0] if mu.models else "")]
    lines = [f"# Station match-ups of the run in {folder}", "",
             f"euphotic {__version__}, {dt.datetime.now(dt.UTC).strftime('%Y-%m-%d')}. "
             f"Stations: {st.source}.", "",
             f"- Measurements: {len(st.stations)} usable ({int((st.stations['n_depths'] > 0).sum())}"
             f" from integrated profiles), {len(st.bad)} bad row(s) listed with their reason.",
             f"- Conversions: {st.conversion.text()}.",
             f"- Model estimate: {mu.options.text()}; the daily model from the run's inputs, "
             "beside the run's monthly-map value at the station cell.",
             "- Statistics in log10 space (Campbell et al. 2002; Friedrichs et al. 2009; Saba et "
             "al. 2011): bias = mean(log10 model - log10 measured); a bias of b means the model "
             "is 10^b times the measurements on geometric average.",
             "- Models: " + "; ".join(f"{model_label(m)}: {PUBLISHED_NAMES.get(m, m)}"
                                      for m in mu.models) + ".", ""]
    counts = first["reason"].value_counts()
    if len(counts):
        lines.append("Not scored (first model): " + ", ".join(
            f"{n} {r} ({REASONS.get(r, r)})" for r, n in counts.items() if r) + ".")
        lines.append("")
    daily = stats[(stats["estimate"] == "daily") & (stats["n"] > 0)]
    lines.append("## In words")
    lines.append("")
    for _, s in daily[daily["group_type"].isin(["method", "region_method"])].iterrows():
        region, fam = (s["group"].split(" | ") if s["group_type"] == "region_method"
                       else ("all stations", s["group"]))
        what = "carbon-14" if fam == "c14" else "oxygen (gross production converted to net)"
        where = f"In {region}" if region != "all stations" else "Over all stations"
        ci = (f", 95 % interval {s['bias_low']:+.3f} to {s['bias_high']:+.3f}"
              if np.isfinite(s["bias_low"]) else "")
        # a correlation of fewer than 3 pairs is +-1 by construction: not reported
        r = f", r = {s['r']:.2f}" if np.isfinite(s["r"]) and s["n"] >= 3 else ""
        lines.append(
            f"- {where} the {model_label(s['model'])} estimate is within a factor of 2 of {what} "
            f"measurements at {round(s['within_2'] * s['n'])} of {int(s['n'])} stations "
            f"(within a factor of 3 at {round(s['within_3'] * s['n'])}); on geometric average "
            f"it is {_factor(s)} times the measurements (bias {s['bias']:+.3f} log10{ci}; "
            f"RMSD {s['rmsd']:.3f}{r}).")
    if daily.empty:
        lines.append("- No station could be scored.")
    lines += ["", f"Caution: {CAUTION}", ""]
    return "\n".join(lines)


def captions(mu: Matchups) -> str:
    return "\n".join([
        "## Figure captions", "",
        "matchup_scatter: Daily model estimate (median of the station's window) against "
        "measured production, mg C m-2 d-1, log-log; circles carbon-14, triangles oxygen gross "
        "production converted to carbon and to net production; solid line 1:1, dashed lines a "
        f"factor of two either way. {FACTOR_CAUTION}", "",
        "matchup_target: Target diagram (Jolliff et al. 2009) of the daily estimates in log10 "
        "space: unbiased RMSD normalised by the standard deviation of the measurements, signed "
        "by the difference of the standard deviations (model minus measured), on the x axis; "
        "bias normalised by the same standard deviation on the y axis; inside the unit circle "
        f"the model does better than the mean of the measurements. {FACTOR_CAUTION}", ""])


# ---- figures ---------------------------------------------------------------------------------


def _rc() -> dict:
    from euphotic.figureset import _rc as figure_rc

    return figure_rc()


def scatter(mu: Matchups, png: Path, pdf: Path):
    """Log-log scatter of each model's daily estimate against the measurements, marked by
    method, with the 1:1 line and factor-of-two lines. Returns the figure."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    t = mu.table[(mu.table["model"] != "") & (mu.table["reason"] == "")]
    n = max(len(mu.models), 1)
    mm = 1 / 25.4
    with plt.rc_context(_rc()):
        fig, axes = plt.subplots(n, 1, figsize=(WIDTH_MM * mm, (62 * n + 8) * mm), squeeze=False)
        x_all = t["npp_equivalent_mgC_m-2_d-1"].to_numpy(float)
        y_all = t["daily_mgC_m-2_d-1"].to_numpy(float)
        vals = np.concatenate([x_all, y_all])
        vals = vals[np.isfinite(vals) & (vals > 0)]
        lo, hi = (vals.min() / 1.5, vals.max() * 1.5) if len(vals) else (1.0, 1e4)
        line = np.array([lo, hi])
        for ax, m in zip(axes[:, 0], mu.models, strict=False):
            tm = t[t["model"] == m]
            for fam, (colour, marker, label) in METHOD_STYLE.items():
                g = tm[tm["family"] == fam]
                ax.scatter(g["npp_equivalent_mgC_m-2_d-1"], g["daily_mgC_m-2_d-1"], s=14,
                           c=colour, marker=marker, label=f"{label} (n = {len(g)})",
                           edgecolors="none", alpha=0.85)
            ax.plot(line, line, color="black", lw=0.8, label="1:1")
            ax.plot(line, 2 * line, color="0.45", lw=0.7, ls="--", label="factor of 2")
            ax.plot(line, line / 2, color="0.45", lw=0.7, ls="--")
            ax.set(xscale="log", yscale="log", xlim=(lo, hi), ylim=(lo, hi), aspect="equal",
                   xlabel="measured (mg C m$^{-2}$ d$^{-1}$)",
                   ylabel=f"{model_label(m)} (mg C m$^{{-2}}$ d$^{{-1}}$)")
            from matplotlib.ticker import FixedLocator, NullFormatter, ScalarFormatter

            from euphotic.figureset import _log_ticks

            for axis in (ax.xaxis, ax.yaxis):  # readable ticks: 100, 300, 1000
                axis.set_major_locator(FixedLocator(_log_ticks(lo, hi)))
                axis.set_major_formatter(ScalarFormatter())
                axis.set_minor_formatter(NullFormatter())
        # one legend for all panels, under them: never over the points
        handles, labels = axes[0, 0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower center", ncol=2, frameon=False,
                   fontsize="small", handlelength=1.5, bbox_to_anchor=(0.5, 0.0))
        fig.tight_layout(rect=(0, 0.09 / n, 1, 1))
        fig.savefig(png, dpi=300, bbox_inches="tight")
        fig.savefig(pdf, bbox_inches="tight")
        plt.close(fig)
    return fig


def target(stats: pd.DataFrame, png: Path, pdf: Path):
    """Target diagram (Jolliff et al. 2009) of the daily estimates per model and method.
    Returns the figure."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from euphotic.figureset import LINE_COLOURS

    s = stats[(stats["estimate"] == "daily") & (stats["group_type"] == "method")
              & (stats["n"] >= 2)]
    models = list(dict.fromkeys(stats["model"]))
    mm = 1 / 25.4
    with plt.rc_context(_rc()):
        fig, ax = plt.subplots(figsize=(WIDTH_MM * mm, (WIDTH_MM + 22) * mm))
        th = np.linspace(0, 2 * np.pi, 361)
        ax.plot(np.cos(th), np.sin(th), color="0.3", lw=0.8)
        ax.axhline(0, color="0.6", lw=0.5)
        ax.axvline(0, color="0.6", lw=0.5)
        lim = 1.2
        for _, row in s.iterrows():
            sk_ = sk.Skill(**{k: row[k] for k in sk.FIELDS})
            x, y = sk.target_point(sk_)
            if not np.isfinite(x):
                continue
            lim = max(lim, abs(x) * 1.15, abs(y) * 1.15)
            colour = LINE_COLOURS[models.index(row["model"]) % len(LINE_COLOURS)]
            ax.scatter([x], [y], c=colour, marker=METHOD_STYLE[row["group"]][1], s=30,
                       label=f"{model_label(row['model'])}, {METHOD_STYLE[row['group']][2]}")
        ax.set(xlim=(-lim, lim), ylim=(-lim, lim), aspect="equal",
               xlabel="normalised unbiased RMSD (signed)", ylabel="normalised bias")
        if len(s):
            ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=1, frameon=False,
                      fontsize="small")
        fig.tight_layout()
        fig.savefig(png, dpi=300, bbox_inches="tight")
        fig.savefig(pdf, bbox_inches="tight")
        plt.close(fig)
    return fig
