"""The map's display geometry: simplification tolerance, coverage simplification, decimals.

Geometry is simplified for display only, as one coverage when the areas tile the region
(neighbours keep their shared edges) and area by area otherwise, with a tolerance scaled
to the region and to its small areas; coordinates keep the decimals that resolve a tenth
of the tolerance.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import shapely

#: Display simplification tolerance as a fraction of the region's larger extent: a
#: quarter of a pixel on a 1,250-pixel wide view of the whole region.
EXTENT_FRACTION = 1.0 / 5_000
#: Cap of the tolerance as a fraction of the square root of the 10th-percentile area, so
#: that small urban areas in a large rural region keep their shape.
SMALL_AREA_FRACTION = 0.1

# --------------------------------------------------------------------------- geometry


def _unit_metres(crs: Any) -> tuple[float, str]:
    """Return (metres per CRS unit, unit name); degrees count as ~111 km at the equator."""
    if crs is None:
        return 1.0, "unknown"
    if crs.is_geographic:
        return 111_320.0, "degree"
    try:
        axis = crs.axis_info[0]
        return float(axis.unit_conversion_factor), "m" if axis.unit_name == "metre" else str(
            axis.unit_name
        )
    except (IndexError, AttributeError):  # pragma: no cover - every projected CRS has axes
        return 1.0, "unknown"


def display_tolerance(geoms: np.ndarray) -> float:
    """Return the display simplification tolerance for a set of area geometries.

    The tolerance is :data:`EXTENT_FRACTION` of the larger side of the bounding box, capped
    at :data:`SMALL_AREA_FRACTION` of the square root of the 10th-percentile area (common
    practice, no source: a fraction of a screen pixel at the whole-region view, and never
    so coarse that the smaller areas lose their shape).

    Parameters
    ----------
    geoms : numpy.ndarray of shapely geometries
        Area geometries in a projected CRS.

    Returns
    -------
    float
        Tolerance in CRS units; 0 for an empty or degenerate input.
    """
    geoms = np.asarray(geoms)
    keep = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if not keep.any():
        return 0.0
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms[keep])
    extent = max(xmax - xmin, ymax - ymin)
    small = math.sqrt(float(np.quantile(shapely.area(geoms[keep]), 0.1)))
    tol = min(extent * EXTENT_FRACTION, small * SMALL_AREA_FRACTION)
    return float(tol) if math.isfinite(tol) and tol > 0 else 0.0


def _simplify(geoms: np.ndarray, tolerance: float) -> tuple[np.ndarray, str]:
    """Simplify areas for display, keeping shared edges when they form a valid coverage."""
    if tolerance <= 0:
        return geoms, "none"
    if _may_be_coverage(geoms) and shapely.coverage_is_valid(geoms):
        return shapely.coverage_simplify(geoms, tolerance), "coverage"
    # Overlapping or misaligned areas: simplifying each alone may open slivers between
    # neighbours on screen, which is acceptable for display and is reported in MapInfo.
    # The fast simplification first; the topology-preserving one only where it failed.
    fast = shapely.simplify(geoms, tolerance, preserve_topology=False)
    bad = shapely.is_empty(fast) | ~shapely.is_valid(fast)
    bad &= ~shapely.is_empty(geoms)
    if bad.any():
        fast = fast.copy()
        fast[bad] = shapely.simplify(geoms[bad], tolerance, preserve_topology=True)
    return fast, "per_area"


#: Below this share of vertices shared with another area, the areas cannot be a tiling
#: whose shared edges match vertex for vertex (GEOS' check of that is skipped).
_SHARED_VERTEX_SHARE = 0.3
#: Areas looked at by that test.
_SAMPLE_AREAS = 400


def _may_be_coverage(geoms: np.ndarray) -> bool:
    """Tell cheaply whether most vertices appear in more than one area (a clean tiling).

    Looks at up to :data:`_SAMPLE_AREAS` areas spread through the layer and their
    neighbours (by bounding box): the share of the sampled areas' vertices that are also
    vertices of another area.
    """
    if geoms.size < 2:
        return True
    sample = np.unique(np.linspace(0, geoms.size - 1, min(geoms.size, _SAMPLE_AREAS)).astype(int))
    _, near = shapely.STRtree(geoms).query(geoms[sample])
    near = np.union1d(near, sample)
    parts, part_owner = shapely.get_parts(geoms[near], return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    coords, coord_ring = shapely.get_coordinates(rings, return_index=True)
    if coords.shape[0] == 0:
        return True
    keep = np.r_[coord_ring[1:] == coord_ring[:-1], False]  # drop each closing vertex
    owner = near[part_owner[ring_part[coord_ring[keep]]]]
    x, y = coords[keep, 0], coords[keep, 1]
    order = np.lexsort((owner, y, x))
    x, y, owner = x[order], y[order], owner[order]
    start = np.r_[True, (x[1:] != x[:-1]) | (y[1:] != y[:-1])]
    first = np.flatnonzero(start)
    several = np.minimum.reduceat(owner, first) != np.maximum.reduceat(owner, first)
    shared = np.repeat(several, np.diff(np.r_[first, x.size]))
    sampled = np.isin(owner, sample)
    if not sampled.any():
        return True
    return bool(shared[sampled].mean() >= _SHARED_VERTEX_SHARE)


def _coordinate_decimals(tolerance_m: float) -> int:
    """Decimals of degrees that resolve a tenth of the tolerance (4 to 7).

    One degree of latitude is about 111 km, so 5 decimals are about 1.1 m.
    """
    if tolerance_m <= 0:
        return 6
    step_deg = tolerance_m / 10.0 / 111_320.0
    return int(min(7, max(4, math.ceil(-math.log10(step_deg)))))
