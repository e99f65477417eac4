"""CF decoding and units: from stored values to values in the model's units.

Fill values and ``missing_value``, ``scale_factor``/``add_offset`` (CF packing), the file's
valid range (``valid_min``/``valid_max``/``valid_range``, stated in the packed type on packed
data) and the conversion to the role's units (:mod:`euphotic.units`). The xarray forms here
(:func:`decode_raw`, :func:`apply_valid_range`, :func:`convert_units`) are the reference; the
read path applies the same operations in one compiled pass per stored chunk
(:func:`decoder_for`, :class:`euphotic.lazyread.Decoder`), tested identical. Also the
open-time look at a sample of temperature values (a kelvin field labelled Celsius).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from euphotic import screen, units
from euphotic.errors import InputFileError
from euphotic.inputfiles import TARGET_UNITS, InputSpec
from euphotic.jit import compiled
from euphotic.roles import role

#: Encoding attributes that CF decoding needs (xarray keeps them in ``encoding``).
CF_CODING_KEYS = ("_FillValue", "missing_value", "scale_factor", "add_offset", "_Unsigned")


def valid_thresholds(enc: dict, attrs: dict, dtype=None) -> tuple[float | None, float | None]:
    """The file's valid range (valid_min/valid_max/valid_range) as thresholds on decoded
    values, widened by a relative 1e-9 so the stated limits themselves pass; None: no limit.
    ``dtype``: the decoded type (for telling packed from unpacked limits when the encoding
    does not say the stored type)."""
    lo, hi = attrs.get("valid_min"), attrs.get("valid_max")
    vr = attrs.get("valid_range")
    if vr is not None and np.size(vr) == 2:
        lo, hi = vr[0], vr[1]
    if lo is None and hi is None:
        return None, None
    scale = enc.get("scale_factor", 1.0)
    offset = enc.get("add_offset", 0.0)
    packed_dtype = np.dtype(enc.get("dtype", dtype))
    packed = "scale_factor" in enc or "add_offset" in enc

    def unpack(v):
        v = np.asarray(v)
        # NUG/CF: on packed data the valid range is stated in the packed (stored) type.
        if packed and (
            v.dtype == packed_dtype or packed_dtype.kind in "iu" and v.dtype.kind in "iu"
        ):
            return float(v) * float(scale) + float(offset)
        return float(v)

    return (None if lo is None else unpack(lo) - 1e-9 * abs(unpack(lo)),
            None if hi is None else unpack(hi) + 1e-9 * abs(unpack(hi)))


def apply_valid_range(da: xr.DataArray, enc: dict, attrs: dict) -> xr.DataArray:
    """Mask values outside valid_min/valid_max/valid_range (compared in unpacked units)."""
    lo, hi = valid_thresholds(enc, attrs, da.dtype)
    return _where_valid(da, lo, hi)


def _where_valid(da, lo, hi):
    cond = None
    if lo is not None:
        cond = da >= lo
    if hi is not None:
        c2 = da <= hi
        cond = c2 if cond is None else cond & c2
    return da if cond is None else da.where(cond)


def unit_factors(spec: InputSpec, given, path: str, name: str) -> tuple[float, float]:
    """``(a, b)`` with ``value_in_model_units = value * a + b`` for values in ``given`` units;
    a one-line :class:`InputFileError` naming the file when the units are missing or unknown."""
    if given is None or not str(given).strip():
        raise InputFileError(
            path, f"variable {name!r} has no units attribute; set `units` in the config"
        )
    try:
        if role(spec.role).conversion == "light":
            factor, _kind = units.par_factors(given)
            return float(factor), 0.0
        a, b = units.linear_factors(given, TARGET_UNITS[spec.role])
        return float(a), float(b)
    except units.UnitError as exc:
        raise InputFileError(
            path, f"variable {name!r}: {exc} (expected units like {TARGET_UNITS[spec.role]!r})"
        ) from None


def convert_units(da: xr.DataArray, spec: InputSpec, path: str, name: str) -> xr.DataArray:
    """``da`` in the model's units (xarray form of :func:`unit_factors`)."""
    a, b = unit_factors(spec, spec.units or da.attrs.get("units"), path, name)
    return _scale(da, a, b)


def _scale(x, a, b):
    if a != 1.0:
        x = x * a
    if b != 0.0:
        x = x + b
    return x


def conversion_text(spec: InputSpec, given: str) -> str:
    """How values are converted, e.g. ``"K -> degC (- 273.15)"`` or ``"none"``."""
    target = TARGET_UNITS[spec.role]
    try:
        if role(spec.role).conversion == "light":
            (a, kind), b = units.par_factors(given), 0.0
            if kind == "energy":
                return (f"{given} -> {target} (x {a:g}: 4.57 umol J-1 for daylight PAR, "
                        "McCree 1972, and 86400 s d-1)")
        else:
            a, b = units.linear_factors(given, target)
    except units.UnitError:
        return "unknown"
    if a == 1.0 and b == 0.0:
        return "none"
    ops = ([f"x {a:g}"] if a != 1.0 else []) + (
        [f"{'-' if b < 0 else '+'} {abs(b):g}"] if b != 0.0 else [])
    return f"{given} -> {target} ({', '.join(ops)})"



#: Cells read per axis for the open-time sample of a contiguous (unchunked) variable.
SAMPLE_CELLS = 256


def sample_index(shape, dims, chunks, lat_d: str, lon_d: str) -> tuple[tuple, bool]:
    """Index of the stored chunk holding the centre of the first time step (a centre block for
    unchunked data), and whether that covers the whole time step."""
    idx, whole = [], True
    for d, n, c in zip(dims, shape, chunks or [None] * len(shape), strict=True):
        if d in (lat_d, lon_d):
            size = c or min(n, SAMPLE_CELLS)
            a = (n // 2 // size) * size if c else max(0, n // 2 - size // 2)
            idx.append(slice(a, min(n, a + size)))
            whole &= size >= n
        else:
            idx.append(0)
    return tuple(idx), whole


def decoded_sample(raw: np.ndarray, dims, name: str, enc: dict, attrs: dict) -> np.ndarray:
    """CF-decoded values of a raw sample, with the file's valid range applied."""
    coding = {k: enc[k] for k in CF_CODING_KEYS if k in enc}
    var = xr.conventions.decode_cf_variable(
        name, xr.Variable(dims, np.asarray(raw), attrs=coding), mask_and_scale=True,
        decode_times=False)
    da = xr.DataArray(np.asarray(var.values, dtype=np.float64), dims=dims)
    return np.asarray(apply_valid_range(da, enc, attrs).values)


def check_sample(spec: InputSpec, path: str, values: np.ndarray, whole: bool, n_steps: int,
                  units_used: str, what: str, empty: list) -> None:
    """Open-time checks on a sample of a temperature file (a role with ``kelvin_check``): a
    kelvin field labelled Celsius is an error; a sample that covers the whole (single) time
    step and holds no value is noted."""
    screen.check_kelvin_label(values, units_used, path=path, what=what, role=spec.role)
    if whole and n_steps == 1 and not np.isfinite(values).any():
        screen.log.warning("%s: %s has no valid value: every value is missing", path, spec.role)
        empty.append(path)


def decode_raw(raw, dims, name: str, enc: dict):
    """CF decoding (fill values, scale/offset) of raw stored values, as the library path does."""
    coding = {k: enc[k] for k in CF_CODING_KEYS if k in enc}
    if raw.dtype.kind == "f" and all(k == "_FillValue" and np.isnan(v) for k, v in coding.items()):
        return raw  # float with NaN fill (or none): nothing to decode
    var = xr.Variable(dims, raw, attrs=coding)
    return xr.conventions.decode_cf_variable(
        name, var, mask_and_scale=True, decode_times=False
    ).data


# ------------------------------------------------------------------------------------------
# the per-chunk form: one compiled pass
# ------------------------------------------------------------------------------------------

def _kernel(raw, out, fills, n_fills, params):  # pragma: no cover - compiled
    """raw -> out in one pass: NaN where raw equals one of the first ``n_fills`` (at most 2)
    fill values; * scale, + offset; NaN outside the file's [lo, hi]; * a, + b; then values
    outside the plausible range [s_lo, s_hi] become NaN marked below or above
    (:func:`euphotic.screen.marks`). ``params`` (scale, offset, lo, hi, a, b, NaN, s_lo, s_hi,
    below, above) and ``out`` share the floating type every operation is done in; a step that
    does not apply has neutral values (1, 0, -inf, inf). Written without branches so that the
    compiler vectorises it."""
    scale, offset, lo, hi, a, b = params[0], params[1], params[2], params[3], params[4], params[5]
    nan, s_lo, s_hi, below, above = params[6], params[7], params[8], params[9], params[10]
    f0, f1 = fills[0], fills[1]
    use0, use1 = n_fills > 0, n_fills > 1
    for i in range(raw.size):
        r = raw[i]
        hit = (use0 & (r == f0)) | (use1 & (r == f1))
        out[i] = r
        v = out[i] * scale
        v = v + offset
        ok = (v >= lo) & (v <= hi) & (not hit)  # NaN (stored or unpacked) fails too
        w = v * a
        w = w + b
        w = below if w < s_lo else w
        w = above if w > s_hi else w
        out[i] = w if ok else nan


@dataclass(frozen=True)
class Decoder:
    """How stored values become values in the model's units (picklable, hashable).

    ``fills``: stored values that mean missing (``_FillValue`` and ``missing_value``);
    ``scale``/``offset``: CF packing (None: absent); ``lo``/``hi``: the file's valid range as
    thresholds in unpacked units (None: absent); ``a``/``b``: the unit conversion
    ``value * a + b``; ``dtype``: the floating type every operation is done in (the one
    xarray's CF decoding gives), which is also the result's; ``screen``: the plausible range
    in model units (:func:`euphotic.screen.valid_range`), values outside it become NaN marked
    below or above, for :func:`euphotic.screen.count_marks` to count.
    """

    raw_dtype: str
    dtype: str
    fills: tuple = ()
    scale: float | None = None
    offset: float | None = None
    lo: float | None = None
    hi: float | None = None
    a: float = 1.0
    b: float = 0.0
    screen: tuple | None = None
    #: CF coding attributes, as items, for the xarray form (types the compiled pass does not
    #: take: unsigned, integers left undecoded, fill values or factors wider than ``dtype``)
    generic: tuple | None = None

    def __call__(self, raw: np.ndarray) -> np.ndarray:
        if self.generic is not None:
            return self._xarray(raw)
        dt = np.dtype(self.dtype)
        src = np.ascontiguousarray(raw)
        out = np.empty(src.shape, dtype=dt)
        rd = src.dtype
        fills = [f for f in self.fills if not np.isnan(f)]
        s_lo, s_hi = self.screen or (-np.inf, np.inf)
        below, above = screen.marks(dt)
        kernel = compiled(_kernel)
        if kernel is None or len(fills) > 2:  # pragma: no cover - numba is a dependency
            flags = [self.scale is not None, self.offset is not None, self.lo is not None,
                     self.hi is not None, self.a != 1.0, self.b != 0.0]
            params = np.array([self.scale or 0, self.offset or 0, self.lo or 0, self.hi or 0,
                               self.a, self.b], dtype=dt)
            return self._mark(self._numpy(src, out, fills, params, flags))
        farr = np.zeros(2, dtype=rd)
        farr[:len(fills)] = fills
        params = np.array([1.0 if self.scale is None else self.scale,
                           0.0 if self.offset is None else self.offset,
                           -np.inf if self.lo is None else self.lo,
                           np.inf if self.hi is None else self.hi,
                           self.a, self.b, np.nan, s_lo, s_hi, below, above], dtype=dt)
        kernel(src.reshape(-1), out.reshape(-1), farr, len(fills), params)
        return out

    def _mark(self, x: np.ndarray) -> np.ndarray:
        """Values outside the plausible range as marked NaN (numpy form)."""
        if self.screen is None:
            return x
        below, above = screen.marks(x.dtype)
        with np.errstate(invalid="ignore"):
            x = np.where(x < self.screen[0], below, x)
            return np.where(x > self.screen[1], above, x)

    def _xarray(self, raw: np.ndarray) -> np.ndarray:
        """The reference sequence of xarray operations (CF decoding, valid range, units)."""
        dims = tuple(f"d{i}" for i in range(raw.ndim))
        x = xr.DataArray(np.asarray(decode_raw(raw, dims, "v", dict(self.generic))), dims=dims)
        x = _scale(_where_valid(x, self.lo, self.hi), self.a, self.b)
        if x.dtype != np.float32 and x.dtype != np.float64:
            x = x.astype(np.float32)
        return self._mark(np.asarray(x.values))

    @staticmethod
    def _numpy(src, out, fills, params, flags):  # pragma: no cover - without numba
        bad = np.zeros(src.shape, dtype=bool)
        for f in fills:
            bad |= src == f
        out[...] = src
        if flags[0]:
            out *= params[0]
        if flags[1]:
            out += params[1]
        with np.errstate(invalid="ignore"):
            if flags[2]:
                bad |= ~(out >= params[2])
            if flags[3]:
                bad |= ~(out <= params[3])
        if flags[4]:
            out *= params[4]
        if flags[5]:
            out += params[5]
        out[bad] = np.nan
        return out


def decoder_for(raw_dtype, enc: dict, attrs: dict, a: float, b: float, *,
                decoded: bool = False, screen_range: tuple | None = None) -> Decoder:
    """The :class:`Decoder` of a variable stored as ``raw_dtype`` with encoding ``enc`` and
    attributes ``attrs`` (its valid range), converted to model units by ``* a + b``.
    ``decoded``: the values come already CF-decoded (read through the netCDF library);
    ``screen_range``: the plausible range in model units (values outside are marked)."""
    raw_dtype = np.dtype(raw_dtype)
    coding = {} if decoded else {k: enc[k] for k in CF_CODING_KEYS if k in enc}
    lo, hi = valid_thresholds(enc, attrs, raw_dtype)
    # the floating type xarray's decoding gives (it is the type of every operation)
    dt = np.asarray(decode_raw(np.zeros(1, raw_dtype), ("x",), "v", coding)).dtype
    fills = []
    for k in ("_FillValue", "missing_value"):
        if k in coding:
            fills.extend(np.ravel(coding[k]).tolist())
    factors = [coding[k] for k in ("scale_factor", "add_offset") if k in coding]

    def exact(f):  # a fill value the stored type holds exactly (NaN included)
        return isinstance(f, float) and np.isnan(f) or np.asarray(f).astype(raw_dtype) == f

    fast = ("_Unsigned" not in coding and dt.kind == "f" and raw_dtype.kind in "iuf"
            and raw_dtype.isnative and dt.isnative
            and np.can_cast(raw_dtype, dt, "safe") and all(exact(f) for f in fills)
            and all(np.ndim(f) == 0 and np.can_cast(np.asarray(f).dtype, dt, "safe")
                    for f in factors))
    common = dict(raw_dtype=raw_dtype.str, lo=lo, hi=hi, a=float(a), b=float(b),
                  screen=None if screen_range is None else tuple(map(float, screen_range)))
    if fast:
        return Decoder(dtype=dt.str, fills=tuple(float(f) for f in fills),
                       scale=float(coding["scale_factor"]) if "scale_factor" in coding else None,
                       offset=float(coding["add_offset"]) if "add_offset" in coding else None,
                       **common)
    generic = tuple((k, _hashable(v)) for k, v in coding.items())
    probe = Decoder(dtype="f8", generic=generic, **common)(np.zeros(1, raw_dtype))
    return Decoder(dtype=probe.dtype.str, generic=generic, **common)


def _hashable(v):
    return tuple(np.ravel(v).tolist()) if np.ndim(v) else v
