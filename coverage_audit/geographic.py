"""Longitudes across the antimeridian: the data's real extent and geometries made whole.

GeoJSON (RFC 7946, section 3.1.9) asks that a geometry crossing the antimeridian be cut
in two at 180 degrees, so an area straddling it arrives as a MultiPolygon with one part
near +180 and one near -180, and its neighbours across the line share no coordinates with
it. Taken at face value such data spans 360 degrees of longitude: a projection centred on
the middle of the bounding box lands on the far side of the globe, and the two halves of
one area are never rejoined.

This module finds the shortest arc of longitudes that holds every coordinate (the real
extent, longitudes unwrapped), and shifts coordinates by whole turns of 360 degrees onto
that arc, so that the cut edge at -180 lands exactly on the one at +180 (-180 + 360 is
exactly 180 in floating point); the parts of each geometry are then unioned into one.
Projected afterwards with any projection, the halves meet along one shared edge.
"""

from __future__ import annotations

import numpy as np
import shapely

#: Polygon and MultiPolygon type ids of shapely.
_POLYGONAL = (3, 6)


def longitude_span(lon: np.ndarray) -> tuple[float, float]:
    """Return the shortest arc ``(west, east)`` of longitudes that holds every value.

    Parameters
    ----------
    lon : numpy.ndarray
        Longitudes in degrees, any turn (NaN ignored).

    Returns
    -------
    tuple of float
        ``west`` in [-180, 180) and ``east >= west``; ``east`` exceeds 180 when the arc
        crosses the antimeridian. ``(nan, nan)`` without a finite value.

    Notes
    -----
    The longitudes are put on one turn and sorted; the arc left is the circle minus its
    largest gap between neighbouring values. When the largest gap is the one across the
    antimeridian the arc is simply ``(min, max)``.

    Examples
    --------
    >>> longitude_span(np.array([179.5, -179.5, 180.0, -180.0]))
    (179.5, 180.5)
    >>> longitude_span(np.array([-75.0, -73.5]))
    (-75.0, -73.5)
    """
    values = np.asarray(lon, dtype=float)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return float("nan"), float("nan")
    turned = np.sort(np.mod(values + 180.0, 360.0) - 180.0)
    gaps = np.diff(np.concatenate([turned, turned[:1] + 360.0]))
    k = int(np.argmax(gaps))
    if k == turned.size - 1:
        return float(turned[0]), float(turned[-1])
    return float(turned[k + 1]), float(turned[k] + 360.0)


def span_centre(west: float, east: float) -> float:
    """Return the middle of an arc of longitudes, on [-180, 180)."""
    middle = (west + east) / 2.0
    # Whole turns only, so an arc that does not cross the antimeridian keeps its middle
    # bit for bit.
    while middle >= 180.0:
        middle -= 360.0
    while middle < -180.0:
        middle += 360.0
    return float(middle)


def _part_longitudes(geoms: np.ndarray) -> np.ndarray:
    """Longitudes of the corners of each part's bounds (a part's extent is one arc)."""
    parts = shapely.get_parts(geoms[~shapely.is_missing(geoms)])
    if parts.size == 0:
        return np.empty(0)
    bounds = shapely.bounds(parts)
    return bounds[:, [0, 2]].ravel()


def data_centre(geoms: np.ndarray) -> float:
    """Return the middle longitude of the geometries' real extent (NaN without any)."""
    geoms = np.asarray(geoms, dtype=object)
    west, east = longitude_span(_part_longitudes(geoms))
    return span_centre(west, east) if np.isfinite(west) else float("nan")


def shift_longitudes(lon: np.ndarray, centre: float) -> np.ndarray:
    """Return longitudes moved by whole turns onto [centre - 180, centre + 180)."""
    lon = np.asarray(lon, dtype=float)
    if not np.isfinite(centre):
        return lon
    low = centre - 180.0
    return np.where(lon < low, lon + 360.0, np.where(lon >= low + 360.0, lon - 360.0, lon))


def unwrap_longitudes(geoms: np.ndarray, centre: float | None = None) -> tuple[np.ndarray, int]:
    """Shift longitudes by whole turns onto the data's own arc; rejoin split geometries.

    Parameters
    ----------
    geoms : numpy.ndarray of shapely geometries
        Geometries in a geographic CRS (longitude first), None allowed.
    centre : float, optional
        Longitude to centre on; by default the middle of the geometries' own extent
        (:func:`data_centre`). Give one centre to several layers that are shown together.

    Returns
    -------
    geoms : numpy.ndarray
        The geometries, unchanged where no coordinate moved; where one moved, the
        coordinates shifted by 360 degrees onto the arc of :func:`longitude_span`
        (centred on its middle) and, for polygons, the parts unioned, so that halves cut
        at the antimeridian become one polygon.
    moved : int
        Geometries that had a coordinate shifted.

    Notes
    -----
    A coordinate ``x`` becomes ``x + 360`` below ``centre - 180`` and ``x - 360`` at or
    above ``centre + 180``; nothing else changes, so data that does not cross the
    antimeridian comes back as it was. The inputs are not modified.
    """
    geoms = np.asarray(geoms, dtype=object)
    if geoms.size == 0:
        return geoms, 0
    if centre is None:
        centre = data_centre(geoms)
    if not np.isfinite(centre):
        return geoms, 0
    low = centre - 180.0
    high = low + 360.0
    present = ~shapely.is_missing(geoms)
    bounds = np.full((geoms.size, 4), np.nan)
    bounds[present] = shapely.bounds(geoms[present])
    with np.errstate(invalid="ignore"):
        moved = present & ((bounds[:, 0] < low) | (bounds[:, 2] >= high))
    if not moved.any():
        return geoms, 0

    def shift(xy: np.ndarray) -> np.ndarray:
        out = xy.copy()
        out[:, 0] = shift_longitudes(xy[:, 0], float(centre))
        return out

    out = geoms.copy()
    shifted = shapely.transform(geoms[moved], shift)
    for k, g in zip(np.flatnonzero(moved), shifted, strict=True):
        if shapely.get_type_id(g) == 6:
            g = shapely.union_all(shapely.get_parts(g))
            if shapely.get_type_id(g) not in _POLYGONAL:
                g = shapely.union_all(
                    [p for p in shapely.get_parts(g) if shapely.get_type_id(p) in _POLYGONAL]
                )
        out[k] = g
    return out, int(moved.sum())
