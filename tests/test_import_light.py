"""``import euphotic`` and ``import euphotic.cli`` stay light: the heavy libraries are
imported only on the paths that use them (checked in a fresh interpreter's sys.modules)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

SRC = str(Path(__file__).resolve().parents[1] / "src")
#: Deferred to the code that needs them: dask arrays (model application on dask inputs),
#: numba (compiled loops, built on first use), pint and its registry (unit conversion).
DEFERRED = ("dask.array", "numba", "numbagg", "pint", "cf_xarray.units", "matplotlib",
            "distributed")


@pytest.mark.parametrize("module", ["euphotic", "euphotic.cli"])
def test_import_does_not_load_heavy_libraries(module):
    code = (f"import json, sys; import {module}; "
            f"print(json.dumps([m for m in {list(DEFERRED)!r} if m in sys.modules]))")
    env = {**os.environ, "PYTHONPATH": SRC + os.pathsep + os.environ.get("PYTHONPATH", "")}
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=env, check=True)
    assert json.loads(res.stdout.strip().splitlines()[-1]) == []


def test_units_and_models_still_work_after_a_light_import():
    """The deferred pieces load when used: a unit conversion (1 W m-2 of daylight PAR is
    4.57 umol m-2 s-1, McCree 1972) and ``from euphotic.units import ureg``."""
    from euphotic import units
    from euphotic.units import ureg

    factor, kind = units.par_factors("W m-2")
    assert kind == "energy"
    assert factor == pytest.approx(4.57e-6 * 86400.0)
    assert ureg.Quantity(1.0, "degrees_C").to("K").magnitude == pytest.approx(274.15)
    with pytest.raises(AttributeError):
        units.no_such_thing  # noqa: B018


def test_citations_are_kept_between_runs_and_equal_the_rendered_text(tmp_path, monkeypatch):
    """The stored citation lines are those pybtex renders from references.bib (the reference
    path, :func:`euphotic.models.citation`); a damaged store is rendered again."""
    from euphotic import models

    monkeypatch.setenv("EUPHOTIC_CACHE_DIR", str(tmp_path))
    monkeypatch.setattr(models._Citations, "_cache", {})
    want = models.citation("vgpm")
    assert models.CITATIONS["vgpm"] == want
    stores = list(tmp_path.glob("citations_*.json"))
    assert len(stores) == 1
    assert json.loads(stores[0].read_text()) == {" ".join(models.SPECS["vgpm"].citation_keys): want}
    # read back from the store, with the renderer out of reach
    monkeypatch.setattr(models._Citations, "_cache", {})
    monkeypatch.setattr(models, "citation", lambda name: pytest.fail("rendered again"))
    assert models.CITATIONS["vgpm"] == want
    # a damaged store: rendered again
    stores[0].write_text("{not json")
    monkeypatch.setattr(models._Citations, "_cache", {})
    monkeypatch.setattr(models, "citation", lambda name: "fresh")
    assert models.CITATIONS["vgpm"] == "fresh"


def test_a_local_run_does_not_load_the_cluster_library(tmp_path):
    """A run without a cluster never imports dask.distributed (xarray and dask import it only
    to ask whether a cluster is in use, a quarter of a second at start); its maps are
    written (checked by reading one back with netCDF4-python)."""
    from tests._grids import monthly_case

    cfg = monthly_case(tmp_path, 2)
    code = ("import json, sys; from euphotic.config import load_config; "
            "from euphotic.pipeline import run; "
            f"run(load_config({str(cfg)!r}), progress=False, steps=False); "
            "print(json.dumps('distributed' in sys.modules))")
    env = {**os.environ, "PYTHONPATH": SRC + os.pathsep + os.environ.get("PYTHONPATH", "")}
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=env, cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert json.loads(res.stdout.strip().splitlines()[-1]) is False
    import netCDF4

    maps = sorted((tmp_path / "out").glob("npp_vgpm_2023-0*.nc"))
    assert len(maps) == 2
    with netCDF4.Dataset(maps[0]) as nc:
        assert np.isfinite(nc["npp"][:].filled(np.nan)).any()
