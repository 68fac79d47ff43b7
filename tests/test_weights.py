"""Tests of coverage_audit.weights: contiguity, islands, components, shared edges."""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pytest
import shapely
from libpysal.examples import get_path
from libpysal.graph import Graph

from coverage_audit import weights as weights_module
from coverage_audit.edges import EDGE_TOLERANCE_M, edge_table
from coverage_audit.errors import AnalysisError, IslandWarning, SpecError
from coverage_audit.synthetic import densify_independently, tessellation
from coverage_audit.weights import (
    CONTIGUITY_KINDS,
    ISLAND_POLICIES,
    ISLAND_REASON,
    build_area_graph,
    shared_boundary_lengths,
)

SEED = 20240611


def lattice(rows: int, cols: int, *, x0: float = 0.0, y0: float = 0.0) -> np.ndarray:
    """Unit squares, row by row from the lower left."""
    jj, ii = np.meshgrid(np.arange(cols), np.arange(rows))
    x, y = jj.ravel() + x0, ii.ravel() + y0
    return shapely.box(x, y, x + 1.0, y + 1.0)


def ids_for(n: int, prefix: str = "A") -> list[str]:
    return [f"{prefix}{k:03d}" for k in range(n)]


def build_quietly(geoms, ids, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a clean layer must not warn at all
        return build_area_graph(geoms, ids, **kwargs)


# --------------------------------------------------------------------------- lattices


@pytest.mark.parametrize(
    ("kind", "links", "centre_degree", "corner_degree"),
    [
        # 3 x 3 lattice, counted by hand: 6 horizontal + 6 vertical shared edges (rook);
        # queen adds the 2 diagonals of each of the 4 unit cells of corners, 8 more.
        ("rook", 12, 4, 2),
        ("queen", 20, 8, 3),
    ],
)
def test_lattice_rook_and_queen_counts(kind, links, centre_degree, corner_degree):
    graph = build_quietly(lattice(3, 3), ids_for(9), kind=kind)
    degree = np.asarray(graph.adjacency.sum(axis=1)).ravel()
    assert graph.to_dict()["links"] == links
    assert degree[4] == centre_degree
    assert degree[0] == corner_degree
    assert (graph.adjacency != graph.adjacency.T).nnz == 0
    assert graph.islands == ()
    assert graph.n_components == 1


def test_queen_diagonal_only_neighbours_are_not_rook_neighbours():
    graph_q = build_quietly(lattice(2, 2), ids_for(4), kind="queen")
    graph_r = build_quietly(lattice(2, 2), ids_for(4), kind="rook")
    # Squares 0 (lower left) and 3 (upper right) touch at one corner only.
    assert graph_q.adjacency[0, 3] == 1
    assert graph_r.adjacency[0, 3] == 0


@pytest.mark.parametrize("kind", CONTIGUITY_KINDS)
def test_vertex_method_equals_strict_method_on_clean_layers(kind):
    # libpysal's strict topological contiguity is the oracle for our vertex comparison.
    rook = kind == "rook"
    columbus = gpd.read_file(get_path("columbus.shp"))
    for geoms in (
        lattice(5, 7),
        np.asarray(columbus.geometry.array),
        np.asarray(tessellation(1_500, seed=SEED).geometry.array),
    ):
        assert weights_module._is_clean_coverage(geoms)
        fast = weights_module._vertex_contiguity(geoms, rook=rook)
        strict = weights_module._strict_contiguity(geoms, rook=rook)
        assert (fast != strict).nnz == 0


def test_columbus_queen_matches_libpysal_and_published_link_count():
    # libpysal's Graph.build_contiguity on the bundled columbus layer is the oracle; the
    # queen weights of Anselin (1988) have 236 non-zero entries (esda's own tests, from
    # memory), i.e. 118 joins.
    columbus = gpd.read_file(get_path("columbus.shp"))
    graph = build_quietly(columbus.geometry.array, columbus["POLYID"].astype(str), kind="queen")
    oracle = Graph.build_contiguity(columbus.geometry, rook=False).sparse
    assert (graph.adjacency != oracle).nnz == 0
    assert graph.adjacency.nnz == 236


def test_unclean_layer_uses_the_strict_method():
    # A T-junction: the right-hand boxes split the left box's edge at a vertex the left box
    # does not have, so vertices alone would miss both links.
    geoms = np.array([shapely.box(0, 0, 1, 2), shapely.box(1, 0, 2, 1), shapely.box(1, 1, 2, 2)])
    assert not weights_module._is_clean_coverage(geoms)
    graph = build_quietly(geoms, ids_for(3), kind="rook")
    assert graph.adjacency[0, 1] == 1 and graph.adjacency[0, 2] == 1 and graph.adjacency[1, 2] == 1


def test_multipolygon_area_links_through_each_part():
    left, right = shapely.box(0, 0, 1, 1), shapely.box(3, 0, 4, 1)
    geoms = np.array(
        [shapely.MultiPolygon([left, right]), shapely.box(1, 0, 2, 1), shapely.box(4, 0, 5, 1)]
    )
    graph = build_quietly(geoms, ids_for(3), kind="rook")
    assert graph.adjacency[0, 1] == 1 and graph.adjacency[0, 2] == 1
    assert graph.adjacency[1, 2] == 0


def test_area_in_a_hole_is_a_neighbour_of_the_ring_around_it():
    ring = shapely.Polygon(
        [(0, 0), (3, 0), (3, 3), (0, 3)], holes=[[(1, 1), (2, 1), (2, 2), (1, 2)]]
    )
    geoms = np.array([ring, shapely.box(1, 1, 2, 2)])
    for kind in CONTIGUITY_KINDS:
        graph = build_quietly(geoms, ["ring", "core"], kind=kind)
        assert graph.adjacency[0, 1] == 1


# --------------------------------------------------------------------------- islands


def test_islands_are_found_reported_and_left_out():
    geoms = np.concatenate([lattice(2, 2), [shapely.box(10, 10, 11, 11)]])
    with pytest.warns(IslandWarning, match=r"1 island\(s\) with no queen neighbour \(A004\)"):
        graph = build_area_graph(geoms, ids_for(5))
    assert graph.islands == ("A004",)
    assert graph.island_mask.tolist() == [False, False, False, False, True]
    assert graph.stats_mask.tolist() == [True, True, True, True, False]
    assert graph.stats_adjacency.shape == (4, 4)
    summary = graph.to_dict()
    assert summary["islands"] == ["A004"]
    assert summary["areas_in_statistics"] == 4
    assert summary["components"] == 2
    assert summary["knn_k"] is None
    assert "island" in ISLAND_REASON


def test_knn_policy_links_each_island_to_its_nearest_areas():
    # Island centred at (5.5, 0.5); by hand, the nearest square centres of the 2 x 2 lattice
    # are square 1 at (1.5, 0.5), distance 4, and square 3 at (1.5, 1.5), distance sqrt(17).
    geoms = np.concatenate([lattice(2, 2), [shapely.box(5, 0, 6, 1)]])
    with pytest.warns(IslandWarning, match="island policy: knn"):
        graph = build_area_graph(geoms, ids_for(5), island_policy="knn", knn_k=2)
    assert graph.islands == ("A004",)
    assert graph.stats_mask.all()
    stats = graph.stats_adjacency.toarray()
    assert stats[4].tolist() == [0, 1, 0, 1, 0]
    assert (stats == stats.T).all()
    # The plain contiguity never holds the nearest-neighbour links.
    assert graph.adjacency[4].nnz == 0
    assert graph.to_dict()["knn_k"] == 2
    row = graph.stats_graph("r").sparse
    assert np.allclose(np.asarray(row.sum(axis=1)).ravel(), 1.0, rtol=0, atol=1e-15)


def test_knn_with_duplicate_representative_points_skips_the_island_itself():
    # Two identical islands: the kd-tree may list the twin first; neither links to itself.
    twin = shapely.box(10, 10, 11, 11)
    geoms = np.concatenate([lattice(1, 2), [twin, twin]])
    with pytest.warns(IslandWarning):
        graph = build_area_graph(geoms, ids_for(4), island_policy="knn", knn_k=1)
    links = graph.stats_adjacency.toarray()
    assert np.diag(links).sum() == 0
    assert links[2, 3] == 1 and links[3, 2] == 1


def test_components_are_labelled_in_order_and_listed_largest_first():
    geoms = np.concatenate([lattice(1, 2), lattice(2, 2, x0=10.0)])
    with pytest.warns(IslandWarning, match="2 connected component"):
        graph = build_area_graph(geoms, ids_for(6))
    assert graph.component_labels.tolist() == [0, 0, 1, 1, 1, 1]
    assert graph.components() == [("A002", "A003", "A004", "A005"), ("A000", "A001")]
    assert graph.to_dict()["largest_component_areas"] == 4


def test_single_area_is_one_island():
    with pytest.warns(IslandWarning):
        graph = build_area_graph(lattice(1, 1), ["only"])
    assert graph.islands == ("only",)
    assert graph.n_components == 1
    assert graph.stats_mask.sum() == 0


def test_stats_graph_transforms():
    graph = build_quietly(lattice(3, 3), ids_for(9), kind="rook")
    binary = graph.stats_graph("b").sparse.toarray()
    row = graph.stats_graph("r").sparse.toarray()
    assert binary.sum() == 24
    assert np.allclose(row.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    assert row[4, 1] == pytest.approx(0.25, abs=1e-15)


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"kind": "bishop"}, SpecError, r'contiguity was "bishop" .*\[\'queen\', \'rook\'\]'),
        ({"island_policy": "drop"}, SpecError, r'islands was "drop" .*\[\'exclude\', \'knn\'\]'),
        ({"knn_k": 0}, SpecError, "knn_k was 0 but must be a whole number of at least 1"),
    ],
)
def test_bad_options_are_rejected(kwargs, error, match):
    with pytest.raises(error, match=match):
        build_area_graph(lattice(2, 2), ids_for(4), **kwargs)


def test_id_count_must_match_geometries():
    with pytest.raises(AnalysisError, match="3 ids were given for 4 geometries"):
        build_area_graph(lattice(2, 2), ids_for(3))


def test_no_areas_is_an_error():
    with pytest.raises(AnalysisError, match="no areas to build contiguity from"):
        build_area_graph(np.array([], dtype=object), [])


def test_knn_for_a_single_island_area_is_an_error():
    with pytest.raises(AnalysisError, match="a single area has no nearest neighbour"):
        build_area_graph(lattice(1, 1), ["only"], island_policy="knn")


def test_policies_are_listed():
    assert ISLAND_POLICIES == ("exclude", "knn")


# --------------------------------------------------------------------------- shared edges


def test_shared_boundary_lengths_on_unit_squares():
    # 2 x 2 unit squares: four unit shared edges; the diagonal pairs only touch at a point
    # and are dropped; each perimeter is 4 (by hand).
    result = shared_boundary_lengths(lattice(2, 2))
    pairs = {(int(i), int(j)): float(v) for i, j, v in result.pairs.itertuples(index=False)}
    assert pairs == {(0, 1): 1.0, (0, 2): 1.0, (1, 3): 1.0, (2, 3): 1.0}
    assert result.perimeter.tolist() == [4.0, 4.0, 4.0, 4.0]


def test_shared_boundary_lengths_without_common_vertices():
    # A 1 x 2 box beside two unit boxes: each shares a length-1 piece of the long edge.
    geoms = np.array([shapely.box(0, 0, 1, 2), shapely.box(1, 0, 2, 1), shapely.box(1, 1, 2, 2)])
    result = shared_boundary_lengths(geoms)
    pairs = {(int(i), int(j)): float(v) for i, j, v in result.pairs.itertuples(index=False)}
    assert pairs == {(0, 1): 1.0, (0, 2): 1.0, (1, 2): 1.0}
    assert result.perimeter.tolist() == [6.0, 4.0, 4.0]


def test_shared_boundary_lengths_for_requested_pairs():
    result = shared_boundary_lengths(lattice(2, 2), pairs=np.array([[1, 0], [0, 3], [2, 2]]))
    # (1, 0) is normalised to (0, 1); (0, 3) is a point contact; (2, 2) is not a pair.
    assert result.pairs[["i", "j"]].values.tolist() == [[0, 1]]
    assert result.pairs["length"].tolist() == [1.0]


def test_shared_boundary_lengths_with_no_pairs():
    result = shared_boundary_lengths(lattice(1, 1))
    assert result.pairs.empty
    assert list(result.pairs.columns) == ["i", "j", "length"]


# --------------------------------------------------------------------------- tolerant edges


@pytest.fixture(scope="module")
def densified_layer():
    """A small tessellation and the same cells densified each on its own (no shared vertices)."""
    cells = tessellation(300, seed=SEED)
    clean = np.asarray(cells.geometry.array)
    loose = densify_independently(clean, vertices=100, seed=SEED + 1)
    return clean, loose


@pytest.mark.parametrize("kind", CONTIGUITY_KINDS)
def test_densified_layer_has_libpysal_contiguity_of_the_clean_layer(densified_layer, kind):
    # Oracle: libpysal's strict contiguity on the clean cells (same shapes, shared
    # vertices). On the densified cells vertices never coincide and the shared lines only
    # agree to rounding, so exact methods miss links; the tolerant one must not.
    clean, loose = densified_layer
    assert not weights_module._is_clean_coverage(loose)
    oracle = weights_module._strict_contiguity(clean, rook=kind == "rook")
    graph = build_quietly(loose, ids_for(loose.size), kind=kind)
    assert (graph.adjacency != oracle).nnz == 0
    assert graph.adjacency.nnz > 4 * loose.size  # Voronoi cells have about 6 neighbours


def test_densified_layer_shared_lengths_match_geos_on_the_clean_layer(densified_layer):
    # Oracle: GEOS length of boundary(a) ∩ boundary(b) on the clean cells.
    clean, loose = densified_layer
    result = shared_boundary_lengths(loose)
    i = result.pairs["i"].to_numpy()
    j = result.pairs["j"].to_numpy()
    bounds = shapely.boundary(clean)
    expected = shapely.length(shapely.intersection(bounds[i], bounds[j]))
    assert np.allclose(result.pairs["length"].to_numpy(), expected, rtol=0, atol=1e-6)
    oracle = weights_module._strict_contiguity(clean, rook=True)
    assert len(result.pairs) == oracle.nnz // 2


def test_densified_layer_outer_edge_is_the_frame(densified_layer):
    # The cells tile a rectangle of cols x rows cells of 2 km (tessellation's grid): the
    # outer edge adds up to its perimeter, and there are no holes.
    _, loose = densified_layer
    table = edge_table(loose)
    xmin, ymin, xmax, ymax = shapely.total_bounds(loose)
    assert table.outer_edge.sum() == pytest.approx(2 * ((xmax - xmin) + (ymax - ymin)), abs=1e-4)
    assert table.hole_edge.sum() == pytest.approx(0.0, abs=1e-6)
    # Every metre of boundary is shared, outer edge or hole (by construction of a tiling).
    shared = np.bincount(
        np.r_[table.pairs["i"], table.pairs["j"]],
        np.r_[table.pairs["length"], table.pairs["length"]],
        loose.size,
    )
    assert np.allclose(shared + table.outer_edge + table.hole_edge, table.perimeter, atol=1e-3)


def test_edge_table_separates_holes_from_the_outer_edge():
    # 3 x 3 unit-km squares without the centre: by hand the outer edge is 12 km and the
    # hole's edge 4 km; 8 shared unit edges, and the four side-middle cells also meet
    # their neighbours at the hole's corners (4 queen-only contacts): 12 contacts.
    cells = [
        shapely.box(c * 1000.0, r * 1000.0, (c + 1) * 1000.0, (r + 1) * 1000.0)
        for r in range(3)
        for c in range(3)
        if (r, c) != (1, 1)
    ]
    table = edge_table(np.array(cells))
    assert table.outer_edge.sum() == pytest.approx(12_000.0, abs=1e-6)
    assert table.hole_edge.sum() == pytest.approx(4_000.0, abs=1e-6)
    assert len(table.pairs) == 8 and len(table.touching) == 12
    assert table.pairs["length"].tolist() == [1000.0] * 8


def test_point_contact_within_tolerance_is_a_queen_link_only():
    # Two squares whose corners are 5 cm apart (under a 0.1 m tolerance): queen, not rook;
    # with the default tolerance of this 2 km layer (2 mm) they do not touch.
    geoms = np.array([shapely.box(0, 0, 1000, 1000), shapely.box(1000.05, 1000, 2000, 2000)])
    assert edge_table(geoms).touching.size == 0
    table = edge_table(geoms, tolerance=0.1)
    assert table.touching.tolist() == [[0, 1]]
    assert table.pairs.empty
    graph = build_quietly(lattice(2, 2), ids_for(4), kind="queen")
    # A 2-unit layer: a millionth of its extent is below 0.1 (default_tolerance).
    assert graph.to_dict()["edge_tolerance_m"] == pytest.approx(2e-6)
    assert EDGE_TOLERANCE_M == 0.1
