"""Shared edges between areas, measured within a tolerance, with plain numpy on segments.

Boundary files often do not share vertices along common edges (generalised, reprojected
or re-cut layers): two neighbours follow the same line with vertices at different places
or a hair apart. :func:`edge_table` finds, for every pair of areas, the length of boundary
they share within a small tolerance (:data:`EDGE_TOLERANCE_M`), which areas meet at a
point, and how much of each area's boundary faces no analysed area, split into the
region's outer edge and the edges of holes (gaps in the region: water, areas left out of
the analysis).

Method
------
1. Every ring is oriented (exteriors counter-clockwise, holes clockwise, so the area is
   always on the left) and simplified by Douglas-Peucker within a thousandth of the
   tolerance (a straight line densified with extra vertices becomes one segment again;
   a length changes by far less than a millimetre).
2. Segments of different areas whose boxes, grown by the tolerance, meet are candidate
   pairs (an STR tree over segment boxes). For a pair (A, B), when both ends of B lie
   within half the tolerance of A's line, the stretch of A covered by B's projection is
   shared; the pair's shared length is the mean of the lengths measured along each side.
3. What remains of each segment once every shared stretch is removed faces no analysed
   area. Those free pieces are chained by their ends (within the tolerance) into loops;
   a loop whose signed area is positive runs around the region (area on the inside: the
   outer edge), a negative one around a hole.
4. Areas meet at a point (queen neighbours) when their simplified boundaries come within
   the tolerance of each other.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
import pandas as pd
import shapely
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

#: Two boundaries closer than this (metres, in the analysis CRS) are taken for the same
#: line; the tolerance in use is recorded with the weights in summary.json.
EDGE_TOLERANCE_M = 0.1
#: ... or closer than this fraction of the layer's extent, when that is smaller (a layer in
#: other units, or a very small one).
EDGE_TOLERANCE_SHARE = 1e-6
#: Rings are simplified within this fraction of the tolerance: enough to undo a
#: densification along straight lines, far too little to change a length measurably.
_SIMPLIFY_FRACTION = 1e-3
#: A shared stretch no longer than this many tolerances is a point contact, not an edge.
_MIN_EDGE_TOLERANCES = 2.0
#: Segments matched at once (bounds the memory of the candidate pairs).
_CHUNK = 100_000
#: Segments per strip of boxes held in memory at once (see :func:`_strips`).
_STRIP_SEGMENTS = 1_000_000


@dataclass(frozen=True)
class EdgeTable:
    """Shared-edge lengths and point contacts of a set of areas.

    Attributes
    ----------
    pairs : pandas.DataFrame
        ``i``, ``j`` (positions, ``i < j``) and ``length`` (metres) of every pair sharing
        an edge longer than twice the tolerance.
    touching : numpy.ndarray of shape (m, 2)
        Every pair (``i < j``) whose boundaries come within the tolerance (queen pairs).
    perimeter : numpy.ndarray
        Length of each area's boundary.
    outer_edge : numpy.ndarray
        Length of each area's boundary on the region's outer edge.
    hole_edge : numpy.ndarray
        Length of each area's boundary along holes of the region (no analysed area
        beyond, inside the region).
    tolerance : float
        The tolerance used, in metres.
    """

    pairs: pd.DataFrame
    touching: np.ndarray
    perimeter: np.ndarray
    outer_edge: np.ndarray
    hole_edge: np.ndarray
    tolerance: float


def _segments(geoms: np.ndarray, tolerance: float, simplify: bool) -> tuple[np.ndarray, ...]:
    """Oriented (optionally simplified) segments: start (x, y), end (x, y), owner area."""
    oriented = shapely.orient_polygons(geoms)
    simple = oriented
    if simplify:
        simple = shapely.simplify(oriented, tolerance * _SIMPLIFY_FRACTION, preserve_topology=False)
        lost = shapely.is_empty(simple) | ~np.isin(shapely.get_type_id(simple), (3, 6))
        simple = np.where(lost, oriented, simple)
    parts, part_owner = shapely.get_parts(simple, return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    coords, coord_ring = shapely.get_coordinates(rings, return_index=True)
    same = coord_ring[1:] == coord_ring[:-1]
    p, q = coords[:-1][same], coords[1:][same]
    owner = part_owner[ring_part[coord_ring[:-1][same]]]
    proper = (p != q).any(axis=1)
    return p[proper], q[proper], owner[proper].astype(np.int64), simple


def default_tolerance(geometries: np.ndarray) -> float:
    """Return the smaller of :data:`EDGE_TOLERANCE_M` and a millionth of the layer's extent."""
    geoms = np.asarray(geometries, dtype=object)
    if geoms.size == 0:
        return EDGE_TOLERANCE_M
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms)
    extent = max(xmax - xmin, ymax - ymin)
    if not np.isfinite(extent) or extent <= 0:
        return EDGE_TOLERANCE_M
    return float(min(EDGE_TOLERANCE_M, EDGE_TOLERANCE_SHARE * extent))


def edge_table(
    geometries: np.ndarray, tolerance: float | None = None, *, simplify: bool = True
) -> EdgeTable:
    """Measure shared edges, point contacts and free edges of the areas.

    Parameters
    ----------
    geometries : numpy.ndarray of shapely Polygons or MultiPolygons
        Areas in a projected (metric) CRS.
    tolerance : float, optional
        Distance (CRS units, metres) under which two boundaries are taken for the same
        line; by default :func:`default_tolerance`.
    simplify : bool
        Simplify the rings first (step 1); without it lengths are exact on a clean
        coverage, at the cost of more segments.

    Returns
    -------
    EdgeTable
    """
    geoms = np.asarray(geometries, dtype=object)
    n = geoms.size
    if tolerance is None:
        tolerance = default_tolerance(geoms)
    perimeter = shapely.length(geoms)
    p, q, owner, simple = _segments(geoms, tolerance, simplify)
    seg_len = np.hypot(*(q - p).T)
    grow = tolerance
    lo = np.minimum(p, q) - grow
    hi = np.maximum(p, q) + grow
    found = [
        _covered(boxes, query, tree_ids, p, q, owner, seg_len, tolerance)
        for boxes, query, tree_ids in _strips(lo, hi)
    ]
    a = np.concatenate([f[0] for f in found]) if found else np.zeros(0, dtype=np.int64)
    b = np.concatenate([f[1] for f in found]) if found else np.zeros(0, dtype=np.int64)
    start = np.concatenate([f[2] for f in found]) if found else np.zeros(0)
    end = np.concatenate([f[3] for f in found]) if found else np.zeros(0)
    covered = end - start

    # Pair lengths: each side measured along its own segments, then averaged.
    oa, ob = owner[a], owner[b]
    summed = coo_matrix(
        (covered, (np.minimum(oa, ob), np.maximum(oa, ob))), shape=(n, n)
    ).tocsr()  # duplicates are added up
    summed.sort_indices()
    summed = summed.tocoo()
    both = summed.data / 2.0
    edge_pairs = both > _MIN_EDGE_TOLERANCES * tolerance
    pairs = pd.DataFrame(
        {
            "i": summed.row[edge_pairs].astype(np.int64),
            "j": summed.col[edge_pairs].astype(np.int64),
            "length": both[edge_pairs],
        }
    )

    outer_edge, hole_edge = _free_edges(p, q, owner, seg_len, a, start, end, n, tolerance)
    touching = _touching(simple, tolerance)
    return EdgeTable(
        pairs=pairs,
        touching=touching,
        perimeter=perimeter,
        outer_edge=outer_edge,
        hole_edge=hole_edge,
        tolerance=float(tolerance),
    )


def _strips(lo: np.ndarray, hi: np.ndarray) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Segment boxes in strips along x, so that only one strip's boxes sit in memory.

    Each segment is asked about once, in the strip of its box's left side; a strip's
    tree holds every box reaching into the x-range of the boxes asked there, so each
    pair of meeting boxes is found exactly as by one tree over all boxes. Yields the
    strip's boxes (tree order), the positions among them of the boxes asked, and the
    boxes' segment numbers.
    """
    n = lo.shape[0]
    if n == 0:
        return
    n_strips = max(1, -(-n // _STRIP_SEGMENTS))
    cuts = np.quantile(lo[:, 0], np.linspace(0, 1, n_strips + 1)[1:-1]) if n_strips > 1 else []
    strip = np.searchsorted(np.asarray(cuts, dtype=float), lo[:, 0], side="right")
    for k in range(n_strips):
        asked = strip == k
        if not asked.any():
            continue
        x0, x1 = lo[asked, 0].min(), hi[asked, 0].max()
        tree_ids = np.flatnonzero((hi[:, 0] >= x0) & (lo[:, 0] <= x1))
        boxes = shapely.box(lo[tree_ids, 0], lo[tree_ids, 1], hi[tree_ids, 0], hi[tree_ids, 1])
        query = np.flatnonzero(asked[tree_ids])
        yield boxes, query, tree_ids


def _covered(
    boxes: np.ndarray,
    query: np.ndarray,
    tree_ids: np.ndarray,
    p: np.ndarray,
    q: np.ndarray,
    owner: np.ndarray,
    seg_len: np.ndarray,
    tolerance: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Stretches of the asked segments' neighbours covered by other areas' segments.

    ``boxes`` are one strip's grown segment boxes (segment numbers ``tree_ids``) and
    ``query`` the positions among them of the segments asked in this strip. Returns, for
    every pair (a, b) of segments of different areas where b runs along a's line, a, b
    and the stretch of a it covers.
    """
    tree = shapely.STRtree(boxes)
    out: list[tuple[np.ndarray, ...]] = []
    # Segments are matched in chunks, so that the candidate pairs never all sit in memory.
    for first in range(0, query.size, _CHUNK):
        asked = query[first : first + _CHUNK]
        b, a = tree.query(boxes[asked])
        a = tree_ids[a].astype(np.int64)
        b = tree_ids[asked[b]].astype(np.int64)
        out.append(_along(a, b, p, q, owner, seg_len, tolerance))
    return tuple(np.concatenate([o[k] for o in out]) for k in range(4))  # type: ignore[return-value]


def _along(
    a: np.ndarray,
    b: np.ndarray,
    p: np.ndarray,
    q: np.ndarray,
    owner: np.ndarray,
    seg_len: np.ndarray,
    tolerance: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Of candidate pairs (a, b), those where b runs along a's line, with a's stretch."""
    keep = owner[a] != owner[b]
    a, b = a[keep], b[keep]
    # Stretch of segment a covered by segment b, when b runs along a's line.
    d = (q[a] - p[a]) / seg_len[a][:, None]
    u = p[b] - p[a]
    v = q[b] - p[a]
    cross_u = d[:, 0] * u[:, 1] - d[:, 1] * u[:, 0]
    cross_v = d[:, 0] * v[:, 1] - d[:, 1] * v[:, 0]
    tu = d[:, 0] * u[:, 0] + d[:, 1] * u[:, 1]
    tv = d[:, 0] * v[:, 0] + d[:, 1] * v[:, 1]
    start = np.clip(np.minimum(tu, tv), 0.0, seg_len[a])
    end = np.clip(np.maximum(tu, tv), 0.0, seg_len[a])
    # Offset of b from a's line where b's projection enters and leaves a (b clipped to a,
    # so a long b that leaves a's line beyond a's ends still counts along a).
    span = tv - tu
    safe = np.where(span == 0.0, 1.0, span)
    off_start = cross_u + (start - tu) / safe * (cross_v - cross_u)
    off_end = cross_u + (end - tu) / safe * (cross_v - cross_u)
    along = (np.abs(off_start) <= tolerance / 2.0) & (np.abs(off_end) <= tolerance / 2.0)
    along &= (end > start) & (span != 0.0)
    return a[along], b[along], start[along], end[along]


def _touching(geoms: np.ndarray, tolerance: float) -> np.ndarray:
    """Pairs (i < j) of areas whose boundaries come within ``tolerance``."""
    bounds = shapely.bounds(geoms)
    boxes = shapely.box(
        bounds[:, 0] - tolerance,
        bounds[:, 1] - tolerance,
        bounds[:, 2] + tolerance,
        bounds[:, 3] + tolerance,
    )
    left, right = shapely.STRtree(geoms).query(boxes)
    keep = left < right
    left, right = left[keep], right[keep]
    near = shapely.dwithin(geoms[left], geoms[right], tolerance)
    return np.column_stack([left[near], right[near]]).astype(np.int64)


def _free_edges(
    p: np.ndarray,
    q: np.ndarray,
    owner: np.ndarray,
    seg_len: np.ndarray,
    seg: np.ndarray,
    start: np.ndarray,
    end: np.ndarray,
    n: int,
    tolerance: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Length of each area's boundary on the region's outer edge and along its holes."""
    # Merge the covered stretches of each segment, then take the gaps between them.
    order = np.lexsort((start, seg))
    seg, start, end = seg[order], start[order], end[order]
    scale = float(seg_len.max()) + 1.0 if seg_len.size else 1.0
    running = np.maximum.accumulate(end + seg * scale) - seg * scale
    first = np.r_[True, seg[1:] != seg[:-1]][: seg.size]
    before = np.r_[0.0, running[:-1]][: seg.size]
    before[first] = 0.0
    last = np.r_[seg[1:] != seg[:-1], True][: seg.size]
    gap_seg = [seg, seg[last]]
    gap_lo = [before, running[last]]
    gap_hi = [start, seg_len[seg[last]]]
    touched = np.zeros(seg_len.size, dtype=bool)
    touched[seg] = True
    untouched = np.flatnonzero(~touched)
    gap_seg.append(untouched)
    gap_lo.append(np.zeros(untouched.size))
    gap_hi.append(seg_len[untouched])
    gs = np.concatenate(gap_seg)
    glo = np.concatenate(gap_lo)
    ghi = np.concatenate(gap_hi)
    real = ghi - glo > tolerance / 4.0
    gs, glo, ghi = gs[real], glo[real], ghi[real]
    outer = np.zeros(n)
    holes = np.zeros(n)
    if gs.size == 0:
        return outer, holes
    d = (q[gs] - p[gs]) / seg_len[gs][:, None]
    s = p[gs] + d * glo[:, None]
    e = p[gs] + d * ghi[:, None]
    length = ghi - glo
    # Chain free pieces into loops: a piece joins its own ends, and ends within reach of
    # each other are joined.
    m = gs.size
    ends = np.concatenate([s, e])
    close = cKDTree(ends).query_pairs(r=4.0 * tolerance, output_type="ndarray")
    rows = np.concatenate([np.arange(m), close[:, 0]])
    cols = np.concatenate([np.arange(m) + m, close[:, 1]])
    graph = coo_matrix((np.ones(rows.size), (rows, cols)), shape=(2 * m, 2 * m))
    _, label = connected_components(graph, directed=False)
    loop = label[:m]
    n_loop = int(loop.max()) + 1
    # Signed area of each loop (shoelace about the loop's own centre, so that the small
    # gaps left between pieces do not weigh).
    count = np.bincount(loop, minlength=n_loop)
    cx = np.bincount(loop, s[:, 0], n_loop) / count
    cy = np.bincount(loop, s[:, 1], n_loop) / count
    sx, sy = s[:, 0] - cx[loop], s[:, 1] - cy[loop]
    ex, ey = e[:, 0] - cx[loop], e[:, 1] - cy[loop]
    signed = np.bincount(loop, sx * ey - ex * sy, n_loop) / 2.0
    is_outer = signed[loop] > 0
    area_of = owner[gs]
    outer += np.bincount(area_of[is_outer], length[is_outer], n)
    holes += np.bincount(area_of[~is_outer], length[~is_outer], n)
    return outer, holes
