"""Tests of the offline interactive map (coverage_audit.report.map)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from coverage_audit import synthetic
from coverage_audit.errors import CoverageAuditError, InputError, SpecError
from coverage_audit.report import assets
from coverage_audit.report import map as cmap
from coverage_audit.report.map import MapInfo, build_map

pytest_plugins = ["tests.browser"]

SEED = 20260501
GROUPS = ["white_nh", "black_nh", "hispanic", "asian_nh", "minority"]
REFERENCE = "white_nh"
XSS = "<script>alert(1)</script>"
XSS_IMG = '<img src=x onerror="window.__caXss=1">'


def make_inputs(n_areas: int = 400, *, seed: int = SEED, kind: str = "polygons", n_sites: int = 0):
    """Fictional pipeline output for the map: areas with every column the pipeline adds,
    a footprint dict of the given kind and a summary with the contract's keys.

    Covered fractions come from the distance of each cell seed to the nearest service
    point (a smooth stand-in for the areal overlay; the map only displays them).

    Kept hand-built on purpose (tests/test_report_real.py draws the map from real
    findings): it holds what no real audit produces, markup in area names and in the
    footprint's name, an enclave without a p-value and a missing LISA p-value, at sizes
    (up to 85,000 areas) no demo scenario reaches.
    """
    rng = np.random.default_rng(seed)
    cells = synthetic.tessellation(n_areas, seed=seed)
    demo = synthetic.demographics(cells, seed=seed + 1)
    areas = gpd.GeoDataFrame({"geoid": cells["geoid"]}, geometry=cells.geometry, crs=cells.crs)
    areas["population"] = demo["pop_total"].to_numpy()
    areas["white_nh"] = demo["pop_white_nh"].to_numpy()
    areas["black_nh"] = demo["pop_black_nh"].to_numpy()
    areas["hispanic"] = demo["pop_hispanic"].to_numpy()
    areas["asian_nh"] = demo["pop_asian_nh"].to_numpy()
    areas["minority"] = areas["population"] - areas["white_nh"]
    areas.loc[3, ["population", *GROUPS]] = 0  # an empty area: shares undefined
    pop = areas["population"].where(areas["population"] > 0)
    for g in GROUPS:
        areas[f"{g}_share"] = areas[g] / pop
    areas["minority_share"] = areas["minority_share"].astype(float)
    white = areas["white_nh_share"].fillna(0).to_numpy()
    n_sites = n_sites or max(4, n_areas // 25)
    sites = synthetic.service_points(cells, n_sites, seed=seed + 2, weight=0.05 + white**3)
    radius = 3_000.0
    tree = shapely.STRtree(sites.geometry.values)
    seeds = shapely.points(cells["x"].to_numpy(), cells["y"].to_numpy())
    _, dist = tree.query_nearest(seeds, return_distance=True, all_matches=False)
    areas["covered_fraction"] = np.clip((radius - dist) / 2_000.0 + 0.5, 0.0, 1.0)
    areas["served"] = areas["covered_fraction"] >= 0.5
    areas["nearest_site_m"] = dist
    income = demo["income_ratio"].to_numpy().astype(float)
    income[5] = np.nan
    areas["income_ratio"] = income
    # CRA income levels, 12 CFR 25.12 / 228.12 (REFERENCES.md): <50 low, 50-<80 moderate,
    # 80-<120 middle, >=120 upper; no figure is unknown.
    tiers = np.select(
        [np.isnan(income), income < 50, income < 80, income < 120],
        ["unknown", "low", "moderate", "middle"],
        "upper",
    )
    areas["income_tier"] = tiers
    areas["majority_minority"] = (areas["minority_share"] > 0.5).astype(object)
    areas.loc[3, "majority_minority"] = None
    labels = np.array(["high-high", "low-low", "high-low", "low-high", "not significant"])
    lisa = labels[rng.choice(5, size=len(areas), p=[0.1, 0.1, 0.05, 0.05, 0.7])].astype(object)
    lisa[0] = None  # an area left out (an island)
    areas["lisa_cluster"] = lisa
    areas["lisa_p"] = np.where(lisa == "not significant", 0.4, 0.01)
    areas.loc[0, "lisa_p"] = np.nan
    enclave = np.full(len(areas), None, dtype=object)
    unserved = np.flatnonzero(~areas["served"].to_numpy())
    enclave[unserved[:3]] = "E1"
    enclave[unserved[-2:]] = "E2"
    areas["enclave_id"] = enclave
    areas["name"] = [f"Area {k}" for k in range(len(areas))]
    areas.loc[10, "name"] = XSS
    areas.loc[11, "name"] = XSS_IMG
    reach = shapely.union_all(shapely.buffer(sites.geometry.values, radius, quad_segs=16))
    footprint: dict = {"kind": kind, "name": "Fictional <b>branch</b> network"}
    if kind == "points":
        footprint.update(
            points=sites, radius_m=radius, geometry=gpd.GeoSeries([reach], crs=areas.crs)
        )
    elif kind == "ids":
        served = areas.loc[areas["served"], "geometry"]
        footprint["geometry"] = gpd.GeoSeries([shapely.union_all(served.values)], crs=areas.crs)
    else:
        footprint["geometry"] = gpd.GeoSeries([reach], crs=areas.crs)
    summary = {
        "schema_version": 1,
        "title": "Fictional audit",
        "areas": {"input": len(areas) + 2, "analysed": len(areas), "excluded": 2},
        "coverage": {
            "served_threshold": 0.5,
            "reference_group": REFERENCE,
            "comparison": "reference",
            "groups": {},
        },
        "clustering": {"local_moran": {"fdr": True, "alpha": 0.05, "counts": {}}},
        "enclaves": [
            {
                "id": "E1",
                "area_ids": [],
                "population": 12_345.0,
                "surround_share": 0.9,
                "p_value": 0.012,
            },
            {
                "id": "E2",
                "area_ids": [],
                "population": 5_000.0,
                "surround_share": 0.8,
                "p_value": None,
            },
        ],
    }
    return areas, footprint, summary


def build(tmp_path: Path, n_areas: int = 400, **kwargs) -> tuple[MapInfo, gpd.GeoDataFrame]:
    kind = kwargs.pop("kind", "polygons")
    areas, footprint, summary = make_inputs(n_areas, kind=kind)
    options = dict(
        id_column="geoid",
        groups=GROUPS,
        reference=REFERENCE,
        footprint=footprint,
        summary=summary,
        title="Fictional <i>audit</i> map",
        path=tmp_path / "map.html",
    )
    options.update(kwargs)
    return build_map(areas, **options), areas


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """One map of each footprint kind, shared by the tests of this module."""
    folder = tmp_path_factory.mktemp("maps")
    out = {}
    for kind in ("polygons", "points", "ids"):
        info, areas = build(folder, kind=kind, path=folder / f"map_{kind}.html")
        out[kind] = (info, areas, Path(info.path).read_text(encoding="utf-8"))
    return out


def page_data(page: str) -> dict:
    match = re.search(
        r'<script type="application/json" id="ca-map-data">(.*?)</script>', page, re.DOTALL
    )
    assert match, "data block missing"
    return json.loads(match.group(1))


# --------------------------------------------------------------------------- page, no browser

# Tags that make a browser fetch a script or stylesheet (HTML Living Standard: script src,
# link rel=stylesheet href, CSS @import and url()).
REMOTE_ASSET = re.compile(
    r"<script[^>]*\bsrc\s*=|<link[^>]*\bhref\s*=\s*['\"]?\s*(?:https?:)?//|@import|"
    r"url\(\s*['\"]?\s*(?:https?:)?//",
    re.IGNORECASE,
)


@pytest.mark.parametrize("tiles", [False, True])
def test_page_links_no_remote_script_or_stylesheet(tmp_path, tiles):
    info, _ = build(tmp_path, 60, tiles=tiles)
    page = Path(info.path).read_text(encoding="utf-8")
    assert REMOTE_ASSET.search(page) is None
    assert "<link" not in page  # every stylesheet is inline
    assert "jquery" not in page.lower() and "bootstrap" not in page.lower()
    urls = set(re.findall(r"https?://[^\s\"'<>)]+", page))
    # Left in Leaflet's own source, none fetched: the SVG namespace, its attribution link
    # and a bug-tracker link in a CSS comment.
    allowed = {
        "http://www.w3.org/2000/svg",
        "https://leafletjs.com",
        "https://bugzilla.mozilla.org/show_bug.cgi?id=888319",
    }
    if tiles:
        allowed.add(cmap._TILES["url"])
    assert urls <= allowed, urls - allowed
    assert (cmap._TILES["url"] in page) is tiles


def test_leaflet_is_inlined_from_the_installed_package(built):
    _, _, page = built["polygons"]
    from xstatic.pkg import leaflet

    assert f'version="{leaflet.VERSION}"' in page  # the minified bundle states its version
    assert "sourceMappingURL" not in page
    assert "url(images/" not in page  # control images inlined as data URIs
    assert "url(data:image/png;base64," in assets.leaflet_css()


def test_input_text_reaches_the_page_only_as_escaped_data(built):
    info, areas, page = built["polygons"]
    for text in (XSS, XSS_IMG, "<b>branch</b>", "<i>audit</i>"):
        assert text not in page
    assert "<title>Fictional &lt;i&gt;audit&lt;/i&gt; map</title>" in page
    data = page_data(page)
    assert data["fields"]["label"][10] == XSS  # JSON.parse gives the exact text back
    assert data["texts"]["title"] == "Fictional <i>audit</i> map"


def test_map_info_describes_the_file(built):
    info, areas, _ = built["polygons"]
    assert info.n_features == len(areas)
    assert info.bytes == Path(info.path).stat().st_size
    assert info.simplify_method == "coverage" and info.simplify_units == "m"
    assert info.simplify_tolerance == pytest.approx(cmap.display_tolerance(areas.geometry.values))
    expected_views = [
        "covered",
        "served",
        *[f"share:{g}" for g in GROUPS],
        "majority_minority",
        "income_tier",
        "lisa",
    ]
    assert list(info.views) == expected_views
    assert info.overlays == ("enclaves", "footprint")
    d = info.to_dict()
    assert json.loads(json.dumps(d)) == d
    assert set(d) == {
        "path",
        "n_features",
        "bytes",
        "simplify_tolerance",
        "simplify_units",
        "simplify_method",
        "coordinate_decimals",
        "n_without_geometry",
        "views",
        "overlays",
    }
    assert built["points"][0].overlays == ("enclaves", "points")
    assert built["ids"][0].overlays == ("enclaves", "footprint")


def test_map_file_is_readable_like_any_output(tmp_path):
    import os
    import stat

    info, _ = build(tmp_path, 60)
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(os.stat(info.path).st_mode) == 0o666 & ~umask
    assert [p.name for p in tmp_path.iterdir()] == ["map.html"]  # no temporary file left


def test_same_inputs_give_the_same_bytes(tmp_path):
    a, _ = build(tmp_path, 60, path=tmp_path / "a.html")
    b, _ = build(tmp_path, 60, path=tmp_path / "b.html")
    assert Path(a.path).read_bytes() == Path(b.path).read_bytes()


def test_views_and_overlays_follow_the_columns_present(tmp_path):
    areas, _, _ = make_inputs(60)
    slim = areas.drop(
        columns=["lisa_cluster", "lisa_p", "income_tier", "majority_minority", "enclave_id", "name"]
    )
    info = build_map(
        slim,
        id_column="geoid",
        groups=["white_nh", "black_nh"],
        reference="white_nh",
        title="t",
        path=tmp_path / "m.html",
    )
    assert info.views == ("covered", "served", "share:white_nh", "share:black_nh")
    assert info.overlays == ()
    data = page_data(Path(info.path).read_text(encoding="utf-8"))
    assert "label" not in data["fields"] and "lisa" not in data["fields"]


def test_shares_fall_back_to_counts_over_population(tmp_path):
    areas, _, _ = make_inputs(60)
    areas = areas.drop(columns=["black_nh_share"])
    info = build_map(
        areas,
        id_column="geoid",
        groups=["white_nh", "black_nh"],
        reference="white_nh",
        title="t",
        path=tmp_path / "m.html",
    )
    data = page_data(Path(info.path).read_text(encoding="utf-8"))
    expected = np.floor(areas["black_nh"] / areas["population"] * 1000 + 1e-9)
    got = np.array([np.nan if v is None else v for v in data["fields"]["s1"]], dtype=float)
    np.testing.assert_array_equal(got[areas["population"] > 0], expected[areas["population"] > 0])
    assert data["fields"]["s1"][3] is None  # zero population: no share


def test_summary_sections_may_be_missing_or_none(tmp_path):
    areas, footprint, _ = make_inputs(60)
    sparse = {
        "areas": {"analysed": None, "excluded": 3.0},
        "coverage": None,
        "clustering": {"local_moran": None},
        "enclaves": [{"id": "E1", "population": None, "p_value": float("nan")}, None],
    }
    info = build_map(
        areas,
        id_column="geoid",
        groups=GROUPS,
        reference=REFERENCE,
        footprint={**footprint, "name": None},
        summary=sparse,
        title="t",
        path=tmp_path / "m.html",
    )
    data = page_data(Path(info.path).read_text(encoding="utf-8"))
    assert data["texts"]["subtitle"][:2] == [
        f"{len(areas)} areas analysed",
        "3 input rows excluded (see exclusions.csv)",
    ]
    assert data["enclave_info"] == {
        "E1": {"population": None, "p_value": None, "surround_share": None}
    }
    views = {v["key"]: v for v in data["views"]}
    assert views["served"]["note"] is None and views["lisa"]["note"].startswith("Local Moran")


def test_areas_without_polygons_are_counted_not_drawn(tmp_path):
    areas, _, _ = make_inputs(60)
    areas.loc[7, "geometry"] = None
    areas.loc[8, "geometry"] = shapely.Point(0, 0)
    info = build_map(
        areas,
        id_column="geoid",
        groups=GROUPS,
        reference=REFERENCE,
        title="t",
        path=tmp_path / "m.html",
    )
    assert info.n_features == len(areas) - 2 and info.n_without_geometry == 2


def test_size_per_area_fits_the_85k_budget(tmp_path):
    # Budget from the brief: an 85,000-area map under 40 MB, i.e. < 470 bytes per area.
    small, _ = build(tmp_path, 200, path=tmp_path / "s.html")
    large, _ = build(tmp_path, 1_600, path=tmp_path / "l.html")
    per_area = (large.bytes - small.bytes) / (large.n_features - small.n_features)
    assert per_area < 40e6 / 85_000, per_area


# --------------------------------------------------------------------------- geometry


def albuquerque_tracts() -> gpd.GeoDataFrame:
    """Albuquerque 2000 tracts bundled in the libpysal wheel (example '10740'), in UTM 13N.

    The shapefile has no .prj; its coordinates are longitude/latitude (NAD83, from memory).
    """
    libpysal = pytest.importorskip("libpysal")
    tracts = gpd.read_file(libpysal.examples.get_path("10740.shp"))
    return tracts.set_crs(4269).to_crs(26913)


def test_coverage_simplification_keeps_a_valid_coverage():
    tracts = albuquerque_tracts()
    geoms = tracts.geometry.values
    tol = cmap.display_tolerance(geoms)
    simple, method = cmap._simplify(geoms, tol)
    assert method == "coverage"
    # GEOS CoverageValidator (via shapely) is the outside judge of shared edges.
    assert shapely.coverage_is_valid(geoms) and shapely.coverage_is_valid(simple)
    before = shapely.get_num_coordinates(geoms).sum()
    after = shapely.get_num_coordinates(simple).sum()
    assert after < 0.6 * before, (before, after)
    # A vertex removed within the tolerance moves the boundary by at most the tolerance, so
    # an area changes by at most tol x its perimeter (loose bound, common practice).
    drift = np.abs(shapely.area(simple) - shapely.area(geoms))
    assert (drift <= tol * shapely.length(geoms)).all()
    # Shared edges move together, so the region's outline area is nearly unchanged.
    np.testing.assert_allclose(shapely.area(simple).sum(), shapely.area(geoms).sum(), rtol=2e-3)


def test_real_tracts_draw_one_shape_each(tmp_path):
    tracts = albuquerque_tracts()
    areas = gpd.GeoDataFrame({"tract": tracts["GIST_ID"].astype(str)}, geometry=tracts.geometry)
    areas["population"] = 1000
    areas["covered_fraction"] = np.linspace(0, 1, len(areas))
    areas["grp_share"] = 0.5
    info = build_map(
        areas,
        id_column="tract",
        groups=["grp"],
        reference="grp",
        title="t",
        path=tmp_path / "m.html",
    )
    assert info.n_features == len(tracts) and info.simplify_method == "coverage"
    data = page_data(Path(info.path).read_text(encoding="utf-8"))
    assert (
        data["areas"]["shape_parts"] == shapely.get_num_geometries(tracts.geometry.values).tolist()
    )
    # Every drawn vertex lies within the tolerance (plus rounding) of the original outline.
    decoded = decode(data["areas"])
    lonlat = tracts.to_crs(4326).geometry.values
    for k in (0, 57, 194):
        pts = shapely.points(np.concatenate([r for part in decoded[k] for r in part]))
        pts_m = gpd.GeoSeries(pts, crs=4326).to_crs(26913).values
        outline = tracts.geometry.values[k].boundary
        assert shapely.distance(pts_m, outline).max() <= info.simplify_tolerance + 2.0
        assert lonlat[k].intersects(shapely.multipoints(pts).envelope)


def test_overlapping_areas_are_simplified_one_by_one():
    geoms = np.array([shapely.box(0, 0, 10, 10), shapely.box(5, 5, 15, 15)])
    out, method = cmap._simplify(geoms, 0.5)
    assert method == "per_area" and shapely.is_valid(out).all()
    assert cmap._simplify(geoms, 0.0)[1] == "none"


def test_display_tolerance_scales_with_the_region():
    cells = synthetic.tessellation(200, seed=SEED).geometry.values
    tol = cmap.display_tolerance(cells)
    bigger = shapely.transform(cells, lambda xy: xy * 3.0)
    np.testing.assert_allclose(cmap.display_tolerance(bigger), 3.0 * tol, rtol=1e-12)
    xmin, ymin, xmax, ymax = shapely.total_bounds(cells)
    assert tol <= max(xmax - xmin, ymax - ymin) * cmap.EXTENT_FRACTION
    assert cmap.display_tolerance(np.array([None, shapely.Polygon()])) == 0.0


@pytest.mark.parametrize(
    ("tolerance_m", "decimals"),
    # One degree of latitude is about 111.32 km (WGS 84 equatorial circumference / 360), so
    # 1e-4 degree ~ 11 m, 1e-5 ~ 1.1 m, 1e-6 ~ 0.11 m.
    [(130.0, 4), (20.0, 5), (8.8, 6), (1.0, 7), (0.01, 7), (0.0, 6)],
)
def test_coordinate_decimals_resolve_a_tenth_of_the_tolerance(tolerance_m, decimals):
    assert cmap._coordinate_decimals(tolerance_m) == decimals


def decode(shapes: dict) -> list[list[list[np.ndarray]]]:
    """Reference decoder of encode_shapes, written from its docstring."""
    xy = np.asarray(shapes["xy"], dtype=np.int64).reshape(-1, 2)
    absolute = np.cumsum(xy, axis=0) + np.asarray(shapes["origin"])
    coords = absolute / shapes["scale"]
    out, k, ri, pi = [], 0, 0, 0
    for n_parts in shapes["shape_parts"]:
        parts = []
        for _ in range(n_parts):
            rings = []
            for _ in range(shapes["part_rings"][pi]):
                m = shapes["ring_len"][ri]
                rings.append(coords[k : k + m])
                k += m
                ri += 1
            parts.append(rings)
            pi += 1
        out.append(parts)
    return out


def test_encoded_shapes_decode_to_the_rounded_coordinates():
    holed = shapely.Polygon(
        [(-135.0, -32.0), (-134.9, -32.0), (-134.9, -31.9), (-135.0, -31.9)],
        holes=[[(-134.97, -31.97), (-134.93, -31.97), (-134.93, -31.93), (-134.97, -31.93)]],
    )
    multi = shapely.MultiPolygon(
        [shapely.box(-134.8, -32.0, -134.7, -31.95), shapely.box(-134.6, -32.0, -134.5, -31.95)]
    )
    repeated = shapely.Polygon(
        [(-134.4, -32.0), (-134.4, -32.0), (-134.3, -32.0), (-134.3, -31.9), (-134.4, -31.9)]
    )
    tiny = shapely.box(-134.2, -32.0, -134.2 + 1e-9, -32.0 + 1e-9)  # below the rounding step
    geoms = np.array([holed, multi, repeated, tiny])
    shapes = cmap.encode_shapes(geoms, 5)
    assert shapes["shape_parts"] == [1, 2, 1, 1]
    assert shapes["part_rings"] == [2, 1, 1, 1, 1]
    decoded = decode(shapes)
    ext = np.asarray(holed.exterior.coords)[:-1]  # closing vertex dropped
    np.testing.assert_allclose(decoded[0][0][0], np.round(ext, 5), atol=1e-12)
    hole = np.asarray(holed.interiors[0].coords)[:-1]
    np.testing.assert_allclose(decoded[0][0][1], np.round(hole, 5), atol=1e-12)
    np.testing.assert_allclose(
        decoded[1][1][0], np.asarray(multi.geoms[1].exterior.coords)[:-1], atol=1e-12
    )
    assert len(decoded[2][0][0]) == 4  # the repeated vertex is dropped
    assert len(decoded[3][0][0]) == 4  # a ring rounded below a triangle keeps its vertices


# --------------------------------------------------------------------------- colours, classes


def relative_luminance(hex_colour: str) -> float:
    """WCAG 2.1 relative luminance (W3C, WCAG 2.1 glossary, 'relative luminance')."""
    rgb = np.array([int(hex_colour[i : i + 2], 16) for i in (1, 3, 5)]) / 255.0
    lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(lin @ np.array([0.2126, 0.7152, 0.0722]))


def contrast_ratio(a: str, b: str) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05)."""
    la, lb = sorted([relative_luminance(a), relative_luminance(b)], reverse=True)
    return (la + 0.05) / (lb + 0.05)


@pytest.mark.parametrize("ramp", [cmap.COVERED_COLORS, cmap.SHARE_COLORS])
def test_sequential_ramps_darken_step_by_step(ramp):
    lum = np.array([relative_luminance(c) for c in ramp])
    assert (np.diff(lum) < 0).all(), lum
    # Neighbouring classes stay apart in lightness, so they read in grey too; 1.15 is
    # common practice, no source.
    assert all(contrast_ratio(a, b) >= 1.15 for a, b in zip(ramp, ramp[1:], strict=False))


def test_categorical_pairs_differ_in_lightness():
    # 1.5:1 between the two classes of a two-colour map: common practice, no source.
    assert contrast_ratio(*cmap.SERVED_COLORS) >= 1.5
    assert contrast_ratio(*cmap.MAJORITY_MINORITY_COLORS) >= 1.5
    # High-high against high-low and low-low against low-high: same hue, other lightness.
    hh, ll, hl, lh, _ = cmap.LISA_COLORS
    assert contrast_ratio(hh, hl) >= 1.5 and contrast_ratio(ll, lh) >= 1.5
    assert len(set(cmap.LISA_COLORS)) == len(cmap.LISA_COLORS)
    assert len(set(cmap.INCOME_COLORS)) == len(cmap.INCOME_COLORS)


def test_income_legend_uses_the_cra_cut_points():
    # 12 CFR 25.12 / 228.12 (REFERENCES.md): low < 50, moderate 50-<80, middle 80-<120,
    # upper >= 120, and no figure is "unknown", not low.
    areas, _, _ = make_inputs(60)
    views = {
        v.key: v
        for v in cmap._views(
            areas, *cmap._fields(areas, "geoid", GROUPS, None), GROUPS, REFERENCE, {}
        )
    }
    assert views["income_tier"].labels == (
        "low (< 50)",
        "moderate (50-80)",
        "middle (80-120)",
        "upper (>= 120)",
        "unknown",
    )
    assert cmap.INCOME_TIERS == ("low", "moderate", "middle", "upper", "unknown")


@pytest.mark.parametrize(
    ("value", "scaled"),
    [
        (0.0, 0),
        (1e-7, 1),
        (0.25, 2_500),
        (0.58, 5_800),
        (0.9999999, 9_999),
        (1.0, 10_000),
        (np.nan, None),
    ],
)
def test_covered_fraction_scaling_keeps_the_class_edges(value, scaled):
    assert cmap._scaled_fraction(pd.Series([value]), cmap.CF_SCALE, "cf") == [scaled]


def expected_covered_class(cf: np.ndarray) -> np.ndarray:
    """Legend classes of the covered fraction, from the legend labels alone."""
    return np.select([cf == 0, cf < 0.25, cf < 0.5, cf < 0.75, cf < 1.0], [0, 1, 2, 3, 4], 5)


# --------------------------------------------------------------------------- errors


def test_error_paths(tmp_path):
    areas, footprint, summary = make_inputs(40)
    ok = dict(
        id_column="geoid", groups=GROUPS, reference=REFERENCE, title="t", path=tmp_path / "m.html"
    )

    def call(frame=areas, **changes):
        return build_map(frame, **{**ok, **changes})

    with pytest.raises(InputError, match="areas must be a GeoDataFrame"):
        call(pd.DataFrame(areas.drop(columns="geometry")))
    with pytest.raises(InputError, match="id column 'tract' is not among"):
        call(id_column="tract")
    with pytest.raises(InputError, match="the areas have no CRS"):
        call(areas.set_crs(None, allow_override=True))
    with pytest.raises(SpecError, match="reference group was 'white' but is expected"):
        call(reference="white")
    with pytest.raises(SpecError, match="groups must be a list"):
        call(groups="white_nh")
    with pytest.raises(InputError, match="label column 'title' is not among"):
        call(label_column="title")
    with pytest.raises(InputError, match="the areas are empty"):
        call(areas.iloc[:0])
    with pytest.raises(InputError, match="group 'pacific' has neither a 'pacific_share'"):
        call(groups=[*GROUPS, "pacific"])
    with pytest.raises(InputError, match="column 'black_nh_share' holds values outside 0..1"):
        call(areas.assign(black_nh_share=areas["black_nh_share"] * 100))
    with pytest.raises(InputError, match=r"column 'income_tier' holds \['LMI'\]"):
        call(areas.assign(income_tier=areas["income_tier"].where(areas.index != 2, "LMI")))
    with pytest.raises(InputError, match=r"column 'lisa_cluster' holds \['HH'\]"):
        call(areas.assign(lisa_cluster="HH"))
    with pytest.raises(SpecError, match="simplify_tolerance was -1"):
        call(simplify_tolerance=-1)
    with pytest.raises(SpecError, match="footprint kind was 'circles'"):
        call(footprint={"kind": "circles", "geometry": footprint["geometry"]})
    with pytest.raises(InputError, match="footprint must be a dict"):
        call(footprint=footprint["geometry"])
    with pytest.raises(InputError, match="footprint of kind 'points' has no 'points'"):
        call(footprint={"kind": "points", "name": "x", "radius_m": 100.0})
    with pytest.raises(SpecError, match="footprint radius_m was -5"):
        call(footprint={"kind": "points", "points": footprint["geometry"], "radius_m": -5})
    assert not (tmp_path / "m.html").exists()  # nothing written on error
    assert issubclass(InputError, CoverageAuditError) and issubclass(SpecError, CoverageAuditError)


def test_inline_helpers_refuse_text_that_ends_the_element():
    with pytest.raises(InputError, match="contains '</script'"):
        assets.inline_script("var a = '</SCRIPT>';")
    with pytest.raises(InputError, match="contains '</style'"):
        assets.inline_style("a{} </style>")


# --------------------------------------------------------------------------- in Chromium

READY = "window.coverageAuditMap && window.coverageAuditMap.painted"


def centre_on_area(browser_page, areas: gpd.GeoDataFrame, row: int) -> tuple[int, int]:
    """Centre the map on an area at a close zoom (clear of the corner panels) and return
    the offset of its inner point from the map's centre, in CSS pixels."""
    point = gpd.GeoSeries([areas.geometry.iloc[row].point_on_surface()], crs=areas.crs)
    lon, lat = point.to_crs(4326).iloc[0].coords[0]
    return tuple(
        browser_page.js(
            """
        var m = coverageAuditMap.map, ll = L.latLng(arguments[0], arguments[1]);
        m.setView(ll, 13, {animate: false});
        var p = m.latLngToContainerPoint(ll), s = m.getSize();
        return [Math.round(p.x - s.x / 2), Math.round(p.y - s.y / 2)];
        """,
            lat,
            lon,
        )
    )


def hover(browser_page, areas, row: int) -> str:
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.by import By

    dx, dy = centre_on_area(browser_page, areas, row)
    container = browser_page.driver.find_element(By.CSS_SELECTOR, ".folium-map")
    # Leave the map first, so the move into the area is a fresh mouseover.
    ActionChains(browser_page.driver).move_to_element_with_offset(container, 0, -300).perform()
    ActionChains(browser_page.driver).move_to_element_with_offset(container, dx, dy).perform()
    area_id = areas["geoid"].iloc[row]
    browser_page.wait_for(
        f"document.querySelector('[data-role=hover]').getAttribute('data-area') === '{area_id}'",
        timeout=10,
    )
    return area_id


@pytest.mark.browser
@pytest.mark.parametrize("kind", ["polygons", "points", "ids"])
def test_map_opens_offline_and_draws_every_area(built, browser_page, kind):
    info, areas, _ = built[kind]
    browser_page.open(info.path, ready=READY)
    assert browser_page.console_errors() == []
    assert browser_page.network_requests() == []
    drawn = browser_page.js("return coverageAuditMap.drawn")
    attr = browser_page.js("return document.querySelector('.folium-map').dataset.areasDrawn")
    assert drawn == info.n_features == len(areas) and attr == str(len(areas))
    control = browser_page.js(
        """
        var c = document.querySelector('.leaflet-control-layers');
        return c && [c.querySelectorAll('input[type=radio]').length,
                     c.querySelectorAll('input[type=checkbox]').length];
        """
    )
    assert control == [len(info.views), len(info.overlays)]
    legend = browser_page.js("return document.querySelector('[data-role=legend]').textContent")
    assert legend.startswith("Covered fraction of the area") and "75% to < 100%" in legend
    assert "Enclaves" in legend  # the visible overlays are in the legend too
    from tests.browser import assert_not_blank  # after pytest_plugins, so asserts rewrite

    shot = browser_page.screenshot(f"map_{kind}.png")
    assert shot.parent == browser_page.folder
    assert assert_not_blank(shot) > 50


@pytest.mark.browser
def test_hover_shows_input_text_as_text(built, browser_page):
    info, areas, _ = built["polygons"]
    browser_page.open(info.path, ready=READY)
    hover(browser_page, areas, 10)
    box = browser_page.js(
        """
        var b = document.querySelector('[data-role=hover]');
        return {text: b.textContent, html: b.innerHTML,
                scripts: b.querySelectorAll('script, img').length};
        """
    )
    assert XSS in box["text"] and "&lt;script&gt;alert(1)&lt;/script&gt;" in box["html"]
    assert box["scripts"] == 0
    for figure in (
        "Population",
        "Covered fraction",
        "Served",
        "white_nh share",
        "Income tier",
        "LISA cluster",
        "Enclave",
    ):
        assert figure in box["text"]
    hover(browser_page, areas, 11)
    assert XSS_IMG in browser_page.js(
        "return document.querySelector('[data-role=hover]').textContent"
    )
    assert browser_page.js("return window.__caXss === undefined")
    from selenium.common.exceptions import NoAlertPresentException

    with pytest.raises(NoAlertPresentException):
        browser_page.driver.switch_to.alert.text  # noqa: B018 - the access is the check
    assert browser_page.console_errors() == []


@pytest.mark.browser
def test_hover_reports_the_enclave_and_its_figures(built, browser_page):
    info, areas, _ = built["polygons"]
    browser_page.open(info.path, ready=READY)
    row = int(np.flatnonzero(areas["enclave_id"].to_numpy() == "E1")[0])
    hover(browser_page, areas, row)  # the enclave outline above must not block the pointer
    text = browser_page.js("return document.querySelector('[data-role=hover]').textContent")
    assert "E1 (population 12,345, p = 0.012)" in text


@pytest.mark.browser
def test_choosing_a_view_restyles_the_areas_and_the_legend(built, browser_page):
    from selenium.webdriver.common.by import By

    info, areas, _ = built["polygons"]
    browser_page.open(info.path, ready=READY)
    colours = browser_page.js(
        "var out = []; for (var i = 0; i < coverageAuditMap.drawn; i++) "
        "out.push(coverageAuditMap.colourOf('covered', i)); return out;"
    )
    expected = np.array(cmap.COVERED_COLORS)[expected_covered_class(areas["covered_fraction"])]
    assert colours == expected.tolist()
    labels = browser_page.driver.find_elements(
        By.CSS_SELECTOR, ".leaflet-control-layers-base label"
    )
    served = next(lab for lab in labels if lab.text.strip() == "Served / unserved")
    served.click()
    browser_page.wait_for("document.querySelector('.folium-map').dataset.view === 'served'")
    legend = browser_page.js("return document.querySelector('[data-role=legend] h2').textContent")
    assert legend == "Served areas"
    fills = browser_page.js(
        "var m = coverageAuditMap.map, out = [];"
        "m.eachLayer(function (l) {"
        "  if (l._caIndex !== undefined) out[l._caIndex] = l.options.fillColor; });"
        "return out;"
    )
    expected = np.where(areas["served"].to_numpy(), cmap.SERVED_COLORS[1], cmap.SERVED_COLORS[0])
    assert fills == expected.tolist()
    assert browser_page.console_errors() == []


@pytest.mark.browser
def test_online_tiles_are_attempted_blocked_and_recorded(tmp_path, browser_page):
    # The harness itself: a page that does ask for the network must be caught.
    info, _ = build(tmp_path, 60, tiles=True)
    browser_page.open(info.path, ready=READY)
    browser_page.wait_for("document.querySelectorAll('.leaflet-tile').length > 0")
    browser_page.wait_for(
        "document.querySelectorAll('.leaflet-tile-loaded').length > 0 || "
        "document.querySelectorAll('.leaflet-tile').length > 0"
    )
    browser_page.drain_logs()
    attempted = browser_page.network_requests()
    assert attempted and all(u.startswith("https://tile.openstreetmap.org/") for u in attempted)
    failed = browser_page.failed_requests()
    assert set(attempted) <= set(failed), set(attempted) - set(failed)  # none went through
    assert all(failed[u] for u in attempted)
