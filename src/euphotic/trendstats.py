"""Theil-Sen slopes and Mann-Kendall tests of many series at once: a compiled block kernel.

:func:`trend_block` takes an array of series ``(..., time)`` (NaN where a value is missing)
and returns, per series, the statistics :func:`scipy.stats.theilslopes` and
:func:`scipy.stats.kendalltau` give for its non-missing values, in the order of
:data:`TREND_STATS`. It is the per-cell kernel of :func:`euphotic.compare.trend_map` (and of
:func:`euphotic.compare.trend`): one compiled loop over a block of cells (numba, GIL released,
so dask threads run blocks in parallel), with work buffers allocated once per block.

Pure compute: numpy arrays in, a numpy array out; no xarray, no I/O.

Cost per series of n values: n (n - 1) / 2 pairwise slopes and sign comparisons, and order
statistics by selection (quickselect) rather than a full sort. For 20 annual values that is
190 pairs (a few microseconds a cell); for 240 monthly values 28,680 pairs (about a
millisecond a cell), which is why per-cell maps are fitted on annual values by default.
"""

from __future__ import annotations

import math

import numba
import numpy as np

#: Order of the statistics along the last axis of :func:`trend_block`'s result.
TREND_STATS = ("slope", "intercept", "slope_low", "slope_high", "tau", "p_value", "n", "n_years")

#: Largest number of values for which scipy.stats.kendalltau (method="auto", scipy 1.17,
#: ``_stats_py.kendalltau``) uses the exact null distribution of Kendall's S when there are
#: no ties (beyond it, only when at most one pair is discordant, or concordant).
EXACT_MAX_N = 33
#: Fewest values for a fit: fewer give NaN statistics (two points always lie on a line).
MIN_VALUES = 3
#: Largest n whose n! scipy turns into a float (``2.0 / math.factorial(n) if n < 171``);
#: beyond it the exact p-value of a perfectly ordered series is 0.
_FACTORIAL_FLOAT_MAX = 170


# --------------------------------------------------------------------------------------------
# tables computed once in Python


def _mahonian_cumulative(n: int) -> list[int]:
    """Number of permutations of n items with at most c inversions, c = 0 .. n(n-1)/2 (exact
    integers: the Mahonian numbers summed; Kendall 1970, *Rank Correlation Methods*, ch. 4)."""
    counts = [1]
    for j in range(2, n + 1):  # insert item j: it adds 0 .. j-1 inversions
        new = [0] * (len(counts) + j - 1)
        for c, v in enumerate(counts):
            for k in range(j):
                new[c + k] += v
        counts = new
    out, s = [], 0
    for v in counts:
        s += v
        out.append(s)
    return out


def _exact_pvalues(max_n: int = EXACT_MAX_N) -> np.ndarray:
    """Two-sided exact p-values of Kendall's test without ties: ``table[n, c]`` for n values
    of which c pairs are concordant (c <= n(n-1)/2), as scipy's ``_kendall_p_exact``
    (``scipy/stats/_mstats_basic.py``, scipy 1.17) computes them: c is folded onto the lower
    tail, c = 0 and c = 1 use 2/n! and 2/(n-1)!, the middle of the distribution gives 1, and
    otherwise twice the lower-tail probability, clipped to [0, 1]."""
    tot_max = max_n * (max_n - 1) // 2
    table = np.full((max_n + 1, tot_max + 1), np.nan)
    for n in range(1, max_n + 1):
        tot = n * (n - 1) // 2
        cum = _mahonian_cumulative(n)
        fact = math.factorial(n)
        for c_full in range(tot + 1):
            c = min(c_full, tot - c_full)
            if n <= 2:
                p = 1.0
            elif c == 0:
                p = 2.0 / fact
            elif c == 1:
                p = 2.0 / math.factorial(n - 1)
            elif 4 * c == n * (n - 1):
                p = 1.0
            else:
                p = 2.0 * float(cum[c]) / float(fact)
            table[n, c_full] = min(max(p, 0.0), 1.0)
    return table


def _two_over_factorial(max_n: int) -> np.ndarray:
    """2 / k! for k = 0 .. max_n as scipy computes it (0 where k! does not fit a float)."""
    return np.array([2.0 / math.factorial(k) if k <= _FACTORIAL_FLOAT_MAX else 0.0
                     for k in range(max_n + 1)])


_EXACT = _exact_pvalues()


# --------------------------------------------------------------------------------------------
# compiled parts

_jit = numba.njit(nogil=True, cache=True, error_model="numpy")


@_jit
def _round_half_even(x):
    """``np.round`` of a float64 scalar: halves go to the even integer."""
    r = math.floor(x)
    d = x - r
    if d > 0.5 or (d == 0.5 and r % 2.0 != 0.0):
        r += 1.0
    return r


@_jit
def _select(a, lo, hi, k):
    """The k-th smallest of ``a[lo:hi]`` (0-based k within the whole array), moving it to
    ``a[k]`` with smaller-or-equal values before it and larger-or-equal after it, within
    ``[lo, hi)`` (quickselect, Hoare partition, median-of-three pivot)."""
    hi -= 1
    while hi > lo:
        mid = (lo + hi) // 2
        if a[mid] < a[lo]:
            a[mid], a[lo] = a[lo], a[mid]
        if a[hi] < a[lo]:
            a[hi], a[lo] = a[lo], a[hi]
        if a[hi] < a[mid]:
            a[hi], a[mid] = a[mid], a[hi]
        pivot = a[mid]
        i, j = lo, hi
        while i <= j:
            while a[i] < pivot:
                i += 1
            while a[j] > pivot:
                j -= 1
            if i <= j:
                a[i], a[j] = a[j], a[i]
                i += 1
                j -= 1
        if k <= j:
            hi = j
        elif k >= i:
            lo = i
        else:
            break  # a[j+1 .. i-1] all equal the pivot
    return a[k]


@_jit
def _sorted_median(s, n):
    """``np.median`` of the sorted ``s[:n]``."""
    h = n // 2
    if n % 2 == 1:
        return s[h]
    return (s[h - 1] + s[h]) / 2.0


@_jit
def _tie_sums(s, n):
    """Over groups of equal values in the sorted ``s[:n]`` (sizes k > 1): sum of
    k(k-1)(k-2) and of k(k-1)(2k+5), as scipy's ``count_rank_tie`` and ``_find_repeats``."""
    t0 = 0
    t1 = 0
    i = 0
    while i < n:
        j = i + 1
        while j < n and s[j] == s[i]:
            j += 1
        k = j - i
        if k > 1:
            t0 += k * (k - 1) * (k - 2)
            t1 += k * (k - 1) * (2 * k + 5)
        i = j
    return t0, t1


@_jit
def _normal_two_sided(z):
    """2 * Phi(-|z|), the two-sided normal p-value, written as cephes ``ndtr`` evaluates
    Phi (erf near the centre, erfc in the tails)."""
    x = -abs(z) * 0.7071067811865476  # 1 / sqrt(2)
    if abs(x) < 0.7071067811865476:
        y = 0.5 + 0.5 * math.erf(x)
    else:
        y = 0.5 * math.erfc(abs(x))
    return 2.0 * y


@_jit
def _trend_cells(y, t, year_code, n_year_codes, z_ci, exact, two_over_fact, out):
    """Statistics of each row of ``y`` (cells, time) into ``out`` (cells, 8)."""
    ncell, ntime = y.shape
    yv = np.empty(ntime)
    tv = np.empty(ntime)
    ys = np.empty(ntime)
    ts = np.empty(ntime)
    slopes = np.empty(max(ntime * (ntime - 1) // 2, 1))
    seen = np.zeros(max(n_year_codes, 1), dtype=np.bool_)
    for c in range(ncell):
        n = 0
        seen[:] = False
        n_years = 0
        for i in range(ntime):
            v = y[c, i]
            if math.isfinite(v):
                yv[n] = v
                tv[n] = t[i]
                n += 1
                yc = year_code[i]
                if not seen[yc]:
                    seen[yc] = True
                    n_years += 1
        for k in range(6):
            out[c, k] = np.nan
        out[c, 6] = n
        out[c, 7] = n_years
        if n < MIN_VALUES:
            continue
        # pairwise slopes (pairs with distinct t, as (y_hi - y_lo) / (t_hi - t_lo)) and the
        # pair counts of Kendall's tau
        nt = 0
        xtie = 0
        ytie = 0
        ntie = 0
        dis = 0
        for i in range(n - 1):
            ti = tv[i]
            yi = yv[i]
            for j in range(i + 1, n):
                dx = tv[j] - ti
                dy = yv[j] - yi
                if dx > 0:
                    slopes[nt] = dy / dx
                    nt += 1
                elif dx < 0:
                    slopes[nt] = (yi - yv[j]) / (ti - tv[j])
                    nt += 1
                if dx == 0:
                    xtie += 1
                    if dy == 0:
                        ntie += 1
                if dy == 0:
                    ytie += 1
                if (dx > 0 and dy < 0) or (dx < 0 and dy > 0):
                    dis += 1
        for i in range(n):
            ys[i] = yv[i]
            ts[i] = tv[i]
        ys[:n].sort()
        ts[:n].sort()
        x0, x1 = _tie_sums(ts, n)
        y0, y1 = _tie_sums(ys, n)
        # Theil-Sen slope, intercept and confidence interval (scipy.stats.theilslopes,
        # method="separate"; Sen 1968 eq. 2.6 for the variance)
        if nt > 0:
            k_lo = (nt - 1) // 2
            s_lo = _select(slopes, 0, nt, k_lo)
            if nt % 2 == 1:
                med = s_lo
            else:
                s_hi = slopes[k_lo + 1]
                for i in range(k_lo + 2, nt):
                    if slopes[i] < s_hi:
                        s_hi = slopes[i]
                med = (s_lo + s_hi) / 2.0
            out[c, 0] = med
            out[c, 1] = _sorted_median(ys, n) - med * _sorted_median(ts, n)
            sigsq = 1 / 18. * (n * (n - 1) * (2 * n + 5) - x1 - y1)
            if sigsq >= 0:
                sigma = math.sqrt(sigsq)
                ru = min(int(_round_half_even((nt - z_ci * sigma) / 2.)), nt - 1)
                rl = max(int(_round_half_even((nt + z_ci * sigma) / 2.)) - 1, 0)
                for col, r in ((2, rl), (3, ru)):
                    if r < k_lo:
                        out[c, col] = _select(slopes, 0, k_lo, r)
                    elif r == k_lo:
                        out[c, col] = s_lo
                    else:
                        out[c, col] = _select(slopes, k_lo + 1, nt, r)
        # Kendall's tau-b and its two-sided p-value (scipy.stats.kendalltau, method="auto")
        tot = n * (n - 1) // 2
        if xtie == tot or ytie == tot:
            continue
        cmd = tot - xtie - ytie + ntie - 2 * dis
        tau = cmd / math.sqrt(tot - xtie) / math.sqrt(tot - ytie)
        out[c, 4] = min(1.0, max(-1.0, tau))
        if xtie == 0 and ytie == 0 and (n <= exact.shape[0] - 1 or min(dis, tot - dis) <= 1):
            con = tot - dis
            if n <= exact.shape[0] - 1:
                p = exact[n, con]
            elif min(con, tot - con) == 0:
                p = two_over_fact[n]
            else:
                p = two_over_fact[n - 1]
        else:
            m = n * (n - 1.)
            var = ((m * (2 * n + 5) - x1 - y1) / 18 + (2 * xtie * ytie) / m
                   + x0 * y0 / (9 * m * (n - 2)))
            p = _normal_two_sided(cmd / math.sqrt(var))
        out[c, 5] = p


# --------------------------------------------------------------------------------------------
# public


def ci_quantile(confidence: float) -> float:
    """The normal quantile scipy's theilslopes uses for a ``confidence`` (or, if below 0.5,
    a significance) level: ``norm.ppf(alpha / 2)`` with alpha = 1 - confidence."""
    from scipy.special import ndtri

    alpha = float(confidence)
    if alpha > 0.5:
        alpha = 1.0 - alpha
    return float(ndtri(alpha / 2.0))


def trend_block(y: np.ndarray, t: np.ndarray, years: np.ndarray, *, confidence: float = 0.95
                ) -> np.ndarray:
    """Theil-Sen slope, intercept and confidence interval, Kendall's tau-b and its p-value,
    the number of values and of calendar years, for each series of a block.

    Parameters
    ----------
    y : numpy.ndarray, shape (..., time)
        The series (any units; NaN or inf = missing), time along the last axis.
    t : numpy.ndarray, shape (time,)
        Time of each value (years since an origin, or any unit: the slope is per unit of t).
    years : numpy.ndarray, shape (time,)
        Calendar year of each value (only counted: ``n_years``).
    confidence : float, keyword-only
        Confidence level of the slope's interval (0-1, default 0.95), as ``alpha`` of
        :func:`scipy.stats.theilslopes`.

    Returns
    -------
    numpy.ndarray, shape (..., 8), float64
        Along the last axis :data:`TREND_STATS`: ``slope`` (units of y per unit of t),
        ``intercept`` (units of y), ``slope_low``, ``slope_high``, ``tau`` (1), ``p_value``
        (1), ``n`` and ``n_years`` (counts). The first six are NaN for a series with fewer
        than 3 values; ``tau`` and ``p_value`` are NaN for a constant series.

    Notes
    -----
    Per series, on its non-missing values (as scipy 1.17 computes them):

    - slope: median of (y_j - y_i) / (t_j - t_i) over pairs with t_j > t_i (Sen 1968);
      intercept median(y) - slope median(t);
    - interval: the sorted slopes at ranks R_l = round((N + z sigma) / 2) - 1 and
      R_u = round((N - z sigma) / 2) (clipped to the array; round half to even), N the number
      of slopes, z = Phi^-1(alpha / 2), sigma^2 = [n(n-1)(2n+5) - sum over ties in t and in y
      of k(k-1)(2k+5)] / 18 (Sen 1968, eq. 2.6);
    - tau-b = S / sqrt((N0 - T_t)(N0 - T_y)), S = concordant - discordant pairs, N0 = n(n-1)/2,
      T the pairs tied in t or y; p-value two-sided: exact (the permutation distribution of S,
      Kendall 1970) without ties when n <= 33 or at most one pair is discordant (or
      concordant), otherwise normal with the ties-corrected variance of S and no continuity
      correction.

    The order statistics are found by selection (expected linear time) instead of sorting the
    n(n-1)/2 slopes.

    References
    ----------
    Sen, P. K. (1968), J. Amer. Statist. Assoc. 63:1379-1389; Kendall, M. G. (1970), Rank
    Correlation Methods, 4th ed.
    """
    y = np.asarray(y)
    t = np.asarray(t, dtype=np.float64)
    years = np.asarray(years)
    ntime = y.shape[-1]
    if t.shape != (ntime,) or years.shape != (ntime,):
        raise ValueError(f"t and years must have shape ({ntime},) like the last axis of y, "
                         f"got {t.shape} and {years.shape}")
    _, codes = np.unique(years, return_inverse=True)
    codes = codes.astype(np.int64).reshape(-1)
    lead = y.shape[:-1]
    flat = np.ascontiguousarray(y.reshape(-1, ntime), dtype=np.float64)
    out = np.empty((flat.shape[0], len(TREND_STATS)))
    fact = _two_over_factorial(max(ntime, 1))
    _trend_cells(flat, np.ascontiguousarray(t), codes, int(codes.max(initial=-1)) + 1,
                 ci_quantile(confidence), _EXACT, fact, out)
    return out.reshape(*lead, len(TREND_STATS))


__all__ = ["TREND_STATS", "EXACT_MAX_N", "MIN_VALUES", "trend_block", "ci_quantile"]
