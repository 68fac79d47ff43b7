"""Number formats of the report's generic tables: looked up by field, not by name shape.

Consistency checks of the report's own conventions (no outside source): the expected
strings are written out by hand from the formats the report documents (thousands
separators for counts, 4 decimals for statistics, 2 for z-scores, 3 for p-values and
"< 0.001" below that, common practice in statistical reporting, no single source).
"""

from __future__ import annotations

from typing import get_args

import numpy as np
import pytest

from coverage_audit.report.formats import FIELD_FORMATS, FormatKind, field_format, kind_by_name
from coverage_audit.report.markup import fmt_auto, fmt_kind


def test_every_field_has_a_known_kind():
    assert set(FIELD_FORMATS.values()) <= set(get_args(FormatKind))


@pytest.mark.parametrize(
    ("kind", "value", "text"),
    [
        ("count", 1161.0, "1,161"),
        ("count", 2.5, "2.5000"),
        ("measure", 0.03220000807450558, "0.0322"),
        ("measure", 3.0, "3"),
        ("statistic", 1.0, "1.0000"),
        ("statistic", -0.36326257428709463, "\u22120.3633"),
        ("share", 0.5, "0.5000"),
        ("ratio", 0.8, "0.8000"),
        ("z", -8.199541382215843, "\u22128.20"),
        ("p_value", 0.01, "0.010"),
        ("p_value", 0.0009, "< 0.001"),
        ("p_value", 0.001, "0.001"),  # the boundary itself prints as a number
        ("count", float("nan"), "n/a"),
    ],
)
def test_kinds_print_as_documented(kind, value, text):
    assert fmt_kind(kind, value) == text


def test_fields_are_looked_up_not_guessed():
    # "joins" is a count (whole: separators), "I" a statistic even when whole,
    # "edge_tolerance_m" a measure; types other than float keep their own formats.
    assert fmt_auto("joins", 1161.0) == "1,161"
    assert fmt_auto("I", 1.0) == "1.0000"
    assert fmt_auto("p_sim", 0.01) == "0.010"
    assert fmt_auto("z_sim", 1.5) == "1.50"
    assert fmt_auto("areas", 414) == "414"
    assert fmt_auto("islands", []) == "none"
    assert fmt_auto("other_components", [3, 1200]) == "3, 1,200"
    assert fmt_auto("I", None) == "n/a"
    assert fmt_auto("x", np.bool_(True)) == "yes"


@pytest.mark.parametrize(
    ("key", "kind"),
    [
        ("p_sim_x", "p_value"),
        ("lisa_p", "p_value"),
        ("z_new", "z"),
        ("mean_new", "statistic"),
        ("share_new", "statistic"),
        ("ratio_new", "statistic"),
        ("served_share", "measure"),  # the name rule reads prefixes only
        ("new_count", "measure"),
    ],
)
def test_unknown_fields_fall_back_to_the_name_rule(key, kind):
    assert key not in FIELD_FORMATS
    assert kind_by_name(key) == kind and field_format(key) == kind


def test_a_real_audits_generic_tables_use_listed_fields_only(demo_audit):
    # Every float the generic tables of a real audit's findings show (spatial weights,
    # bivariate Moran, join count settings) has an explicit format, so none is guessed.
    summary = demo_audit("branches").findings.to_dict()
    clustering = summary["clustering"]
    joins = clustering["join_counts"]
    per_kind = {
        p + k
        for k in ("served_served", "unserved_unserved", "served_unserved")
        for p in ("", "expected_", "variance_", "z_", "p_sim_")
    }
    shown = {
        **(clustering.get("weights") or summary["weights"]),
        **clustering["bivariate_moran"],
        **{k: v for k, v in joins.items() if k not in per_kind},
    }
    floats = {k for k, v in shown.items() if isinstance(v, float)}
    assert floats, "the tables hold floats"
    assert floats <= set(FIELD_FORMATS), sorted(floats - set(FIELD_FORMATS))
