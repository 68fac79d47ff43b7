"""Areas and footprints cut at the antimeridian (RFC 7946, section 3.1.9) form one region.

A 7 x 7 grid of 0.01-degree cells straddles 180 degrees; the column on the line is cut in
two and written as MultiPolygons with one part at +180 and one at -180, as RFC 7946 asks,
and so is the footprint (the grid's extent with the centre 3 x 3 block cut out). Expected
values are worked by hand from the layout: one contiguity component, one enclave of the
nine centre cells (surround share 1), one footprint hole, covered fraction 0 inside the
hole and 1 elsewhere. Areas are checked against pyproj's geodesic polygon area
(``Geod.geometry_area_perimeter``, Karney 2013), an independent reference.
"""

from __future__ import annotations

import json
import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely
from pyproj import CRS, Geod

from coverage_audit import run_audit
from coverage_audit.geographic import longitude_span, span_centre, unwrap_longitudes
from coverage_audit.inputs import choose_analysis_crs

from .test_map import decode, page_data

N = 7
STEP = 0.01
# Column edges in unwrapped longitude; the middle column runs from 179.995 to 180.005
# (cut through its cells). The second layout puts the cut on a column edge (179.97 + 3
# steps = 180), so cells on either side share their edge only across the line.
CUT_THROUGH_CELLS = 179.965
CUT_ON_EDGES = 179.97
LAT_EDGES = -16.5 + STEP * np.arange(N + 1)
CENTRE = [(j, i) for j in range(2, 5) for i in range(2, 5)]


def _wrap(geom):
    """Cut a geometry in unwrapped longitudes at 180 and wrap its east part (RFC 7946)."""
    west = shapely.intersection(geom, shapely.box(0, -90, 180, 90))
    east = shapely.intersection(geom, shapely.box(180, -90, 360, 90))
    east = shapely.transform(east, lambda xy: xy - np.array([360.0, 0.0]))
    parts = [p for p in shapely.get_parts([west, east]) if p.area > 0]
    return parts[0] if len(parts) == 1 else shapely.MultiPolygon(parts)


def _unwrapped_cell(j, i, west=CUT_THROUGH_CELLS):
    lon = west + STEP * np.arange(N + 1)
    return shapely.box(lon[i], LAT_EDGES[j], lon[i + 1], LAT_EDGES[j + 1])


def _write_region(tmp_path, west=CUT_THROUGH_CELLS):
    lon = west + STEP * np.arange(N + 1)
    ids, cells, white, black = [], [], [], []
    for j in range(N):
        for i in range(N):
            ids.append(f"{j}{i}")
            cells.append(_wrap(_unwrapped_cell(j, i, west)))
            white.append(100)
            black.append(20 + 10 * i + j)
    areas = gpd.GeoDataFrame(
        {"geoid": ids, "total": np.add(white, black), "white": white, "black": black},
        geometry=cells,
        crs="EPSG:4326",
    )
    areas.to_file(tmp_path / "areas.geojson", driver="GeoJSON")
    outer = shapely.box(lon[0], LAT_EDGES[0], lon[-1], LAT_EDGES[-1])
    hole = shapely.box(lon[2], LAT_EDGES[2], lon[5], LAT_EDGES[5])
    zone = _wrap(outer.difference(hole))
    gpd.GeoDataFrame(geometry=list(shapely.get_parts(zone)), crs="EPSG:4326").to_file(
        tmp_path / "zone.geojson", driver="GeoJSON"
    )
    spec = tmp_path / "audit.toml"
    spec.write_text(
        """
title = "across the antimeridian"
[areas]
path = "areas.geojson"
id = "geoid"
[population]
total = "total"
reference = "white"
derive_minority = true
[population.groups]
white = "white"
black = "black"
[footprint]
path = "zone.geojson"
[analysis]
permutations = 19
enclave_draws = 19
""",
        encoding="utf-8",
    )
    return spec


def test_longitude_span_unwraps():
    # Worked by hand: values on both sides of 180 make an arc of 1 degree around it.
    assert longitude_span(np.array([179.5, -179.5, 180.0, -180.0])) == (179.5, 180.5)
    assert longitude_span(np.array([-75.0, -73.5, -74.0])) == (-75.0, -73.5)
    assert longitude_span(np.array([170.0, -170.0])) == (170.0, 190.0)
    assert span_centre(170.0, 190.0) == -180.0
    assert span_centre(-75.0, -73.5) == -74.25


def test_choose_analysis_crs_centres_on_the_real_extent(tmp_path):
    _write_region(tmp_path)
    areas = gpd.read_file(tmp_path / "areas.geojson")
    # The bounding box of the cut data spans -180 to 180 (centre 0, the bug); the real
    # extent is 179.965 to 180.035, centre 180 (= -180), latitude -16.465.
    assert areas.total_bounds[0] == -180.0 and areas.total_bounds[2] == 180.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # pyproj: PROJ string export
        params = CRS(choose_analysis_crs(areas.geometry, None)).to_dict()
    assert abs(params["lon_0"]) == pytest.approx(180.0, abs=0.005)
    assert params["lat_0"] == pytest.approx(-16.465, abs=0.005)


def test_unwrap_rejoins_the_cut_cell_and_keeps_others():
    cut = _wrap(_unwrapped_cell(0, 3))
    assert shapely.get_type_id(cut) == 6  # written as two parts
    far = shapely.box(10, 10, 11, 11)
    out, moved = unwrap_longitudes(np.array([cut, _wrap(_unwrapped_cell(0, 1))], dtype=object))
    assert moved == 1
    assert shapely.get_type_id(out[0]) == 3  # one polygon again
    assert shapely.equals(out[0], _unwrapped_cell(0, 3))
    same, moved = unwrap_longitudes(np.array([far, None], dtype=object))
    assert moved == 0 and same[0] is far


@pytest.mark.parametrize("west", [CUT_THROUGH_CELLS, CUT_ON_EDGES])
def test_region_across_the_antimeridian_is_one_region(tmp_path, west):
    result = run_audit(_write_region(tmp_path, west))
    summary = json.loads(json.dumps(result.summary))
    areas = result.areas.set_index("geoid")
    # Contiguity: one connected component, no islands (by hand: a full 7 x 7 grid).
    # Queen links of a 7 x 7 grid: 2*7*6 edge pairs + 2*6*6 corner pairs = 156.
    assert summary["weights"]["islands"] == []
    assert summary["weights"]["components"] == 1
    assert summary["weights"]["links"] == 156
    # Covered fraction: 0 in the 3 x 3 hole, 1 elsewhere (by hand). Tolerance: the
    # footprint's edges are densified to 0.005 degree and follow the projected parallels,
    # a cell's 0.01-degree edge (L = 1066 m) is one chord; the lens between them is about
    # (3/4)(2/3) L (L^2 k / 8), k = tan(16.5 deg) / R = 4.6e-8 per m: 3.5 m^2, at most two
    # per cell of 1.18e6 m^2, so 6e-6 (measured 3e-6); the projection centred at 0 gave
    # 2.5e-4 and 1.5e-3.
    centre_ids = sorted(f"{j}{i}" for j, i in CENTRE)
    cf = areas["covered_fraction"]
    np.testing.assert_allclose(cf.loc[centre_ids], 0.0, rtol=0, atol=1e-5)
    np.testing.assert_allclose(cf.drop(index=centre_ids), 1.0, rtol=0, atol=1e-5)
    # One hole in the footprint and one enclave made of the nine centre cells.
    assert len(summary["holes"]) == 1
    assert len(summary["enclaves"]) == 1
    assert sorted(summary["enclaves"][0]["area_ids"]) == centre_ids
    assert summary["enclaves"][0]["surround_share"] == pytest.approx(1.0, abs=1e-9)
    # The map draws the region on one side of 180: its bounds span the grid's 0.07 degree
    # of longitude, not 360, and every drawn vertex lies within the unwrapped extent.
    result.write(tmp_path / "out")
    data = page_data((tmp_path / "out" / "map.html").read_text(encoding="utf-8"))
    (south, west_), (north, east_) = data["bounds"]
    assert east_ - west_ == pytest.approx(N * STEP, abs=1e-3)
    rings = [ring for shape in decode(data["areas"]) for part in shape for ring in part]
    lon = np.concatenate([ring[:, 0] for ring in rings])
    assert np.ptp(lon) == pytest.approx(N * STEP, abs=1e-3)  # 359.9... before
    assert west_ - 1e-6 <= lon.min() and lon.max() <= east_ + 1e-6
    # Areas against pyproj's geodesic area of the unwrapped cells (Karney 2013).
    geod = Geod(ellps="WGS84")
    for j, i in [(0, 3), (3, 3), (6, 0)]:
        expected = abs(geod.geometry_area_perimeter(_unwrapped_cell(j, i, west))[0]) / 1e6
        assert areas.loc[f"{j}{i}", "area_km2"] == pytest.approx(expected, rel=1e-6)
