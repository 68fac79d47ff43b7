"""Tests of coverage_audit.compare: footprints side by side, change over time, peer lenders."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep, proportions_ztest

from coverage_audit.compare import (
    change_between,
    compare_footprints,
    peer_comparison,
    two_proportion_test,
)
from coverage_audit.errors import AnalysisError, InputError, SpecError

SEED = 20240612
#: Closed-form statistics computed two ways agree to rounding.
EXACT_TOL = 1e-10


# --------------------------------------------------------------------------------------
# Two-proportion z-test
# --------------------------------------------------------------------------------------

CASES = [(45, 300, 1500, 6000), (12, 40, 300, 700), (250, 1000, 260, 1000), (3, 50, 80, 400)]


@pytest.mark.parametrize(("x1", "n1", "x2", "n2"), CASES)
def test_two_proportion_test_against_textbook_and_statsmodels(x1, n1, x2, n2):
    out = {k: float(v[0]) for k, v in two_proportion_test([x1], [n1], [x2], [n2]).items()}
    p1, p2 = x1 / n1, x2 / n2
    pooled = (x1 + x2) / (n1 + n2)
    # Textbook pooled-variance z (e.g. Agresti, Categorical Data Analysis; from memory).
    z = (p1 - p2) / np.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n2))
    assert out["z"] == pytest.approx(z, rel=EXACT_TOL)
    assert out["p_two_sided"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=EXACT_TOL)
    assert out["p_below"] == pytest.approx(stats.norm.cdf(z), rel=EXACT_TOL)
    # Second oracle: statsmodels' pooled two-sample z-test.
    z_sm, p_sm = proportions_ztest([x1, x2], [n1, n2])
    assert out["z"] == pytest.approx(z_sm, rel=EXACT_TOL)
    assert out["p_two_sided"] == pytest.approx(p_sm, rel=1e-8)
    _, p_smaller = proportions_ztest([x1, x2], [n1, n2], alternative="smaller")
    assert out["p_below"] == pytest.approx(p_smaller, rel=1e-8)
    # Unpooled Wald interval of the difference; statsmodels' "wald" method is that interval.
    se = np.sqrt(p1 * (1 - p1) / n1 + p2 * (1 - p2) / n2)
    zq = stats.norm.ppf(0.975)
    assert (out["ci_low"], out["ci_high"]) == pytest.approx(
        (p1 - p2 - zq * se, p1 - p2 + zq * se), rel=EXACT_TOL
    )
    low, high = confint_proportions_2indep(x1, n1, x2, n2, method="wald", compare="diff")
    assert (out["ci_low"], out["ci_high"]) == pytest.approx((low, high), rel=1e-9)


def test_two_proportion_test_undefined_cases_are_nan():
    out = two_proportion_test([0, 0, 5], [0, 10, 10], [3, 0, 10], [10, 10, 10])
    assert np.isnan(out["z"][0])  # empty lender
    assert np.isnan(out["z"][1])  # pooled share 0: no variance
    assert np.isfinite(out["z"][2])


# --------------------------------------------------------------------------------------
# Peer comparison
# --------------------------------------------------------------------------------------


def _activity(seed=SEED):
    """Fictional lenders over 200 areas; lender L3 avoids majority-minority areas."""
    rng = np.random.default_rng(seed)
    ids = [f"99001{k:06d}" for k in range(200)]
    mm = pd.Series(rng.uniform(size=200) < 0.35, index=ids)
    rows = []
    for lender, avoid in (("L1", 1.0), ("L2", 1.0), ("L3", 0.25), ("L4", 1.0)):
        weight = np.where(mm.to_numpy(), avoid, 1.0)
        counts = rng.poisson(6.0 * weight)
        rows += [(i, lender, int(c)) for i, c in zip(ids, counts, strict=True) if c > 0]
    return pd.DataFrame(rows, columns=["geoid", "lender", "loans"]), mm


def test_peer_comparison_flags_planted_lender():
    activity, mm = _activity()
    result = peer_comparison(
        activity,
        id_column="geoid",
        lender_column="lender",
        count_column="loans",
        majority_minority=mm,
    )
    assert result.flagged == ("L3",)
    rows = {r.lender: r for r in result.lenders}
    in_mm = activity["geoid"].map(mm)
    for lender, row in rows.items():
        mine = activity["lender"] == lender
        x1, n1 = activity.loc[mine & in_mm, "loans"].sum(), activity.loc[mine, "loans"].sum()
        x2, n2 = activity.loc[~mine & in_mm, "loans"].sum(), activity.loc[~mine, "loans"].sum()
        assert (row.mm_activity, row.activity, row.peer_mm_activity, row.peer_activity) == (
            x1,
            n1,
            x2,
            n2,
        )
        z_sm, p_sm = proportions_ztest([x1, x2], [n1, n2])
        assert row.z == pytest.approx(z_sm, rel=EXACT_TOL)
        assert row.p_two_sided == pytest.approx(p_sm, rel=1e-8)
    assert rows["L3"].share < rows["L3"].peer_share and rows["L3"].ci_high < 0
    json.dumps(result.to_dict(), allow_nan=False)
    assert list(result.to_frame()["lender"]) == ["L1", "L2", "L3", "L4"]


def test_peer_comparison_long_and_wide_agree():
    activity, mm = _activity(SEED + 1)
    long = peer_comparison(
        activity,
        id_column="geoid",
        lender_column="lender",
        count_column="loans",
        majority_minority=mm,
    )
    wide_table = activity.pivot_table(
        index="geoid", columns="lender", values="loans", aggfunc="sum", fill_value=0
    )
    wide_table = wide_table.reset_index()
    wide_table.columns.name = None
    wide = peer_comparison(wide_table, id_column="geoid", majority_minority=mm)
    assert long.to_dict() == wide.to_dict()
    listed = peer_comparison(
        wide_table, id_column="geoid", majority_minority=mm, lender_columns=["L1", "L3"]
    )
    assert [r.lender for r in listed.lenders] == ["L1", "L3"]


def test_peer_comparison_reports_unmatched_areas():
    activity = pd.DataFrame(
        {
            "geoid": ["01", "01", "02", "03", "09"],
            "lender": ["A", "B", "A", "B", "B"],
            "n": [4, 2, 3, 5, 7],
        }
    )
    mm = pd.Series([True, False, True], index=["01", "02", "03"])
    result = peer_comparison(
        activity, id_column="geoid", lender_column="lender", count_column="n", majority_minority=mm
    )
    assert result.unmatched_ids == ("09",)
    assert result.unmatched_activity == 7.0
    a = result.lenders[0]
    assert (a.lender, a.mm_activity, a.activity, a.peer_mm_activity, a.peer_activity) == (
        "A",
        4.0,
        7.0,
        7.0,
        7.0,
    )


def test_peer_comparison_errors():
    activity, mm = _activity()
    kwargs = {"id_column": "geoid", "majority_minority": mm}
    with pytest.raises(InputError, match=r"lacks column\(s\) \['amount'\]; available columns"):
        peer_comparison(activity, lender_column="lender", count_column="amount", **kwargs)
    with pytest.raises(SpecError, match="needs both lender_column and count_column"):
        peer_comparison(activity, lender_column="lender", **kwargs)
    with pytest.raises(SpecError, match="or lender_columns"):
        peer_comparison(
            activity, lender_column="lender", count_column="loans", lender_columns=["L1"], **kwargs
        )
    bad = activity.assign(loans=activity["loans"].astype(float))
    bad.loc[0, "loans"] = -1
    bad.loc[1, "loans"] = np.nan
    with pytest.raises(InputError, match=r"2 activity count\(s\) in loans are missing, negative"):
        peer_comparison(bad, lender_column="lender", count_column="loans", **kwargs)
    one = activity[activity["lender"] == "L1"]
    with pytest.raises(AnalysisError, match="at least two lenders"):
        peer_comparison(one, lender_column="lender", count_column="loans", **kwargs)
    with pytest.raises(InputError, match="majority_minority must be true/false"):
        peer_comparison(
            activity,
            id_column="geoid",
            lender_column="lender",
            count_column="loans",
            majority_minority=mm.map({True: "yes", False: "no"}),
        )
    with pytest.raises(InputError, match="majority_minority must be a pandas Series"):
        peer_comparison(
            activity,
            id_column="geoid",
            lender_column="lender",
            count_column="loans",
            majority_minority=mm.to_dict(),
        )
    with pytest.raises(SpecError, match="alpha was 5"):
        peer_comparison(activity, lender_column="lender", count_column="loans", alpha=5, **kwargs)


# --------------------------------------------------------------------------------------
# Change between two footprints
# --------------------------------------------------------------------------------------


def _change_tables(seed=SEED):
    rng = np.random.default_rng(seed)
    n = 300
    ids = [f"02{k:09d}" for k in range(n)]
    white = rng.integers(100, 3000, n).astype(float)
    black = rng.integers(100, 3000, n).astype(float)
    cf_before = rng.uniform(0, 1, n)
    before = pd.DataFrame(
        {
            "geoid": ids,
            "covered_fraction": cf_before,
            "white_nh": white,
            "black": black,
            "population": white + black + 50,
        }
    )
    before["served"] = before["covered_fraction"] >= 0.5
    after = before.copy()
    served_idx = np.flatnonzero(before["served"])
    unserved_idx = np.flatnonzero(~before["served"])
    lost = rng.choice(served_idx, 17, replace=False)
    gained = rng.choice(unserved_idx, 9, replace=False)
    after.loc[lost, "covered_fraction"] = 0.1
    after.loc[gained, "covered_fraction"] = 0.95
    after["served"] = after["covered_fraction"] >= 0.5
    return before, after, sorted(np.asarray(ids)[lost]), sorted(np.asarray(ids)[gained])


def test_change_recovers_planted_gains_and_losses():
    before, after, lost, gained = _change_tables()
    result = change_between(
        before, after, id_column="geoid", groups=["white_nh", "black"], reference="white_nh"
    )
    assert list(result.lost.ids) == lost
    assert list(result.gained.ids) == gained
    lost_rows = before.set_index("geoid").loc[lost]
    assert result.lost.population == lost_rows["population"].sum()
    assert result.lost.group_counts["black"] == lost_rows["black"].sum()
    assert result.lost.group_shares["black"] == pytest.approx(
        lost_rows["black"].sum() / lost_rows["population"].sum()
    )
    for g in ("white_nh", "black"):
        rb = (before[g] * before["covered_fraction"]).sum() / before[g].sum()
        ra = (after[g] * after["covered_fraction"]).sum() / after[g].sum()
        sb = before.loc[before["served"], g].sum() / before[g].sum()
        sa = after.loc[after["served"], g].sum() / after[g].sum()
        change = result.groups[g]
        assert change.rate_change_pp == pytest.approx(100 * (ra - rb), rel=1e-12)
        assert change.served_area_rate_change_pp == pytest.approx(100 * (sa - sb), rel=1e-12)
        assert change.served_area_rate_before == pytest.approx(sb, rel=1e-12)
    assert result.groups["white_nh"].ratio_after == pytest.approx(1.0)
    assert result.areas_compared == 300 and result.only_before == () and result.only_after == ()
    json.dumps(result.to_dict(), allow_nan=False)
    assert list(result.to_frame()["group"]) == ["white_nh", "black"]


def test_change_reports_one_sided_ids_and_recomputes_threshold():
    before, after, lost, gained = _change_tables(SEED + 1)
    after = after.iloc[5:].copy()
    extra = after.iloc[:2].assign(geoid=["03000000001", "03000000002"])
    after = pd.concat([after, extra], ignore_index=True)
    result = change_between(
        before, after, id_column="geoid", groups=["white_nh", "black"], reference="white_nh"
    )
    assert result.only_before == tuple(sorted(before["geoid"].iloc[:5]))
    assert result.only_after == ("03000000001", "03000000002")
    assert result.areas_compared == 295
    assert set(result.lost.ids) == set(lost) - set(before["geoid"].iloc[:5])
    # A stricter threshold recomputed on both sides: served means covered_fraction >= 0.9.
    strict = change_between(
        before, after, id_column="geoid", groups=["white_nh"], reference="white_nh", threshold=0.9
    )
    b = before.set_index("geoid")
    a = after.set_index("geoid")
    common = b.index.intersection(a.index)
    expected_lost = sorted(
        common[
            (b.loc[common, "covered_fraction"] >= 0.9) & (a.loc[common, "covered_fraction"] < 0.9)
        ]
    )
    assert list(strict.lost.ids) == expected_lost
    assert strict.threshold == 0.9


def test_change_errors():
    before, after, _, _ = _change_tables()
    kwargs = {"id_column": "geoid", "groups": ["white_nh", "black"], "reference": "white_nh"}
    with pytest.raises(InputError, match=r"the after table lacks column\(s\) \['served'\]"):
        change_between(before, after.drop(columns="served"), **kwargs)
    dup = pd.concat([before, before.iloc[:1]], ignore_index=True)
    with pytest.raises(
        InputError, match=r"the before table repeats area id\(s\) \['02000000000'\]"
    ):
        change_between(dup, after, **kwargs)
    with pytest.raises(AnalysisError, match="share no area id"):
        change_between(before, after.assign(geoid=after["geoid"].str.lstrip("0")), **kwargs)
    with pytest.raises(SpecError, match='reference group "asian"'):
        change_between(before, after, id_column="geoid", groups=["white_nh"], reference="asian")
    with pytest.raises(SpecError, match="threshold was 1.5"):
        change_between(before, after, threshold=1.5, **kwargs)
    with pytest.raises(InputError, match="served column must be true/false"):
        change_between(before.assign(served=0.5), after, **kwargs)


# --------------------------------------------------------------------------------------
# Several footprints side by side
# --------------------------------------------------------------------------------------


def _ratio(a, b):
    return a / b if b else None


def _summary(rates, served, enclaves, reference="white_nh", comparison="reference", threshold=0.5):
    """A summary.json document shaped as DESIGN.md's output contract."""
    groups = {}
    for g, rate in rates.items():
        ratio = _ratio(rate, rates[reference])
        groups[g] = {
            "population": 1000.0,
            "covered_population": 1000.0 * rate,
            "rate": rate,
            "served_area_rate": served[g],
            "ratio": ratio,
            "served_area_ratio": _ratio(served[g], served[reference]),
            "difference": rate - rates[reference],
            "below_four_fifths": ratio is not None and ratio < 0.8,
        }
    return {
        "schema_version": 1,
        "coverage": {
            "served_threshold": threshold,
            "reference_group": reference,
            "comparison": comparison,
            "groups": groups,
        },
        "enclaves": [{"id": f"E{k + 1}"} for k in range(enclaves)],
    }


def test_compare_footprints_ranks_by_worst_group_ratio():
    results = {
        "branches": _summary(
            {"white_nh": 0.8, "black": 0.4, "hispanic": 0.7},
            {"white_nh": 0.8, "black": 0.5, "hispanic": 0.6},
            3,
        ),
        "atms": _summary(
            {"white_nh": 0.6, "black": 0.54, "hispanic": 0.5},
            {"white_nh": 0.6, "black": 0.3, "hispanic": 0.6},
            1,
        ),
        "mobile": _summary(
            {"white_nh": 0.5, "black": 0.45, "hispanic": 0.5},
            {"white_nh": 0.5, "black": 0.5, "hispanic": 0.5},
            2,
        ),
    }
    out = compare_footprints(results)
    # Worst ratios: branches 0.5 (black), atms 0.8333 (hispanic), mobile 0.9 (black).
    assert [f.name for f in out.footprints] == ["mobile", "atms", "branches"]
    assert [f.rank for f in out.footprints] == [1, 2, 3]
    worst = {f.name: (f.worst_group, f.worst_ratio) for f in out.footprints}
    assert worst["branches"] == ("black", pytest.approx(0.5))
    assert worst["atms"] == ("hispanic", pytest.approx(0.5 / 0.6))
    assert out.footprints[2].below_four_fifths == ("black",)
    assert [f.enclave_count for f in out.footprints] == [2, 1, 3]
    by_served = compare_footprints(results, by="served_area_rate")
    # Served-area worst ratios: branches 0.625, atms 0.5, mobile 1.0.
    assert [f.name for f in by_served.footprints] == ["mobile", "branches", "atms"]
    frame = out.to_frame()
    assert list(frame["footprint"]) == ["mobile", "atms", "branches"]
    assert frame.loc[0, "black_ranking_ratio"] == pytest.approx(0.9)
    json.dumps(out.to_dict(), allow_nan=False)


def test_compare_footprints_ties_and_undefined_ratios():
    same = {"white_nh": 0.5, "black": 0.4}
    served = {"white_nh": 0.5, "black": 0.4}
    undefined = _summary({"white_nh": 0.0, "black": 0.0}, {"white_nh": 0.0, "black": 0.0}, 0)
    for g in undefined["coverage"]["groups"].values():
        g["ratio"] = g["served_area_ratio"] = None
    out = compare_footprints(
        {
            "b": _summary(same, served, 4),
            "a": _summary(same, served, 4),
            "c": _summary(same, served, 1),
            "z": undefined,
        }
    )
    # Equal worst ratio: fewer enclaves first, then by name; undefined ratios last.
    assert [f.name for f in out.footprints] == ["c", "a", "b", "z"]
    assert out.footprints[-1].worst_ratio is None
    # A bare coverage section with an enclave count is accepted too.
    section = dict(_summary(same, served, 0)["coverage"], enclave_count=7)
    assert compare_footprints({"x": section}).footprints[0].enclave_count == 7


def test_compare_footprints_recomputes_ratios_against_reference():
    rates = {"white_nh": 0.5, "black": 0.4, "asian": 0.8}
    highest = _summary(rates, rates, 0, comparison="highest")
    for g, v in highest["coverage"]["groups"].items():
        v["ratio"] = rates[g] / 0.8  # as a summary comparing with the highest group has it
    out = compare_footprints({"h": highest})
    assert out.footprints[0].groups["black"]["ranking_ratio"] == pytest.approx(0.8)
    assert out.footprints[0].worst_group == "black"


def test_compare_footprints_notes_and_errors():
    a = _summary({"white_nh": 0.5, "black": 0.4}, {"white_nh": 0.5, "black": 0.4}, 0)
    b = _summary(
        {"white_nh": 0.5, "black": 0.4}, {"white_nh": 0.5, "black": 0.4}, 0, threshold=0.25
    )
    assert "different served thresholds" in compare_footprints({"a": a, "b": b}).notes[0]
    other = _summary(
        {"white_nh": 0.5, "black": 0.4}, {"white_nh": 0.5, "black": 0.4}, 0, reference="black"
    )
    with pytest.raises(AnalysisError, match="different reference groups.*a: white_nh, b: black"):
        compare_footprints({"a": a, "b": other})
    with pytest.raises(AnalysisError, match="no footprints to compare"):
        compare_footprints({})
    with pytest.raises(AnalysisError, match='footprint "x" has no coverage groups'):
        compare_footprints({"x": {"schema_version": 1}})
    with pytest.raises(SpecError, match='by was "ratio"'):
        compare_footprints({"a": a}, by="ratio")


def test_more_change_and_peer_errors():
    before, after, _, _ = _change_tables()
    kwargs = {"id_column": "geoid", "groups": ["white_nh", "black"], "reference": "white_nh"}
    holes = after.assign(covered_fraction=after["covered_fraction"].where(after.index > 2))
    with pytest.raises(
        InputError, match=r"the after table has 3 missing or non-numeric covered_fraction"
    ):
        change_between(before, holes, threshold=0.5, **kwargs)
    with pytest.raises(InputError, match="group counts must be numbers in every area"):
        change_between(before.assign(black=np.nan), after, **kwargs)
    activity, mm = _activity()
    twice = pd.concat([mm, mm.iloc[:1]])
    with pytest.raises(InputError, match="repeats an area id"):
        peer_comparison(
            activity,
            id_column="geoid",
            lender_column="lender",
            count_column="loans",
            majority_minority=twice,
        )
