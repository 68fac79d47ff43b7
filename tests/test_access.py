"""Access (2SFCA, E2SFCA): hand computations and PySAL's ``access`` package as an oracle."""

from __future__ import annotations

import builtins
import math
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from coverage_audit import audit, inputs, load_spec, run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.io import costs as cost_io
from coverage_audit.stats.access import (
    Decay,
    access_by_group,
    concentration_index,
    fractional_rank,
    pairs_from_costs,
    pairs_within,
    two_step_fca,
)

from .conftest import GRID_CRS, spec_text, write_spec

pytest_plugins = ["tests.browser"]

#: Agreement with the oracle (floating-point sums in another order).
ORACLE_TOL = 1e-9

# --- the hand example ----------------------------------------------------------------------
# Five areas in a row (boxes 2 km high) whose centroids lie at x = 0, 4, 10, 16 and 30 km,
# y = 1 km; populations P = 100, 200, 100, 300, 50. Three sites on the same line at
# x = 2 (2 doctors), 12 (4 doctors) and 26 km (1 doctor). Catchment 10 km, inclusive.
#
# Classic 2SFCA (Luo and Wang 2003), by hand:
#   site A (x=2):  areas at 2, 2, 8 km (areas 1, 2, 3); demand 100+200+100 = 400; R_A = 2/400
#   site B (x=12): areas at 8, 2, 4 km (areas 2, 3, 4); demand 200+100+300 = 600; R_B = 4/600
#   site C (x=26): areas at 10 (exactly the catchment), 4 km (areas 4, 5);
#                  demand 300+50 = 350; R_C = 1/350
#   A_1 = R_A = 0.005; A_2 = A_3 = R_A + R_B = 7/600; A_4 = R_B + R_C = 1/105; A_5 = 1/350.
#   Check: sum_i P_i A_i = 0.5 + 14/6 + 7/6 + 20/7 + 1/7 = 7 = total capacity.
HAND_2SFCA = [
    0.005,
    0.011666666666666667,
    0.011666666666666667,
    0.009523809523809525,
    0.002857142857142857,
]
#
# E2SFCA (Luo and Qi 2009) with zones [[3, 1.0], [7, 0.68], [10, 0.22]] km (edges inclusive):
#   site A: weights 1 (2 km), 1 (2 km), 0.22 (8 km); demand 100 + 200 + 22 = 322; R_A = 2/322
#   site B: weights 0.22 (8 km), 1 (2 km), 0.68 (4 km); demand 44 + 100 + 204 = 348; R_B = 4/348
#   site C: weights 0.22 (10 km), 0.68 (4 km); demand 66 + 34 = 100; R_C = 1/100
#   A_1 = 2/322 = 1/161; A_2 = 1/161 + 0.22*4/348 = 1/161 + 11/4350;
#   A_3 = 0.22*2/322 + 4/348 = 11/8050 + 1/87; A_4 = 0.68*4/348 + 0.22/100 = 34/4350 + 11/5000;
#   A_5 = 0.68/100.
HAND_E2SFCA = [
    0.006211180124223602,
    0.00873991575640751,
    0.01286071250089241,
    0.01001609195402299,
    0.0068,
]
HAND_X = np.array([0.0, 4000.0, 10000.0, 16000.0, 30000.0])
HAND_P = np.array([100.0, 200.0, 100.0, 300.0, 50.0])
SITES_X = np.array([2000.0, 12000.0, 26000.0])
DOCTORS = np.array([2.0, 4.0, 1.0])
STEPS_M = ((3000.0, 1.0), (7000.0, 0.68), (10000.0, 0.22))


def _hand_pairs(catchment: float = 10_000.0):
    origins = np.column_stack([HAND_X, np.full(5, 1000.0)])
    sites = np.column_stack([SITES_X, np.full(3, 1000.0)])
    return pairs_within(origins, sites, catchment)


def test_two_step_fca_by_hand():
    scores = two_step_fca(HAND_P, DOCTORS, _hand_pairs(), Decay("none", 10_000.0))
    np.testing.assert_allclose(scores.access, HAND_2SFCA, rtol=1e-12)  # hand computation above
    np.testing.assert_allclose(scores.site_ratio, [2 / 400, 4 / 600, 1 / 350], rtol=1e-12)
    # Luo and Wang (2003): the population-weighted sum of access equals the total supply
    # when every site has demand in reach.
    assert float(HAND_P @ scores.access) == pytest.approx(7.0, rel=1e-12)
    assert scores.pairs_within == 3 + 3 + 2 and scores.areas_without_site == 0


def test_catchment_boundary_is_inclusive():
    # Area 4 lies exactly 10 km from site C: inside at 10 km (<=, as PySAL access' max_cost),
    # outside just below. Then R_C = 1/50 and A_4 = R_B = 4/600, A_5 = 1/50 (by hand).
    assert _hand_pairs(10_000.0).cost.max() == 10_000.0
    below = two_step_fca(HAND_P, DOCTORS, _hand_pairs(9_999.999), Decay("none", 9_999.999))
    np.testing.assert_allclose(below.access[3:], [4 / 600, 1 / 50], rtol=1e-12)


def test_enhanced_two_step_fca_by_hand():
    decay = Decay("steps", 10_000.0, STEPS_M)
    scores = two_step_fca(HAND_P, DOCTORS, _hand_pairs(), decay)
    np.testing.assert_allclose(scores.access, HAND_E2SFCA, rtol=1e-12)  # hand computation above


def test_step_weights_edges_inclusive():
    # Luo and Qi (2009) zones; a cost on an edge belongs to the nearer zone (PySAL access
    # weights.step_fn: "key_to_test <= k"); beyond the last edge the weight is 0.
    decay = Decay("steps", 10.0, ((3.0, 1.0), (7.0, 0.68), (10.0, 0.22)))
    got = decay.weights(np.array([0.0, 3.0, 3.0001, 7.0, 10.0, 10.0001]))
    assert got.tolist() == [1.0, 1.0, 0.68, 0.68, 0.22, 0.0]


def test_gaussian_weights_literal():
    # Dai (2010) Gaussian weight (e^{-(d/d0)^2/2} - e^{-1/2}) / (1 - e^{-1/2}) (from memory):
    # 1 at the site, 0 at the catchment; at d0/2, (e^{-1/8} - e^{-1/2}) / (1 - e^{-1/2})
    # = (0.8824969 - 0.6065307) / 0.3934693 = 0.7013666 (by hand, 7 digits).
    got = Decay("gaussian", 10.0).weights(np.array([0.0, 5.0, 10.0, 11.0]))
    np.testing.assert_allclose(got, [1.0, 0.7013666, 0.0, 0.0], atol=5e-8)


def test_decay_rejects_bad_steps():
    with pytest.raises(ValueError, match="must equal the catchment"):
        Decay("steps", 10.0, ((3.0, 1.0), (9.0, 0.5)))
    with pytest.raises(ValueError, match="increasing"):
        Decay("steps", 10.0, ((5.0, 1.0), (4.0, 0.5), (10.0, 0.2)))
    with pytest.raises(ValueError, match="weights lie in"):
        Decay("steps", 10.0, ((5.0, 1.5), (10.0, 0.2)))


def test_groups_by_hand():
    # Groups of the hand example: white = 100, 100, 0, 0, 50; black = 0, 100, 100, 300, 0.
    # white mean = (0.5 + 100*7/600 + 50/350) / 250 = (38/21) / 250 = 0.007238095...
    # black mean = (2*100*7/600 + 300/105) / 500 = (109/21) / 500 = 0.010380952...
    # ratio black / white = 109/76; region mean = 7/750; threshold at 0.5 of it = 7/1500,
    # and only area 5 (1/350) lies below: white share 50/250 = 0.2, black 0.
    counts = {
        "white": np.array([100.0, 100, 0, 0, 50]),
        "black": np.array([0.0, 100, 100, 300, 0]),
    }
    groups, mean, threshold = access_by_group(np.array(HAND_2SFCA), HAND_P, counts, "white", 0.5)
    assert mean == pytest.approx(7 / 750, rel=1e-12)
    assert threshold == pytest.approx(7 / 1500, rel=1e-12)
    assert groups["white"].mean_access == pytest.approx(0.007238095238095238, rel=1e-12)
    assert groups["black"].mean_access == pytest.approx(0.010380952380952381, rel=1e-12)
    assert groups["black"].ratio == pytest.approx(1.4342105263157894, rel=1e-12)
    assert groups["white"].ratio == 1.0
    assert groups["white"].share_low_access == pytest.approx(0.2, rel=1e-12)
    assert groups["black"].share_low_access == 0.0


def test_low_access_boundary_is_strict():
    # Access 1, 2, 3, 4 with equal populations: mean 2.5; at 0.8 the threshold is exactly
    # 2.0 and the area at exactly 2.0 is not below it; only the first area (group a) is.
    counts = {"a": np.array([1.0, 0, 0, 0]), "b": np.array([0.0, 1, 0, 0])}
    groups, mean, threshold = access_by_group(
        np.array([1.0, 2.0, 3.0, 4.0]), np.ones(4), counts, "a", 0.8
    )
    assert (mean, threshold) == (2.5, 2.0)
    assert groups["a"].share_low_access == 1.0 and groups["b"].share_low_access == 0.0


def test_concentration_index_literal_examples():
    # Unweighted: h = 1, 2, 3, 4 ranked in that order; fractional ranks 1/8, 3/8, 5/8, 7/8.
    # O'Donnell et al. (2008, World Bank, ch. 8) "convenient" form
    # C = 2/(n mu) sum h_i R_i - 1 = 2/10 * 6.25 - 1 = 0.25; the concentration curve
    # (cumulative shares 0.1, 0.3, 0.6, 1) has area 0.375 and C = 1 - 2*0.375 = 0.25.
    assert concentration_index(
        np.array([1.0, 2, 3, 4]), np.array([0.1, 0.2, 0.3, 0.4]), np.ones(4)
    ) == pytest.approx(0.25, rel=1e-12)
    # Weighted with a tie: h = 2, 4, 1; rank keys 0.5, 0.5, 0.2; weights 1, 3, 4. Grouped:
    # group (key 0.2) weight 4, h-sum 4; tie group weight 4, h-sum 14; total 18.
    # Concentration curve points (0.5, 4/18), (1, 1); area = 0.5*(4/18)/2 + 0.5*(22/18)/2
    # = 13/36; C = 1 - 26/36 = 5/18 (Kakwani et al. 1997, grouped data; by hand).
    assert concentration_index(
        np.array([2.0, 4, 1]), np.array([0.5, 0.5, 0.2]), np.array([1.0, 3, 4])
    ) == pytest.approx(5 / 18, rel=1e-12)
    # Equal values: no concentration.
    assert concentration_index(np.ones(3), np.array([0.1, 0.5, 0.9]), np.ones(3)) == 0.0
    assert concentration_index(np.zeros(3), np.array([0.1, 0.5, 0.9]), np.ones(3)) is None


def test_fractional_rank_ties():
    # Tied keys share the rank of their block: weights 4 | 1 + 3 -> 0.25 and 0.75.
    got = fractional_rank(np.array([0.5, 0.5, 0.2]), np.array([1.0, 3, 4]))
    assert got.tolist() == [0.75, 0.75, 0.25]


# --- PySAL access as an oracle ----------------------------------------------------------


@pytest.fixture(scope="module")
def columbus():
    """Columbus (bundled in the libpysal wheel): centroids, with a made-up demand."""
    from libpysal.examples import get_path

    pytest.importorskip("access")  # PySAL access, in the test extra

    frame = gpd.read_file(get_path("columbus.shp"))
    frame["geoid"] = frame["POLYID"].astype(int)
    # Made-up demand from a bundled column (house value in $1,000 as "residents").
    frame["demand"] = (frame["HOVAL"] * 10.0).round()
    cent = frame.set_geometry(frame.geometry.centroid)
    return cent[["geoid", "demand", "geometry"]]


#: Made-up sites in the Columbus coordinates (units of the shapefile), with capacities.
COLUMBUS_SITES = gpd.GeoDataFrame(
    {"site": [101, 102, 103, 104, 105, 106], "cap": [3.0, 5.0, 2.0, 8.0, 1.0, 4.0]},
    geometry=shapely.points(
        [(7.5, 12.0), (8.8, 13.8), (9.5, 11.2), (8.0, 14.5), (10.3, 12.7), (8.4, 12.6)]
    ),
)
COLUMBUS_CATCHMENT = 0.8


def _oracle(demand, sites, catchment, weight_fn=None, cost_df=None):
    """PySAL access' two-stage FCA (weight_fn None) or enhanced form, NaN as 0."""
    from access import Access

    kwargs = {}
    if cost_df is not None:
        kwargs = {
            "cost_df": cost_df,
            "cost_origin": "origin",
            "cost_dest": "dest",
            "cost_name": "cost",
        }
    model = Access(
        demand_df=demand,
        demand_index="geoid",
        demand_value="demand",
        supply_df=sites,
        supply_index="site",
        supply_value="cap",
        **kwargs,
    )
    cost = "cost"
    if cost_df is None:
        # Its pair filter is strict (< threshold): take a wide one, so that the catchment
        # rule is its max_cost (<=), the one that matters here.
        model.create_euclidean_distance(threshold=4 * catchment)
        cost = "euclidean"
    if weight_fn is None:
        out = model.two_stage_fca(name="fca", cost=cost, max_cost=catchment)
    else:
        out = model.enhanced_two_stage_fca(
            name="fca", cost=cost, max_cost=catchment, weight_fn=weight_fn
        )
    series = out["fca_cap"].reindex(demand["geoid"].to_numpy())
    # PySAL access leaves areas without a site in reach missing; we give them 0.
    return series.fillna(0.0).to_numpy(dtype=float)


def _ours(demand, sites, decay, pairs=None):
    if pairs is None:
        pairs = pairs_within(
            shapely.get_coordinates(demand.geometry.values),
            shapely.get_coordinates(sites.geometry.values),
            decay.catchment,
        )
    return two_step_fca(
        demand["demand"].to_numpy(float), sites["cap"].to_numpy(float), pairs, decay
    )


def _dai(d0):
    tail = math.exp(-0.5)
    return lambda d: (math.exp(-0.5 * (d / d0) ** 2) - tail) / (1 - tail) if d <= d0 else 0.0


@pytest.mark.parametrize("kind", ["none", "steps", "gaussian"])
def test_matches_pysal_access_straight_line(columbus, kind):
    from access import weights

    c = COLUMBUS_CATCHMENT
    steps = ((0.3, 1.0), (0.55, 0.68), (c, 0.22))
    decay = Decay(kind, c, steps if kind == "steps" else ())
    fn = {
        "none": None,
        "steps": weights.step_fn({e: w for e, w in steps}),
        # Dai's form handed to the oracle as its weight function; the oracle does both steps.
        "gaussian": _dai(c),
    }[kind]
    expected = _oracle(columbus, COLUMBUS_SITES, c, fn)
    scores = _ours(columbus, COLUMBUS_SITES, decay)
    assert (expected > 0).sum() > 20 and (expected == 0).sum() > 3  # a real test
    np.testing.assert_allclose(scores.access, expected, rtol=ORACLE_TOL, atol=1e-15)


@pytest.fixture(scope="module")
def columbus_costs(columbus):
    """A made-up travel-time table: 2.5 x distance + a fixed delay per pair, some pairs left
    out (missing: beyond the catchment), with one pair at exactly the catchment."""
    rng = np.random.default_rng(17)
    o = shapely.get_coordinates(columbus.geometry.values)
    s = shapely.get_coordinates(COLUMBUS_SITES.geometry.values)
    rows = []
    for i, gid in enumerate(columbus["geoid"]):
        for j, sid in enumerate(COLUMBUS_SITES["site"]):
            d = float(np.hypot(*(o[i] - s[j])))
            if d < 2.5 and rng.random() > 0.15:
                rows.append((int(gid), int(sid), round(2.5 * d + rng.uniform(0, 1.5), 2)))
    table = pd.DataFrame(rows, columns=["origin", "dest", "cost"])
    table.loc[table.index[5], "cost"] = 4.0  # exactly the catchment below: inside
    return table


@pytest.mark.parametrize("kind", ["none", "steps"])
def test_matches_pysal_access_cost_table(columbus, columbus_costs, kind):
    from access import weights

    c = 4.0  # minutes
    steps = ((1.5, 1.0), (3.0, 0.68), (4.0, 0.22))
    decay = Decay(kind, c, steps if kind == "steps" else ())
    fn = None if kind == "none" else weights.step_fn({e: w for e, w in steps})
    expected = _oracle(columbus, COLUMBUS_SITES, c, fn, cost_df=columbus_costs)
    ids = {g: k for k, g in enumerate(columbus["geoid"])}
    sites = {s: k for k, s in enumerate(COLUMBUS_SITES["site"])}
    pairs = pairs_from_costs(
        columbus_costs["origin"].map(ids).to_numpy(),
        columbus_costs["dest"].map(sites).to_numpy(),
        columbus_costs["cost"].to_numpy(),
        len(columbus),
        len(sites),
    )
    scores = _ours(columbus, COLUMBUS_SITES, decay, pairs)
    assert (expected > 0).sum() > 20 and (expected == 0).sum() > 3
    np.testing.assert_allclose(scores.access, expected, rtol=ORACLE_TOL, atol=1e-15)


def test_matches_pysal_access_default_luo_qi_zones(columbus, columbus_costs):
    # PySAL access' enhanced_two_stage_fca without a weight function applies Luo and Qi's
    # published zones (0-10, 10-20, 20-30 minutes: 1.0, 0.68, 0.22); ours as a spec gives them.
    from access import Access

    costs = columbus_costs.assign(cost=columbus_costs["cost"] * 7.5)
    model = Access(
        demand_df=columbus,
        demand_index="geoid",
        demand_value="demand",
        supply_df=COLUMBUS_SITES,
        supply_index="site",
        supply_value="cap",
        cost_df=costs,
        cost_origin="origin",
        cost_dest="dest",
        cost_name="cost",
    )
    out = model.enhanced_two_stage_fca(name="e2", max_cost=30.0)
    expected = out["e2_cap"].reindex(columbus["geoid"].to_numpy()).fillna(0.0).to_numpy()
    ids = {g: k for k, g in enumerate(columbus["geoid"])}
    sites = {s: k for k, s in enumerate(COLUMBUS_SITES["site"])}
    pairs = pairs_from_costs(
        costs["origin"].map(ids).to_numpy(),
        costs["dest"].map(sites).to_numpy(),
        costs["cost"].to_numpy(),
        len(columbus),
        len(sites),
    )
    decay = Decay("steps", 30.0, ((10.0, 1.0), (20.0, 0.68), (30.0, 0.22)))
    scores = _ours(columbus, COLUMBUS_SITES, decay, pairs)
    assert (expected > 0).sum() > 20
    np.testing.assert_allclose(scores.access, expected, rtol=ORACLE_TOL, atol=1e-15)


# --- through the audit ------------------------------------------------------------------


def _hand_region(tmp_path: Path, access_table: str, costs: pd.DataFrame | None = None) -> Path:
    # Adjacent boxes whose centroids are the hand example's: edges at -2, 2, 6, 14, 18, 42 km.
    edges = [-2000.0, 2000.0, 6000.0, 14000.0, 18000.0, 42000.0]
    areas = gpd.GeoDataFrame(
        {
            "geoid": [f"0100100000{k}" for k in range(1, 6)],
            "total": HAND_P.astype(int),
            "white": [100, 100, 0, 0, 50],
            "black": [0, 100, 100, 300, 0],
        },
        geometry=[shapely.box(edges[k], 0, edges[k + 1], 2000) for k in range(5)],
        crs=GRID_CRS,
    )
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    sites = gpd.GeoDataFrame(
        {"site_id": ["A", "B", "C", "D"], "doctors": [2, 4, 1, None]},
        geometry=shapely.points(np.column_stack([[*SITES_X, 20000.0], np.full(4, 1000.0)])),
        crs=GRID_CRS,
    )
    sites.to_file(tmp_path / "clinics.gpkg", driver="GPKG")
    if costs is not None:
        costs.to_csv(tmp_path / "times.csv", index=False)
    footprint = (
        'path = "clinics.gpkg"\nradius = 10\nradius_unit = "km"\n\n[access]\n' + access_table
    )
    return write_spec(tmp_path / "audit.toml", spec_text(footprint))


def _run(spec_path: Path):
    spec = load_spec(spec_path)
    return run_audit(spec.with_analysis(permutations=9, enclave_draws=9, sensitivity=False))


def test_audit_access_by_hand(tmp_path):
    spec = _hand_region(
        tmp_path, 'capacity = "doctors"\ncatchment = "10 km"\nlow_access_fraction = 0.5\n'
    )
    result = _run(spec)
    s = result.summary["access"]
    np.testing.assert_allclose(result.areas["access"], HAND_2SFCA, rtol=1e-12)  # by hand
    assert s["method"] == "2SFCA" and s["catchment_m"] == 10_000.0 and s["decay"] == "none"
    assert s["groups"]["black"]["ratio"] == pytest.approx(109 / 76, rel=1e-12)  # by hand
    assert s["groups"]["white"]["share_low_access"] == pytest.approx(0.2, rel=1e-12)
    # Minority shares 0, 0.5, 1, 1, 0 weighted by population: C = 41/490 (by hand, the
    # weighted convenient form 2/(W mu) sum w h R - 1 with tie blocks ranked together).
    assert s["concentration_index"] == pytest.approx(41 / 490, rel=1e-12)
    # Site D has no capacity: listed, left out.
    ex = result.exclusions
    assert (
        (ex["source"] == "footprint:footprint") & ex["reason"].str.contains("capacity")
    ).sum() == 1
    assert "access" in result.areas.columns


def test_audit_access_steps_in_km(tmp_path):
    spec = _hand_region(
        tmp_path,
        'capacity = "doctors"\ncatchment = "10 km"\ndecay = [[3, 1.0], [7, 0.68], [10, 0.22]]\n',
    )
    result = _run(spec)
    np.testing.assert_allclose(result.areas["access"], HAND_E2SFCA, rtol=1e-12)  # by hand
    assert result.summary["access"]["decay"] == [[3000.0, 1.0], [7000.0, 0.68], [10000.0, 0.22]]


def test_audit_access_cost_table(tmp_path):
    # The hand example's distances as a table in km, with pair (area 1, site B) missing
    # (it was beyond the catchment anyway) and bad rows that are listed, not used.
    ids = [f"0100100000{k}" for k in range(1, 6)]
    rows = [
        (ids[i], s, abs(HAND_X[i] - x) / 1000.0)
        for i in range(5)
        for s, x in zip("ABC", SITES_X, strict=True)
        if not (i == 0 and s == "B")
    ]
    rows += [(ids[0], "Z", 1.0), ("99999999999", "A", 1.0), (ids[1], "A", -1.0), (ids[0], "A", 5.0)]
    costs = pd.DataFrame(rows, columns=["from_area", "site", "km"])
    spec = _hand_region(
        tmp_path,
        'capacity = "doctors"\ncatchment = "10 km"\nsite_id = "site_id"\ncosts = "times.csv"\n'
        'cost_origin = "from_area"\ncost_column = "km"\ncost_unit = "km"\n',
        costs,
    )
    result = _run(spec)
    np.testing.assert_allclose(result.areas["access"], HAND_2SFCA, rtol=1e-12)  # by hand
    info = result.summary["access"]["costs"]
    assert info["rows"] == 18 and info["used"] == 14 and info["excluded"] == 4
    assert info["pairs_missing"] == 5 * 3 - 14 and info["pairs_within_catchment"] == 8
    ex = result.exclusions[result.exclusions["source"] == "access_costs"]
    assert sorted(ex["row"].tolist()) == [15, 16, 17, 18]
    assert any("repeats" in r for r in ex["reason"])


def test_access_stage_reads_no_file(tmp_path, monkeypatch):
    # Pipeline layout (issue 14): the cost table and the sites are read in the input stage
    # (io/costs.read_access_inputs, called by io/further.py); after it, every file reader
    # the access stage could reach raises, and the audit still gives the hand figures.
    # Consistency check of the layout, plus the hand example's 2SFCA as reference.
    ids = [f"0100100000{k}" for k in range(1, 6)]
    rows = [
        (ids[i], s, abs(HAND_X[i] - x) / 1000.0)
        for i in range(5)
        for s, x in zip("ABC", SITES_X, strict=True)
    ]
    costs = pd.DataFrame(rows, columns=["origin", "site", "km"])
    spec = _hand_region(
        tmp_path,
        'capacity = "doctors"\ncatchment = "10 km"\nsite_id = "site_id"\ncosts = "times.csv"\n'
        'cost_column = "km"\ncost_unit = "km"\n',
        costs,
    )
    read_inputs = audit._read_inputs
    stages: list[str] = []

    def forbid(*args, **kwargs):
        raise AssertionError(f"a file was read after the input stage: {args[:1]}")

    def read_then_forbid(*args, **kwargs):
        read = read_inputs(*args, **kwargs)
        stages.append("read")
        assert read.further.access is not None and read.further.access.costs is not None
        for module, name in (
            (cost_io, "read_costs"),
            (cost_io, "read_hashed"),
            (cost_io, "read_table"),
            (inputs, "read_hashed"),
            (inputs, "read_table"),
            (pd, "read_csv"),
            (pd, "read_parquet"),
            (gpd, "read_file"),
            (builtins, "open"),
        ):
            monkeypatch.setattr(module, name, forbid)
        return read

    monkeypatch.setattr(audit, "_read_inputs", read_then_forbid)
    result = _run(spec)
    monkeypatch.undo()
    assert stages == ["read"]
    np.testing.assert_allclose(result.areas["access"], HAND_2SFCA, rtol=1e-12)  # by hand
    assert result.summary["access"]["costs"]["used"] == 15
    assert [r["role"] for r in result.manifest["inputs"]].count("access_costs") == 1


def test_spec_errors(tmp_path):
    with pytest.raises(SpecError, match="census blocks"):
        load_spec(_hand_region(tmp_path, 'catchment = "10 km"\norigins = "population"\n'))
    with pytest.raises(SpecError, match="must equal the catchment"):
        load_spec(_hand_region(tmp_path, 'catchment = "10 km"\ndecay = [[3, 1.0], [8, 0.5]]\n'))
    with pytest.raises(SpecError, match='unknown key "radius"'):
        load_spec(_hand_region(tmp_path, 'catchment = "10 km"\nradius = 3\n'))
    with pytest.raises(SpecError, match="needs costs"):
        load_spec(_hand_region(tmp_path, 'catchment = "20 min"\n'))


def test_missing_capacity_column(tmp_path):
    with pytest.raises(InputError, match="no capacity column 'beds'"):
        _run(_hand_region(tmp_path, 'catchment = "10 km"\ncapacity = "beds"\n'))


def test_cost_table_matching_nothing(tmp_path):
    costs = pd.DataFrame({"origin": ["x"], "site": ["A"], "cost": [1.0]})
    spec = _hand_region(
        tmp_path, 'catchment = "10 km"\nsite_id = "site_id"\ncosts = "times.csv"\n', costs
    )
    with pytest.raises(InputError, match="no row matches"):
        _run(spec)


# --- the demo's clinic scenario -----------------------------------------------------------

DEMO = Path(__file__).resolve().parent.parent / "demo_regions" / "ostmere"


def test_demo_clinics_regenerate_identically(tmp_path):
    from coverage_audit.demo import write_demo_region

    out = write_demo_region(tmp_path / "ostmere")
    for name in ("clinics.geojson", "clinics.toml"):
        assert (out / name).read_bytes() == (DEMO / name).read_bytes(), name


def test_demo_clinics_show_access_by_group(tmp_path):
    # Built so (demo.py): the large practices sit in mostly-white, higher-income tracts.
    result = _run(DEMO / "clinics.toml")
    acc = result.summary["access"]
    assert acc["method"] == "E2SFCA" and acc["catchment_m"] == 5000.0
    assert acc["groups"]["black_nh"]["ratio"] < 0.8
    assert (
        acc["groups"]["black_nh"]["share_low_access"]
        > acc["groups"]["white_nh"]["share_low_access"]
    )
    assert acc["concentration_index"] < 0
    paths = result.write(tmp_path / "out")
    page = paths["report"].read_text(encoding="utf-8")
    assert 'id="access"' in page and "Access to capacity (E2SFCA, 5 km): non-Hispanic Black" in page
    (first, *_) = [f for f in result.summary["findings"] if f["kind"] == "access"]
    assert first["figures"]["group"] == "black_nh" and first["figures"]["ratio"] < 0.8
    assert first["sentence"] in page.replace("&#x27;", "'")
    assert '"key":"access"' in paths["map"].read_text(encoding="utf-8").replace(" ", "")


def test_audit_access_travel_time_table(tmp_path):
    # The hand example's kilometres read as minutes (catchment "10 min"), the table in
    # hours: the same shares, so the same scores (by hand, above); 10 min stays inclusive.
    ids = [f"0100100000{k}" for k in range(1, 6)]
    rows = [
        (ids[i], s, abs(HAND_X[i] - x) / 1000.0 / 60.0)
        for i in range(5)
        for s, x in zip("ABC", SITES_X, strict=True)
    ]
    costs = pd.DataFrame(rows, columns=["origin", "site", "hours"])
    spec = _hand_region(
        tmp_path,
        'capacity = "doctors"\ncatchment = "10 min"\nsite_id = "site_id"\ncosts = "times.csv"\n'
        'cost_column = "hours"\ncost_unit = "h"\n',
        costs,
    )
    result = _run(spec)
    acc = result.summary["access"]
    assert acc["catchment_m"] is None and acc["catchment_unit"] == "min"
    np.testing.assert_allclose(result.areas["access"], HAND_2SFCA, rtol=1e-12)


# --- the map's access view ------------------------------------------------------------------


def _access_map(tmp_path):
    from coverage_audit.report.map import build_map

    from .test_map import GROUPS, REFERENCE, make_inputs

    areas, footprint, summary = make_inputs(40)
    mean = 0.002
    # Percent of the region's mean: 0 (none in reach), 0.5, 49.9, 50, 79.9, 80, 119.9, 120,
    # 150 and 300, then missing; classes by the limits 1, 50, 80, 120, 150 (value < limit).
    percents = [0, 0.5, 49.9, 50, 79.9, 80, 119.9, 120, 150, 300, np.nan]
    access = np.full(len(areas), mean)
    access[: len(percents)] = np.array(percents) / 100 * mean
    areas["access"] = access
    summary = {
        **summary,
        "access": {"method": "2SFCA", "catchment_m": 10_000.0, "region_mean": mean},
    }
    info = build_map(
        areas,
        id_column="geoid",
        groups=GROUPS,
        reference=REFERENCE,
        footprint=footprint,
        summary=summary,
        title="t",
        path=tmp_path / "m.html",
    )
    # Hand classes: 0 -> none; 0.5 and 49.9 -> "< 50%"; 50 and 79.9 -> "50-80%"; 80 and
    # 119.9 -> "80-120%"; 120 -> "120-150%"; 150 and 300 -> ">= 150%".
    expected = [0, 1, 1, 2, 2, 3, 3, 4, 5, 5]
    return info, areas, expected


def test_map_offers_an_access_view(tmp_path):
    from coverage_audit.report.access_sections import ACCESS_COLORS

    from .test_map import page_data, relative_luminance

    info, _, _ = _access_map(tmp_path)
    assert "access" in info.views
    data = page_data(Path(info.path).read_text(encoding="utf-8"))
    assert data["fields"]["acc"][:11] == [0, 1, 49, 50, 79, 80, 119, 120, 150, 300, None]
    view = next(v for v in data["views"] if v["key"] == "access")
    assert view["thresholds"] == [1, 50, 80, 120, 150] and view["has_missing"]
    lum = [relative_luminance(c) for c in ACCESS_COLORS]
    assert all(a > b for a, b in zip(lum, lum[1:], strict=False))  # light to dark


@pytest.mark.browser
def test_access_view_colours_in_the_browser(tmp_path, browser_page):
    from coverage_audit.report.access_sections import ACCESS_COLORS

    from .test_map import READY

    info, areas, expected = _access_map(tmp_path)
    browser_page.open(info.path, ready=READY)
    colours = browser_page.js(
        "var out = []; for (var i = 0; i < 10; i++) "
        "out.push(coverageAuditMap.colourOf('access', i)); return out;"
    )
    assert colours == [ACCESS_COLORS[k] for k in expected]
    text = browser_page.js(
        "coverageAuditMap.showArea(4); return document.querySelector('[data-area]').textContent"
    )
    assert "Access (% of region's mean)79%" in text.replace("\n", "")
    assert browser_page.console_errors() == []


def test_cli_prints_one_error_line(tmp_path, capsys):
    from coverage_audit.cli import main

    spec = _hand_region(tmp_path, 'catchment = "10 km"\ncapacity = "beds"\n')
    assert main(["run", str(spec), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err
    errors = [line for line in err.splitlines() if line.startswith("error: ")]
    assert len(errors) == 1 and "'beds'" in errors[0] and "Traceback" not in err


def test_access_finding_sentence():
    # Literal summary: the finding quotes the ratio and the low-access share as given.
    from coverage_audit.accessibility import access_findings

    summary = {
        "group_labels": {"white": "White", "black": "Black"},
        "access": {
            "method": "E2SFCA",
            "catchment_m": 15000.0,
            "reference_group": "white",
            "low_access_fraction": 0.5,
            "groups": {
                "white": {"mean_access": 0.002, "ratio": 1.0, "share_low_access": 0.1},
                "black": {"mean_access": 0.0016, "ratio": 0.8, "share_low_access": 0.25},
            },
        },
    }
    (finding,) = access_findings(summary)
    assert finding.sentence == (
        "Access to capacity (E2SFCA, catchment 15 km): mean access of Black people is 0.80 "
        "times that of White people; 25.0% of them live where access is below 50% of the "
        "region's mean."
    )
    # Exactly four-fifths is not below it: not salient.
    assert not finding.salient
    summary["access"]["groups"]["black"]["ratio"] = 0.79
    assert access_findings(summary)[0].salient
