"""Tests of coverage_audit.clustering against published values, esda and exact enumeration."""

from __future__ import annotations

import contextlib
import itertools
import json
import math
import warnings

import esda
import geopandas as gpd
import libpysal
import numpy as np
import pytest
import scipy.sparse as sp
import shapely
from libpysal.examples import get_path
from libpysal.graph import Graph
from scipy import stats
from statsmodels.stats.multitest import multipletests

from coverage_audit.clustering import (
    CLUSTER_LABELS,
    benjamini_hochberg,
    bivariate_moran,
    clustering_summary,
    join_counts,
    lisa_crosstab,
    local_moran,
    moran,
)
from coverage_audit.errors import (
    AnalysisError,
    DegenerateStatisticWarning,
    IslandWarning,
    SpecError,
)
from coverage_audit.stats import _spatial as clustering_module
from coverage_audit.synthetic import demographics, tessellation
from coverage_audit.weights import build_area_graph

SEED = 20240611

#: Analytic statistics must agree with the oracle to rounding.
RTOL_EXACT = 1e-10
#: Published check values are given to 9-10 significant digits.
RTOL_PUBLISHED = 1e-7
#: Permutations of the tests that compare pseudo p-values with an oracle.
MANY = 9999
#: esda's Join_Counts runs a pandas crosstab and a chi-square per permutation (~2.5 ms
#: each), so its oracle gets fewer.
FEW = 999


def p_tolerance(p: float, *permutations: int) -> float:
    """Bound on the gap between two independent pseudo p-value estimates of one p.

    Each estimate has binomial Monte Carlo variance p(1-p)/P; 4.5 sd of the difference
    is exceeded with probability ~7e-6 per comparison. The floor on p(1-p) keeps the bound
    meaningful when both estimates sit at the 1/(P+1) floor.
    """
    return 4.5 * math.sqrt(max(p * (1 - p), 1e-4) * sum(1.0 / k for k in permutations))


def rng(offset: int = 0) -> np.random.Generator:
    return np.random.default_rng(SEED + offset)


@contextlib.contextmanager
def legacy_numpy_seed(seed: int):
    """Seed numpy's legacy global generator for an esda call, then put its state back.

    esda's Moran, Moran_BV and Join_Counts draw from ``np.random`` directly; seeding it
    here makes the oracle reproducible without leaking state into other tests.
    """
    state = np.random.get_state()
    np.random.seed(seed)
    try:
        yield
    finally:
        np.random.set_state(state)


def lattice(rows: int, cols: int) -> np.ndarray:
    jj, ii = np.meshgrid(np.arange(cols), np.arange(rows))
    x, y = jj.ravel().astype(float), ii.ravel().astype(float)
    return shapely.box(x, y, x + 1.0, y + 1.0)


def lattice_graph(rows: int, cols: int, kind: str = "rook"):
    return build_area_graph(
        lattice(rows, cols), [f"L{k:03d}" for k in range(rows * cols)], kind=kind
    )


@pytest.fixture(scope="module")
def columbus():
    frame = gpd.read_file(get_path("columbus.shp"))
    graphs = {
        kind: build_area_graph(frame.geometry.array, frame["POLYID"].astype(str), kind=kind)
        for kind in ("queen", "rook")
    }
    return frame, graphs


def gal_weights(name: str) -> sp.csr_matrix:
    return libpysal.io.open(get_path(name)).read().sparse


def no_nan_json(data) -> str:
    return json.dumps(data, allow_nan=False)


# --------------------------------------------------------------------------- global Moran


def test_columbus_crime_queen_published_values(columbus):
    frame, graphs = columbus
    result = moran(frame["CRIME"].to_numpy(), graphs["queen"], permutations=0, variable="CRIME")
    # REFERENCES.md: Columbus CRIME, queen, row-standardised (Anselin 1988 data; values as
    # esda's test suite and GeoDa report them).
    assert result.I == pytest.approx(0.500188557, rel=RTOL_PUBLISHED)
    assert result.EI == pytest.approx(-1.0 / 48, rel=1e-15)
    assert result.VI_rand == pytest.approx(0.008689289, rel=RTOL_PUBLISHED)
    # z is published to 4 decimals only.
    assert result.z_rand == pytest.approx(5.5894, abs=5e-5)
    assert result.to_dict()["variable"] == "CRIME"


def test_columbus_crime_queen_against_esda(columbus):
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    ours = moran(y, graphs["queen"], permutations=0)
    oracle = esda.Moran(
        y, Graph.from_sparse(graphs["queen"].stats_adjacency), permutations=0, two_tailed=False
    )
    for mine, theirs in (
        (ours.I, oracle.I),
        (ours.VI_rand, oracle.VI_rand),
        (ours.z_rand, oracle.z_rand),
        (ours.p_rand, oracle.p_rand),
        (ours.VI_norm, oracle.VI_norm),
        (ours.z_norm, oracle.z_norm),
        (ours.p_norm, oracle.p_norm),
    ):
        assert mine == pytest.approx(theirs, rel=RTOL_EXACT)


def test_columbus_crime_rook_published_value(columbus):
    frame, graphs = columbus
    result = moran(frame["CRIME"].to_numpy(), graphs["rook"], permutations=0)
    # REFERENCES.md: Columbus CRIME, rook contiguity, row-standardised.
    assert result.I == pytest.approx(0.5236702128, rel=RTOL_PUBLISHED)


def test_st_louis_homicide_rate_with_bundled_gal():
    weights = gal_weights("stl_hom_rook.gal")
    table = libpysal.io.open(get_path("stl_hom.txt"))
    y = np.asarray(table.by_col["HR8893"], dtype=float)
    result = moran(y, weights, permutations=0)
    # REFERENCES.md: St. Louis HR8893, stl_hom_rook.gal, n = 78.
    assert result.n == 78
    assert result.I == pytest.approx(0.24365582621771659, rel=RTOL_PUBLISHED)
    assert result.EI == pytest.approx(-1.0 / 77, rel=1e-15)
    # REFERENCES.md: one-tailed normal p = 0.000135739 (normality assumption).
    assert result.p_norm == pytest.approx(0.000135739, rel=1e-5)


def test_sids_rate_with_bundled_gal():
    weights = gal_weights("sids2.gal")
    table = libpysal.io.open(get_path("sids2.dbf"))
    # The .gal lists counties in the .dbf order (checked, so the published value applies).
    assert [str(v) for v in table.by_col("FIPS")] == libpysal.io.open(
        get_path("sids2.gal")
    ).read().id_order
    y = np.asarray(table.by_col("SIDR74"), dtype=float)
    result = moran(y, weights, permutations=0)
    # REFERENCES.md: North Carolina SIDS, SIDR74, sids2.gal.
    assert result.I == pytest.approx(0.2477251932, rel=RTOL_PUBLISHED)


def test_libpysal_graph_input_gives_the_same_values():
    weights = gal_weights("stl_hom_rook.gal")
    table = libpysal.io.open(get_path("stl_hom.txt"))
    y = np.asarray(table.by_col["HR8893"], dtype=float)
    from_matrix = moran(y, weights, permutations=0)
    from_graph = moran(y, Graph.from_sparse(weights), permutations=0)
    assert from_graph.I == from_matrix.I
    assert from_graph.VI_rand == from_matrix.VI_rand


def test_checkerboard_is_perfect_negative_autocorrelation():
    graph = lattice_graph(6, 6, "rook")
    ii, jj = np.divmod(np.arange(36), 6)
    # REFERENCES.md: a perfectly alternating checkerboard under rook contiguity has I = -1.
    result = moran(((ii + jj) % 2).astype(float), graph, permutations=99, rng=rng())
    assert result.I == pytest.approx(-1.0, abs=1e-12)
    assert result.p_sim == pytest.approx(1.0 / 100, abs=1e-15)


def test_permutation_null_matches_the_randomisation_moments(columbus):
    frame, graphs = columbus
    result = moran(frame["CRIME"].to_numpy(), graphs["queen"], permutations=MANY, rng=rng())
    # Cliff and Ord (1981): under randomisation E[I] = -1/(n-1) and Var[I] = VI_rand; the
    # mean of 9999 draws is within 5 standard errors of E[I], and the sample variance
    # within 10% of VI_rand (its relative sd here is ~1.5%).
    se_mean = math.sqrt(result.VI_rand / MANY)
    assert abs(result.EI_sim - result.EI) < 5 * se_mean
    assert result.sim.var() == pytest.approx(result.VI_rand, rel=0.10)
    assert result.p_sim == pytest.approx(1.0 / (MANY + 1), abs=1e-15)


def test_moran_pseudo_p_agrees_with_esda(columbus):
    frame, graphs = columbus
    # A weakly autocorrelated variable keeps the p-value away from its floor.
    y = frame["DISCBD"].to_numpy() + rng(1).normal(0, 3.0, len(frame))
    ours = moran(y, graphs["queen"], permutations=MANY, rng=rng(2))
    with legacy_numpy_seed(SEED):
        oracle = esda.Moran(
            y, Graph.from_sparse(graphs["queen"].stats_adjacency), permutations=MANY
        )
    assert ours.I == pytest.approx(oracle.I, rel=RTOL_EXACT)
    assert abs(ours.p_sim - oracle.p_sim) < p_tolerance(ours.p_sim, MANY, MANY)
    assert 0.001 < ours.p_sim < 0.999


def test_moran_folded_p_counts_the_side_of_the_observed_value():
    sim = np.array([0.1, 0.2, 0.3, 0.4])
    # Upper side: one draw >= 0.35 -> (1 + 1) / 5; lower side: three draws <= 0.3.
    assert clustering_module._folded_p(sim, 0.35) == pytest.approx(2 / 5)
    assert clustering_module._folded_p(sim, 0.15) == pytest.approx(2 / 5)
    # Ties count in both tails.
    assert clustering_module._folded_p(sim, 0.3) == pytest.approx(3 / 5)


def test_moran_same_seed_same_result_and_different_seed_different_draws(columbus):
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    first = moran(y, graphs["queen"], permutations=199, rng=rng(5))
    second = moran(y, graphs["queen"], permutations=199, rng=rng(5))
    other = moran(y, graphs["queen"], permutations=199, rng=rng(6))
    assert np.array_equal(first.sim, second.sim)
    assert first.to_dict() == second.to_dict()
    assert not np.array_equal(first.sim, other.sim)


def test_moran_blocks_give_the_same_draws_as_one_block(columbus, monkeypatch):
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    whole = moran(y, graphs["queen"], permutations=50, rng=rng(7))
    monkeypatch.setattr(clustering_module, "_BLOCK_ENTRIES", 49 * 3)
    blocked = moran(y, graphs["queen"], permutations=50, rng=rng(7))
    assert np.allclose(whole.sim, blocked.sim, rtol=1e-13, atol=0)


def test_moran_to_dict_contract(columbus):
    frame, graphs = columbus
    data = moran(
        frame["CRIME"].to_numpy(),
        graphs["queen"],
        permutations=9,
        rng=rng(),
        variable="covered_fraction",
    ).to_dict()
    for key in (
        "variable",
        "I",
        "expected",
        "variance_rand",
        "z_rand",
        "p_rand",
        "z_sim",
        "p_sim",
        "permutations",
        "n",
    ):
        assert key in data
    assert data["permutations"] == 9 and data["n"] == 49
    no_nan_json(data)


def test_moran_areagraph_ignores_values_outside_the_statistics():
    geoms = np.concatenate([lattice(3, 3), [shapely.box(10, 10, 11, 11)]])
    with pytest.warns(IslandWarning):
        graph = build_area_graph(geoms, [f"A{k}" for k in range(10)], kind="rook")
    y = np.array([1.0, 2, 3, 2, 5, 1, 0, 4, 2, np.nan])
    with_island = moran(y, graph, permutations=0)
    alone = moran(y[:9], lattice_graph(3, 3), permutations=0)
    assert with_island.n == 9
    assert with_island.I == alone.I


# --------------------------------------------------------------------------- join counts


def test_join_counts_published_lattice():
    graph = lattice_graph(4, 4, "rook")
    served = np.r_[np.zeros(8), np.ones(8)].astype(bool)
    result = join_counts(served, graph, permutations=0)
    # REFERENCES.md (and esda's Join_Counts docstring): 4 x 4 rook lattice, eight 0s then
    # eight 1s: BB = 10, BW = 4, WW = 10, J = 24 (served = 1 = "black").
    assert result.served_served == 10
    assert result.served_unserved == 4
    assert result.unserved_unserved == 10
    assert result.joins == 24


def exact_join_moments(binary: np.ndarray, n1: int) -> dict[str, tuple[float, float]]:
    """Mean and variance of BB, WW, BW over every placement of n1 served areas."""
    n = binary.shape[0]
    values = []
    for chosen in itertools.combinations(range(n), n1):
        y = np.zeros(n)
        y[list(chosen)] = 1.0
        bb = 0.5 * y @ binary @ y
        ww = 0.5 * (1 - y) @ binary @ (1 - y)
        values.append((bb, ww, 0.5 * binary.sum() - bb - ww))
    arr = np.array(values)
    return {
        "served_served": (arr[:, 0].mean(), arr[:, 0].var()),
        "unserved_unserved": (arr[:, 1].mean(), arr[:, 1].var()),
        "served_unserved": (arr[:, 2].mean(), arr[:, 2].var()),
    }


@pytest.mark.parametrize(
    ("rows", "cols", "kind", "n1"),
    [(4, 4, "rook", 8), (4, 4, "queen", 5), (3, 4, "rook", 3), (3, 3, "queen", 7)],
)
def test_join_count_moments_equal_exhaustive_enumeration(rows, cols, kind, n1):
    # Non-free sampling moments (Cliff and Ord 1981) checked against the exact mean and
    # variance over all C(n, n1) placements, enumerated here.
    graph = lattice_graph(rows, cols, kind)
    served = np.zeros(rows * cols, dtype=bool)
    served[:n1] = True
    result = join_counts(served, graph, permutations=0)
    exact = exact_join_moments(graph.adjacency.toarray(), n1)
    for name, (mean, var) in exact.items():
        assert getattr(result, f"expected_{name}") == pytest.approx(mean, rel=1e-12)
        assert getattr(result, f"variance_{name}") == pytest.approx(var, rel=1e-10)


def test_join_counts_against_esda(columbus):
    frame, graphs = columbus
    served = frame["CRIME"].to_numpy() > np.median(frame["CRIME"])
    weights = Graph.from_sparse(graphs["queen"].stats_adjacency)
    ours = join_counts(served, graphs["queen"], permutations=MANY, rng=rng(3))
    with legacy_numpy_seed(SEED):
        oracle = esda.Join_Counts(served.astype(float), weights, permutations=FEW)
    with legacy_numpy_seed(SEED + 1):
        flipped = esda.Join_Counts((~served).astype(float), weights, permutations=FEW)
    assert ours.served_served == oracle.bb
    assert ours.unserved_unserved == oracle.ww
    assert ours.served_unserved == oracle.bw
    assert ours.joins == oracle.J
    p = ours.p_sim_served_served
    assert abs(p - oracle.p_sim_bb) < p_tolerance(p, MANY, FEW)
    # esda's "black" is 1, so flipping the flags makes its bb our unserved-unserved.
    assert flipped.bb == ours.unserved_unserved
    p = ours.p_sim_unserved_unserved
    assert 0.01 < p < 0.99  # a comparison away from the floor
    assert abs(p - flipped.p_sim_bb) < p_tolerance(p, MANY, FEW)
    # Our BW tail is the lower one; compute it from esda's simulated BW counts.
    lower = (np.sum(oracle.sim_bw.astype(float) <= oracle.bw) + 1.0) / (FEW + 1.0)
    p = ours.p_sim_served_unserved
    assert abs(p - lower) < p_tolerance(p, MANY, FEW)
    # The permutation mean estimates the analytic expectation (5 standard errors).
    se = math.sqrt(ours.variance_unserved_unserved / MANY)
    assert abs(ours.sim_unserved_unserved.mean() - ours.expected_unserved_unserved) < 5 * se


def test_join_counts_unserved_cluster_is_detected():
    # A 6 x 6 rook lattice with the unserved areas packed in one corner block.
    graph = lattice_graph(6, 6, "rook")
    ii, jj = np.divmod(np.arange(36), 6)
    served = ~((ii < 3) & (jj < 3))
    result = join_counts(served, graph, permutations=999, rng=rng())
    # 3 x 3 block of unserved areas: 12 internal rook joins (by hand).
    assert result.unserved_unserved == 12
    assert result.p_sim_unserved_unserved < 0.01
    assert result.z_unserved_unserved > 3
    data = result.to_dict()
    for key in (
        "served_served",
        "unserved_unserved",
        "served_unserved",
        "joins",
        "expected_served_served",
        "expected_unserved_unserved",
        "expected_served_unserved",
        "p_sim_unserved_unserved",
    ):
        assert key in data
    no_nan_json(data)


def test_join_counts_are_reproducible():
    graph = lattice_graph(5, 5)
    served = rng(9).random(25) < 0.4
    first = join_counts(served, graph, permutations=99, rng=rng(4))
    second = join_counts(served, graph, permutations=99, rng=rng(4))
    assert np.array_equal(first.sim_unserved_unserved, second.sim_unserved_unserved)
    assert first.to_dict() == second.to_dict()


@pytest.mark.parametrize("value", [False, True])
def test_join_counts_with_no_or_every_area_served(value):
    graph = lattice_graph(3, 3)
    with pytest.warns(DegenerateStatisticWarning, match="area is served"):
        result = join_counts(np.full(9, value), graph, permutations=99, rng=rng())
    data = result.to_dict()
    assert data["p_sim_unserved_unserved"] is None
    assert data["z_served_served"] is None
    assert data["joins"] == 12
    no_nan_json(data)


# --------------------------------------------------------------------------- bivariate


def test_bivariate_moran_against_esda(columbus):
    frame, graphs = columbus
    x, y = frame["INC"].to_numpy(), frame["CRIME"].to_numpy()
    ours = bivariate_moran(
        x, y, graphs["queen"], permutations=MANY, rng=rng(11), x_variable="INC", y_variable="CRIME"
    )
    with legacy_numpy_seed(SEED):
        oracle = esda.Moran_BV(
            x, y, Graph.from_sparse(graphs["queen"].stats_adjacency), permutations=MANY
        )
    assert ours.I == pytest.approx(oracle.I, rel=RTOL_EXACT)
    assert abs(ours.p_sim - oracle.p_sim) < p_tolerance(ours.p_sim, MANY, MANY)
    assert ours.to_dict()["x_variable"] == "INC"


def test_bivariate_moran_definition_by_hand():
    # Anselin, Syabri and Smirnov (2002): I_B = sum_i zx_i (W zy)_i / n, z with the
    # population sd; computed here with dense numpy.
    graph = lattice_graph(3, 4, "queen")
    x = rng(12).random(12)
    y = rng(13).random(12)
    dense = graph.adjacency.toarray()
    row = dense / dense.sum(axis=1, keepdims=True)
    zx, zy = (x - x.mean()) / x.std(), (y - y.mean()) / y.std()
    result = bivariate_moran(x, y, graph, permutations=0)
    assert result.I == pytest.approx(zx @ row @ zy / 12, rel=1e-13)
    assert result.to_dict()["p_sim"] is None


def test_bivariate_moran_with_a_permutation_null_mean_near_zero(columbus):
    frame, graphs = columbus
    result = bivariate_moran(
        frame["INC"], frame["HOVAL"], graphs["queen"], permutations=MANY, rng=rng(14)
    )
    # Permuting y alone makes E[I_B] = 0 (each zx_i meets a random zy); 5 standard errors.
    assert abs(result.EI_sim) < 5 * result.sim.std() / math.sqrt(MANY)


# --------------------------------------------------------------------------- local Moran


@pytest.mark.parametrize("kind", ["queen", "rook"])
def test_local_moran_statistic_and_quadrants_against_esda(columbus, kind):
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    ours = local_moran(y, graphs[kind], permutations=9, rng=rng(20))
    # permutations=0 keeps esda off its numba engine (whose compilation takes ~30 s).
    oracle = esda.Moran_Local(y, Graph.from_sparse(graphs[kind].stats_adjacency), permutations=0)
    assert np.allclose(ours.Ii, oracle.Is, rtol=RTOL_EXACT, atol=1e-13)
    assert np.array_equal(ours.quadrant, oracle.q)


def test_local_moran_statistic_against_esda_on_st_louis():
    weights = gal_weights("stl_hom_rook.gal")
    table = libpysal.io.open(get_path("stl_hom.txt"))
    y = np.asarray(table.by_col["HR8893"], dtype=float)
    ours = local_moran(y, weights, permutations=9, rng=rng(21))
    oracle = esda.Moran_Local(y, Graph.from_sparse(weights), permutations=0)
    assert np.allclose(ours.Ii, oracle.Is, rtol=RTOL_EXACT, atol=1e-13)
    assert np.array_equal(ours.quadrant, oracle.q)


@pytest.mark.slow
def test_local_moran_pseudo_p_against_esda(columbus):
    # Slow only because esda's conditional randomisation is numba code compiled on first
    # use (~30 s of CPU); the comparison itself takes a fraction of a second.
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    ours = local_moran(y, graphs["queen"], permutations=MANY, rng=rng(22))
    oracle = esda.Moran_Local(
        y, Graph.from_sparse(graphs["queen"].stats_adjacency), permutations=MANY, seed=SEED
    )
    bound = np.array([p_tolerance(p, MANY, MANY) for p in ours.p_sim])
    assert (np.abs(ours.p_sim - oracle.p_sim) < bound).all()


def textbook_conditional_p(y: np.ndarray, dense: np.ndarray, permutations: int, gen):
    """Anselin (1995) conditional permutation, area by area, with fresh draws for each.

    For area i, each permutation draws k_i of the other n - 1 values without replacement
    (the first k_i of a random ordering) and recomputes I_i; folded pseudo p as esda.
    """
    n = y.size
    z = (y - y.mean()) / y.std()
    p = np.empty(n)
    for i in range(n):
        others = np.delete(z, i)
        w = dense[i][dense[i] > 0]
        picks = np.argsort(gen.random((permutations, n - 1)), axis=1)[:, : w.size]
        sim = (n - 1) * z[i] * (others[picks] @ w) / (z @ z)
        obs = (n - 1) * z[i] * (dense[i] @ z) / (z @ z)
        larger = np.sum(sim >= obs)
        p[i] = (min(larger, permutations - larger) + 1) / (permutations + 1)
    return p


def test_local_moran_pseudo_p_against_independent_draws(columbus):
    # The shared draw matrix must give the same p-values, up to Monte Carlo error, as
    # independent conditional permutations for every area (the textbook procedure).
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    ours = local_moran(y, graphs["queen"], permutations=MANY, rng=rng(23))
    dense = graphs["queen"].adjacency.toarray()
    dense = dense / dense.sum(axis=1, keepdims=True)
    textbook = textbook_conditional_p(y, dense, MANY, rng(24))
    bound = np.array([p_tolerance(p, MANY, MANY) for p in ours.p_sim])
    assert (np.abs(ours.p_sim - textbook) < bound).all()
    assert (ours.p_sim > 0.05).sum() >= 10  # the comparison covers non-significant areas


def naive_conditional_p(z, row, observed, scale, draws):
    """One area at a time: map draw i to n-1, weight the drawn values, fold the tails."""
    n = z.size
    dense = row.toarray()
    p = np.empty(n)
    for i in range(n):
        cols = np.flatnonzero(dense[i])
        k = cols.size
        idx = draws[:, :k].copy()
        idx[idx == i] = n - 1
        sim = scale[i] * (z[idx] @ dense[i, cols])
        tol = 1e-9 * abs(observed[i])
        upper = np.sum(sim >= observed[i] - tol)
        lower = np.sum(sim <= observed[i] + tol)
        p[i] = (min(upper, lower) + 1) / (draws.shape[0] + 1)
    return p


@pytest.mark.parametrize("block_entries", [1 << 22, 60, 7])
def test_vectorised_conditional_permutation_equals_area_by_area(block_entries):
    # Several neighbour counts (knn-linked island, lattice edges) and small blocks, so the
    # grouping, the block edges and the self-draw corrections are all exercised.
    geoms = np.concatenate([lattice(4, 5), [shapely.box(9, 9, 10, 10)]])
    with pytest.warns(IslandWarning):
        graph = build_area_graph(geoms, [f"A{k}" for k in range(21)], island_policy="knn", knn_k=2)
    weights = clustering_module._resolve_weights(graph, 21, what="y")
    y = rng(22).random(21)
    z = (y - y.mean()) / y.std()
    row = weights.row
    scale = 20 * z / (z @ z)
    observed = scale * (row @ z)
    draws = clustering_module._conditional_draws(21, int(np.diff(row.indptr).max()), 300, rng(23))
    # Make sure self-draws happen, so the correction path is tested.
    assert (draws == np.arange(21)[None, : draws.shape[1]]).any()
    p, _ = clustering_module._conditional_pvalues(
        z, row, observed, scale, draws, block_entries=block_entries
    )
    assert np.array_equal(p, naive_conditional_p(z, row, observed, scale, draws))


def test_conditional_draws_are_without_replacement_and_uniform():
    draws = clustering_module._conditional_draws(12, 4, 6000, rng(24))
    assert draws.shape == (6000, 4)
    assert all(len(set(r)) == 4 for r in draws.tolist())
    # Each of the 11 values is equally likely in every column: chi-square goodness of fit.
    for col in range(4):
        counts = np.bincount(draws[:, col], minlength=11)
        assert stats.chisquare(counts).pvalue > 1e-4


def test_local_moran_reproducible_and_labels_consistent(columbus):
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    first = local_moran(y, graphs["queen"], permutations=499, rng=rng(25))
    second = local_moran(y, graphs["queen"], permutations=499, rng=rng(25))
    assert np.array_equal(first.p_sim, second.p_sim)
    assert np.array_equal(first.cluster, second.cluster)
    codes = {"high-high": 1, "low-high": 2, "low-low": 3, "high-low": 4}
    for label, code in codes.items():
        chosen = first.cluster == label
        assert (first.quadrant[chosen] == code).all()
        assert (first.q[chosen] <= 0.05).all()
    assert sum(first.counts().values()) == 49
    assert list(first.counts()) == list(CLUSTER_LABELS)


def test_local_moran_fdr_none_uses_raw_p(columbus):
    frame, graphs = columbus
    y = frame["CRIME"].to_numpy()
    raw = local_moran(y, graphs["queen"], permutations=999, rng=rng(26), fdr="none", alpha=0.1)
    bh = local_moran(y, graphs["queen"], permutations=999, rng=rng(26), fdr="bh", alpha=0.1)
    assert np.array_equal(raw.significant, raw.p_sim <= 0.1)
    assert np.array_equal(bh.significant, bh.q <= 0.1)
    # Same draws: BH can only remove discoveries.
    assert not (bh.significant & ~raw.significant).any()
    assert raw.to_dict()["fdr"] == "none"


def test_benjamini_hochberg_against_scipy_and_statsmodels():
    p = rng(27).uniform(0, 0.2, 200) ** 2
    p[:5] = [0.5, 0.5, 1.0, 0.0, 0.01]  # ties, a zero and a one
    ours = benjamini_hochberg(p)
    assert np.allclose(ours, stats.false_discovery_control(p, method="bh"), rtol=1e-12, atol=0)
    assert np.allclose(ours, multipletests(p, method="fdr_bh")[1], rtol=1e-12, atol=0)


def test_benjamini_hochberg_leaves_nan_out():
    q = benjamini_hochberg([0.01, np.nan, 0.04])
    # Two tests: q = (0.02, 0.04) by hand (m p_(i) / i with the running minimum).
    assert np.isnan(q[1])
    assert q[[0, 2]] == pytest.approx([0.02, 0.04], rel=1e-15)
    assert np.isnan(benjamini_hochberg([np.nan])).all()


def test_local_moran_areagraph_positions_and_frame():
    geoms = np.concatenate([lattice(3, 3), [shapely.box(10, 10, 11, 11)]])
    with pytest.warns(IslandWarning):
        graph = build_area_graph(geoms, [f"A{k}" for k in range(10)])
    y = np.r_[rng(28).random(9), np.nan]
    result = local_moran(y, graph, permutations=99, rng=rng(29))
    frame = result.frame()
    assert list(frame.columns) == ["lisa_I", "lisa_p", "lisa_q", "lisa_cluster"]
    assert len(frame) == 10
    assert frame["lisa_cluster"].iloc[9] is None
    assert np.isnan(frame["lisa_I"].iloc[9])
    assert frame["lisa_cluster"].iloc[:9].notna().all()
    assert result.n == 9


# --------------------------------------------------------------------------- crosstab


def test_lisa_crosstab_by_hand():
    # NaN is how pandas may hold a missing label; it counts like None.
    labels = ["high-high", "low-low", "low-low", "not significant", None, "high-high", np.nan]
    mm = np.array([True, True, False, False, True, False, False])
    pop = np.array([100.0, 250.0, 50.0, 10.0, 7.0, 1.5, 3.0])
    table = lisa_crosstab(labels, mm, pop)
    assert table["columns"] == ["majority_minority", "not_majority_minority"]
    assert list(table["rows"]) == list(CLUSTER_LABELS)
    assert table["rows"]["high-high"]["majority_minority"] == {"areas": 1, "population": 100.0}
    assert table["rows"]["high-high"]["not_majority_minority"] == {"areas": 1, "population": 1.5}
    assert table["rows"]["low-low"]["majority_minority"] == {"areas": 1, "population": 250.0}
    assert table["rows"]["low-low"]["not_majority_minority"] == {"areas": 1, "population": 50.0}
    assert table["rows"]["high-low"]["majority_minority"] == {"areas": 0, "population": 0.0}
    assert table["areas_without_label"] == 2
    assert table["population_without_label"] == 10.0
    no_nan_json(table)


@pytest.mark.parametrize(
    ("labels", "mm", "pop", "match"),
    [
        (["hot"], [True], [1.0], r'cluster label "hot" is not one of'),
        (["low-low"], [True, False], [1.0], r"majority_minority has shape \(2,\)"),
        (["low-low"], [True], [1.0, 2.0], "population has 2 values for 1 cluster labels"),
        (["low-low"], [True], [-1.0], "population must be finite and not negative"),
        (["low-low"], [True], [np.nan], "population must be finite and not negative"),
        (["low-low"], [2], [1.0], r"majority_minority must be true/false \(or 0/1\)"),
        (["low-low"], [True], ["many"], "population must be numeric"),
    ],
)
def test_lisa_crosstab_errors(labels, mm, pop, match):
    with pytest.raises(AnalysisError, match=match):
        lisa_crosstab(labels, mm, pop)


# --------------------------------------------------------------------------- degenerate input


def test_constant_variable_gives_none_and_a_warning():
    graph = lattice_graph(3, 3)
    y = np.full(9, 0.75)
    with pytest.warns(DegenerateStatisticWarning, match="is constant"):
        result = moran(y, graph, permutations=9, rng=rng(), variable="covered_fraction")
    data = result.to_dict()
    assert data["I"] is None and data["p_sim"] is None and data["z_rand"] is None
    assert data["expected"] == pytest.approx(-1 / 8)
    no_nan_json(data)
    with pytest.warns(DegenerateStatisticWarning, match="local Moran's I is undefined"):
        local = local_moran(y, graph, permutations=9, rng=rng())
    assert (local.cluster == "not significant").all()
    no_nan_json(local.to_dict())
    with pytest.warns(DegenerateStatisticWarning, match="bivariate Moran's I is undefined"):
        bivariate = bivariate_moran(y, np.arange(9.0), graph, permutations=9, rng=rng())
    no_nan_json(bivariate.to_dict())


def test_three_areas_have_no_randomisation_variance():
    ring = sp.csr_matrix(np.ones((3, 3)) - np.eye(3))
    with pytest.warns(DegenerateStatisticWarning, match="needs at least 4 areas"):
        result = moran(np.array([1.0, 2.0, 4.0]), ring, permutations=0)
    assert result.to_dict()["variance_rand"] is None
    assert result.I == pytest.approx(-0.5, abs=1e-15)  # complete graph: I = -1/(n-1), by hand


def test_fewer_than_three_areas_is_an_error():
    pair = sp.csr_matrix(np.array([[0.0, 1.0], [1.0, 0.0]]))
    with pytest.raises(AnalysisError, match="only 2 area\\(s\\) take part.*at least 3"):
        moran(np.array([1.0, 2.0]), pair, permutations=0)


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"permutations": -1, "rng": None}, SpecError, "permutations was -1 but must be 0 or more"),
        ({"permutations": 1.5, "rng": None}, SpecError, "permutations was 1.5 but must be a whole"),
        ({"permutations": True, "rng": None}, SpecError, "permutations was True"),
        ({"permutations": 9, "rng": None}, SpecError, r"rng was NoneType .*default_rng\(seed\)"),
        ({"permutations": 9, "rng": 42}, SpecError, "rng was int"),
        ({"permutations": 9, "rng": np.random.RandomState(1)}, SpecError, "rng was RandomState"),
    ],
)
def test_bad_permutation_options(kwargs, error, match):
    graph = lattice_graph(3, 3)
    with pytest.raises(error, match=match):
        moran(np.arange(9.0), graph, **kwargs)


def test_local_moran_option_errors():
    graph = lattice_graph(3, 3)
    y = np.arange(9.0)
    with pytest.raises(SpecError, match=r'fdr was "holm" but is expected to be one of'):
        local_moran(y, graph, permutations=9, rng=rng(), fdr="holm")
    with pytest.raises(SpecError, match="alpha was 1.5 but must be a number strictly between"):
        local_moran(y, graph, permutations=9, rng=rng(), alpha=1.5)
    with pytest.raises(SpecError, match="local Moran needs at least 1"):
        local_moran(y, graph, permutations=0)


@pytest.mark.parametrize(
    ("y", "match"),
    [
        (np.arange(8.0), "y has 8 values but the AreaGraph has 9 areas"),
        (np.r_[np.arange(8.0), np.nan], r"y must be finite .*1 value\(s\) are missing"),
        (np.array(["a"] * 9), "y must be numeric"),
        (np.ones((3, 3)), r"y has shape \(3, 3\)"),
    ],
)
def test_bad_values(y, match):
    with pytest.raises(AnalysisError, match=match):
        moran(y, lattice_graph(3, 3), permutations=0)


def chain(n: int) -> sp.csr_matrix:
    return sp.csr_matrix(np.eye(n, k=1) + np.eye(n, k=-1))


def test_a_valid_sparse_chain_is_accepted():
    with pytest.warns(DegenerateStatisticWarning, match="needs at least 4 areas"):
        assert moran(np.array([1.0, 2.0, 4.0]), chain(3), permutations=0).n == 3


@pytest.mark.parametrize(
    ("weights", "n_values", "match"),
    [
        ([[0, 1], [1, 0]], 2, "weights were a list; give an AreaGraph"),
        (sp.csr_matrix(np.ones((3, 4))), 3, "weights matrix is 3 x 4, not square"),
        (chain(4), 5, "y has 5 values but the weights have 4 areas"),
        (chain(3) + sp.eye(3), 3, "weights link area 0 to itself"),
        (-chain(3), 3, "weights must be finite and not negative"),
        (
            sp.block_diag([chain(2), sp.csr_matrix((1, 1))]).tocsr(),
            3,
            r"1 area\(s\) have no neighbour in the weights \(positions 2\)",
        ),
    ],
)
def test_bad_weights(weights, n_values, match):
    with pytest.raises(AnalysisError, match=match):
        moran(np.arange(float(n_values)), weights, permutations=0)


@pytest.mark.parametrize(
    ("served", "match"),
    [
        (np.r_[np.zeros(8), 0.5], r"served must be true/false \(or 0/1\); position 8 is"),
        (np.array(["yes"] * 9), r"served must be true/false \(or 0/1\)"),
        (np.zeros(4, dtype=bool), "served has 4 values but the AreaGraph has 9 areas"),
    ],
)
def test_bad_served_flags(served, match):
    graph = lattice_graph(3, 3)
    with pytest.raises(AnalysisError, match=match):
        join_counts(served, graph, permutations=0)


def test_join_counts_accept_zero_one_numbers():
    graph = lattice_graph(4, 4)
    flags = np.r_[np.zeros(8), np.ones(8)]
    assert join_counts(flags, graph, permutations=0).served_served == 10


# --------------------------------------------------------------------------- orchestrator


@pytest.fixture(scope="module")
def region():
    """A fictional ~400-area tessellation plus one detached island area (the last)."""
    cells = tessellation(400, seed=SEED)
    people = demographics(cells, seed=SEED + 1)
    island = shapely.box(1e6, 1e6, 1e6 + 500, 1e6 + 500)
    geoms = np.concatenate([np.asarray(cells.geometry.array), [island]])
    ids = [*cells["geoid"], "99001999999"]
    with pytest.warns(IslandWarning):
        graph = build_area_graph(geoms, ids)
    total = np.r_[people["pop_total"].to_numpy(dtype=float), 0.0]
    white = np.r_[people["pop_white_nh"].to_numpy(dtype=float), 0.0]
    total[[3, 4]] = 0.0  # two empty areas: minority share undefined
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(total > 0, 1.0 - white / total, np.nan)
    local_rng = np.random.default_rng(SEED + 2)
    fraction = np.clip(
        1.3 - 1.2 * np.nan_to_num(share, nan=0.5) + local_rng.normal(0, 0.15, total.size), 0, 1
    )
    return {
        "graph": graph,
        "covered_fraction": fraction,
        "minority_share": share,
        "served": fraction >= 0.5,
        "majority_minority": np.nan_to_num(share, nan=0.0) > 0.5,
        "population": total,
        "linked": len(cells),
    }


def run_summary(region, seed_offset=0, **kwargs):
    return clustering_summary(
        region["covered_fraction"],
        region["minority_share"],
        region["served"],
        region["majority_minority"],
        region["population"],
        region["graph"],
        permutations=kwargs.pop("permutations", 199),
        rng=rng(100 + seed_offset),
        **kwargs,
    )


def test_clustering_summary_contract(region):
    result = run_summary(region)
    data = result.to_dict()
    assert set(data) == {
        "weights",
        "moran",
        "moran_minority_share",
        "join_counts",
        "bivariate_moran",
        "local_moran",
        "permutations",
    }
    assert data["weights"] == region["graph"].to_dict()
    assert data["moran"]["variable"] == "covered_fraction"
    assert data["moran_minority_share"]["variable"] == "minority_share"
    assert data["moran_minority_share"]["areas_left_out"] == 2
    assert (
        data["moran_minority_share"]["n"]
        == region["linked"] - 2 - data["moran_minority_share"]["areas_without_neighbour_left_out"]
    )
    assert data["local_moran"]["fdr"] == "bh"
    assert data["local_moran"]["alpha"] == 0.05
    assert sum(data["local_moran"]["counts"].values()) == region["linked"]
    assert data["local_moran"]["crosstab"]["areas_without_label"] == 1
    assert data["permutations"] == 199
    text = no_nan_json(data)
    assert json.loads(text) == data
    # Strongly patterned fictional data: coverage falls where minority share rises.
    assert data["moran"]["I"] > 0.3 and data["moran"]["p_sim"] == pytest.approx(1 / 200)
    assert data["bivariate_moran"]["I"] < -0.3


def test_clustering_summary_per_area_arrays(region):
    result = run_summary(region)
    frame = result.area_frame()
    last = region["linked"]  # the island's position
    assert len(frame) == region["graph"].n == last + 1
    assert result.lisa_cluster[last] is None
    assert frame["lisa_cluster"].iloc[last] is None
    assert np.isnan(result.lisa_I[last]) and np.isnan(result.lisa_p[last])
    assert np.isnan(result.lisa_q[last])
    assert all(label in CLUSTER_LABELS for label in result.lisa_cluster[:last])
    crosstab_total = sum(
        cell["areas"] for row in result.crosstab["rows"].values() for cell in row.values()
    )
    assert crosstab_total == region["linked"]


def test_clustering_summary_statistics_equal_the_direct_calls(region):
    result = run_summary(region, permutations=99)
    stream = rng(100)
    graph = region["graph"]
    direct = moran(
        region["covered_fraction"], graph, permutations=99, rng=stream, variable="covered_fraction"
    )
    assert result.moran.to_dict() == direct.to_dict()
    # The minority-share statistics run on the areas where the share is defined.
    keep = graph.stats_mask & np.isfinite(region["minority_share"])
    sub = graph.adjacency[keep][:, keep]
    share_direct = moran(region["minority_share"][keep], sub, permutations=0)
    assert result.moran_minority_share.I == pytest.approx(share_direct.I, rel=1e-13)


def test_clustering_summary_is_reproducible(region):
    first = run_summary(region, permutations=99)
    second = run_summary(region, permutations=99)
    assert first.to_dict() == second.to_dict()
    assert first.area_frame().equals(second.area_frame())


def test_clustering_summary_without_minority_share(region):
    share = np.full(region["graph"].n, np.nan)
    with pytest.warns(DegenerateStatisticWarning, match="minority share is defined for only 0"):
        result = clustering_summary(
            region["covered_fraction"],
            share,
            region["served"],
            region["majority_minority"],
            region["population"],
            region["graph"],
            permutations=19,
            rng=rng(),
        )
    data = result.to_dict()
    assert data["moran_minority_share"]["I"] is None
    assert data["bivariate_moran"]["I"] is None
    assert data["moran_minority_share"]["areas_left_out"] == region["linked"]
    no_nan_json(data)


def test_clustering_summary_errors(region):
    graph = region["graph"]
    args = (
        region["covered_fraction"],
        region["minority_share"],
        region["served"],
        region["majority_minority"],
        region["population"],
    )
    with pytest.raises(AnalysisError, match="graph was a csr_matrix; build it with"):
        clustering_summary(*args, graph.adjacency, permutations=9, rng=rng())
    with pytest.raises(SpecError, match="permutations was 0 but must be at least 1"):
        clustering_summary(*args, graph, permutations=0, rng=rng())
    with pytest.raises(SpecError, match='fdr was "by" but is expected'):
        clustering_summary(*args, graph, permutations=9, rng=rng(), fdr="by")
    bad_fraction = region["covered_fraction"].copy()
    bad_fraction[0] = np.nan
    with pytest.raises(AnalysisError, match="covered_fraction must be finite"):
        clustering_summary(bad_fraction, *args[1:], graph, permutations=9, rng=rng())
    with pytest.raises(AnalysisError, match=r"minority_share has shape \(3,\)"):
        clustering_summary(args[0], np.ones(3), *args[2:], graph, permutations=9, rng=rng())


def test_too_few_linked_areas_for_a_summary():
    geoms = np.array([shapely.box(0, 0, 1, 1), shapely.box(1, 0, 2, 1), shapely.box(5, 5, 6, 6)])
    with pytest.warns(IslandWarning):
        graph = build_area_graph(geoms, ["a", "b", "c"])
    with (
        pytest.raises(AnalysisError, match="only 2 area\\(s\\) take part"),
        warnings.catch_warnings(),
    ):
        warnings.simplefilter("ignore", DegenerateStatisticWarning)
        clustering_summary(
            np.array([0.1, 0.9, 0.5]),
            np.array([0.2, 0.8, 0.5]),
            np.array([False, True, True]),
            np.array([False, True, False]),
            np.array([10.0, 20.0, 30.0]),
            graph,
            permutations=9,
            rng=rng(),
        )
