"""Dasymetric apportionment: people placed on settled land, checked against PySAL's tobler.

tobler (``area_interpolate``, ``masked_area_interpolate``) is the reference library used
as an oracle; the polygon case is also computed by hand from box areas.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely

from coverage_audit import run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.spec import load_spec

from .conftest import GRID_CRS, spec_text, write_spec

tobler_area = pytest.importorskip("tobler.area_weighted")
tobler_dasy = pytest.importorskip("tobler.dasymetric")

QUICK = "sensitivity = false\n"
#: tobler returns its interpolated counts in single precision (about 7 digits).
TOBLER_RTOL = 1e-6


def _spec(folder: Path, dasymetric: str | None):
    text = spec_text('path = "zone.gpkg"', analysis_extra=QUICK)
    text = text.replace('id = "geoid"', 'id = "geoid"\nlayer = "areas"')
    if dasymetric is not None:
        text += "[dasymetric]\n" + dasymetric
    return load_spec(write_spec(folder / "audit.toml", text))


def _inputs(folder: Path) -> tuple[gpd.GeoDataFrame, gpd.GeoDataFrame]:
    """Areas, and targets tiling the region: the footprint (row 0) and the rest.

    tobler's allocate_total divides by the part of each source the targets cover, so the
    targets must tile the region for row 0 to hold the covered counts.
    """
    areas = gpd.read_file(folder / "areas.gpkg", layer="areas")
    zone = gpd.read_file(folder / "zone.gpkg").geometry.union_all()
    rest = shapely.box(*areas.total_bounds).difference(zone)
    return areas, gpd.GeoDataFrame(geometry=[zone, rest], crs=GRID_CRS)


def test_polygon_mask_by_hand_and_against_tobler(two_by_two):
    # Settled land: a strip along the bottom of cells 1-2 and one across cells 3-4.
    mask = shapely.box(250, 0, 1750, 500).union(shapely.box(0, 1000, 2000, 1500))
    gpd.GeoDataFrame(geometry=[mask], crs=GRID_CRS).to_file(two_by_two / "settled.gpkg")
    result = run_audit(_spec(two_by_two, 'mask = "settled.gpkg"\n'))
    cov = result.summary["coverage"]
    assert cov["apportionment"] == "dasymetric"
    groups = cov["groups"]
    # By hand: cell 1's settled part is 750 m x 500 m, of which x < 500 (250 m wide) is in
    # the footprint: 1/3 covered; cell 3's settled strip is wholly covered; 2 and 4 none.
    assert groups["white"]["covered_population"] == pytest.approx(80 / 3 + 30, rel=1e-12)
    assert groups["black"]["covered_population"] == pytest.approx(10 / 3 + 250, rel=1e-12)
    areas = result.areas.set_index("geoid")
    assert areas.loc["01001000001", "covered_population_share"] == pytest.approx(1 / 3)
    assert areas.loc["01001000001", "settled_share"] == pytest.approx(0.375)
    # Oracle: tobler's area_interpolate from the areas clipped to the mask to the footprint
    # and the rest (what masked_area_interpolate does after turning a raster into a mask).
    source, target = _inputs(two_by_two)
    clipped = gpd.overlay(source, gpd.GeoDataFrame(geometry=[mask], crs=GRID_CRS))
    oracle = tobler_area.area_interpolate(clipped, target, extensive_variables=["white", "black"])
    for g in ("white", "black"):
        assert groups[g]["covered_population"] == pytest.approx(
            float(oracle[g].iloc[0]), rel=TOBLER_RTOL
        )
    assert cov["dasymetric"]["areal_rates"]["white"] == pytest.approx(70 / 260, rel=1e-12)
    assert any("settlement mask" in c for c in result.summary["cautions"])
    result.write(two_by_two / "out")
    page = (two_by_two / "out" / "report.html").read_text(encoding="utf-8")
    assert "Where people live: coverage of settled land" in page
    assert "Counting people where they live, on settled land" in page


def test_raster_mask_against_tobler(two_by_two):
    rasterio = pytest.importorskip("rasterio")
    from rasterio.transform import from_origin

    # A 100 m land-cover grid over the 2 km x 2 km region: code 22 (settled) on a
    # diagonal band and in one corner, 11 elsewhere.
    band = np.full((20, 20), 11, dtype=np.uint8)
    for r in range(20):
        band[r, max(0, 19 - r - 3) : min(20, 19 - r + 3)] = 22
    band[15:, :4] = 21
    path = two_by_two / "landcover.tif"
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        height=20,
        width=20,
        count=1,
        dtype="uint8",
        crs=rasterio.crs.CRS.from_wkt(gpd.GeoSeries([], crs=GRID_CRS).crs.to_wkt()),
        transform=from_origin(0, 2000, 100, 100),
        nodata=255,
    ) as dst:
        dst.write(band, 1)
    result = run_audit(_spec(two_by_two, 'mask = "landcover.tif"\nvalues = [21, 22]\n'))
    groups = result.summary["coverage"]["groups"]
    source, target = _inputs(two_by_two)
    oracle = tobler_dasy.masked_area_interpolate(
        source,
        target,
        str(path),
        pixel_values=[21, 22],
        extensive_variables=["white", "black"],
        n_jobs=1,
    )
    for g in ("white", "black"):
        assert groups[g]["covered_population"] == pytest.approx(
            float(oracle[g].iloc[0]), rel=TOBLER_RTOL
        )
    # Without a mask, tobler's areal interpolation gives the areal covered counts.
    areal = tobler_area.area_interpolate(source, target, extensive_variables=["white"])
    plain = run_audit(_spec(two_by_two, None)).summary["coverage"]["groups"]
    assert plain["white"]["covered_population"] == pytest.approx(float(areal["white"].iloc[0]))


def test_errors(two_by_two):
    with pytest.raises(SpecError, match="give one"):
        _spec(
            two_by_two,
            'mask = "m.gpkg"\n[blocks]\npath = "b.gpkg"\ntotal = "t"\n'
            'groups = { white = "w", black = "b" }\n',
        )
    with pytest.raises(SpecError, match="values must be a list"):
        _spec(two_by_two, 'mask = "m.tif"\nvalues = "21"\n')
    with pytest.raises(InputError, match="was not found"):
        run_audit(_spec(two_by_two, 'mask = "nothing.gpkg"\n'))
    (two_by_two / "x.tif").write_bytes(b"")
    with pytest.raises(InputError, match="give \\[dasymetric\\] values"):
        run_audit(_spec(two_by_two, 'mask = "x.tif"\n'))
    far = shapely.box(50_000, 50_000, 51_000, 51_000)
    gpd.GeoDataFrame(geometry=[far], crs=GRID_CRS).to_file(two_by_two / "far.gpkg")
    with pytest.raises(InputError, match="no settled land"):
        run_audit(_spec(two_by_two, 'mask = "far.gpkg"\n'))
