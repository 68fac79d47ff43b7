"""Compiled clipping of area rings by convex reach circles (the radius sweep's kernel).

:func:`coverage_audit.reach_sweep.circle_fractions` measures, for every area, the area
it shares with the union of the reach circles near it. A reach circle is a convex polygon
(a geodesic circle projected to the analysis CRS) around a centre; a ring is clipped by
it in one pass over the ring (:func:`_clip_radial`): each vertex outside the circle is
moved along its ray from the centre onto the circle's boundary, each stretch of the ring
outside the circle becoming the stretch of the boundary it sweeps (the circle's vertices
between), with the points where the ring crosses the boundary kept. Moving the outside
part onto the boundary changes no winding number inside the circle and makes it zero
outside, so the shoelace area of the new ring is the area of ring ∩ circle (the new ring
may run back and forth along the boundary; those stretches have no area). The vertex
sector is found by a binary search on the circle's vertex angles (a pseudo-angle, no
trigonometry), the crossings by Cyrus-Beck over the edges the stretch sweeps: the work
per ring is about its vertex count times log2 of the circle's.

The union of several circles is measured by inclusion-exclusion,
``|A ∩ (C1 ∪ ... ∪ Ck)| = sum over non-empty S of (-1)^(|S|+1) |A ∩ C_S|``, walking only
the subsets whose intersection with the ring is not empty (a depth-first walk that stops
where a clip comes out empty).

Everything here is plain numpy in the functions' bodies, compiled by numba when it loads;
without numba :mod:`~coverage_audit.reach_sweep` falls back to shapely overlays.
"""

from __future__ import annotations

from typing import Any

import numpy as np

njit: Any
try:  # numba is a declared dependency; the overlay path remains when it cannot load.
    from numba import njit
except ImportError:  # pragma: no cover - exercised only without numba
    njit = None

#: Status of an area: its covered area was measured here.
DONE = 0
#: Status of an area: left to the overlay path (a circle that is not convex near it, or
#: more intersecting subsets of circles than the walk's budget).
OVERLAY = 1
#: Subsets of circles walked per ring before the area is left to the overlay path.
SUBSET_BUDGET = 4096
#: A clipped ring whose area is below this share of the ring's own is empty (rounding).
_EMPTY_SHARE = 1e-13


def _shoelace(px: np.ndarray, py: np.ndarray, m: int) -> float:  # pragma: no cover
    """Signed area of the closed ring ``(px[:m], py[:m])`` (local coordinates)."""
    s = 0.0
    for i in range(m):
        j = i + 1 if i + 1 < m else 0
        s += px[i] * py[j] - px[j] * py[i]
    return 0.5 * s


def _pseudo_angle(dx: float, dy: float) -> float:  # pragma: no cover
    """Return a monotone stand-in for the angle of (dx, dy) in [0, 2 pi), in [0, 4)."""
    s = abs(dx) + abs(dy)
    if s == 0.0:
        return 0.0
    p = dy / s
    if dx < 0.0:
        return 2.0 - p
    if p < 0.0:
        return 4.0 + p
    return p


def _sector(pa: np.ndarray, a: float) -> int:  # pragma: no cover
    """Index k with pa[k] <= a < pa[k + 1] (k = last when a wraps past the last vertex)."""
    v = pa.size
    if a < pa[0] or a >= pa[v - 1]:
        return v - 1
    lo = 0
    hi = v - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if pa[mid] <= a:
            lo = mid
        else:
            hi = mid
    return lo


def _walk(
    qx: np.ndarray,
    qy: np.ndarray,
    k: int,
    cx: np.ndarray,
    cy: np.ndarray,
    start: int,
    end: int,
    step: int,
) -> int:  # pragma: no cover
    """Write the circle's vertices passed going from sector ``start`` to ``end``."""
    v = cx.size
    g = start
    for _ in range(v):
        if g == end:
            break
        if step == 1:
            g = g + 1 if g + 1 < v else 0
            qx[k] = cx[g]
            qy[k] = cy[g]
        else:
            qx[k] = cx[g]
            qy[k] = cy[g]
            g = g - 1 if g > 0 else v - 1
        k += 1
    return k


def _clip_radial(
    px: np.ndarray,
    py: np.ndarray,
    m: int,
    cx: np.ndarray,
    cy: np.ndarray,
    ox: float,
    oy: float,
    pa: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, int, int]:  # pragma: no cover
    """Ring ``(px[:m], py[:m])`` clipped by the circle ``(cx, cy)`` about ``(ox, oy)``.

    ``pa`` holds the pseudo-angles of the circle's vertices about the centre, ascending
    (the vertices counter-clockwise from the smallest). Returns the new ring, its length
    and the number of the ring's vertices outside the circle (0: the ring is returned
    as it is, wholly inside).
    """
    v = cx.size
    sec = np.empty(m, dtype=np.int64)
    inside = np.empty(m, dtype=np.bool_)
    n_out = 0
    for i in range(m):
        k = _sector(pa, _pseudo_angle(px[i] - ox, py[i] - oy))
        sec[i] = k
        f = k + 1 if k + 1 < v else 0
        d = (cx[f] - cx[k]) * (py[i] - cy[k]) - (cy[f] - cy[k]) * (px[i] - cx[k])
        inside[i] = d >= 0.0
        if d < 0.0:
            n_out += 1
    if n_out == 0:
        return px, py, m, 0
    cap = 2 * m + 2 * v + 16
    qx = np.empty(cap)
    qy = np.empty(cap)
    k_out = 0
    for i in range(m):
        j = i + 1 if i + 1 < m else 0
        if k_out + v + 4 > cap:  # room for one edge's output (at most a turn plus 3)
            cap = 2 * cap
            wider_x = np.empty(cap)
            wider_y = np.empty(cap)
            wider_x[:k_out] = qx[:k_out]
            wider_y[:k_out] = qy[:k_out]
            qx, qy = wider_x, wider_y
        if inside[i] and inside[j]:
            qx[k_out] = px[j]
            qy[k_out] = py[j]
            k_out += 1
            continue
        ax, ay = px[i] - ox, py[i] - oy
        bx, by = px[j] - ox, py[j] - oy
        ka, kb = sec[i], sec[j]
        # Direction of the sweep about the centre: the sign of the cross product, or the
        # shorter way round where the two points are on one ray (up to rounding).
        cross = ax * by - ay * bx
        fwd = (kb - ka) % v
        if abs(cross) > 1e-12 * (abs(ax) + abs(ay)) * (abs(bx) + abs(by)):
            step = 1 if cross > 0.0 else -1
        else:
            step = 1 if fwd <= v - fwd else -1
        # Cyrus-Beck over the edges swept: entering and leaving parameters.
        t_in, t_out = 0.0, 1.0
        e_in, e_out = ka, kb
        miss = False
        e = ka
        for _ in range(v):
            f = e + 1 if e + 1 < v else 0
            ex, ey = cx[f] - cx[e], cy[f] - cy[e]
            da = ex * (py[i] - cy[e]) - ey * (px[i] - cx[e])
            db = ex * (py[j] - cy[e]) - ey * (px[j] - cx[e])
            if da < 0.0 and db < 0.0:
                miss = True
            elif da < 0.0:
                t = da / (da - db)
                if t > t_in:
                    t_in, e_in = t, e
            elif db < 0.0:
                t = da / (da - db)
                if t < t_out:
                    t_out, e_out = t, e
            if e == kb:
                break
            e = (e + step) % v
        dx, dy = px[j] - px[i], py[j] - py[i]
        if inside[i]:  # leaving: the exit point, then along the boundary
            qx[k_out] = px[i] + t_out * dx
            qy[k_out] = py[i] + t_out * dy
            k_out += 1
            start = e_out
        elif inside[j]:  # entering: along the boundary to the entry point, then q
            k_out = _walk(qx, qy, k_out, cx, cy, ka, e_in, step)
            qx[k_out] = px[i] + t_in * dx
            qy[k_out] = py[i] + t_in * dy
            qx[k_out + 1] = px[j]
            qy[k_out + 1] = py[j]
            k_out += 2
            continue
        elif not miss and t_in < t_out:  # a chord: in and out again
            k_out = _walk(qx, qy, k_out, cx, cy, ka, e_in, step)
            qx[k_out] = px[i] + t_in * dx
            qy[k_out] = py[i] + t_in * dy
            qx[k_out + 1] = px[i] + t_out * dx
            qy[k_out + 1] = py[i] + t_out * dy
            k_out += 2
            start = e_out
        else:
            start = ka
        # Along the boundary to q's sector, then q moved onto the boundary along its ray.
        k_out = _walk(qx, qy, k_out, cx, cy, start, kb, step)
        f = kb + 1 if kb + 1 < v else 0
        ex, ey = cx[f] - cx[kb], cy[f] - cy[kb]
        num = (cx[kb] - ox) * ey - (cy[kb] - oy) * ex
        den = bx * ey - by * ex
        s = num / den if den != 0.0 else 1.0
        qx[k_out] = ox + s * bx
        qy[k_out] = oy + s * by
        k_out += 1
    return qx, qy, k_out, n_out


def _union_area(
    rx: np.ndarray,
    ry: np.ndarray,
    circles_x: np.ndarray,
    circles_y: np.ndarray,
    centres: np.ndarray,
    angles: np.ndarray,
    k: int,
) -> tuple[float, bool]:  # pragma: no cover
    """Area of ring ∩ (union of circles ``0..k-1``) by inclusion-exclusion.

    Returns the area (-1.0 when the walk exceeds :data:`SUBSET_BUDGET` subsets) and
    whether one circle holds the whole ring.
    """
    whole = abs(_shoelace(rx, ry, rx.size))
    empty = _EMPTY_SHARE * whole
    total = 0.0
    stack_x = [rx]
    stack_y = [ry]
    stack_m = np.empty(k + 1, dtype=np.int64)
    nexts = np.empty(k + 1, dtype=np.int64)
    stack_m[0] = rx.size
    nexts[0] = 0
    depth = 0
    walked = 0
    while depth >= 0:
        j = nexts[depth]
        if j >= k:
            stack_x.pop()
            stack_y.pop()
            depth -= 1
            continue
        nexts[depth] = j + 1
        walked += 1
        if walked > SUBSET_BUDGET:
            return -1.0, False
        qx, qy, m, n_out = _clip_radial(
            stack_x[depth],
            stack_y[depth],
            stack_m[depth],
            circles_x[j],
            circles_y[j],
            centres[j, 0],
            centres[j, 1],
            angles[j],
        )
        if depth == 0 and n_out == 0:
            return whole, True  # the ring lies in one circle
        a = abs(_shoelace(qx, qy, m))
        if a <= empty:
            continue
        total += a if depth % 2 == 0 else -a
        stack_x.append(qx[:m].copy())
        stack_y.append(qy[:m].copy())
        depth += 1
        stack_m[depth] = m
        nexts[depth] = j + 1
    return total, False


def _covered_areas(
    xy: np.ndarray,
    ring_ptr: np.ndarray,
    ring_sign: np.ndarray,
    area_ring_ptr: np.ndarray,
    areas: np.ndarray,
    cand_ptr: np.ndarray,
    cand_idx: np.ndarray,
    circles: np.ndarray,
    disks: np.ndarray,
    angles: np.ndarray,
    size: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:  # pragma: no cover
    """Covered area of each listed area under the union of its candidate circles.

    ``xy`` holds every ring's coordinates (closed rings, rows ``ring_ptr[r]`` to
    ``ring_ptr[r + 1]``), ``ring_sign`` +1 for an exterior and -1 for a hole,
    ``area_ring_ptr`` the rings of each area (by position in the coordinate tables);
    ``areas[t]`` is the area's position in the tables and ``cand_idx[cand_ptr[t]:
    cand_ptr[t + 1]]`` its candidate circles (boxes meeting). ``circles`` is
    circles x vertices x 2, counter-clockwise from the vertex of smallest pseudo-angle
    about the centre, not closed; ``angles`` those pseudo-angles; ``disks`` circles x 5:
    the centre, the squared radius of a disk about it inside the circle and of one
    holding it, and 1.0 where the circle is convex with ascending angles (else 0.0);
    ``size`` the area of each listed area (returned whole when a circle contains it).
    """
    n = areas.size
    v = circles.shape[1]
    covered = np.zeros(n)
    status = np.zeros(n, dtype=np.int8)
    for t in range(n):
        a = areas[t]
        r0, r1 = area_ring_ptr[a], area_ring_ptr[a + 1]
        p0, p1 = ring_ptr[r0], ring_ptr[r1]
        # Local origin: the lower-left corner of the area's box (keeps products small).
        x0 = xy[p0:p1, 0].min()
        y0 = xy[p0:p1, 1].min()
        x1 = xy[p0:p1, 0].max()
        y1 = xy[p0:p1, 1].max()
        c0, c1 = cand_ptr[t], cand_ptr[t + 1]
        kc = c1 - c0
        cxs = np.empty((kc, v))
        cys = np.empty((kc, v))
        centres = np.empty((kc, 2))
        pas = np.empty((kc, v))
        k = 0
        whole = False
        for s in range(c0, c1):
            c = cand_idx[s]
            # Disk tests: the box inside the inner disk, or apart from the outer one.
            mx, my = disks[c, 0], disks[c, 1]
            fx = max(abs(mx - x0), abs(mx - x1))
            fy = max(abs(my - y0), abs(my - y1))
            if fx * fx + fy * fy <= disks[c, 2]:
                whole = True
                break
            gx = max(x0 - mx, 0.0, mx - x1)
            gy = max(y0 - my, 0.0, my - y1)
            if gx * gx + gy * gy > disks[c, 3]:
                continue
            if disks[c, 4] == 0.0:
                status[t] = OVERLAY
                break
            for e in range(v):
                cxs[k, e] = circles[c, e, 0] - x0
                cys[k, e] = circles[c, e, 1] - y0
                pas[k, e] = angles[c, e]
            centres[k, 0] = mx - x0
            centres[k, 1] = my - y0
            k += 1
        if status[t] == OVERLAY:
            continue
        if whole:
            covered[t] = size[t]
            continue
        if k == 0:
            continue
        total = 0.0
        held = True
        for r in range(r0, r1):
            q0, q1 = ring_ptr[r], ring_ptr[r + 1] - 1  # drop the closing vertex
            rx = xy[q0:q1, 0] - x0
            ry = xy[q0:q1, 1] - y0
            part, ring_held = _union_area(rx, ry, cxs, cys, centres, pas, k)
            if part < 0.0:
                status[t] = OVERLAY
                break
            total += ring_sign[r] * part
            held = held and ring_held
        # Every ring inside a circle: the area is covered whole (as the overlay finds).
        covered[t] = size[t] if held else total
    return covered, status


if njit is not None:
    _shoelace = njit(cache=True, nogil=True)(_shoelace)
    _pseudo_angle = njit(cache=True, nogil=True)(_pseudo_angle)
    _sector = njit(cache=True, nogil=True)(_sector)
    _walk = njit(cache=True, nogil=True)(_walk)
    _clip_radial = njit(cache=True, nogil=True)(_clip_radial)
    _union_area = njit(cache=True, nogil=True)(_union_area)
    covered_areas: Any = njit(cache=True, nogil=True)(_covered_areas)
else:  # pragma: no cover - exercised only without numba
    covered_areas = None
