"""Faster paths of issue 13 give the answers of the reference libraries and of the old paths."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import scipy.sparse as sp
import shapely
from scipy.sparse.csgraph import connected_components

import coverage_audit.edges as edges_module
from coverage_audit import weights as weights_module
from coverage_audit._graph import csr_of_pairs, label_masked, reach
from coverage_audit.enclave_budget import _masked_components
from coverage_audit.io.areas import project_geometries
from coverage_audit.synthetic import FICTIONAL_CRS, densify_independently, tessellation

SEED = 20261202


@pytest.fixture(scope="module")
def loose():
    cells = tessellation(300, seed=SEED)
    clean = np.asarray(cells.geometry.array)
    return clean, densify_independently(clean, vertices=80, seed=SEED + 1)


def test_edge_table_in_strips_equals_one_tree(loose, monkeypatch):
    # Consistency check (the tool against itself): boxes held one strip at a time find the
    # pairs one tree over all boxes finds; and libpysal's strict contiguity on the clean
    # cells is the oracle of the links.
    clean, geoms = loose
    whole = edges_module.edge_table(geoms)
    monkeypatch.setattr(edges_module, "_STRIP_SEGMENTS", 150)
    strips = edges_module.edge_table(geoms)
    assert (strips.pairs[["i", "j"]].to_numpy() == whole.pairs[["i", "j"]].to_numpy()).all()
    assert np.allclose(strips.pairs["length"], whole.pairs["length"], rtol=0, atol=1e-9)
    assert (strips.touching == whole.touching).all()
    assert np.allclose(strips.outer_edge, whole.outer_edge, rtol=0, atol=1e-9)
    assert np.allclose(strips.hole_edge, whole.hole_edge, rtol=0, atol=1e-9)
    oracle = weights_module._strict_contiguity(clean, rook=True)
    assert len(strips.pairs) == oracle.nnz // 2


def test_masked_components_match_scipy():
    # Oracle: scipy's connected_components on the masked subgraph (a partition), and
    # labels in order of each component's first position.
    rng = np.random.default_rng(SEED)
    n = 400
    rows = rng.integers(0, n, 900)
    cols = rng.integers(0, n, 900)
    adjacency = sp.csr_matrix((np.ones(900), (rows, cols)), shape=(n, n))
    adjacency = ((adjacency + adjacency.T) > 0).astype(float).tocsr()
    for share in (0.0, 0.3, 0.7, 1.0):
        mask = rng.random(n) < share
        labels, count = _masked_components(adjacency, mask)
        idx = np.flatnonzero(mask)
        expected, sub = (0, np.zeros(0, dtype=int))
        if idx.size:
            expected, sub = connected_components(adjacency[idx][:, idx], directed=False)
        assert count == expected
        assert (labels[~mask] == -1).all()
        # Same partition: a one-to-one map between the two labellings.
        pairs = set(zip(labels[idx].tolist(), sub.tolist(), strict=True))
        assert len(pairs) == count
        # First positions of labels 0, 1, ... increase.
        firsts = [int(np.flatnonzero(labels == k)[0]) for k in range(count)]
        assert firsts == sorted(firsts)


def test_reach_matches_scipy_on_a_path_with_a_wall():
    # Path 0-1-2-3-4-5 with area 3 removed: from 0, areas 0..2 are reached (by hand).
    x = np.array([0, 1, 2, 3, 4, 1, 2, 3, 4, 5])
    y = np.array([1, 2, 3, 4, 5, 0, 1, 2, 3, 4])
    indptr, indices = csr_of_pairs(x, y, 6)
    allowed = np.array([True, True, True, False, True, True])
    reached = reach(indptr, indices, allowed, np.array([0]))
    assert reached.tolist() == [True, True, True, False, False, False]
    labels, count = label_masked(indptr, indices, allowed)
    assert count == 2 and labels.tolist() == [0, 0, 0, -1, 1, 1]


def test_threaded_projection_equals_to_crs(loose, monkeypatch):
    # Oracle: geopandas GeoSeries.to_crs (pyproj), coordinate for coordinate.
    import coverage_audit.io.areas as areas_module

    _, geoms = loose
    target = "+proj=laea +lat_0=-30 +lon_0=-131 +x_0=0 +y_0=0 +datum=WGS84 +units=m +no_defs"
    expected = np.asarray(gpd.GeoSeries(geoms, crs=FICTIONAL_CRS).to_crs(target).array)
    monkeypatch.setattr(areas_module, "_PROJECT_CHUNK", 1000)  # several threads
    got = project_geometries(geoms, FICTIONAL_CRS, target)
    assert shapely.equals_exact(got, expected, tolerance=0).all()
    assert shapely.equals_exact(
        project_geometries(geoms[:3], FICTIONAL_CRS, target), expected[:3], tolerance=0
    ).all()


def test_projection_into_the_same_crs_is_skipped(loose, monkeypatch):
    # Oracle: geopandas GeoSeries.to_crs into the CRS the geometries are already in (PROJ's
    # no-op), coordinate for coordinate; and no transformer is built at all.
    import coverage_audit.io.areas as areas_module

    _, geoms = loose
    expected = np.asarray(gpd.GeoSeries(geoms, crs=FICTIONAL_CRS).to_crs(FICTIONAL_CRS).array)

    def refuse(*args, **kwargs):
        raise AssertionError("a transformer was built for a projection into the same CRS")

    monkeypatch.setattr(areas_module.Transformer, "from_crs", refuse)
    got = project_geometries(geoms, FICTIONAL_CRS, FICTIONAL_CRS)
    assert got is not geoms
    assert shapely.equals_exact(got, expected, tolerance=0).all()


def test_growth_on_threads_matches_the_array_path(monkeypatch):
    # Consistency check (the tool against itself): draws split across threads take the
    # same numbers from the generator as the array path, so the sets are identical.
    import coverage_audit.enclaves as enclaves_module

    if enclaves_module.grow_block is None:
        pytest.skip("numba not available")
    cells = tessellation(400, seed=SEED)
    from coverage_audit.weights import build_area_graph

    graph = build_area_graph(np.asarray(cells.geometry.array), cells["geoid"].tolist())
    table = enclaves_module._neighbour_table(graph.adjacency)
    pool = np.arange(table.shape[0])
    monkeypatch.setattr(enclaves_module.os, "cpu_count", lambda: 3)
    scratch: dict = {}
    for size, draws in [(40, 300), (300, 130)]:
        threaded = enclaves_module.grow_connected_sets(
            table, pool, size, draws, np.random.default_rng(SEED), scratch=scratch
        )
        with monkeypatch.context() as patch:
            patch.setattr(enclaves_module, "grow_block", None)
            arrays = enclaves_module.grow_connected_sets(
                table, pool, size, draws, np.random.default_rng(SEED)
            )
        np.testing.assert_array_equal(threaded, arrays)
