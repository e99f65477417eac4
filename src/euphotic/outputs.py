"""Write results: CF-1.8 / ACDD-1.3 monthly NetCDF maps and the regional totals CSV.

Every file is written under a temporary name in the output folder and renamed into place only
after the whole computation has succeeded, so an interrupted or failed run never leaves a half
file and never replaces good results.
"""

from __future__ import annotations

import csv
import datetime as dt
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic import __version__
from euphotic.aggregate import MonthlyMaps
from euphotic.models import CITATIONS

CAUTION = (
    "Satellite net primary production models disagree with each other by about a factor of "
    "two; these estimates need validation against local in situ measurements (e.g. 14C uptake "
    "or oxygen incubations) before use in fisheries management or carbon accounting."
)

TOTALS_COLUMNS = [
    "region",
    "month",
    "model",
    "mean_npp_mg_m2_d",
    "observed_area_km2",
    "ocean_area_km2",
    "coverage",
    "total_TgC",
    "total_filled_TgC",
]


def month_stem(maps: MonthlyMaps) -> str:
    """File stem of one month's map: ``npp_<model>_YYYY-MM``."""
    return f"npp_{maps.model}_{maps.month}"


def temp_path(final: Path) -> Path:
    """A temporary name beside ``final`` (same folder, so the rename is atomic)."""
    return final.with_name(f".{final.name}.part-{os.getpid()}")


def _bounds(centres: np.ndarray) -> np.ndarray:
    from euphotic.geo import cell_edges

    e = cell_edges(centres)
    return np.stack([e[:-1], e[1:]], axis=1)


def month_dataset(
    maps: MonthlyMaps,
    *,
    title: str,
    input_files: dict[str, Sequence[str]],
    command: str,
    extra_attrs: dict | None = None,
) -> xr.Dataset:
    """A lazy CF-1.8 dataset for one month: ``npp``, ``coverage``, coordinates and metadata."""
    start = np.datetime64(maps.month, "D")
    end = (np.datetime64(maps.month, "M") + 1).astype("datetime64[D]")
    lat = maps.npp["lat"].values
    lon = maps.npp["lon"].values
    npp = maps.npp.astype(np.float32).expand_dims(time=1)
    cov = maps.coverage.astype(np.float32).expand_dims(time=1)
    npp.attrs = {
        "units": "mg m-2 d-1",
        "long_name": "net primary production of carbon, mean daily rate over the month",
        "standard_name": "net_primary_productivity_of_biomass_expressed_as_carbon",
        "cell_methods": "time: mean (over days with a valid estimate)",
        "coverage_content_type": "modelResult",
        "comment": "Integrated over the euphotic layer; mass is of carbon.",
    }
    cov.attrs = {
        "units": "1",
        "long_name": "fraction of the month's days with a valid production estimate",
        "valid_min": np.float32(0.0),
        "valid_max": np.float32(1.0),
        "coverage_content_type": "qualityInformation",
    }
    mid = start + (end - start) // 2
    ds = xr.Dataset(
        {"npp": npp, "coverage": cov},
        coords={
            "time": (
                "time",
                [mid.astype("datetime64[ns]")],
                {"standard_name": "time", "axis": "T", "bounds": "time_bnds", "long_name": "time"},
            ),
            "lat": (
                "lat",
                lat,
                {
                    "standard_name": "latitude",
                    "units": "degrees_north",
                    "axis": "Y",
                    "bounds": "lat_bnds",
                    "long_name": "latitude",
                },
            ),
            "lon": (
                "lon",
                lon,
                {
                    "standard_name": "longitude",
                    "units": "degrees_east",
                    "axis": "X",
                    "bounds": "lon_bnds",
                    "long_name": "longitude",
                },
            ),
        },
    )
    ds["npp"].attrs["cell_methods"] = "time: mean"
    ds["npp"].attrs["comment"] += (
        " Mean over the days of the month with a valid estimate (see coverage)."
    )
    ds["time_bnds"] = (("time", "nv"), np.array([[start, end]], dtype="datetime64[ns]"))
    ds["lat_bnds"] = (("lat", "nv"), _bounds(lat))
    ds["lon_bnds"] = (("lon", "nv"), _bounds(lon))
    now = dt.datetime.now(dt.UTC).replace(microsecond=0).isoformat()
    files = {k: [os.path.basename(p) for p in v] for k, v in input_files.items()}
    ds.attrs = {
        "Conventions": "CF-1.8, ACDD-1.3",
        "title": f"{title}: {maps.model} monthly mean, {maps.month}",
        "summary": (
            f"Monthly mean daily net primary production (mg C m-2 d-1) from the {maps.model} "
            "model, evaluated day by day from surface chlorophyll, PAR and sea surface "
            "temperature with day length from latitude and date. " + CAUTION
        ),
        "keywords": "net primary production, phytoplankton, chlorophyll, ocean carbon",
        "model": maps.model,
        "model_citation": CITATIONS[maps.model],
        "references": CITATIONS[maps.model]
        + " Day length: Forsythe et al. (1995), Ecological Modelling 80:87-95.",
        "caution": CAUTION,
        "time_coverage_start": str(start),
        "time_coverage_end": str(end),
        "time_coverage_resolution": "P1M",
        "geospatial_lat_min": float(_bounds(lat).min()),
        "geospatial_lat_max": float(_bounds(lat).max()),
        "geospatial_lon_min": float(_bounds(lon).min()),
        "geospatial_lon_max": float(_bounds(lon).max()),
        "geospatial_lat_units": "degrees_north",
        "geospatial_lon_units": "degrees_east",
        "geospatial_bounds": _wkt_box(lat, lon),
        "geospatial_bounds_crs": "EPSG:4326",
        "date_created": now,
        "history": f"{now} {command} (euphotic {__version__})",
        "source": "euphotic " + __version__,
        "product_version": __version__,
        "processing_level": "L4 model output",
        "input_files_chl": ", ".join(files.get("chl", [])),
        "input_files_par": ", ".join(files.get("par", [])),
        "input_files_sst": ", ".join(files.get("sst", [])),
    }
    if "day_length" in files:
        ds.attrs["input_files_day_length"] = ", ".join(files["day_length"])
    ds.attrs.update(extra_attrs or {})
    return ds


def _wkt_box(lat: np.ndarray, lon: np.ndarray) -> str:
    lb, ob = _bounds(lat), _bounds(lon)
    s, n = float(lb.min()), float(lb.max())
    w, e = float(ob.min()), float(ob.max())
    return f"POLYGON(({w:g} {s:g}, {e:g} {s:g}, {e:g} {n:g}, {w:g} {n:g}, {w:g} {s:g}))"


def encoding_for(ds: xr.Dataset) -> dict:
    """Compressed float32 storage chunked like the map (CF time units in days).

    A dask-backed map is stored in chunks equal to its blocks, so that each block is written
    as whole chunks: a block that straddled stored chunks would make the library read back,
    inflate and deflate the partial chunks again (and the inputs' small chunk cache cannot
    hold them).
    """
    blocks = getattr(ds["npp"].data, "chunksize", None)
    if blocks is not None and len(blocks) == 3 and blocks[1] * blocks[2] <= 4 * 2**20:
        chunks = (1, blocks[1], blocks[2])
    else:
        chunks = (1, min(ds.sizes["lat"], 1024), min(ds.sizes["lon"], 1024))
    enc = {
        v: {
            "zlib": True,
            "complevel": 1,  # shuffle does most of the work on float maps; level 1 is fastest
            "shuffle": True,
            "dtype": "float32",
            "_FillValue": np.float32(np.nan),
            "chunksizes": chunks,
        }
        for v in ("npp", "coverage")
    }
    enc["time"] = {"units": "days since 1970-01-01", "calendar": "standard", "dtype": "float64"}
    enc["time_bnds"] = {
        "units": "days since 1970-01-01",
        "calendar": "standard",
        "dtype": "float64",
    }
    for c in ("lat", "lon", "lat_bnds", "lon_bnds"):
        enc[c] = {"_FillValue": None}
    return enc


def write_lazy(ds: xr.Dataset, tmp: Path, fmt: str):
    """Start writing ``ds`` to ``tmp`` and return the delayed computation that fills it.

    ``"netcdf"``: one NetCDF-4 file. ``"zarr"``: a Zarr store chunked like the map, so that
    workers of a cluster write chunks in parallel (suited to multi-year runs).
    """
    if fmt == "zarr":
        enc = {v: {"chunks": ds[v].data.chunksize} for v in ("npp", "coverage")}
        for v in ("npp", "coverage"):
            ds[v].encoding = {}
        return ds.to_zarr(tmp, mode="w", compute=False, encoding=enc, zarr_format=2, consolidated=True)
    return ds.to_netcdf(tmp, engine="netcdf4", encoding=encoding_for(ds), compute=False)


def remove_path(path: Path) -> None:
    """Delete a temporary file or Zarr directory if it exists."""
    import shutil

    p = Path(path)
    if p.is_dir():
        shutil.rmtree(p, ignore_errors=True)
    elif p.exists():
        p.unlink()


def move_into_place(tmp: Path, final: Path) -> None:
    """Rename a finished temporary output onto its final name (replacing an older result)."""
    final = Path(final)
    if Path(tmp).is_dir():
        old = final.with_name(f".{final.name}.old-{os.getpid()}")
        if final.exists():
            os.replace(final, old)
        os.replace(tmp, final)
        remove_path(old)
    else:
        os.replace(tmp, final)


def write_totals_csv(rows: list[dict], final: Path) -> None:
    """Write the totals table to a temporary file, then rename it into place."""
    tmp = temp_path(final)
    try:
        with open(tmp, "w", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=TOTALS_COLUMNS)
            w.writeheader()
            for r in rows:
                w.writerow({k: _fmt(r[k]) for k in TOTALS_COLUMNS})
        os.replace(tmp, final)
    finally:
        if tmp.exists():
            tmp.unlink()


def _fmt(v):
    if isinstance(v, float | np.floating):
        if not np.isfinite(v):
            return ""
        return f"{float(v):.6g}"
    return v
