"""Screen the inputs: repeated and overlapping periods, implausible values, unit mislabels.

Pure functions on numpy arrays and lazy (dask-backed) xarray objects; nothing here computes.
The readers call them while opening an input (:func:`resolve_duplicates`,
:func:`find_overlaps`, :func:`check_kelvin_label`, :func:`count_marks`); the pipeline adds the
lazy counts of :func:`counts_for_months` to its one compute and turns the computed numbers
into per-month warnings and file attributes with :func:`month_numbers`.
"""

from __future__ import annotations

import hashlib
import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
import xarray as xr

from euphotic import units
from euphotic.errors import ConfigError, DuplicatePeriodError, InputFileError
from euphotic.roles import ROLES

log = logging.getLogger("euphotic")

DuplicateRule = Literal["error", "first", "last"]
DUPLICATE_RULES: tuple[str, ...] = ("error", "first", "last")

#: Plausible range of each input, in the units the models use (inclusive bounds). Values
#: outside are masked and counted. Override per input with ``valid_range = [lo, hi]``. The
#: ranges and their bases are those of the role catalogue (:data:`euphotic.roles.ROLES`,
#: ``valid_range`` and ``range_basis``).
DEFAULT_VALID_RANGE: dict[str, tuple[float, float]] = {
    r.name: r.valid_range for r in ROLES.values()
}

#: Kelvin window: temperatures of the sea surface written in kelvin lie in about 271-313 K;
#: a field whose valid values all lie in 250-320 cannot be in degC (no sea surface is at
#: 250 degC). Common practice for telling K from degC; the margins are ours.
KELVIN_LIKE = (250.0, 320.0)

#: Keys of ``[inputs.X]`` that this module reads.
INPUT_KEYS = frozenset({"duplicates", "valid_range"})


# ------------------------------------------------------------------------------------------
# configuration
# ------------------------------------------------------------------------------------------


def input_options(table: Mapping, role: str, where: str) -> dict:
    """The screening options of one ``[inputs.ROLE]`` table, as keyword arguments of
    :class:`euphotic.readers.InputSpec` (``duplicates``, ``valid_range``).

    Raises
    ------
    ConfigError
        Naming ``where`` (the file and table) and the key, for a value of the wrong kind.
    """
    out: dict = {}
    if "duplicates" in table:
        rule = table["duplicates"]
        if rule not in DUPLICATE_RULES:
            raise ConfigError(
                where, f"`duplicates` must be 'error', 'first' or 'last', not {rule!r}"
            )
        out["duplicates"] = rule
    if "valid_range" in table:
        vr = table["valid_range"]
        ok = (
            isinstance(vr, list)
            and len(vr) == 2
            and all(isinstance(v, int | float) and not isinstance(v, bool) for v in vr)
            and np.all(np.isfinite(vr))
            and vr[0] < vr[1]
        )
        if not ok:
            raise ConfigError(
                where,
                f"`valid_range` must be [low, high] with low < high (in {_units(role)}), "
                f"not {vr!r}",
            )
        out["valid_range"] = (float(vr[0]), float(vr[1]))
    return out


def _units(role: str) -> str:
    return ROLES[role].units


def valid_range(role: str, configured: tuple[float, float] | None = None) -> tuple[float, float]:
    """The range used for ``role``: the configured one, else :data:`DEFAULT_VALID_RANGE`."""
    return tuple(configured) if configured is not None else DEFAULT_VALID_RANGE[role]


# ------------------------------------------------------------------------------------------
# repeated and overlapping periods
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Duplicate:
    """Several time steps with the same period [start, end)."""

    start: np.datetime64  # datetime64[D]
    end: np.datetime64  # exclusive
    indices: tuple[int, ...]  # positions along the time axis, in time-axis order
    files: tuple[str, ...]  # the file of each position


@dataclass(frozen=True)
class Overlap:
    """Two periods that overlap without being identical (``a`` starts first)."""

    a: int
    b: int
    file_a: str
    file_b: str
    period_a: tuple[np.datetime64, np.datetime64]
    period_b: tuple[np.datetime64, np.datetime64]


def _days(x) -> np.ndarray:
    return np.asarray(x).astype("datetime64[D]")


def find_duplicates(starts, ends, files: Sequence[str]) -> list[Duplicate]:
    """Groups of time steps with identical periods, in order of period.

    Parameters
    ----------
    starts, ends : array of datetime64
        First day and day after the last day of each period (one per time step).
    files : sequence of str
        The file each time step comes from (same length).
    """
    s, e = _days(starts), _days(ends)
    groups: dict[tuple, list[int]] = {}
    for i, key in enumerate(zip(s.tolist(), e.tolist(), strict=True)):
        groups.setdefault(key, []).append(i)
    out = []
    for (a, b), idx in sorted(groups.items()):
        if len(idx) > 1:
            out.append(Duplicate(np.datetime64(a, "D"), np.datetime64(b, "D"), tuple(idx),
                                 tuple(files[i] for i in idx)))
    return out


def find_overlaps(starts, ends, files: Sequence[str]) -> list[Overlap]:
    """Pairs of periods that share at least one day but are not the same period.

    Sorted by the first period's start; a sweep over periods sorted by start, so a long
    daily series costs about one comparison per overlapping pair.
    """
    s, e = _days(starts), _days(ends)
    order = np.lexsort((e, s))
    ss, ee = s[order], e[order]
    out = []
    for k in range(len(order)):
        stop = int(np.searchsorted(ss, ee[k], side="left"))  # later starts before this end
        for m in range(k + 1, stop):
            if ss[m] == ss[k] and ee[m] == ee[k]:
                continue  # a duplicate, not an overlap
            i, j = int(order[k]), int(order[m])
            out.append(Overlap(i, j, files[i], files[j], (s[i], e[i]), (s[j], e[j])))
    return out


def _span(start, end) -> str:
    start, end = np.datetime64(start, "D"), np.datetime64(end, "D")
    return f"{start}..{end - 1}" if end - start > 1 else f"{start}"


def _identical_files(paths: Sequence[str]) -> bool:
    """True when the (distinct) files hold exactly the same bytes."""
    if len(set(paths)) != len(paths):
        return False  # time steps of one file: the same bytes say nothing about the values
    import os

    if len({os.path.getsize(p) for p in paths}) != 1:
        return False
    digests = set()
    for p in paths:
        h = hashlib.sha256()
        with open(p, "rb") as fh:
            for block in iter(lambda fh=fh: fh.read(1 << 20), b""):
                h.update(block)
        digests.add(h.hexdigest())
    return len(digests) == 1


def resolve_duplicates(
    starts, ends, files: Sequence[str], *, role: str, rule: DuplicateRule = "error"
) -> np.ndarray:
    """Positions along the time axis to keep, one per period.

    Byte-identical files with the same period are the same data: the first is kept and a
    warning says so. Otherwise ``rule`` decides: ``"error"`` raises, ``"first"`` / ``"last"``
    keep the time step whose file path sorts first / last (time-axis order among steps of one
    file), with one warning per period naming the file used.

    Raises
    ------
    DuplicatePeriodError
        With ``rule="error"``: naming the role, the (first) repeated period and every file.
    """
    dups = find_duplicates(starts, ends, files)
    keep = np.ones(len(files), bool)
    unresolved = []
    for d in dups:
        if _identical_files(d.files):
            keep[list(d.indices[1:])] = False
            log.warning("%s %s: %d identical files for one period; used %s", role,
                        _span(d.start, d.end), len(d.files), d.files[0])
            continue
        if rule == "error":
            unresolved.append(d)
            continue
        ranked = sorted(range(len(d.indices)), key=lambda k: (d.files[k], k))
        chosen = ranked[0] if rule == "first" else ranked[-1]
        for k, i in enumerate(d.indices):
            keep[i] = k == chosen
        others = ", ".join(f for k, f in enumerate(d.files) if k != chosen)
        log.warning('%s %s: %d files for one period; used %s (duplicates = "%s"), ignored %s',
                    role, _span(d.start, d.end), len(d.files), d.files[chosen], rule, others)
    if unresolved:
        d = unresolved[0]
        more = f" (and {len(unresolved) - 1} more repeated periods)" if len(unresolved) > 1 else ""
        raise DuplicatePeriodError(
            d.files[0],
            f"{role} period {_span(d.start, d.end)} is given {len(d.files)} times, by "
            f"{', '.join(d.files)}{more}; keep one file per period or set duplicates = "
            f'"first" or "last" in [inputs.{role}]',
        )
    return np.flatnonzero(keep)


def log_overlaps(starts, ends, files: Sequence[str], *, role: str) -> list[Overlap]:
    """Log once (warning) when periods of one input overlap, with the rule that applies."""
    found = find_overlaps(starts, ends, files)
    if found:
        n = len({i for o in found for i in (o.a, o.b)})
        o = found[0]
        log.warning(
            "%s: %d periods overlap others (e.g. %s %s and %s %s); for each day the shortest "
            "period covering it is used, then the one starting latest",
            role, n, o.file_a, _span(*o.period_a), o.file_b, _span(*o.period_b),
        )
    return found


# ------------------------------------------------------------------------------------------
# unit mislabels, from a small sample of values read when a file is opened
# ------------------------------------------------------------------------------------------


def check_kelvin_label(sample: np.ndarray, units_used: str, *, path: str, what: str,
                       role: str = "sst") -> None:
    """Raise when a temperature labelled Celsius can only be kelvin.

    Parameters
    ----------
    sample : numpy array
        Decoded values of the file in its own units (NaN where missing).
    units_used : str
        The units string the values are converted from (file attribute or config).
    what : str
        The variable's standard name (or name) for the message.

    Raises
    ------
    InputFileError
        When ``units_used`` is the Celsius scale and every valid value of ``sample`` lies in
        :data:`KELVIN_LIKE`.
    """
    v = np.asarray(sample, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return
    try:
        celsius = units.linear_factors(units_used, units.SST_UNITS) == (1.0, 0.0)
    except units.UnitError:
        return
    lo, hi = float(v.min()), float(v.max())
    if celsius and KELVIN_LIKE[0] <= lo and hi <= KELVIN_LIKE[1]:
        raise InputFileError(
            path,
            f"{what} values {lo:.1f}..{hi:.1f} look like kelvin but units say {units_used!r}; "
            f'fix the units attribute or set units = "K" in [inputs.{role}]',
        )


# ------------------------------------------------------------------------------------------
# out-of-range values: masked, counted lazily per period
# ------------------------------------------------------------------------------------------


@dataclass(eq=False)  # eq=False: comparing would compute the dask arrays
class LazyCounts:
    """Per-period counts of one input, lazy: ``totals`` is a dask array (time, 3) of int64
    holding, per period, the values below the valid range, above it (both masked) and within
    it. Missing values (NaN) are in none of them.
    """

    role: str
    lo: float
    hi: float
    units: str
    totals: object

    @property
    def below(self):
        return self.totals[:, 0]

    @property
    def above(self):
        return self.totals[:, 1]

    @property
    def valid(self):
        return self.totals[:, 2]

    @property
    def lo_hi(self) -> list[float]:
        return [self.lo, self.hi]


#: Bits of the NaN that marks a value below / above the plausible range, per float type (a
#: quiet NaN with payload 1 or 2; missing values are the plain quiet NaN).
_MARK_BITS = {np.dtype(np.float32): (np.uint32, 0x7FC00001, 0x7FC00002),
              np.dtype(np.float64): (np.uint64, 0x7FF8000000000001, 0x7FF8000000000002)}


def marks(dtype) -> tuple:
    """The (below, above) NaN marks of a float type: values screened out by the read path
    (:class:`euphotic.cfdecode.Decoder`) are these NaNs, so :func:`count_marks` can count
    them after the fact, without a separate masking pass. For every other purpose they are
    NaN like any other."""
    uint, lo, hi = _MARK_BITS[np.dtype(dtype)]
    v = np.array([lo, hi], dtype=uint).view(dtype)
    return v[0], v[1]


def _count_kernel(bits, below, above, magnitude, inf):  # pragma: no cover - compiled
    """(below, above, within) of one time step's values seen as unsigned integers; no
    branches, so the compiler vectorises the loop."""
    b = np.int64(0)
    a = np.int64(0)
    ok = np.int64(0)
    for i in range(bits.size):
        x = bits[i]
        b += x == below
        a += x == above
        ok += (x & magnitude) <= inf  # not a NaN
    return b, a, ok


def _marked_counts(x: np.ndarray) -> np.ndarray:
    """Counts of one block (time, lat, lon) of marked values: (time, 1, 1, 3) of below,
    above, within (finite values; plain NaN is in none)."""
    from euphotic.jit import compiled

    count = compiled(_count_kernel)
    uint, lo, hi = _MARK_BITS[x.dtype]
    bits = np.ascontiguousarray(x).view(uint).reshape(x.shape[0], -1)
    inf = np.array(np.inf, x.dtype).view(uint)[()]
    magnitude = uint(~(uint(1) << uint(8 * x.dtype.itemsize - 1)))  # all but the sign bit
    out = np.zeros((x.shape[0], 1, 1, 3), np.int64)
    for t in range(x.shape[0]):
        if bits.shape[1]:
            out[t, 0, 0] = count(bits[t], uint(lo), uint(hi), magnitude, inf)
    return out


def count_marks(da: xr.DataArray, *, role: str, lo: float, hi: float) -> LazyCounts:
    """Lazy per-period counts of ``da`` (time, lat, lon), whose values outside [lo, hi] the
    read path (:mod:`euphotic.lazyread`) has already set to marked NaN (:func:`marks`): one
    small counting task per block, and no masking pass."""
    import dask.array as dsa

    data = da.data if isinstance(da.data, dsa.Array) else dsa.from_array(np.asarray(da.data))
    per_block = dsa.blockwise(
        _marked_counts, "tyxk", data, "tyx", new_axes={"k": 3}, dtype=np.int64,
        adjust_chunks={"y": lambda _: 1, "x": lambda _: 1},
        meta=np.empty((0, 0, 0, 0), np.int64),
    )
    # one task per time block sums the counts of all its blocks (tiny arrays, given to it
    # together): a reduction would add a task per block
    totals = dsa.blockwise(_sum_counts, "tk", per_block, "tyxk", concatenate=True,
                           dtype=np.int64, meta=np.empty((0, 0), np.int64))
    return LazyCounts(role=role, lo=float(lo), hi=float(hi),
                      units=str(da.attrs.get("units", _units(role))), totals=totals)


def _sum_counts(counts: np.ndarray) -> np.ndarray:
    """(time, blocks along lat, blocks along lon, 3) counts -> (time, 3)."""
    return counts.sum(axis=(1, 2))


def periods_of_months(starts, ends, months: Sequence[np.datetime64]) -> dict:
    """For each month (datetime64[M]), the sorted positions of the periods whose values
    stand for at least one of its days (the rule of :func:`euphotic.aggregate.day_to_period`)."""
    from euphotic.aggregate import day_to_period, month_days

    out = {}
    for m in months:
        idx = day_to_period(starts, ends, month_days(m))
        out[np.datetime64(m, "M")] = np.unique(idx[idx >= 0])
    return out


def counts_for_months(da: xr.DataArray, months: Sequence[np.datetime64]):
    """Lazy counts of the periods used for ``months`` (those periods only, so a batch of
    months reads no other chunk): ``(positions, [[below, above, valid] per position])``
    with 0-d dask arrays, or None when ``da`` carries no counts.

    Small separate targets, not one array gathering them: a target needing every period (an
    indexed array, or even one (3,) array per period) made the scheduler read a batch's
    blocks ahead of the model and keep them all in memory (measured on the demo with dask
    2026.8: 36 MB of blocks held at the peak instead of 4 MB without screening; with 0-d
    targets, 4 MB).
    """
    c = da.attrs.get("screen_counts")
    if c is None:
        return None
    per = periods_of_months(da["period_start"].values, da["period_end"].values, months)
    pos = np.unique(np.concatenate([np.asarray(v, np.int64) for v in per.values()] or [[]]))
    pos = pos.astype(np.int64)
    return pos, [[c.totals[int(p), k] for k in range(3)] for p in pos]


@dataclass
class MonthNumbers:
    """Screening numbers of one input and one month (plain numbers, after the compute)."""

    role: str
    month: np.datetime64
    lo: float
    hi: float
    units: str
    below: int
    above: int
    valid: int

    @property
    def masked(self) -> int:
        return self.below + self.above

    @property
    def fraction(self) -> float:
        n = self.masked + self.valid
        return self.masked / n if n else 0.0

    def message(self) -> str:
        """One line, e.g. ``chl 2025-04: 1,234 values above 100 mg m-3 masked (0.3 %)``."""
        parts = []
        if self.below:
            parts.append(f"{_n_values(self.below)} below {self.lo:g} {self.units}")
        if self.above:
            parts.append(f"{_n_values(self.above)} above {self.hi:g} {self.units}")
        return f"{self.role} {self.month}: {' and '.join(parts)} masked ({100 * self.fraction:.1f} %)"

    def attrs(self) -> dict:
        """Global attributes for a month's output file."""
        r = self.role
        return {
            f"screen_{r}_values_below_range": np.int64(self.below),
            f"screen_{r}_values_above_range": np.int64(self.above),
            f"screen_{r}_values_in_range": np.int64(self.valid),
        }


def _split(computed) -> tuple:
    pos, counts = computed
    counts = np.asarray(counts, dtype=np.int64).reshape(-1, 3)
    return np.asarray(pos, np.int64), counts[:, 0], counts[:, 1], counts[:, 2]


def _n_values(n: int) -> str:
    return f"{n:,} value" + ("" if n == 1 else "s")


def month_numbers(da: xr.DataArray, months: Sequence[np.datetime64], computed) -> list[MonthNumbers]:
    """Per-month numbers from ``computed = (positions, counts (n, 3))``: the positions of
    :func:`counts_for_months` and its computed counts stacked."""
    c = da.attrs["screen_counts"]
    pos, below, above, valid = _split(computed)
    at = {int(p): k for k, p in enumerate(pos)}
    per = periods_of_months(da["period_start"].values, da["period_end"].values, months)
    out = []
    for m, idx in per.items():
        k = [at[int(i)] for i in idx]
        out.append(MonthNumbers(c.role, m, c.lo, c.hi, c.units, int(np.sum(below[k])),
                                int(np.sum(above[k])), int(np.sum(valid[k]))))
    return out


def file_notes(da: xr.DataArray, computed) -> list[tuple[str, str]]:
    """(file, note) for files with no value within the valid range after the compute: all
    missing, or all out of range (probably wrong units)."""
    c = da.attrs["screen_counts"]
    files = da.attrs.get("period_files")
    if files is None:
        return []
    pos, below, above, valid = _split(computed)
    starts = _days(da["period_start"].values)
    ends = _days(da["period_end"].values)
    by_file: dict[str, list] = {}
    for k, p in enumerate(pos):
        by_file.setdefault(files[int(p)], []).append(k)
    out = []
    for f, ks in by_file.items():
        if sum(int(valid[k]) for k in ks):
            continue
        b, a = sum(int(below[k]) for k in ks), sum(int(above[k]) for k in ks)
        spans = ", ".join(sorted({_span(starts[pos[k]], ends[pos[k]]) for k in ks}))
        if a + b == 0:
            out.append((f, f"{f}: {c.role} has no valid value ({spans}): every value is missing"))
        else:
            out.append((f, f"{f}: every {c.role} value ({spans}) is outside {c.lo:g}..{c.hi:g} "
                            f"{c.units} ({b:,} below, {a:,} above) and masked; check the file's "
                            f"units or valid_range in [inputs.{c.role}]"))
    return out


class Report:
    """Collects the screening of a run's batches: one warning per input and month with
    masked values, one per file with no valid value, and the attributes of each month's file."""

    def __init__(self, inputs: Mapping[str, xr.DataArray | None]):
        self.inputs = {r: d for r, d in inputs.items() if d is not None
                       and d.attrs.get("screen_counts") is not None}
        self._noted: set[str] = {f for d in self.inputs.values()
                                  for f in d.attrs.get("empty_files", [])}

    def static_attrs(self) -> dict:
        """Attributes known before the compute: each input's valid range in model units."""
        return {f"screen_{r}_valid_range": np.array(d.attrs["screen_counts"].lo_hi)
                for r, d in self.inputs.items()}

    def lazy(self, months: Sequence[np.datetime64]) -> list:
        """The lazy counts of a batch of months, to compute with the batch's graph: a list
        (per input, ``[below, above, valid]`` 0-d dask arrays per period used)."""
        self._pos = {}
        out = []
        for r, d in self.inputs.items():
            pos, per_period = counts_for_months(d, months)
            self._pos[r] = pos
            out.append(per_period)
        return out

    def finish(self, months: Sequence[np.datetime64], computed: Sequence) -> dict:
        """Log the warnings of a batch (given the computed :meth:`lazy`) and return
        ``{month (datetime64[M]): file attributes}``."""
        attrs: dict = {np.datetime64(m, "M"): {} for m in months}
        for (r, d), per_period in zip(self.inputs.items(), computed, strict=True):
            got = (self._pos[r], per_period)
            for n in month_numbers(d, months, got):
                if n.masked:
                    log.warning("%s", n.message())
                attrs[n.month].update(n.attrs())
            for f, note in file_notes(d, got):
                if f not in self._noted:
                    self._noted.add(f)
                    log.warning("%s", note)
        return attrs


def record_in_file(path, attrs: Mapping, fmt: str) -> None:
    """Add global attributes to a finished (still temporary) output file or Zarr store."""
    if not attrs:
        return
    if fmt == "zarr":
        import zarr

        g = zarr.open_group(str(path), mode="r+")
        g.attrs.update({k: (v.tolist() if isinstance(v, np.ndarray | np.generic) else v)
                        for k, v in attrs.items()})
        zarr.consolidate_metadata(str(path))
        return
    import netCDF4

    with netCDF4.Dataset(path, "a") as ds:
        for k, v in attrs.items():
            ds.setncattr(k, v)
