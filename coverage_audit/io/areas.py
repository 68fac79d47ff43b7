"""Areas layer: read it, give it its CRS, repair its geometries, project it.

The geometry side of :func:`coverage_audit.inputs.load_areas` (and of the footprint and
study-area readers): read a vector layer as is, resolve its CRS against the spec, choose
the equal-area analysis CRS, repair invalid polygons with ``make_valid`` (only those that
are invalid) and project the kept areas, coordinates transformed on all cores (PROJ
releases the GIL; each thread has its own transformer, so the numbers are exactly those of
``GeoDataFrame.to_crs``). :mod:`coverage_audit.inputs` re-exports these names.
"""

from __future__ import annotations

import os
import warnings
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pyogrio
import shapely
from pyproj import CRS, Transformer

from ..errors import InputError
from ..geographic import longitude_span, span_centre
from .checks import bad_feature, finite_coordinates

#: Extensions read with pandas/pyarrow rather than GDAL.
PARQUET_SUFFIXES = (".parquet", ".geoparquet", ".pq")


def require_file(path: Path, role: str) -> None:
    """Refuse a missing path or a folder given for a file (an :class:`InputError`)."""
    if not path.exists():
        raise InputError(f"{role} file '{path}' was not found; check the path in the spec")
    if path.is_dir() and path.suffix.lower() != ".gdb":
        raise InputError(f"{role} path '{path}' is a folder; name the file itself")


def read_layer(
    path: Path, *, layer: str | None, role: str, id_column: str | None = None
) -> gpd.GeoDataFrame:
    """Read a vector layer (GeoPackage, GeoJSON, Shapefile, GeoParquet, ...) as is.

    Raises
    ------
    InputError
        When the file is missing or unreadable or the layer does not exist.
    """
    require_file(path, role)
    suffix = path.suffix.lower()
    try:
        if suffix in PARQUET_SUFFIXES:
            return gpd.read_parquet(path)
        if layer is not None:
            available = [str(name) for name in pyogrio.list_layers(path)[:, 0]]
            if layer not in available:
                raise InputError(
                    f"{role} file '{path}' has no layer \"{layer}\"; its layers are {available}"
                )
        with warnings.catch_warnings():
            # GDAL's note on an unclosed ring is replaced by the message naming the feature.
            warnings.filterwarnings("ignore", "Non closed ring detected", RuntimeWarning)
            return pyogrio.read_dataframe(path, layer=layer)
    except InputError:
        raise
    except Exception as exc:  # GDAL and pyarrow raise many kinds; all mean "unreadable"
        feature = bad_feature(path, layer, id_column)
        if feature is not None:
            raise InputError(
                f"{role} file '{path}': {feature} has a geometry that cannot be built ({exc}); "
                "fix that feature (a polygon ring must end at its first point) or remove it"
            ) from None
        raise InputError(
            f"{role} file '{path}' could not be read as a spatial layer ({exc}); "
            "use GeoPackage, GeoJSON, Shapefile or GeoParquet"
        ) from None


def crs_text(crs: CRS | None) -> str | None:
    """Return a short name of a CRS (``EPSG:4326``), or its full text without an authority."""
    if crs is None:
        return None
    auth = crs.to_authority()
    return f"{auth[0]}:{auth[1]}" if auth else crs.to_string()


def resolve_crs(
    layer: gpd.GeoDataFrame, declared: str | None, *, role: str, path: Path, key: str
) -> gpd.GeoDataFrame:
    """Give ``layer`` its CRS: the file's own, or the one the spec declares.

    Raises
    ------
    InputError
        When neither the file nor the spec gives a CRS, or the two disagree.
    """
    if declared is not None:
        try:
            declared_crs = CRS.from_user_input(declared)
        except Exception:
            raise InputError(
                f'{role}: crs "{declared}" is not a known CRS; write e.g. "EPSG:4326"'
            ) from None
        if layer.crs is None:
            layer = layer.set_crs(declared_crs)
            _check_degrees(layer, role=role, path=path)
            return layer
        if not CRS(layer.crs).equals(declared_crs, ignore_axis_order=True):
            raise InputError(
                f"{role} file '{path}' declares CRS {crs_text(layer.crs)} but the spec says "
                f'{key} = "{declared}"; remove {key} from the spec (it is only for files without '
                "a CRS) or fix the file"
            )
        return layer
    if layer.crs is None:
        raise InputError(
            f"{role} file '{path}' has no coordinate reference system; name it in the spec with "
            f'{key} = "EPSG:4326" (or the CRS the coordinates are in)'
        )
    _check_degrees(layer, role=role, path=path)
    return layer


def _check_degrees(layer: gpd.GeoDataFrame, *, role: str, path: Path) -> None:
    """Refuse longitudes/latitudes out of range: the file's CRS is then not the real one.

    GeoJSON files carry no CRS by default and are read as WGS 84 (RFC 7946), so a GeoJSON
    written in metres shows up here.
    """
    if layer.crs is None or not CRS(layer.crs).is_geographic or len(layer) == 0:
        return
    geoms = np.asarray(layer.geometry.array, dtype=object)
    finite = finite_coordinates(geoms)  # rows with NaN/inf are excluded later, by name
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms[finite])
    if not np.all(np.isfinite([xmin, ymin, xmax, ymax])):
        return
    if xmin < -360 or xmax > 360 or ymin < -90 or ymax > 90:
        raise InputError(
            f"{role} file '{path}' is read as {crs_text(layer.crs)} (longitude/latitude) but its "
            f"coordinates reach ({xmin:g}, {ymin:g}) to ({xmax:g}, {ymax:g}), outside the range of "
            "degrees; the file's coordinates are in another CRS. Save it with its CRS (GeoPackage "
            "keeps any CRS; GeoJSON holds only WGS 84 longitude/latitude)"
        )


def choose_analysis_crs(geometries: gpd.GeoSeries, override: str | None) -> CRS:
    """Return the equal-area CRS the analysis runs in.

    By default a Lambert azimuthal equal-area projection centred on the middle of the
    areas' extent (rounded to 0.01 degree so that it is stable), on WGS 84:
    areas are exact wherever the region lies; distances are near-true close to the centre.
    The extent's longitudes are unwrapped (:func:`~coverage_audit.geographic.longitude_span`),
    so a region cut at the antimeridian (RFC 7946) is centred near 180 degrees, not 0.
    """
    if override is not None:
        try:
            crs = CRS.from_user_input(override)
        except Exception:
            raise InputError(f'analysis_crs "{override}" is not a known CRS') from None
        if crs.is_geographic:
            raise InputError(
                f'analysis_crs "{override}" is geographic (degrees); areas and lengths need a '
                "projected equal-area CRS, e.g. EPSG:5070 for the conterminous United States"
            )
        return crs
    to_geo = Transformer.from_crs(geometries.crs, "EPSG:4326", always_xy=True)
    if CRS(geometries.crs).is_geographic:
        # Corners of each part's bounds: the bounding box of data cut at the antimeridian
        # spans the whole globe, each part's does not.
        parts = shapely.get_parts(np.asarray(geometries.array, dtype=object))
        corners = shapely.bounds(parts)
        gx, gy = corners[:, [0, 2, 0, 2]], corners[:, [1, 1, 3, 3]]
    else:
        bounds = geometries.total_bounds
        gx, gy = np.meshgrid(
            np.linspace(bounds[0], bounds[2], 5), np.linspace(bounds[1], bounds[3], 5)
        )
    lon, lat = to_geo.transform(gx.ravel(), gy.ravel())
    lon_c = float(np.round(span_centre(*longitude_span(np.asarray(lon))), 2))
    lat_c = float(np.round((np.nanmin(lat) + np.nanmax(lat)) / 2, 2))
    return CRS.from_proj4(
        f"+proj=laea +lat_0={lat_c:g} +lon_0={lon_c:g} +x_0=0 +y_0=0 +datum=WGS84 +units=m +no_defs"
    )


def polygonal(geoms: np.ndarray) -> np.ndarray:
    """Keep only the polygonal parts of each geometry (empty where none)."""
    out = np.empty(geoms.size, dtype=object)
    for k, g in enumerate(geoms):
        if g is None:
            out[k] = None
            continue
        kind = shapely.get_type_id(g)
        if kind in (3, 6):  # Polygon, MultiPolygon
            out[k] = g
        else:
            parts = [p for p in shapely.get_parts(g) if shapely.get_type_id(p) in (3, 6)]
            out[k] = shapely.union_all(parts) if parts else shapely.Polygon()
    return out


def kept_geometries(geoms: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Geometries where ``keep``, None elsewhere."""
    out = np.empty(geoms.size, dtype=object)
    out[keep] = geoms[keep]
    return out


def repair(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Repair invalid geometries with ``make_valid``, keeping polygonal parts.

    Returns the repaired array and a mask of the positions that were repaired.
    """
    geoms = np.asarray(geoms, dtype=object)
    present = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    invalid = np.zeros(geoms.size, dtype=bool)
    invalid[present] = ~_on_threads(shapely.is_valid, geoms[present])
    if invalid.any():
        fixed = shapely.make_valid(geoms[invalid])
        geoms = geoms.copy()
        geoms[invalid] = polygonal(fixed)
    return geoms, invalid


#: Geometries per task of a vectorised shapely test run on several threads.
_TEST_CHUNK = 20_000


def _on_threads(test: Any, geoms: np.ndarray) -> np.ndarray:
    """``test(geoms)`` (a vectorised shapely function, which releases the GIL) on all cores."""
    n = geoms.size
    workers = min(os.cpu_count() or 1, max(1, n // _TEST_CHUNK))
    if workers == 1:
        return np.asarray(test(geoms))
    cuts = np.linspace(0, n, workers + 1).astype(int)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        parts = list(pool.map(lambda k: test(geoms[cuts[k] : cuts[k + 1]]), range(workers)))
    return np.concatenate(parts)


#: Coordinates per thread below which projection runs on one thread.
_PROJECT_CHUNK = 200_000


def project_geometries(
    geoms: np.ndarray, source: Any, target: Any, coords: np.ndarray | None = None
) -> np.ndarray:
    """Return ``geoms`` transformed from CRS ``source`` to ``target`` (a new array).

    The same numbers as ``GeoSeries.to_crs`` (the same PROJ transformation, point by
    point), with the coordinates split across threads; geometries with z coordinates
    take geopandas' path. ``coords``, when given, must be
    ``shapely.get_coordinates(geoms)`` (read earlier by the caller).
    """
    geoms = np.asarray(geoms, dtype=object)
    if source is not None and CRS(source) == CRS(target):
        # Already in the analysis CRS (e.g. ``analysis_crs`` names the file's own CRS):
        # nothing to transform, the same numbers as PROJ's no-op would give.
        return geoms.copy()
    if geoms.size == 0 or shapely.has_z(geoms).any():
        return np.asarray(gpd.GeoSeries(geoms, crs=source).to_crs(target).array, dtype=object)
    if coords is None:
        coords = shapely.get_coordinates(geoms)
    n = len(coords)
    workers = max(1, min(os.cpu_count() or 1, n // _PROJECT_CHUNK))
    bounds = np.linspace(0, n, workers + 1).astype(int)
    out = np.empty_like(coords)

    def work(k: int) -> None:
        lo, hi = bounds[k], bounds[k + 1]
        transformer = Transformer.from_crs(source, target, always_xy=True)
        x, y = transformer.transform(coords[lo:hi, 0], coords[lo:hi, 1])
        out[lo:hi, 0] = x
        out[lo:hi, 1] = y

    if workers == 1:
        work(0)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            list(pool.map(work, range(workers)))
    return np.asarray(shapely.set_coordinates(geoms.copy(), out), dtype=object)
