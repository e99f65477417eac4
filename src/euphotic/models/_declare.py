"""A model is one declaration; one factory builds everything else from it.

A model module holds a scalar ``point`` formula (compiled with
:func:`euphotic.models._compiled.jit_point`), its plain numpy ``reference`` formula (kept as the
test reference and the fallback without numba) and one :class:`ModelSpec` naming its inputs with
their units, its parameters with defaults and sources, and its citation keys in
``references.bib``. :func:`build` turns the declaration into

- the public function (numpy, dask or xarray in, the same kind out, inputs with a ``units``
  attribute converted to the declared units),
- a compiled block kernel (one loop over a block of cells, GIL released), and
- a compiled monthly accumulator for the fused monthly pass
  (:func:`euphotic.aggregate.monthly_npp_models`): one day's valid rates of a (lat, lon) block
  added to a running sum and count.

The two compiled loops are generated from the declaration (the inputs and parameters in
declared order) as a small Python file in a cache folder, so that numba caches their machine
code between runs; the file's name carries a hash of the models' source files, so a change to a
formula is never served from a stale cache.
"""

from __future__ import annotations

import hashlib
import importlib.util
import inspect
import os
import sys
import tempfile
import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from euphotic.models._compiled import HAVE_NUMBA, compile_points, use_compiled

#: The role whose value is one number per latitude row and day in the fused monthly pass.
DAY_LENGTH = "day_length"

#: Output attributes of every model's daily and monthly rate (CF standard name, UDUNITS).
NPP_ATTRS = {
    "units": "mg m-2 d-1",
    "long_name": "net primary production of carbon, integrated over the euphotic layer",
    "standard_name": "net_primary_productivity_of_biomass_expressed_as_carbon",
}


@dataclass(frozen=True)
class Input:
    """One input of a model: its role (see :mod:`euphotic.roles`) and the units the formula
    takes. ``required=False``: the model runs without it (the formula gets NaN)."""

    role: str
    units: str
    required: bool = True


@dataclass(frozen=True)
class Parameter:
    """A number the formula takes besides its inputs.

    ``per_region=True``: the config may set it per region (``[models.<name>.regions."<region>"]``);
    the formula then gets a value per cell.
    """

    name: str
    default: float
    units: str
    source: str
    per_region: bool = False
    minimum: float | None = None
    maximum: float | None = None

    def check(self, value) -> float:
        """The value as a float, or ValueError saying what is expected."""
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ValueError(f"{self.name} must be a number ({self.units}), not {value!r}")
        v = float(value)
        if not np.isfinite(v) or (self.minimum is not None and v < self.minimum) or (
                self.maximum is not None and v > self.maximum):
            lo = "" if self.minimum is None else f" >= {self.minimum:g}"
            hi = "" if self.maximum is None else f" <= {self.maximum:g}"
            raise ValueError(f"{self.name} must be a finite number{lo}{' and' if lo and hi else ''}"
                             f"{hi} ({self.units}), not {value!r}")
        return v


@dataclass(frozen=True)
class Choice:
    """A choice among named published alternatives (e.g. the euphotic-depth relation); the
    formula gets the index of the chosen name, as a float."""

    name: str
    choices: tuple[str, ...]
    default: str
    source: str
    per_region: bool = False
    units: str = "1"
    #: the ``references.bib`` key of each choice, in the order of ``choices`` (the methods
    #: paragraph cites the one a run chose)
    citations: tuple[str, ...] = ()

    def check(self, value) -> float:
        """The index of the chosen name as a float (an index is accepted as it is)."""
        if isinstance(value, int | float | np.number) and not isinstance(value, bool) and \
                float(value) in range(len(self.choices)):
            return float(value)
        if value not in self.choices:
            raise ValueError(f"{self.name} must be one of {', '.join(map(repr, self.choices))}, "
                             f"not {value!r}")
        return float(self.choices.index(value))


@dataclass(frozen=True)
class ModelSpec:
    """Everything the tool needs to know about one published model."""

    name: str
    label: str
    published_name: str
    citation_keys: tuple[str, ...]
    inputs: tuple[Input, ...]
    point: Callable
    reference: Callable
    parameters: tuple[Parameter | Choice, ...] = ()
    summary: str = ""
    #: the model as a phrase of the methods paragraph, citing with {bibkey} placeholders
    #: (e.g. "the VGPM of {behrenfeld1997}"); empty: the published name and its citations
    methods: str = ""
    output_attrs: dict = field(default_factory=lambda: dict(NPP_ATTRS))

    @property
    def roles(self) -> tuple[str, ...]:
        return tuple(i.role for i in self.inputs)

    @property
    def required_roles(self) -> tuple[str, ...]:
        return tuple(i.role for i in self.inputs if i.required)

    def parameter(self, name: str) -> Parameter | Choice:
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(name)

    def default_values(self) -> dict[str, float]:
        """Parameter name -> the number the formula gets by default."""
        return {p.name: p.check(p.default) for p in self.parameters}


# --- generated compiled loops --------------------------------------------------------------

_TEMPLATE = '''"""Generated by euphotic.models._declare from the declaration of {name!r}; do not edit."""
import numpy as np
from {module} import {point} as point


def block_loop({flat_args}, out):
    for i in range(out.size):
        out[i] = point({flat_call})


def month_accumulate({grid_args}, ocean, total, count):
    for j in range(ocean.shape[0]):
        for i in range(ocean.shape[1]):
            if ocean[j, i]:
                v = point({grid_call})
                if v == v:  # a valid estimate (not NaN)
                    total[j, i] += v
                    count[j, i] += 1.0
'''


def _source(spec: ModelSpec) -> str:
    names = [f"x{k}" for k in range(len(spec.inputs))] + [
        f"q{k}" for k in range(len(spec.parameters))]
    flat_call = ", ".join(f"np.float64({a}[i])" for a in names)
    grid = []
    for k, inp in enumerate(spec.inputs):
        # day length is one value per latitude row in the monthly pass
        grid.append(f"np.float64(x{k}[j])" if inp.role == DAY_LENGTH else f"np.float64(x{k}[j, i])")
    grid += [f"np.float64(q{k}[j, i])" for k in range(len(spec.parameters))]
    return _TEMPLATE.format(name=spec.name, module=spec.point.__module__,
                            point=spec.point.__name__, flat_args=", ".join(names),
                            flat_call=flat_call, grid_args=", ".join(names),
                            grid_call=", ".join(grid))


def _models_digest() -> str:
    """Hash of the models package's source files (a formula change gives new kernel files)."""
    h = hashlib.sha256()
    for p in sorted(Path(__file__).parent.glob("*.py")):
        h.update(p.name.encode())
        h.update(p.read_bytes())
    return h.hexdigest()[:16]


def kernel_cache_dir() -> Path:
    """Where generated kernel files (and numba's cache of them) live:
    ``$EUPHOTIC_CACHE_DIR``, else ``$XDG_CACHE_HOME/euphotic/kernels`` (``~/.cache``)."""
    from euphotic.cachedir import cache_dir

    return cache_dir("kernels")


_DIGEST: str | None = None
#: One thread at a time loads generated loops: dask's threads ask for the same model at once,
#: and a module must not be seen before its compiled loops are attached.
_LOAD_LOCK = threading.Lock()


def _load_generated(spec: ModelSpec):
    """Import the generated loops of ``spec`` (written once into the cache folder; compiled
    in memory without the on-disk cache if that folder cannot be written)."""
    with _LOAD_LOCK:
        return _load_generated_locked(spec)


def _load_generated_locked(spec: ModelSpec):
    global _DIGEST
    import numba

    compile_points()
    src = _source(spec)
    if _DIGEST is None:
        _DIGEST = _models_digest()
    tag = hashlib.sha256((src + _DIGEST).encode()).hexdigest()[:16]
    modname = f"euphotic_kernel_{spec.name}_{tag}"
    if modname in sys.modules:
        mod = sys.modules[modname]
    else:
        path = kernel_cache_dir() / f"{modname}.py"
        cache = True
        try:
            if not path.exists():
                path.parent.mkdir(parents=True, exist_ok=True)
                fd, tmp = tempfile.mkstemp(dir=path.parent, suffix=".tmp")
                with os.fdopen(fd, "w") as fh:
                    fh.write(src)
                os.replace(tmp, path)
            mspec = importlib.util.spec_from_file_location(modname, path)
            mod = importlib.util.module_from_spec(mspec)
            mspec.loader.exec_module(mod)
        except OSError:  # read-only home: compile in memory each run
            cache = False
            mod = type(sys)(modname)
            exec(compile(src, f"<{modname}>", "exec"), mod.__dict__)
        mod.block_jit = numba.njit(nogil=True, cache=cache)(mod.block_loop)
        mod.month_jit = numba.njit(nogil=True, cache=cache)(mod.month_accumulate)
        sys.modules[modname] = mod  # registered only once complete
    return mod


# --- the built model -----------------------------------------------------------------------


class Model:
    """A built model: call it like a function (see :func:`build`)."""

    def __init__(self, spec: ModelSpec):
        self.spec = spec
        self._mod = None
        self.__name__ = spec.name
        self.__qualname__ = spec.name
        self.__module__ = spec.point.__module__
        self.__doc__ = _docstring(spec)
        params = [inspect.Parameter(i.role, inspect.Parameter.POSITIONAL_OR_KEYWORD,
                                    **({} if i.required else {"default": None}))
                  for i in spec.inputs]
        params += [inspect.Parameter(p.name, inspect.Parameter.KEYWORD_ONLY, default=p.default)
                   for p in spec.parameters]
        self.__signature__ = inspect.Signature(params)

    def __repr__(self) -> str:
        return f"<euphotic model {self.spec.name!r}>"

    def __reduce__(self):  # pickled by name (dask distributed workers rebuild it)
        from euphotic.models import get_model

        return (get_model, (self.spec.name,))

    # compiled loops, generated on first use
    def _generated(self):
        if self._mod is None:
            self._mod = _load_generated(self.spec)
        return self._mod

    @property
    def compiled(self) -> bool:
        return HAVE_NUMBA and use_compiled()

    def block(self, *arrays) -> np.ndarray:
        """Compiled block kernel: inputs then parameter values (numbers or arrays) in declared
        order, broadcast together; float64 out."""
        arrays = np.broadcast_arrays(*[np.asarray(a) for a in arrays])
        out = np.empty(arrays[0].shape, dtype=np.float64)
        flat = [np.ascontiguousarray(a).reshape(-1) for a in arrays]
        self._generated().block_jit(*flat, out.reshape(-1))
        return out

    def accumulate(self, day_inputs: list, params: list, ocean: np.ndarray, total, count) -> None:
        """Add one day's valid rates of a (lat, lon) block into ``total`` and 1 into ``count``
        (compiled). ``day_inputs`` in declared order: (lat, lon) fields, day length as (lat,);
        ``params``: numbers or (lat, lon) arrays, in declared order."""
        shape = ocean.shape
        qs = [np.broadcast_to(np.asarray(q, np.float64), shape) for q in params]
        self._generated().month_jit(*day_inputs, *qs, ocean, total, count)

    def reference(self, *args, **kwargs):
        """The plain numpy formula (float64), the test reference."""
        return self.spec.reference(*args, **kwargs)

    def parameter_values(self, kwargs: dict) -> list:
        """Parameter values (numbers or arrays) in declared order from keyword arguments."""
        out = []
        for p in self.spec.parameters:
            v = kwargs.pop(p.name, p.default)
            if isinstance(p, Choice):
                v = p.check(v)
            out.append(v)
        if kwargs:
            raise TypeError(f"{self.spec.name}() got unexpected keyword argument(s) "
                            f"{', '.join(sorted(kwargs))}")
        return out

    def __call__(self, *args, **kwargs):
        from euphotic.models._apply import apply_kernel, model_inputs

        spec = self.spec
        bound = {}
        roles = spec.roles
        if len(args) > len(roles):
            raise TypeError(f"{spec.name}() takes {len(roles)} inputs ({', '.join(roles)})")
        for role, a in zip(roles, args, strict=False):
            bound[role] = a
        for role in roles[len(args):]:
            if role in kwargs:
                bound[role] = kwargs.pop(role)
        missing = [i.role for i in spec.inputs if i.required and bound.get(i.role) is None]
        if missing:
            raise TypeError(f"{spec.name}() needs input(s) {', '.join(missing)}")
        params = self.parameter_values(kwargs)
        values = model_inputs(spec, bound)
        if self.compiled:
            kernel = self.block
        else:
            names = [p.name for p in spec.parameters]
            choices = {p.name: p.choices for p in spec.parameters if isinstance(p, Choice)}

            def kernel(*arrays):
                n = len(spec.inputs)
                kw = {}
                for name, v in zip(names, arrays[n:], strict=True):
                    kw[name] = choices[name][int(np.asarray(v).flat[0])] if name in choices else v
                return spec.reference(*arrays[:n], **kw)
        return apply_kernel(kernel, *values, *params, name="npp", attrs=spec.output_attrs)


def build(spec: ModelSpec) -> Model:
    """The public function, compiled block kernel and monthly accumulator of a declaration."""
    return Model(spec)


def _docstring(spec: ModelSpec) -> str:
    lines = [f"Net primary production by the {spec.published_name}, mg C m-2 d-1.", ""]
    if spec.summary:
        lines += [spec.summary, ""]
    lines += ["Parameters", "----------"]
    for i in spec.inputs:
        opt = "" if i.required else ", optional"
        lines += [f"{i.role} : array_like, dask array or xarray.DataArray{opt}",
                  f"    In {i.units}; a DataArray whose ``units`` say otherwise is converted."]
    for p in spec.parameters:
        if isinstance(p, Choice):
            lines += [f"{p.name} : {{{', '.join(map(repr, p.choices))}}}, default {p.default!r}",
                      f"    {p.source}"]
        else:
            lines += [f"{p.name} : float or array, default {p.default!r}",
                      f"    {p.units}. {p.source}"]
    lines += ["", "Returns", "-------", "same kind as the inputs",
              "    mg C m-2 d-1 (float64; NaN where an input is missing, 0 where day_length <= 0).",
              "", "References", "----------", ", ".join(spec.citation_keys)
              + " (``euphotic/references.bib``)"]
    return "\n".join(lines)
