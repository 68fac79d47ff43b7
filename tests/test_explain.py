"""Tests of coverage_audit.explain: controlled models, rule discovery, threshold sensitivity."""

from __future__ import annotations

import json
import warnings

import esda
import geopandas as gpd
import libpysal
import numpy as np
import pandas as pd
import pytest
from libpysal.graph import Graph
from scipy import optimize, stats
from sklearn.linear_model import LogisticRegression

from coverage_audit import synthetic
from coverage_audit.clustering import moran
from coverage_audit.errors import AnalysisError, SpecError
from coverage_audit.explain import (
    DEFAULT_THRESHOLDS,
    MINORITY_STEP,
    DroppedRowsWarning,
    SmallSampleWarning,
    discover_rules,
    exclusion_models,
    moran_randomisation,
    sensitivity_thresholds,
)
from coverage_audit.weights import build_area_graph

SEED = 20240611
#: Agreement between two exact optimisers of the same likelihood.
COEF_TOL = 1e-6
#: Agreement of closed-form statistics computed two ways.
EXACT_TOL = 1e-10


def _logistic(x):
    return 1.0 / (1.0 + np.exp(-x))


def _simulated_table(n=4000, seed=SEED):
    """Areas whose odds of being unserved follow a known logistic model."""
    rng = np.random.default_rng(seed)
    minority = rng.uniform(0.0, 1.0, n)
    income = rng.normal(100.0, 30.0, n)
    beta = {"intercept": -1.0, "minority_share_per_10pp": 0.25, "income_ratio": -0.02}
    eta = (
        beta["intercept"]
        + beta["minority_share_per_10pp"] * minority / MINORITY_STEP
        + beta["income_ratio"] * (income - 100.0)
    )
    unserved = rng.uniform(size=n) < _logistic(eta)
    # Uncovered share with mean logistic(eta): a Beta draw around that mean.
    mean = _logistic(eta)
    uncovered = rng.beta(8.0 * mean, 8.0 * (1.0 - mean))
    table = pd.DataFrame(
        {
            "geoid": [f"99001{k:06d}" for k in range(n)],
            "served": ~unserved,
            "covered_fraction": 1.0 - uncovered,
            "minority_share": minority,
            # Centred so that the simulated intercept is the model's intercept.
            "income_ratio": income - 100.0,
        }
    )
    return table, beta


def _newton_logit(x, y, iterations=100):
    """Hand-coded Newton-Raphson for the logistic (or Bernoulli quasi-) likelihood."""
    beta = np.zeros(x.shape[1])
    for _ in range(iterations):
        mu = _logistic(x @ beta)
        step = np.linalg.solve(x.T @ (x * (mu * (1 - mu))[:, None]), x.T @ (y - mu))
        beta += step
        if np.abs(step).max() < 1e-14:
            break
    return beta


def _design(table, controls=("income_ratio",)):
    cols = [np.ones(len(table)), table["minority_share"].to_numpy() / MINORITY_STEP]
    cols += [table[c].to_numpy(dtype=float) for c in controls]
    return np.column_stack(cols)


# --------------------------------------------------------------------------------------
# Logistic regression of unserved
# --------------------------------------------------------------------------------------


def test_logit_recovers_simulated_coefficients_within_ci():
    table, beta = _simulated_table()
    result = exclusion_models(table, controls=["income_ratio"], id_column="geoid")
    fit = result.models["unserved_with_controls"]
    for name, true in beta.items():
        term = fit.term(name)
        # The simulation's true odds ratio lies inside the 95 % Wald interval.
        assert term.ci_low < np.exp(true) < term.ci_high, name


def test_logit_matches_sklearn_and_hand_newton():
    table, _ = _simulated_table(n=1500, seed=SEED + 1)
    result = exclusion_models(table, controls=["income_ratio"], id_column="geoid")
    ours = np.array([t.coefficient for t in result.models["unserved_with_controls"].terms])
    x = _design(table)
    y = (~table["served"]).to_numpy(dtype=float)
    # Independent oracle 1: scikit-learn without penalty (C=inf), exact Newton solver.
    sk = LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    sk.fit(x[:, 1:], y)
    np.testing.assert_allclose(ours, np.r_[sk.intercept_, sk.coef_[0]], rtol=0, atol=COEF_TOL)
    # Independent oracle 2: hand-coded Newton iteration.
    beta = _newton_logit(x, y)
    np.testing.assert_allclose(ours, beta, rtol=0, atol=COEF_TOL)
    # Model-based standard errors are the inverse information (handbook formula).
    mu = _logistic(x @ beta)
    cov = np.linalg.inv(x.T @ (x * (mu * (1 - mu))[:, None]))
    se = np.array([t.std_error for t in result.models["unserved_with_controls"].terms])
    np.testing.assert_allclose(se, np.sqrt(np.diag(cov)), rtol=1e-7)
    # McFadden's pseudo R-squared against statsmodels' own (numerically refitted) null.
    import statsmodels.api as sm

    oracle = sm.Logit(y, x).fit(disp=0)
    assert result.models["unserved_with_controls"].pseudo_r2 == pytest.approx(
        oracle.prsquared, rel=1e-7
    )
    # Odds ratios and Wald intervals from the textbook definitions.
    term = result.models["unserved_with_controls"].terms[1]
    z = stats.norm.ppf(0.975)
    assert term.odds_ratio == pytest.approx(np.exp(beta[1]), rel=1e-9)
    assert term.ci_low == pytest.approx(np.exp(beta[1] - z * se[1]), rel=1e-9)
    assert term.p_value == pytest.approx(2 * stats.norm.sf(abs(beta[1] / se[1])), rel=1e-6)


def test_minority_only_model_and_change_in_odds_ratio():
    table, _ = _simulated_table(n=1500, seed=SEED + 2)
    # Make the control carry part of the minority effect so the ratio must move.
    table["income_ratio"] = table["income_ratio"] - 40.0 * table["minority_share"]
    result = exclusion_models(table, controls=["income_ratio"], id_column="geoid")
    alone = result.models["unserved_minority_only"]
    assert [t.name for t in alone.terms] == ["intercept", "minority_share_per_10pp"]
    beta = _newton_logit(_design(table, controls=()), (~table["served"]).to_numpy(dtype=float))
    np.testing.assert_allclose([t.coefficient for t in alone.terms], beta, atol=COEF_TOL)
    change = result.minority_change[0]
    assert change.kind == "logit"
    assert change.odds_ratio_alone == pytest.approx(alone.terms[1].odds_ratio, rel=1e-12)
    with_c = result.models["unserved_with_controls"].terms[1].odds_ratio
    assert change.ratio == pytest.approx(with_c / change.odds_ratio_alone, rel=1e-12)
    assert change.percent_change == pytest.approx(100 * (change.ratio - 1), rel=1e-12)
    assert change.percent_change < -5  # controls absorb part of the raw association
    data = result.to_dict()
    json.dumps(data, allow_nan=False)
    assert "NOT being served" in data["outcome_note"]
    assert "10 percentage points" in data["scale_note"]
    assert set(data["models"]) == {
        "unserved_minority_only",
        "uncovered_minority_only",
        "unserved_with_controls",
        "uncovered_with_controls",
    }


def test_no_controls_fits_only_minority_models():
    table, _ = _simulated_table(n=600, seed=SEED + 3)
    result = exclusion_models(table, id_column="geoid")
    assert set(result.models) == {"unserved_minority_only", "uncovered_minority_only"}
    assert result.minority_change == ()


def test_categorical_control_coded_against_most_frequent_level():
    table, _ = _simulated_table(n=1200, seed=SEED + 4)
    rng = np.random.default_rng(SEED)
    table["income_tier"] = rng.choice(
        ["low", "moderate", "middle", "upper"], len(table), p=[0.2, 0.2, 0.4, 0.2]
    )
    result = exclusion_models(table, controls=["income_tier"], id_column="geoid")
    assert result.category_references == {"income_tier": "middle"}
    assert result.design_columns == (
        "intercept",
        "minority_share_per_10pp",
        "income_tier[low]",
        "income_tier[moderate]",
        "income_tier[upper]",
    )
    dummies = np.column_stack(
        [(table["income_tier"] == lv).to_numpy(float) for lv in ("low", "moderate", "upper")]
    )
    x = np.column_stack([_design(table, controls=()), dummies])
    beta = _newton_logit(x, (~table["served"]).to_numpy(dtype=float))
    ours = [t.coefficient for t in result.models["unserved_with_controls"].terms]
    np.testing.assert_allclose(ours, beta, atol=COEF_TOL)
    chosen = exclusion_models(
        table,
        controls=["income_tier"],
        id_column="geoid",
        category_references={"income_tier": "low"},
    )
    assert "income_tier[middle]" in chosen.design_columns


# --------------------------------------------------------------------------------------
# Fractional logit of the uncovered share
# --------------------------------------------------------------------------------------


def _bernoulli_quasi_ll(beta, x, y):
    eta = x @ beta
    # log(mu) = -log(1 + e^-eta), log(1 - mu) = -log(1 + e^eta)
    return -np.sum(y * np.logaddexp(0, -eta) + (1 - y) * np.logaddexp(0, eta))


def test_fractional_logit_matches_scipy_and_sandwich():
    table, _ = _simulated_table(n=1500, seed=SEED + 5)
    result = exclusion_models(table, controls=["income_ratio"], id_column="geoid")
    fit = result.models["uncovered_with_controls"]
    x = _design(table)
    y = 1.0 - table["covered_fraction"].to_numpy()
    # Oracle: scipy maximisation of the Bernoulli quasi-log-likelihood (Papke and
    # Wooldridge 1996, eq. 3.3), with its analytic gradient.
    opt = optimize.minimize(
        lambda b: -_bernoulli_quasi_ll(b, x, y),
        np.zeros(x.shape[1]),
        jac=lambda b: -(x.T @ (y - _logistic(x @ b))),
        method="BFGS",
        options={"gtol": 1e-11, "maxiter": 10_000},
    )
    ours = np.array([t.coefficient for t in fit.terms])
    np.testing.assert_allclose(ours, opt.x, atol=COEF_TOL)
    np.testing.assert_allclose(ours, _newton_logit(x, y), atol=COEF_TOL)
    # Robust sandwich A^-1 B A^-1 (Papke and Wooldridge 1996, sec. 3).
    mu = _logistic(x @ ours)
    a_inv = np.linalg.inv(x.T @ (x * (mu * (1 - mu))[:, None]))
    b = x.T @ (x * ((y - mu) ** 2)[:, None])
    hc0 = a_inv @ b @ a_inv
    np.testing.assert_allclose([t.std_error for t in fit.terms], np.sqrt(np.diag(hc0)), rtol=1e-7)
    assert fit.covariance == "HC0"
    hc1 = exclusion_models(table, controls=["income_ratio"], id_column="geoid", robust="HC1")
    n, k = x.shape
    np.testing.assert_allclose(
        [t.std_error for t in hc1.models["uncovered_with_controls"].terms],
        np.sqrt(np.diag(hc0) * n / (n - k)),
        rtol=1e-7,
    )
    assert fit.log_likelihood == pytest.approx(_bernoulli_quasi_ll(ours, x, y), rel=1e-9)


# --------------------------------------------------------------------------------------
# Moran's I of the residuals
# --------------------------------------------------------------------------------------


def test_moran_randomisation_columbus_check_values():
    frame = gpd.read_file(libpysal.examples.get_path("columbus.shp"))
    graph = Graph.build_contiguity(frame, rook=False).transform("r")
    i, ei, vi, z, p = moran_randomisation(frame["CRIME"].to_numpy(), graph.sparse)
    # REFERENCES.md: Columbus CRIME, queen, row-standardised (Anselin 1988).
    assert i == pytest.approx(0.500188557, abs=1e-9)
    assert ei == pytest.approx(-1 / 48, abs=1e-12)
    assert vi == pytest.approx(0.008689289, abs=1e-9)
    assert z == pytest.approx(5.5894, abs=1e-4)
    # Oracle: esda's Moran under randomisation.
    mi = esda.Moran(frame["CRIME"].to_numpy(), graph, permutations=0)
    np.testing.assert_allclose(
        [i, ei, vi, z, p], [mi.I, mi.EI, mi.VI_rand, mi.z_rand, mi.p_rand], rtol=EXACT_TOL
    )


def _spatial_table(seed, clustered):
    cells = synthetic.tessellation(400, seed=seed)
    rng = np.random.default_rng(seed)
    n = len(cells)
    minority = rng.uniform(0, 1, n)
    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    hidden = synthetic.smooth_field(
        x,
        y,
        np.array([[0.3 * x.max(), 0.3 * y.max()], [0.8 * x.max(), 0.7 * y.max()]]),
        np.array([0.15, 0.15]) * x.max(),
        np.array([3.0, -3.0]),
    )
    eta = -0.5 + 0.2 * minority / MINORITY_STEP + (hidden if clustered else 0.0)
    unserved = rng.uniform(size=n) < _logistic(eta)
    mean = _logistic(eta)
    table = pd.DataFrame(
        {
            "geoid": cells["geoid"],
            "served": ~unserved,
            "covered_fraction": 1 - rng.beta(10 * mean, 10 * (1 - mean)),
            "minority_share": minority,
        }
    )
    return cells, table


def test_residual_moran_matches_esda_and_flags_hidden_space():
    cells, table = _spatial_table(SEED, clustered=True)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a clean tessellation has no islands
        area_graph = build_area_graph(cells.geometry.to_numpy(), cells["geoid"])
    result = exclusion_models(table, id_column="geoid", weights=area_graph)
    fit = result.models["unserved_minority_only"]
    x = _design(table, controls=())
    y = (~table["served"]).to_numpy(dtype=float)
    mu = _logistic(x @ _newton_logit(x, y))
    pearson = (y - mu) / np.sqrt(mu * (1 - mu))
    mi = esda.Moran(pearson, area_graph.stats_graph("r"), permutations=0)
    moran = fit.residual_moran
    assert moran.I == pytest.approx(mi.I, rel=1e-7)
    assert moran.z_rand == pytest.approx(mi.z_rand, rel=1e-6)
    assert moran.space_not_accounted_for and moran.z_rand > 1.96
    assert result.models["uncovered_minority_only"].residual_moran.space_not_accounted_for


def test_moran_p_values_have_one_convention():
    # Issue 9 item 7: every p_rand / p_norm key is one-sided (direction of z), every
    # *_two_sided key two-sided, in the global and the residual Moran alike.
    # Oracle: esda.Moran with two_tailed=False (one-sided) and two_tailed=True (two-sided).
    cells, table = _spatial_table(SEED, clustered=True)
    area_graph = build_area_graph(cells.geometry.to_numpy(), cells["geoid"])
    result = exclusion_models(table, id_column="geoid", weights=area_graph)
    residual = result.models["unserved_minority_only"].residual_moran.to_dict()
    x = _design(table, controls=())
    y = (~table["served"]).to_numpy(dtype=float)
    mu = _logistic(x @ _newton_logit(x, y))
    pearson = (y - mu) / np.sqrt(mu * (1 - mu))
    graph = area_graph.stats_graph("r")
    one = esda.Moran(pearson, graph, permutations=0, two_tailed=False)
    two = esda.Moran(pearson, graph, permutations=0, two_tailed=True)
    assert residual["p_rand"] == pytest.approx(one.p_rand, rel=1e-6)
    assert residual["p_rand_two_sided"] == pytest.approx(two.p_rand, rel=1e-6)
    glob = moran(pearson, area_graph, permutations=0).to_dict()
    assert glob["p_rand"] == pytest.approx(one.p_rand, rel=1e-6)
    assert glob["p_norm"] == pytest.approx(one.p_norm, rel=1e-6)
    assert glob["p_rand_two_sided"] == pytest.approx(two.p_rand, rel=1e-6)
    assert glob["p_norm_two_sided"] == pytest.approx(two.p_norm, rel=1e-6)
    # One implementation: the residual statistic is the global one on the same values.
    assert residual["I"] == pytest.approx(glob["I"], rel=1e-12)
    assert residual["z_rand"] == pytest.approx(glob["z_rand"], rel=1e-12)


def test_residual_moran_quiet_without_hidden_space_and_aligns_by_id():
    cells, table = _spatial_table(SEED + 7, clustered=False)
    graph = Graph.build_contiguity(cells.set_index("geoid"), rook=False)
    result = exclusion_models(table, id_column="geoid", weights=graph)
    base = result.models["unserved_minority_only"].residual_moran
    assert not base.space_not_accounted_for and abs(base.z_rand) < 1.96
    # The same weights given in shuffled order, or as a matrix in table order, agree.
    shuffled = table.sample(frac=1.0, random_state=SEED).reset_index(drop=True)
    again = exclusion_models(shuffled, id_column="geoid", weights=graph)
    assert again.models["unserved_minority_only"].residual_moran.I == pytest.approx(
        base.I, rel=1e-9
    )
    matrix = graph.transform("r").sparse  # unique_ids follow the table's order here
    assert list(graph.unique_ids) == list(table["geoid"])
    by_matrix = exclusion_models(table, id_column="geoid", weights=matrix)
    assert by_matrix.models["unserved_minority_only"].residual_moran.I == pytest.approx(
        base.I, rel=1e-9
    )


def test_weights_errors():
    _, table = _spatial_table(SEED, clustered=False)
    with pytest.raises(AnalysisError, match=r"weights matrix is 3 x 3 but the table has \d+ rows"):
        exclusion_models(table, id_column="geoid", weights=np.eye(3))
    cells = synthetic.tessellation(9, seed=SEED)
    foreign = Graph.build_contiguity(
        cells.set_index(cells["geoid"].str.replace("99001", "88001")), rook=False
    )
    with pytest.raises(AnalysisError, match="ids are not area ids"):
        exclusion_models(table, id_column="geoid", weights=foreign)


# --------------------------------------------------------------------------------------
# Error paths of the models
# --------------------------------------------------------------------------------------


def _small_table(n=60, seed=SEED):
    rng = np.random.default_rng(seed)
    minority = rng.uniform(0, 1, n)
    unserved = rng.uniform(size=n) < _logistic(-1 + 2.5 * minority)
    return pd.DataFrame(
        {
            "geoid": [f"a{k}" for k in range(n)],
            "served": ~unserved,
            "covered_fraction": np.clip(1 - minority + rng.normal(0, 0.2, n), 0, 1),
            "minority_share": minority,
            "c1": rng.normal(size=n),
            "c2": rng.normal(size=n),
        }
    )


def test_missing_control_lists_available_columns():
    with pytest.raises(
        AnalysisError, match=r"\['median_rent'\] are not in the area table; available columns: .*c1"
    ):
        exclusion_models(_small_table(), controls=["median_rent"], id_column="geoid")


def test_complete_separation_is_an_error():
    table = _small_table()
    table["served"] = table["minority_share"] < 0.5
    with pytest.raises(
        AnalysisError,
        match=r"cannot be estimated: the outcome is perfectly separated .*no overlap.*; 60 area",
    ):
        exclusion_models(table, id_column="geoid")


def test_quasi_separation_is_an_error():
    table = _small_table()
    table["served"] = table["minority_share"] < 0.5
    # Two areas exactly on the boundary with opposite outcomes: overlap at one point only.
    table.loc[[0, 1], "minority_share"] = 0.5
    table.loc[0, "served"], table.loc[1, "served"] = True, False
    with pytest.raises(AnalysisError, match="quasi-perfectly separated .*they only touch"):
        exclusion_models(table, id_column="geoid")


def test_separation_by_a_control_names_it():
    table = _small_table()
    table["c1"] = np.where(table["served"], -1.0, 1.0) * (1 + np.abs(table["c1"]))
    with pytest.raises(AnalysisError, match=r"separated by .*c1"):
        exclusion_models(table, controls=["c1"], id_column="geoid")


def test_separation_of_the_fractional_outcome():
    table = _small_table()
    table["covered_fraction"] = (table["minority_share"] < 0.5).astype(float)
    with pytest.raises(AnalysisError, match=r"uncovered share .*cannot be estimated"):
        exclusion_models(table, id_column="geoid")


def test_collinear_controls_are_named():
    table = _small_table()
    table["c3"] = 2.0 * table["c1"] - 0.5 * table["c2"]
    with pytest.raises(AnalysisError, match=r'collinear: "c1", "c2", "c3" are linearly dependent'):
        exclusion_models(table, controls=["c1", "c2", "c3"], id_column="geoid")
    table["const"] = 7.0
    with pytest.raises(AnalysisError, match=r'collinear: "intercept", "const"'):
        exclusion_models(table, controls=["const"], id_column="geoid")


def test_constant_minority_share_is_an_error():
    table = _small_table()
    table["minority_share"] = 0.3
    with pytest.raises(AnalysisError, match="minority_share is the same in every area"):
        exclusion_models(table, id_column="geoid")


def test_too_few_areas_is_an_error():
    table = _small_table(n=4)
    with pytest.raises(
        AnalysisError, match=r"only 4 area\(s\) .* 4 parameters .* at least 6 areas are needed"
    ):
        exclusion_models(table, controls=["c1", "c2"], id_column="geoid")


def test_few_events_per_parameter_warns():
    table = _small_table(n=40, seed=SEED + 9)
    with pytest.warns(SmallSampleWarning, match=r"per predictor; fewer than 10"):
        result = exclusion_models(table, controls=["c1", "c2"], id_column="geoid")
    assert result.events_per_parameter < 10


def test_constant_outcome_is_an_error():
    table = _small_table()
    table["served"] = True
    with pytest.raises(AnalysisError, match="every one of the 60 areas is served"):
        exclusion_models(table, id_column="geoid")
    table["served"] = _small_table()["served"]
    table["covered_fraction"] = 0.5
    with pytest.raises(AnalysisError, match="covered_fraction is 0.5 in every area"):
        exclusion_models(table, id_column="geoid")


def test_out_of_range_values_are_errors():
    table = _small_table()
    table.loc[3, "minority_share"] = 57.0
    with pytest.raises(
        AnalysisError,
        match=r"minority_share must be a fraction .* 57 in area a3 \(if it is a percent",
    ):
        exclusion_models(table, id_column="geoid")
    table = _small_table()
    table["served"] = table["served"].astype(int) * 2
    with pytest.raises(AnalysisError, match="served must be true/false"):
        exclusion_models(table, id_column="geoid")
    table = _small_table()
    table.loc[0, "covered_fraction"] = 1.5
    with pytest.raises(AnalysisError, match="covered_fraction must be a fraction between 0 and 1"):
        exclusion_models(table, id_column="geoid")


def test_bad_rows_are_dropped_and_reported():
    table = _small_table(n=200)
    table["c1"] = table["c1"].astype(object)
    table.loc[5, "c1"] = "n/a"
    table.loc[7, "c1"] = np.nan
    table.loc[9, "minority_share"] = np.nan
    table.loc[11, "c1"] = np.inf
    with pytest.warns(DroppedRowsWarning, match=r"4 row\(s\) left out"):
        result = exclusion_models(table, controls=["c1"], id_column="geoid")
    assert [(d.id, d.reason) for d in result.dropped] == [
        ("a5", "c1: not a number"),
        ("a7", "c1: missing"),
        ("a9", "minority_share: missing"),
        ("a11", "c1: not finite"),
    ]
    assert result.n_areas == 196
    assert result.to_dict()["dropped_rows"][0] == {
        "id": "a5",
        "row": 5,
        "reason": "c1: not a number",
    }
    kept = table.drop(index=[5, 7, 9, 11]).astype({"c1": float})
    x = np.column_stack([_design(kept, controls=()), kept["c1"].to_numpy()])
    beta = _newton_logit(x, (~kept["served"]).to_numpy(dtype=float))
    np.testing.assert_allclose(
        [t.coefficient for t in result.models["unserved_with_controls"].terms], beta, atol=COEF_TOL
    )


def test_option_errors():
    table = _small_table()
    with pytest.raises(SpecError, match=r'robust was "HC3"'):
        exclusion_models(table, robust="HC3")
    with pytest.raises(AnalysisError, match="repeat a column"):
        exclusion_models(table, controls=["c1", "c1"])
    with pytest.raises(
        AnalysisError, match=r"categorical columns \['c2'\] are not among the controls"
    ):
        exclusion_models(table, controls=["c1"], categorical=["c2"])
    table["zone"] = np.where(table["c2"] > 0, "north", "south")
    with pytest.raises(
        AnalysisError, match=r'reference level "east" of control "zone" does not occur'
    ):
        exclusion_models(table, controls=["zone"], category_references={"zone": "east"})
    table["label"] = [f"x{k}" for k in range(len(table))]
    with pytest.raises(AnalysisError, match=r'"label" has 60 distinct non-numeric values'):
        exclusion_models(table, controls=["label"])


# --------------------------------------------------------------------------------------
# Rule discovery
# --------------------------------------------------------------------------------------


def _rule_table():
    """Twenty hand-made areas: protected A, income tier, zone, outcome unserved."""
    mm = [1, 1, 1, 1, 1, 1, 1, 1, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0]
    tier = ["moderate"] * 4 + ["middle"] * 4 + ["moderate"] * 6 + ["middle"] * 6
    zone = ["n", "s"] * 10
    unserved = [1, 1, 1, 0, 1, 0, 0, 0, 1, 0, 0, 0, 0, 0, 1, 1, 0, 0, 0, 0]
    pop = np.arange(1, 21) * 100.0
    return pd.DataFrame(
        {
            "geoid": [f"t{k:02d}" for k in range(20)],
            "majority_minority": np.array(mm, dtype=bool),
            "income_tier": tier,
            "zone": zone,
            "served": ~np.array(unserved, dtype=bool),
            "population": pop,
        }
    )


def _measures(t, context, weight=None):
    """Confidences from the published definitions (Pedreschi, Ruggieri and Turini 2008)."""
    w = np.ones(len(t)) if weight is None else t[weight].to_numpy()
    a = t["majority_minority"].to_numpy()
    c = ~t["served"].to_numpy()
    b = np.ones(len(t), dtype=bool)
    for col, val in context:
        b &= (t[col] == val).to_numpy()
    conf = w[a & b & c].sum() / w[a & b].sum()
    base = w[b & c].sum() / w[b].sum()
    others = w[~a & b & c].sum() / w[~a & b].sum()
    return conf / base, conf / others, conf - others


def test_rule_measures_match_published_definitions():
    t = _rule_table()
    result = discover_rules(t, conditions=["zone"], max_length=3, min_support=1, top=None)
    by_context = {r.context: r for r in result.rules}
    cases = {
        (): [],
        ("income_tier = moderate",): [("income_tier", "moderate")],
        ("income_tier = middle",): [("income_tier", "middle")],
        ("zone = n",): [("zone", "n")],
        ("income_tier = moderate", "zone = n"): [("income_tier", "moderate"), ("zone", "n")],
    }
    for key, context in cases.items():
        elift, slift, rd = _measures(t, context)
        rule = by_context[key]
        assert rule.elift == pytest.approx(elift, rel=1e-12), key
        assert rule.slift == pytest.approx(slift, rel=1e-12), key
        assert rule.risk_difference == pytest.approx(rd, rel=1e-12), key
    # By hand: moderate areas 0-3 (A) and 8-13 (not A); unserved 0,1,2 and 8.
    moderate = by_context[("income_tier = moderate",)]
    assert (moderate.premise_areas, moderate.premise_outcome_areas) == (4, 3)
    assert (moderate.context_areas, moderate.context_outcome_areas) == (10, 4)
    assert moderate.confidence == pytest.approx(3 / 4)
    assert moderate.context_confidence == pytest.approx(4 / 10)
    assert moderate.elift == pytest.approx((3 / 4) / (4 / 10))
    assert moderate.slift == pytest.approx((3 / 4) / (1 / 6))
    assert moderate.risk_difference == pytest.approx(3 / 4 - 1 / 6)
    assert moderate.support == pytest.approx(4 / 20)
    assert moderate.rule_support == pytest.approx(3 / 20)
    assert moderate.sentence == (
        "Areas that are majority-minority and moderate-income are unserved 1.9 times as often "
        "as areas that are moderate-income"
    )
    ranked = [r.elift for r in result.rules]
    assert ranked == sorted(ranked, reverse=True)
    json.dumps(result.to_dict(), allow_nan=False)


def test_population_weighted_rules():
    t = _rule_table()
    result = discover_rules(t, min_support=1, weight="population", top=None)
    rule = next(r for r in result.rules if r.context == ("income_tier = middle",))
    elift, slift, rd = _measures(t, [("income_tier", "middle")], weight="population")
    assert rule.elift == pytest.approx(elift, rel=1e-12)
    assert rule.slift == pytest.approx(slift, rel=1e-12)
    assert rule.risk_difference == pytest.approx(rd, rel=1e-12)
    assert rule.sentence.startswith(
        "Residents of areas that are majority-minority and middle-income live in unserved areas"
    )


def test_min_support_max_length_and_top():
    t = _rule_table()
    result = discover_rules(t, conditions=["zone"], max_length=2, min_support=3, top=None)
    assert all(r.premise_areas >= 3 and len(r.context) <= 1 for r in result.rules)
    # Contexts with 2 protected areas (e.g. moderate and zone n) fall below the support.
    assert ("income_tier = moderate", "zone = n") not in {r.context for r in result.rules}
    share = discover_rules(t, conditions=["zone"], min_support=0.25, top=2)
    assert share.min_support_areas == 5 and len(share.rules) <= 2
    only_a = discover_rules(t, max_length=1, min_support=1)
    assert [r.context for r in only_a.rules] == [()]
    assert only_a.rules[0].sentence.endswith("as often as areas overall")


def test_majority_minority_derived_and_numeric_quartiles():
    t = _rule_table().drop(columns="majority_minority")
    t["minority_share"] = np.where(_rule_table()["majority_minority"], 0.7, 0.2)
    t.loc[0, "minority_share"] = 0.5  # exactly one half is not above the cut
    t["households"] = np.arange(20) * 10.0
    result = discover_rules(t, conditions=["households"], min_support=1, top=None)
    assert result.n_protected == 7
    assert any("minority_share > 0.5" in n for n in result.notes)
    assert result.conditions["households"] == ("Q1", "Q2", "Q3", "Q4")
    # Quartile membership as pandas.qcut assigns it (independent binning).
    codes = pd.qcut(t["households"], 4, labels=False)
    rule = next(r for r in result.rules if r.context == ("households = Q2",))
    assert rule.context_areas == int((codes == 1).sum())


def test_density_conditions_from_area():
    t = _rule_table()
    t["area_km2"] = np.linspace(1.0, 4.0, 20)
    result = discover_rules(t, min_support=1, top=None)
    assert result.conditions["density"] == ("Q1", "Q2", "Q3", "Q4")
    density = t["population"] / t["area_km2"]
    codes = pd.qcut(density, 4, labels=False)
    rule = next(r for r in result.rules if r.context == ("density = Q1",))
    assert rule.context_areas == int((codes == 0).sum())
    assert "lowest quarter by population density" in rule.sentence


@pytest.mark.parametrize(
    ("change", "reason"),
    [
        (lambda t: t.assign(served=True), "no area is unserved"),
        (lambda t: t.assign(served=False), "every area is unserved"),
        (lambda t: t.assign(majority_minority=False), "no area is majority-minority"),
        (lambda t: t.assign(majority_minority=True), "every area is majority-minority"),
    ],
)
def test_degenerate_rules_give_reason(change, reason):
    result = discover_rules(change(_rule_table()), min_support=1)
    assert result.rules == ()
    assert reason in result.reason
    assert result.to_dict()["rules"] == []


def test_rule_errors():
    t = _rule_table()
    with pytest.raises(
        AnalysisError, match=r"condition column\(s\) \['county'\] are not in the area table"
    ):
        discover_rules(t, conditions=["county"])
    with pytest.raises(
        AnalysisError, match=r'protected column "black_majority" is not in the area table'
    ):
        discover_rules(t, protected="black_majority")
    with pytest.raises(AnalysisError, match='outcome column "denied"'):
        discover_rules(t, outcome="denied")
    with pytest.raises(SpecError, match="max_length was 5"):
        discover_rules(t, max_length=5)
    with pytest.raises(SpecError, match="min_support was 1.5"):
        discover_rules(t, min_support=1.5)
    with pytest.raises(SpecError, match='weight was "households"'):
        discover_rules(t, weight="households")
    with pytest.raises(SpecError, match="top was 0"):
        discover_rules(t, top=0)
    with pytest.raises(AnalysisError, match="majority_minority must be true/false"):
        discover_rules(t.assign(majority_minority=2))


# --------------------------------------------------------------------------------------
# Threshold sensitivity
# --------------------------------------------------------------------------------------


def test_sensitivity_is_monotone_and_matches_direct_rates():
    rng = np.random.default_rng(SEED)
    n = 500
    cf = rng.uniform(0, 1, n)
    counts = {"white_nh": rng.integers(0, 3000, n), "black": rng.integers(0, 3000, n) * (cf < 0.6)}
    rows = sensitivity_thresholds(cf, counts, "white_nh")
    assert [r.threshold for r in rows] == pytest.approx(np.linspace(0.25, 0.75, 11))
    shares = [r.served_area_share for r in rows]
    assert all(a >= b for a, b in zip(shares, shares[1:], strict=False))
    for g in counts:
        rates = [r.groups[g].served_area_rate for r in rows]
        assert all(a >= b for a, b in zip(rates, rates[1:], strict=False))
    for r in rows:
        served = cf >= r.threshold
        for g, c in counts.items():
            assert r.groups[g].served_area_rate == pytest.approx(
                c[served].sum() / c.sum(), rel=1e-12
            )
        ratio = r.groups["black"].served_area_rate / r.groups["white_nh"].served_area_rate
        assert r.groups["black"].ratio == pytest.approx(ratio, rel=1e-12)
        assert r.groups["black"].below_four_fifths == (ratio < 0.8)
    assert DEFAULT_THRESHOLDS[0] == 0.25 and DEFAULT_THRESHOLDS[-1] == 0.75
    json.dumps([r.to_dict() for r in rows], allow_nan=False)


def test_four_fifths_is_strict_and_highest_group_option():
    cf = np.array([1.0, 1.0, 0.0, 1.0, 0.0])
    counts = {
        "ref": np.array([5.0, 5.0, 0, 0, 0]),
        "g": np.array([0, 0, 1.0, 4.0, 0]),
        "h": np.array([0, 0, 0, 1.0, 0]),
    }
    (row,) = sensitivity_thresholds(cf, counts, "ref", [0.5])
    # 29 CFR 1607.4(D): "less than four-fifths"; exactly 4/5 is not flagged. g has 4 of 5
    # served against 10 of 10; the exact boundary with a float trap is in
    # test_four_fifths.py (3/5 against 3/4).
    assert row.groups["g"].ratio == pytest.approx(0.8)
    assert row.groups["g"].below_four_fifths is False
    trap = {"ref": np.array([3.0, 1.0, 0, 0, 0]), "g": np.array([0, 0, 2.0, 3.0, 0])}
    (row,) = sensitivity_thresholds(np.array([1.0, 0.0, 0.0, 1.0, 0.0]), trap, "ref", [0.5])
    assert row.groups["g"].ratio < 0.8  # 0.7999999999999999 in float, 4/5 by hand
    assert row.groups["g"].below_four_fifths is False
    (high,) = sensitivity_thresholds(
        cf, {**counts, "ref": np.array([5.0, 5.0, 5.0, 5.0, 0])}, "ref", [0.5], against="highest"
    )
    assert high.comparison_group == "h"
    assert high.groups["ref"].ratio == pytest.approx(0.75) and high.groups["ref"].below_four_fifths


def test_sensitivity_errors():
    cf = np.array([0.2, 0.8])
    counts = {"a": np.array([1.0, 2.0])}
    with pytest.raises(SpecError, match=r'reference group "b" is not among the groups \[\'a\'\]'):
        sensitivity_thresholds(cf, counts, "b")
    with pytest.raises(AnalysisError, match="counts have 3 areas but covered_fraction has 2"):
        sensitivity_thresholds(cf, {"a": np.ones(3)}, "a")
    with pytest.raises(SpecError, match=r"thresholds must be numbers in \(0, 1\]"):
        sensitivity_thresholds(cf, counts, "a", [0.0, 0.5])
    with pytest.raises(AnalysisError, match=r"1 covered fraction\(s\) are missing"):
        sensitivity_thresholds(np.array([np.nan, 0.5]), counts, "a")
    with pytest.raises(SpecError, match='against was "max"'):
        sensitivity_thresholds(cf, counts, "a", against="max")


def test_non_convergence_is_an_error(monkeypatch):
    # The separation check runs first; disabling it shows the fitting fallback still
    # turns a diverging likelihood into a plain error instead of huge odds ratios.
    import coverage_audit.stats.models as explain

    monkeypatch.setattr(explain, "_separation_direction", lambda x, y: None)
    table = _small_table()
    table["served"] = table["minority_share"] < 0.5
    with pytest.raises(AnalysisError, match="unserved_minority_only .* did not converge"):
        exclusion_models(table, id_column="geoid")


def test_more_weights_errors():
    cells, table = _spatial_table(SEED, clustered=False)
    other = synthetic.tessellation(16, seed=SEED, id_prefix="88001")
    with pytest.raises(AnalysisError, match="weights name areas that are not in the table"):
        exclusion_models(
            table,
            id_column="geoid",
            weights=build_area_graph(other.geometry.to_numpy(), other["geoid"]),
        )
    graph = Graph.build_contiguity(cells.set_index("geoid"), rook=False)
    doubled = table.assign(geoid=np.where(np.arange(len(table)) < 2, "same", table["geoid"]))
    with pytest.raises(AnalysisError, match="area ids repeat"):
        exclusion_models(doubled, id_column="geoid", weights=graph.subgraph(table["geoid"][2:]))


def test_term_lookup_error():
    table, _ = _simulated_table(n=500, seed=SEED + 11)
    fit = exclusion_models(table, id_column="geoid").models["unserved_minority_only"]
    with pytest.raises(KeyError, match='no term "income_ratio"'):
        fit.term("income_ratio")


def test_more_rule_errors():
    t = _rule_table()
    with pytest.raises(AnalysisError, match="weight population needs a population column"):
        discover_rules(t.drop(columns="population"), weight="population")
    with pytest.raises(AnalysisError, match="outcome unserved needs a served column"):
        discover_rules(t.drop(columns="served"))
    with pytest.raises(SpecError, match="min_support was True"):
        discover_rules(t, min_support=True)


def test_residual_moran_over_kept_rows_only():
    cells, table = _spatial_table(SEED + 3, clustered=True)
    table["minority_share"] = table["minority_share"].astype(float)
    table.loc[[4, 50, 51], "minority_share"] = np.nan
    graph = Graph.build_contiguity(cells.set_index("geoid"), rook=False).transform("r")
    with pytest.warns(DroppedRowsWarning):
        result = exclusion_models(table, id_column="geoid", weights=graph)
    kept = table.drop(index=[4, 50, 51])
    x = _design(kept, controls=())
    y = (~kept["served"]).to_numpy(dtype=float)
    mu = _logistic(x @ _newton_logit(x, y))
    pearson = (y - mu) / np.sqrt(mu * (1 - mu))
    # Oracle: esda on libpysal's subgraph of the kept areas, row-standardised afresh.
    sub = Graph.build_contiguity(cells.set_index("geoid"), rook=False).subgraph(kept["geoid"])
    sub = sub.transform("r")
    assert list(sub.unique_ids) == list(kept["geoid"])
    mi = esda.Moran(pearson, sub, permutations=0)
    moran = result.models["unserved_minority_only"].residual_moran
    assert moran.n == len(kept)
    assert moran.I == pytest.approx(mi.I, rel=1e-7)
    assert moran.VI_rand == pytest.approx(mi.VI_rand, rel=1e-7)
