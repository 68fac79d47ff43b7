"""Inputs: formats, ids, CRS, projection accuracy, repair and exclusions."""

from __future__ import annotations

import math
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from pyproj import CRS, Geod

from coverage_audit.audit import run_audit
from coverage_audit.errors import IdWarning, InputError, RepairWarning
from coverage_audit.inputs import choose_analysis_crs, income_tier, load_areas
from coverage_audit.spec import load_spec

from .conftest import GRID_CRS, grid, spec_text, write_spec

# ---------------------------------------------------------------- income tiers


@pytest.mark.parametrize(
    ("ratio", "tier"),
    [
        (0.0, "low"),
        (49.999, "low"),
        (50.0, "moderate"),  # 12 CFR 228.12(m): moderate is "at least 50 percent"
        (79.999, "moderate"),
        (80.0, "middle"),  # middle: at least 80 and less than 120 percent
        (119.999, "middle"),
        (120.0, "upper"),  # upper: 120 percent or more
        (250.0, "upper"),
        (float("nan"), "unknown"),  # no income figure is "unknown", never low
    ],
)
def test_income_tier_boundaries(ratio, tier):
    # Tract income level per 12 CFR 228.12(m) (paragraph letter from memory; see
    # REFERENCES.md): low < 50; moderate >= 50 and < 80; middle >= 80 and < 120; upper >= 120.
    assert income_tier(np.array([ratio]))[0] == tier


def test_income_tier_text_values_are_unknown():
    assert list(income_tier(pd.Series(["", "-", "n/a", "65"]))) == [
        "unknown",
        "unknown",
        "unknown",
        "moderate",
    ]


# ---------------------------------------------------------------- projection accuracy


def _authalic_sin(phi_deg: float, e: float) -> float:
    """sin of the authalic latitude (Snyder 1987, Map Projections: A Working Manual,
    USGS Prof. Paper 1395, eqs. 3-11 and 3-12; from memory)."""

    def q(phi: float) -> float:
        s = math.sin(phi)
        return (1 - e * e) * (
            s / (1 - e * e * s * s) - (1 / (2 * e)) * math.log((1 - e * s) / (1 + e * s))
        )

    return q(math.radians(phi_deg)) / q(math.pi / 2)


@pytest.mark.parametrize(("lon1", "lat1"), [(-135.0, -32.5), (10.0, 40.0), (-100.0, 60.0)])
def test_lonlat_cell_area_matches_spherical_zone_formula(lon1, lat1):
    # Area of a 0.5 x 0.5 degree cell after projection to the automatic equal-area CRS,
    # against the spherical-zone formula A = R^2 (lon2 - lon1)(sin lat2 - sin lat1) on the
    # authalic sphere of WGS 84 (R_q = a sqrt(q_p / 2); Snyder 1987 eq. 3-13, from memory),
    # with latitudes taken as authalic latitudes. Tolerance: 1e-6 relative, the error of
    # densifying the cell's parallels to 0.001 degree steps.
    lon2, lat2 = lon1 + 0.5, lat1 + 0.5
    cell = shapely.segmentize(shapely.box(lon1, lat1, lon2, lat2), 0.001)
    series = gpd.GeoSeries([cell], crs="EPSG:4326")
    crs = choose_analysis_crs(series, None)
    projected_area = float(series.to_crs(crs).area.iloc[0])
    a = 6378137.0
    f = 1 / 298.257223563  # WGS 84
    e = math.sqrt(2 * f - f * f)
    sin_q_p = 1.0
    q_p = (1 - e * e) * (1 / (1 - e * e) - (1 / (2 * e)) * math.log((1 - e) / (1 + e)))
    r_q = a * math.sqrt(q_p / 2)
    zone = (
        r_q**2
        * math.radians(lon2 - lon1)
        * (_authalic_sin(lat2, e) - _authalic_sin(lat1, e))
        / sin_q_p
    )
    assert projected_area == pytest.approx(zone, rel=1e-6)
    # Second, independent reference: Karney's geodesic polygon area on the ellipsoid
    # (pyproj.Geod), which follows the parallels when they are densified.
    xs, ys = cell.exterior.coords.xy
    geod_area, _ = Geod(ellps="WGS84").polygon_area_perimeter(xs, ys)
    assert projected_area == pytest.approx(abs(geod_area), rel=1e-6)
    # With geodetic latitudes in the plain spherical formula the difference is the
    # ellipsoid's flattening effect, well under 1% (a stated, looser tolerance).
    plain = (
        r_q**2
        * math.radians(lon2 - lon1)
        * (math.sin(math.radians(lat2)) - math.sin(math.radians(lat1)))
    )
    assert projected_area == pytest.approx(plain, rel=1e-2)


def test_analysis_crs_is_equal_area_and_projected():
    series = gpd.GeoSeries([shapely.box(-135.2, -32.2, -134.8, -31.8)], crs="EPSG:4326")
    crs = choose_analysis_crs(series, None)
    assert crs.is_projected
    assert "laea" in crs.srs
    with pytest.raises(InputError, match="geographic"):
        choose_analysis_crs(series, "EPSG:4326")


# ---------------------------------------------------------------- file formats


@pytest.mark.parametrize(
    ("suffix", "driver"),
    [(".gpkg", "GPKG"), (".geojson", "GeoJSON"), (".shp", "ESRI Shapefile"), (".parquet", None)],
)
def test_same_result_from_each_format(tmp_path, suffix, driver):
    areas = grid(3, 2).to_crs("EPSG:4326")  # GeoJSON holds only WGS 84
    areas["total"] = [10, 20, 30, 40, 50, 60]
    areas["white"] = [5, 10, 15, 20, 25, 30]
    areas["black"] = [5, 10, 15, 20, 25, 30]
    path = tmp_path / f"areas{suffix}"
    if driver is None:
        areas.to_parquet(path)
    else:
        areas.to_file(path, driver=driver)
    zone = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1500, 2000)], crs=GRID_CRS)
    zone.to_file(tmp_path / "zone.gpkg", driver="GPKG")
    text = spec_text('path = "zone.gpkg"').replace('path = "areas.gpkg"', f'path = "areas{suffix}"')
    result = run_audit(write_spec(tmp_path / "audit.toml", text))
    assert result.areas["geoid"].tolist()[0] == "01001000001"  # leading zero kept
    # The areas went through longitude/latitude and back; PROJ's ellipsoidal LAEA inverse
    # is good to about a millimetre here (measured: 1.2 mm), i.e. ~1e-6 of a 1 km cell.
    np.testing.assert_allclose(
        result.areas["covered_fraction"].to_numpy(), [1.0, 0.5, 0.0, 1.0, 0.5, 0.0], atol=5e-6
    )


# ---------------------------------------------------------------- ids and joins


def test_table_join_keeps_leading_zeros_and_reports_unmatched(tmp_path):
    areas = grid(2, 2)
    areas[["geoid", "geometry"]].to_file(tmp_path / "areas.gpkg", driver="GPKG")
    # CSV ids with leading zeros; one id only in the table, one area without a row.
    (tmp_path / "demo.csv").write_text(
        "geoid,total,white,black\n"
        "01001000001,10,5,5\n"
        "01001000002,20,10,10\n"
        "01001000003,30,15,15\n"
        "01001999999,40,20,20\n",
        encoding="utf-8",
    )
    zone = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 2000, 2000)], crs=GRID_CRS)
    zone.to_file(tmp_path / "zone.gpkg", driver="GPKG")
    spec = write_spec(
        tmp_path / "audit.toml", spec_text('path = "zone.gpkg"', areas_extra='table = "demo.csv"')
    )
    result = run_audit(spec)
    assert sorted(result.areas["geoid"]) == ["01001000001", "01001000002", "01001000003"]
    ex = result.exclusions
    area_row = ex[ex["source"] == "areas"].iloc[0]
    assert area_row["id"] == "01001000004" and "no row with this id" in area_row["reason"]
    table_row = ex[ex["source"] == "table"].iloc[0]
    assert table_row["id"] == "01001999999" and table_row["row"] == 4
    assert result.summary["areas"] == {
        **result.summary["areas"],
        "input": 4,
        "analysed": 3,
        "excluded": 1,
    }
    assert result.summary["inputs"]["table"] == {"rows": 4, "matched": 3, "excluded": 1}


def test_numeric_ids_warn_and_id_width_restores_zeros(tmp_path):
    areas = grid(2, 1)
    areas["geoid"] = areas["geoid"].astype(np.int64)  # 1001000001: the zero is gone
    areas["total"] = [10, 10]
    areas["white"] = [5, 5]
    areas["black"] = [5, 5]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1000, 1000)], crs=GRID_CRS).to_file(
        tmp_path / "zone.gpkg"
    )
    spec = write_spec(tmp_path / "a.toml", spec_text('path = "zone.gpkg"'))
    with pytest.warns(IdWarning, match="id_width"):
        result = run_audit(spec)
    assert result.areas["geoid"].tolist() == ["1001000001", "1001000002"]
    spec = write_spec(
        tmp_path / "b.toml", spec_text('path = "zone.gpkg"', areas_extra="id_width = 11")
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error", IdWarning)
        result = run_audit(spec)
    assert result.areas["geoid"].tolist() == ["01001000001", "01001000002"]


# ---------------------------------------------------------------- row exclusions


def _bad_rows_region(tmp_path):
    areas = grid(4, 2)
    areas["total"] = [100.0, 100, 100, 100, 100, 100, 100, 100]
    areas["white"] = [50.0, 50, 50, 50, 50, 50, 50, 50]
    areas["black"] = [50.0, 50, 50, 50, 50, 50, 50, 50]
    geoms = list(areas.geometry)
    geoms[1] = None  # null geometry
    geoms[2] = shapely.Polygon(
        [(2000, 0), (3000, 1000), (3000, 0), (2000, 1000)]
    )  # bow-tie: repaired
    areas = areas.set_geometry(gpd.GeoSeries(geoms, crs=GRID_CRS))
    areas.loc[3, "geoid"] = areas.loc[4, "geoid"]  # duplicate id: both rows excluded
    areas.loc[5, "black"] = -1  # negative count
    areas.loc[6, "black"] = 150  # group above total
    areas["black"] = areas["black"].astype(object)
    areas.loc[7, "black"] = "abc"  # not a number
    path = tmp_path / "areas.gpkg"
    areas.to_file(path, driver="GPKG")
    gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 4000, 2000)], crs=GRID_CRS).to_file(
        tmp_path / "zone.gpkg"
    )
    return write_spec(tmp_path / "audit.toml", spec_text('path = "zone.gpkg"'))


def test_every_bad_row_is_excluded_with_its_reason(tmp_path):
    spec = _bad_rows_region(tmp_path)
    with pytest.warns(RepairWarning, match="repaired 1"):
        result = run_audit(spec)
    s = result.summary["areas"]
    assert s["input"] == 8
    assert s["analysed"] + s["excluded"] == s["input"]  # rows in = analysed + excluded, always
    assert s["repaired_geometries"] == 1
    ex = result.exclusions.set_index("row")
    assert "null or empty geometry" in ex.loc[2, "reason"]
    assert "duplicate id" in ex.loc[4, "reason"] and "duplicate id" in ex.loc[5, "reason"]
    assert "negative" in ex.loc[6, "reason"] and "black" in ex.loc[6, "reason"]
    assert "above the total" in ex.loc[7, "reason"]
    assert "not a number" in ex.loc[8, "reason"] and "'abc'" in ex.loc[8, "reason"]
    assert sorted(result.areas["source_row"]) == [1, 3]
    # The bow-tie was repaired to its polygonal parts: two triangles of 1/4 km2 each.
    repaired = result.areas.set_index("source_row").loc[3]
    assert repaired["area_km2"] == pytest.approx(0.5, rel=1e-9)


def test_inputs_are_not_modified(tmp_path):
    from .conftest import digest

    spec = _bad_rows_region(tmp_path)
    before = {p.name: digest(p) for p in tmp_path.iterdir() if p.is_file()}
    with pytest.warns(RepairWarning):
        run_audit(spec)
    after = {p.name: digest(p) for p in tmp_path.iterdir() if p.is_file()}
    assert before == after


def test_all_rows_excluded_is_a_clear_error(tmp_path):
    areas = grid(2, 1)
    areas["total"] = [10, 10]
    areas["white"] = [20, 20]  # above total everywhere
    areas["black"] = [0, 0]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1000, 1000)], crs=GRID_CRS).to_file(
        tmp_path / "zone.gpkg"
    )
    spec = write_spec(tmp_path / "a.toml", spec_text('path = "zone.gpkg"'))
    with pytest.raises(InputError, match="no area of .* can be analysed: all 2 rows were excluded"):
        run_audit(spec)


# ---------------------------------------------------------------- CRS


def test_layer_without_crs_is_an_error_and_declared_crs_fixes_it(tmp_path):
    areas = grid(2, 1)
    areas["total"] = [10, 10]
    areas["white"] = [5, 5]
    areas["black"] = [5, 5]
    areas = areas.set_crs(None, allow_override=True)
    with warnings.catch_warnings():
        warnings.simplefilter(
            "ignore", UserWarning
        )  # pyogrio: "'crs' was not provided", as intended
        areas.to_file(tmp_path / "areas.shp")
    gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1000, 1000)], crs=GRID_CRS).to_file(
        tmp_path / "zone.gpkg"
    )
    text = spec_text('path = "zone.gpkg"').replace('path = "areas.gpkg"', 'path = "areas.shp"')
    spec = write_spec(tmp_path / "a.toml", text)
    with pytest.raises(
        InputError,
        match=r"has no coordinate reference system; name it in the spec with \[areas\] crs",
    ):
        run_audit(spec)
    spec = write_spec(
        tmp_path / "b.toml", text.replace('id = "geoid"', f'id = "geoid"\ncrs = "{GRID_CRS}"')
    )
    result = run_audit(spec)
    assert result.areas["covered_fraction"].tolist() == pytest.approx([1.0, 0.0])


def test_layers_in_different_crs_are_reprojected(tmp_path):
    areas = grid(2, 1)
    areas["total"] = [10, 10]
    areas["white"] = [5, 5]
    areas["black"] = [5, 5]
    areas.to_crs("EPSG:4326").to_file(tmp_path / "areas.gpkg", driver="GPKG")
    zone = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1000, 1000)], crs=GRID_CRS).to_crs(
        "EPSG:3857"
    )
    zone.to_file(tmp_path / "zone.gpkg")
    spec = write_spec(tmp_path / "a.toml", spec_text('path = "zone.gpkg"'))
    result = run_audit(spec)
    assert result.areas["covered_fraction"].tolist() == pytest.approx([1.0, 0.0], abs=1e-6)


def test_geojson_in_metres_is_caught(tmp_path):
    areas = grid(2, 1)
    areas["total"] = [10, 10]
    areas["white"] = [5, 5]
    areas["black"] = [5, 5]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    # GeoJSON keeps no custom CRS, so metres are read back as degrees (RFC 7946 default).
    gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1000, 1000)], crs=GRID_CRS).to_file(
        tmp_path / "zone.geojson", driver="GeoJSON"
    )
    spec = write_spec(tmp_path / "a.toml", spec_text('path = "zone.geojson"'))
    with pytest.raises(InputError, match="outside the range of degrees"):
        run_audit(spec)


def test_missing_columns_are_named(tmp_path):
    areas = grid(2, 1)
    areas["total"] = [10, 10]
    areas["white"] = [5, 5]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    spec = load_spec(write_spec(tmp_path / "a.toml", spec_text('path = "zone.gpkg"')))
    with pytest.raises(
        InputError, match="has no column 'black' named in \\[population\\]; its columns are"
    ):
        load_areas(spec.areas, spec.population)
    spec2 = load_spec(
        write_spec(
            tmp_path / "b.toml",
            spec_text('path = "z.gpkg"').replace('id = "geoid"', 'id = "GEOID10"'),
        )
    )
    with pytest.raises(InputError, match='no id column "GEOID10"'):
        load_areas(spec2.areas, spec2.population)


def test_crs_conflict_is_an_error(tmp_path):
    areas = grid(2, 1)
    areas["total"] = [10, 10]
    areas["white"] = [5, 5]
    areas["black"] = [5, 5]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    text = spec_text('path = "zone.gpkg"').replace(
        'id = "geoid"', 'id = "geoid"\ncrs = "EPSG:3857"'
    )
    spec = load_spec(write_spec(tmp_path / "a.toml", text))
    with pytest.raises(InputError, match="remove \\[areas\\] crs from the spec"):
        load_areas(spec.areas, spec.population)
    assert CRS(GRID_CRS).is_projected


@pytest.mark.parametrize(
    ("rule", "cut", "expected"),
    [
        # REFERENCES.md: "minority population share above 50%" is the common screen, "50
        # percent or more" in some supervisory guidance (wording from memory). Shares by hand:
        # 50/100 = 0.5, 51/100, 49/100, 30/60 = 0.5 exactly, 6/10 = 0.6 exactly.
        ("above", 0.5, [False, True, False, False, True]),
        ("at_or_above", 0.5, [True, True, False, True, True]),
        # A cut that is not a binary fraction: 6/10 against 0.6 is exactly at the cut.
        ("above", 0.6, [False, False, False, False, False]),
        ("at_or_above", 0.6, [False, False, False, False, True]),
    ],
)
def test_majority_minority_at_exactly_the_cut(tmp_path, rule, cut, expected):
    areas = grid(5, 1)
    areas["total"] = [100, 100, 100, 60, 10]
    areas["white"] = [50, 49, 51, 30, 4]
    areas["black"] = areas["total"] - areas["white"]
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    extra = f'majority_minority_rule = "{rule}"\nmajority_minority_share = {cut}'
    text = spec_text('path = "zone.gpkg"', population_extra=extra)
    spec = load_spec(write_spec(tmp_path / "a.toml", text))
    loaded = load_areas(spec.areas, spec.population, analysis_crs=spec.analysis.analysis_crs)
    assert loaded.frame["majority_minority"].tolist() == expected
