"""The spread of several models: per-cell and per-region statistics across the models of a
run. Pure compute: arrays in, arrays out, no I/O (the files are written by
:mod:`euphotic.ensemble_outputs`).

Any number of models (two or more) can form an ensemble; nothing here knows a model by name.

The rule for a cell (or a region-month) is *all members or nothing*: the statistics are given
only where every model of the ensemble has a valid value. A mean over the models that happen
to have a value would mix different sets of models from cell to cell (and a single model
would pass for an ensemble); so where some models are missing the statistics are NaN, and
``n_models`` says how many models did have a value there.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from euphotic.errors import EuphoticError
from euphotic.models._compiled import use_compiled

#: The model dimension of the members.
MODEL_DIM = "model"
#: Delta degrees of freedom of the standard deviation across models: the sample standard
#: deviation (divisor N - 1), as the models are a sample of the possible ones.
DDOF = 1
#: The rule, in words, for attributes and table metadata.
RULE = ("statistics across models only where every model of the ensemble has a valid value "
        "(elsewhere NaN, with n_models the number of models that have one); standard deviation "
        f"with ddof={DDOF} (divisor N - 1); coefficient of variation = standard deviation / "
        "mean, NaN where the mean is 0")

#: Flag of a region-month whose statistics are left out because a model has no total there.
FLAG_MISSING = "missing"
#: Flag (kept with the statistics) of a region-month whose models' totals are sums over
#: observed areas that differ by more than :data:`AREA_RTOL`.
FLAG_AREA_DIFFERS = "observed_area_differs"
#: Relative difference of observed areas beyond which the models' totals are flagged as
#: summed over different cells (this tool's choice).
AREA_RTOL = 0.01


class EnsembleError(EuphoticError):
    """Members that cannot form an ensemble (fewer than two, or on different grids)."""


def _stack(members: xr.DataArray | Sequence[xr.DataArray], dim: str) -> xr.DataArray:
    """The members as one DataArray with the model dimension ``dim``."""
    if isinstance(members, xr.DataArray):
        if dim not in members.dims:
            raise EnsembleError(f"the members have no {dim!r} dimension (dims {members.dims})")
        return members
    members = list(members)
    for i, m in enumerate(members):
        if not isinstance(m, xr.DataArray):
            raise EnsembleError(f"member {i} is a {type(m).__name__}, not an xarray.DataArray")
    if len(members) >= 2:
        ref = members[0]
        for i, m in enumerate(members[1:], start=1):
            if m.dims != ref.dims or m.shape != ref.shape or any(
                    c in m.coords and c in ref.coords
                    and not np.array_equal(m[c].values, ref[c].values) for c in m.dims):
                raise EnsembleError(
                    f"member {i} is on another grid (dims {m.dims}, shape {m.shape}) than "
                    f"member 0 (dims {ref.dims}, shape {ref.shape})")
    names = [str(m.coords[dim].item()) if dim in m.coords and m.coords[dim].size == 1
             else str(m.name or i) for i, m in enumerate(members)]
    members = [m.drop_vars(dim, errors="ignore") for m in members]
    return xr.concat(members, dim=dim, coords="minimal", compat="override",
                     join="override").assign_coords({dim: names})


def map_statistics(members: xr.DataArray | Sequence[xr.DataArray], *,
                   dim: str = MODEL_DIM) -> xr.Dataset:
    """Per-cell statistics of production maps across models.

    Parameters
    ----------
    members : the models' maps (mg m-2 d-1 of carbon, or any one unit), either one DataArray
        with the model dimension ``dim`` or a list of DataArrays on the same grid (numpy or
        dask backed; a list is stacked along a new ``dim``, named by each member's scalar
        ``model`` coordinate or its name)
    dim : the model dimension

    Returns
    -------
    xarray.Dataset
        On the members' grid without ``dim``: ``npp_mean``, ``npp_min``, ``npp_max``,
        ``npp_std`` (the members' unit), ``npp_cv`` (1) as float64, and ``n_models`` (int16,
        number of models with a valid value in the cell). Lazy when the members are dask
        backed. Each variable's ``ensemble_rule`` attribute states :data:`RULE`.

    Raises
    ------
    EnsembleError
        Fewer than two members, or members on different grids.

    Notes
    -----
    With N the number of models and x_i their values in a cell, where all N are finite:
    mean = sum x_i / N; min, max over i; std = sqrt(sum (x_i - mean)^2 / (N - 1));
    cv = std / mean (NaN where mean = 0: in polar night every model gives 0). Elsewhere all
    five are NaN. Arithmetic is float64 whatever the members' type.
    """
    x = _stack(members, dim)
    n = x.sizes[dim]
    if n < 2:
        raise EnsembleError(f"an ensemble needs at least two models, not {n}")
    if use_compiled():
        # one compiled pass over the models of each cell (what follows, fused)
        if x.chunks is not None:
            x = x.chunk({dim: -1})  # the models of a cell in one block
        stacked = xr.apply_ufunc(
            _stats_block, x, input_core_dims=[[dim]], output_core_dims=[["statistic"]],
            dask="parallelized", output_dtypes=[np.float64],
            dask_gufunc_kwargs={"output_sizes": {"statistic": len(_STATISTICS)}})
        out = xr.Dataset({name: stacked.isel(statistic=i, drop=True)
                          for i, name in enumerate(_STATISTICS)})
        out["n_models"] = out["n_models"].astype(np.int16)
    else:
        x = x.astype(np.float64)
        n_valid = x.notnull().sum(dim).astype(np.int16)
        complete = n_valid == n
        mean = x.mean(dim, skipna=False).where(complete)
        std = x.std(dim, ddof=DDOF, skipna=False).where(complete)
        lo = x.min(dim, skipna=False).where(complete)
        hi = x.max(dim, skipna=False).where(complete)
        cv = (std / mean.where(mean != 0)).where(complete)
        out = xr.Dataset({"npp_mean": mean, "npp_min": lo, "npp_max": hi, "npp_std": std,
                          "npp_cv": cv, "n_models": n_valid})
    models = [str(m) for m in x[dim].values] if dim in x.coords else []
    for v in out.data_vars.values():
        v.attrs = {"ensemble_rule": RULE, "ensemble_models": " ".join(models),
                   "ensemble_size": np.int16(n)}
    out["npp_std"].attrs["ddof"] = np.int16(DDOF)
    return out


#: The per-cell statistics in the order :func:`_stats_block` returns them.
_STATISTICS = ("npp_mean", "npp_min", "npp_max", "npp_std", "npp_cv", "n_models")


def _stats_loop(x, out):
    """Statistics across the last axis of ``x`` (cells, models) into ``out`` (cells, 6),
    float64, by the rule of :func:`map_statistics` (compiled)."""
    n = x.shape[1]
    for j in range(x.shape[0]):
        count, total = 0, 0.0
        lo, hi = np.inf, -np.inf
        for i in range(n):
            v = np.float64(x[j, i])
            if v == v:  # not NaN
                count += 1
                total += v
                lo = min(lo, v)
                hi = max(hi, v)
        out[j, 5] = count
        if count < n:
            for k in range(5):
                out[j, k] = np.nan
            continue
        mean = total / n
        ss = 0.0
        for i in range(n):
            d = np.float64(x[j, i]) - mean
            ss += d * d
        std = np.sqrt(ss / (n - DDOF))
        out[j, 0] = mean
        out[j, 1] = lo
        out[j, 2] = hi
        out[j, 3] = std
        out[j, 4] = std / mean if mean != 0.0 else np.nan


_stats_jit = None


def _stats_block(x: np.ndarray) -> np.ndarray:
    """(..., models) -> (..., 6) float64: :data:`_STATISTICS` of each cell."""
    global _stats_jit
    if _stats_jit is None:
        import numba

        _stats_jit = numba.njit(nogil=True, cache=True)(_stats_loop)
    flat = np.ascontiguousarray(x).reshape(-1, x.shape[-1])
    out = np.empty((flat.shape[0], len(_STATISTICS)), dtype=np.float64)
    _stats_jit(flat, out)
    return out.reshape(*x.shape[:-1], len(_STATISTICS))


def _flag_codes(flags) -> set[str]:
    return {c for c in str(flags).split(";") if c and c != "nan"}


def total_statistics(total: xr.DataArray, flag: xr.DataArray | None = None,
                     observed_area: xr.DataArray | None = None, *,
                     dim: str = MODEL_DIM) -> xr.Dataset:
    """Per region and month: statistics of the models' regional totals.

    Parameters
    ----------
    total : the models' totals with the model dimension ``dim`` (e.g. ``(region, month,
        model)`` of :func:`euphotic.results.open_totals`, Tg of carbon; any unit), NaN where a
        model has none
    flag : the rows' quality codes (text, separated by ";", "" when fine), same shape
    observed_area : the area each model's total was summed over (any unit), same shape

    Returns
    -------
    xarray.Dataset
        Without ``dim``: ``mean``, ``min``, ``max``, ``std`` (ddof 1), ``cv`` (1) in float64;
        ``n_models`` (int, number of models with a total); ``min_model``, ``max_model`` (the
        model giving the minimum and maximum, "" without statistics); ``flag`` (text).

    Notes
    -----
    A region-month is given statistics only when every model has a total and no model's row is
    flagged (a model whose numbers rest on few days, or on none, would set the spread). Else
    the statistics are NaN and ``flag`` says why: ``<code>:<model>`` for each flagged model
    (its own code, e.g. ``low_coverage:vgpm``), ``missing:<model>`` for a model without a
    total. ``observed_area_differs`` (statistics kept) marks totals summed over areas that
    differ by more than :data:`AREA_RTOL` between models: their spread is partly one of
    coverage, not of the models.
    """
    if dim not in total.dims:
        raise EnsembleError(f"the totals have no {dim!r} dimension (dims {total.dims})")
    n = total.sizes[dim]
    if n < 2:
        raise EnsembleError(f"an ensemble needs at least two models, not {n}")
    t = total.transpose(dim, ...).astype(np.float64)
    vals = np.asarray(t.values)
    models = [str(m) for m in t[dim].values] if dim in t.coords else [str(i) for i in range(n)]
    flags = (np.asarray(flag.transpose(dim, ...).values, dtype=object) if flag is not None
             else np.full(vals.shape, "", dtype=object))
    area = (np.asarray(observed_area.transpose(dim, ...).values, dtype=np.float64)
            if observed_area is not None else None)
    rest = vals.shape[1:]
    n_valid = np.isfinite(vals).sum(axis=0)
    why = np.full(rest, "", dtype=object)
    ok = np.ones(rest, dtype=bool)
    for idx in np.ndindex(rest):
        codes = []
        for i, m in enumerate(models):
            own = sorted(_flag_codes(flags[(i, *idx)]))
            codes += [f"{c}:{m}" for c in own]  # a flagged row says itself why it is empty
            if not own and not np.isfinite(vals[(i, *idx)]):
                codes.append(f"{FLAG_MISSING}:{m}")
        if codes:
            ok[idx] = False
        elif area is not None:
            a = area[(slice(None), *idx)]
            if np.nanmax(a) - np.nanmin(a) > AREA_RTOL * np.nanmax(a):
                codes.append(FLAG_AREA_DIFFERS)
        why[idx] = ";".join(codes)
    with np.errstate(invalid="ignore", divide="ignore"):
        good = np.where(ok, 1.0, np.nan)
        mean = vals.mean(axis=0) * good
        std = vals.std(axis=0, ddof=DDOF) * good
        lo = vals.min(axis=0) * good
        hi = vals.max(axis=0) * good
        cv = np.where(mean != 0, std / np.where(mean != 0, mean, 1.0), np.nan)
    lo_m = np.full(rest, "", dtype=object)
    hi_m = np.full(rest, "", dtype=object)
    for idx in zip(*np.nonzero(ok), strict=True):
        col = vals[(slice(None), *idx)]
        lo_m[idx] = models[int(np.argmin(col))]
        hi_m[idx] = models[int(np.argmax(col))]
    dims = t.dims[1:]
    coords = {c: v for c, v in t.coords.items() if dim not in v.dims and c != dim}
    rule = ("statistics only where every model has a total and no model's row is flagged; "
            f"std with ddof={DDOF}; cv = std / mean")
    units = {"units": total.attrs["units"]} if "units" in total.attrs else {}
    return xr.Dataset(
        {"mean": (dims, mean, {"long_name": "mean across models", **units}),
         "min": (dims, lo, {"long_name": "minimum across models", **units}),
         "max": (dims, hi, {"long_name": "maximum across models", **units}),
         "std": (dims, std, {"long_name": "standard deviation across models", "ddof": DDOF,
                             **units}),
         "cv": (dims, cv, {"long_name": "coefficient of variation across models (std / mean)",
                           "units": "1"}),
         "n_models": (dims, n_valid.astype(np.int64),
                      {"long_name": "number of models with a total"}),
         "min_model": (dims, lo_m.astype(str), {"long_name": "model giving the minimum"}),
         "max_model": (dims, hi_m.astype(str), {"long_name": "model giving the maximum"}),
         "flag": (dims, why.astype(str), {"long_name": "why statistics are left out (codes "
                                          "separated by ';'), empty when fine"})},
        coords=coords,
        attrs={"ensemble_models": " ".join(models), "ensemble_size": n, "ensemble_rule": rule},
    )


def with_ensemble_mean(totals: xr.Dataset, *, name: str = "ensemble",
                       dim: str = MODEL_DIM) -> xr.Dataset:
    """The totals Dataset (``(region, month, model)`` of :func:`euphotic.results.open_totals`
    or of :func:`euphotic.compare.filled_totals`) with one more entry along ``dim``, ``name``:
    the mean across the models, so that every comparison made per model is made for the
    ensemble mean too.

    For the ensemble, each number is the mean of the models' where every model has one (NaN
    elsewhere), except ``coverage`` (and any ``*_fraction``): the smallest of the models' (the
    coverage rule then holds for the ensemble as for its weakest member). Text variables
    (``flag``) get the models' codes, each once. A Dataset with fewer than two models is
    returned unchanged.
    """
    if dim not in totals.dims or totals.sizes[dim] < 2:
        return totals
    n = totals.sizes[dim]
    parts = {}
    for v, da in totals.data_vars.items():
        if dim not in da.dims:
            continue
        if da.dtype.kind in "USO":
            da = da.transpose(dim, ...)
            vals = np.asarray(da.values, dtype=object)
            joined = np.empty(vals.shape[1:], dtype=object)
            for idx in np.ndindex(joined.shape):
                codes = [c for i in range(n) for c in str(vals[(i, *idx)]).split(";") if c]
                joined[idx] = ";".join(dict.fromkeys(codes))
            parts[v] = xr.DataArray(joined.astype(str), dims=da.dims[1:])
        elif v == "coverage" or str(v).endswith("_fraction"):
            parts[v] = da.min(dim, skipna=False)
        else:
            parts[v] = da.mean(dim, skipna=False).where(da.notnull().sum(dim) == n)
    extra = xr.Dataset(parts).expand_dims({dim: [name]})
    for v in extra.data_vars:
        extra[v].attrs = totals[v].attrs
    out = xr.concat([totals, extra], dim=dim, data_vars="minimal", coords="minimal",
                    compat="override", join="outer")
    out = out.assign_coords({dim: np.array([str(m) for m in out[dim].values], dtype=str)})
    out.attrs = totals.attrs
    return out


def spread(values, axis: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean, minimum and maximum across models along ``axis`` of a numpy array, each NaN
    where some model has no value (the rule of this module): for lines and bands in figures.
    """
    x = np.asarray(values, dtype=np.float64)
    complete = np.isfinite(x).all(axis=axis)
    with np.errstate(invalid="ignore"):
        mean = np.where(complete, x.mean(axis=axis), np.nan)
        lo = np.where(complete, x.min(axis=axis), np.nan)
        hi = np.where(complete, x.max(axis=axis), np.nan)
    return mean, lo, hi
