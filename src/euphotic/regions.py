"""Named regions from the config: lon/lat boxes, GeoJSON polygons, or a NetCDF mask.

A grid cell belongs to a region when its centre falls inside. Polygon masks are burnt in with
rasterio (shapely geometries, antimeridian-split MultiPolygons included).
"""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from euphotic.aggregate import MaskWindow, RegionMasks
from euphotic.errors import ConfigError, InputFileError

log = logging.getLogger("euphotic")

#: A box whose west > east (crossing the antimeridian) spanning more than this many degrees of
#: longitude draws a warning: more likely west and east swapped than a box around most of the
#: globe (a judgement, not a standard).
SWAPPED_BOX_SPAN_DEG = 180.0


@dataclass
class Region:
    """One named region: a shapely geometry, or a boolean mask on the grid."""

    name: str
    geometry: object | None = None  # shapely geometry in lon/lat degrees
    mask_file: str | None = None
    mask_variable: str | None = None
    mask_values: tuple[float, ...] | None = None
    #: (west, south, east, north) degrees when the region is a lon/lat box: its mask is then
    #: index ranges on the axes, with no polygon test (see :func:`box_window`)
    box: tuple[float, float, float, float] | None = None

    def mask(self, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
        """Boolean (lat, lon) array: True where the cell centre is inside the region."""
        if self.box is not None:
            win = box_window(*self.box, lat, lon)
            out = np.zeros((len(lat), len(lon)), dtype=bool)
            out[win.rows, win.cols] = win.mask
            return out
        if self.geometry is not None:
            return polygon_mask(self.geometry, lat, lon, self.name)
        return netcdf_mask(self.mask_file, self.mask_variable, self.mask_values, lat, lon)

    def window(self, lat: np.ndarray, lon: np.ndarray) -> MaskWindow:
        """The region's mask within the grid rows and columns it can reach (same cells as
        :meth:`mask`, without allocating a whole grid for a small polygon)."""
        if self.box is not None:
            return box_window(*self.box, lat, lon)
        if self.geometry is not None:
            win = _polygon_window(self.geometry, lat, lon)
            if win is not None:
                return win
        return MaskWindow.of(self.mask(lat, lon))


def region_masks(regions: list[Region], lat: np.ndarray, lon: np.ndarray) -> RegionMasks:
    """Masks of every region on the (lat, lon) grid of cell centres, stored compactly.

    Regions are burnt in one at a time, each only within its bounding window, into the label
    layers of a :class:`euphotic.aggregate.RegionMasks`. A region with no cell centre on the
    grid is kept (its totals are empty) with a warning.
    """

    def windows():
        for r in regions:
            win = r.window(lat, lon)
            if not win.mask.any():
                log.warning("region %r contains no cell centre of the grid", r.name)
            yield r.name, win

    return RegionMasks.build(windows(), shape=(len(lat), len(lon)), n_regions=len(regions))


def box_geometry(west: float, south: float, east: float, north: float):
    """A lon/lat box; one that crosses the antimeridian (west > east) becomes two boxes."""
    from shapely.geometry import MultiPolygon, box

    if not (-90.0 <= south < north <= 90.0):
        raise ValueError(
            f"box south {south} / north {north} must satisfy -90 <= south < north <= 90"
        )
    if west > east:  # crosses the antimeridian, as in RFC 7946 bbox
        return MultiPolygon([box(west, south, 180.0, north), box(-180.0, south, east, north)])
    return box(west, south, east, north)


def box_window(west: float, south: float, east: float, north: float, lat: np.ndarray,
               lon: np.ndarray) -> MaskWindow:
    """Cells of a lon/lat box, from index ranges on the two axes (no polygon test).

    A cell is in the box when its centre satisfies ``south <= lat < north`` and lies in the
    longitude span from ``west`` (included) eastwards to ``east`` (excluded), whatever the
    grid's longitude convention (-180..180 or 0..360); ``west > east`` crosses the
    antimeridian; a span of 360 degrees or more takes every longitude. Half-open edges make
    boxes that share an edge tile the grid with no cell counted twice; ``north = 90`` includes
    the northernmost centres.
    """
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    rows = (lat >= south) & ((lat < north) | (north >= 90.0))
    span = east - west if east > west else east - west + 360.0
    cols = np.ones(len(lon), bool) if span >= 360.0 else np.mod(lon - west, 360.0) < span
    r = np.flatnonzero(rows)
    c = np.flatnonzero(cols)
    if r.size == 0 or c.size == 0:
        return MaskWindow(slice(0, 0), slice(0, 0), np.zeros((0, 0), bool))
    rs, cs = slice(int(r[0]), int(r[-1]) + 1), slice(int(c[0]), int(c[-1]) + 1)
    return MaskWindow(rs, cs, rows[rs, None] & cols[None, cs])


def polygon_mask(geometry, lat: np.ndarray, lon: np.ndarray, name: str = "region") -> np.ndarray:
    """Cells whose centres fall inside a shapely (Multi)Polygon in lon/lat degrees.

    On a regular grid the polygon is burnt in with rasterio's ``rasterize`` (a cell is in when
    its centre is inside; copies shifted by 360 degrees cover grids in 0..360); on an irregular
    grid shapely tests every centre.
    """
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    win = _polygon_window(geometry, lat, lon)
    if win is not None:
        out = np.zeros((len(lat), len(lon)), dtype=bool)
        out[win.rows, win.cols] = win.mask
        return out
    import shapely

    glon, glat = np.meshgrid(lon, lat)
    return np.logical_or.reduce(
        [shapely.contains_xy(g, glon, glat) for g in _shifted_copies(geometry, lon)]
    )


def _shifted_copies(geometry, lon: np.ndarray) -> list:
    """The geometry, plus copies shifted by +-360 degrees when the grid's longitudes need them."""
    from shapely.affinity import translate

    shapes = [geometry]
    if float(np.max(lon)) > 180.0:
        shapes.append(translate(geometry, xoff=360.0))
    if float(np.min(lon)) < -180.0:
        shapes.append(translate(geometry, xoff=-360.0))
    return shapes


def _polygon_window(geometry, lat, lon) -> MaskWindow | None:
    """Cell-centre mask of a geometry on a regular grid, burnt by rasterio within the rows and
    columns its bounds can reach (+1 cell); None on an irregular grid."""
    lat = np.asarray(lat, dtype=np.float64)
    lon = np.asarray(lon, dtype=np.float64)
    if not (len(lat) > 1 and len(lon) > 1 and _regular(lat) and _regular(lon)):
        return None
    from rasterio.features import rasterize
    from rasterio.transform import Affine

    shapes = _shifted_copies(geometry, lon)
    dlat, dlon = (lat[-1] - lat[0]) / (len(lat) - 1), (lon[-1] - lon[0]) / (len(lon) - 1)
    x0, y0, x1, y1 = np.array([g.bounds for g in shapes], dtype=np.float64).T
    if not np.isfinite([x0, y0, x1, y1]).all():  # an empty geometry
        return MaskWindow(slice(0, 0), slice(0, 0), np.zeros((0, 0), bool))
    rows = np.sort(np.clip(((np.array([y0.min(), y1.max()]) - lat[0]) / dlat).round(), 0,
                           len(lat) - 1).astype(int))
    cols = np.sort(np.clip(((np.array([x0.min(), x1.max()]) - lon[0]) / dlon).round(), 0,
                           len(lon) - 1).astype(int))
    r0, r1 = max(rows[0] - 1, 0), min(rows[1] + 2, len(lat))
    c0, c1 = max(cols[0] - 1, 0), min(cols[1] + 2, len(lon))
    transform = Affine(dlon, 0.0, lon[c0] - dlon / 2, 0.0, dlat, lat[r0] - dlat / 2)
    burnt = rasterize(
        [(g, 1) for g in shapes], out_shape=(r1 - r0, c1 - c0), transform=transform,
        fill=0, dtype="uint8", all_touched=False,
    )
    return MaskWindow(slice(int(r0), int(r1)), slice(int(c0), int(c1)), burnt.astype(bool))


def _regular(v: np.ndarray) -> bool:
    d = np.diff(v)
    return bool(np.all(np.abs(d - d.mean()) <= 1e-6 * abs(d.mean())) and d.mean() != 0)


def netcdf_mask(path, variable, values, lat, lon) -> np.ndarray:
    """Cells where a NetCDF mask variable is non-zero (or equals one of ``values``)."""
    v = netcdf_on_grid(path, variable, lat, lon, what="region mask")
    if values is None:
        return np.isfinite(v) & (v != 0)
    return np.isin(v, np.asarray(values))


def netcdf_on_grid(path, variable, lat, lon, *, what: str) -> np.ndarray:
    """Values of a 2-D (lat, lon) NetCDF variable at the target cell centres (nearest cell).

    The file's grid must cover the target grid; its cells are matched to the nearest target
    centre within half a target cell.
    """
    from euphotic.readers import normalize_lon
    from euphotic.regrid import same_axis

    try:
        ds = xr.open_dataset(path, engine="netcdf4")
    except (OSError, ValueError) as exc:
        raise InputFileError(path, f"{what} cannot be opened as NetCDF ({exc})") from None
    with ds:
        if variable is None:
            candidates = [v for v in ds.data_vars if ds[v].ndim == 2]
            if len(candidates) != 1:
                raise InputFileError(
                    path, f"give the {what} `variable`: candidates are {candidates}"
                )
            variable = candidates[0]
        if variable not in ds:
            raise InputFileError(
                path, f"no variable {variable!r} in {what} (has {list(ds.data_vars)})"
            )
        da = _to_lat_lon(ds[variable], path)
        conv = "0to360" if float(np.max(lon)) > 180.0 else "pm180"
        da = normalize_lon(da, str(path), convention=conv)
        if da.lat.values[0] > da.lat.values[-1]:
            da = da.isel(lat=slice(None, None, -1))
        if not (same_axis(da.lat.values, lat) and same_axis(da.lon.values, lon)):
            step = abs(float(lat[1] - lat[0])) if len(lat) > 1 else 1.0
            try:
                da = da.sel(
                    lat=xr.DataArray(lat, dims="lat"),
                    lon=xr.DataArray(lon, dims="lon"),
                    method="nearest",
                    tolerance=0.5 * step + 1e-9,
                )
            except KeyError:
                raise InputFileError(
                    path, f"{what} grid does not cover the chlorophyll grid"
                ) from None
        return np.asarray(da.values, dtype=np.float64)


def _to_lat_lon(da: xr.DataArray, path) -> xr.DataArray:
    names = {}
    for d in da.dims:
        low = d.lower()
        if low in ("lat", "latitude", "y"):
            names[d] = "lat"
        elif low in ("lon", "longitude", "x"):
            names[d] = "lon"
    if sorted(names.values()) != ["lat", "lon"]:
        raise InputFileError(
            path, f"region mask {da.name!r} must have lat and lon dimensions, has {da.dims}"
        )
    return da.rename(names).transpose("lat", "lon")


def _geojson_geometries(path: Path, name_property: str | None):
    from shapely.geometry import shape
    from shapely.validation import explain_validity

    try:
        obj = json.loads(Path(path).read_text())
    except (OSError, json.JSONDecodeError) as exc:
        raise InputFileError(path, f"cannot read GeoJSON ({exc})") from None
    kind = obj.get("type")
    if kind == "FeatureCollection":
        feats = obj.get("features", [])
    elif kind == "Feature":
        feats = [obj]
    elif kind in ("Polygon", "MultiPolygon", "GeometryCollection"):
        feats = [{"type": "Feature", "geometry": obj, "properties": {}}]
    else:
        raise InputFileError(
            path, f"GeoJSON type {kind!r} is not a Feature, FeatureCollection or Polygon"
        )
    out = []
    for i, f in enumerate(feats):
        geom = f.get("geometry")
        if geom is None or geom.get("type") not in ("Polygon", "MultiPolygon"):
            raise InputFileError(path, f"feature {i} is not a Polygon or MultiPolygon")
        props = f.get("properties") or {}
        if not isinstance(props, dict):
            props = {}
        label = props.get(name_property) if name_property else None
        what = _feature_label(i, props, name_property)
        try:
            g = shape(geom)
        except Exception as exc:
            raise InputFileError(path, f"{what} has an invalid geometry ({exc})") from None
        if not g.is_valid:
            # explain_validity gives the reason and a point, e.g. "Self-intersection[2 2]";
            # the polygon is not repaired (make_valid would change the region silently)
            raise InputFileError(
                path, f"{what} is not a valid polygon: {explain_validity(g)} "
                "(fix the polygon in the file, e.g. a self-intersecting ring)"
            )
        out.append((label, g))
    if not out:
        raise InputFileError(path, "GeoJSON has no features")
    return out


def _feature_label(i: int, props: dict, name_property: str | None) -> str:
    """``feature 12`` or ``feature 12 ('Name')``, with the name property or a ``name``."""
    for key in (name_property, "name"):
        if key and props.get(key) not in (None, ""):
            return f"feature {i} ({props[key]!r})"
    return f"feature {i}"


def regions_from_config(items: list[dict], base_dir: Path, source: str) -> list[Region]:
    """Build regions from the ``[[regions]]`` tables of a config."""
    from shapely.ops import unary_union

    regions: list[Region] = []
    for i, item in enumerate(items):
        where = f"{source}: [[regions]] #{i + 1}"
        kinds = [k for k in ("box", "geojson", "mask") if k in item]
        if len(kinds) != 1:
            raise ConfigError(where, "give exactly one of `box`, `geojson` or `mask`")
        kind = kinds[0]
        name = item.get("name")
        if kind == "box":
            b = item["box"]
            if not (
                isinstance(b, list) and len(b) == 4 and all(isinstance(x, int | float) for x in b)
            ):
                raise ConfigError(where, "`box` must be [west, south, east, north] in degrees")
            if not name:
                raise ConfigError(where, "a box region needs a `name`")
            try:
                regions.append(Region(name, geometry=box_geometry(*map(float, b)),
                                      box=tuple(map(float, b))))
            except ValueError as exc:
                raise ConfigError(where, str(exc)) from None
            west, east = float(b[0]), float(b[2])
            span = 360.0 - (west - east)
            if west > east and span > SWAPPED_BOX_SPAN_DEG:
                log.warning(
                    "%s: box of region %r has west %g > east %g, so it crosses the "
                    "antimeridian and spans %g degrees of longitude: probably west and east "
                    "swapped", where, name, west, east, span,
                )
        elif kind == "geojson":
            path = (base_dir / item["geojson"]).resolve()
            name_property = item.get("name_property")
            geoms = _geojson_geometries(path, name_property)
            if name_property:
                first: dict[str, int] = {}
                for j, (label, g) in enumerate(geoms):
                    if label is None or str(label).strip() == "":
                        raise InputFileError(
                            path, f"feature {j} has no property {name_property!r} "
                            "(`name_property` names every feature)"
                        )
                    label = str(label)
                    if label in first:
                        raise InputFileError(
                            path, f"feature {j} has {name_property} {label!r}, already used by "
                            f"feature {first[label]}: region names must be unique"
                        )
                    first[label] = j
                    regions.append(Region(label, geometry=g))
            else:
                if not name:
                    raise ConfigError(where, "a geojson region needs a `name` (or `name_property`)")
                regions.append(Region(name, geometry=unary_union([g for _, g in geoms])))
        else:
            if not name:
                raise ConfigError(where, "a mask region needs a `name`")
            vals = item.get("values", item.get("value"))
            if vals is not None and not isinstance(vals, list):
                vals = [vals]
            regions.append(
                Region(
                    name,
                    mask_file=str((base_dir / item["mask"]).resolve()),
                    mask_variable=item.get("variable"),
                    mask_values=tuple(vals) if vals is not None else None,
                )
            )
    names = [r.name for r in regions]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise ConfigError(source, f"region names must be unique; repeated: {', '.join(dupes)}")
    return regions
