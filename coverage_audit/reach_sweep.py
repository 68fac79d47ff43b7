"""Covered fractions under reach circles of several radii, for the radius sweep.

Takes the analysed areas (projected analysis CRS), the service points (longitude,
latitude) and one array of radii per sweep step, and gives each area's covered fraction
under the union of the circles of each step: the same quantity as
:func:`coverage_audit.coverage.covered_fraction` over the dissolved circles (same circle
vertices, from :func:`coverage_audit.footprint.circle_rings`), measured without
dissolving them. The areas' ring coordinates are tabulated once; for each step an STR
tree of the areas gives the circles whose boxes meet each area, and a compiled kernel
(:mod:`coverage_audit._clip`) decides, per area, whether one circle contains it (covered
whole), none reaches it (uncovered) or the circles' edges cross it, and then clips its
rings by the crossing circles (inclusion-exclusion over the circles that overlap inside
the area). An area the kernel leaves aside (a circle that is not convex in the analysis
CRS near it, or too many overlapping circles) is measured by a shapely overlay with the
union of its circles; without numba every step takes the overlay path.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np
import shapely

from . import _clip
from .coverage import covered_fraction
from .footprint import circle_rings, cut_pieces


def _ring_tables(geoms: np.ndarray) -> tuple[np.ndarray, ...]:
    """Coordinates of every ring of ``geoms`` and the ring and area pointers into them.

    ``geoms`` must be polygons and multipolygons (``shapely.to_ragged_array`` raises
    ``ValueError`` otherwise).
    """
    kind, xy, offsets = shapely.to_ragged_array(geoms)
    ring_ptr = np.asarray(offsets[0], dtype=np.int64)
    if kind == shapely.GeometryType.POLYGON:
        poly_ptr = area_ring_ptr = np.asarray(offsets[1], dtype=np.int64)
    else:
        poly_ptr = np.asarray(offsets[1], dtype=np.int64)
        area_ring_ptr = poly_ptr[np.asarray(offsets[2], dtype=np.int64)]
    ring_sign = -np.ones(ring_ptr.size - 1)
    ring_sign[poly_ptr[:-1][np.diff(poly_ptr) > 0]] = 1.0
    return np.ascontiguousarray(xy, dtype=np.float64), ring_ptr, ring_sign, area_ring_ptr


def _pseudo_angles(dx: np.ndarray, dy: np.ndarray) -> np.ndarray:
    """:func:`coverage_audit._clip._pseudo_angle` over arrays."""
    total = np.abs(dx) + np.abs(dy)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = np.where(total > 0, dy / np.where(total > 0, total, 1.0), 0.0)
    return np.where(dx < 0, 2.0 - p, np.where(p < 0, 4.0 + p, p))


def _disks(rings: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Circles as the kernel takes them, with a centre, two disks and vertex angles.

    Returns the rings counter-clockwise from the vertex of smallest pseudo-angle about
    the centre (the mean of the vertices), a circles x 5 table (centre x, y; squared
    radius of a disk about the centre inside the circle, shrunk by a relative 1e-9
    against rounding; of a disk holding the circle, grown likewise; 1.0 where the circle
    is convex with strictly ascending angles, else 0.0, when the kernel leaves it to the
    overlay path) and the vertices' pseudo-angles.
    """
    x, y = rings[..., 0], rings[..., 1]
    xn, yn = np.roll(x, -1, axis=1), np.roll(y, -1, axis=1)
    signed = 0.5 * np.sum((x - x[:, :1]) * (yn - y[:, :1]) - (xn - x[:, :1]) * (y - y[:, :1]), 1)
    rings = np.where((signed < 0)[:, None, None], rings[:, ::-1, :], rings)
    x, y = rings[..., 0], rings[..., 1]
    mx, my = x.mean(axis=1), y.mean(axis=1)
    angles = _pseudo_angles(x - mx[:, None], y - my[:, None])
    first = np.argmin(angles, axis=1)
    roll = (np.arange(rings.shape[1])[None, :] + first[:, None]) % rings.shape[1]
    rows = np.arange(rings.shape[0])[:, None]
    rings = np.ascontiguousarray(rings[rows, roll], dtype=np.float64)
    angles = np.ascontiguousarray(angles[rows, roll])
    x, y = rings[..., 0], rings[..., 1]
    ex, ey = np.roll(x, -1, axis=1) - x, np.roll(y, -1, axis=1) - y
    turn = ex * np.roll(ey, -1, axis=1) - ey * np.roll(ex, -1, axis=1)
    usable = np.all(turn >= 0, axis=1) & (signed != 0) & np.all(np.diff(angles, axis=1) > 0, 1)
    # Distance from the centre to each edge's line (positive: the centre is inside).
    length = np.hypot(ex, ey)
    with np.errstate(divide="ignore", invalid="ignore"):
        to_line = (ex * (my[:, None] - y) - ey * (mx[:, None] - x)) / length
    to_line = np.where(length > 0, to_line, np.inf)
    inner = np.where(usable, np.maximum(np.min(to_line, axis=1), 0.0), 0.0) * (1 - 1e-9)
    outer = np.sqrt(np.max((x - mx[:, None]) ** 2 + (y - my[:, None]) ** 2, axis=1)) * (1 + 1e-9)
    table = np.stack([mx, my, inner**2, outer**2, usable.astype(float)], axis=1)
    return rings, table, angles


def circle_fractions(
    geoms: np.ndarray,
    lon: np.ndarray,
    lat: np.ndarray,
    radii: Sequence[np.ndarray],
    crs: Any,
    vertices: int,
) -> list[np.ndarray]:
    """Covered fraction of each area under the reach circles of each radius array.

    Parameters
    ----------
    geoms : numpy.ndarray of shapely polygons
        Areas in the projected analysis CRS.
    lon, lat : numpy.ndarray
        Service points in degrees (WGS 84).
    radii : sequence of numpy.ndarray
        For each step of the sweep, the geodesic reach of every point in metres.
    crs : pyproj.CRS
        The analysis CRS.
    vertices : int
        Vertices per circle (as for the footprint).

    Returns
    -------
    list of numpy.ndarray
        One array of fractions in [0, 1] per step (0 for an area of zero size).
    """
    rings = [circle_rings(lon, lat, r, crs, vertices) for r in radii]
    return ring_fractions(geoms, rings)


def ring_fractions(geoms: np.ndarray, rings: Sequence[np.ndarray]) -> list[np.ndarray]:
    """Covered fraction of each area under the union of each set of convex rings.

    Parameters
    ----------
    geoms : numpy.ndarray of shapely polygons
        Areas (polygons or multipolygons) in a projected CRS.
    rings : sequence of numpy.ndarray, shape (circles, vertices, 2)
        For each step, the vertices of its circles (not closed), in the same CRS. A
        ring that is not convex is measured by the overlay path.

    Returns
    -------
    list of numpy.ndarray
        One array of fractions in [0, 1] per step (0 for an area of zero size).
    """
    geoms = np.asarray(geoms, dtype=object)
    n = geoms.size
    kinds = shapely.get_type_id(geoms)
    if _clip.covered_areas is None or n == 0 or not np.all((kinds == 3) | (kinds == 6)):
        return [_overlay_fractions(geoms, ring) for ring in rings]
    size = shapely.area(geoms)
    tree = shapely.STRtree(geoms)
    boxes = []
    for ring in rings:
        lo, hi = ring.min(axis=1), ring.max(axis=1)
        boxes.append(shapely.box(lo[:, 0], lo[:, 1], hi[:, 0], hi[:, 1]))
    # Areas any step may reach: tabulate their rings once.
    reached = np.zeros(n, dtype=bool)
    for box in boxes:
        reached[tree.query(box)[1]] = True
    reached &= size > 0
    if not reached.any():
        return [np.zeros(n) for _ in rings]
    table_of = np.full(n, -1, dtype=np.int64)
    listed = np.flatnonzero(reached)
    table_of[listed] = np.arange(listed.size)
    xy, ring_ptr, ring_sign, area_ring_ptr = _ring_tables(geoms[listed])
    out = []
    for ring, box in zip(rings, boxes, strict=True):
        if ring.shape[0] == 0:
            out.append(np.zeros(n))
            continue
        circle_idx, area_idx = tree.query(box)
        keep = reached[area_idx]
        circle_idx, area_idx = circle_idx[keep], area_idx[keep]
        order = np.lexsort((circle_idx, area_idx))
        circle_idx, area_idx = circle_idx[order], area_idx[order]
        areas, first = np.unique(area_idx, return_index=True)
        cand_ptr = np.append(first, area_idx.size).astype(np.int64)
        circles, disks, angles = _disks(ring)
        covered, status = _kernel_on_threads(
            (xy, ring_ptr, ring_sign, area_ring_ptr),
            table_of[areas],
            cand_ptr,
            (circle_idx.astype(np.int64), circles, disks, angles),
            size[areas],
        )
        left = np.flatnonzero(status != _clip.DONE)
        if left.size:
            polygons = shapely.polygons(np.concatenate([ring, ring[:, :1, :]], axis=1))
            for t in left:
                near = polygons[circle_idx[cand_ptr[t] : cand_ptr[t + 1]]]
                covered[t] = shapely.area(
                    shapely.intersection(geoms[areas[t]], shapely.union_all(near))
                )
        fraction = np.zeros(n)
        fraction[areas] = covered / size[areas]
        out.append(np.clip(fraction, 0.0, 1.0))
    return out


#: Areas per task when the kernel runs on several threads (it releases the GIL).
_TASK_AREAS = 4_096


def _kernel_on_threads(
    rings: tuple[np.ndarray, ...],
    areas: np.ndarray,
    cand_ptr: np.ndarray,
    circles: tuple[np.ndarray, ...],
    size: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`coverage_audit._clip.covered_areas` over blocks of areas, on all cores."""
    n = areas.size
    covered = np.zeros(n)
    status = np.zeros(n, dtype=np.int8)
    cuts = list(range(0, n, _TASK_AREAS)) + [n]

    def work(k: int) -> None:
        lo, hi = cuts[k], cuts[k + 1]
        # cand_ptr holds absolute positions into the candidate list: a slice serves as is.
        covered[lo:hi], status[lo:hi] = _clip.covered_areas(
            *rings, areas[lo:hi], cand_ptr[lo : hi + 1], *circles, size[lo:hi]
        )

    workers = min(os.cpu_count() or 1, len(cuts) - 1)
    if workers <= 1:
        for k in range(len(cuts) - 1):
            work(k)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            list(pool.map(work, range(len(cuts) - 1)))
    return covered, status


def _overlay_fractions(geoms: np.ndarray, ring: np.ndarray) -> np.ndarray:
    """Fractions under the dissolved circles (the footprint's own path)."""
    if ring.shape[0] == 0:
        return np.zeros(geoms.size)
    polygons = shapely.polygons(np.concatenate([ring, ring[:, :1, :]], axis=1))
    return covered_fraction(geoms, cut_pieces(shapely.union_all(polygons)))
