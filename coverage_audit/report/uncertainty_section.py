"""Report section "How sure are these figures?": survey error of rates, ratios and flags.

Reads ``coverage.uncertainty`` and the interval keys of ``coverage.groups.<g>`` (and
``segregation.uncertainty``) from the summary and gives a table of each group's rate and
ratio with their 90% intervals, z of the difference and the four-fifths confidence, and
plain sentences for every flag the survey error leaves uncertain. Shown only when the
audit carried margins (``coverage.uncertainty`` is not ``"none"``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from .markup import (
    Html,
    Num,
    as_mapping,
    fmt_fixed,
    fmt_interval,
    fmt_percent,
    ordered,
    para,
    section,
    table,
    tag,
)
from .sections import Page

ANCHOR = "survey_error"
TITLE = "How sure are these figures?"

_CONFIDENCE_WORDS = {
    "below": "below 0.8 (whole interval)",
    "not_below": "not below 0.8",
    "uncertain": "uncertain: interval straddles 0.8",
}


def has_margins(summary: Mapping[str, Any]) -> bool:
    """Whether the audit carried survey margins into its figures."""
    method = as_mapping(summary.get("coverage")).get("uncertainty")
    return method in ("delta", "replicates")


def interval_text(ci: Any, formatter: Any = fmt_fixed) -> str:
    """Format an interval as "low to high" (n/a when missing)."""
    if not isinstance(ci, Sequence) or len(ci) != 2:
        return fmt_interval(None, None, formatter)
    return fmt_interval(ci[0], ci[1], formatter)


def uncertain_sentence(group: str, item: Mapping[str, Any], comparison: str) -> str:
    """Plain words for a ratio under 0.8 whose interval reaches 0.8 or more."""
    ci = item.get("ratio_ci90") or [None, None]
    z = item.get("difference_z")
    if item.get("difference_distinguishable"):
        gap = (
            f"The gap itself is larger than the survey's error (z = {fmt_fixed(z, 2)}), but "
            "whether it is wide enough to put the ratio under 0.8 is within the noise of the "
            "survey"
        )
    else:
        gap = (
            f"Even the gap itself is within the survey's error (z = {fmt_fixed(z, 2)}), and "
            "so is whether the ratio is under 0.8"
        )
    return (
        f"{group}: the coverage rate is {fmt_fixed(item.get('ratio'), 2)} times that of "
        f"{comparison}, under the four-fifths line, but with the survey's margins of error the "
        f"ratio could be anywhere from {fmt_fixed(ci[0], 2)} to {fmt_fixed(ci[1], 2)} (90% "
        f"interval). {gap}: treat the four-fifths flag as unconfirmed, not as cleared."
    )


def survey_error_section(page: Page) -> Html:
    """Return the section: intervals by group and the flags the survey error leaves open."""
    cov = as_mapping(page.summary.get("coverage"))
    data = as_mapping(cov.get("groups"))
    method = cov.get("uncertainty")
    how = (
        "the Census Bureau's 80 variance replicates (Var = 4/80 × sum of squared differences)"
        if method == "replicates"
        else "the delta method (first-order linearisation), with SE = MOE / 1.645 for each "
        "area's count; the minority count's margin follows the Census Bureau's difference "
        "rule and its covariance with the reference group is carried"
    )
    parts: list[Any] = [
        para(
            "Group counts are survey estimates with margins of error. This audit carries them "
            f"into each rate and ratio by {how}, treating areas as independent and covered "
            "fractions as exact. Intervals are at 90%, the level of published margins. A "
            "difference is distinguishable at 90% when |z| > 1.645, the Census Bureau's test "
            "for comparing estimates. A four-fifths flag is below when the whole interval of "
            "the ratio is under 0.8, not below when it is at or above 0.8, and uncertain when "
            "it straddles 0.8."
        )
    ]
    rows = []
    for g in ordered(page.groups, data):
        item = as_mapping(data.get(g))
        z = item.get("difference_z")
        rows.append(
            (
                g,
                Num(fmt_percent(item.get("rate"))),
                Num(interval_text(item.get("rate_ci90"), fmt_percent)),
                Num(fmt_fixed(item.get("ratio"))),
                Num(interval_text(item.get("ratio_ci90"))),
                Num(fmt_fixed(z, 2)),
                "yes" if item.get("difference_distinguishable") else "no" if z is not None else "",
                _CONFIDENCE_WORDS.get(str(item.get("four_fifths_confidence")), ""),
                Num(fmt_percent(item.get("cv"))),
            )
        )
    headers = (
        "Group",
        Num("Coverage rate"),
        Num("90% interval"),
        Num("Ratio"),
        Num("90% interval"),
        Num("z of difference"),
        "Distinguishable at 90%",
        "Four-fifths flag",
        Num("CV of population"),
    )
    parts.append(
        table(
            headers,
            rows,
            table_id="uncertainty-table",
            caption=f"Survey error of coverage by group (ratios against {page.comparison_label})",
        )
    )
    comparison = str(page.comparison_group or page.reference)
    uncertain = [
        g
        for g in ordered(page.groups, data)
        if as_mapping(data.get(g)).get("four_fifths_confidence") == "uncertain"
        and as_mapping(data.get(g)).get("below_four_fifths")
    ]
    if uncertain:
        parts.append(
            tag(
                "ul",
                *(tag("li", uncertain_sentence(g, data[g], comparison)) for g in uncertain),
                id="uncertain-flags",
            )
        )
    unreliable = [
        g for g in ordered(page.groups, data) if (as_mapping(data.get(g)).get("cv") or 0) > 0.3
    ]
    if unreliable:
        parts.append(
            para(
                "Group totals with a coefficient of variation above 30% (a common cut-off for "
                f"unreliable estimates): {', '.join(unreliable)}."
            )
        )
    seg = as_mapping(as_mapping(page.summary.get("segregation")).get("uncertainty"))
    if seg:
        diss = as_mapping(seg.get("dissimilarity_ci90"))
        parts.append(
            para(
                f"Segregation indices and enclave group shares: 90% intervals from a "
                f"{seg.get('method')} of {seg.get('draws')} draws of the counts"
                + (
                    "; dissimilarity from the reference group: "
                    + "; ".join(f"{g} {interval_text(ci)}" for g, ci in diss.items())
                    if diss
                    else ""
                )
                + "."
            )
        )
    shares = [
        e
        for e in page.summary.get("enclaves") or []
        if isinstance(e, Mapping) and "group_shares_ci90" in e
    ]
    if shares:
        parts.append(
            tag(
                "ul",
                *(tag("li", _enclave_line(e)) for e in shares),
                id="enclave-share-intervals",
            )
        )
    return section(ANCHOR, TITLE, *parts)


def _enclave_line(enclave: Mapping[str, Any]) -> str:
    """One enclave's group shares with their 90% intervals."""
    cis = as_mapping(enclave.get("group_shares_ci90"))
    values = as_mapping(enclave.get("group_shares"))
    return (
        f"Enclave {enclave.get('id')}: "
        + "; ".join(
            f"{g} {fmt_percent(values.get(g))} ({interval_text(ci, fmt_percent)})"
            for g, ci in cis.items()
        )
        + " of its residents (90% intervals)."
    )
