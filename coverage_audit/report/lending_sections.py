"""The report's lending section: one lender's HMDA records against its peers'.

Takes the summary's ``lending`` findings and gives the section "Lending patterns from loan
records" (the pooled comparisons by record set and tract category, denial rates, the
year-and-market cells, the screen of every lender, the lending gaps of the footprint) and
its lines in the page's key figures. Reads the findings only.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .markup import (
    NA,
    Html,
    Num,
    as_mapping,
    fmt_count,
    fmt_fixed,
    fmt_p,
    fmt_percent,
    fmt_points,
    not_computed,
    para,
    records,
    section,
    skipped_reason,
    table,
    tag,
)
from .sections import Page

TITLE = "Lending patterns from loan records"
CATEGORY_LABELS = {
    "majority_minority": "Majority-minority tracts",
    "majority_black_hispanic": "Majority Black-and-Hispanic tracts",
    "high_minority": "High-minority tracts",
    "lmi": "Low- and moderate-income tracts",
    "all_tracts": "All tracts",
}
SET_LABELS = {
    "applications": "Applications (action taken 1-5)",
    "originations": "Originations (1)",
    "purchased": "Purchased loans (6)",
    "preapprovals": "Preapproval requests (7-8)",
}
_HEADERS = (
    Num("Lender"),
    Num("Share"),
    Num("Peers"),
    Num("Peers' share"),
    Num("Ratio"),
    Num("Difference"),
    Num("z"),
    Num("p (z, two-sided)"),
    Num("p (Fisher)"),
    "Flag",
)


def _flag(entry: Mapping[str, Any], concern: str = "below") -> Html | str:
    if entry.get("below_peers"):
        text = "below peers"
    elif entry.get("above_peers"):
        text = "above peers"
    else:
        return "no"
    return tag("span", text, class_="flag") if text.startswith(concern) else text


def _cells(entry: Mapping[str, Any], concern: str = "below") -> tuple[Any, ...]:
    return (
        Num(f"{fmt_count(entry.get('lender_count'))} / {fmt_count(entry.get('lender_total'))}"),
        Num(fmt_percent(entry.get("lender_share"))),
        Num(f"{fmt_count(entry.get('peer_count'))} / {fmt_count(entry.get('peer_total'))}"),
        Num(fmt_percent(entry.get("peer_share"))),
        Num(fmt_fixed(entry.get("ratio"), 2)),
        Num(fmt_points(entry.get("difference"))),
        Num(fmt_fixed(entry.get("z"), 2)),
        Num(fmt_p(entry.get("p_two_sided"))),
        Num(fmt_p(entry.get("fisher_p")) if entry.get("fisher_p") is not None else "not needed"),
        _flag(entry, concern),
    )


def _comparison_rows(
    group: Mapping[str, Any], labels: Mapping[str, str], concern: str = "below"
) -> list[tuple[Any, ...]]:
    rows = []
    for key, entry in group.items():
        label = labels.get(key, key)
        if not isinstance(entry, Mapping):
            rows.append((label, *([NA] * 9), "not available"))
            continue
        rows.append((label, *_cells(entry, concern)))
    return rows


def lending_section(page: Page) -> Html:
    """Return the section "Lending patterns from loan records"."""
    s = as_mapping(page.summary.get("lending"))
    reason = skipped_reason(s)
    if reason:
        return section("lending", TITLE, not_computed(reason))
    lender = as_mapping(s.get("lender"))
    name = str(lender.get("name") or lender.get("lei") or NA)
    scope = as_mapping(s.get("scope"))
    rule = str(s.get("peer_rule") or NA)
    rule_text = {
        "market": "all other lenders in the same market and year",
        "band": "lenders whose applications in the same market and year are within "
        f"{_band(s.get('peer_band'))} of the lender's (a common practice, no single source)",
        "list": "the named lenders " + ", ".join(str(x) for x in s.get("peer_list") or []),
    }.get(rule, rule)
    parts: list[Any] = [
        para(
            f"{name} (LEI {lender.get('lei') or NA}) against its peers: {rule_text}; "
            f"{fmt_count(s.get('peer_lenders'))} peer lenders in all. Years "
            f"{', '.join(str(y) for y in scope.get('years') or []) or NA}; markets "
            f"({scope.get('market_by') or NA}) "
            f"{', '.join(str(m) for m in scope.get('markets') or []) or NA}. "
            f"{str(s.get('tract_source_note') or '').capitalize()}. Shares are counted "
            "within each year and market and summed (pooled); the lender is compared only "
            "where it has applications."
        ),
        _records_part(as_mapping(s.get("records"))),
    ]
    by_set = as_mapping(s.get("by_set"))
    rows: list[tuple[Any, ...]] = []
    for set_name, group in by_set.items():
        for row in _comparison_rows(as_mapping(group), CATEGORY_LABELS):
            rows.append((f"{SET_LABELS.get(set_name, set_name)}: {row[0]}", *row[1:]))
    parts.append(
        table(
            ("Records and tract category", *_HEADERS),
            rows,
            caption=f"{name}'s share of its records in each tract category against its "
            "peers', pooled over years and markets",
            table_id="lending-table",
        )
    )
    parts.append(_stratified_part(as_mapping(s.get("stratified"))))
    denials = as_mapping(s.get("denials"))
    parts.append(
        table(
            ("Tracts", *_HEADERS),
            _comparison_rows(denials, CATEGORY_LABELS, concern="above"),
            caption=f"Denial rates ({s.get('denial_rate') or 'denied over decided'}), "
            f"{name} against its peers",
            table_id="lending-denials",
        )
    )
    applicant = as_mapping(s.get("denials_by_applicant"))
    context_rows = []
    for key in ("race", "ethnicity"):
        for label, entry in as_mapping(applicant.get(key)).items():
            if isinstance(entry, Mapping):
                context_rows.append((f"{key}: {label}", *_cells(entry, "above")))
    if context_rows:
        parts.append(
            table(
                ("Applicants (derived race or ethnicity)", *_HEADERS),
                context_rows,
                caption="Context: denial rates by applicant race and ethnicity, the lender "
                "against its peers (the records hold no credit information)",
                table_id="lending-applicants",
            )
        )
    parts.append(_cells_part(s))
    parts.append(_screen_part(as_mapping(s.get("screen"))))
    parts.append(_gaps_part(as_mapping(s.get("gaps")), name))
    parts.append(
        para(
            f"Tests: two-proportion z-test (pooled standard error); Fisher's exact test "
            f"(two-sided) when the smallest expected cell is below "
            f"{fmt_fixed(s.get('small_cell'), 0)}, and then its p-value sets the flag. A "
            f"share is flagged below (above) the peers' when that p-value is below "
            f"{fmt_fixed(s.get('alpha'), 2)}. A statistical disparity is not by itself proof "
            "of discrimination: the peers, markets and tract categories chosen shape the "
            "figures, the records say nothing of credit quality, and legal conclusions "
            "belong to counsel and the regulators.",
            class_="note",
        )
    )
    return section("lending", TITLE, *parts)


def _stratified_part(strat: Mapping[str, Any]) -> Html:
    items = []
    for set_name in ("applications", "originations"):
        entry = as_mapping(as_mapping(strat.get(set_name)).get("majority_minority"))
        if entry.get("odds_ratio_mh") is None:
            continue
        verdict = (
            "below its peers"
            if entry.get("below_peers")
            else "above its peers"
            if entry.get("above_peers")
            else "not significantly different"
        )
        items.append(
            f"{SET_LABELS[set_name].split(' (')[0].lower()}: common odds ratio "
            f"{fmt_fixed(entry.get('odds_ratio_mh'), 2)} over {fmt_count(entry.get('strata'))} "
            f"years and markets, {_p_text(entry.get('p_value'))} ({verdict})"
        )
    if not items:
        return Html("")
    return para(
        "Within each year and market (Mantel-Haenszel), majority-minority tracts: "
        + "; ".join(items)
        + ". This compares the lender with its peers inside each market, so markets with "
        "different shares of minority tracts do not mix."
    )


def _p_text(value: Any) -> str:
    text = fmt_p(value)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def _band(value: Any) -> str:
    if isinstance(value, list) and len(value) == 2:
        return f"{100 * float(value[0]):g}% to {100 * float(value[1]):g}%"
    return NA


def _records_part(rec: Mapping[str, Any]) -> Html:
    if not rec:
        return Html("")
    malformed = as_mapping(rec.get("malformed_by_reason"))
    filtered = as_mapping(rec.get("filtered_by"))
    text = (
        f"{fmt_count(rec.get('lines'))} records read; {fmt_count(rec.get('analysed'))} "
        f"analysed; {fmt_count(rec.get('malformed'))} malformed"
    )
    if malformed:
        text += " (" + "; ".join(f"{k}: {fmt_count(v)}" for k, v in malformed.items()) + ")"
    text += f", listed in exclusions.csv with their line numbers; {fmt_count(rec.get('filtered_out'))} outside the filters"
    if filtered:
        text += " (" + "; ".join(f"{k}: {fmt_count(v)}" for k, v in filtered.items()) + ")"
    outside = rec.get("outside_areas")
    if outside:
        text += f"; {fmt_count(outside)} in tracts outside the analysed areas"
    return para(text + ".")


def _cells_part(s: Mapping[str, Any]) -> Html:
    rows = []
    for cell in records(s.get("by_year_market")):
        entry = as_mapping(
            as_mapping(as_mapping(cell.get("by_set")).get("applications")).get("majority_minority")
        )
        if not entry:
            continue
        rows.append((f"{cell.get('year')}, market {cell.get('market')}", *_cells(entry)))
    if not rows:
        return Html("")
    return table(
        ("Year and market", *_HEADERS),
        rows,
        caption="Applications from majority-minority tracts, by year and market",
        table_id="lending-cells",
    )


def _screen_part(screen: Mapping[str, Any]) -> Html:
    lenders = records(screen.get("lenders"))
    if not lenders:
        return Html("")
    rows = []
    attrs = []
    for x in lenders:
        label = (f"{x['name']} ({x.get('lei')})" if x.get("name") else str(x.get("lei"))) + (
            ", the lender reviewed" if x.get("subject") else ""
        )
        rows.append((label, *_cells(x)))
        attrs.append({"class_": "flagged" if x.get("below_peers") else None})
    return table(
        ("Lender", *_HEADERS),
        rows,
        row_attrs=attrs,
        caption="Screen of every lender with at least "
        f"{fmt_count(screen.get('min_applications'))} applications: its share of "
        "applications from majority-minority tracts against all other lenders",
        table_id="lending-screen",
    )


def _gaps_part(gaps: Mapping[str, Any], name: str) -> Html:
    if not gaps or not gaps.get("footprint_tracts"):
        return Html("")
    mm, other = as_mapping(gaps.get("majority_minority")), as_mapping(gaps.get("other"))
    cmp = as_mapping(gaps.get("comparison"))
    return para(
        f"Where the lending is not: of the {fmt_count(gaps.get('footprint_tracts'))} tracts "
        f"of the footprint, {fmt_count(gaps.get('gap_tracts'))} had "
        f"{_how_few(gaps.get('max_applications'))} applications to {name}: "
        f"{fmt_count(mm.get('gaps'))} of {fmt_count(mm.get('tracts'))} majority-minority "
        f"tracts ({fmt_percent(cmp.get('lender_share'))}) against "
        f"{fmt_count(other.get('gaps'))} of {fmt_count(other.get('tracts'))} other tracts "
        f"({fmt_percent(cmp.get('peer_share'))}); {_p_text(cmp.get('p_value'))} "
        f'({cmp.get("test") or "z"} test). The map\'s layer "Lending gaps" shows them.'
    )


def key_figures(page: Page) -> list[Html]:
    """Return the lending review's headline findings for the page's key figures."""
    s = as_mapping(page.summary.get("lending"))
    if not s or skipped_reason(s):
        return []
    return [tag("li", str(sentence)) for sentence in s.get("findings") or []]


def _how_few(most: Any) -> str:
    """Return "no" for a gap of zero applications, else "at most N"."""
    return "no" if most == 0 else f"at most {fmt_count(most)}"
