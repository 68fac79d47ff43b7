"""Tests of enclave detection, footprint holes and the Monte Carlo contrast.

Hand-built grids are unit squares (shapely boxes), so every boundary length is a whole
number of unit edges and each expected value below is "computed by hand" by counting
edges. Real geometry comes from libpysal's bundled Albuquerque 2000 census tracts
(example "10740", shipped in the libpysal wheel), checked against an independent GEOS
computation (union of the pocket's tracts, intersection with the served union).
"""

from __future__ import annotations

import json
import warnings

import geopandas as gpd
import numpy as np
import pytest
import scipy.sparse as sp
import shapely
from libpysal import examples
from scipy.sparse.csgraph import connected_components

from coverage_audit.enclaves import (
    EnclaveResult,
    _neighbour_table,
    find_enclaves,
    footprint_holes,
    grow_connected_sets,
)
from coverage_audit.errors import AnalysisError, IslandWarning, SpecError
from coverage_audit.weights import build_area_graph

SEED = 20240611
#: Exact arithmetic on unit squares leaves only floating-point rounding.
EXACT = 1e-12


# --------------------------------------------------------------------------- fixtures


class Grid:
    """A ``cols`` x ``rows`` grid of unit squares; area (c, r) has id ``T{r:02d}{c:02d}``."""

    def __init__(self, cols: int, rows: int, kind: str = "queen") -> None:
        self.cols, self.rows = cols, rows
        cells = [(c, r) for r in range(rows) for c in range(cols)]
        self.geoms = np.array([shapely.box(c, r, c + 1, r + 1) for c, r in cells], dtype=object)
        self.ids = [f"T{r:02d}{c:02d}" for c, r in cells]
        self.graph = build_area_graph(self.geoms, self.ids, kind=kind)
        self.served = np.ones(len(cells), dtype=bool)
        self.population = np.full(len(cells), 1000.0)
        self.white = np.full(len(cells), 900.0)
        self.transparent = np.zeros(len(cells), dtype=bool)

    def pos(self, c: int, r: int) -> int:
        return r * self.cols + c

    def id(self, c: int, r: int) -> str:
        return self.ids[self.pos(c, r)]

    def unserve(self, *cells: tuple[int, int]) -> None:
        for c, r in cells:
            self.served[self.pos(c, r)] = False

    def park(self, *cells: tuple[int, int]) -> None:
        for c, r in cells:
            self.served[self.pos(c, r)] = False
            self.population[self.pos(c, r)] = 0.0
            self.white[self.pos(c, r)] = 0.0
            self.transparent[self.pos(c, r)] = True

    def run(self, *, use_transparent: bool = False, **kwargs) -> EnclaveResult:
        options = {"reference_group": "white", "mc_draws": 0}
        options.update(kwargs)
        return find_enclaves(
            self.geoms,
            self.ids,
            self.served,
            self.population,
            {"white": self.white},
            self.graph,
            transparent=self.transparent if use_transparent else None,
            **options,
        )


def area_sets(result: EnclaveResult) -> list[set[str]]:
    return [set(e.area_ids) for e in result.enclaves]


# --------------------------------------------------------------------------- detection


def test_single_pocket_in_3x3_has_surround_one_and_full_ring():
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    result = grid.run()
    assert area_sets(result) == [{grid.id(1, 1)}]
    e = result.enclaves[0]
    # Computed by hand: four unit sides, all shared with served cells.
    assert e.surround_share == pytest.approx(1.0, abs=EXACT)
    assert e.boundary_m == pytest.approx(4.0, abs=EXACT)
    assert e.served_boundary_m == pytest.approx(4.0, abs=EXACT)
    assert e.edge_boundary_m == 0.0
    # Queen ring of the centre cell: the other eight cells (computed by hand).
    assert set(e.ring_area_ids) == set(grid.ids) - {grid.id(1, 1)}
    assert e.ring_population == pytest.approx(8000.0, abs=EXACT)
    assert result.unserved_components == 1


def test_rook_ring_has_four_cells():
    grid = Grid(3, 3, kind="rook")
    grid.unserve((1, 1))
    e = grid.run().enclaves[0]
    # Computed by hand: the rook neighbours of the centre cell.
    assert set(e.ring_area_ids) == {grid.id(1, 0), grid.id(0, 1), grid.id(2, 1), grid.id(1, 2)}


def test_planted_enclaves_recovered_exactly_and_edge_pockets_not_flagged():
    grid = Grid(8, 8)
    l_shape = [(2, 2), (3, 2), (2, 3)]
    single = [(5, 5)]
    corner = [(0, 7)]  # two of four sides on the study-area edge: share 1/2
    edge_domino = [(7, 3), (7, 4)]  # outer boundary 6, two on the edge: share 4/6
    grid.unserve(*l_shape, *single, *corner, *edge_domino)
    grid.population[grid.pos(5, 5)] = 5000.0
    grid.white[grid.pos(5, 5)] = 1000.0
    result = grid.run()
    # Ranked by population: the single cell holds 5000, the L-shape 3000.
    assert area_sets(result) == [
        {grid.id(*cell) for cell in single},
        {grid.id(*cell) for cell in l_shape},
    ]
    assert [e.id for e in result.enclaves] == ["E1", "E2"]
    assert result.unserved_components == 4
    # The L-shape tromino's outer boundary is 8 unit edges (computed by hand).
    assert result.enclaves[1].boundary_m == pytest.approx(8.0, abs=EXACT)
    labels = result.enclave_id
    assert labels[grid.pos(5, 5)] == "E1"
    assert labels[grid.pos(2, 3)] == "E2"
    assert labels[grid.pos(0, 7)] is None
    assert labels[grid.pos(0, 0)] is None
    assert result.component[grid.pos(0, 0)] == -1
    assert result.component[grid.pos(0, 7)] >= 0


def test_exact_surround_shares_of_edge_pockets():
    grid = Grid(8, 8)
    grid.unserve((0, 7), (7, 3), (7, 4))
    result = grid.run(min_surround=0.0)
    shares = {e.area_ids: e.surround_share for e in result.enclaves}
    # Computed by hand: a corner cell has 2 of 4 sides served; a domino along the right
    # edge has 4 of its 6 outer sides served.
    assert shares[(grid.id(0, 7),)] == pytest.approx(0.5, abs=EXACT)
    assert shares[(grid.id(7, 3), grid.id(7, 4))] == pytest.approx(4 / 6, abs=EXACT)
    corner = next(e for e in result.enclaves if e.area_ids == (grid.id(0, 7),))
    assert corner.edge_boundary_m == pytest.approx(2.0, abs=EXACT)


@pytest.mark.parametrize(("threshold", "flagged"), [(0.75, True), (5 / 6, True), (0.9, False)])
def test_two_cell_pocket_with_one_side_on_the_edge(threshold, flagged):
    grid = Grid(3, 3)
    grid.unserve((1, 0), (1, 1))
    result = grid.run(min_surround=threshold)
    assert bool(result.enclaves) is flagged
    if flagged:
        e = result.enclaves[0]
        # Computed by hand: outer boundary 6 unit edges, 1 on the bottom edge: 5/6.
        assert e.surround_share == pytest.approx(5 / 6, abs=EXACT)
        assert e.boundary_m == pytest.approx(6.0, abs=EXACT)
        assert e.served_boundary_m == pytest.approx(5.0, abs=EXACT)
        assert e.edge_boundary_m == pytest.approx(1.0, abs=EXACT)


def test_touching_pockets_merge_into_one_component():
    grid = Grid(4, 3)
    grid.unserve((1, 1), (2, 1))
    result = grid.run()
    assert result.unserved_components == 1
    assert area_sets(result) == [{grid.id(1, 1), grid.id(2, 1)}]
    e = result.enclaves[0]
    # Computed by hand: a 2x1 domino has 6 outer unit edges, all served.
    assert e.boundary_m == pytest.approx(6.0, abs=EXACT)
    assert e.surround_share == pytest.approx(1.0, abs=EXACT)
    assert e.population == pytest.approx(2000.0, abs=EXACT)


def test_corner_contact_is_one_component_under_queen_two_under_rook():
    # Queen contiguity links areas that share a point, rook only those sharing an edge
    # (the usual definitions, e.g. Anselin 1988, Spatial Econometrics, ch. 3; from memory).
    queen = Grid(4, 4, kind="queen")
    queen.unserve((1, 1), (2, 2))
    rook = Grid(4, 4, kind="rook")
    rook.unserve((1, 1), (2, 2))
    q, r = queen.run(), rook.run()
    assert q.unserved_components == 1
    assert area_sets(q) == [{queen.id(1, 1), queen.id(2, 2)}]
    # The corner has length zero, so the pair's outer boundary is 8 unit edges.
    assert q.enclaves[0].boundary_m == pytest.approx(8.0, abs=EXACT)
    assert r.unserved_components == 2
    assert sorted(map(sorted, area_sets(r))) == [[rook.id(1, 1)], [rook.id(2, 2)]]
    assert q.settings["contiguity"] == "queen" and r.settings["contiguity"] == "rook"


def test_ties_ranked_by_smallest_area_id():
    grid = Grid(7, 3)
    grid.unserve((5, 1), (1, 1), (3, 1))
    result = grid.run()
    # Equal populations: order by id, T0101 < T0103 < T0105.
    assert [e.area_ids for e in result.enclaves] == [("T0101",), ("T0103",), ("T0105",)]
    assert [e.id for e in result.enclaves] == ["E1", "E2", "E3"]


def test_min_population_is_strict():
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    grid.population[grid.pos(1, 1)] = 500.0
    grid.white[grid.pos(1, 1)] = 400.0
    assert grid.run(min_population=500.0).enclaves == ()
    assert len(grid.run(min_population=499.0).enclaves) == 1


def test_zero_population_pocket_is_not_an_enclave():
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    grid.population[grid.pos(1, 1)] = 0.0
    grid.white[grid.pos(1, 1)] = 0.0
    result = grid.run()
    assert result.enclaves == ()
    assert result.unserved_components == 1


def test_everything_served_gives_no_components():
    grid = Grid(3, 3)
    result = grid.run()
    assert result.unserved_components == 0 and result.enclaves == ()
    assert np.all(result.component == -1)


def test_group_figures_ring_contrast_and_income_tiers():
    grid = Grid(3, 3, kind="rook")
    grid.unserve((1, 1))
    grid.population[:] = 1000.0
    grid.white[:] = 800.0
    grid.white[grid.pos(1, 1)] = 200.0
    black = np.full(9, 150.0)
    black[grid.pos(1, 1)] = 700.0
    tiers = np.array(["upper"] * 9, dtype=object)
    tiers[grid.pos(1, 1)] = "low"
    tiers[grid.pos(1, 0)] = None
    tiers[grid.pos(0, 1)] = "moderate"
    result = find_enclaves(
        grid.geoms,
        grid.ids,
        grid.served,
        grid.population,
        {"white": grid.white, "black": black},
        grid.graph,
        income_tier=tiers,
        reference_group="white",
        mc_draws=0,
    )
    e = result.enclaves[0]
    # Computed by hand: the pocket is 20% white, 70% black, minority = 1 - white = 80%;
    # its rook ring (4 cells of 1000) is 80% white, 15% black, 20% minority.
    assert e.group_shares == pytest.approx({"white": 0.2, "black": 0.7, "minority": 0.8})
    assert e.ring_group_shares == pytest.approx({"white": 0.8, "black": 0.15, "minority": 0.2})
    assert e.ring_population == pytest.approx(4000.0, abs=EXACT)
    assert e.share_difference == pytest.approx({"white": -0.6, "black": 0.55, "minority": 0.6})
    assert e.share_ratio == pytest.approx({"white": 0.25, "black": 0.7 / 0.15, "minority": 4.0})
    assert e.minority_share == pytest.approx(0.8, abs=EXACT)
    assert e.income_tiers == {"low": 1}
    assert e.ring_income_tiers == {"moderate": 1, "unknown": 1, "upper": 2}
    assert e.p_value is None and e.mc_draws == 0


def test_given_minority_group_is_used_and_zero_ring_share_gives_no_ratio():
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    minority = np.zeros(9)
    minority[grid.pos(1, 1)] = 300.0
    result = find_enclaves(
        grid.geoms,
        grid.ids,
        grid.served,
        grid.population,
        {"white": grid.white, "minority": minority},
        grid.graph,
        reference_group="white",
        mc_draws=0,
    )
    e = result.enclaves[0]
    assert e.minority_share == pytest.approx(0.3, abs=EXACT)
    assert e.share_ratio["minority"] is None
    assert e.share_difference["minority"] == pytest.approx(0.3, abs=EXACT)
    assert result.settings["contrast_group"] == "minority"


# --------------------------------------------------------------------------- transparency


def river_grid() -> Grid:
    """7 x 5 grid, a river down column 3 (edge to edge), pockets at (2, 2) and (4, 1)."""
    grid = Grid(7, 5)
    grid.park(*[(3, r) for r in range(5)])
    grid.unserve((2, 2), (4, 1))
    grid.population[grid.pos(4, 1)] = 1200.0
    return grid


def test_river_without_transparency_merges_both_pockets_through_it():
    grid = river_grid()
    result = grid.run()
    assert result.unserved_components == 1
    e = result.enclaves[0]
    # Computed by hand: river (5 cells) plus two pockets: outer boundary 16 unit edges,
    # 2 of them on the top and bottom edges, so 14/16 served.
    assert len(e.area_ids) == 7
    assert e.boundary_m == pytest.approx(16.0, abs=EXACT)
    assert e.edge_boundary_m == pytest.approx(2.0, abs=EXACT)
    assert e.surround_share == pytest.approx(14 / 16, abs=EXACT)
    assert result.settings["transparent_area_ids"] == []


def test_river_with_transparency_separates_pockets_and_looks_through():
    grid = river_grid()
    result = grid.run(use_transparent=True)
    assert result.unserved_components == 2
    assert area_sets(result) == [{grid.id(4, 1)}, {grid.id(2, 2)}]
    # Computed by hand (look-through rule): the river's outer boundary is 12; 8 of it is
    # served, 2 is edge and 1 each borders the two pockets. Seen from one pocket, the
    # river's other boundary is 12 - 1 = 11, of which 8 served, so its stretch counts
    # 8/11 served: share = (3 + 8/11) / 4 = 41/44.
    for e in result.enclaves:
        assert e.surround_share == pytest.approx(41 / 44, abs=EXACT)
        assert e.boundary_m == pytest.approx(4.0, abs=EXACT)
        assert e.served_boundary_m == pytest.approx(3 + 8 / 11, abs=EXACT)
        assert e.transparent_boundary_m == pytest.approx(1.0, abs=EXACT)
        assert e.edge_boundary_m == 0.0
        assert not set(e.ring_area_ids) & set(result.settings["transparent_area_ids"])
    assert result.settings["transparent_area_ids"] == sorted(grid.id(3, r) for r in range(5))
    assert result.enclave_id[grid.pos(3, 2)] is None
    assert result.component[grid.pos(3, 2)] == -1


def test_park_on_the_edge_flags_only_with_transparency():
    grid = Grid(5, 5)
    grid.park(*[(c, 4) for c in range(5)])
    grid.unserve((2, 3))
    # Computed by hand. Without transparency the park row joins the pocket: outer
    # boundary 14, 7 on the edge, 7 served: 1/2, not enclosed.
    plain = grid.run(min_surround=0.0).enclaves[0]
    assert plain.surround_share == pytest.approx(0.5, abs=EXACT)
    assert grid.run().enclaves == ()
    # With it: the park's outer boundary is 12, 4 served, 7 edge, 1 along the pocket;
    # the pocket's stretch counts 4/11 served: share = (3 + 4/11) / 4 = 37/44.
    see_through = grid.run(use_transparent=True)
    assert area_sets(see_through) == [{grid.id(2, 3)}]
    assert see_through.enclaves[0].surround_share == pytest.approx(37 / 44, abs=EXACT)


def test_lake_inside_pocket_is_left_out_of_the_boundary():
    grid = Grid(7, 7)
    ring = [(c, r) for c in (2, 3, 4) for r in (2, 3, 4) if (c, r) != (3, 3)]
    grid.unserve(*ring)
    grid.park((3, 3))
    plain = grid.run().enclaves[0]
    # Computed by hand: without transparency the lake is part of a 3x3 block (outer 12).
    assert len(plain.area_ids) == 9
    assert plain.boundary_m == pytest.approx(12.0, abs=EXACT)
    # With it, the lake touches only the pocket, so its 4 edges leave both sides of the
    # ratio: the ring of 8 cells keeps its outer 12, all served.
    clear = grid.run(use_transparent=True).enclaves[0]
    assert len(clear.area_ids) == 8
    assert clear.boundary_m == pytest.approx(12.0, abs=EXACT)
    assert clear.surround_share == pytest.approx(1.0, abs=EXACT)
    assert clear.transparent_boundary_m == 0.0


def test_transparent_area_with_population_is_refused():
    grid = river_grid()
    grid.transparent[grid.pos(0, 0)] = True
    with pytest.raises(AnalysisError, match=r"transparent marks 1 area.*T0000"):
        grid.run(use_transparent=True)


# --------------------------------------------------------------------------- Monte Carlo


def contrast_grid(pocket_minority: float) -> Grid:
    """12 x 12 region about 10% minority with a 2 x 2 pocket of the given minority share."""
    rng = np.random.default_rng(SEED)
    grid = Grid(12, 12)
    grid.white = np.round(grid.population * (1 - rng.uniform(0.02, 0.18, grid.population.size)))
    pocket = [(5, 5), (6, 5), (5, 6), (6, 6)]
    grid.unserve(*pocket)
    for c, r in pocket:
        grid.white[grid.pos(c, r)] = 1000.0 * (1 - pocket_minority)
    return grid


def test_p_value_small_for_high_minority_pocket():
    grid = contrast_grid(0.8)
    result = grid.run(mc_draws=199, rng=np.random.default_rng(SEED))
    e = result.enclaves[0]
    # No 4-cell set elsewhere comes near 80% minority: the smallest attainable p-value,
    # 1 / (draws + 1) (North, Curtis and Sham 2002, Am. J. Hum. Genet. 71, 439-441).
    assert e.p_value == pytest.approx(1 / 200, abs=EXACT)
    assert e.mc_draws == 199
    assert e.mc_mean_minority_share == pytest.approx(0.1, abs=0.02)


def test_p_value_not_small_for_typical_pocket():
    grid = contrast_grid(0.1)
    e = grid.run(mc_draws=199, rng=np.random.default_rng(SEED)).enclaves[0]
    # A pocket at the region's mean share sits mid-distribution (common practice, no
    # source: a typical value should not look significant).
    assert 0.2 < e.p_value < 0.8


def test_p_value_is_deterministic_under_a_seed():
    grid = contrast_grid(0.3)
    first = grid.run(mc_draws=99, rng=np.random.default_rng(SEED)).to_dict()
    second = grid.run(mc_draws=99, rng=np.random.default_rng(SEED)).to_dict()
    assert json.dumps(first, sort_keys=True) == json.dumps(second, sort_keys=True)
    assert first["enclaves"][0]["p_value"] is not None


def test_random_sets_are_connected_distinct_and_reproducible():
    grid = Grid(9, 9, kind="rook")
    table = _neighbour_table(grid.graph.adjacency)
    pool = np.arange(81)
    sets = grow_connected_sets(table, pool, 7, 300, np.random.default_rng(SEED))
    again = grow_connected_sets(table, pool, 7, 300, np.random.default_rng(SEED))
    np.testing.assert_array_equal(sets, again)
    assert sets.shape == (300, 7)
    adjacency = grid.graph.adjacency
    for row in sets:
        assert np.unique(row).size == 7
        # scipy's connected_components as the oracle of connectivity.
        n_comp, _ = connected_components(adjacency[row][:, row], directed=False)
        assert n_comp == 1


@pytest.mark.parametrize("budget", [None, 3 * 82])
def test_compiled_growth_matches_the_array_path(monkeypatch, budget):
    # Consistency check (the tool against itself): the compiled steps take the same
    # numbers from the generator as the array path, so the sets are identical, also when
    # the draws are done in chunks and when the frontier must widen.
    import coverage_audit.enclaves as enclaves_module

    if enclaves_module.grow_block is None:
        pytest.skip("numba not available")
    grid = Grid(9, 9, kind="queen")
    table = _neighbour_table(grid.graph.adjacency)
    pool = np.arange(81)
    if budget is not None:
        monkeypatch.setattr(enclaves_module, "_SEEN_BUDGET", budget)
    for size, draws in [(1, 5), (2, 40), (60, 50)]:
        compiled = grow_connected_sets(table, pool, size, draws, np.random.default_rng(SEED))
        with monkeypatch.context() as patch:
            patch.setattr(enclaves_module, "grow_block", None)
            arrays = grow_connected_sets(table, pool, size, draws, np.random.default_rng(SEED))
        np.testing.assert_array_equal(compiled, arrays)


def test_random_sets_on_a_path_have_the_hand_computed_law():
    # Path 0-1-2, sets of 2: seed 0 gives {0,1}; seed 1 gives {0,1} or {1,2} equally;
    # seed 2 gives {1,2}; so P({0,1}) = 1/3 + 1/6 = 1/2 (computed by hand).
    path = sp.csr_matrix(np.array([[0, 1, 0], [1, 0, 1], [0, 1, 0]], dtype=float))
    draws = 20_000
    sets = grow_connected_sets(
        _neighbour_table(path), np.arange(3), 2, draws, np.random.default_rng(SEED)
    )
    share = np.mean(np.sort(sets, axis=1)[:, 0] == 0)
    # Four binomial standard errors: sqrt(0.25 / 20000) = 0.0035.
    assert share == pytest.approx(0.5, abs=4 * 0.0035)
    # The seed is uniform: the middle node starts a third of the draws.
    assert np.mean(sets[:, 0] == 1) == pytest.approx(1 / 3, abs=4 * np.sqrt(2 / 9 / draws))


def test_random_sets_stay_in_components_large_enough():
    # Two components: a 3-cell strip and a single cell; sets of 2 must start in the strip.
    geoms = [shapely.box(c, 0, c + 1, 1) for c in range(3)] + [shapely.box(10, 0, 11, 1)]
    with pytest.warns(IslandWarning):
        graph = build_area_graph(np.array(geoms, dtype=object), ["a", "b", "c", "d"])
    table = _neighbour_table(graph.adjacency)
    sets = grow_connected_sets(table, np.arange(3), 2, 200, np.random.default_rng(SEED))
    assert set(np.unique(sets)) <= {0, 1, 2}
    with pytest.raises(AnalysisError, match="no component of the region has 5 areas"):
        grow_connected_sets(table, np.array([], dtype=np.int64), 5, 10, np.random.default_rng(SEED))


def test_mc_draws_zero_needs_no_rng():
    grid = contrast_grid(0.8)
    e = grid.run(mc_draws=0, rng=None).enclaves[0]
    assert e.p_value is None and e.mc_draws == 0


# --------------------------------------------------------------------------- output contract


def test_to_dict_keys_and_json_safety():
    grid = contrast_grid(0.8)
    tiers = np.array(["middle"] * grid.population.size, dtype=object)
    result = find_enclaves(
        grid.geoms,
        grid.ids,
        grid.served,
        grid.population,
        {"white": grid.white},
        grid.graph,
        income_tier=tiers,
        reference_group="white",
        mc_draws=19,
        rng=np.random.default_rng(SEED),
    )
    out = result.to_dict()
    json.dumps(out, allow_nan=False)
    assert set(out) >= {"enclaves", "holes", "settings", "unserved_components"}
    assert set(out["settings"]) >= {
        "min_surround",
        "min_population",
        "contiguity",
        "transparent_area_ids",
        "mc_draws",
    }
    # Keys of the output contract in /work/shared/DESIGN.md and the enclave brief.
    contract = {
        "id", "area_ids", "population", "surround_share", "boundary_m", "served_boundary_m",
        "edge_boundary_m", "group_shares", "ring_area_ids", "ring_population",
        "ring_group_shares", "share_difference", "share_ratio", "income_tiers", "p_value",
        "mc_draws",
    }  # fmt: skip
    assert contract <= set(out["enclaves"][0])
    assert out["enclaves"][0]["income_tiers"] == {"middle": 4}
    assert "income_tiers" not in contrast_grid(0.8).run().to_dict()["enclaves"][0]


# --------------------------------------------------------------------------- footprint holes


def test_donut_hole_inside_one_area_is_areal_weighted_exactly():
    grid = Grid(3, 3)
    black = np.full(9, 50.0)
    grid.population[grid.pos(1, 1)] = 4000.0
    grid.white[grid.pos(1, 1)] = 1000.0
    black[grid.pos(1, 1)] = 2000.0
    donut = shapely.box(0, 0, 3, 3).difference(shapely.box(1.25, 1.25, 1.75, 1.75))
    holes = footprint_holes(
        donut, grid.geoms, grid.ids, grid.population, {"white": grid.white, "black": black}
    )
    assert len(holes) == 1
    h = holes[0]
    # Computed by hand: the hole is a quarter of the centre cell.
    assert h.id == "H1" and h.area_ids == (grid.id(1, 1),)
    assert h.area_fractions == pytest.approx((0.25,), abs=EXACT)
    assert h.population == pytest.approx(1000.0, abs=1e-9)
    assert h.group_counts == pytest.approx({"white": 250.0, "black": 500.0})
    assert h.group_shares == pytest.approx({"white": 0.25, "black": 0.5})
    assert h.hole_area_m2 == pytest.approx(0.25, abs=EXACT)
    assert h.representative_point == pytest.approx((1.5, 1.5), abs=0.25)
    json.dumps(h.to_dict(), allow_nan=False)


def test_hole_across_two_areas_and_ranking():
    grid = Grid(4, 3)
    grid.population[grid.pos(3, 1)] = 8000.0
    grid.white[grid.pos(3, 1)] = 4000.0
    small = shapely.box(0.5, 1.25, 1.5, 1.75)  # a quarter of (0,1) and of (1,1)
    large = shapely.box(3.25, 1.25, 3.75, 1.75)  # a quarter of (3,1)
    footprint = shapely.box(0, 0, 4, 3).difference(small).difference(large)
    holes = footprint_holes(footprint, grid.geoms, grid.ids, grid.population, {"white": grid.white})
    # Computed by hand: 8000/4 = 2000 against 1000/4 + 1000/4 = 500.
    assert [h.population for h in holes] == pytest.approx([2000.0, 500.0])
    assert holes[0].area_ids == (grid.id(3, 1),)
    assert holes[1].area_ids == (grid.id(0, 1), grid.id(1, 1))
    assert holes[1].area_fractions == pytest.approx((0.25, 0.25), abs=EXACT)
    assert [h.id for h in holes] == ["H1", "H2"]


def test_gap_enclosed_by_touching_service_polygons_is_a_hole():
    grid = Grid(3, 3)
    # Two C-shapes that meet along x = 1.5 and enclose the square (1, 1)-(2, 2).
    left = shapely.box(0, 0, 1.5, 3).difference(shapely.box(1, 1, 1.5, 2))
    right = shapely.box(1.5, 0, 3, 3).difference(shapely.box(1.5, 1, 2, 2))
    for footprint in (shapely.union_all([left, right]), shapely.GeometryCollection([left, right])):
        holes = footprint_holes(
            footprint, grid.geoms, grid.ids, grid.population, {"white": grid.white}
        )
        assert [h.area_ids for h in holes] == [(grid.id(1, 1),)]
        assert holes[0].population == pytest.approx(1000.0, abs=1e-9)


def test_served_island_inside_a_hole_is_not_counted():
    grid = Grid(3, 3)
    footprint = shapely.union_all(
        [
            shapely.box(0, 0, 3, 3).difference(shapely.box(1, 1, 2, 2)),
            shapely.box(1.25, 1.25, 1.75, 1.75),
        ]
    )
    (hole,) = footprint_holes(
        footprint, grid.geoms, grid.ids, grid.population, {"white": grid.white}
    )
    # Computed by hand: the 1 x 1 hole minus the 0.5 x 0.5 island = 0.75 of the cell.
    assert hole.hole_area_m2 == pytest.approx(0.75, abs=EXACT)
    assert hole.population == pytest.approx(750.0, abs=1e-9)


def test_holes_clipped_to_study_area_and_unpopulated_dropped():
    grid = Grid(3, 3)
    grid.population[grid.pos(0, 1)] = 0.0
    grid.white[grid.pos(0, 1)] = 0.0
    # One hole in the unpopulated cell (0, 1), one in the centre cell.
    footprint = (
        shapely.box(0, 0, 3, 3)
        .difference(shapely.box(0.25, 1.25, 0.75, 1.75))
        .difference(shapely.box(1.25, 1.25, 1.75, 1.75))
    )
    holes = footprint_holes(footprint, grid.geoms, grid.ids, grid.population, {"white": grid.white})
    assert [h.area_ids for h in holes] == [(grid.id(1, 1),)]
    clipped = footprint_holes(
        footprint,
        grid.geoms,
        grid.ids,
        grid.population,
        {"white": grid.white},
        study_area=shapely.box(0, 0, 1.5, 3),
    )
    # Computed by hand: half of the centre hole (0.25 x 0.5) lies in the study area.
    assert clipped[0].hole_area_m2 == pytest.approx(0.125, abs=EXACT)
    assert clipped[0].population == pytest.approx(125.0, abs=1e-9)
    outside = footprint_holes(
        footprint,
        grid.geoms,
        grid.ids,
        grid.population,
        {"white": grid.white},
        study_area=shapely.box(2, 0, 3, 3),
    )
    assert outside == ()


def test_footprint_without_holes_and_empty_footprint():
    grid = Grid(2, 2)
    counts = {"white": grid.white}
    assert (
        footprint_holes(shapely.box(0, 0, 2, 2), grid.geoms, grid.ids, grid.population, counts)
        == ()
    )
    assert footprint_holes(shapely.Polygon(), grid.geoms, grid.ids, grid.population, counts) == ()


def test_holes_carried_in_the_result():
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    donut = shapely.box(0, 0, 3, 3).difference(shapely.box(1.25, 1.25, 1.75, 1.75))
    holes = footprint_holes(donut, grid.geoms, grid.ids, grid.population, {"white": grid.white})
    result = grid.run(holes=holes)
    assert [h["id"] for h in result.to_dict()["holes"]] == ["H1"]
    assert [h["id"] for h in grid.run().with_holes(holes).to_dict()["holes"]] == ["H1"]


# --------------------------------------------------------------------------- real tracts


@pytest.fixture(scope="module")
def albuquerque():
    """Albuquerque 2000 tracts (libpysal bundled "10740"), projected to a local LAEA."""
    frame = gpd.read_file(examples.get_path("10740.shp"))
    # The shapefile has no .prj; its coordinates are NAD83 longitude/latitude.
    frame = frame.set_crs(4269).to_crs(
        "+proj=laea +lat_0=35.12 +lon_0=-106.47 +ellps=GRS80 +units=m +no_defs"
    )
    geoms = frame.geometry.to_numpy()
    ids = frame["STFID"].astype(str).to_numpy()
    with pytest.warns(IslandWarning):  # one tract has no queen neighbour
        graph = build_area_graph(geoms, ids)
    return geoms, ids, graph


def test_albuquerque_pocket_is_found_and_nothing_else(albuquerque):
    geoms, ids, graph = albuquerque
    rng = np.random.default_rng(SEED)
    population = rng.integers(1000, 6000, ids.size).astype(float)
    white = np.floor(population * rng.uniform(0.3, 0.9, ids.size))
    centre = shapely.centroid(shapely.union_all(geoms))
    distance = shapely.distance(shapely.point_on_surface(geoms), centre)
    served = distance < 12_000.0
    pocket = np.flatnonzero(np.isin(ids, ["35001000107", "35001000108", "35001000112"]))
    assert served[pocket].all()  # the pocket lies inside the served disc
    served[pocket] = False
    result = find_enclaves(
        geoms, ids, served, population, {"white": white}, graph,
        reference_group="white", mc_draws=0,
    )  # fmt: skip
    assert area_sets(result) == [set(ids[pocket])]
    e = result.enclaves[0]
    # Independent GEOS computation: the union of the pocket's tracts and the part of its
    # boundary lying on the served tracts' union.
    union = shapely.union_all(geoms[pocket])
    served_union = shapely.union_all(geoms[served])
    assert e.boundary_m == pytest.approx(union.boundary.length, rel=1e-9)
    oracle_share = shapely.intersection(union.boundary, served_union).length / union.boundary.length
    assert e.surround_share == pytest.approx(oracle_share, abs=1e-9)
    assert e.surround_share == pytest.approx(1.0, abs=1e-9)
    assert e.population == pytest.approx(population[pocket].sum(), abs=1e-6)
    # The footprint of the served tracts has one hole, exactly the pocket.
    holes = footprint_holes(served_union, geoms, ids, population, {"white": white})
    assert [set(h.area_ids) for h in holes] == [set(ids[pocket])]
    assert holes[0].population == pytest.approx(population[pocket].sum(), rel=1e-9)


# --------------------------------------------------------------------------- error paths


@pytest.fixture()
def small():
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    return grid


def call(grid: Grid, **changes):
    args = {
        "geometries": grid.geoms,
        "ids": grid.ids,
        "served": grid.served,
        "population": grid.population,
        "counts": {"white": grid.white},
        "graph": grid.graph,
        "reference_group": "white",
        "mc_draws": 0,
    }
    args.update(changes)
    return find_enclaves(**args)


@pytest.mark.parametrize(
    ("changes", "error", "pattern"),
    [
        ({"ids": ["a"] * 9}, AnalysisError, 'area id "a" appears more than once'),
        ({"ids": ["a", "b"]}, AnalysisError, "2 ids were given for 9 geometries"),
        ({"geometries": np.array([None] * 9, dtype=object)}, AnalysisError, r"geometries\[0\]"),
        ({"graph": "queen"}, AnalysisError, "graph was a str; build it with"),
        ({"served": np.ones(9, dtype=int)}, AnalysisError, "served must be booleans"),
        ({"served": np.ones(4, dtype=bool)}, AnalysisError, "served has 4 values for 9 areas"),
        ({"population": np.full(9, np.nan)}, AnalysisError, "population has 9 missing"),
        (
            {"population": np.full(9, -1.0)},
            AnalysisError,
            "population has 9 missing, infinite or negative",
        ),
        ({"population": ["x"] * 9}, AnalysisError, "population must be numbers"),
        ({"counts": {}}, SpecError, "counts must be a mapping"),
        ({"counts": {"white": np.ones(3)}}, AnalysisError, r"counts\['white'\] has 3 values"),
        ({"reference_group": "asian"}, SpecError, r'reference_group was "asian".*\[\'white\'\]'),
        (
            {"counts": {"white": np.full(9, 2000.0)}},
            AnalysisError,
            r"counts\['white'\] exceeds population in 9 area\(s\), e.g. area T0000",
        ),
        ({"income_tier": ["low"]}, AnalysisError, "income_tier has 1 values for 9 areas"),
        ({"min_surround": 1.5}, SpecError, "min_surround was 1.5 but must be a fraction"),
        ({"min_surround": float("nan")}, SpecError, "min_surround was nan"),
        ({"min_population": -1}, SpecError, "min_population was -1"),
        ({"mc_draws": -1}, SpecError, "mc_draws was -1 but must be a whole number >= 0"),
        ({"mc_draws": 9.5}, SpecError, "mc_draws was 9.5"),
        ({"mc_draws": True}, SpecError, "mc_draws was True"),
        ({"mc_draws": 9, "rng": 42}, SpecError, "rng must be a numpy.random.Generator.*got int"),
        ({"transparent": np.zeros(2, dtype=bool)}, AnalysisError, "transparent has 2 values"),
    ],
)
def test_find_enclaves_errors(small, changes, error, pattern):
    with pytest.raises(error, match=pattern):
        call(small, **changes)


def test_graph_for_other_areas_is_refused(small):
    other = Grid(3, 3, kind="rook")
    other_graph = build_area_graph(other.geoms, [f"X{k}" for k in range(9)])
    with pytest.raises(AnalysisError, match="graph was built for 9 areas that are not the 9 areas"):
        call(small, graph=other_graph)


@pytest.mark.parametrize(
    ("footprint", "changes", "pattern"),
    [
        ("box", {}, "footprint was a str; pass the dissolved footprint"),
        (shapely.LineString([(0, 0), (1, 1)]), {}, "footprint is a LineString without polygons"),
        (shapely.box(0, 0, 1, 1), {"study_area": "all"}, "study_area was a str"),
        (
            shapely.box(0, 0, 1, 1),
            {"population": np.ones(2)},
            "population has 2 values for 9 areas",
        ),
        (shapely.box(0, 0, 1, 1), {"ids": ["a"]}, "1 ids were given for 9 geometries"),
    ],
)
def test_footprint_holes_errors(small, footprint, changes, pattern):
    args = {
        "geometries": small.geoms,
        "ids": small.ids,
        "population": small.population,
        "counts": {"white": small.white},
    }
    study_area = changes.pop("study_area", None)
    args.update(changes)
    with pytest.raises(AnalysisError, match=pattern):
        footprint_holes(footprint, study_area=study_area, **args)


def test_no_global_warning_filters_left_behind():
    # The module must not silence warnings for the caller (house rule).
    before = list(warnings.filters)
    grid = Grid(3, 3)
    grid.unserve((1, 1))
    grid.run(mc_draws=9, rng=np.random.default_rng(SEED))
    assert warnings.filters == before


def test_cached_shared_lengths_give_identical_results():
    # The sensitivity sweeps measure every shared edge once (AreaGraph.shared_lengths) and
    # reuse it; the enclaves must be exactly those found by measuring afresh.
    import shapely as _shapely

    from coverage_audit.weights import build_area_graph as _build

    cells = [_shapely.box(i, j, i + 1, j + 1) for j in range(6) for i in range(6)]
    ids = [f"c{k:02d}" for k in range(36)]
    served = np.ones(36, dtype=bool)
    served[[14, 15, 20, 21, 0, 1]] = False  # an interior pocket and an edge pocket
    population = np.full(36, 100.0)
    counts = {"white": np.full(36, 60.0), "minority": np.full(36, 40.0)}
    fresh = find_enclaves(
        np.array(cells, dtype=object),
        ids,
        served,
        population,
        counts,
        _build(np.array(cells, dtype=object), ids),
        reference_group="white",
        mc_draws=0,
    )
    graph = _build(np.array(cells, dtype=object), ids)
    graph.shared_lengths()
    cached = find_enclaves(
        np.array(cells, dtype=object),
        ids,
        served,
        population,
        counts,
        graph,
        reference_group="white",
        mc_draws=0,
    )
    assert cached.to_dict() == fresh.to_dict()
    assert [e.area_ids for e in cached.enclaves] == [("c14", "c15", "c20", "c21")]


def _unit_grid(n):
    import shapely as _shapely

    cells = np.array(
        [_shapely.box(i, j, i + 1, j + 1) for j in range(n) for i in range(n)], dtype=object
    )
    ids = [f"g{k:03d}" for k in range(n * n)]
    return cells, ids


def test_background_around_served_islands_is_not_an_enclave():
    # 9 x 9 unit cells, served only at the 16 cells with both coordinates odd. Counting the
    # islands' perimeters (64 served edges) against the region's outline (36 edge units)
    # would give 64/100 = 0.64; the background's outer boundary is the outline alone, all
    # on the study-area edge: surround share 0 (computed by hand).
    from coverage_audit.weights import build_area_graph as _build

    cells, ids = _unit_grid(9)
    served = np.array([(k % 9) % 2 == 1 and (k // 9) % 2 == 1 for k in range(81)])
    counts = {"white": np.full(81, 60.0), "minority": np.full(81, 40.0)}
    graph = _build(cells, ids, kind="rook")
    result = find_enclaves(
        cells,
        ids,
        served,
        np.full(81, 100.0),
        counts,
        graph,
        min_surround=0.6,
        reference_group="white",
        mc_draws=0,
    )
    assert result.enclaves == ()


def test_donut_pocket_is_measured_on_its_exterior():
    # 7 x 7 unit cells served except the 8 cells around the centre; the centre itself is
    # served (an island inside the pocket). Exterior: a 3 x 3 square, 12 unit edges, all
    # served; the centre's 4 edges are a hole's boundary and count neither way (by hand).
    from coverage_audit.weights import build_area_graph as _build

    cells, ids = _unit_grid(7)
    ring = [k for k in range(49) if max(abs(k % 7 - 3), abs(k // 7 - 3)) == 1]
    served = np.ones(49, dtype=bool)
    served[ring] = False
    counts = {"white": np.full(49, 60.0), "minority": np.full(49, 40.0)}
    result = find_enclaves(
        cells,
        ids,
        served,
        np.full(49, 100.0),
        counts,
        _build(cells, ids),
        reference_group="white",
        mc_draws=0,
    )
    (e,) = result.enclaves
    assert sorted(e.area_ids) == sorted(ids[k] for k in ring)
    assert e.boundary_m == pytest.approx(12.0, abs=1e-9)
    assert e.served_boundary_m == pytest.approx(12.0, abs=1e-9)
    assert e.surround_share == pytest.approx(1.0)


# --------------------------------------------------------------------------- issue 9 item 2


def _ring_around_excluded_core():
    """7 x 7 grid of 1 km cells without the centre 3 x 3; the 16 cells around it unserved."""
    cells, ids, served = [], [], []
    for r in range(7):
        for c in range(7):
            if 2 <= r <= 4 and 2 <= c <= 4:
                continue  # left out of the analysis (absent from the demographics)
            cells.append(shapely.box(c * 1000.0, r * 1000.0, (c + 1) * 1000.0, (r + 1) * 1000.0))
            ids.append(f"g{r}{c}")
            served.append(not (1 <= r <= 5 and 1 <= c <= 5))
    return np.array(cells), np.array(ids, dtype=object), np.array(served)


def test_ring_around_excluded_areas_is_an_enclave_at_every_threshold_up_to_one():
    # By hand: the ring's exterior is the 5 x 5 km square, 20 km, all of it along served
    # cells, so the surround share is 1.0; its 12 km inner edge faces the excluded centre
    # and counts neither way. So the ring is an enclave at every threshold up to 1.0
    # (monotone), in particular at the default 0.75 and at 0.62 / 0.63, where it used to
    # appear and vanish.
    geoms, ids, served = _ring_around_excluded_core()
    graph = build_area_graph(geoms, ids)
    population = np.full(ids.size, 1000.0)
    white = np.full(ids.size, 600.0)
    ring = set(ids[~served].tolist())
    assert len(ring) == 16
    for threshold in (0.5, 0.62, 0.63, 0.75, 0.9, 1.0):
        result = find_enclaves(
            geoms, ids, served, population, {"white": white}, graph,
            min_surround=threshold, reference_group="white", mc_draws=0,
        )  # fmt: skip
        assert area_sets(result) == [ring], threshold
        e = result.enclaves[0]
        assert e.surround_share == pytest.approx(1.0, abs=1e-12)
        assert e.boundary_m == pytest.approx(20_000.0, abs=1e-6)
        assert e.served_boundary_m == pytest.approx(20_000.0, abs=1e-6)
        assert e.edge_boundary_m == pytest.approx(0.0, abs=1e-6)


def test_ring_on_the_region_edge_is_not_enclosed():
    # Same grid, but the served cells of the left column removed from the analysis: the
    # ring's left side (5 km of its 20 km exterior) now lies on the region's outer edge,
    # so by hand the share is 15 / 20 = 0.75 exactly: an enclave at 0.75, not at 0.76.
    geoms, ids, served = _ring_around_excluded_core()
    keep = np.array([not i.endswith("0") for i in ids])  # column 0 left out
    geoms, ids, served = geoms[keep], ids[keep], served[keep]
    graph = build_area_graph(geoms, ids)
    population = np.full(ids.size, 1000.0)
    white = np.full(ids.size, 600.0)
    # Column 0 gone: the ring's left cells (column 1) are on the outer edge.
    found = find_enclaves(
        geoms, ids, served, population, {"white": white}, graph,
        min_surround=0.75, reference_group="white", mc_draws=0,
    )  # fmt: skip
    assert len(found.enclaves) == 1
    assert found.enclaves[0].surround_share == pytest.approx(0.75, abs=1e-12)
    assert found.enclaves[0].edge_boundary_m == pytest.approx(5_000.0, abs=1e-6)
    missed = find_enclaves(
        geoms, ids, served, population, {"white": white}, graph,
        min_surround=0.76, reference_group="white", mc_draws=0,
    )  # fmt: skip
    assert missed.enclaves == ()
