"""Polygon geometries as the map page draws them: one delta-encoded integer chain.

Used by :mod:`coverage_audit.report.map` for the areas and the footprint and by
:mod:`coverage_audit.report.map_context` for the areas outside the study area.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import shapely


def polygon_parts(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return polygon parts and the index of the geometry each came from."""
    parts, owner = shapely.get_parts(geoms, return_index=True)
    # GeometryCollections left by repairs can hold lines or points: only polygons draw.
    is_poly = shapely.get_type_id(parts) == shapely.GeometryType.POLYGON
    is_poly &= ~shapely.is_empty(parts)
    # Nested collections (a MultiPolygon inside a collection) need a second pass.
    nested = shapely.get_type_id(parts) >= shapely.GeometryType.MULTIPOLYGON
    if nested.any():
        sub, sub_owner = shapely.get_parts(parts[nested], return_index=True)
        sub_owner = owner[nested][sub_owner]
        sub_poly = (shapely.get_type_id(sub) == shapely.GeometryType.POLYGON) & ~shapely.is_empty(
            sub
        )
        parts = np.concatenate([parts[is_poly], sub[sub_poly]])
        owner = np.concatenate([owner[is_poly], sub_owner[sub_poly]])
        order = np.argsort(owner, kind="stable")
        return parts[order], owner[order]
    return parts[is_poly], owner[is_poly]


def encode_shapes(geoms_lonlat: np.ndarray, decimals: int) -> dict[str, Any]:
    """Encode polygon geometries (lon/lat) as one delta-encoded integer chain.

    Coordinates are rounded to ``decimals`` places and written as integer steps from the
    previous vertex (the first from ``origin``); each ring's closing vertex and repeated
    vertices are dropped (a ring keeps at least three). Every geometry must have at least
    one polygon part.

    Parameters
    ----------
    geoms_lonlat : numpy.ndarray of shapely geometries
        Polygons or multipolygons in longitude/latitude.
    decimals : int
        Decimal places kept.

    Returns
    -------
    dict
        ``scale`` (10**decimals), ``origin`` ([lon, lat] in scaled units), ``xy`` (flat
        steps lon, lat, lon, lat ...), ``ring_len`` (vertices per ring), ``part_rings``
        (rings per polygon part, exterior first) and ``shape_parts`` (parts per geometry).
    """
    geoms_lonlat = np.asarray(geoms_lonlat)
    parts, owner = polygon_parts(geoms_lonlat)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    coords, ring_of = shapely.get_coordinates(rings, return_index=True)
    scale = 10**decimals
    q = np.rint(coords * scale).astype(np.int64)
    n_rings = rings.size
    ring_size = np.bincount(ring_of, minlength=n_rings)
    ring_end = np.cumsum(ring_size) - 1
    keep = np.ones(len(q), dtype=bool)
    keep[ring_end[ring_size > 0]] = False  # the closing vertex repeats the first
    same = np.zeros(len(q), dtype=bool)
    same[1:] = (q[1:] == q[:-1]).all(axis=1) & (ring_of[1:] == ring_of[:-1])
    keep &= ~same
    kept_per_ring = np.bincount(ring_of[keep], minlength=n_rings)
    # A ring that rounding shrinks below a triangle keeps all its vertices but the closing.
    short = kept_per_ring < 3
    if short.any():
        restore = short[ring_of]
        keep |= restore
        keep[ring_end[ring_size > 0]] &= ~restore[ring_end[ring_size > 0]]
        kept_per_ring = np.bincount(ring_of[keep], minlength=n_rings)
    q = q[keep]
    origin = q.min(axis=0) if len(q) else np.zeros(2, dtype=np.int64)
    steps = np.diff(q - origin, axis=0, prepend=np.zeros((1, 2), dtype=np.int64))
    shape_parts = np.bincount(owner, minlength=geoms_lonlat.size)
    return {
        "scale": scale,
        "origin": origin.tolist(),
        "xy": steps.ravel().tolist(),
        "ring_len": kept_per_ring.tolist(),
        "part_rings": np.bincount(ring_part, minlength=parts.size).tolist(),
        "shape_parts": shape_parts.tolist(),
    }


def has_polygon(geoms: np.ndarray) -> np.ndarray:
    """Boolean mask of geometries with at least one non-empty polygon part."""
    geoms = np.asarray(geoms)
    result = np.zeros(geoms.size, dtype=bool)
    valid = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if valid.any():
        _, owner = polygon_parts(geoms[valid])
        idx = np.flatnonzero(valid)
        result[idx[np.unique(owner)]] = True
    return result


def empty_shapes() -> dict[str, Any]:
    """Return the encoding of no shapes at all (as :func:`encode_shapes` writes it)."""
    return {
        "scale": 1,
        "origin": [0, 0],
        "xy": [],
        "ring_len": [],
        "part_rings": [],
        "shape_parts": [],
    }
