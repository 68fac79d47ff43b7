"""Footprints: reach circles, units, listed ids, flag columns, bad footprint rows."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely
from pyproj import Geod, Transformer

from coverage_audit.audit import run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.footprint import cut_pieces, geodesic_circles
from coverage_audit.spec import parse_length

from .conftest import GRID_CRS, grid, spec_text, write_spec

#: Radius scaling of the reach circles, s = sqrt(theta / sin(theta)), theta = 2 pi / N
#: (a regular N-gon inscribed in radius r s has area (N/2) (r s)^2 sin(theta) = pi r^2;
#: elementary geometry). Literal values of the formula for N = 16 and N = 128.
CIRCLE_SCALE = {16: 1.0130015562559769, 128: 1.0002008339103527}
#: Mean Earth radius (IUGG, R1 = 6371008.8 m).
EARTH_RADIUS = 6_371_008.8


def _circle(lat, radius, n):
    crs = f"+proj=laea +lat_0={lat} +lon_0=20 +datum=WGS84 +units=m +no_defs"
    polygons, error = geodesic_circles(
        np.array([20.0]), np.array([lat]), np.array([radius]), crs, n
    )
    return crs, polygons[0], error


@pytest.mark.parametrize("n", [16, 128])
@pytest.mark.parametrize("radius", [50.0, 2_000.0, 25_000.0, 100_000.0])
@pytest.mark.parametrize("lat", [-60.0, -32.0, 0.0, 45.0, 89.0])
def test_reach_circle_vertices_against_geod_fwd(lat, radius, n):
    # Oracle: pyproj.Geod.fwd (Karney 2013 geodesics) at the nominal radius r and the
    # azimuths 0, 360/N, ... degrees, projected into the same CRS. Each vertex must lie on
    # the ray from the centre through the oracle point, at s times its distance. Tolerance
    # 1e-6: the LAEA radial scale changes between distances r and r s by O(r^2 (s^2 - 1) /
    # R^2) < 1e-7 at 100 km, projection noise is ~1e-9; without the scaling (or with another
    # N's) the ratio is off by s - 1 >= 2e-4, so the check can fail.
    crs, polygon, _ = _circle(lat, radius, n)
    vertices = np.asarray(polygon.exterior.coords)[:-1][::-1]  # back to azimuth order
    assert vertices.shape == (n, 2) and polygon.is_valid
    azimuths = np.linspace(0.0, 360.0, n, endpoint=False)
    lon, lat_, _ = Geod(ellps="WGS84").fwd(
        np.full(n, 20.0), np.full(n, lat), azimuths, np.full(n, radius)
    )
    to_crs = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    oracle = np.column_stack(to_crs.transform(lon, lat_))
    centre = np.array(to_crs.transform(20.0, lat))
    ours, theirs = vertices - centre, oracle - centre
    ratio = np.hypot(*ours.T) / np.hypot(*theirs.T)
    np.testing.assert_allclose(ratio, CIRCLE_SCALE[n], rtol=1e-6, atol=0)
    sine = (ours[:, 0] * theirs[:, 1] - ours[:, 1] * theirs[:, 0]) / (
        np.hypot(*ours.T) * np.hypot(*theirs.T)
    )
    np.testing.assert_allclose(sine, 0.0, rtol=0, atol=1e-6)  # same direction


@pytest.mark.parametrize("radius", [50.0, 2_000.0, 25_000.0, 100_000.0])
@pytest.mark.parametrize("lat", [-60.0, -32.0, 0.0, 45.0, 89.0])
def test_reach_circle_area_against_geodesic_area(lat, radius):
    # Oracle: pyproj.Geod.geometry_area_perimeter (Karney 2013) of the circle's vertices
    # taken back to longitude/latitude. The projected area agrees within 2e-7 (geodesic vs
    # projected-straight edges and the inverse projection's ~1 mm; measured <= 8e-8). The
    # geodesic area itself is the spherical cap's, 2 pi R^2 (1 - cos(r/R)) ~ pi r^2
    # (1 - r^2 / (12 R^2)), within 1e-6 (R varies by ~0.5% over the ellipsoid, which moves
    # the r^2/(12 R^2) = 2e-5 term at 100 km by 2e-7).
    crs, polygon, error = _circle(lat, radius, 128)
    xy = np.asarray(polygon.exterior.coords)
    lon, lat_ = Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(xy[:, 0], xy[:, 1])
    geodesic = abs(
        Geod(ellps="WGS84").geometry_area_perimeter(shapely.Polygon(np.c_[lon, lat_]))[0]
    )
    assert polygon.area == pytest.approx(geodesic, rel=2e-7)
    cap = np.pi * radius**2 * (1 - radius**2 / (12 * EARTH_RADIUS**2))
    assert geodesic == pytest.approx(cap, rel=1e-6)
    assert error < 1e-4


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
