"""Distributed coverage: equal to the single-machine covered fractions, on threads and on a
LocalCluster of worker processes; footprint pieces shipped per partition; bad inputs."""

from __future__ import annotations

import json
import subprocess
import sys
from importlib.util import find_spec
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from pyproj import CRS

from coverage_audit.coverage import covered_fraction
from coverage_audit.distributed import (
    AREAS_PER_PARTITION,
    PARTITIONINGS,
    DistributedCoverage,
    MissingExtraError,
    _assemble,
    covered_fraction_distributed,
    distributed_coverage,
)
from coverage_audit.errors import AnalysisError, InputError, SpecError
from coverage_audit.footprint import Footprint, cut_pieces, geodesic_circles
from coverage_audit.synthetic import FICTIONAL_CRS, service_points, tessellation

SEED = 20_240_611
#: The brief's requirement: equal to coverage.covered_fraction on the same data to 1e-12.
EXACT = 1e-12
#: Against geopandas.overlay, an independent GEOS overlay of each area with the whole
#: dissolved footprint: the cut lines of footprint.cut_pieces move vertices by rounding
#: only, so fractions agree far below 1e-9 (common practice, no source).
OVERLAY = 1e-9

needs_dask = pytest.mark.skipif(
    find_spec("dask_geopandas") is None or find_spec("distributed") is None,
    reason='optional extra not installed: pip install -e ".[distributed]"',
)


@pytest.fixture(scope="module")
def cells() -> gpd.GeoDataFrame:
    return tessellation(1_500, seed=SEED, cell_size_m=2_000.0)


@pytest.fixture(scope="module")
def circles(cells) -> np.ndarray:
    """Reach circles of 40 fictional service points, overlapping where points are close."""
    sites = service_points(cells, 40, seed=SEED + 1).to_crs("EPSG:4326")
    polygons, _ = geodesic_circles(
        sites.geometry.x.to_numpy(),
        sites.geometry.y.to_numpy(),
        np.full(len(sites), 3_000.0),
        FICTIONAL_CRS,
        64,
    )
    return polygons


@pytest.fixture(scope="module")
def point_pieces(circles) -> np.ndarray:
    # Small pieces, so that many of them straddle partition envelopes.
    return cut_pieces(shapely.union_all(circles), max_vertices=150)


@pytest.fixture(scope="module")
def zones(cells) -> np.ndarray:
    """Overlapping service polygons: a band from the bottom to the top of the region (it
    meets every partition, whatever the partitioning) and discs on it, two of them
    overlapping each other, near the bottom and near the top."""
    xmin, ymin, xmax, ymax = cells.total_bounds
    w, h = xmax - xmin, ymax - ymin
    band = shapely.box(xmin + 0.45 * w, ymin - 100, xmin + 0.52 * w, ymax + 100)
    low_a = shapely.buffer(shapely.Point(xmin + 0.5 * w, ymin + 0.12 * h), 0.1 * h, quad_segs=32)
    low_b = shapely.buffer(shapely.Point(xmin + 0.56 * w, ymin + 0.16 * h), 0.08 * h)
    high = shapely.buffer(shapely.Point(xmin + 0.47 * w, ymin + 0.86 * h), 0.1 * h)
    return np.array([band, low_a, low_b, high], dtype=object)


@pytest.fixture(scope="module")
def zone_pieces(zones) -> np.ndarray:
    return cut_pieces(shapely.union_all(zones), max_vertices=40)


@pytest.fixture(scope="module")
def files(cells, tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("distributed")
    out = {"parquet": folder / "areas.parquet", "gpkg": folder / "areas.gpkg"}
    cells.to_parquet(out["parquet"], row_group_size=400)
    cells.to_file(out["gpkg"], layer="tracts", driver="GPKG")
    return out


def geometries(frame: gpd.GeoDataFrame) -> np.ndarray:
    return np.asarray(frame.geometry.array, dtype=object)


def areas_as(kind: str, cells: gpd.GeoDataFrame, files: dict[str, Path]):
    if kind == "memory":
        return cells
    if kind == "dask":
        import dask_geopandas

        return dask_geopandas.from_geopandas(cells, npartitions=3)
    return files[kind]


INPUTS = ["memory", "dask", "parquet", "gpkg"]


# --- equality with the single-machine result --------------------------------------------------


@needs_dask
@pytest.mark.parametrize("partitioning", PARTITIONINGS)
@pytest.mark.parametrize("kind", INPUTS)
def test_points_footprint_equals_single_machine(kind, partitioning, cells, point_pieces, files):
    expected = covered_fraction(geometries(cells), point_pieces)
    result = distributed_coverage(
        areas_as(kind, cells, files), point_pieces, npartitions=4, partitioning=partitioning
    )
    assert result.scheduler == "local"
    assert result.fraction.shape == expected.shape
    np.testing.assert_allclose(result.fraction, expected, rtol=0, atol=EXACT)
    assert 0.05 < expected.mean() < 0.95  # the footprint covers part of the region
    assert int(result.areas_per_partition.sum()) == len(cells)


@needs_dask
@pytest.mark.parametrize("partitioning", PARTITIONINGS)
@pytest.mark.parametrize("kind", ["memory", "parquet"])
def test_polygon_footprint_spanning_partitions(
    kind, partitioning, cells, zone_pieces, zones, files
):
    expected = covered_fraction(geometries(cells), zone_pieces)
    result = distributed_coverage(
        areas_as(kind, cells, files), zone_pieces, npartitions=5, partitioning=partitioning
    )
    np.testing.assert_allclose(result.fraction, expected, rtol=0, atol=EXACT)
    record = result.to_dict()
    # The band crosses every partition: some of its pieces go to two partitions or more ...
    assert record["pieces_shipped"] > len(zone_pieces) * record["max_share_of_footprint"]
    assert record["partitions"] == 5
    # ... yet no partition is sent the whole footprint.
    assert record["max_share_of_footprint"] < 1.0
    # Dissolved overlaps count once: the covered area equals the union's area.
    covered = float((expected * shapely.area(geometries(cells))).sum())
    clipped = shapely.area(shapely.intersection(shapely.union_all(zones), cells.union_all()))
    assert covered == pytest.approx(clipped, rel=1e-12)


@needs_dask
def test_matches_geopandas_overlay(cells, circles):
    # Oracle: geopandas.overlay with the footprint dissolved by geopandas itself, an
    # independent GEOS overlay of each area with the whole footprint.
    footprint = gpd.GeoDataFrame(geometry=list(circles), crs=FICTIONAL_CRS).dissolve()
    frame = gpd.GeoDataFrame({"k": np.arange(len(cells))}, geometry=cells.geometry.values)
    overlay = gpd.overlay(frame, footprint, how="intersection", keep_geom_type=True)
    covered = overlay.assign(a=overlay.area).groupby("k")["a"].sum()
    expected = np.zeros(len(cells))
    expected[covered.index.to_numpy()] = covered.to_numpy() / frame.area.to_numpy()[covered.index]
    pieces = cut_pieces(footprint.geometry.iloc[0], max_vertices=150)
    got = covered_fraction_distributed(cells, pieces, npartitions=3)
    np.testing.assert_allclose(got, expected, rtol=0, atol=OVERLAY)


@needs_dask
@pytest.mark.parametrize("kind", ["memory", "dask", "parquet"])
def test_null_and_empty_areas(kind, cells, point_pieces, tmp_path):
    broken = cells.copy()
    geoms = geometries(broken).copy()
    geoms[[0, 7, 500]] = None
    geoms[[3, 900]] = shapely.Polygon()
    broken = broken.set_geometry(gpd.GeoSeries(geoms, crs=cells.crs).values)
    expected = covered_fraction(geoms, point_pieces)
    assert np.all(expected[[0, 3, 7, 500, 900]] == 0.0)
    areas = areas_as(kind, broken, {"parquet": tmp_path / "broken.parquet"})
    if kind == "parquet":
        broken.to_parquet(areas)
    got = covered_fraction_distributed(areas, point_pieces, npartitions=4)
    np.testing.assert_allclose(got, expected, rtol=0, atol=EXACT)


@needs_dask
@pytest.mark.parametrize("partitioning", PARTITIONINGS)
def test_order_and_index_kept(partitioning, cells, point_pieces):
    import dask_geopandas

    # Rows in a random order under a text index, so neither file order nor index order is
    # spatial; the results must come back in that order with those labels.
    order = np.random.default_rng(SEED).permutation(len(cells))
    shuffled = cells.iloc[order].set_index("geoid")
    expected = covered_fraction(geometries(shuffled), point_pieces)
    for areas in (shuffled, dask_geopandas.from_geopandas(shuffled, npartitions=4, sort=False)):
        result = distributed_coverage(areas, point_pieces, npartitions=3, partitioning=partitioning)
        series = result.to_series()
        assert series.name == "covered_fraction"
        assert series.index.tolist() == shuffled.index.tolist()
        np.testing.assert_allclose(series.to_numpy(), expected, rtol=0, atol=EXACT)


@needs_dask
def test_footprint_object_and_geoseries(cells, point_pieces):
    footprint = Footprint(
        name="sites",
        kind="points",
        geometry=shapely.union_all(point_pieces),
        pieces=point_pieces,
        crs=CRS(FICTIONAL_CRS),
    )
    expected = covered_fraction(geometries(cells), point_pieces)
    got = covered_fraction_distributed(cells.geometry, footprint, npartitions=2)
    np.testing.assert_allclose(got, expected, rtol=0, atol=EXACT)


@needs_dask
def test_same_inputs_same_outputs(cells, point_pieces):
    first = distributed_coverage(cells, point_pieces, npartitions=4)
    second = distributed_coverage(cells, point_pieces, npartitions=4)
    assert np.array_equal(first.fraction, second.fraction)
    assert np.array_equal(first.pieces_per_partition, second.pieces_per_partition)


@needs_dask
def test_default_partitions_and_record(cells, point_pieces, files):
    result = distributed_coverage(files["gpkg"], point_pieces, layer="tracts", partitioning="rows")
    record = result.to_dict()
    json.dumps(record)  # JSON-safe
    assert set(record) == {
        "areas",
        "partitions",
        "partitioning",
        "scheduler",
        "pieces",
        "pieces_shipped",
        "pieces_per_partition_max",
        "max_share_of_footprint",
        "areas_per_partition_min",
        "areas_per_partition_max",
    }
    # 1,500 areas are fewer than one default partition's worth, so one per local thread.
    assert len(cells) < AREAS_PER_PARTITION
    assert record["partitions"] >= 1
    assert record["areas"] == len(cells)
    assert record["pieces"] == len(point_pieces)
    assert isinstance(result, DistributedCoverage)
    assert result.index.equals(pd.RangeIndex(len(cells)))


@needs_dask
def test_empty_footprint_and_no_areas(cells):
    result = distributed_coverage(cells, np.array([], dtype=object), npartitions=3)
    assert np.array_equal(result.fraction, np.zeros(len(cells)))
    assert result.to_dict()["max_share_of_footprint"] is None
    nothing = covered_fraction_distributed(cells.iloc[:0], np.array([shapely.box(0, 0, 1, 1)]))
    assert nothing.shape == (0,)


# --- a LocalCluster of worker processes on loopback -------------------------------------------


@pytest.fixture(scope="module")
def client():
    pytest.importorskip("distributed")
    from distributed import Client, LocalCluster

    cluster = LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        host="127.0.0.1",
        # The scheduler's health endpoints listen even without a dashboard, by default on
        # port 8787; a free loopback port keeps two test processes from colliding.
        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
    )
    # Not the process default, so the other tests keep the local scheduler.
    connection = Client(cluster, set_as_default=False)
    yield connection
    connection.close()
    cluster.close()


@needs_dask
@pytest.mark.parametrize(
    ("kind", "partitioning"),
    [("memory", "hilbert"), ("dask", "hilbert"), ("parquet", "hilbert"), ("gpkg", "rows")],
)
def test_local_cluster_equals_single_machine(
    kind, partitioning, client, cells, point_pieces, files
):
    expected = covered_fraction(geometries(cells), point_pieces)
    result = distributed_coverage(
        areas_as(kind, cells, files),
        point_pieces,
        npartitions=4,
        partitioning=partitioning,
        client=client,
    )
    assert result.scheduler == "distributed"
    np.testing.assert_allclose(result.fraction, expected, rtol=0, atol=EXACT)
    assert result.to_dict()["max_share_of_footprint"] < 1.0


@needs_dask
def test_local_cluster_polygon_footprint(client, cells, zone_pieces):
    expected = covered_fraction(geometries(cells), zone_pieces)
    got = covered_fraction_distributed(cells, zone_pieces, client=client, partitioning="rows")
    np.testing.assert_allclose(got, expected, rtol=0, atol=EXACT)


# --- the optional extra missing ---------------------------------------------------------------


@pytest.mark.parametrize("module", ["dask", "dask_geopandas"])
def test_missing_dask_names_the_install_command(module, monkeypatch, cells, point_pieces):
    # None in sys.modules makes "import <module>" raise ImportError, as when not installed.
    monkeypatch.setitem(sys.modules, module, None)
    with pytest.raises(MissingExtraError, match=r'pip install -e "\.\[distributed\]"') as info:
        covered_fraction_distributed(cells, point_pieces)
    assert isinstance(info.value, ImportError)
    assert isinstance(info.value, InputError)


def test_module_imports_without_dask():
    code = (
        "import sys\n"
        "for name in ('dask', 'dask_geopandas', 'distributed'):\n"
        "    sys.modules[name] = None\n"
        "import coverage_audit.distributed as d\n"
        "print(d.INSTALL_HINT)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=False
    )
    assert done.returncode == 0, done.stderr
    assert '".[distributed]"' in done.stdout


# --- bad inputs -------------------------------------------------------------------------------


@needs_dask
def test_areas_without_crs(cells, point_pieces, tmp_path):
    bare = gpd.GeoDataFrame(geometry=list(geometries(cells)))
    with pytest.raises(InputError, match="the areas: no coordinate reference system; set it"):
        covered_fraction_distributed(bare, point_pieces)
    path = tmp_path / "bare.parquet"
    bare.to_parquet(path)
    with pytest.raises(InputError, match=r"the areas file '.*bare\.parquet': no coordinate"):
        covered_fraction_distributed(path, point_pieces)


@needs_dask
def test_areas_not_projected(cells, point_pieces):
    degrees = cells.to_crs("EPSG:4326")
    with pytest.raises(InputError, match=r"the areas: CRS EPSG:4326 is not projected.*reproject"):
        covered_fraction_distributed(degrees, point_pieces)


@needs_dask
def test_unknown_or_unreadable_files(point_pieces, tmp_path):
    with pytest.raises(InputError, match=r"'.*nowhere\.parquet' was not found"):
        covered_fraction_distributed(tmp_path / "nowhere.parquet", point_pieces)
    table = tmp_path / "areas.csv"
    table.write_text("geoid\n1\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"areas\.csv' is of a kind that cannot be read"):
        covered_fraction_distributed(str(table), point_pieces)
    with pytest.raises(InputError, match="is of a kind that cannot be read"):
        covered_fraction_distributed(tmp_path, point_pieces)  # a folder without Parquet
    garbage = tmp_path / "garbage.parquet"
    garbage.write_bytes(b"not a parquet file")
    with pytest.raises(InputError, match=r"garbage\.parquet' could not be read"):
        covered_fraction_distributed(garbage, point_pieces)
    plain = tmp_path / "plain.parquet"
    pd.DataFrame({"a": [1, 2]}).to_parquet(plain)
    with pytest.raises(InputError, match=r"plain\.parquet' could not be read.*geo metadata"):
        covered_fraction_distributed(plain, point_pieces)


@needs_dask
def test_layers(cells, point_pieces, files):
    with pytest.raises(InputError, match=r"has no layer \"roads\"; its layers are \['tracts'\]"):
        covered_fraction_distributed(files["gpkg"], point_pieces, layer="roads")
    with pytest.raises(SpecError, match="layer applies to GeoPackage files"):
        covered_fraction_distributed(files["parquet"], point_pieces, layer="tracts")
    with pytest.raises(SpecError, match="layer applies only when the areas are a file path"):
        covered_fraction_distributed(cells, point_pieces, layer="tracts")


@needs_dask
@pytest.mark.parametrize(
    ("options", "message"),
    [
        ({"npartitions": 0}, "npartitions must be at least 1, not 0"),
        ({"npartitions": 2.5}, "npartitions must be a whole number"),
        ({"npartitions": True}, "npartitions must be a whole number"),
        ({"partitioning": "zorder"}, r"partitioning was \"zorder\" but is expected.*'hilbert'"),
        ({"client": "tcp://127.0.0.1:8786"}, "client must be a dask.distributed.Client, not str"),
    ],
)
def test_bad_options(options, message, cells, point_pieces):
    with pytest.raises(SpecError, match=message):
        covered_fraction_distributed(cells, point_pieces, **options)


@needs_dask
def test_bad_footprints(cells, point_pieces):
    listed = Footprint(
        name="branches",
        kind="ids",
        geometry=shapely.Polygon(),
        pieces=np.array([], dtype=object),
        crs=CRS(FICTIONAL_CRS),
        served_ids=frozenset({"99001000001"}),
    )
    with pytest.raises(InputError, match="'branches' is a list of served ids.*footprint_fractions"):
        covered_fraction_distributed(cells, listed)
    elsewhere = Footprint(
        name="sites", kind="points", geometry=None, pieces=point_pieces, crs=CRS("EPSG:5070")
    )
    with pytest.raises(InputError, match=r"footprint is in EPSG:5070 and the areas in .*reproject"):
        covered_fraction_distributed(cells, elsewhere)
    points = shapely.points(np.arange(3.0), np.arange(3.0))
    with pytest.raises(InputError, match="found 3 other piece.*Point; buffer points"):
        covered_fraction_distributed(cells, points)
    with pytest.raises(InputError, match="must be shapely polygons, found str"):
        covered_fraction_distributed(cells, np.array(["POLYGON EMPTY"], dtype=object))


@needs_dask
def test_areas_of_wrong_type(point_pieces):
    with pytest.raises(InputError, match="areas must be a GeoDataFrame.*not list"):
        covered_fraction_distributed([shapely.box(0, 0, 1, 1)], point_pieces)


def test_results_must_cover_each_area_once():
    # Two partitions that both claim row 0 of input partition 0: the assembly refuses.
    one = (np.array([0.5]), np.array([0]), np.array([0]), None)
    with pytest.raises(AnalysisError, match="do not cover each of the areas once"):
        _assemble([one, one], None)
    gap = (np.array([0.5, 0.25]), np.array([0, 0]), np.array([0, 2]), None)
    with pytest.raises(AnalysisError, match="do not cover each of the areas once"):
        _assemble([gap], None)
