"""Radius sweep: covered fractions under circles of several radii without dissolving them."""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from coverage_audit.coverage import covered_fraction
from coverage_audit.footprint import circle_rings, cut_pieces, geodesic_circles
from coverage_audit.reach_sweep import circle_fractions, ring_fractions
from coverage_audit.synthetic import FICTIONAL_CRS, densify_independently, tessellation

EXACT = 1e-12
#: The sweep and the overlay differ only by floating-point rounding of the same areas.
SAME = 1e-9
SEED = 20261202


def _square(x0: float, y0: float, x1: float, y1: float) -> np.ndarray:
    """A convex 'circle' given by its corners, counter-clockwise, not closed."""
    return np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=float)


def _regular(cx: float, cy: float, r: float, n: int = 64) -> np.ndarray:
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    return np.stack([cx + r * np.cos(t), cy + r * np.sin(t)], axis=1)


def _overlay(geoms: np.ndarray, ring: np.ndarray) -> np.ndarray:
    """The footprint's own path (shapely/GEOS overlay used as the oracle)."""
    polygons = shapely.polygons(np.concatenate([ring, ring[:, :1, :]], axis=1))
    return covered_fraction(geoms, cut_pieces(shapely.union_all(polygons)))


def test_hand_computed_fractions():
    # Computed by hand on a 1000 m square (area 1e6 m2).
    cell = shapely.box(0, 0, 1000, 1000)
    holed = shapely.box(0, 0, 1000, 1000).difference(shapely.box(400, 400, 600, 600))
    geoms = np.array([cell, holed, cell, cell, cell], dtype=object)
    steps = [
        np.array([_square(500, -10, 1500, 1010)]),  # right half: 0.5 of each square
        np.array([_square(-10, -10, 600, 1010), _square(400, -10, 1010, 500)]),
        np.array([_square(2000, 0, 3000, 1000)]),  # apart: 0
        np.array([_square(-1, -1, 1001, 1001)]),  # holds every cell: 1
    ]
    half, two, apart, whole = ring_fractions(geoms, steps)
    assert half[0] == pytest.approx(0.5, abs=EXACT)
    # Holed square: 500,000 - 20,000 (half the hole) of 960,000.
    assert half[1] == pytest.approx(480_000 / 960_000, abs=EXACT)
    # Two overlapping rectangles, counted once: x <= 600 whole, then 400 x 500 beyond.
    assert two[0] == pytest.approx((600 * 1000 + 400 * 500) / 1e6, abs=EXACT)
    assert np.all(apart == 0.0)
    assert np.all(whole == 1.0)


def test_circle_inside_an_area_and_exact_boundaries():
    # A 64-gon of circumradius 100 m inside a 1000 m square: (64/2) r^2 sin(2 pi/64) / 1e6.
    cell = np.array([shapely.box(0, 0, 1000, 1000)], dtype=object)
    ring = _regular(500, 500, 100.0)[None]
    (fraction,) = ring_fractions(cell, [ring])
    assert fraction[0] == pytest.approx(32 * 100.0**2 * np.sin(2 * np.pi / 64) / 1e6, rel=EXACT)
    # A square sharing the cell's edges exactly covers it whole (closed sets).
    (same,) = ring_fractions(cell, [_square(0, 0, 1000, 1000)[None]])
    assert same[0] == 1.0


def test_matches_the_overlay_on_independently_densified_areas():
    # Oracle: shapely/GEOS overlay of the dissolved circles (the tool's previous path).
    cells = tessellation(400, seed=SEED)
    geoms = densify_independently(cells.geometry.to_numpy(), vertices=60, seed=SEED)
    # A multipolygon and a holed area among them.
    geoms[0] = shapely.MultiPolygon([geoms[0], shapely.box(-9000, -9000, -8000, -8000)])
    geoms[1] = geoms[1].difference(shapely.centroid(geoms[1]).buffer(200))
    rng = np.random.default_rng(SEED)
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms)
    centres = np.stack([rng.uniform(xmin, xmax, 25), rng.uniform(ymin, ymax, 25)], axis=1)
    steps = []
    for reach in (700.0, 1500.0, 3000.0, 6000.0):
        steps.append(np.array([_regular(x, y, reach, 128) for x, y in centres]))
    # Few-vertex circles: edges longer than the areas.
    steps.append(np.array([_regular(x, y, 2500.0, 16) for x, y in centres]))
    swept = ring_fractions(geoms, steps)
    for ring, fraction in zip(steps, swept, strict=True):
        expected = _overlay(geoms, ring)
        assert np.abs(fraction - expected).max() < SAME
        assert 0 < np.count_nonzero((fraction > 0) & (fraction < 1))


def test_concave_ring_and_many_overlapping_circles_take_the_overlay_path():
    cells = tessellation(100, seed=SEED)
    geoms = densify_independently(cells.geometry.to_numpy(), vertices=40, seed=SEED)
    xmin, ymin, xmax, ymax = shapely.total_bounds(geoms)
    cx, cy = (xmin + xmax) / 2, (ymin + ymax) / 2
    # A star (not convex) and 14 circles overlapping in the middle (2^14 subsets).
    t = np.linspace(0, 2 * np.pi, 20, endpoint=False)
    radius = np.where(np.arange(20) % 2 == 0, 3000.0, 1200.0)
    star = np.stack([cx + radius * np.cos(t), cy + radius * np.sin(t)], axis=1)[None]
    crowd = np.array([_regular(cx + 30 * k, cy + 17 * k, 900.0 + 11 * k, 48) for k in range(14)])
    for ring, fraction in zip((star, crowd), ring_fractions(geoms, [star, crowd]), strict=True):
        assert np.abs(fraction - _overlay(geoms, ring)).max() < SAME


def test_geodesic_sweep_matches_the_dissolved_footprint():
    # Oracle: the footprint's circles (geodesic_circles) dissolved and overlaid by GEOS.
    cells = tessellation(300, seed=SEED)
    geoms = densify_independently(cells.geometry.to_numpy(), vertices=50, seed=SEED)
    lonlat = shapely.get_coordinates(
        cells.set_geometry(cells.geometry.centroid).iloc[:12].to_crs("EPSG:4326").geometry
    )
    base = np.full(12, 2500.0)
    factors = (0.5, 1.0, 2.0)
    swept = circle_fractions(
        geoms, lonlat[:, 0], lonlat[:, 1], [base * f for f in factors], FICTIONAL_CRS, 128
    )
    for f, fraction in zip(factors, swept, strict=True):
        circles, _ = geodesic_circles(lonlat[:, 0], lonlat[:, 1], base * f, FICTIONAL_CRS, 128)
        expected = covered_fraction(geoms, cut_pieces(shapely.union_all(circles)))
        assert np.abs(fraction - expected).max() < SAME
    rings = circle_rings(lonlat[:, 0], lonlat[:, 1], base, FICTIONAL_CRS, 128)
    assert rings.shape == (12, 128, 2)
