"""Tests of the report sections of the further analyses (report.further and its sections).

Fabricated summaries in the shapes that coverage_audit.compare and coverage_audit.explain
write (comparison, change, peers, explain, sensitivity) test presence, absence, escaping
and number formats; one real run of the fictional branches demo through run_audit and
build_report checks the rendered figures against statsmodels (two-proportion z-test,
Wald interval, logit, fractional logit), the extended-lift definition of Pedreschi,
Ruggieri and Turini 2008 and the covered-fraction columns of areas.csv.
"""

from __future__ import annotations

import base64
import copy
import html
import importlib
import importlib.util
import math
import re
import subprocess
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.proportion import confint_proportions_2indep, proportions_ztest

from coverage_audit import demo, run_audit, synthetic
from coverage_audit.explain import DroppedRowsWarning
from coverage_audit.report import charts, compare_sections, explain_sections, markup
from coverage_audit.report.page import build_report, render_report


def _harness_name() -> str:
    """The browser harness module, whether tests/ is a package or a folder on sys.path."""
    try:
        return "tests.browser" if importlib.util.find_spec("tests.browser") else "browser"
    except ModuleNotFoundError:
        return "browser"


HARNESS = _harness_name()
pytest_plugins = [HARNESS]

SEED = 20260601
GROUPS = ["white_nh", "black_nh", "hispanic", "minority"]
REFERENCE = "white_nh"
XSS = "<script>alert(1)</script>"
XSS_ESCAPED = "&lt;script&gt;alert(1)&lt;/script&gt;"
FURTHER = ("comparison", "change", "peers", "explain", "sensitivity")
#: A figure printed with three decimals is within half a unit of the last digit of the
#: exact value (rounding), plus floating-point noise.
HALF_THOUSANDTH = 0.0005 + 1e-12
#: Two-sided 95 % normal quantile (any table of the normal distribution).
Z_975 = 1.959963984540054


# --- fabricated inputs -------------------------------------------------------------------


def _shares(white: float, black: float, hispanic: float) -> dict:
    return {
        "white_nh": white,
        "black_nh": black,
        "hispanic": hispanic,
        "minority": round(1.0 - white, 10),
    }


def comparison_block() -> dict:
    """compare.compare_footprints(...).to_dict() shape, hand-picked numbers."""

    def groups(white: float, ratios: dict) -> dict:
        return {
            g: {
                "rate": white * r,
                "served_area_rate": white * r,
                "ratio": r,
                "served_area_ratio": r,
                "difference": white * (r - 1.0),
                "below_four_fifths": r < 0.8,
                "ranking_ratio": r,
            }
            for g, r in {"white_nh": 1.0, **ratios}.items()
        }

    return {
        "by": "rate",
        "reference_group": REFERENCE,
        "groups": GROUPS,
        "ranking_rule": "ranked by the lowest areal-rate ratio of any group to white_nh, "
        "highest first; ties by fewer enclaves, then by name",
        "footprints": [
            {
                "name": "sites_2024",
                "rank": 1,
                "worst_group": "black_nh",
                "worst_ratio": 0.61645,
                "enclave_count": 0,
                "below_four_fifths": ["black_nh"],
                # 0.8 exactly is not below four-fifths (29 CFR 1607.4(D): "less than").
                "groups": groups(0.2882, {"black_nh": 0.61645, "hispanic": 0.8, "minority": 0.83}),
            },
            {
                "name": "sites_2026",
                "rank": 2,
                "worst_group": "black_nh",
                "worst_ratio": 0.45106,
                "enclave_count": 3,
                "below_four_fifths": ["black_nh", "hispanic", "minority"],
                "groups": groups(
                    0.2279, {"black_nh": 0.45106, "hispanic": 0.7792, "minority": 0.68}
                ),
            },
        ],
        "notes": [],
    }


def footprints_compared() -> dict:
    return {
        "sites_2026": {
            "name": "sites_2026",
            "kind": "points",
            "features": 16,
            "area_km2": 169.2609,
            "points": 16,
            "radius_m": 2000.0,
            "radius_m_range": [2000.0, 2000.0],
        },
        "sites_2024": {
            "name": "sites_2024",
            "kind": "points",
            "features": 21,
            "area_km2": 219.6048,
            "points": 21,
            "radius_m": None,
            "radius_m_range": [1500.0, 2500.0],
        },
    }


def change_block(ids: list[str]) -> dict:
    """compare.change_between(...).to_dict() shape."""
    return {
        "areas_compared": 35,
        "only_before": [],
        "only_after": [ids[-1]],
        "lost_service": {
            "count": 3,
            "ids": ids[:3],
            "population": 12_501.4,
            "group_counts": {},
            "group_shares": _shares(0.43705, 0.15394, 0.34461),
        },
        "gained_service": {
            "count": 0,
            "ids": [],
            "population": 0.0,
            "group_counts": {},
            "group_shares": {g: None for g in GROUPS},
        },
        "groups": {
            "white_nh": {
                "rate_before": 0.28823,
                "rate_after": 0.22786,
                "rate_change_pp": -6.036738,
                "served_area_rate_before": 0.29949,
                "served_area_rate_after": 0.23587,
                "served_area_rate_change_pp": -6.36232,
                "ratio_before": 1.0,
                "ratio_after": 1.0,
            },
            "black_nh": {
                "rate_before": 0.17768,
                "rate_after": 0.10278,
                "rate_change_pp": -7.48998,
                "served_area_rate_before": None,
                "served_area_rate_after": 0.10424,
                "served_area_rate_change_pp": None,
                "ratio_before": 0.61645,
                "ratio_after": 0.45106,
            },
        },
        "reference_group": REFERENCE,
        "threshold": 0.5,
        "rates_note": "rates are fractions; changes are percentage points (after - before)",
    }


def peers_block() -> dict:
    """compare.peer_comparison(...).to_dict() shape; the first row's numbers are those of
    x1/n1 = 929/3183 against x2/n2 = 13514/28088 (checked against statsmodels below)."""
    return {
        "method": "two-proportion z-test against all other lenders combined",
        "alpha": 0.05,
        "areas": 412,
        "lenders": [
            {
                "lender": "Gullwing Savings",
                "activity": 3183.0,
                "mm_activity": 929.0,
                "share": 0.29186302230600064,
                "peer_activity": 28088.0,
                "peer_mm_activity": 13514.0,
                "peer_share": 0.4811307319851894,
                "difference": -0.18926770967918877,
                "ci_low": -0.20610744614502058,
                "ci_high": -0.17242797321335696,
                "z": -20.299305600262198,
                "p_two_sided": 1.3041470620362305e-91,
                "p_below": 6.520735310181152e-92,
                "below_peers": True,
            },
            {
                "lender": "Brackwater Mutual",
                "activity": 7527.0,
                "mm_activity": 3543.0,
                "share": 0.47070546,
                "peer_activity": 23744.0,
                "peer_mm_activity": 10900.0,
                "peer_share": 0.45906334,
                "difference": 0.01164212,
                "ci_low": -0.00129337,
                "ci_high": 0.02457761,
                "z": 1.76541099,
                "p_two_sided": 0.07749472,
                "p_below": 0.96125264,
                "below_peers": False,
            },
            {
                "lender": "Empty Quay Lending",
                "activity": 0.0,
                "mm_activity": 0.0,
                "share": None,
                "peer_activity": 31271.0,
                "peer_mm_activity": 14443.0,
                "peer_share": 0.46186,
                "difference": None,
                "ci_low": None,
                "ci_high": None,
                "z": None,
                "p_two_sided": None,
                "p_below": None,
                "below_peers": False,
            },
        ],
        "flagged": ["Gullwing Savings"],
        "unmatched_ids": ["99001999998", "99001999999"],
        "unmatched_activity": 17.0,
    }


def _term(name: str, b: float, se: float) -> dict:
    # Odds ratio and Wald interval from the coefficient: exp(b), exp(b -/+ 1.96 se).
    return {
        "name": name,
        "coefficient": b,
        "std_error": se,
        "odds_ratio": math.exp(b),
        "ci_low": math.exp(b - Z_975 * se),
        "ci_high": math.exp(b + Z_975 * se),
        "z": b / se,
        "p_value": 1.66e-11 if name.startswith("minority") else 0.6967,
    }


def _fit(name: str, kind: str, terms: list, clustered: bool) -> dict:
    return {
        "name": name,
        "kind": kind,
        "outcome": "odds of an area being unserved (1 - served)",
        "covariance": "model" if kind == "logit" else "HC0",
        "n": 412,
        "terms": terms,
        "log_likelihood": -179.7,
        "pseudo_r2": 0.137 if kind == "logit" else None,
        "residual_moran": {
            "residuals": "pearson",
            "I": 0.45811 if clustered else 0.012,
            "EI": -0.00243,
            "VI_rand": 0.00088,
            "z_rand": 15.53 if clustered else 0.49,
            "p_rand": 2e-54 if clustered else 0.62,
            "n": 412,
            "space_not_accounted_for": clustered,
        },
    }


def explain_block(*, clustered: bool = True) -> dict:
    """explain.exclusion_models(...).to_dict() and discover_rules(...).to_dict() shapes."""
    mm = "minority_share_per_10pp"
    alone = [_term("intercept", -1.87, 0.46), _term(mm, 0.7303, 0.1085)]
    controlled = [
        _term("intercept", -1.56, 1.35),
        _term(mm, 0.7001, 0.1523),
        _term("income_ratio", -0.002369, 0.006078),
        # Per person per km²: exp(6.6e-6) = 1.0000066; three decimals would print 1.000
        # for the odds ratio and both ends of its interval.
        _term("population_density", 6.618e-06, 0.0001554),
    ]
    models = {
        "outcome_note": "the binary models give the odds of an area NOT being served",
        "scale_note": "minority share enters per 10 percentage points",
        "minority_term": mm,
        "minority_step": 0.1,
        "controls": ["income_ratio", "population_density"],
        "design_columns": ["intercept", mm, "income_ratio", "population_density"],
        "category_references": {},
        "n_areas": 412,
        "events_per_parameter": 7.5,
        "models": {
            "unserved_minority_only": _fit("unserved_minority_only", "logit", alone, clustered),
            "uncovered_minority_only": _fit(
                "uncovered_minority_only", "fractional_logit", alone, clustered
            ),
            "unserved_with_controls": _fit(
                "unserved_with_controls", "logit", controlled, clustered
            ),
        },
        "minority_change": [
            {
                "kind": "logit",
                "odds_ratio_alone": math.exp(0.7303),
                "odds_ratio_with_controls": math.exp(0.7001),
                "ratio": math.exp(0.7001 - 0.7303),
                "percent_change": 100.0 * (math.exp(0.7001 - 0.7303) - 1.0),
            }
        ],
        "dropped_rows": [{"id": "99001000004", "row": 3, "reason": "income_ratio: missing"}],
        "notes": ["the binary models give the odds of an area NOT being served"],
    }
    rules = {
        "method": "extended lift (Pedreschi, Ruggieri and Turini 2008)",
        "rules": [
            _rule(
                ["density = Q1"],
                46,
                43,
                104,
                80,
                414,
                "Areas that are majority-minority "
                "and in the lowest quarter by density are unserved 1.2 times as often",
            ),
            _rule(
                [],
                192,
                178,
                414,
                330,
                414,
                "Areas that are majority-minority are unserved 1.2 times as often as areas overall",
            ),
            {
                **_rule(["income_tier = moderate"], 70, 67, 70, 67, 414, "moderate-income"),
                "others_confidence": None,
                "slift": None,
                "risk_difference": None,
            },
        ],
        "reason": None,
        "protected": "majority-minority",
        "outcome": "unserved",
        "weight": "areas",
        "n_areas": 414,
        "n_outcome": 330,
        "n_protected": 192,
        "excluded_areas": 0,
        "min_support_areas": 21,
        "max_length": 2,
        "conditions": {"income_tier": ["low", "moderate"], "density": ["Q1", "Q2"]},
        "notes": [],
    }
    return {"models": models, "rules": rules}


def _rule(context, premise, premise_c, ctx, ctx_c, n, sentence) -> dict:
    # Pedreschi, Ruggieri and Turini 2008: conf(A,B -> C) = |A,B,C| / |A,B|,
    # conf(B -> C) = |B,C| / |B|, elift = their quotient; selection lift and risk
    # difference compare with conf(not A, B -> C).
    conf, ctx_conf = premise_c / premise, ctx_c / ctx
    others = (ctx_c - premise_c) / (ctx - premise) if ctx > premise else None
    return {
        "context": context,
        "premise_areas": premise,
        "premise_outcome_areas": premise_c,
        "context_areas": ctx,
        "context_outcome_areas": ctx_c,
        "support": premise / n,
        "rule_support": premise_c / n,
        "confidence": conf,
        "context_confidence": ctx_conf,
        "others_confidence": others,
        "elift": conf / ctx_conf,
        "slift": None if others is None else conf / others,
        "risk_difference": None if others is None else conf - others,
        "sentence": sentence,
    }


def sensitivity_block(*, radius: bool = True) -> dict:
    """analyses.sensitivity_section shape: three thresholds and three reach factors."""

    def row(t: float, ratios: dict, enclaves: int) -> dict:
        return {
            "threshold": t,
            "served_area_share": 0.6 - t / 2,
            "comparison_group": REFERENCE,
            "groups": {
                g: {
                    "served_area_rate": None if r is None else 0.5 * r,
                    "ratio": r,
                    "below_four_fifths": r is not None and r < 0.8,
                }
                for g, r in {"white_nh": 1.0, **ratios}.items()
            },
            "enclaves": enclaves,
        }

    out = {
        "thresholds": [
            row(0.25, {"black_nh": 0.454, "hispanic": 0.8, "minority": 0.69}, 0),
            row(0.5, {"black_nh": 0.442, "hispanic": 0.7518, "minority": 0.67}, 1),
            row(0.75, {"black_nh": 0.446, "hispanic": 0.7721, "minority": None}, 2),
        ]
    }
    if radius:
        out["radius"] = [
            {
                "factor": f,
                "radius_m": 2000.0 * f,
                "served_area_share": 0.1 * f,
                "groups": {
                    g: {
                        "rate": 0.3 * r,
                        "ratio": r,
                        "served_area_ratio": r,
                        "below_four_fifths": r < 0.8,
                    }
                    for g, r in {
                        "white_nh": 1.0,
                        "black_nh": b,
                        "hispanic": h,
                        "minority": m,
                    }.items()
                },
                "enclaves": e,
            }
            for f, b, h, m, e in (
                (0.5, 0.398, 0.714, 0.62, 0),
                (1.0, 0.451, 0.779, 0.68, 0),
                (2.0, 0.607, 0.893, 0.81, 1),
            )
        ]
    return out


def make_base() -> dict:
    """A small fictional region and a summary with the contract's coverage keys only.

    The further sections here are hand-built on purpose: their tables are checked against
    literal numbers and against statsmodels on numbers chosen for the check, and they
    include sections skipped for each reason and escaped input text, which the demo runs
    do not produce. The real runs are below (``branches``) and in test_report_real.py.
    """
    rng = np.random.default_rng(SEED)
    cells = synthetic.tessellation(36, seed=SEED)
    areas = gpd.GeoDataFrame({"geoid": cells["geoid"]}, geometry=cells.geometry, crs=cells.crs)
    areas["covered_fraction"] = rng.uniform(0, 1, len(areas))
    areas["served"] = areas["covered_fraction"] >= 0.5
    groups = {
        g: {
            "population": 1000.0,
            "covered_population": 500.0,
            "rate": r,
            "served_area_rate": r,
            "ratio": r / 0.5,
            "served_area_ratio": r / 0.5,
            "difference": r - 0.5,
            "served_area_difference": r - 0.5,
            "below_four_fifths": r / 0.5 < 0.8,
        }
        for g, r in zip(GROUPS, (0.5, 0.3, 0.45, 0.38), strict=True)
    }
    summary = {
        "schema_version": 1,
        "title": "Fictional audit of the Saltfen branch sites",
        "footprint": footprints_compared()["sites_2026"],
        "areas": {"input": len(areas), "analysed": len(areas), "excluded": 0},
        "coverage": {
            "served_threshold": 0.5,
            "reference_group": REFERENCE,
            "comparison": "reference",
            "comparison_group": REFERENCE,
            "groups": groups,
        },
    }
    manifest = {
        "tool": "coverage_audit",
        "version": "0.1.0",
        "spec": {
            "footprint": [{"name": "sites_2026"}, {"name": "sites_2024"}],
            "change": {"before": "sites_2024", "after": "sites_2026"},
        },
        "seed": SEED,
    }
    return {
        "summary": summary,
        "manifest": manifest,
        "areas": areas,
        "exclusions": None,
        "id_column": "geoid",
        "groups": GROUPS,
        "reference": REFERENCE,
        "footprint": {"kind": "points", "name": "sites_2026"},
    }


def full_summary(base: dict) -> dict:
    summary = copy.deepcopy(base["summary"])
    ids = base["areas"]["geoid"].tolist()
    summary.update(
        comparison=comparison_block(),
        footprints_compared=footprints_compared(),
        change=change_block(ids),
        peers=peers_block(),
        explain=explain_block(),
        sensitivity=sensitivity_block(),
    )
    return summary


@pytest.fixture(scope="module")
def base() -> dict:
    return make_base()


@pytest.fixture(scope="module")
def full_html(base: dict) -> str:
    return render_report(**{**base, "summary": full_summary(base)})


def render(base: dict, summary: dict, **changes) -> str:
    return render_report(**{**base, "summary": summary, **changes})


def element(html_text: str, tag: str, element_id: str) -> str:
    """The markup of the element with ``id`` (the tables and sections here do not nest
    their own kind, so a lazy match is enough)."""
    match = re.search(rf'<{tag}\b[^>]*\bid="{element_id}"[^>]*>.*?</{tag}>', html_text, re.S)
    assert match, f"no <{tag} id={element_id!r}>"
    return match.group(0)


def cells(row_html: str) -> list[str]:
    return [
        html.unescape(re.sub(r"<[^>]+>", "", c)).strip()
        for c in re.findall(r"<t[hd]\b[^>]*>(.*?)</t[hd]>", row_html, re.S)
    ]


def body_rows(table_html: str) -> list[list[str]]:
    body = re.search(r"<tbody>(.*)</tbody>", table_html, re.S).group(1)
    return [cells(r) for r in re.findall(r"<tr\b.*?</tr>", body, re.S)]


def row_starting(table_html: str, first: str) -> list[str]:
    for row in body_rows(table_html):
        if row and row[0].startswith(first):
            return row
    raise AssertionError(f"no row starting {first!r}")


def number(text: str) -> float:
    """A rendered number back as a float (typographic minus, separators, units)."""
    cleaned = text.replace("\u2212", "-").replace(",", "").replace("*", "")
    return float(re.match(r"\s*([-+]?\d+(?:\.\d+)?)", cleaned).group(1))


def text_of(fragment: str) -> str:
    return html.unescape(re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", fragment))).strip()


# --- presence and absence ------------------------------------------------------------------


def test_no_further_section_without_its_key(base: dict) -> None:
    text = render(base, base["summary"])
    for anchor in FURTHER:
        assert f'<section id="{anchor}"' not in text and f'href="#{anchor}"' not in text
    methods = element(text, "section", "methods")
    for source in ("Papke", "Pedreschi", "two-proportion", "What the sweeps vary"):
        assert source not in methods
    assert "Associations are not causes" not in text
    assert "<svg" in text  # the core figures still stand


@pytest.mark.parametrize("key", FURTHER)
def test_each_section_present_only_with_its_key(base: dict, key: str) -> None:
    summary = copy.deepcopy(base["summary"])
    summary[key] = full_summary(base)[key]
    text = render(base, summary)
    assert f'<section id="{key}" class="major"' in text
    assert f'href="#{key}"' in text
    for other in FURTHER:
        if other != key:
            assert f'<section id="{other}"' not in text, other
    # Sections stand in the order of the analyses, before the methods.
    assert text.index(f'<section id="{key}"') < text.index('<section id="methods"')


def test_sections_in_page_order(full_html: str) -> None:
    positions = [full_html.index(f'<section id="{a}"') for a in (*FURTHER, "methods", "cautions")]
    assert positions == sorted(positions)
    toc = re.search(r'<nav class="toc">.*?</nav>', full_html, re.S).group(0)
    links = re.findall(r'href="#([a-z]+)"', toc)
    assert links[links.index("comparison") :][: len(FURTHER) + 2] == [
        *FURTHER,
        "methods",
        "cautions",
    ]


@pytest.mark.parametrize("key", FURTHER)
def test_skipped_sections_say_why(base: dict, key: str) -> None:
    summary = copy.deepcopy(base["summary"])
    summary[key] = {"skipped": f"needs the minority share {XSS}"}
    section = element(render(base, summary), "section", key)
    assert "Not computed: needs the minority share " + XSS_ESCAPED in section
    assert XSS not in section and "<table" not in section


def test_models_and_rules_skipped_separately(base: dict) -> None:
    summary = copy.deepcopy(base["summary"])
    summary["explain"] = {"models": {"skipped": "too few areas"}, "rules": explain_block()["rules"]}
    text = render(base, summary)
    section = element(text, "section", "explain")
    assert "Not computed: too few areas." in section and 'id="rule-table"' in section
    assert 'id="model-minority-table"' not in section
    methods = element(text, "section", "methods")
    assert "Pedreschi, Ruggieri and Turini 2008" in methods and "Papke" not in methods
    # Rules alone still carry the caution on causes.
    assert "Associations are not causes." in element(text, "section", "cautions")


def test_sensitivity_without_radius_has_one_panel(base: dict) -> None:
    summary = copy.deepcopy(base["summary"])
    summary["sensitivity"] = sensitivity_block(radius=False)
    text = render(base, summary)
    section = element(text, "section", "sensitivity")
    assert 'id="threshold-table"' in section and 'id="radius-table"' not in section
    assert section.count("<svg") == 1 and "Coverage-rate ratio by reach" not in section
    methods = element(text, "section", "methods")
    assert "What the sweeps vary" in methods and "The reach sweep" not in methods


# --- escaping ----------------------------------------------------------------------------


def test_every_input_value_is_escaped(base: dict) -> None:
    summary = full_summary(base)
    cmp = summary["comparison"]
    cmp["footprints"][0]["name"] = XSS
    cmp["ranking_rule"] = XSS
    cmp["notes"] = [XSS]
    summary["footprints_compared"][XSS] = summary["footprints_compared"].pop("sites_2024")
    summary["change"]["lost_service"]["ids"][0] = XSS
    summary["peers"]["lenders"][1]["lender"] = XSS
    summary["peers"]["flagged"] = [XSS]
    models = summary["explain"]["models"]
    models["controls"][0] = XSS
    models["models"]["unserved_with_controls"]["terms"][2]["name"] = XSS
    models["notes"].append(XSS)
    rules = summary["explain"]["rules"]
    rules["rules"][0]["sentence"] = XSS
    rules["conditions"] = {XSS: ["a"]}
    evil_group = "h<i>&$x$"
    for row in summary["sensitivity"]["thresholds"]:
        row["groups"][evil_group] = row["groups"].pop("hispanic")
    text = render(base, summary, groups=[REFERENCE, "black_nh", evil_group, "minority"])
    assert XSS not in text and "<script" not in text.lower()
    assert "h<i>" not in text
    for anchor in ("comparison", "change", "peers", "explain"):
        assert XSS_ESCAPED in element(text, "section", anchor), anchor
    sensitivity = element(text, "section", "sensitivity")
    # In tables and in the chart's legend (drawn literally: no mathtext) alike.
    assert sensitivity.count("h&lt;i&gt;&amp;$x$") >= 2


# --- numbers as in the summary -------------------------------------------------------------


def test_footprint_table(full_html: str) -> None:
    section = element(full_html, "section", "comparison")
    rows = body_rows(element(section, "table", "footprint-table"))
    assert rows[0] == [
        "1",
        # Radii differ: the range is given instead of one radius.
        "sites_2024 21 service points reaching 1,500 m to 2,500 m, 219.6 km²",
        "black_nh",
        "0.616",
        "0",
        "black_nh",
    ]
    assert rows[1] == [
        "2",
        "sites_2026 (this audit) 16 service points reaching 2,000 m, 169.3 km²",
        "black_nh",
        "0.451",
        "3",
        "black_nh, hispanic, minority",
    ]
    assert "Footprints are ranked by the lowest areal-rate ratio" in text_of(section)
    ratios = element(section, "table", "footprint-ratio-table")
    first = row_starting(ratios, "sites_2024")
    # 29 CFR 1607.4(D) flags "less than" four-fifths: 0.800 carries no asterisk.
    assert first[1:] == ["28.8% (1.000)", "17.8% (0.616)*", "23.1% (0.800)", "23.9% (0.830)"]


def test_change_tables_and_listed_ids(base: dict, full_html: str) -> None:
    section = element(full_html, "section", "change")
    ids = base["areas"]["geoid"].tolist()
    said = text_of(section)
    assert "From sites_2024 to sites_2026: 35 areas compared" in said
    assert "present on one side only: 1 area only after" in said
    areas = element(section, "table", "change-areas-table")
    assert row_starting(areas, "Lost") == [
        "Lost service",
        "3",
        "12,501",
        "43.7%",
        "15.4%",
        "34.5%",
        "56.3%",
    ]
    assert row_starting(areas, "Gained") == ["Gained service", "0", "0"] + ["n/a"] * 4
    assert all(f"<code>{i}</code>" in section for i in ids[:3])
    assert "Gained service: no area." in said
    groups = element(section, "table", "change-groups-table")
    # rate_change_pp is already in percentage points: -6.0367 -> "−6.0 pp".
    assert row_starting(groups, "white_nh") == [
        "white_nh (reference)",
        "28.8%",
        "22.8%",
        "\u22126.0 pp",
        "29.9%",
        "23.6%",
        "\u22126.4 pp",
        "1.000",
        "1.000",
    ]
    black = row_starting(groups, "black_nh")
    assert black[3] == "\u22127.5 pp" and black[4] == "n/a" and black[6] == "n/a"


def test_long_change_points_to_areas_csv_columns(base: dict) -> None:
    summary = full_summary(base)
    many = [f"99001{k:06d}" for k in range(compare_sections.MAX_LISTED_CHANGE_IDS + 1)]
    summary["change"]["lost_service"].update(ids=many, count=len(many))
    section = element(render(base, summary), "section", "change")
    assert "<code>99001000000</code>" not in section
    said = text_of(section)
    assert f"Lost service: {len(many)} areas, too many to list here" in said
    # sites_2024 is another footprint (its own column); sites_2026 is this audit's.
    assert "columns covered_fraction_sites_2024 and covered_fraction fall on either side" in said
    assert 'href="areas.csv"' in section


def test_peer_table_numbers(full_html: str) -> None:
    section = element(full_html, "section", "peers")
    table = element(section, "table", "peer-table")
    assert row_starting(table, "Gullwing") == [
        "Gullwing Savings",
        "3,183",
        "929",
        "29.2%",
        "48.1%",
        "\u221218.9 pp",
        "\u221220.6 to \u221217.2 pp",
        "\u221220.30",
        "< 0.001",
        "< 0.001",
        "yes: below peers",
    ]
    assert row_starting(table, "Brackwater")[5:] == [
        "+1.2 pp",
        "\u22120.1 to +2.5 pp",
        "1.77",
        "0.077",
        "0.961",
        "no",
    ]
    assert row_starting(table, "Empty Quay")[3:10] == ["n/a", "46.2%"] + ["n/a"] * 5
    assert 'class="flagged" data-lender="Gullwing Savings"' in table
    said = text_of(section)
    for phrase in (
        "two-proportion z-test (pooled standard error)",
        "unpooled standard error",
        "one-sided p below 0.05",
        "Below their peers: Gullwing Savings.",
        "2 areas of the activity table, with 17 actions, matched no analysed area",
    ):
        assert phrase in said, phrase


def test_peer_row_matches_statsmodels() -> None:
    # Oracle: statsmodels' pooled two-proportion z-test and unpooled Wald interval of the
    # difference, on the counts of the fabricated first row.
    row = peers_block()["lenders"][0]
    z, p = proportions_ztest(
        [row["mm_activity"], row["peer_mm_activity"]], [row["activity"], row["peer_activity"]]
    )
    low, high = confint_proportions_2indep(
        row["mm_activity"],
        row["activity"],
        row["peer_mm_activity"],
        row["peer_activity"],
        method="wald",
        compare="diff",
    )
    np.testing.assert_allclose([row["z"], row["p_two_sided"]], [z, p], rtol=1e-9)
    np.testing.assert_allclose([row["ci_low"], row["ci_high"]], [low, high], rtol=1e-9)


def test_models_tables(full_html: str) -> None:
    section = element(full_html, "section", "explain")
    minority = element(section, "table", "model-minority-table")
    alone = row_starting(minority, "Logit: odds of an area being unserved, minority share alone")
    # exp(0.7303) = 2.0758; interval exp(0.7303 -/+ 1.96 * 0.1085) = 1.6782 to 2.5675.
    assert alone[1:] == ["2.076", "1.678 to 2.568", "< 0.001", "412", "0.458 (z 15.53): clustered"]
    assert "Odds ratio per 10 pp" in minority
    controls = element(section, "table", "model-controls-table")
    density = row_starting(controls, "population_density (logit)")
    # Four decimals where three would print 1.000 to 1.000.
    assert density[1:] == ["1.0000", "0.9997 to 1.0003", "0.697"]
    assert row_starting(controls, "income_ratio (logit)")[1:3] == ["0.998", "0.986 to 1.010"]
    said = text_of(section)
    assert (
        "the odds ratio per 10 points falls by 3.0% when the controls enter, from 2.076 to "
        "2.014" in said
    )
    assert (
        "Space is not accounted for." in said
        and "every model (Moran's I of the residuals from 0.458 to 0.458)" in said
    )
    assert "Left out for missing values: 1 area (99001000004)." in said
    assert "Events per parameter in the models with controls: 7.5 (below the usual ten" in said


def test_models_without_clustered_residuals(base: dict) -> None:
    summary = copy.deepcopy(base["summary"])
    summary["explain"] = explain_block(clustered=False)
    section = element(render(base, summary), "section", "explain")
    assert 'id="residual-warning"' not in section
    assert "residuals show no clear spatial clustering" in section
    assert "0.012 (z 0.49)" in section and "clustered</td>" not in section


def test_odds_ratio_decimals() -> None:
    assert markup.fmt_odds(2.07569, 1.67818, 2.56736) == ("2.076", "1.678 to 2.567")
    assert markup.fmt_odds(1.0000066, 0.99970214, 1.00031119) == ("1.0000", "0.9997 to 1.0003")
    # Decimals stop at six, so an interval of zero width still prints.
    assert markup.fmt_odds(1.0, 1.0, 1.0) == ("1.000000", "1.000000 to 1.000000")
    assert markup.fmt_odds(None, None, None) == ("n/a", "n/a")
    assert markup.fmt_pp_value(-6.036738) == "\u22126.0 pp" and markup.fmt_pp_value(None) == "n/a"
    assert markup.fmt_interval(0.1, None, str) == "n/a"


def test_rules_table(full_html: str) -> None:
    section = element(full_html, "section", "explain")
    table = element(section, "table", "rule-table")
    rows = body_rows(table)
    # elift = conf(A,B->C)/conf(B->C) = (43/46)/(80/104) = 1.2152 (Pedreschi, Ruggieri and
    # Turini 2008); slift = (43/46)/(37/58) = 1.4653; risk difference 29.7 points.
    assert rows[0][0] == "1" and rows[0][2:] == ["11.1%", "93.5%", "1.215", "1.465", "+29.7 pp"]
    assert rows[1][2:] == ["46.4%", "92.7%", "1.163", "1.354", "+24.2 pp"]
    assert rows[2][2:] == ["16.9%", "95.7%", "1.000", "n/a", "n/a"]
    said = text_of(section)
    assert (
        "Searched over 414 areas (330 unserved, 192 majority-minority) with the traits "
        "income_tier, density" in said
    )
    assert "at least 21 areas" in said
    caution = element(section, "p", "association-caution")
    assert "do not establish why" in caution and "examiner's judgement" in text_of(caution)


def test_no_rules_found_says_why(base: dict) -> None:
    summary = copy.deepcopy(base["summary"])
    block = explain_block()
    block["rules"].update(rules=[], reason="no context reaches the minimum support")
    summary["explain"] = {"rules": block["rules"]}
    section = element(render(base, summary), "section", "explain")
    assert "No rule was found: no context reaches the minimum support." in section
    assert 'id="rule-table"' not in section and 'id="model-minority-table"' not in section


def test_sensitivity_tables_and_verdicts(full_html: str) -> None:
    section = element(full_html, "section", "sensitivity")
    thresholds = element(section, "table", "threshold-table")
    assert row_starting(thresholds, "25.0%") == [
        "25.0%",
        "47.5%",
        "50.0% (1.000)",
        "22.7% (0.454)*",
        "40.0% (0.800)",  # exactly four-fifths: not flagged
        "34.5% (0.690)*",
        "0",
    ]
    audit_row = row_starting(thresholds, "50.0%")
    assert audit_row[0] == "50.0% this audit" and audit_row[-1] == "1"
    assert row_starting(thresholds, "75.0%")[5] == "n/a (n/a)"
    verdict = text_of(element(section, "p", "threshold-verdict"))
    assert verdict == (
        "The four-fifths flags change with the served threshold: hispanic is below "
        "four-fifths at 50.0% and 75.0% but not at the other values; minority is below "
        "four-fifths at 25.0% and 50.0% but not at the other values. black_nh is below it "
        "at every served threshold tried, from 25.0% to 75.0%."
    )
    radius = element(section, "table", "radius-table")
    assert row_starting(radius, "1.00") == [
        "1.00 this audit",
        "2,000 m",
        "10.0%",
        "30.0% (1.000)",
        "13.5% (0.451)*",
        "23.4% (0.779)*",
        "20.4% (0.680)*",
        "0",
    ]
    radius_verdict = text_of(element(section, "p", "radius-verdict"))
    assert radius_verdict.startswith("The four-fifths flags change with the radius: hispanic")
    assert "at 1,000 m and 2,000 m but not at the other values" in radius_verdict
    assert section.count("<svg") == 1


def test_flag_sentence_when_nothing_moves() -> None:
    rows = [
        {
            "groups": {
                "a": {"below_four_fifths": True},
                "b": {"below_four_fifths": False},
                "c": {"below_four_fifths": False},
            }
        }
    ] * 3
    sentence = explain_sections.flag_sentence(
        rows, ["a", "b", "c"], ["1", "2", "3"], what="setting"
    )
    assert sentence == (
        "The four-fifths flags do not change across the sweep: at every setting tried, from "
        "1 to 3, a is below four-fifths; b and c are not."
    )
    clear = [{"groups": {"b": {"below_four_fifths": False}}}] * 2
    assert explain_sections.flag_sentence(clear, ["b"], ["1", "2"], what="setting").endswith(
        "from 1 to 2, b is not below four-fifths."
    )
    assert explain_sections.flag_sentence([], ["a"], [], what="setting") == ""


def test_sweep_figure_draws_ratios_four_fifths_and_the_audit_setting() -> None:
    panel = charts.SweepPanel(
        x=[0.25, 0.5, 0.75],
        ratios={"black_nh": [0.454, 0.442, None], "_lead": [0.8, 0.9, 1.3]},
        tick_labels=["25%", "50%", "75%"],
        x_label="served threshold",
        y_label="ratio",
        title="by threshold",
        marked=0.5,
        marked_label="this audit (50.0%)",
    )
    fig = charts.sweep_figure([panel, panel])
    assert len(fig.axes) == 2
    ax = fig.axes[0]
    lines = {line.get_label(): line for line in ax.get_lines()}
    np.testing.assert_array_equal(lines["black_nh"].get_ydata(), [0.454, 0.442, np.nan])
    # A leading underscore would hide a group from matplotlib's legend.
    assert " _lead" in lines
    # 29 CFR 1607.4(D): the screen's line stands at four-fifths of the comparison rate.
    np.testing.assert_array_equal(lines["four-fifths (0.8)"].get_ydata(), [0.8, 0.8])
    np.testing.assert_array_equal(lines["this audit (50.0%)"].get_xdata(), [0.5, 0.5])
    assert ax.get_ylim() == (0.0, pytest.approx(1.3 * 1.08))
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert legend == ["black_nh", " _lead", "four-fifths (0.8)", "this audit (50.0%)"]


def test_sweep_chart_is_deterministic_svg(base: dict) -> None:
    panel = charts.SweepPanel(
        x=[1000.0, 2000.0],
        ratios={"a<b>": [0.5, 0.7]},
        tick_labels=["1 km", "2 km"],
        x_label="radius",
        y_label="ratio",
        title="by reach",
        marked=None,
    )
    first = charts.sweep_chart([panel], salt="t")
    assert first == charts.sweep_chart([panel], salt="t")
    assert first.startswith("<svg") and 'aria-label="by reach"' in first
    assert "a&lt;b&gt;" in first and "a<b>" not in first


def test_sweep_chart_leaves_matplotlib_global_state_alone() -> None:
    # In a fresh interpreter: drawing never imports pyplot nor changes rcParams; read
    # with dict.__getitem__ so the "auto" backend is not resolved (which imports pyplot).
    script = (
        "import sys, matplotlib\n"
        "rc = matplotlib.rcParams\n"
        "raw = lambda: {k: dict.__getitem__(rc, k) for k in list(dict.keys(rc))}\n"
        "before = raw()\n"
        "from coverage_audit.report import charts\n"
        "p = charts.SweepPanel(x=[0.25, 0.5], ratios={'a': [0.7, 0.9]}, tick_labels=['25%',\n"
        "    '50%'], x_label='t', y_label='r', title='s', marked=0.5)\n"
        "charts.sweep_chart([p])\n"
        "print('pyplot' if 'matplotlib.pyplot' in sys.modules else 'no pyplot',\n"
        "      'same' if before == raw() else 'changed')\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, check=True, timeout=120
    )
    assert done.stdout.split() == ["no", "pyplot", "same"], done.stdout + done.stderr


def test_methods_entries(full_html: str) -> None:
    methods = text_of(element(full_html, "section", "methods"))
    for phrase in (
        "Footprints compared",
        "footprints are ranked by the lowest areal-rate ratio",
        "Change between footprints",
        "covered fraction at least 50.0%",
        "Two-proportion z-test of activity against peers (textbook; from memory)",
        "one-sided p below 0.05",
        "Papke and Wooldridge 1996",
        "Journal of Applied Econometrics 11(6)",
        "per 10 percentage points",
        "Pedreschi, Ruggieri and Turini 2008",
        "A the protected condition (majority-minority)",
        "the outcome (unserved)",
        "What the sweeps vary",
        "for t from 25.0% to 75.0%",
        "The reach sweep",
        "(0.5×, 1×, 2×)",
    ):
        assert phrase in methods, phrase


def test_cautions_and_key_figures(base: dict, full_html: str) -> None:
    top = element(full_html, "aside", "cautions-summary")
    assert "Associations are not causes." in top
    assert "Associations are not causes." in element(full_html, "section", "cautions")
    key = text_of(re.search(r'<section class="key-figures">.*?</section>', full_html, re.S)[0])
    assert "significantly below peers': Gullwing Savings." in key
    assert "Four-fifths flags change with the served threshold (25.0% to 75.0%)." in key
    summary = copy.deepcopy(base["summary"])
    summary["sensitivity"] = sensitivity_block()
    for row in summary["sensitivity"]["thresholds"]:
        row["groups"]["hispanic"]["below_four_fifths"] = True
        row["groups"]["minority"]["below_four_fifths"] = False
    text = render(base, summary)
    assert "Four-fifths flags hold at every served threshold tried" in text
    assert "Associations are not causes." not in text


# --- a real run of the branches demo ---------------------------------------------------------


@pytest.fixture(scope="module")
def branches(tmp_path_factory: pytest.TempPathFactory) -> dict:
    folder = demo.write_demo_region(tmp_path_factory.mktemp("region"))
    with pytest.warns(DroppedRowsWarning, match="left out of the exclusion models"):
        result = run_audit(Path(folder) / "branches.toml")
    out = tmp_path_factory.mktemp("report") / "report.html"
    options = {
        "exclusions": result.exclusions,
        "id_column": result.id_column,
        "groups": result.groups,
        "reference": result.spec.population.reference,
        "footprint": result.footprint_for_display(),
        "moran_lag": result.findings.moran_lag,
    }
    build_report(result.summary, result.manifest, result.areas, path=out, **options)
    return {"result": result, "path": out, "html": out.read_text("utf-8"), "options": options}


def test_real_run_shows_every_further_section(branches: dict) -> None:
    text = branches["html"]
    for anchor in FURTHER:
        assert f'<section id="{anchor}" class="major"' in text, anchor
    for table_id in (
        "footprint-table",
        "change-areas-table",
        "change-groups-table",
        "peer-table",
        "model-minority-table",
        "model-controls-table",
        "rule-table",
        "threshold-table",
        "radius-table",
    ):
        assert f'id="{table_id}"' in text, table_id
    assert "<script" not in text.lower()
    ids = re.findall(r'\bid="([^"]+)"', text)
    assert len(ids) == len(set(ids)), "duplicate element ids"


def test_real_run_is_byte_identical_on_rebuild(branches: dict, tmp_path: Path) -> None:
    result = branches["result"]
    again = tmp_path / "report.html"
    build_report(result.summary, result.manifest, result.areas, path=again, **branches["options"])
    assert again.read_bytes() == branches["path"].read_bytes()


def test_real_run_peer_rows_match_statsmodels(branches: dict) -> None:
    table = element(branches["html"], "table", "peer-table")
    lenders = branches["result"].summary["peers"]["lenders"]
    assert len(body_rows(table)) == len(lenders)
    for x in lenders:
        row = row_starting(table, x["lender"])
        n1, x1 = number(row[1]), number(row[2])
        assert (n1, x1) == (x["activity"], x["mm_activity"])
        n2, x2 = x["peer_activity"], x["peer_mm_activity"]
        # Oracles: statsmodels' pooled z-test and unpooled Wald interval of p1 - p2.
        z, p = proportions_ztest([x1, x2], [n1, n2])
        low, high = confint_proportions_2indep(x1, n1, x2, n2, method="wald", compare="diff")
        assert abs(number(row[7]) - z) <= 0.005 + 1e-12  # two decimals
        assert row[8] == ("< 0.001" if p < 0.001 else f"{p:.3f}")
        shown_low, shown_high = (number(v) for v in row[6].split(" to "))
        assert abs(shown_low - 100 * low) <= 0.05 + 1e-9  # one decimal, in points
        assert abs(shown_high - 100 * high) <= 0.05 + 1e-9
        assert row[10].startswith("yes") == (x1 / n1 < x2 / n2 and p / 2 < 0.05)


def _model_table(result) -> tuple[pd.DataFrame, list[str]]:
    frame = pd.DataFrame(result.areas.drop(columns="geometry"))
    controls = list(result.spec.explain.controls)
    keep = frame[["minority_share", *controls]].notna().all(axis=1)
    return frame.loc[keep], controls


def test_real_run_odds_ratios_match_statsmodels(branches: dict) -> None:
    result = branches["result"]
    frame, controls = _model_table(result)
    table = element(branches["html"], "table", "model-minority-table")
    unserved = 1.0 - frame["served"].to_numpy(dtype=float)
    uncovered = 1.0 - frame["covered_fraction"].to_numpy(dtype=float)
    x_alone = sm.add_constant(frame["minority_share"].to_numpy() / 0.1)
    x_full = sm.add_constant(
        np.column_stack([frame["minority_share"].to_numpy() / 0.1, frame[controls].to_numpy()])
    )
    # Oracles: statsmodels' maximum-likelihood logit, and the fractional logit of Papke and
    # Wooldridge 1996 as a binomial GLM with the HC0 sandwich covariance.
    fits = {
        "Logit: odds of an area being unserved, minority share alone": sm.Logit(
            unserved, x_alone
        ).fit(disp=0),
        "Logit: odds of an area being unserved, with controls": sm.Logit(unserved, x_full).fit(
            disp=0
        ),
        "Fractional logit: odds of the uncovered share, minority share alone": sm.GLM(
            uncovered, x_alone, family=sm.families.Binomial()
        ).fit(cov_type="HC0"),
        "Fractional logit: odds of the uncovered share, with controls": sm.GLM(
            uncovered, x_full, family=sm.families.Binomial()
        ).fit(cov_type="HC0"),
    }
    for label, fit in fits.items():
        row = row_starting(table, label)
        b, se = fit.params[1], fit.bse[1]
        low, high = (number(v) for v in row[2].split(" to "))
        np.testing.assert_allclose(number(row[1]), math.exp(b), atol=HALF_THOUSANDTH)
        np.testing.assert_allclose(low, math.exp(b - Z_975 * se), atol=HALF_THOUSANDTH)
        np.testing.assert_allclose(high, math.exp(b + Z_975 * se), atol=HALF_THOUSANDTH)
        assert row[4] == f"{len(frame):,}"


def test_real_run_rules_follow_the_extended_lift_definition(branches: dict) -> None:
    rules = branches["result"].summary["explain"]["rules"]["rules"]
    rows = body_rows(element(branches["html"], "table", "rule-table"))
    assert len(rows) == min(len(rules), explain_sections.MAX_RULES) > 0
    for rule, row in zip(rules, rows, strict=False):
        # Pedreschi, Ruggieri and Turini 2008: elift = conf(A,B -> C) / conf(B -> C).
        elift = (rule["premise_outcome_areas"] / rule["premise_areas"]) / (
            rule["context_outcome_areas"] / rule["context_areas"]
        )
        np.testing.assert_allclose(number(row[4]), elift, atol=HALF_THOUSANDTH)
        assert row[1] == rule["sentence"]
    elifts = [number(r[4]) for r in rows]
    assert elifts == sorted(elifts, reverse=True)


def test_real_run_change_counts_from_the_named_areas_columns(branches: dict) -> None:
    result = branches["result"]
    section = element(branches["html"], "section", "change")
    change = result.summary["change"]
    lost = change["lost_service"]
    threshold = result.spec.analysis.served_threshold
    # The columns the page names for each side are the ones areas.csv carries.
    before = result.areas["covered_fraction_branches_2024"].to_numpy() >= threshold
    after = result.areas["covered_fraction"].to_numpy() >= threshold
    assert int((before & ~after).sum()) == lost["count"] == 28
    assert int((~before & after).sum()) == change["gained_service"]["count"]
    listed = re.findall(r"<code>(\d{11})</code>", section)
    expected = sorted(result.areas.loc[before & ~after, result.id_column])
    assert listed == expected
    row = row_starting(element(section, "table", "change-areas-table"), "Lost")
    population = result.areas.loc[before & ~after, "population"].sum()
    assert row[:3] == ["Lost service", "28", f"{round(population):,}"]


def test_real_run_threshold_sweep_from_the_areas(branches: dict) -> None:
    result = branches["result"]
    areas = result.areas
    table = element(branches["html"], "table", "threshold-table")
    groups = result.groups
    for t in (0.25, 0.5, 0.75):
        row = row_starting(table, f"{100 * t:.1f}%")
        served = areas["covered_fraction"].to_numpy() >= t
        # Served-area rate from its definition (DESIGN.md): population in served areas
        # over the group's population; the ratio divides by the reference group's.
        rates = {g: areas.loc[served, g].sum() / areas[g].sum() for g in groups}
        for k, g in enumerate(groups):
            shown = row[2 + k]
            rate, ratio = shown.rstrip("*").split(" (")
            assert abs(number(rate) - 100 * rates[g]) <= 0.05 + 1e-9
            expected = rates[g] / rates[REFERENCE]
            assert abs(number(ratio) - expected) <= HALF_THOUSANDTH
            assert shown.endswith("*") == (expected < 0.8)
        assert number(row[1]) == pytest.approx(100 * served.mean(), abs=0.05 + 1e-9)


# --- in a browser --------------------------------------------------------------------------


@pytest.mark.browser
def test_real_report_in_headless_chromium(branches: dict, browser_page) -> None:
    browser_page.open(branches["path"], ready="document.readyState === 'complete'")
    assert browser_page.console_errors() == []
    assert browser_page.network_requests() == []
    widths = browser_page.js(
        "return Array.from(document.querySelectorAll('#sensitivity figure svg'))"
        ".map(s => s.getBoundingClientRect().width);"
    )
    assert len(widths) == 1 and widths[0] > 300
    rows = browser_page.js("return document.querySelectorAll('#peer-table tbody tr').length;")
    assert rows == len(branches["result"].summary["peers"]["lenders"])
    harness = importlib.import_module(HARNESS)
    for anchor in ("peers", "sensitivity"):
        browser_page.js(f"document.getElementById('{anchor}').scrollIntoView();")
        harness.assert_not_blank(browser_page.screenshot(f"{anchor}.png"))
    pdf = base64.b64decode(
        browser_page.driver.execute_cdp_cmd("Page.printToPDF", {"printBackground": True})["data"]
    )
    majors = browser_page.js("return document.querySelectorAll('section.major').length;")
    # Every major section starts a new page, after the title page.
    assert len(re.findall(rb"/Type\s*/Page[^s]", pdf)) >= majors + 1
    assert browser_page.console_errors() == []


def test_sweep_against_the_highest_rate_group_draws_every_group(base: dict) -> None:
    # With the comparison against the highest-rate group (as 29 CFR 1607.4(D) words it),
    # that group can change along the sweep, so no group is left out of the figure.
    summary = copy.deepcopy(base["summary"])
    summary["sensitivity"] = sensitivity_block(radius=False)
    summary["sensitivity"]["thresholds"][2]["comparison_group"] = "black_nh"
    section = element(render(base, summary), "section", "sensitivity")
    caption = re.search(r"<caption>(.*?)</caption>", section).group(1)
    assert caption.startswith("Served-area rate (ratio to white_nh and black_nh)")
    svg = re.search(r"<svg.*</svg>", section, re.S).group(0)
    # Group names reach the SVG only through the legend.
    assert all(g in svg for g in GROUPS)
    one_reference = render(base, {**summary, "sensitivity": sensitivity_block(radius=False)})
    assert "white_nh" not in re.search(
        r"<svg.*?</svg>", element(one_reference, "section", "sensitivity"), re.S
    ).group(0)
