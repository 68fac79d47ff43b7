"""Survey uncertainty: handbook formulas, the delta method, replicates, the audit stage.

Outside references: the Census Bureau's ACS General Handbook, chapter "Calculating
Measures of Error for Derived Estimates" (formulas for sums, proportions, ratios, products
and the 90% comparison test; quoted from memory, see ../shared/REFERENCES.md), the
successive-difference replicate formula of ACS variance replicate tables (from memory),
and a seeded Monte Carlo simulation of the counts for the delta-method variances.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from coverage_audit import load_spec, run_audit
from coverage_audit.inputs import Exclusions, margin_numbers
from coverage_audit.io.replicates import REPLICATE_COLUMNS, read_replicates
from coverage_audit.margins import SURVEY_CAUTION_START
from coverage_audit.stats.uncertainty import (
    CountErrors,
    class_rate_intervals,
    coverage_uncertainty,
    distinguishable,
    four_fifths_confidence,
    index_intervals,
    interval90,
    moe_product,
    moe_proportion,
    moe_ratio,
    moe_sum,
    rate_variance,
    replicate_variance,
    standard_error,
    z_difference,
)

from .conftest import write_spec

SEED = 20261202
BUNDLED = Path(__file__).resolve().parent.parent / "demo_regions" / "ostmere"


# ------------------------------------------------------------------ handbook formulas


def test_standard_error_of_a_90_percent_margin():
    # ACS handbook: published margins are at 90%, SE = MOE / 1.645.
    assert standard_error(164.5) == pytest.approx(100.0, rel=1e-12)


def test_sum_by_hand():
    # ACS handbook, sums: MOE = sqrt(sum MOE_i^2); 100, 200, 150 -> sqrt(72,500) = 269.2582.
    assert moe_sum([100, 200, 150]) == pytest.approx(269.2582404, rel=1e-9)
    # Several zero estimates: only the largest of their margins enters (handbook, from
    # memory): zeros with 12 and 17, and 30 -> sqrt(17^2 + 30^2) = sqrt(1,189) = 34.4819.
    assert moe_sum([12, 17, 30], [0, 0, 50]) == pytest.approx(34.4818793, rel=1e-9)
    assert moe_sum([12, 17, 30]) == pytest.approx(math.sqrt(144 + 289 + 900), rel=1e-12)


def test_proportion_ratio_product_by_hand():
    # Proportion, X = 400 (MOE 120) of Y = 1,600 (MOE 200): p = 0.25,
    # (1/1600) sqrt(14,400 - 0.0625 * 40,000) = sqrt(11,900) / 1,600 = 0.0681795.
    assert moe_proportion(400, 1600, 120, 200) == pytest.approx(0.06817945, rel=1e-7)
    # Negative radicand (900 - 0.16 * 40,000 < 0): the ratio form,
    # sqrt(900 + 6,400) / 1,000 = 0.0854400 (handbook).
    assert moe_proportion(400, 1000, 30, 200) == pytest.approx(0.08544004, rel=1e-7)
    assert moe_ratio(400, 1000, 30, 200) == pytest.approx(0.08544004, rel=1e-7)
    # Product: sqrt(10^2 * 3^2 + 20^2 * 2^2) = sqrt(900 + 1,600) = 50.
    assert moe_product(10, 20, 2, 3) == pytest.approx(50.0, rel=1e-12)


def test_comparison_test_and_its_boundary():
    # Handbook: estimates differ at 90% when |X1 - X2| / sqrt(SE1^2 + SE2^2) > 1.645.
    z = z_difference(500, 100, 300, 150)
    assert z == pytest.approx(200 / math.sqrt(32_500), rel=1e-12)  # 1.1094
    assert distinguishable(z) is False
    assert distinguishable(1.645) is False  # exactly at the critical value: not different
    assert distinguishable(-1.6451) is True
    assert z_difference(1, 0, 2, 0) is None


def test_four_fifths_confidence_boundaries():
    # 29 CFR 1607.4(D): "less than four-fifths"; the flag is sure only when the whole
    # interval is on one side of 0.8.
    assert four_fifths_confidence([0.70, 0.7999]) == "below"
    assert four_fifths_confidence([0.75, 0.80]) == "uncertain"  # upper end exactly 0.8
    assert four_fifths_confidence([0.80, 0.95]) == "not_below"  # lower end exactly 0.8
    assert four_fifths_confidence([0.79, 0.81]) == "uncertain"
    assert four_fifths_confidence(None) is None
    assert interval90(0.5, 0.1, 0.0, 1.0) == pytest.approx([0.3355, 0.6645])


# ----------------------------------------------------------------------- delta method


def test_rate_variance_by_hand():
    # Var = sum ((f_i - p)/X)^2 SE_i^2: f = (1, .5, 0), x = (100, 200, 100), X = 400,
    # p = 0.5, gradients (0.5, 0, -0.5)/400 -> (0.00125^2)(100 + 900) = 0.0015625.
    assert rate_variance([1, 0.5, 0], [100, 200, 100], [10, 20, 30]) == pytest.approx(
        0.0015625, rel=1e-12
    )


def test_rate_of_a_subset_matches_the_handbook_proportion():
    # A served-area rate is a proportion of a subset: X = 300 served of Y = 400. The
    # handbook's proportion formula assumes Cov(X, Y) = p Var(Y), which holds when the
    # variances are proportional to the counts: SE^2 = 3 x, so SE = 30 and sqrt(300).
    # Handbook: sqrt(900 - 0.5625 * 1,200) / 400 = 15 / 400 = 0.0375.
    se = np.array([30.0, math.sqrt(300.0)])
    delta = math.sqrt(rate_variance([1, 0], [300, 100], se))
    handbook = moe_proportion(300, 400, 1.645 * 30, 1.645 * math.sqrt(1200)) / 1.645
    assert delta == pytest.approx(0.0375, rel=1e-12)
    assert handbook == pytest.approx(0.0375, rel=1e-12)


def _simulated_region(rng: np.random.Generator, n: int = 150):
    total = rng.integers(800, 5000, n).astype(float)
    white = np.round(total * rng.uniform(0.2, 0.8, n))
    black = np.round((total - white) * rng.uniform(0.1, 0.9, n))
    se_total = 0.06 * total
    se_white = 0.12 * white + 10
    se_black = 0.30 * black + 10
    fraction = np.clip(rng.uniform(-0.5, 1.5, n), 0, 1)
    return total, white, black, se_total, se_white, se_black, fraction


def test_delta_method_matches_monte_carlo_spread():
    # Seeded simulation: draw every area's counts from N(estimate, SE) and measure the
    # spread of the rates and ratios; the delta-method SEs must agree within 5% (the
    # simulation's own error on an SD with 4,000 draws is about 1.1%).
    rng = np.random.default_rng(SEED)
    total, white, black, se_t, se_w, se_b, f = _simulated_region(rng)
    minority = total - white
    errors = CountErrors(
        se={"population": se_t, "white": se_w, "black": se_b},
        composition={
            "white": {"white": 1.0},
            "black": {"black": 1.0},
            "minority": {"population": 1.0, "white": -1.0},
        },
    )
    counts = {"white": white, "black": black, "minority": minority}
    result = coverage_uncertainty(counts, errors, f, f >= 0.5, "white").groups
    draws = 4000
    t = total + rng.standard_normal((draws, total.size)) * se_t
    w = white + rng.standard_normal((draws, total.size)) * se_w
    b = black + rng.standard_normal((draws, total.size)) * se_b

    def rate(x):
        return x @ f / x.sum(axis=1)

    p_w, p_b, p_m = rate(w), rate(b), rate(t - w)
    assert result["black"].rate_se == pytest.approx(p_b.std(), rel=0.05)
    assert result["black"].ratio_se == pytest.approx((p_b / p_w).std(), rel=0.05)
    assert result["black"].difference_se == pytest.approx((p_b - p_w).std(), rel=0.05)
    # Minority shares the reference's counts: its covariance must be carried.
    assert result["minority"].rate_se == pytest.approx(p_m.std(), rel=0.05)
    mc_ratio = (p_m / p_w).std()
    assert result["minority"].ratio_se == pytest.approx(mc_ratio, rel=0.05)
    independent = math.hypot(
        result["minority"].rate_se / rate(minority[None, :])[0],
        result["white"].rate_se / rate(white[None, :])[0],
    ) * (rate(minority[None, :])[0] / rate(white[None, :])[0])
    assert abs(independent - mc_ratio) / mc_ratio > 0.05  # ignoring it would fail the check
    assert result["minority"].population_se == pytest.approx((t - w).sum(axis=1).std(), rel=0.05)
    # Served-area ratio: the same with the served flag in place of the covered fraction.
    s = (f >= 0.5).astype(float)
    mc_served = ((b @ s / b.sum(axis=1)) / (w @ s / w.sum(axis=1))).std()
    low, high = result["black"].served_area_ratio_ci90
    assert (high - low) / (2 * 1.645) == pytest.approx(mc_served, rel=0.05)


def test_class_rate_interval_by_hand():
    # Whole-population rate in a class of areas {1, 2}: t = (100, 300), f = (1, 0):
    # p = 0.25; gradients (0.75, -0.25)/400; the third area is outside the class.
    # Var = (0.001875^2)(10^2) + (0.000625^2)(20^2) = 0.0005078125.
    ci = class_rate_intervals(
        np.array([1.0, 0.0, 1.0]),
        np.array([100.0, 300.0, 500.0]),
        {"class": np.array([True, True, False])},
        se_total=np.array([10.0, 20.0, 30.0]),
    )["class"]
    half = 1.645 * math.sqrt(0.0005078125)
    assert ci == pytest.approx([0.25 - half, 0.25 + half], rel=1e-12)


# ------------------------------------------------------------------------- replicates


def test_replicate_formula_by_hand():
    # Var = 4/80 * sum_r (X_r - X)^2: 40 replicates at 102 and 40 at 98 around X = 100:
    # 4/80 * 80 * 4 = 16, SE 4.
    reps = np.array([102.0] * 40 + [98.0] * 40)
    assert float(replicate_variance(100.0, reps)) == pytest.approx(16.0, rel=1e-12)


def test_coverage_rate_from_replicates_by_hand():
    # Two areas, x = (60, 40), the first covered: rate 0.6. Replicates of the first area:
    # 62 (40 times) and 58 (40 times); rates 62/102 and 58/98.
    x = {"a": np.array([60.0, 40.0])}
    reps = np.array([[62.0, 40.0]] * 40 + [[58.0, 40.0]] * 40)
    errors = CountErrors(se={}, composition={"a": {"a": 1.0}}, replicates={"a": reps})
    u = coverage_uncertainty(x, errors, np.array([1.0, 0.0]), np.array([True, False]), "a")
    expected = 4 / 80 * (40 * (62 / 102 - 0.6) ** 2 + 40 * (58 / 98 - 0.6) ** 2)
    assert u.groups["a"].rate_se == pytest.approx(math.sqrt(expected), rel=1e-12)
    # Population replicates 102 and 98 around 100: 4/80 * 80 * 2^2 = 16, SE 4.
    assert u.groups["a"].population_se == pytest.approx(4.0, rel=1e-12)
    assert u.method == "replicates"


def _replicate_table(path: Path, ids, estimates, spread):
    rows = []
    for k, i in enumerate(ids):
        for order, est in estimates.items():
            reps = [est[k] + spread] * 40 + [est[k] - spread] * 40
            rows.append(
                {"GEOID": f"1400000US{i}", "TBLID": "B03002", "ORDER": order, "ESTIMATE": est[k]}
                | dict(zip(REPLICATE_COLUMNS, reps, strict=True))
            )
    pd.DataFrame(rows).to_csv(path, index=False)


def test_read_published_replicate_layout(tmp_path):
    # Rows named by TBLID and ORDER match the spec column B03002_004E; the summary-level
    # prefix of GEOID is dropped; rows of other areas are listed in exclusions.
    path = tmp_path / "reps.csv"
    _replicate_table(path, ["01001000100", "01001000200", "01001999999"], {4: [5, 6, 7]}, 1.0)
    exclusions = Exclusions()
    reps = read_replicates(
        path,
        {"black": "B03002_004E"},
        ["01001000100", "01001000200"],
        id_width=None,
        exclusions=exclusions,
    )
    assert reps["black"].shape == (80, 2)
    assert reps["black"][0].tolist() == [6.0, 7.0]
    assert exclusions.count("replicates") == 1
    with pytest.raises(Exception, match="no row for area 01001000300"):
        read_replicates(
            path, {"black": "B03002_004E"}, ["01001000300"], id_width=None, exclusions=Exclusions()
        )


# ------------------------------------------------------------------------------ inputs


def test_margin_annotations():
    # Census annotations: ***** controlled (0), ** and the like have no margin.
    values, missing = margin_numbers(
        pd.Series(["120", "*****", "**", None, "1,234", "-555555555", "-222222222"])
    )
    assert values.tolist() == [120.0, 0.0, 0.0, 0.0, 1234.0, 0.0, 0.0]
    assert missing.tolist() == [False, False, True, True, False, False, True]


# ------------------------------------------------------------------------ bootstrap


def test_bootstrap_is_seeded_and_brackets_the_estimate():
    rng = np.random.default_rng(SEED)
    total, white, black, se_t, se_w, se_b, f = _simulated_region(rng, 60)
    errors = CountErrors(
        se={"population": se_t, "white": se_w, "black": se_b},
        composition={"white": {"white": 1.0}, "black": {"black": 1.0}},
    )
    counts = {"white": white, "black": black}
    args = (counts, total, errors, "white", f >= 0.5, f, [np.arange(5)])
    a = index_intervals(*args, draws=199, rng=np.random.default_rng(1)).to_dict()
    b = index_intervals(*args, draws=199, rng=np.random.default_rng(1)).to_dict()
    assert json.dumps(a) == json.dumps(b)
    d = 0.5 * np.abs(black / black.sum() - white / white.sum()).sum()  # Duncan and Duncan
    lo, hi = a["dissimilarity_ci90"]["black"]
    assert lo < d < hi and hi - lo < 0.2


# ------------------------------------------------------------------------------ audits


def _quick(path: Path):
    spec = load_spec(path)
    return run_audit(spec.with_analysis(permutations=19, enclave_draws=19, sensitivity=False))


def test_outreach_demo_flag_is_uncertain():
    s = _quick(BUNDLED / "outreach.toml").summary
    cov = s["coverage"]
    assert cov["uncertainty"] == "delta"
    asian = cov["groups"]["asian_nh"]
    assert asian["below_four_fifths"] and asian["ratio"] < 0.8
    assert asian["four_fifths_confidence"] == "uncertain"
    assert asian["ratio_ci90"][0] < 0.8 <= asian["ratio_ci90"][1]
    for key in (
        "population_moe90",
        "rate_moe90",
        "rate_ci90",
        "difference_se",
        "difference_z",
        "cv",
    ):
        assert asian[key] is not None, key
    assert any(c.startswith(SURVEY_CAUTION_START) and "delta method" in c for c in s["cautions"])
    assert "dissimilarity_ci90" in s["segregation"]["uncertainty"]


def test_audit_without_margins_only_gains_the_method_key():
    s = _quick(BUNDLED / "delivery.toml").summary
    assert s["coverage"]["uncertainty"] == "none"
    keys = {
        "population",
        "covered_population",
        "rate",
        "served_area_rate",
        "ratio",
        "served_area_ratio",
        "difference",
        "served_area_difference",
        "below_four_fifths",
    }
    for row in s["coverage"]["groups"].values():
        assert set(row) == keys
    assert "uncertainty" not in s["segregation"]
    assert all("group_shares_ci90" not in e for e in s["enclaves"])
    # The caution is the old one, word for word.
    assert (
        "small-area figures can be uncertain and this audit does not carry those margins into "
        "its figures." in " ".join(s["cautions"])
    )


def test_margins_in_a_tiny_audit_with_replicates(two_by_two):
    # The 2 x 2 grid of conftest with margins and a replicate table: replicates replace
    # the delta method for every figure; enclave shares and indices get intervals.
    import geopandas as gpd

    areas = gpd.read_file(two_by_two / "areas.gpkg")
    areas["total_moe"] = [30, 40, 50, "*****"]
    areas["white_moe"] = [20, 20, 15, 30]
    areas["black_moe"] = [8, 40, 50, 60]
    areas.to_file(two_by_two / "areas.gpkg", layer="areas", driver="GPKG")
    spec_path = two_by_two / "audit.toml"
    text = (
        spec_path.read_text()
        .replace(
            'white = "white"\nblack = "black"',
            'white = { column = "white", moe = "white_moe" }\nblack = { column = "black", moe = "black_moe" }',
        )
        .replace('reference = "white"', 'reference = "white"\ntotal_moe = "total_moe"')
    )
    write_spec(spec_path, text)
    delta = _quick(spec_path).summary["coverage"]
    assert delta["uncertainty"] == "delta"
    black = delta["groups"]["black"]
    # Rate of black: (10*.5 + 250)/710; by hand Var = sum ((f_i - p)/X)^2 (MOE_i/1.645)^2.
    p = (5 + 250) / 710
    f = np.array([0.5, 0.0, 1.0, 0.0])
    by_hand = math.sqrt(np.sum(((f - p) / 710) ** 2 * (np.array([8, 40, 50, 60]) / 1.645) ** 2))
    assert black["rate_moe90"] == pytest.approx(1.645 * by_hand, rel=1e-9)
    _replicate_table(
        two_by_two / "reps.csv",
        areas["geoid"],
        {1: areas["total"].tolist(), 3: [80, 50, 30, 100], 4: [10, 150, 250, 300]},
        2.0,
    )
    text = text.replace('total = "total"', 'total = "total"\nreplicates = "reps.csv"')
    text = text.replace('"total"', '"B03002_001E"', 1).replace(
        'column = "white"', 'column = "B03002_003E"'
    )
    text = text.replace('column = "black"', 'column = "B03002_004E"')
    areas = areas.rename(
        columns={"total": "B03002_001E", "white": "B03002_003E", "black": "B03002_004E"}
    )
    areas.to_file(two_by_two / "areas.gpkg", layer="areas", driver="GPKG")
    write_spec(spec_path, text)
    reps = _quick(spec_path).summary["coverage"]
    assert reps["uncertainty"] == "replicates"
    # Every area's black count moves by +-2 together: population SE = 4/80 * 80 * 8^2 -> 16.
    assert reps["groups"]["black"]["population_moe90"] == pytest.approx(1.645 * 16.0, rel=1e-9)


def test_report_map_and_console_show_intervals(tmp_path):
    import io

    from coverage_audit.console import print_summary

    result = _quick(BUNDLED / "outreach.toml")
    paths = result.write(tmp_path / "out")
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert 'id="survey_error"' in page and 'id="uncertainty-table"' in page
    # The uncertain flag explained in plain words, with its interval.
    ci = result.summary["coverage"]["groups"]["asian_nh"]["ratio_ci90"]
    assert 'id="uncertain-flags"' in page
    assert f"anywhere from {ci[0]:.2f} to {ci[1]:.2f}" in page
    assert "within the noise of the survey" in page and "not as cleared" in page
    assert "Coverage with 90% intervals" in (tmp_path / "out" / "map.html").read_text("utf-8")
    stream = io.StringIO()
    print_summary(result, paths, seconds=1.0, stream=stream)
    assert "yes?" in stream.getvalue() and "ratio 90%" in stream.getvalue()


def test_no_margin_report_has_no_survey_section(tmp_path):
    result = _quick(BUNDLED / "assessment_area.toml")
    result.write(tmp_path / "out")
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert 'id="survey_error"' not in page
    assert "Coverage with 90% intervals" not in (tmp_path / "out" / "map.html").read_text("utf-8")


def test_spec_keys_of_margins(tmp_path):
    from coverage_audit.errors import SpecError
    from coverage_audit.spec import spec_from_dict

    data = {
        "areas": {"path": "a.gpkg", "id": "geoid"},
        "population": {
            "total": "t",
            "total_moe": "t_m",
            "reference": "w",
            "groups": {"w": {"column": "w", "moe": "w_m"}},
            "replicates": "reps.csv",
            "margin_draws": 99,
        },
        "footprint": {"name": "f", "path": "f.gpkg"},
    }
    spec = spec_from_dict(data, base_dir=tmp_path)
    assert spec.population.replicates == tmp_path / "reps.csv"
    assert spec.population.margin_draws == 99
    assert spec.to_dict()["population"]["replicates"] == str(tmp_path / "reps.csv")
    data["population"]["margin_draws"] = 5
    with pytest.raises(SpecError, match="margin_draws"):
        spec_from_dict(data, base_dir=tmp_path)


def test_enclave_shares_get_intervals_with_margins():
    # The delivery demo with the margin table: its enclave's group shares get bootstrap
    # intervals that contain the shares, and reruns with the same seed are identical.
    import tomllib

    from coverage_audit.spec import spec_from_dict

    data = tomllib.loads((BUNDLED / "delivery.toml").read_text(encoding="utf-8"))
    margins = tomllib.loads((BUNDLED / "outreach.toml").read_text(encoding="utf-8"))
    data["areas"] = margins["areas"]
    data["population"] = margins["population"]
    data["analysis"].update(permutations=19, enclave_draws=19, sensitivity=False)
    data["population"]["margin_draws"] = 99
    runs = [run_audit(spec_from_dict(data, base_dir=BUNDLED)).summary for _ in range(2)]
    assert json.dumps(runs[0]) == json.dumps(runs[1])
    (enclave,) = runs[0]["enclaves"]
    for g, share in enclave["group_shares"].items():
        low, high = enclave["group_shares_ci90"][g]
        assert low <= share <= high, g
        assert high - low < 0.2


def _with_margins(folder: Path, white_moe, spec_moe: str = "white_moe"):
    import geopandas as gpd

    areas = gpd.read_file(folder / "areas.gpkg")
    areas["total_moe"] = [30, 40, 50, 60]
    areas["white_moe"] = white_moe
    areas.to_file(folder / "areas.gpkg", layer="areas", driver="GPKG")
    text = (folder / "audit.toml").read_text()
    text = text.replace('white = "white"', f'white = {{ column = "white", moe = "{spec_moe}" }}')
    text = text.replace('reference = "white"', 'reference = "white"\ntotal_moe = "total_moe"')
    return write_spec(folder / "audit.toml", text)


def test_annotated_margins_are_counted_and_warned(two_by_two):
    from coverage_audit.errors import MarginWarning
    from coverage_audit.inputs import load_areas

    spec = load_spec(_with_margins(two_by_two, ["20", "**", "(X)", "15"]))
    with pytest.warns(MarginWarning, match="white_moe"):
        inputs = load_areas(spec.areas, spec.population)
    assert inputs.margins_missing == {"white_moe": 2}
    assert inputs.frame["white_moe"].tolist() == [20.0, 0.0, 0.0, 15.0]
    # Minority margin by the difference rule: sqrt(30^2 + 20^2) for the first area.
    assert inputs.frame["minority_moe"][0] == pytest.approx(math.sqrt(1300), rel=1e-12)


def test_missing_margin_column_is_an_input_error(two_by_two):
    from coverage_audit.errors import InputError
    from coverage_audit.inputs import load_areas

    spec = load_spec(_with_margins(two_by_two, [1, 2, 3, 4], spec_moe="white_margin"))
    with pytest.raises(InputError, match="no margin-of-error column 'white_margin'"):
        load_areas(spec.areas, spec.population)


def test_compared_footprints_get_intervals():
    # The branches demo (two footprints compared) with the margin table: each footprint's
    # groups get their ratio intervals; the primary's match coverage.groups.
    import tomllib

    from coverage_audit.spec import spec_from_dict

    data = tomllib.loads((BUNDLED / "branches.toml").read_text(encoding="utf-8"))
    margins = tomllib.loads((BUNDLED / "outreach.toml").read_text(encoding="utf-8"))
    data["areas"] = margins["areas"]
    data["population"] = margins["population"]
    for key in ("explain", "activity"):
        data.pop(key)
    data["analysis"].update(permutations=19, enclave_draws=19, sensitivity=False)
    s = run_audit(spec_from_dict(data, base_dir=BUNDLED)).summary
    by_name = {f["name"]: f for f in s["comparison"]["footprints"]}
    primary = by_name[s["footprint"]["name"]]["groups"]["black_nh"]
    assert primary["ratio_ci90"] == s["coverage"]["groups"]["black_nh"]["ratio_ci90"]
    for entry in by_name.values():
        for g, row in entry["groups"].items():
            low, high = row["ratio_ci90"]
            assert low <= row["ratio"] <= high, (entry["name"], g)
