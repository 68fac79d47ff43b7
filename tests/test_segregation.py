"""Tests of coverage_audit.segregation against published formulas, hand-worked examples,
the bundled libpysal ``sids2`` data with PySAL segregation as an oracle, and the exact
randomisation distribution of the gap test."""

from __future__ import annotations

import itertools
import json
import math
import warnings
from fractions import Fraction

import numpy as np
import pyogrio
import pytest
from libpysal import examples
from numpy.testing import assert_allclose, assert_array_equal

from coverage_audit.errors import AnalysisError, DegenerateStatisticWarning, SpecError
from coverage_audit.segregation import (
    areal_coverage_dissimilarity,
    correlation_ratio,
    coverage_dissimilarity,
    coverage_gap_test,
    dissimilarity,
    dissimilarity_vs_rest,
    exposure,
    isolation,
    segregation_summary,
)
from coverage_audit.stats import coverage_gap as seg

SEED = 20240611
# Hand-worked values are exact decimals; only float rounding separates them from ours.
RTOL_EXACT = 1e-12
# Agreement with an independent implementation of the same formula (the brief's figure).
RTOL_ORACLE = 1e-9

# Worked example of /work/shared/REFERENCES.md (computed there from the published
# formulas): three areas, group x and total t.
REF_X = np.array([80.0, 20.0, 0.0])
REF_T = np.array([100.0, 100.0, 100.0])

# Our own two-group example, worked by hand:
#   x = (30, 10, 0, 10), X = 50   -> x/X = (.6, .2, 0, .2)
#   y = (10, 10, 30, 50), Y = 100 -> y/Y = (.1, .1, .3, .5)
#   D = 1/2 (.5 + .1 + .3 + .3) = 0.6                           (Duncan and Duncan 1955)
#   a third group o = (10, 0, 10, 40) makes t = (50, 20, 40, 100), T = 210
#   xPy* = .6*(10/50) + .2*(10/20) + 0 + .2*(50/100) = .12 + .1 + .1 = 0.32
#   xPx* = .6*(30/50) + .2*(10/20) + 0 + .2*(10/100) = .36 + .1 + .02 = 0.48
#   P = 50/210; eta^2 = (0.48 - 5/21) / (16/21) = 5.08 / 16 = 0.3175  (Massey-Denton 1988)
#   rest = t - x = (20, 10, 40, 90), R = 160 -> (.125, .0625, .25, .5625)
#   D vs rest = 1/2 (.475 + .1375 + .25 + .3625) = 0.6125 (not 0.6: x + y is not t)
#   served = (1, 0, 1, 0): rate_x = 30/50 = .6, rate_y = 40/100 = .4
#     coverage D = |.6 - .4| = 0.2; gap = rate_y - rate_x = -0.2
#   covered_fraction f = (1, .5, 0, .25): x covered = 30 + 5 + 0 + 2.5 = 37.5 -> .75,
#     y covered = 10 + 5 + 0 + 12.5 = 27.5 -> .275; areal coverage D = 0.475
HAND_X = np.array([30.0, 10.0, 0.0, 10.0])
HAND_Y = np.array([10.0, 10.0, 30.0, 50.0])
HAND_O = np.array([10.0, 0.0, 10.0, 40.0])
HAND_T = HAND_X + HAND_Y + HAND_O
HAND_SERVED = np.array([True, False, True, False])
HAND_FRACTION = np.array([1.0, 0.5, 0.0, 0.25])


@pytest.fixture(scope="module")
def sids2():
    # North Carolina counties, bundled in the libpysal wheel (no download).
    return pyogrio.read_dataframe(examples.get_path("sids2.shp"), read_geometry=False)


@pytest.fixture
def no_warnings():
    # Local to one test: any warning raised inside the block fails it.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        yield


# ------------------------------------------------------------------ worked examples


def test_reference_worked_example():
    # REFERENCES.md worked example, from Duncan-Duncan 1955 and Massey-Denton 1988.
    assert_allclose(dissimilarity_vs_rest(REF_X, REF_T), 0.70, rtol=RTOL_EXACT)
    assert_allclose(isolation(REF_X, REF_T), 0.68, rtol=RTOL_EXACT)
    assert_allclose(exposure(REF_X, REF_T - REF_X, REF_T), 0.32, rtol=RTOL_EXACT)
    assert_allclose(correlation_ratio(REF_X, REF_T), 0.52, rtol=RTOL_EXACT)


def test_hand_worked_two_group_example():
    # Values worked by hand in the comment above HAND_X.
    assert_allclose(dissimilarity(HAND_X, HAND_Y), 0.6, rtol=RTOL_EXACT)
    assert_allclose(dissimilarity(HAND_Y, HAND_X), 0.6, rtol=RTOL_EXACT)  # D is symmetric
    assert_allclose(exposure(HAND_X, HAND_Y, HAND_T), 0.32, rtol=RTOL_EXACT)
    assert_allclose(isolation(HAND_X, HAND_T), 0.48, rtol=RTOL_EXACT)
    assert_allclose(correlation_ratio(HAND_X, HAND_T), 0.3175, rtol=RTOL_EXACT)
    # Two-group D differs from D against the rest when x + y is not the total
    # (REFERENCES.md, Formulas).
    assert_allclose(dissimilarity_vs_rest(HAND_X, HAND_T), 0.6125, rtol=RTOL_EXACT)


def test_extremes_of_the_indices():
    # Duncan and Duncan 1955: D = 0 for identical distributions, 1 for complete
    # separation; Massey and Denton 1988: xPx* = eta^2 = 1 when fully apart, eta^2 = 0
    # when every area has the overall share.
    x = np.array([5.0, 0.0, 7.0, 0.0])
    y = np.array([0.0, 3.0, 0.0, 9.0])
    assert dissimilarity(x, y) == pytest.approx(1.0, rel=RTOL_EXACT)
    assert isolation(x, x + y) == pytest.approx(1.0, rel=RTOL_EXACT)
    assert correlation_ratio(x, x + y) == pytest.approx(1.0, rel=RTOL_EXACT)
    even_x = np.array([10.0, 20.0, 30.0])
    assert dissimilarity(even_x, 3 * even_x) == pytest.approx(0.0, abs=1e-15)
    assert correlation_ratio(even_x, 4 * even_x) == pytest.approx(0.0, abs=1e-15)
    assert isolation(even_x, 4 * even_x) == pytest.approx(0.25, rel=RTOL_EXACT)


def test_zero_population_area_contributes_nothing(no_warnings):
    # Policy (module docstring): an empty area is a 0/0 term taken as 0, so adding one
    # leaves every index unchanged and raises no warning.
    x = np.append(HAND_X, 0.0)
    y = np.append(HAND_Y, 0.0)
    t = np.append(HAND_T, 0.0)
    assert isolation(x, t) == pytest.approx(isolation(HAND_X, HAND_T), rel=RTOL_EXACT)
    assert exposure(x, y, t) == pytest.approx(0.32, rel=RTOL_EXACT)
    assert correlation_ratio(x, t) == pytest.approx(0.3175, rel=RTOL_EXACT)
    assert dissimilarity_vs_rest(x, t) == pytest.approx(0.6125, rel=RTOL_EXACT)


def test_single_area_is_fine(no_warnings):
    # One area: both groups are spread alike (D = 0) and xPx* is the area's share.
    assert dissimilarity([4.0], [6.0]) == 0.0
    assert isolation([4.0], [10.0]) == pytest.approx(0.4, rel=RTOL_EXACT)
    assert correlation_ratio([4.0], [10.0]) == pytest.approx(0.0, abs=1e-15)


# ------------------------------------------------------------- sids2 with an oracle


@pytest.mark.parametrize("year", ["74", "79"])
def test_sids2_against_pysal_segregation(sids2, year):
    from segregation.singlegroup import CorrelationR, Dissim, Interaction, Isolation

    group, total = f"NWBIR{year}", f"BIR{year}"
    x = sids2[group].to_numpy(dtype=float)
    t = sids2[total].to_numpy(dtype=float)
    # PySAL segregation 2.5 as an independent implementation (test-only oracle).
    kw = {"group_pop_var": group, "total_pop_var": total}
    assert_allclose(dissimilarity_vs_rest(x, t), Dissim(sids2, **kw).statistic, rtol=RTOL_ORACLE)
    assert_allclose(isolation(x, t), Isolation(sids2, **kw).statistic, rtol=RTOL_ORACLE)
    # segregation's Interaction is xPy* of the group to the rest of the total.
    assert_allclose(exposure(x, t - x, t), Interaction(sids2, **kw).statistic, rtol=RTOL_ORACLE)
    assert_allclose(correlation_ratio(x, t), CorrelationR(sids2, **kw).statistic, rtol=RTOL_ORACLE)


def test_sids2_two_group_equals_vs_rest_when_groups_make_the_total(sids2):
    # REFERENCES.md: the two forms agree exactly when the two groups make up the total.
    x = sids2["NWBIR74"].to_numpy(dtype=float)
    t = sids2["BIR74"].to_numpy(dtype=float)
    assert_allclose(dissimilarity(x, t - x), dissimilarity_vs_rest(x, t), rtol=RTOL_EXACT)
    # Massey and Denton 1988: with two groups, xPx* + xPy* = 1.
    assert_allclose(isolation(x, t) + exposure(x, t - x, t), 1.0, rtol=RTOL_EXACT)


# ----------------------------------------------------------- coverage dissimilarity


def test_coverage_dissimilarity_is_rate_difference():
    # Hand-worked above: served-area rates .6 and .4, areal-weighted rates .75 and .275.
    assert_allclose(coverage_dissimilarity(HAND_X, HAND_Y, HAND_SERVED), 0.2, rtol=RTOL_EXACT)
    assert_allclose(
        areal_coverage_dissimilarity(HAND_X, HAND_Y, HAND_FRACTION), 0.475, rtol=RTOL_EXACT
    )
    # Served given as the numbers 1 and 0 is the same as booleans.
    as_numbers = coverage_dissimilarity(HAND_X, HAND_Y, HAND_SERVED.astype(int))
    assert as_numbers == coverage_dissimilarity(HAND_X, HAND_Y, HAND_SERVED)
    # Whole-area fractions reduce the areal form to the served form.
    assert_allclose(
        areal_coverage_dissimilarity(HAND_X, HAND_Y, HAND_SERVED.astype(float)),
        0.2,
        rtol=RTOL_EXACT,
    )


def test_coverage_dissimilarity_random_cases_match_rate_difference():
    # D over two bins reduces to |a - b| (Duncan and Duncan 1955 with two bins).
    rng = np.random.default_rng(SEED)
    x = rng.integers(0, 500, 40).astype(float)
    y = rng.integers(0, 500, 40).astype(float)
    served = rng.random(40) < 0.4
    frac = rng.random(40)
    direct = abs(x[served].sum() / x.sum() - y[served].sum() / y.sum())
    areal = abs((x * frac).sum() / x.sum() - (y * frac).sum() / y.sum())
    assert_allclose(coverage_dissimilarity(x, y, served), direct, rtol=RTOL_EXACT)
    assert_allclose(areal_coverage_dissimilarity(x, y, frac), areal, rtol=RTOL_EXACT)


def test_covered_fraction_rounding_is_clipped():
    # Policy: overlay rounding within FRACTION_TOLERANCE is clipped to [0, 1].
    frac = np.array([1.0 + 1e-12, 0.5, -1e-12, 0.25])
    value = areal_coverage_dissimilarity(HAND_X, HAND_Y, frac)
    assert_allclose(value, 0.475, rtol=1e-9)


def test_no_served_area_gives_zero_coverage_dissimilarity(no_warnings):
    # Both groups have served-area rate 0, so D over the two bins is 0.
    assert coverage_dissimilarity(HAND_X, HAND_Y, np.zeros(4, bool)) == 0.0
    assert coverage_dissimilarity(HAND_X, HAND_Y, np.ones(4, bool)) == 0.0


# ------------------------------------------------------------------------- gap test


def _planted(n: int, rng: np.random.Generator):
    """Group x living mostly in unserved areas, y mostly in served ones."""
    served = np.zeros(n, bool)
    served[: n // 2] = True
    x = np.where(served, rng.integers(0, 20, n), rng.integers(200, 400, n)).astype(float)
    y = np.where(served, rng.integers(200, 400, n), rng.integers(0, 20, n)).astype(float)
    return x, y, served


def test_gap_is_served_rate_difference():
    # Hand-worked above: rate_y - rate_x = .4 - .6.
    result = coverage_gap_test(
        HAND_X, HAND_Y, HAND_SERVED, permutations=9, rng=np.random.default_rng(SEED)
    )
    assert_allclose(result.gap, -0.2, rtol=RTOL_EXACT)


def test_gap_test_is_deterministic():
    x, y, served = _planted(50, np.random.default_rng(SEED))
    a = coverage_gap_test(x, y, served, permutations=199, rng=np.random.default_rng(SEED))
    b = coverage_gap_test(x, y, served, permutations=199, rng=np.random.default_rng(SEED))
    assert_array_equal(a.null_distribution, b.null_distribution)
    assert a.to_dict() == b.to_dict()
    c = coverage_gap_test(x, y, served, permutations=199, rng=np.random.default_rng(SEED + 1))
    assert not np.array_equal(a.null_distribution, c.null_distribution)


def test_gap_test_chunking_does_not_change_the_draws(monkeypatch):
    # Chunks only bound memory: the same generator gives the same null whatever their size.
    x, y, served = _planted(30, np.random.default_rng(SEED))
    whole = coverage_gap_test(x, y, served, permutations=50, rng=np.random.default_rng(SEED))
    monkeypatch.setattr(seg, "_CHUNK_ENTRIES", 7)
    chunked = coverage_gap_test(x, y, served, permutations=50, rng=np.random.default_rng(SEED))
    assert_array_equal(whole.null_distribution, chunked.null_distribution)


def test_planted_gap_is_detected():
    x, y, served = _planted(60, np.random.default_rng(SEED))
    result = coverage_gap_test(x, y, served, permutations=999, rng=np.random.default_rng(SEED))
    assert result.gap > 0.8
    # No reassignment of 30 of 60 areas comes near the planted split, so the pseudo
    # p-value sits at its floor 1/(999 + 1) (Hope 1968).
    assert result.p_value < 0.01
    assert result.p_value_one_sided == pytest.approx(1 / 1000, rel=RTOL_EXACT)
    assert 0 < result.p_value_one_sided <= result.p_value <= 1
    # The other direction: x more served than y -> the one-sided p is near 1.
    flipped = coverage_gap_test(y, x, served, permutations=999, rng=np.random.default_rng(SEED))
    assert flipped.gap < -0.8
    assert flipped.p_value_one_sided == pytest.approx(1.0, rel=RTOL_EXACT)


def test_null_case_is_not_significant():
    # Groups placed independently of the served areas. With this SEED the test gives
    # gap = 0.00439, null sd 0.0351, p = 0.903, one-sided p = 0.445 (the dict is shown
    # on failure).
    rng = np.random.default_rng(SEED)
    n = 80
    x = rng.integers(50, 500, n).astype(float)
    y = rng.integers(50, 500, n).astype(float)
    served = rng.random(n) < 0.5
    result = coverage_gap_test(x, y, served, permutations=999, rng=rng)
    assert result.p_value > 0.2, result.to_dict()
    assert result.p_value_one_sided > 0.1, result.to_dict()
    assert 0 < result.p_value <= 1


@pytest.mark.parametrize(
    ("x", "y", "served"),
    [
        ([4, 9, 0, 7, 3, 12, 5, 1], [10, 2, 6, 1, 8, 0, 7, 9], [1, 0, 0, 1, 0, 1, 0, 0]),
        # Repeated areas: 12 of the 84 served sets tie with the observed |gap| exactly.
        ([3, 3, 3, 5, 5, 1, 1, 2, 7], [1, 1, 1, 4, 4, 6, 6, 2, 3], [1, 0, 0, 1, 0, 1, 0, 0, 0]),
        # Different served sets whose gaps are equal as fractions but not as float sums
        # (found by a seeded search): comparing floats without the rounding bound gives
        # p = 0.816 here instead of the exact 0.857.
        ([2, 3, 0, 4, 10, 9, 4, 4, 3], [7, 7, 1, 11, 2, 6, 11, 7, 2], [0, 1, 0, 0, 0, 1, 0, 1, 0]),
    ],
)
def test_gap_p_value_matches_exact_randomisation_distribution(x, y, served):
    # The exact randomisation p-value (Fisher's randomisation test: every served set of
    # the same size enumerated in rational arithmetic, so ties are exact) against our
    # Monte Carlo estimate, which has binomial sampling error sqrt(p(1-p)/B).
    served = np.array(served, bool)
    X, Y, n = sum(x), sum(y), len(x)

    def gap_of(chosen):
        return Fraction(sum(y[i] for i in chosen), Y) - Fraction(sum(x[i] for i in chosen), X)

    observed = gap_of(np.flatnonzero(served))
    null = [gap_of(c) for c in itertools.combinations(range(n), int(served.sum()))]
    exact_two = sum(abs(g) >= abs(observed) for g in null) / len(null)
    exact_one = sum(g >= observed for g in null) / len(null)
    B = 20_000
    result = coverage_gap_test(x, y, served, permutations=B, rng=np.random.default_rng(SEED))
    assert result.gap == pytest.approx(float(observed), rel=RTOL_EXACT)
    # null_sd is the ddof-0 sd of the simulated sample, as esda reports seI_sim.
    assert result.null_sd == np.std(result.null_distribution)
    for estimate, exact in ((result.p_value, exact_two), (result.p_value_one_sided, exact_one)):
        se = math.sqrt(exact * (1 - exact) / B)
        assert abs(estimate - exact) < 4 * se + 1 / (B + 1), (estimate, exact)


@pytest.mark.parametrize("share_served", [0.25, 0.8])  # 0.8 takes the complement path
def test_gap_null_moments_match_sampling_theory(share_served):
    # Under the null the gap is the sum of w_i = y_i/Y - x_i/X over a simple random
    # sample of k of n areas without replacement: mean k * mean(w) = 0 and variance
    # k (1 - k/n) S^2, S^2 = sum (w - mean w)^2 / (n - 1) (Cochran 1977, Sampling
    # Techniques, 3rd ed., Theorem 2.2 (theorem number from memory), scaled from the
    # sample mean to the sample sum).
    rng = np.random.default_rng(SEED)
    n = 40
    x = rng.integers(0, 300, n).astype(float)
    y = rng.integers(0, 300, n).astype(float)
    served = np.zeros(n, bool)
    k = int(share_served * n)
    served[rng.choice(n, k, replace=False)] = True
    w = y / y.sum() - x / x.sum()
    sd = math.sqrt(k * (1 - k / n) * w.var(ddof=1))
    B = 4000
    result = coverage_gap_test(x, y, served, permutations=B, rng=rng)
    # Standard error of the simulated mean is sd / sqrt(B); of the simulated sd about
    # sd / sqrt(2 B) (1.1 % here), so 6 % is more than five standard errors.
    assert abs(result.null_mean) < 4 * sd / math.sqrt(B)
    assert result.null_sd == pytest.approx(sd, rel=0.06)


@pytest.mark.parametrize("served", [np.zeros(4, bool), np.ones(4, bool)])
def test_gap_test_without_contrast_gives_zero_gap_and_no_p_value(served):
    # Policy: no served area or every area served -> gap 0, p-values undefined.
    with pytest.warns(DegenerateStatisticWarning, match="served-area rate: the gap is 0"):
        result = coverage_gap_test(
            HAND_X, HAND_Y, served, permutations=99, rng=np.random.default_rng(SEED)
        )
    assert result.to_dict() == {
        "gap": 0.0,
        "p_value": None,
        "p_value_one_sided": None,
        "null_mean": 0.0,
        "null_sd": 0.0,
        "permutations": 99,
    }


def test_gap_test_single_area():
    # One area is either served or not: no contrast, reported as such.
    with pytest.warns(DegenerateStatisticWarning, match="every area is served"):
        result = coverage_gap_test(
            [3.0], [5.0], [True], permutations=9, rng=np.random.default_rng(SEED)
        )
    assert result.gap == 0.0 and math.isnan(result.p_value)


def test_gap_test_empty_group():
    with pytest.warns(DegenerateStatisticWarning, match="group x has zero total population"):
        result = coverage_gap_test(
            np.zeros(4), HAND_Y, HAND_SERVED, permutations=9, rng=np.random.default_rng(SEED)
        )
    assert all(v is None for k, v in result.to_dict().items() if k != "permutations")


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"permutations": 0}, "permutations must be a whole number of at least 1"),
        ({"permutations": 9.5}, r"permutations must be .*got 9\.5"),
        ({"permutations": True}, "permutations must be a whole number"),
        ({"rng": 42}, r"rng must be a numpy\.random\.Generator.*got int"),
        ({"rng": np.random.RandomState(1)}, "got RandomState"),
    ],
)
def test_gap_test_argument_errors(kwargs, match):
    args = {"permutations": 9, "rng": np.random.default_rng(SEED)} | kwargs
    with pytest.raises(SpecError, match=match):
        coverage_gap_test(HAND_X, HAND_Y, HAND_SERVED, **args)


# ----------------------------------------------------------- degenerate and errors


def test_empty_group_gives_nan_with_warning():
    zeros = np.zeros(4)
    with pytest.warns(DegenerateStatisticWarning, match="group x has zero total population"):
        assert math.isnan(isolation(zeros, HAND_T))
    with pytest.warns(DegenerateStatisticWarning, match="its dissimilarity is undefined"):
        assert math.isnan(dissimilarity(zeros, HAND_Y))
    with pytest.warns(DegenerateStatisticWarning, match="group y has zero total population"):
        assert math.isnan(dissimilarity(HAND_X, zeros))
    with pytest.warns(DegenerateStatisticWarning, match="its exposure is undefined"):
        assert math.isnan(exposure(zeros, HAND_Y, HAND_T))
    with pytest.warns(DegenerateStatisticWarning, match="its correlation ratio is undefined"):
        assert math.isnan(correlation_ratio(zeros, HAND_T))
    with pytest.warns(DegenerateStatisticWarning, match="its dissimilarity is undefined"):
        assert math.isnan(dissimilarity_vs_rest(zeros, HAND_T))
    with pytest.warns(DegenerateStatisticWarning, match="coverage dissimilarity is undefined"):
        assert math.isnan(coverage_dissimilarity(zeros, HAND_Y, HAND_SERVED))
    with pytest.warns(DegenerateStatisticWarning, match="areal coverage dissimilarity"):
        assert math.isnan(areal_coverage_dissimilarity(HAND_X, zeros, HAND_FRACTION))


def test_group_that_is_everyone_gives_nan_with_warning():
    with pytest.warns(DegenerateStatisticWarning, match="whole population.*correlation ratio"):
        assert math.isnan(correlation_ratio(HAND_T, HAND_T))
    with pytest.warns(DegenerateStatisticWarning, match="whole population.*from the rest"):
        assert math.isnan(dissimilarity_vs_rest(HAND_T, HAND_T))


@pytest.mark.parametrize(
    ("x", "match"),
    [
        ([30.0, -1.0, 0.0, 10.0], r"x has a negative count \(-1\) at position 1"),
        ([30.0, 10.0, np.nan, 10.0], r"x has a missing or infinite value \(nan\) at position 2"),
        ([30.0, 10.0, 0.0, np.inf], r"missing or infinite value \(inf\) at position 3"),
        ([30.0, 25.0, 0.0, 10.0], r"x exceeds t at position 1 \(25 > 20\)"),
        ([30.0, 10.0, 0.0], r"lengths differ \(x: 3, t: 4\)"),
        ([[30.0, 10.0, 0.0, 10.0]], r"x must be a 1-D array .* shape \(1, 4\)"),
        ([], "x is empty: there are no areas to analyse"),
        (["a", "b", "c", "d"], "x must hold numeric population counts"),
    ],
)
def test_count_errors_name_the_position(x, match):
    with pytest.raises(AnalysisError, match=match):
        isolation(x, HAND_T)


def test_errors_of_each_function():
    bad_y = [10.0, 10.0, 30.0, 101.0]
    with pytest.raises(AnalysisError, match=r"y exceeds t at position 3 \(101 > 100\)"):
        exposure(HAND_X, bad_y, HAND_T)
    with pytest.raises(AnalysisError, match=r"y has a negative count \(-5\) at position 0"):
        dissimilarity(HAND_X, [-5.0, 1.0, 1.0, 1.0])
    with pytest.raises(AnalysisError, match=r"x exceeds t at position 0"):
        dissimilarity_vs_rest([60.0, 0.0, 0.0, 0.0], HAND_T)
    with pytest.raises(AnalysisError, match=r"x exceeds t at position 0"):
        correlation_ratio([60.0, 0.0, 0.0, 0.0], HAND_T)
    with pytest.raises(AnalysisError, match=r"lengths differ \(x: 4, y: 3\)"):
        dissimilarity(HAND_X, [1.0, 2.0, 3.0])


@pytest.mark.parametrize(
    ("served", "match"),
    [
        ([1, 0, 2, 0], r"served must hold true/false \(or 1/0\) per area; position 2 has 2"),
        ([1.0, np.nan, 1.0, 0.0], r"position 1 has nan"),
        (["yes", "no", "yes", "no"], r"served must hold true/false \(or 1/0\)"),
        ([[True, False, True, False]], r"served must be a 1-D array .* shape \(1, 4\)"),
        ([True, False], r"lengths differ \(x: 4, y: 4, served: 2\)"),
    ],
)
def test_served_errors(served, match):
    with pytest.raises(AnalysisError, match=match):
        coverage_dissimilarity(HAND_X, HAND_Y, served)
    with pytest.raises(AnalysisError, match=match):
        coverage_gap_test(HAND_X, HAND_Y, served, permutations=9, rng=np.random.default_rng(SEED))


@pytest.mark.parametrize(
    ("fraction", "match"),
    [
        ([1.0, 0.5, 1.2, 0.0], r"covered_fraction must lie between 0 and 1; position 2 has 1\.2"),
        ([1.0, -0.1, 0.0, 0.0], r"position 1 has -0\.1"),
        ([1.0, np.nan, 0.0, 0.0], r"position 1 has nan"),
        ([[1.0, 0.5, 0.0, 0.0]], r"covered_fraction must be a 1-D array"),
        (["x", "y", "z", "w"], r"covered_fraction must hold numbers between 0 and 1"),
        ([1.0, 0.5], r"lengths differ \(x: 4, y: 4, covered_fraction: 2\)"),
    ],
)
def test_fraction_errors(fraction, match):
    with pytest.raises(AnalysisError, match=match):
        areal_coverage_dissimilarity(HAND_X, HAND_Y, fraction)


# -------------------------------------------------------------------------- summary

SUMMARY_KEYS = {
    "reference_group",
    "dissimilarity",
    "dissimilarity_vs_rest",
    "isolation",
    "exposure_to_reference",
    "correlation_ratio",
    "coverage_dissimilarity",
    "areal_coverage_dissimilarity",
    "coverage_gap_test",
    "permutations",
}


def _hand_summary(rng_seed=SEED, permutations=99, **overrides):
    args = {
        "counts": {"white_nh": HAND_Y, "black_nh": HAND_X, "other": HAND_O},
        "total": HAND_T,
        "reference": "white_nh",
        "served": HAND_SERVED,
        "covered_fraction": HAND_FRACTION,
    } | overrides
    return segregation_summary(
        **args, permutations=permutations, rng=np.random.default_rng(rng_seed)
    )


def test_summary_schema_and_values(no_warnings):
    result = _hand_summary()
    out = result.to_dict()
    assert set(out) == SUMMARY_KEYS
    json.dumps(out, allow_nan=False)  # JSON-safe, as summary.json needs
    assert out["reference_group"] == "white_nh"
    assert out["permutations"] == 99
    two_group = ["black_nh", "other"]
    every = ["white_nh", "black_nh", "other"]
    for key in ("dissimilarity", "exposure_to_reference", "coverage_dissimilarity"):
        assert list(out[key]) == two_group
    assert list(out["areal_coverage_dissimilarity"]) == two_group
    assert list(out["coverage_gap_test"]) == two_group
    for key in ("dissimilarity_vs_rest", "isolation", "correlation_ratio"):
        assert list(out[key]) == every
    assert set(out["coverage_gap_test"]["black_nh"]) == {
        "gap",
        "p_value",
        "p_value_one_sided",
        "null_mean",
        "null_sd",
        "permutations",
    }
    # Hand-worked values (comment above HAND_X) come through under the group's name.
    assert_allclose(out["dissimilarity"]["black_nh"], 0.6, rtol=RTOL_EXACT)
    assert_allclose(out["exposure_to_reference"]["black_nh"], 0.32, rtol=RTOL_EXACT)
    assert_allclose(out["isolation"]["black_nh"], 0.48, rtol=RTOL_EXACT)
    assert_allclose(out["correlation_ratio"]["black_nh"], 0.3175, rtol=RTOL_EXACT)
    assert_allclose(out["dissimilarity_vs_rest"]["black_nh"], 0.6125, rtol=RTOL_EXACT)
    assert_allclose(out["coverage_dissimilarity"]["black_nh"], 0.2, rtol=RTOL_EXACT)
    assert_allclose(out["areal_coverage_dissimilarity"]["black_nh"], 0.475, rtol=RTOL_EXACT)
    assert_allclose(out["coverage_gap_test"]["black_nh"]["gap"], -0.2, rtol=RTOL_EXACT)
    # The other entries agree with the single-index functions.
    assert out["dissimilarity"]["other"] == dissimilarity(HAND_O, HAND_Y)
    assert out["isolation"]["white_nh"] == isolation(HAND_Y, HAND_T)
    assert out["exposure_to_reference"]["other"] == exposure(HAND_O, HAND_Y, HAND_T)


def test_summary_is_deterministic_and_uses_the_rng_in_group_order():
    a = _hand_summary().to_dict()
    assert a == _hand_summary().to_dict()
    # The generator serves the groups in the order given: the first gap test equals a
    # standalone test drawn from a fresh generator with the same seed.
    alone = coverage_gap_test(
        HAND_X, HAND_Y, HAND_SERVED, permutations=99, rng=np.random.default_rng(SEED)
    )
    assert a["coverage_gap_test"]["black_nh"] == alone.to_dict()


def test_summary_on_sids2_matches_the_oracle(sids2):
    from segregation.singlegroup import Dissim, Isolation

    t = sids2["BIR74"].to_numpy(dtype=float)
    x = sids2["NWBIR74"].to_numpy(dtype=float)
    rng = np.random.default_rng(SEED)
    served = rng.random(t.size) < 0.5
    result = segregation_summary(
        {"rest": t - x, "nonwhite": x},
        t,
        "rest",
        served,
        served.astype(float),
        permutations=99,
        rng=rng,
    )
    kw = {"group_pop_var": "NWBIR74", "total_pop_var": "BIR74"}
    # PySAL segregation as oracle; with two groups making the total, the two-group D
    # equals D against the rest (REFERENCES.md).
    assert_allclose(
        result.dissimilarity["nonwhite"], Dissim(sids2, **kw).statistic, rtol=RTOL_ORACLE
    )
    assert_allclose(
        result.dissimilarity_vs_rest["nonwhite"], Dissim(sids2, **kw).statistic, rtol=RTOL_ORACLE
    )
    assert_allclose(
        result.isolation["nonwhite"], Isolation(sids2, **kw).statistic, rtol=RTOL_ORACLE
    )


def test_summary_empty_group_is_none_with_one_warning():
    with pytest.warns(DegenerateStatisticWarning) as record:
        out = _hand_summary(counts={"white_nh": HAND_Y, "none": np.zeros(4)}).to_dict()
    messages = [str(w.message) for w in record]
    assert messages == [
        "group 'none' has zero total population, so its indices are undefined and reported as None"
    ]
    for key in ("dissimilarity", "exposure_to_reference", "coverage_dissimilarity"):
        assert out[key]["none"] is None
    for key in ("dissimilarity_vs_rest", "isolation", "correlation_ratio"):
        assert out[key]["none"] is None
    assert out["coverage_gap_test"]["none"]["p_value"] is None
    assert out["isolation"]["white_nh"] is not None


def test_summary_no_served_area_warns_once():
    with pytest.warns(DegenerateStatisticWarning) as record:
        out = _hand_summary(served=np.zeros(4, bool)).to_dict()
    assert len(record) == 1
    assert "no area is served" in str(record[0].message)
    for g in ("black_nh", "other"):
        assert out["coverage_gap_test"][g]["gap"] == 0.0
        assert out["coverage_gap_test"][g]["p_value"] is None
        assert out["coverage_dissimilarity"][g] == 0.0


def test_summary_group_that_is_everyone():
    with pytest.warns(DegenerateStatisticWarning, match="group 'all' is the whole population"):
        out = _hand_summary(counts={"all": HAND_T, "black_nh": HAND_X}, reference="all").to_dict()
    assert out["correlation_ratio"]["all"] is None
    assert out["dissimilarity_vs_rest"]["all"] is None
    assert out["isolation"]["all"] == pytest.approx(1.0, rel=RTOL_EXACT)


@pytest.mark.parametrize(
    ("overrides", "error", "match"),
    [
        (
            {"reference": "white"},
            SpecError,
            r"reference group 'white' is not among the groups; "
            r"expected one of \['white_nh', 'black_nh', 'other'\]",
        ),
        ({"counts": {}}, SpecError, "counts names no group"),
        ({"total": HAND_T[:3]}, AnalysisError, r"lengths differ \(total: 3, group 'white_nh': 4"),
        (
            {"counts": {"white_nh": HAND_Y + 1000, "black_nh": HAND_X}},
            AnalysisError,
            r"group 'white_nh' exceeds total at position 0 \(1010 > 50\)",
        ),
        (
            {"counts": {"white_nh": HAND_Y, "black_nh": -HAND_X}},
            AnalysisError,
            r"group 'black_nh' has a negative count \(-30\) at position 0",
        ),
        (
            {"covered_fraction": HAND_FRACTION * 2},
            AnalysisError,
            r"covered_fraction must lie between 0 and 1; position 0 has 2\.0",
        ),
        ({"served": [1, 0, 3, 0]}, AnalysisError, r"position 2 has 3"),
    ],
)
def test_summary_errors(overrides, error, match):
    with pytest.raises(error, match=match):
        _hand_summary(**overrides)


def test_summary_argument_errors():
    with pytest.raises(SpecError, match="permutations must be a whole number of at least 1"):
        _hand_summary(permutations=-1)
    with pytest.raises(SpecError, match="rng must be a numpy.random.Generator"):
        segregation_summary(
            {"white_nh": HAND_Y},
            HAND_T,
            "white_nh",
            HAND_SERVED,
            HAND_FRACTION,
            permutations=9,
            rng=SEED,
        )
