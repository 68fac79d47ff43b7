"""Footprints: reach circles, units, listed ids, flag columns, bad footprint rows."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely

from coverage_audit.audit import run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.footprint import cut_pieces, geodesic_circles
from coverage_audit.spec import parse_length

from .conftest import GRID_CRS, grid, spec_text, write_spec


@pytest.mark.parametrize("radius", [50.0, 2_000.0, 25_000.0, 100_000.0])
@pytest.mark.parametrize("lat", [-60.0, -32.0, 0.0, 45.0])
def test_reach_circle_area_within_one_thousandth_of_pi_r_squared(radius, lat):
    # Issue requirement: each circle's area within 0.1% of pi r^2. The polygon is measured
    # in an equal-area projection centred on it, so its area is the ellipsoidal area; the
    # geodesic circle's own area differs from pi r^2 by about r^2/(12 R^2) (5e-6 at 100 km,
    # from the spherical cap formula 2 pi R^2 (1 - cos(r/R))).
    crs = f"+proj=laea +lat_0={lat} +lon_0=20 +datum=WGS84 +units=m +no_defs"
    polygons, error = geodesic_circles(
        np.array([20.0]), np.array([lat]), np.array([radius]), crs, 128
    )
    assert abs(polygons[0].area / (np.pi * radius**2) - 1) < 1e-3
    assert error < 1e-4
    assert polygons[0].is_valid


def test_inscribed_polygon_deficit_formula():
    # A regular N-gon inscribed in a circle of radius r has area (N/2) r^2 sin(2 pi / N)
    # (elementary geometry); with our radius scaling the area equals pi r^2 for every N.
    for n in (16, 64, 128):
        polys, _ = geodesic_circles(
            np.array([0.0]),
            np.array([0.0]),
            np.array([1000.0]),
            "+proj=laea +lat_0=0 +lon_0=0 +datum=WGS84 +units=m",
            n,
        )
        assert polys[0].area == pytest.approx(np.pi * 1000.0**2, rel=2e-5)
        assert len(polys[0].exterior.coords) == n + 1


@pytest.mark.parametrize(
    ("text", "metres"),
    [(3000, 3000.0), ("3 km", 3000.0), ("2mi", 3218.688), ("1000 ft", 304.8), ("1.5km", 1500.0)],
)
def test_lengths_with_units(text, metres):
    # International mile = 1609.344 m, foot = 0.3048 m (international yard and pound agreement, 1959).
    assert parse_length(text) == pytest.approx(metres, rel=1e-12)


@pytest.mark.parametrize("bad", ["3 parsecs", "-5", "km", True, 0])
def test_bad_lengths(bad):
    with pytest.raises(ValueError):
        parse_length(bad)


def _points_region(tmp_path, footprint_lines, points=None, **point_columns):
    areas = grid(3, 1, size=10_000)
    areas["total"] = [100, 100, 100]
    areas["white"] = [100, 0, 50]
    areas["black"] = [0, 100, 50]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    pts = (
        points if points is not None else [shapely.Point(5_000, 5_000), shapely.Point(5_000, 5_000)]
    )
    gdf = gpd.GeoDataFrame(point_columns, geometry=pts, crs=GRID_CRS)
    gdf.to_file(tmp_path / "sites.gpkg", driver="GPKG")
    return write_spec(tmp_path / "audit.toml", spec_text(footprint_lines))


def test_points_footprint_coverage_and_distance(tmp_path):
    # A 2 km reach around the centre of a 10 km cell covers pi*2^2/100 of it (two sites at
    # the same spot are dissolved once).
    spec = _points_region(tmp_path, 'path = "sites.gpkg"\nradius = "2 km"')
    result = run_audit(spec)
    fractions = result.areas["covered_fraction"].to_numpy()
    assert fractions[0] == pytest.approx(np.pi * 4 / 100, rel=1e-4)
    assert fractions[1] == 0 and fractions[2] == 0
    dist = result.summary["coverage"]["distance"]["groups"]
    # White: 100 people at 0 km and 50 at 20 km; the distance is to the representative
    # point of each cell (its centre here), geodesic, so within 0.1% of the planar value.
    assert dist["white"]["mean"] == pytest.approx((100 * 0 + 50 * 20_000) / 150, rel=1e-3)
    assert dist["black"]["median"] == pytest.approx(10_000, rel=1e-3)
    assert result.manifest["footprint"]["circle_vertices"] == 128
    assert result.manifest["footprint"]["circle_area_error_max"] < 1e-3


def test_radius_column_and_bad_point_rows(tmp_path):
    pts = [
        shapely.Point(5_000, 5_000),
        shapely.Point(15_000, 5_000),
        None,
        shapely.Point(25_000, 5_000),
    ]
    spec = _points_region(
        tmp_path,
        'path = "sites.gpkg"\nradius_column = "reach"\nradius_unit = "km"',
        points=pts,
        reach=[1.0, -2.0, 1.0, float("nan")],
    )
    result = run_audit(spec)
    ex = result.exclusions
    rows = ex[ex["source"] == "footprint:footprint"].set_index("row")["reason"]
    assert "null or empty geometry" in rows[3]
    assert "radius in column reach" in rows[2] and "radius in column reach" in rows[4]
    assert result.areas["covered_fraction"].to_numpy()[0] == pytest.approx(np.pi / 100, rel=1e-4)


def test_listed_ids_file_and_inline_ids(tmp_path):
    areas = grid(3, 1)
    areas["total"] = [10, 10, 10]
    areas["white"] = [10, 0, 5]
    areas["black"] = [0, 10, 5]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    (tmp_path / "aa.txt").write_text("01001000001\n01001000003\n01001999999\n\n", encoding="utf-8")
    spec = write_spec(tmp_path / "a.toml", spec_text('served_ids = "aa.txt"'))
    result = run_audit(spec)
    assert result.areas["covered_fraction"].tolist() == [1.0, 0.0, 1.0]
    assert result.summary["coverage"]["groups"]["black"]["rate"] == pytest.approx(
        5 / 15
    )  # by hand: 0 + 5 of 15
    ex = result.exclusions
    assert (
        ex[ex["id"] == "01001999999"]["reason"].iloc[0]
        == "listed id is not an area of the areas file"
    )
    assert ex[(ex["source"] == "served_ids:footprint") & ex["id"].isna()]["row"].tolist() == [4]
    spec = write_spec(tmp_path / "b.toml", spec_text('ids = ["01001000002"]'))
    assert run_audit(spec).areas["served"].tolist() == [False, True, False]


def test_served_column_flags(tmp_path):
    areas = grid(4, 1)
    areas["total"] = [10, 10, 10, 10]
    areas["white"] = [10, 0, 5, 5]
    areas["black"] = [0, 10, 5, 5]
    areas["in_aa"] = ["yes", "0", "Y", None]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    result = run_audit(write_spec(tmp_path / "a.toml", spec_text('served_column = "in_aa"')))
    assert result.areas["served"].tolist() == [True, False, True, False]
    areas["in_aa"] = ["yes", "maybe", "1", "0"]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    with pytest.raises(InputError, match="'maybe'"):
        run_audit(write_spec(tmp_path / "b.toml", spec_text('served_column = "in_aa"')))


def test_footprint_spec_errors(tmp_path):
    with pytest.raises(SpecError, match="points need a reach"):
        run_audit(write_spec(tmp_path / "a.toml", spec_text('kind = "points"\npath = "x.gpkg"')))
    with pytest.raises(SpecError, match="exactly one of served_ids"):
        run_audit(
            write_spec(tmp_path / "b.toml", spec_text('served_ids = "a.txt"\nserved_column = "x"'))
        )
    with pytest.raises(SpecError, match='radius applies only to kind = "points"'):
        run_audit(
            write_spec(
                tmp_path / "c.toml", spec_text('kind = "polygons"\npath = "x.gpkg"\nradius = 5')
            )
        )


def test_cut_pieces_bounds_vertex_count():
    circle = shapely.buffer(shapely.Point(0, 0), 100, quad_segs=512)
    pieces = cut_pieces(circle, max_vertices=100)
    assert max(shapely.get_num_coordinates(pieces)) <= 100
    assert shapely.area(pieces).sum() == pytest.approx(circle.area, rel=1e-12)
