"""The four-fifths screen at its exact boundary, in every place that applies it.

Reference: 29 CFR 1607.4(D), a selection rate "less than four-fifths (4/5) (or eighty
percent) of the rate for the group with the highest rate" is evidence of adverse impact, so
a ratio of exactly 4/5 is not flagged. Every pair below is exactly 4/5 in rational numbers
(worked by hand: 60,000/100,000 = 3/5 and 75,000/100,000 = 3/4, (3/5)/(3/4) = 12/15 = 4/5;
(4/25)/(1/5) = 4/5; (2/3)/(5/6) = 12/15 = 4/5), yet its float ratio is 0.7999999999999999,
so a test with a float oracle ``ratio < 0.8`` would expect the wrong flag: these tests fail
on the old comparison.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from coverage_audit.compare import compare_footprints
from coverage_audit.coverage import coverage_by_group
from coverage_audit.explain import sensitivity_thresholds
from coverage_audit.report.compare_sections import _below
from coverage_audit.stats.four_fifths import (
    FOUR_FIFTHS_REL_TOL,
    below_four_fifths,
    ratio_below_four_fifths,
)

# (group covered, group population, comparison covered, comparison population), each
# exactly 4/5 by hand; the float division gives 0.7999999999999999 for every one.
EXACT_PAIRS = [
    (60_000.0, 100_000.0, 75_000.0, 100_000.0),
    (3.0, 5.0, 3.0, 4.0),
    (4.0, 25.0, 1.0, 5.0),
    (2.0, 3.0, 5.0, 6.0),
    (0.6, 1.0, 0.75, 1.0),
    (0.16, 1.0, 0.2, 1.0),
    (2 / 3, 1.0, 5 / 6, 1.0),
]


@pytest.mark.parametrize("pair", EXACT_PAIRS)
def test_exactly_four_fifths_is_not_flagged(pair):
    a, b, c, d = pair
    assert (a / b) / (c / d) < 0.8  # the float trap is real for every pair
    # 29 CFR 1607.4(D): "less than four-fifths"; exactly 4/5 is not flagged.
    assert below_four_fifths(a, b, c, d) is False


@pytest.mark.parametrize(
    ("a", "b", "c", "d"),
    [
        (59_999.0, 100_000.0, 75_000.0, 100_000.0),  # 0.79998666..., by hand
        (2.0, 5.0, 3.0, 4.0),  # (2/5)/(3/4) = 8/15 = 0.5333...
        (3.0, 25.0, 1.0, 5.0),  # 3/5 = 0.6
        (0.799999, 1.0, 1.0, 1.0),  # 1.25e-6 below 4/5, far beyond the 1e-9 tolerance
    ],
)
def test_just_below_four_fifths_is_flagged(a, b, c, d):
    assert below_four_fifths(a, b, c, d) is True  # 29 CFR 1607.4(D)


def test_tolerance_is_stated_and_can_fail():
    # The stated tolerance is one part in 1e9 of four-fifths of the comparison rate.
    assert float(FOUR_FIFTHS_REL_TOL) == 1e-9
    assert below_four_fifths(0.8 * (1 - 3e-9), 1.0, 1.0, 1.0) is True
    assert below_four_fifths(0.8 * (1 - 0.3e-9), 1.0, 1.0, 1.0) is False
    assert below_four_fifths(0.8000001, 1.0, 1.0, 1.0) is False


def test_undefined_rates_are_not_flagged():
    assert below_four_fifths(0.0, 0.0, 1.0, 2.0) is False  # group population 0
    assert below_four_fifths(0.0, 1.0, 0.0, 2.0) is False  # comparison rate 0
    assert below_four_fifths(float("nan"), 1.0, 1.0, 1.0) is False
    assert ratio_below_four_fifths(None) is False


def _two_area_table() -> tuple[pd.DataFrame, np.ndarray]:
    # Area 1 holds 100,000 of "ref", 75% covered; area 2 holds 100,000 of "a", 60% covered:
    # 75,000 and 60,000 covered, exactly 4/5 (the issue's own example).
    table = pd.DataFrame(
        {"population": [100_000.0, 100_000.0], "ref": [100_000.0, 0.0], "a": [0.0, 100_000.0]}
    )
    return table, np.array([0.75, 0.6])


def test_coverage_by_group_exact_boundary_reference_and_highest():
    table, fraction = _two_area_table()
    for comparison, reference in (("reference", "ref"), ("highest", "a")):
        result = coverage_by_group(
            table,
            groups=["ref", "a"],
            reference=reference,
            fraction=fraction,
            threshold=0.5,
            comparison=comparison,
        )
        assert result.comparison_group == "ref"
        assert result.groups["a"].covered_population == 60_000.0
        assert result.groups["a"].ratio == pytest.approx(0.8, rel=1e-15)
        assert result.groups["a"].below_four_fifths is False  # 29 CFR 1607.4(D)
        assert result.to_dict()["four_fifths_relative_tolerance"] == 1e-9
    # 59,999 of 100,000 against 75,000 is below four-fifths (0.79998666..., by hand).
    low = coverage_by_group(
        table,
        groups=["ref", "a"],
        reference="ref",
        fraction=np.array([0.75, 0.59999]),
        threshold=0.5,
    )
    assert low.groups["a"].below_four_fifths is True


def test_threshold_sweep_exact_boundary():
    # Served-area rates 3/5 (group g: 3 of 5 people in served areas) against 3/4 (ref: 3 of
    # 4): exactly 4/5 by hand, not flagged; 2/5 against 3/4 (8/15) is flagged.
    cf = np.array([1.0, 0.0, 1.0, 0.0])
    counts = {"ref": np.array([3.0, 1.0, 0.0, 0.0]), "g": np.array([0.0, 0.0, 3.0, 2.0])}
    (row,) = sensitivity_thresholds(cf, counts, "ref", [0.5])
    assert row.groups["g"].ratio == pytest.approx(0.8, rel=1e-15)
    assert row.groups["g"].below_four_fifths is False
    (high,) = sensitivity_thresholds(cf, counts, "g", [0.5], against="highest")
    assert high.comparison_group == "ref" and high.groups["g"].below_four_fifths is False
    lower = {"ref": counts["ref"], "g": np.array([0.0, 0.0, 2.0, 3.0])}
    (row,) = sensitivity_thresholds(cf, lower, "ref", [0.5])
    assert row.groups["g"].below_four_fifths is True


def _summary(rates: dict[str, float], *, counts: bool) -> dict:
    groups = {}
    for g, rate in rates.items():
        entry = {"rate": rate, "served_area_rate": rate}
        if counts:
            entry.update({"population": 25.0, "covered_population": 25.0 * rate})
        groups[g] = entry
    return {"coverage": {"reference_group": "ref", "served_threshold": 0.5, "groups": groups}}


@pytest.mark.parametrize("counts", [True, False])
def test_footprint_comparison_exact_boundary(counts):
    # Rates 4/25 and 1/5: ratio exactly 4/5 (by hand), float 0.7999999999999999.
    out = compare_footprints({"f": _summary({"ref": 0.2, "g": 0.16, "h": 0.15}, counts=counts)})
    row = out.footprints[0]
    assert row.groups["g"]["ranking_ratio"] < 0.8  # the float trap
    assert row.groups["g"]["ranking_below_four_fifths"] is False
    assert row.below_four_fifths == ("h",)  # 0.15/0.2 = 0.75 < 4/5
    served = compare_footprints(
        {"f": _summary({"ref": 0.2, "g": 0.16}, counts=counts)}, by="served_area_rate"
    )
    assert served.footprints[0].below_four_fifths == ()


def test_report_flag_reads_the_comparison_and_falls_back_exactly():
    assert _below({"ranking_ratio": 0.7999999999999999}) is False  # 4/5 in float
    assert _below({"ranking_ratio": 0.79}) is True
    assert _below({"ranking_ratio": 0.5, "ranking_below_four_fifths": False}) is False
