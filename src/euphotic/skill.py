"""Skill of model estimates against measurements, in log10 space (pure statistics).

Production is roughly log-normally distributed and model errors are multiplicative, so the
comparison is made on :math:`x = \\log_{10}(\\text{measured})` and
:math:`y = \\log_{10}(\\text{model})`, as in Campbell et al. (2002), Friedrichs et al. (2009)
and Saba et al. (2011). Pairs where either value is zero, negative or missing cannot enter
log space: they are left out and counted (:attr:`Skill.n_excluded`).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

#: Statistics a :class:`Skill` reports, in table order.
FIELDS = ("n", "n_excluded", "bias", "urmsd", "rmsd", "r", "slope", "intercept",
          "within_2", "within_3", "sd_model", "sd_measured")
#: Bootstrap resamples (common practice; 1000 gives percentile limits stable to about 0.01
#: in log10 units for tens of pairs).
N_BOOT = 1000
#: Default seed of the bootstrap (any fixed number: the intervals are reproducible).
BOOT_SEED = 20250401


@dataclass
class Skill:
    """Statistics of one set of pairs, log10 units unless said otherwise."""

    n: int
    n_excluded: int  # pairs with a zero, negative or missing value
    bias: float  # mean(y - x)
    urmsd: float  # sqrt(mean(((y - mean y) - (x - mean x))**2))
    rmsd: float  # sqrt(mean((y - x)**2)) = sqrt(bias**2 + urmsd**2)
    r: float  # Pearson correlation of x and y
    slope: float  # reduced major axis slope of y on x
    intercept: float  # reduced major axis intercept
    within_2: float  # fraction of pairs with model/measured within a factor of 2
    within_3: float  # ... within a factor of 3
    sd_model: float  # population standard deviation of y
    sd_measured: float  # population standard deviation of x

    def as_dict(self) -> dict:
        return asdict(self)


def log_pairs(measured, model) -> tuple[np.ndarray, np.ndarray, int]:
    """log10 of the pairs where both values are finite and > 0, and the number left out."""
    a = np.asarray(measured, dtype=np.float64)
    b = np.asarray(model, dtype=np.float64)
    ok = np.isfinite(a) & np.isfinite(b) & (a > 0) & (b > 0)
    return np.log10(a[ok]), np.log10(b[ok]), int((~ok).sum())


def rma(x, y) -> tuple[float, float]:
    """Reduced major axis (geometric mean) regression of ``y`` on ``x``.

    Returns
    -------
    slope, intercept

    Notes
    -----
    :math:`b = \\operatorname{sign}(r)\\,s_y/s_x`, :math:`a = \\bar y - b\\bar x`: a type-II
    regression, symmetric in x and y, for two variables that both carry error (Ricker 1973;
    Sokal and Rohlf 1995, section 14.13). The sign of a zero correlation is taken as +.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if len(x) < 2 or np.std(x) == 0:
        return float("nan"), float("nan")
    r = np.corrcoef(x, y)[0, 1] if np.std(y) > 0 else 0.0
    slope = (1.0 if r >= 0 else -1.0) * np.std(y) / np.std(x)
    return float(slope), float(np.mean(y) - slope * np.mean(x))


def log_skill(measured, model) -> Skill:
    """Skill of ``model`` against ``measured`` (same units, e.g. mg C m-2 d-1) in log10 space.

    Notes
    -----
    With :math:`x_i = \\log_{10} m_i`, :math:`y_i = \\log_{10} p_i` (measured, model):
    bias :math:`B = \\overline{y - x}`; unbiased RMSD
    :math:`\\sqrt{\\overline{((y - \\bar y) - (x - \\bar x))^2}}`; total RMSD
    :math:`\\sqrt{\\overline{(y - x)^2}} = \\sqrt{B^2 + uRMSD^2}` (Jolliff et al. 2009;
    Friedrichs et al. 2009); Pearson r; reduced major axis slope and intercept (:func:`rma`);
    the fraction of pairs with :math:`|y - x| \\le \\log_{10} 2` (and 3).
    """
    x, y, excluded = log_pairs(measured, model)
    n = len(x)
    nan = float("nan")
    if n == 0:
        return Skill(0, excluded, *([nan] * 10))
    d = y - x
    bias = float(d.mean())
    urmsd = float(np.sqrt(np.mean(((y - y.mean()) - (x - x.mean())) ** 2)))
    rmsd = float(np.sqrt(np.mean(d**2)))
    r = float(np.corrcoef(x, y)[0, 1]) if n > 1 and np.std(x) > 0 and np.std(y) > 0 else nan
    slope, intercept = rma(x, y)
    # a tiny tolerance: a pair at exactly a factor of 2 counts as within it
    tol = 1e-12
    return Skill(n, excluded, bias, urmsd, rmsd, r, slope, intercept,
                 float(np.mean(np.abs(d) <= np.log10(2.0) + tol)),
                 float(np.mean(np.abs(d) <= np.log10(3.0) + tol)),
                 float(np.std(y)), float(np.std(x)))


def bootstrap(measured, model, *, n_boot: int = N_BOOT, seed: int = BOOT_SEED,
              level: float = 0.95) -> dict[str, tuple[float, float]]:
    """Percentile bootstrap confidence intervals of the :func:`log_skill` statistics.

    Pairs are resampled with replacement (``numpy.random.default_rng(seed)``), so the same
    seed gives the same intervals. Returns ``{statistic: (low, high)}`` for bias, urmsd, rmsd,
    r, slope, intercept, within_2, within_3 (NaN with fewer than 3 pairs).
    """
    x, y, _ = log_pairs(measured, model)
    names = ("bias", "urmsd", "rmsd", "r", "slope", "intercept", "within_2", "within_3")
    if len(x) < 3:
        return {k: (float("nan"), float("nan")) for k in names}
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, len(x), size=(n_boot, len(x)))
    xb, yb = x[idx], y[idx]  # (resample, pair); the statistics of log_skill, vectorised
    d = yb - xb
    xc, yc = xb - xb.mean(1, keepdims=True), yb - yb.mean(1, keepdims=True)
    sx, sy = xb.std(1), yb.std(1)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.where((sx > 0) & (sy > 0), (xc * yc).mean(1) / (sx * sy), np.nan)
        slope = np.where(sx > 0, np.where(r < 0, -1.0, 1.0) * sy / sx, np.nan)
    tol = 1e-12
    stats = {
        "bias": d.mean(1),
        "urmsd": np.sqrt(((yc - xc) ** 2).mean(1)),
        "rmsd": np.sqrt((d**2).mean(1)),
        "r": r,
        "slope": slope,
        "intercept": yb.mean(1) - slope * xb.mean(1),
        "within_2": (np.abs(d) <= np.log10(2.0) + tol).mean(1),
        "within_3": (np.abs(d) <= np.log10(3.0) + tol).mean(1),
    }
    lo, hi = (1 - level) / 2 * 100, (1 + level) / 2 * 100
    out = {}
    for k in names:
        v = stats[k][np.isfinite(stats[k])]
        out[k] = ((float(np.percentile(v, lo)), float(np.percentile(v, hi))) if len(v)
                  else (float("nan"), float("nan")))
    return out


def target_point(s: Skill) -> tuple[float, float]:
    """Coordinates of a target diagram (Jolliff et al. 2009): x = unbiased RMSD normalised by
    the measurements' standard deviation, signed by sign(sd_model - sd_measured); y = bias
    normalised by the same standard deviation (all in log10 space)."""
    if not s.sd_measured > 0:
        return float("nan"), float("nan")
    sign = 1.0 if s.sd_model >= s.sd_measured else -1.0
    return sign * s.urmsd / s.sd_measured, s.bias / s.sd_measured
