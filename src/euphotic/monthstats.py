"""Calendar-month sums and departures of many series at once: compiled block kernels.

The kernels behind :func:`euphotic.compare.climatology` and :func:`euphotic.compare.anomalies`
on dask-backed maps. Each takes a block of series ``(..., time)`` (NaN where a value is
missing; float32 or float64) and makes one pass over it, accumulating in float64, so the
float32 maps are never copied to float64 as a whole and no per-month temporaries are built
(xarray's groupby and the broadcast of a climatology to every month made two to three passes
over a float64 copy of the stack).

Pure compute: numpy arrays in, numpy arrays out; no xarray, no I/O. Compiled with numba,
GIL released, so dask threads run blocks in parallel (as :mod:`euphotic.trendstats`).
"""

from __future__ import annotations

import numba
import numpy as np

#: Calendar months in a year (the length of the ``calendar_month`` axis).
N_GROUPS = 12


@numba.njit(nogil=True, cache=True)
def _group_sums(y, group, n_groups):  # pragma: no cover - compiled
    n, nt = y.shape
    sums = np.zeros((n, n_groups), dtype=np.float64)
    counts = np.zeros((n, n_groups), dtype=np.int64)
    for i in range(n):
        for t in range(nt):
            g = group[t]
            if g < 0:
                continue
            v = y[i, t]
            if v == v:  # not NaN
                sums[i, g] += np.float64(v)
                counts[i, g] += 1
    return sums, counts


@numba.njit(nogil=True, cache=True)
def _departures(y, ref, group):  # pragma: no cover - compiled
    n, nt = y.shape
    out = np.empty((n, nt), dtype=np.float64)
    for i in range(n):
        for t in range(nt):
            out[i, t] = np.float64(y[i, t]) - ref[i, group[t]]
    return out


def _as_2d(y: np.ndarray) -> np.ndarray:
    if y.dtype not in (np.float32, np.float64):
        y = y.astype(np.float64)
    return np.ascontiguousarray(y.reshape(-1, y.shape[-1]))


def group_mean(y: np.ndarray, group: np.ndarray, *, n_groups: int = N_GROUPS
               ) -> tuple[np.ndarray, np.ndarray]:
    """Mean and count of the non-missing values of each series by group.

    Parameters
    ----------
    y : numpy.ndarray, shape (..., time)
        Series, NaN where missing; any units (the mean has the same units).
    group : numpy.ndarray of int, shape (time,)
        Group of each time step, 0 .. n_groups - 1 (calendar month - 1); a negative group
        leaves the step out (a month outside the baseline).
    n_groups : int, keyword-only
        Number of groups (12).

    Returns
    -------
    mean : numpy.ndarray of float64, shape (..., n_groups)
        Sum of the values of a group divided by their count (float64 accumulation); NaN
        where the group has no value.
    count : numpy.ndarray of int64, shape (..., n_groups)
        Values with a value in each group (1).
    """
    group = np.asarray(group, dtype=np.int64)
    if group.shape != (y.shape[-1],) or (group >= n_groups).any():
        raise ValueError(f"group: expected {y.shape[-1]} labels below {n_groups}, got shape {group.shape}")
    sums, counts = _group_sums(_as_2d(y), group, n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(counts > 0, sums / counts, np.nan)
    shape = y.shape[:-1] + (n_groups,)
    return mean.reshape(shape), counts.reshape(shape)


def departures(y: np.ndarray, ref: np.ndarray, group: np.ndarray) -> np.ndarray:
    """Each value minus its group's reference value, in float64.

    Parameters
    ----------
    y : numpy.ndarray, shape (..., time)
        Series, NaN where missing (the departure is NaN there).
    ref : numpy.ndarray, shape (..., n_groups)
        Reference per series and group (a climatology by calendar month), same units as y;
        NaN gives a NaN departure.
    group : numpy.ndarray of int, shape (time,)
        Group of each time step, 0 .. n_groups - 1.

    Returns
    -------
    numpy.ndarray of float64, shape (..., time)
        ``y[..., t] - ref[..., group[t]]``.
    """
    group = np.asarray(group, dtype=np.int64)
    ref = np.broadcast_to(ref, y.shape[:-1] + ref.shape[-1:])
    if group.shape != (y.shape[-1],) or (group < 0).any() or (group >= ref.shape[-1]).any():
        raise ValueError(f"group: expected {y.shape[-1]} labels below {ref.shape[-1]}")
    r = np.ascontiguousarray(ref.reshape(-1, ref.shape[-1]), dtype=np.float64)
    return _departures(_as_2d(y), r, group).reshape(y.shape)
