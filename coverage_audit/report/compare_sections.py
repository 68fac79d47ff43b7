"""Report sections comparing footprints and lenders: footprints compared, change, peers.

Takes the page's shared state (:class:`.sections.Page`) and reads the summary.json
sections that :mod:`coverage_audit.compare` results write through the audit:
``comparison`` (with ``footprints_compared``, each footprint's description),
``change`` (areas that lost or gained service between two footprints and the group
rates before and after) and ``peers`` (each lender's share of activity in
majority-minority areas against all other lenders). Gives one escaped HTML section
each, with the figures as the summary holds them ("n/a" for ``None``) and a sentence
on how to read them; a section whose stage recorded ``{"skipped": reason}`` says why.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from ..stats.four_fifths import ratio_below_four_fifths
from .markup import (
    NA,
    STAR_NOTE,
    Html,
    Num,
    as_mapping,
    as_number,
    flagged_number,
    fmt_bool,
    fmt_count,
    fmt_distance,
    fmt_fixed,
    fmt_interval,
    fmt_p,
    fmt_percent,
    fmt_points,
    fmt_pp_value,
    get_in,
    join,
    not_computed,
    ordered,
    para,
    plural,
    records,
    section,
    skipped_reason,
    table,
    tag,
)
from .sections import Page

#: Area ids of a change listed in the page; beyond this the page points to areas.csv.
MAX_LISTED_CHANGE_IDS = 30


# --- footprints compared -----------------------------------------------------------------


def _footprint_description(described: Any) -> str:
    d = as_mapping(described)
    if not d:
        return ""
    kind = d.get("kind")
    size = as_number(d.get("area_km2"))
    area = "" if size is None else f", {fmt_fixed(size, 1)} km\u00b2"
    if kind == "points":
        reach = fmt_distance(d.get("radius_m"), "m")
        span = d.get("radius_m_range")
        if as_number(d.get("radius_m")) is None and isinstance(span, list) and len(span) == 2:
            reach = f"{fmt_distance(span[0], 'm')} to {fmt_distance(span[1], 'm')}"
        return (
            f"{fmt_count(d.get('points', d.get('features')))} service points reaching {reach}{area}"
        )
    if kind == "polygons":
        return f"{fmt_count(d.get('features'))} service-area polygons{area}"
    if kind == "ids":
        return f"{fmt_count(d.get('served_ids'))} listed areas"
    return area.lstrip(", ")


def _primary_footprint(page: Page) -> str | None:
    name = page.footprint.get("name") or get_in(page.summary, "footprint", "name")
    if name:
        return str(name)
    listed = get_in(page.manifest, "spec", "footprint")
    if isinstance(listed, list) and listed and isinstance(listed[0], Mapping):
        return listed[0].get("name")
    return None


def comparison_section(page: Page) -> Html:
    """Return "Footprints compared": the footprints ranked, with the rule in words."""
    cmp = page.summary["comparison"]
    reason = skipped_reason(cmp)
    if reason:
        return section("comparison", "Footprints compared", not_computed(reason))
    described = as_mapping(page.summary.get("footprints_compared"))
    footprints = records(cmp.get("footprints"))
    reference = page.label(str(cmp.get("reference_group") or page.reference))
    primary = _primary_footprint(page)
    rule = cmp.get("ranking_rule")
    parts: list[Any] = [
        para(
            "The same areas, groups and served threshold under each footprint. "
            + (f"Footprints are {rule}. " if rule else "")
            + "Rank 1 is the footprint whose least-reached group comes closest to the "
            f"rate of the reference group ({reference})."
        )
    ]
    rows: list[tuple[Any, ...]] = []
    attrs: list[dict[str, Any]] = []
    for f in footprints:
        name = str(f.get("name") or NA)
        about = _footprint_description(described.get(name))
        label: Any = join(
            [
                tag("strong", name) if name == primary else name,
                " (this audit)" if name == primary else "",
                # The space keeps the words apart when the cell is read as text.
                join([" ", tag("span", about, class_="cell-note")]) if about else "",
            ]
        )
        below = f.get("below_four_fifths")
        rows.append(
            (
                Num(fmt_count(f.get("rank"))),
                label,
                page.label(str(f["worst_group"])) if f.get("worst_group") else NA,
                Num(fmt_fixed(f.get("worst_ratio"))),
                Num(fmt_count(f.get("enclave_count"))),
                tag("span", _group_list(below, page), class_="flag")
                if below
                else _group_list(below, page),
            )
        )
        attrs.append({"class_": "flagged" if below else None, "data_footprint": name})
    parts.append(
        table(
            (
                Num("Rank"),
                "Footprint",
                "Worst group",
                Num("Worst ratio"),
                Num("Enclaves"),
                "Groups below four-fifths",
            ),
            rows,
            row_attrs=attrs,
            table_id="footprint-table",
            caption=f"Footprints ranked (ratios of each group's {ranked_rate(cmp)} to {reference})",
        )
    )
    parts.append(_footprint_ratio_table(cmp, footprints, page))
    for note in cmp.get("notes") or []:
        parts.append(para(f"Note: {note}.", class_="note"))
    return section("comparison", "Footprints compared", *parts)


def _group_list(groups: Any, page: Page) -> str:
    if not isinstance(groups, (list, tuple)):
        return NA
    return ", ".join(page.label(str(g)) for g in groups) or "none"


def _below(fields: Mapping[str, Any]) -> bool:
    """Return the four-fifths flag of a group's ranking ratio, as the comparison set it.

    Summaries written before the flag was recorded fall back on the shared exact rule.
    """
    if "ranking_below_four_fifths" in fields:
        return bool(fields["ranking_below_four_fifths"])
    return ratio_below_four_fifths(as_number(fields.get("ranking_ratio")))


def ranked_rate(cmp: Mapping[str, Any]) -> str:
    """Return the rate the comparison ranked on, in words."""
    return "served-area rate" if cmp.get("by") == "served_area_rate" else "coverage rate"


def _footprint_ratio_table(
    cmp: Mapping[str, Any], footprints: Sequence[Mapping[str, Any]], page: Page
) -> Html:
    listed = cmp.get("groups")
    present = [str(g) for g in listed] if isinstance(listed, list) else []
    for f in footprints:
        present.extend(g for g in as_mapping(f.get("groups")) if g not in present)
    groups = ordered(page.groups, present)
    if not groups or not footprints:
        return Html("")
    rate_key = "served_area_rate" if cmp.get("by") == "served_area_rate" else "rate"
    rows = [
        (
            str(f.get("name") or NA),
            *(
                flagged_number(
                    f"{fmt_percent(get_in(f, 'groups', g, rate_key))} ("
                    f"{fmt_fixed(get_in(f, 'groups', g, 'ranking_ratio'))})",
                    _below(as_mapping(get_in(f, "groups", g))),
                )
                for g in groups
            ),
        )
        for f in footprints
    ]
    return table(
        ("Footprint", *(Num(page.label(g)) for g in groups)),
        rows,
        table_id="footprint-ratio-table",
        caption=f"Each group's {ranked_rate(cmp)} under each footprint (ranking ratio in brackets; "
        f"{STAR_NOTE})",
    )


# --- change between footprints -------------------------------------------------------------


def _change_names(page: Page) -> tuple[str | None, str | None]:
    change = as_mapping(page.summary.get("change"))
    before = change.get("before") or get_in(page.manifest, "spec", "change", "before")
    after = change.get("after") or get_in(page.manifest, "spec", "change", "after")
    return (None if before is None else str(before), None if after is None else str(after))


def _fraction_column(page: Page, name: str | None) -> str:
    """Return the areas.csv column holding a footprint's covered fraction."""
    if name is None:
        return "covered_fraction_<footprint>"
    return "covered_fraction" if name == _primary_footprint(page) else f"covered_fraction_{name}"


def change_section(page: Page) -> Html:
    """Return "Change between footprints": areas that lost or gained service, rate changes."""
    change = page.summary["change"]
    reason = skipped_reason(change)
    title = "Change between footprints"
    if reason:
        return section("change", title, not_computed(reason))
    before, after = _change_names(page)
    threshold = change.get("threshold")
    if threshold is None:
        threshold = get_in(page.summary, "coverage", "served_threshold")
    lead = (
        f"From {before or 'the earlier footprint'} to {after or 'the later footprint'}: "
        f"{fmt_count(change.get('areas_compared'))} areas compared; an area is served when its "
        f"covered fraction is at least {fmt_percent(threshold)}."
    )
    one_side = [
        f"{plural(len(change[k]), 'area')} only {word}"
        for k, word in (("only_before", "before"), ("only_after", "after"))
        if isinstance(change.get(k), list) and change[k]
    ]
    if one_side:
        lead += " Left out, present on one side only: " + "; ".join(one_side) + "."
    parts: list[Any] = [para(lead)]
    sides = [
        (key, label, as_mapping(change.get(key)))
        for key, label in (("lost_service", "Lost service"), ("gained_service", "Gained service"))
        if isinstance(change.get(key), Mapping)
    ]
    groups = ordered(
        page.groups,
        [g for _, _, side in sides for g in as_mapping(side.get("group_shares"))],
    )
    groups = list(dict.fromkeys(groups))
    if sides:
        rows = [
            (
                label,
                Num(fmt_count(side.get("count", len(side.get("ids") or [])))),
                Num(fmt_count(side.get("population"))),
                *(Num(fmt_percent(get_in(side, "group_shares", g))) for g in groups),
            )
            for _, label, side in sides
        ]
        parts.append(
            table(
                (
                    "Change",
                    Num("Areas"),
                    Num("Population"),
                    *(Num(f"{page.label(g)} share") for g in groups),
                ),
                rows,
                table_id="change-areas-table",
                caption="Areas that lost or gained service, and who lives there "
                "(group shares of their population)",
            )
        )
        parts.extend(_change_ids(label, side, page, before, after) for _, label, side in sides)
    data = as_mapping(change.get("groups"))
    if data:
        parts.append(_change_groups_table(data, page, change))
    return section("change", title, *parts)


def _change_ids(
    label: str, side: Mapping[str, Any], page: Page, before: str | None, after: str | None
) -> Html:
    ids = [str(i) for i in side.get("ids") or []]
    count = as_number(side.get("count"))
    total = len(ids) if count is None else int(count)
    if total == 0:
        return para(f"{label}: no area.")
    if ids and len(ids) <= MAX_LISTED_CHANGE_IDS:
        listed = join((tag("code", i) for i in ids), ", ")
        return para(f"{label} ({plural(total, 'area')}): ", listed, ".", class_="id-list")
    return para(
        f"{label}: {plural(total, 'area')}, too many to list here. They are the rows of ",
        tag("a", "areas.csv", href="areas.csv", class_="file-link"),
        " whose columns ",
        tag("code", _fraction_column(page, before)),
        " and ",
        tag("code", _fraction_column(page, after)),
        " fall on either side of the served threshold.",
    )


def _change_groups_table(data: Mapping[str, Any], page: Page, change: Mapping[str, Any]) -> Html:
    reference = change.get("reference_group") or page.reference
    reference_label = page.label(str(reference))
    rows = []
    attrs = []
    for g in ordered(page.groups, data):
        item = as_mapping(data.get(g))
        rows.append(
            (
                page.label(g) + (" (reference)" if g == reference else ""),
                Num(fmt_percent(item.get("rate_before"))),
                Num(fmt_percent(item.get("rate_after"))),
                Num(fmt_pp_value(item.get("rate_change_pp"))),
                Num(fmt_percent(item.get("served_area_rate_before"))),
                Num(fmt_percent(item.get("served_area_rate_after"))),
                Num(fmt_pp_value(item.get("served_area_rate_change_pp"))),
                Num(fmt_fixed(item.get("ratio_before"))),
                Num(fmt_fixed(item.get("ratio_after"))),
            )
        )
        attrs.append({"data_group": g, "class_": "reference" if g == reference else None})
    headers = (
        "Group",
        Num("Coverage rate before"),
        Num("after"),
        Num("Change"),
        Num("Served-area rate before"),
        Num("after"),
        Num("Change"),
        Num("Ratio before"),
        Num("after"),
    )
    return table(
        headers,
        rows,
        row_attrs=attrs,
        table_id="change-groups-table",
        caption=f"Each group's rates before and after (changes in percentage points; ratios "
        f"to {reference_label})",
    )


# --- lending against peers -----------------------------------------------------------------


def peers_section(page: Page) -> Html:
    """Return "Lending activity against peers": each lender's share against all others'."""
    peers = page.summary["peers"]
    title = "Lending activity against peers"
    reason = skipped_reason(peers)
    if reason:
        return section("peers", title, not_computed(reason))
    alpha = peers.get("alpha")
    lenders = records(peers.get("lenders"))
    parts: list[Any] = [
        para(
            "Each lender's share of its activity that lies in majority-minority areas, "
            "against the same share for all other lenders combined. The difference is in "
            "percentage points with its 95% confidence interval (unpooled standard error); "
            "z and the p-values come from the two-proportion z-test (pooled standard error). "
            f"A lender is flagged when its share is below its peers' with one-sided p below "
            f"{fmt_fixed(alpha, 2) if as_number(alpha) is not None else NA}."
        )
    ]
    rows: list[tuple[Any, ...]] = []
    attrs: list[dict[str, Any]] = []
    for x in lenders:
        flagged = bool(x.get("below_peers"))
        rows.append(
            (
                x.get("lender") if x.get("lender") is not None else NA,
                Num(fmt_count(x.get("activity"))),
                Num(fmt_count(x.get("mm_activity"))),
                Num(fmt_percent(x.get("share"))),
                Num(fmt_percent(x.get("peer_share"))),
                Num(fmt_points(x.get("difference"))),
                Num(fmt_interval(x.get("ci_low"), x.get("ci_high"), fmt_points)),
                Num(fmt_fixed(x.get("z"), 2)),
                Num(fmt_p(x.get("p_two_sided"))),
                Num(fmt_p(x.get("p_below"))),
                tag("span", "yes: below peers", class_="flag")
                if flagged
                else fmt_bool(x.get("below_peers")),
            )
        )
        attrs.append({"class_": "flagged" if flagged else None, "data_lender": x.get("lender")})
    headers = (
        "Lender",
        Num("Activity"),
        Num("In majority-minority areas"),
        Num("Share"),
        Num("Peers' share"),
        Num("Difference"),
        Num("95% CI"),
        Num("z"),
        Num("p (two-sided)"),
        Num("p (below peers)"),
        "Flagged",
    )
    parts.append(
        table(
            headers,
            rows,
            row_attrs=attrs,
            table_id="peer-table",
            caption="Share of activity in majority-minority areas, each lender against all "
            "other lenders",
        )
    )
    named = [str(f) for f in peers.get("flagged") or []]
    parts.append(
        para(
            (
                f"Below their peers: {', '.join(named)}."
                if named
                else "No lender's share is significantly below its peers'."
            )
            + f" Areas with activity: {fmt_count(peers.get('areas'))}."
        )
    )
    unmatched = peers.get("unmatched_ids")
    if isinstance(unmatched, list) and unmatched:
        parts.append(
            para(
                f"{plural(len(unmatched), 'area')} of the activity table, with "
                f"{fmt_count(peers.get('unmatched_activity'))} actions, matched no analysed "
                "area and were left out.",
                class_="note",
            )
        )
    return section("peers", title, *parts)
