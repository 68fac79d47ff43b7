"""Coverage: hand-computable geometry and rates, the four-fifths screen, distances."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import shapely
from pyproj import Geod

from coverage_audit.audit import run_audit
from coverage_audit.coverage import (
    FOUR_FIFTHS,
    coverage_by_group,
    covered_fraction,
    nearest_site_distance,
    weighted_median,
)
from coverage_audit.footprint import cut_pieces

from .conftest import GRID_CRS

EXACT = 1e-12


def test_half_covered_cell_and_whole_cell(two_by_two):
    # Computed by hand: zone a covers the left half of cell 1, zone b all of cell 3.
    result = run_audit(two_by_two / "audit.toml")
    fractions = result.areas.set_index("geoid")["covered_fraction"]
    assert fractions["01001000001"] == pytest.approx(0.5, abs=EXACT)
    assert fractions["01001000002"] == pytest.approx(0.0, abs=EXACT)
    assert fractions["01001000003"] == pytest.approx(1.0, abs=EXACT)
    assert fractions["01001000004"] == pytest.approx(0.0, abs=EXACT)
    served = result.areas.set_index("geoid")["served"]
    assert served.tolist() == [True, False, True, False]  # 0.5 >= 0.5 counts as served


def test_group_rates_by_hand(two_by_two):
    # Counts per cell (conftest): total 100,200,300,400; white 80,50,30,100; black 10,150,250,300.
    result = run_audit(two_by_two / "audit.toml")
    groups = result.summary["coverage"]["groups"]
    white_rate = (80 * 0.5 + 30) / 260
    black_rate = (10 * 0.5 + 250) / 710
    minority_rate = (20 * 0.5 + 270) / 740  # minority = total - white: 20,150,270,300
    assert groups["white"]["rate"] == pytest.approx(white_rate, rel=EXACT)
    assert groups["black"]["rate"] == pytest.approx(black_rate, rel=EXACT)
    assert groups["minority"]["rate"] == pytest.approx(minority_rate, rel=EXACT)
    assert groups["white"]["served_area_rate"] == pytest.approx(110 / 260, rel=EXACT)
    assert groups["black"]["served_area_rate"] == pytest.approx(260 / 710, rel=EXACT)
    assert groups["black"]["ratio"] == pytest.approx(black_rate / white_rate, rel=EXACT)
    assert groups["black"]["difference"] == pytest.approx(black_rate - white_rate, rel=EXACT)
    assert groups["white"]["ratio"] == pytest.approx(1.0, abs=EXACT)
    assert groups["white"]["covered_population"] == pytest.approx(70.0, rel=EXACT)


def test_overlapping_service_polygons_not_double_counted():
    # Computed by hand: two overlapping boxes cover [0, 0.75] x [0, 1] of a unit cell once.
    cell = np.array([shapely.box(0, 0, 1, 1)], dtype=object)
    a = shapely.box(0, 0, 0.5, 1)
    b = shapely.box(0.25, 0, 0.75, 1)
    pieces = cut_pieces(shapely.union_all([a, b]))
    assert covered_fraction(cell, pieces)[0] == pytest.approx(0.75, abs=EXACT)
    # The same polygon given twice still covers it once.
    pieces = cut_pieces(shapely.union_all([a, a]))
    assert covered_fraction(cell, pieces)[0] == pytest.approx(0.5, abs=EXACT)


def test_many_small_pieces_equal_whole():
    # A dissolved footprint cut into bounded pieces must give the same fractions as the
    # uncut footprint (sum over disjoint pieces = area of the union).
    rng = np.random.default_rng(7)
    circles = shapely.buffer(shapely.points(rng.uniform(0, 10, (60, 2))), 1.3, quad_segs=32)
    union = shapely.union_all(circles)
    cells = np.array(
        [shapely.box(i, j, i + 1, j + 1) for i in range(10) for j in range(10)], dtype=object
    )
    expected = shapely.area(shapely.intersection(cells, union)) / 1.0
    pieces = cut_pieces(union, max_vertices=64)
    assert pieces.size > len(shapely.get_parts(union))
    np.testing.assert_allclose(covered_fraction(cells, pieces), expected, rtol=0, atol=1e-9)


def test_four_fifths_strictly_less_than():
    # 29 CFR 1607.4(D): a rate "less than four-fifths (4/5) (or eighty percent)" of the
    # comparison rate. Reference 3 of 4 covered and group 3 of 5: (3/5)/(3/4) = 4/5 exactly
    # (by hand), whose float ratio is 0.7999999999999999, so a float oracle would flag it.
    table = pd.DataFrame({"population": [4.0, 5.0], "ref": [4.0, 0.0], "a": [0.0, 5.0]})
    result = coverage_by_group(
        table, groups=["ref", "a"], reference="ref", fraction=np.array([0.75, 0.6]), threshold=0.5
    )
    assert result.groups["a"].ratio < 0.8  # the float trap the exact rule avoids
    assert result.groups["a"].below_four_fifths is False
    # Group 2.9995 of 5 covered: (0.5999/0.75) = 0.79986..., below four-fifths.
    result = coverage_by_group(
        table,
        groups=["ref", "a"],
        reference="ref",
        fraction=np.array([0.75, 0.5999]),
        threshold=0.5,
    )
    assert result.groups["a"].below_four_fifths is True
    assert FOUR_FIFTHS == 0.8


def test_comparison_with_highest_rate_group():
    # 29 CFR 1607.4(D) compares with "the group with the highest rate"; offered beside a
    # named reference group.
    table = pd.DataFrame(
        {"population": [10.0, 10.0, 10.0], "ref": [10, 0, 0], "a": [0, 10, 0], "b": [0, 0, 10]}
    )
    fraction = np.array([0.5, 1.0, 0.3])
    result = coverage_by_group(
        table,
        groups=["ref", "a", "b"],
        reference="ref",
        fraction=fraction,
        threshold=0.5,
        comparison="highest",
    )
    assert result.comparison_group == "a"
    assert result.groups["ref"].ratio == pytest.approx(0.5)
    assert result.groups["b"].ratio == pytest.approx(0.3)
    assert result.groups["ref"].below_four_fifths and result.groups["b"].below_four_fifths


def test_zero_population_group_gives_none_not_nan():
    table = pd.DataFrame({"population": [10.0], "ref": [10.0], "a": [0.0]})
    result = coverage_by_group(
        table, groups=["ref", "a"], reference="ref", fraction=np.array([1.0]), threshold=0.5
    )
    assert result.groups["a"].rate is None and result.groups["a"].ratio is None
    assert result.groups["a"].below_four_fifths is False
    assert result.to_dict()["groups"]["a"]["rate"] is None


def test_majority_minority_and_income_classes():
    table = pd.DataFrame(
        {
            "population": [100.0, 100.0, 100.0, 100.0],
            "ref": [90.0, 10.0, 50.0, 60.0],
            "majority_minority": [False, True, False, False],
            "income_tier": ["upper", "low", "moderate", "unknown"],
        }
    )
    fraction = np.array([1.0, 0.0, 0.5, 0.25])
    result = coverage_by_group(
        table, groups=["ref"], reference="ref", fraction=fraction, threshold=0.5
    )
    classes = result.area_classes
    assert classes["majority_minority"]["rate"] == pytest.approx(0.0)
    assert classes["not_majority_minority"]["rate"] == pytest.approx((100 + 50 + 25) / 300)
    assert classes["not_majority_minority"]["served_share"] == pytest.approx(2 / 3)
    assert classes["income_tiers"]["moderate"]["rate"] == pytest.approx(0.5)
    assert classes["income_tiers"]["unknown"]["areas"] == 1
    assert classes["low_or_moderate"]["rate"] == pytest.approx(0.25)


def test_weighted_median_lower_definition():
    # Lower weighted median (common practice, no single source): the smallest value whose
    # cumulative weight reaches half of the total.
    assert weighted_median(np.array([1.0, 2.0, 3.0]), np.array([1.0, 1.0, 1.0])) == 2.0
    assert weighted_median(np.array([1.0, 2.0, 3.0]), np.array([1.0, 1.0, 2.0])) == 2.0
    assert weighted_median(np.array([1.0, 2.0, 3.0]), np.array([1.0, 0.0, 3.0])) == 3.0
    assert weighted_median(np.array([5.0]), np.array([0.0])) is None


def test_nearest_site_distance_is_geodesic():
    # The distance is measured on the WGS 84 ellipsoid (pyproj.Geod, Karney 2013), not in
    # the projection: compare with Geod.inv directly.
    import geopandas as gpd

    cell = gpd.GeoSeries(
        [shapely.box(-1000, -1000, 1000, 1000)], crs=GRID_CRS
    )  # centred at the origin
    site = gpd.GeoSeries([shapely.Point(30_000, 40_000)], crs=GRID_CRS)
    d = nearest_site_distance(cell.to_numpy(), site.to_numpy(), GRID_CRS)[0]
    rep = cell.representative_point().to_crs("EPSG:4326").iloc[0]
    s = site.to_crs("EPSG:4326").iloc[0]
    _, _, expected = Geod(ellps="WGS84").inv(rep.x, rep.y, s.x, s.y)
    assert d == pytest.approx(expected, rel=1e-12)
    # And near the projection centre it is close to the planar 50 km (LAEA scale error is tiny).
    assert d == pytest.approx(50_000, rel=2e-4)
