"""The whole audit on small regions: statistics wired in, edge cases, determinism."""

from __future__ import annotations

import json
import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely

from coverage_audit import run_audit
from coverage_audit.errors import DegenerateStatisticWarning, IslandWarning
from coverage_audit.outputs import json_text

from .conftest import GRID_CRS, grid, spec_text, write_spec


def _region(tmp_path, nx, ny, zone, black=None, extra_cells=(), analysis_extra=""):
    areas = grid(nx, ny)
    n = len(areas)
    rng = np.random.default_rng(5)
    areas["total"] = rng.integers(100, 200, n)
    b = np.asarray(black if black is not None else rng.integers(0, 100, n))
    areas["black"] = np.minimum(b, areas["total"])
    areas["white"] = areas["total"] - areas["black"]
    for k, cell in enumerate(extra_cells):
        areas.loc[len(areas)] = {
            "geoid": f"01001{900000 + k:06d}",
            "row": -1,
            "col": -1,
            "total": 100,
            "black": 50,
            "white": 50,
            "geometry": cell,
        }
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    gpd.GeoDataFrame(geometry=[zone], crs=GRID_CRS).to_file(tmp_path / "zone.gpkg")
    return write_spec(
        tmp_path / "audit.toml", spec_text('path = "zone.gpkg"', analysis_extra=analysis_extra)
    )


def test_planted_enclave_is_found_and_labelled(tmp_path):
    # A 7 x 7 grid served everywhere but a 2 x 2 pocket in its middle: the pocket's whole
    # boundary runs along served cells (surround share 1, computed by hand).
    zone = shapely.box(0, 0, 7000, 7000).difference(shapely.box(2000, 3000, 4000, 5000))
    black = np.zeros(49, dtype=int)
    pocket = [3 * 7 + 2, 3 * 7 + 3, 4 * 7 + 2, 4 * 7 + 3]
    black[pocket] = 150
    result = run_audit(_region(tmp_path, 7, 7, zone, black=black))
    enclaves = result.summary["enclaves"]
    assert len(enclaves) == 1
    e = enclaves[0]
    assert e["id"] == "E1"
    assert sorted(e["area_ids"]) == sorted(result.areas["geoid"].iloc[pocket])
    assert e["surround_share"] == pytest.approx(1.0)
    labelled = result.areas.loc[result.areas["enclave_id"] == "E1", "geoid"]
    assert sorted(labelled) == sorted(e["area_ids"])
    # The footprint's hole is reported too, with the pocket's population (areal-weighted).
    assert len(result.summary["holes"]) == 1
    pocket_pop = result.areas["population"].iloc[pocket].sum()
    assert result.summary["holes"][0]["population"] == pytest.approx(pocket_pop, rel=1e-9)
    # And the planted pocket (all black residents, region otherwise white) is unusual.
    assert e["p_value"] < 0.05


def test_statistics_sections_are_present_and_json_clean(tmp_path):
    zone = shapely.box(0, 0, 3500, 6000)
    result = run_audit(_region(tmp_path, 6, 6, zone))
    s = result.summary
    for key in ("segregation", "clustering", "weights", "enclaves", "sensitivity"):
        assert key in s, key
    assert s["clustering"]["moran"]["variable"] == "covered_fraction"
    assert s["clustering"]["moran"]["expected"] == pytest.approx(-1 / 35)  # E[I] = -1/(n-1)
    assert s["weights"]["transform"] == "row-standardised"
    assert set(result.areas["lisa_cluster"].dropna()) <= {
        "high-high",
        "low-low",
        "high-low",
        "low-high",
        "not significant",
    }
    json.loads(json_text(s))  # no NaN anywhere (allow_nan=False would raise)


def test_same_seed_same_summary_other_seed_other_draws(tmp_path):
    zone = shapely.box(0, 0, 3500, 6000)
    spec = _region(tmp_path, 6, 6, zone)
    a = run_audit(spec).summary
    b = run_audit(spec).summary
    assert json_text(a) == json_text(b)
    other = write_spec(
        tmp_path / "other.toml",
        spec.read_text().replace("permutations = 99", "permutations = 99\nseed = 7"),
    )
    c = run_audit(other).summary
    assert c["clustering"]["moran"]["I"] == a["clustering"]["moran"]["I"]  # not random
    assert c["clustering"]["moran"]["z_sim"] != a["clustering"]["moran"]["z_sim"]  # random


def test_islands_are_listed_and_left_out_of_spatial_statistics(tmp_path):
    island = shapely.box(20_000, 20_000, 21_000, 21_000)
    zone = shapely.box(0, 0, 3500, 6000)
    with pytest.warns(IslandWarning, match="1 island"):
        result = run_audit(_region(tmp_path, 6, 6, zone, extra_cells=[island]))
    ex = result.exclusions
    row = ex[ex["source"] == "spatial_statistics"]
    assert row["id"].tolist() == ["01001900000"]
    assert "island" in row["reason"].iloc[0]
    assert result.summary["weights"]["islands"] == ["01001900000"]
    assert result.summary["clustering"]["moran"]["n"] == 36
    # Still analysed for coverage: rows in = analysed + excluded counts only whole exclusions.
    assert result.summary["areas"]["analysed"] == 37
    island_row = result.areas[result.areas["geoid"] == "01001900000"].iloc[0]
    assert island_row["lisa_cluster"] is None or (
        isinstance(island_row["lisa_cluster"], float) and np.isnan(island_row["lisa_cluster"])
    )


def test_islands_can_take_nearest_neighbours(tmp_path):
    island = shapely.box(20_000, 20_000, 21_000, 21_000)
    zone = shapely.box(0, 0, 3500, 6000)
    with pytest.warns(IslandWarning):
        result = run_audit(
            _region(
                tmp_path,
                6,
                6,
                zone,
                extra_cells=[island],
                analysis_extra='islands = "knn"\nknn_k = 2',
            )
        )
    assert result.summary["clustering"]["moran"]["n"] == 37
    assert not (result.exclusions["source"] == "spatial_statistics").any()


@pytest.mark.parametrize(
    ("case", "zone"),
    [
        ("none served", shapely.box(50_000, 50_000, 51_000, 51_000)),
        ("all served", shapely.box(-1000, -1000, 10_000, 10_000)),
    ],
)
def test_no_area_or_every_area_served_does_not_crash(tmp_path, case, zone):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = run_audit(_region(tmp_path, 4, 4, zone))
    assert any(issubclass(w.category, DegenerateStatisticWarning) for w in caught)
    s = result.summary
    json.loads(json_text(s))
    gap = s["segregation"]["coverage_gap_test"]["black"]
    assert gap["gap"] == 0 and gap["p_value"] is None
    assert s["enclaves"] == []
    served = s["coverage"]["served_areas"]
    assert served == (0 if case == "none served" else 16)


def test_single_area_region_gives_clear_result(tmp_path):
    zone = shapely.box(0, 0, 500, 1000)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = run_audit(_region(tmp_path, 1, 1, zone))
    s = result.summary
    assert s["areas"]["analysed"] == 1
    assert "skipped" in s["clustering"]
    assert any("clustering" in str(w.message) for w in caught)
    assert s["coverage"]["groups"]["black"]["rate"] == pytest.approx(0.5)
    json.loads(json_text(s))


def test_write_produces_map_and_report(tmp_path):
    zone = shapely.box(0, 0, 3500, 6000)
    result = run_audit(_region(tmp_path, 5, 5, zone))
    paths = result.write(tmp_path / "out")
    assert paths["map"].stat().st_size > 10_000
    text = paths["report"].read_text(encoding="utf-8")
    assert "not by itself proof of discrimination" in text or "not proof of discrimination" in text
    manifest = json.loads(paths["manifest"].read_text())
    assert manifest["outputs"]["map"]["n_features"] == 25
    # The edge tolerance of tolerant contiguity is recorded beside the inputs (issue 13);
    # 0.1 m is the documented default (edges.EDGE_TOLERANCE_M, common practice, no source).
    assert manifest["edge_tolerance_m"] == result.summary["weights"]["edge_tolerance_m"]
    assert 0 < manifest["edge_tolerance_m"] <= 0.1


def test_dask_engine_gives_the_same_findings(tmp_path):
    # The distributed engine must change where fractions are computed, never their values.
    pytest.importorskip("dask_geopandas")
    from coverage_audit import load_spec

    zone = shapely.box(0, 0, 3500, 6000).union(shapely.box(4200, 1000, 6000, 2500))
    spec = load_spec(_region(tmp_path, 6, 6, zone))
    local = run_audit(spec.with_analysis(sensitivity=False)).summary
    dask = run_audit(spec.with_analysis(sensitivity=False, engine="dask", partitions=3)).summary
    assert json_text(local["coverage"]) == json_text(dask["coverage"])
    assert json_text(local["enclaves"]) == json_text(dask["enclaves"])


def test_summary_is_the_same_wherever_the_inputs_sit(tmp_path):
    # DESIGN.md's output contract: summary.json holds no absolute paths, so the same spec
    # and data in two folders give byte-identical summaries (consistency check).
    import json
    import shutil

    import geopandas as gpd

    from coverage_audit import run_audit
    from coverage_audit.spec import load_spec
    from tests.conftest import spec_text, write_spec, write_two_by_two

    first = tmp_path / "first"
    first.mkdir()
    write_two_by_two(first)
    areas = gpd.read_file(first / "areas.gpkg")
    areas[["geoid", "total", "white", "black"]].to_csv(first / "table.csv", index=False)
    areas[["geoid", "geometry"]].to_file(first / "shapes.gpkg", driver="GPKG")
    text = spec_text('path = "zone.gpkg"').replace(
        'path = "areas.gpkg"', 'path = "shapes.gpkg"\ntable = "table.csv"', 1
    )
    write_spec(first / "audit.toml", text)
    second = tmp_path / "elsewhere" / "second"
    shutil.copytree(first, second)
    texts = [
        json.dumps(run_audit(load_spec(folder / "audit.toml")).summary, sort_keys=True)
        for folder in (first, second)
    ]
    assert str(tmp_path) not in texts[0]
    assert '"path": "table.csv"' in texts[0]
    assert texts[0] == texts[1]
