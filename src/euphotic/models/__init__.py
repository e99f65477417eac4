"""Published net primary production models, one module and one declaration each.

Each model module holds a :class:`~euphotic.models._declare.ModelSpec` (its inputs with units,
parameters with defaults and sources, scalar formula, numpy reference formula and citation keys
in ``references.bib``); :func:`~euphotic.models._declare.build` makes the public function
(numpy, dask or xarray in, the same kind out, lazy on dask) and the compiled kernels from it.
A new model is one new module and one line in :data:`REGISTRY`.
"""

from __future__ import annotations

import importlib
from collections.abc import Iterable, Mapping

import numpy as np

from euphotic.models._apply import InputMismatchError, check_same_grid
from euphotic.models._declare import Choice, Input, Model, ModelSpec, Parameter, build
from euphotic.models.eppley_vgpm import pb_opt_eppley
from euphotic.models.morel_berthon import euphotic_depth
from euphotic.models.vgpm import pb_opt_behrenfeld_falkowski

#: The registry: one line per model, the module (``euphotic/models/<module>.py``) holding its
#: declaration ``SPEC`` and its built public function (named as the model), in the order
#: `euphotic models` lists them.
REGISTRY: tuple[str, ...] = (
    "vgpm",
    "eppley_vgpm",
    "platt",
    "cbpm",
)

#: Model name -> declaration.
SPECS: dict[str, ModelSpec] = {}
_BUILT: dict[str, Model] = {}
for _module in map(importlib.import_module, (f"{__name__}.{m}" for m in REGISTRY)):
    SPECS[_module.SPEC.name] = _module.SPEC
    # the public function, importable as ``from euphotic.models import <model name>``
    _BUILT[_module.SPEC.name] = globals()[_module.SPEC.name] = getattr(_module, _module.SPEC.name)
del _module


class UnknownModelError(ValueError):
    """A model name that is not registered."""


def get_model(name: str) -> Model:
    """The public function of the model registered under ``name``."""
    if name not in SPECS:
        raise UnknownModelError(f"unknown model {name!r}; choose one of {', '.join(SPECS)}")
    if name not in _BUILT:
        _BUILT[name] = build(SPECS[name])
    return _BUILT[name]


def get_month_block(name: str) -> Model | None:
    """The model when its compiled monthly pass is on (compiled kernels available and not
    switched off by ``EUPHOTIC_KERNEL=numpy``), else None."""
    from euphotic.models._compiled import use_compiled

    return get_model(name) if use_compiled() else None


def parameter_settings(name: str, settings: Mapping | None = None, region_masks=None) -> dict:
    """Parameter name -> value for one model run: the declared default, the config's value
    (``settings["values"]``) and, for parameters declared ``per_region``, a (lat, lon) array
    where regions set their own (``settings["regions"]``: region name -> values; a cell in
    several of them takes the value of the region listed last). ``region_masks``: mapping
    region name -> boolean (lat, lon) mask (needed when regions set values)."""
    spec = SPECS[name]
    settings = settings or {}
    out = {p.name: settings.get("values", {}).get(p.name, p.default) for p in spec.parameters}
    by_region = settings.get("regions", {})
    for p in spec.parameters:
        layers = [(r, vals[p.name]) for r, vals in by_region.items() if p.name in vals]
        if not layers:
            continue
        field = None
        for region, value in layers:
            mask = np.asarray(region_masks[region], dtype=bool)
            if field is None:
                field = np.full(mask.shape, float(p.check(out[p.name])))
            field[mask] = p.check(value)
        out[p.name] = field
    return out


def model_parameter_attrs(name: str, settings: Mapping | None = None) -> dict[str, str]:
    """Attributes recording the parameters a model ran with (for its output files)."""
    spec = SPECS[name]
    if not spec.parameters:
        return {}
    settings = settings or {}
    values = settings.get("values", {})
    parts = [f"{p.name} = {values.get(p.name, p.default)}"
             + ("" if isinstance(p, Choice) else f" {p.units}")
             + ("" if p.name in values else " (default)") for p in spec.parameters]
    for region, vals in settings.get("regions", {}).items():
        parts += [f"{k} = {v} in {region}" for k, v in vals.items()]
    return {"model_parameters": "; ".join(parts)}


#: Model name -> public function (every registered model).
class _Models(Mapping):
    def __getitem__(self, name):
        if name not in SPECS:
            raise KeyError(name)
        return get_model(name)

    def __iter__(self):
        return iter(SPECS)

    def __len__(self):
        return len(SPECS)


MODELS: Mapping[str, Model] = _Models()


def input_roles(model_names: Iterable[str]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(required, optional) input roles of the named models, each in first-declared order.
    ``day_length`` is always optional: it is computed from latitude and date unless given."""
    required, optional = [], []
    for name in model_names:
        for inp in SPECS[name].inputs:
            target = optional if (not inp.required or inp.role == "day_length") else required
            if inp.role not in required and inp.role not in target:
                target.append(inp.role)
    optional = [r for r in optional if r not in required]
    return tuple(required), tuple(optional)


def citation(name: str) -> str:
    """The references of a model as text (from ``references.bib``), one after another."""
    from euphotic.methods import reference_text_for

    return " ".join(reference_text_for(k) for k in SPECS[name].citation_keys)


def _citation_store():
    """The file keeping rendered citation lines between runs (rendering the references with
    pybtex takes over a second per process), named by a hash of ``references.bib`` and of
    the code rendering it, in the kernel cache folder; None when those cannot be read."""
    import hashlib
    from pathlib import Path

    from euphotic import methods
    from euphotic.cachedir import cache_dir

    h = hashlib.sha256()
    try:
        for f in (Path(methods.__file__).with_name("references.bib"), Path(methods.__file__)):
            h.update(f.read_bytes())
    except OSError:
        return None
    return cache_dir("lookups") / f"citations_{h.hexdigest()[:16]}.json"


def _stored_citation(name: str) -> str:
    """:func:`citation` of ``name``, read from the citation store when it holds the keys,
    else rendered and added to the store (written whole by a rename; a store that cannot be
    read or written is skipped)."""
    import json
    import os
    import tempfile

    keys = " ".join(SPECS[name].citation_keys)
    store = _citation_store()
    known: dict = {}
    if store is not None:
        try:
            known = json.loads(store.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            known = {}
        if isinstance(known, dict) and isinstance(known.get(keys), str):
            return known[keys]
    text = citation(name)
    if store is not None:
        known = dict(known) if isinstance(known, dict) else {}
        known[keys] = text
        try:
            store.parent.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(dir=store.parent, suffix=".tmp")
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                json.dump(known, fh)
            os.replace(tmp, store)
        except OSError:
            pass
    return text


class _Citations(Mapping):
    """Model name -> its references as one line of text (formatted on first use)."""

    _cache: dict[str, str] = {}

    def __getitem__(self, name):
        if name not in SPECS:
            raise KeyError(name)
        if name not in self._cache:
            self._cache[name] = _stored_citation(name)
        return self._cache[name]

    def __iter__(self):
        return iter(SPECS)

    def __len__(self):
        return len(SPECS)


#: Model name -> citation written into output metadata.
CITATIONS: Mapping[str, str] = _Citations()


__all__ = [
    "CITATIONS",
    "MODELS",
    "SPECS",
    "Choice",
    "Input",
    "InputMismatchError",
    "Model",
    "ModelSpec",
    "Parameter",
    "UnknownModelError",
    "build",
    "cbpm",
    "check_same_grid",
    "citation",
    "eppley_vgpm",
    "euphotic_depth",
    "get_model",
    "get_month_block",
    "model_parameter_attrs",
    "parameter_settings",
    "input_roles",
    "pb_opt_behrenfeld_falkowski",
    "pb_opt_eppley",
    "pi_platt",
    "vgpm",
]
