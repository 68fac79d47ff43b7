"""Headline findings: sentences built from the statistics, and the assessment-area review."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from coverage_audit import findings as fnd
from coverage_audit import load_spec, run_audit
from coverage_audit.stats.assessment_area import review_assessment_area

from .conftest import grid

pytest_plugins = ["tests.browser"]

BUNDLED = Path(__file__).resolve().parent.parent / "demo_regions" / "ostmere"


# Hand-built coverage sections on purpose: the sentence builders are checked at exact
# boundaries (a ratio of exactly 4/5, a flag that disappears along the sweep) that no demo
# audit produces; the demo runs are checked further down (test_demo_*).
def _coverage(rows: dict, comparison: str = "white") -> dict:
    return {
        "coverage": {
            "comparison_group": comparison,
            "reference_group": comparison,
            "four_fifths_threshold": 0.8,
            "groups": rows,
        }
    }


def test_gap_sentence_quotes_ratio_and_difference_with_one_sign_convention() -> None:
    # Four-fifths screen, 29 CFR 1607.4(D): a ratio of 0.45 < 0.8 is flagged. The
    # difference is the group's rate minus the comparison rate (here -0.125 -> "below").
    summary = _coverage(
        {
            "white": {"population": 1000, "rate": 0.228, "ratio": 1.0, "difference": 0.0},
            "black": {
                "population": 2000,
                "rate": 0.103,
                "ratio": 0.45,
                "difference": -0.125,
                "below_four_fifths": True,
            },
        }
    )
    summary["group_labels"] = {"white": "White", "black": "Black"}
    out = fnd.build_findings(summary)
    assert out[0]["kind"] == "coverage_gap"
    assert out[0]["sentence"] == (
        "Of 2,000 Black people, 10.3% are covered, against 22.8% of White people: a ratio "
        "of 0.45, below four-fifths (0.8), 12.5 percentage points below."
    )
    assert out[0]["figures"]["difference"] == -0.125


def test_exact_four_fifths_is_not_flagged_and_words_say_so() -> None:
    # A ratio of exactly 4/5 is not "less than four-fifths" (29 CFR 1607.4(D)).
    summary = _coverage(
        {
            "white": {"population": 10, "rate": 0.5, "ratio": 1.0, "difference": 0.0},
            "black": {
                "population": 10,
                "rate": 0.4,
                "ratio": 0.8,
                "difference": -0.1,
                "below_four_fifths": False,
            },
        }
    )
    (item,) = fnd.build_findings(summary)
    assert "No group's coverage falls below four-fifths" in item["sentence"]
    assert "a ratio of 0.80, 10.0 percentage points below white" in item["sentence"]


def test_no_flag_no_sweep_sentence() -> None:
    # Nothing flagged at the audit's settings: no "flag holds at every threshold" claim.
    summary = _coverage(
        {
            "white": {"rate": 0.5, "ratio": 1.0, "difference": 0.0},
            "black": {"rate": 0.5, "ratio": 1.0, "difference": 0.0, "below_four_fifths": False},
        }
    )
    summary["sensitivity"] = {
        "thresholds": [
            {"threshold": 0.25, "groups": {"black": {"below_four_fifths": True}}},
            {"threshold": 0.5, "groups": {"black": {"below_four_fifths": False}}},
        ]
    }
    kinds = [f["kind"] for f in fnd.build_findings(summary)]
    assert "sensitivity" not in kinds


def test_sweep_where_a_flag_disappears() -> None:
    summary = _coverage(
        {
            "white": {"rate": 0.5, "ratio": 1.0, "difference": 0.0},
            "black": {"rate": 0.3, "ratio": 0.6, "difference": -0.2, "below_four_fifths": True},
        }
    )
    summary["sensitivity"] = {
        "thresholds": [
            {"threshold": 0.25, "groups": {"black": {"below_four_fifths": False}}},
            {"threshold": 0.5, "groups": {"black": {"below_four_fifths": True}}},
        ]
    }
    (sweep,) = [f for f in fnd.build_findings(summary) if f["kind"] == "sensitivity"]
    assert sweep["sentence"].endswith("the flag of black disappears at served threshold 0.25.")
    assert sweep["figures"]["disappears"] == {"black": [0.25]}


def test_a_new_kind_registers_itself() -> None:
    @fnd.register_finding("test_kind", order=1)
    def _build(summary):
        return [fnd.Finding("test_kind", "A test finding.", {"x": 1}, salient=True)]

    try:
        out = fnd.build_findings({})
        assert out == [{"kind": "test_kind", "sentence": "A test finding.", "figures": {"x": 1}}]
    finally:
        fnd.BUILDERS[:] = [b for b in fnd.BUILDERS if b[1] != "test_kind"]


def test_enclave_sentence_and_lisa_after_fdr() -> None:
    summary = {
        "enclaves": [
            {
                "id": "E1",
                "area_ids": ["a", "b"],
                "population": 1200.0,
                "share_difference": {"black": 0.4},
                "group_shares": {"black": 0.75},
                "ring_group_shares": {"black": 0.35},
                "p_value": 0.01,
            }
        ],
        "clustering": {
            "moran": {"I": 0.5, "p_sim": 0.001, "permutations": 999},
            "local_moran": {
                "fdr": "bh",
                "crosstab": {
                    "rows": {
                        "low-low": {
                            "majority_minority": {"areas": 3, "population": 900.0},
                            "not_majority_minority": {"areas": 1, "population": 100.0},
                        }
                    }
                },
            },
        },
    }
    out = fnd.build_findings(summary)
    assert out[0]["sentence"] == (
        "Enclave E1, 2 unserved areas with 1,200 people enclosed by served areas, is 75% "
        "black against 35% in the ring of areas around it (composition test p = 0.010)."
    )
    assert "4 areas form cold spots" in out[1]["sentence"]
    assert "after false-discovery-rate correction" in out[1]["sentence"]
    assert "3 of them majority-minority tracts" in out[1]["sentence"]


# --- assessment-area review (12 CFR 228.41(e): may not arbitrarily exclude LMI tracts) --


def test_assessment_area_review_on_a_grid() -> None:
    # A 3 x 3 grid (cells numbered row by row from the lower left); the assessment area is
    # the left column (cells 1, 4, 7). Queen-touching cells outside it: 2, 5, 8 (the middle
    # column); the right column does not touch it. LMI: cells 2, 3 and 8; majority-minority:
    # cells 5 and 6. Counted by hand: adjacent LMI 2 and 8, adjacent majority-minority 5.
    cells = grid(3, 3)
    ids = cells["geoid"].to_numpy().astype(str)
    inside = np.isin(np.arange(9), [0, 3, 6])
    tiers = np.array(
        ["middle", "low", "moderate", "upper", "middle", "middle", "upper", "low", "middle"],
        dtype=object,
    )
    mm = np.isin(np.arange(9), [4, 5])
    population = np.arange(1, 10) * 100.0
    review = review_assessment_area(
        ids, np.asarray(cells.geometry.array), inside, tiers, mm, population
    )
    assert review.adjacent_lmi == (ids[1], ids[7])
    assert review.adjacent_lmi_population == 200 + 800
    assert review.adjacent_majority_minority == (ids[4],)
    # All nine cells share county 01001: 3 of 9 inside, a partial county.
    assert review.partial_counties == {"01001": {"inside": 3, "areas": 9}}
    assert review.lmi_share == 0.0 and review.lmi_share_counties == pytest.approx(3 / 9)
    assert review.majority_minority_share_counties == pytest.approx(2 / 9)
    found = fnd.build_findings({"assessment_area": review.to_dict()})
    assert found[0]["sentence"].startswith(
        "The listed tracts leave out 2 low- or moderate-income tracts (01001000002, "
        "01001000008; 1,000 people) and 1 majority-minority tract (500 people)"
    )


# --- demo scenarios: the first sentence is the scenario's story ---------------------------


def _quick(name: str) -> dict:
    spec = load_spec(BUNDLED / f"{name}.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_audit(
            spec.with_analysis(permutations=49, enclave_draws=49, sensitivity=False)
        ).summary


def test_demo_delivery_first_finding() -> None:
    s = _quick("delivery")
    first = s["findings"][0]
    assert first["kind"] == "enclave"
    assert first["sentence"].startswith(
        "Enclave E1, 23 unserved areas with 94,195 people enclosed by served areas, is 76% "
        "non-Hispanic Black against 35% in the ring of areas around it"
    )
    assert s["study_area"]["kind"] == "polygons" and s["study_area"]["areas_outside"] > 0


def test_demo_branches_first_finding_names_the_closures() -> None:
    first = _quick("branches")["findings"][0]
    assert first["kind"] == "change"
    assert first["sentence"].startswith(
        "From branches_2024 to branches_2026 (5 sites closed: Ostmere Savings branch 17"
    )
    assert "28 areas lost service (125,014 people)" in first["sentence"]


def test_demo_assessment_area_first_finding_names_lmi_tracts() -> None:
    first = _quick("assessment_area")["findings"][0]
    assert first["kind"] == "assessment_area"
    assert first["sentence"].startswith(
        "The listed tracts of assessment_area leave out 8 low- or moderate-income tracts "
        "(99017010900"
    )


@pytest.mark.parametrize("scenario", ["delivery", "branches", "assessment_area"])
def test_first_viewport_shows_the_finding(tmp_path: Path, browser_page, scenario: str) -> None:
    spec = load_spec(BUNDLED / f"{scenario}.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = run_audit(spec.with_analysis(permutations=49, enclave_draws=49, sensitivity=False))
        result.write(tmp_path / "out")
    first = result.summary["findings"][0]["sentence"]
    driver = browser_page.driver
    driver.execute_cdp_cmd(
        "Emulation.setDeviceMetricsOverride",
        {"width": 1400, "height": 900, "deviceScaleFactor": 1, "mobile": False},
    )
    try:
        browser_page.open(
            tmp_path / "out" / "report.html", ready="document.readyState === 'complete'"
        )
        shot = browser_page.screenshot("first_viewport.png")
        box = browser_page.js(
            "var li = document.querySelector('#findings .finding-list li');"
            "var r = li.getBoundingClientRect();"
            "return [li.textContent, r.top, r.bottom, window.innerWidth, window.innerHeight];"
        )
    finally:
        driver.execute_cdp_cmd("Emulation.clearDeviceMetricsOverride", {})
    text, top, bottom, width, height = box
    assert (width, height) == (1400, 900)
    assert text == first
    assert 0 <= top and bottom <= 900, (top, bottom)
    assert shot.exists()


# --- map context ---------------------------------------------------------------------------


def test_map_layers_of_study_area_and_site_changes() -> None:
    from coverage_audit.report import map_context as cmap

    summary = {
        "change": {
            "before": "a",
            "after": "b",
            "site_changes": [
                {"name": "North", "change": "closed", "lon": 1.0, "lat": 2.0},
                {"name": "South", "change": "opened", "lon": 3.0, "lat": 4.0},
            ],
        }
    }
    layer = cmap.site_change_overlay(summary)
    assert layer is not None
    assert layer["names"] == ["North (closed)", "South (opened)"]
    assert layer["colors"] == [cmap.SITE_CHANGE_COLORS["closed"], cmap.SITE_CHANGE_COLORS["opened"]]
    assert cmap.site_change_overlay({}) is None


def test_demo_maps_open_on_the_study_area(tmp_path: Path) -> None:
    import json
    import re

    spec = load_spec(BUNDLED / "delivery.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = run_audit(spec.with_analysis(permutations=49, enclave_draws=49, sensitivity=False))
    result.write(tmp_path / "out")
    page = (tmp_path / "out" / "map.html").read_text(encoding="utf-8")
    block = re.search(
        r'<script type="application/json" id="ca-map-data">(.*?)</script>', page, re.S
    )
    data = json.loads(block.group(1))
    assert "Outside the study area (not analysed)" in page
    # LISA hover texts say the q-value is after false-discovery-rate correction (bh).
    assert data["lisa_fdr"] is True and "lisa_q" in data["fields"]
    assert "after false-discovery-rate correction" in page
    assert data["texts"]["findings_link"]["href"] == "report.html#findings"
    assert data["texts"]["finding"] == result.summary["findings"][0]["sentence"]
    # The view opens on the study area; the whole region is larger and contains it.
    (south, west), (north, east) = data["bounds"]
    (rs, rw), (rn, r_east) = data["region_bounds"]
    assert rs <= south and rw <= west and rn >= north and r_east >= east
    assert (rn - rs) * (r_east - rw) > (north - south) * (east - west)


def test_report_shortens_digests_and_keeps_the_full_value_in_the_title(tmp_path: Path) -> None:
    import re

    spec = load_spec(BUNDLED / "assessment_area.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = run_audit(spec.with_analysis(permutations=49, enclave_draws=49, sensitivity=False))
    result.write(tmp_path / "out")
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    digests = [r["sha256"] for r in result.manifest["inputs"]]
    for full in digests:
        assert f'title="{full}"' in page
        assert f">{full[:16]}\u2026<" in page
    # No 64-hex-digit run is printed as text (only inside title attributes).
    text = re.sub(r'title="[^"]*"', "", page)
    assert not re.search(r"[0-9a-f]{64}", text)
    # The assessment-area review has its own evidence section.
    review = result.summary["assessment_area"]
    assert '<section id="assessment_area"' in page
    assert ", ".join(review["adjacent_excluded_lmi"]["ids"]) in page
    # Findings come first, then the evidence, methods, cautions and the appendix last.
    order = [
        page.index(f'<section id="{a}"') for a in ("findings", "coverage", "cautions", "audited")
    ]
    assert order == sorted(order)
