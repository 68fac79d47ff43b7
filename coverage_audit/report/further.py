"""Report sections of the further analyses: comparisons, change, peers, models, sensitivity.

Takes the page's shared state (:class:`.sections.Page`) and reads the summary.json
sections that :mod:`coverage_audit.analyses` writes: ``comparison`` with
``footprints_compared``, ``change``, ``peers``, ``explain`` (``models`` and ``rules``)
and ``sensitivity`` (``thresholds`` and, for service points, ``radius``). Gives one
escaped HTML section per key that is present, in the house style of the core sections:
tables of the figures as the summary holds them (``None`` as "n/a"), a sentence saying
how to read them, and for the sensitivity sweeps a figure of each group's ratio against
the swept setting. A section whose stage recorded ``{"skipped": reason}`` says why it
is empty instead of being left out, so a reader knows it was asked for.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from . import charts
from .markup import (
    NA,
    Html,
    Num,
    NumHtml,
    as_mapping,
    as_number,
    figure,
    fmt_bool,
    fmt_count,
    fmt_distance,
    fmt_fixed,
    fmt_p,
    fmt_percent,
    fmt_points,
    get_in,
    join,
    ordered,
    para,
    plural,
    section,
    table,
    tag,
)
from .sections import Page
from .text import ASSOCIATION_CAUTION

#: Area ids of a change listed in the page; beyond this the page points to areas.csv.
MAX_LISTED_CHANGE_IDS = 30
#: Rules shown (the summary keeps the top ones, highest extended lift first).
MAX_RULES = 10
#: Ratio of the four-fifths screen (29 CFR 1607.4(D)).
FOUR_FIFTHS = 0.8
STAR_NOTE = "* below four-fifths"
#: Most decimals an odds ratio is given (see :func:`fmt_odds`).
MAX_ODDS_DECIMALS = 6


# --- small helpers -----------------------------------------------------------------------


def skipped_reason(value: Any) -> str | None:
    """Return the reason a stage recorded for not computing a section, if it did."""
    if isinstance(value, Mapping) and "skipped" in value:
        return str(value.get("skipped") or "no reason recorded")
    return None


def _skipped(reason: str) -> Html:
    return para(f"Not computed: {reason}.", class_="note")


def fmt_pp_value(value: Any) -> str:
    """Format a value already in percentage points (``-6.04 -> "−6.0 pp"``)."""
    f = as_number(value)
    return fmt_points(None if f is None else f / 100.0)


def fmt_interval(low: Any, high: Any, formatter: Callable[[Any], str]) -> str:
    """Format an interval as "low to high"; "n/a" when either end is missing.

    A unit the formatter appends ("−20.6 pp") is written once, after the upper end.
    """
    if as_number(low) is None or as_number(high) is None:
        return NA
    first, second = formatter(low), formatter(high)
    unit = second.rpartition(" ")[2] if " " in second else ""
    if unit and first.endswith(" " + unit):
        first = first[: -len(unit) - 1]
    return f"{first} to {second}"


def fmt_odds(value: Any, low: Any = None, high: Any = None) -> tuple[str, str]:
    """Format an odds ratio and its interval with enough decimals to tell the ends apart.

    Three decimals, as the report's ratios; more (up to :data:`MAX_ODDS_DECIMALS`) when
    the interval's ends would otherwise print alike, as they do for a control measured
    in small units (an odds ratio per person per km² of 1.0000066 is not "1.000").

    Returns
    -------
    tuple of str
        The odds ratio and the interval ("n/a" where missing).
    """
    digits = 3
    lo, hi = as_number(low), as_number(high)
    if lo is not None and hi is not None:
        while digits < MAX_ODDS_DECIMALS and fmt_fixed(lo, digits) == fmt_fixed(hi, digits):
            digits += 1
    return fmt_fixed(value, digits), fmt_interval(low, high, lambda v: fmt_fixed(v, digits))


def flagged_number(text: str, flagged: bool) -> Num | NumHtml:
    """Return a numeric cell, marked with an asterisk and the flag's tone when flagged.

    The asterisk carries the flag in print and for readers who do not see the colour.
    """
    return NumHtml(tag("span", text + "*", class_="flag")) if flagged else Num(text)


def _group_list(groups: Any) -> str:
    if not isinstance(groups, (list, tuple)):
        return NA
    return ", ".join(str(g) for g in groups) or "none"


def _records(value: Any) -> list[Mapping[str, Any]]:
    return [r for r in value if isinstance(r, Mapping)] if isinstance(value, list) else []


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
        return section("comparison", "Footprints compared", _skipped(reason))
    described = as_mapping(page.summary.get("footprints_compared"))
    footprints = _records(cmp.get("footprints"))
    reference = cmp.get("reference_group") or page.reference
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
                f.get("worst_group") or NA,
                Num(fmt_fixed(f.get("worst_ratio"))),
                Num(fmt_count(f.get("enclave_count"))),
                tag("span", _group_list(below), class_="flag") if below else _group_list(below),
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
            caption=f"Footprints ranked (ratios of each group's {_by_text(cmp)} to {reference})",
        )
    )
    parts.append(_footprint_ratio_table(cmp, footprints, page))
    for note in cmp.get("notes") or []:
        parts.append(para(f"Note: {note}.", class_="note"))
    return section("comparison", "Footprints compared", *parts)


def _below(ratio: Any) -> bool:
    f = as_number(ratio)
    return f is not None and f < FOUR_FIFTHS


def _by_text(cmp: Mapping[str, Any]) -> str:
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
                    _below(get_in(f, "groups", g, "ranking_ratio")),
                )
                for g in groups
            ),
        )
        for f in footprints
    ]
    return table(
        ("Footprint", *(Num(g) for g in groups)),
        rows,
        table_id="footprint-ratio-table",
        caption=f"Each group's {_by_text(cmp)} under each footprint (ranking ratio in brackets; "
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
        return section("change", title, _skipped(reason))
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
                ("Change", Num("Areas"), Num("Population"), *(Num(f"{g} share") for g in groups)),
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
    rows = []
    attrs = []
    for g in ordered(page.groups, data):
        item = as_mapping(data.get(g))
        rows.append(
            (
                g + (" (reference)" if g == reference else ""),
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
        f"to {reference})",
    )


# --- lending against peers -----------------------------------------------------------------


def peers_section(page: Page) -> Html:
    """Return "Lending activity against peers": each lender's share against all others'."""
    peers = page.summary["peers"]
    title = "Lending activity against peers"
    reason = skipped_reason(peers)
    if reason:
        return section("peers", title, _skipped(reason))
    alpha = peers.get("alpha")
    lenders = _records(peers.get("lenders"))
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


# --- is the gap explained by other factors? -------------------------------------------------

_KIND_LABELS = {
    "logit": "Logit: odds of an area being unserved",
    "fractional_logit": "Fractional logit: odds of the uncovered share",
}


def _step_points(models: Mapping[str, Any]) -> str:
    step = as_number(models.get("minority_step"))
    return "10" if step is None else f"{100.0 * step:g}"


def _term(model: Mapping[str, Any], name: str) -> Mapping[str, Any]:
    for t in _records(model.get("terms")):
        if t.get("name") == name:
            return t
    return {}


def _model_label(model: Mapping[str, Any], key: str) -> str:
    kind = _KIND_LABELS.get(str(model.get("kind")), str(model.get("kind") or key))
    return kind + (", with controls" if "with_controls" in key else ", minority share alone")


def _residual_text(model: Mapping[str, Any]) -> str:
    rm = as_mapping(model.get("residual_moran"))
    if not rm:
        return NA
    text = f"{fmt_fixed(rm.get('I'), 3)} (z {fmt_fixed(rm.get('z_rand'), 2)})"
    return text + (": clustered" if rm.get("space_not_accounted_for") else "")


def _models_part(models: Mapping[str, Any]) -> Html:
    reason = skipped_reason(models)
    heading = tag("h3", "Models of exclusion")
    if reason:
        return heading + _skipped(reason)
    fits = {k: m for k, m in as_mapping(models.get("models")).items() if isinstance(m, Mapping)}
    term = str(models.get("minority_term") or "minority_share_per_10pp")
    step = _step_points(models)
    controls = [str(c) for c in models.get("controls") or []]
    parts: list[Any] = [
        heading,
        para(
            f"Does minority share still predict being left out once other traits of the areas "
            f"are taken into account? Odds ratios are per {step} percentage points of "
            "minority share; above 1 means more exclusion as minority share rises. "
            + (
                f"Controls: {', '.join(controls)}. "
                if controls
                else "No controls were given, so only the models on minority share alone are "
                "shown. "
            )
            + f"Areas in every model: {fmt_count(models.get('n_areas'))}."
        ),
    ]
    rows = []
    for key, m in fits.items():
        t = _term(m, term)
        odds, interval = fmt_odds(t.get("odds_ratio"), t.get("ci_low"), t.get("ci_high"))
        rows.append(
            (
                _model_label(m, key),
                Num(odds),
                Num(interval),
                Num(fmt_p(t.get("p_value"))),
                Num(fmt_count(m.get("n"))),
                Num(_residual_text(m)),
            )
        )
    if rows:
        parts.append(
            table(
                (
                    "Model",
                    Num(f"Odds ratio per {step} pp"),
                    Num("95% CI"),
                    Num("p"),
                    Num("Areas"),
                    Num("Residual Moran's I"),
                ),
                rows,
                table_id="model-minority-table",
                caption=f"Odds ratio of minority share (per {step} percentage points), alone "
                "and with controls",
            )
        )
    parts.append(_minority_change_part(models, step))
    parts.append(_controls_part(fits, term))
    parts.append(_residual_warning(fits))
    parts.append(_model_notes(models))
    return join(parts)


def _minority_change_part(models: Mapping[str, Any], step: str) -> Html:
    changes = _records(models.get("minority_change"))
    if not changes:
        return Html("")
    sentences = []
    for c in changes:
        kind = "logit" if c.get("kind") == "logit" else "fractional logit"
        pct = as_number(c.get("percent_change"))
        if pct is None:
            moved = "changes by an amount that cannot be computed"
        elif abs(pct) < 0.05:
            moved = "does not change"
        else:
            moved = f"{'falls' if pct < 0 else 'rises'} by {fmt_fixed(abs(pct), 1)}%"
        sentences.append(
            f"In the {kind}, the odds ratio per {step} points "
            f"{moved} when the controls enter, from {fmt_fixed(c.get('odds_ratio_alone'))} "
            f"to {fmt_fixed(c.get('odds_ratio_with_controls'))}."
        )
    return para(
        " ".join(sentences),
        " A large fall means the controls go with much of the raw association; a small one "
        "that they do not.",
        id="model-change",
    )


def _controls_part(fits: Mapping[str, Mapping[str, Any]], term: str) -> Html:
    controlled = {k: m for k, m in fits.items() if "with_controls" in k}
    rows = []
    for m in controlled.values():
        for t in _records(m.get("terms")):
            name = t.get("name")
            if name in ("intercept", term):
                continue
            odds, interval = fmt_odds(t.get("odds_ratio"), t.get("ci_low"), t.get("ci_high"))
            rows.append(
                (
                    f"{name} ({'logit' if m.get('kind') == 'logit' else 'fractional logit'})",
                    Num(odds),
                    Num(interval),
                    Num(fmt_p(t.get("p_value"))),
                )
            )
    if not rows:
        return Html("")
    return table(
        ("Control (model)", Num("Odds ratio per unit"), Num("95% CI"), Num("p")),
        rows,
        table_id="model-controls-table",
        caption="Odds ratios of the controls, in the models with controls",
    )


def _residual_warning(fits: Mapping[str, Mapping[str, Any]]) -> Html:
    clustered = [
        (key, m)
        for key, m in fits.items()
        if get_in(m, "residual_moran", "space_not_accounted_for")
    ]
    if not clustered:
        if any(isinstance(m.get("residual_moran"), Mapping) for m in fits.values()):
            return para(
                "The models' residuals show no clear spatial clustering (Moran's I of the "
                "residuals within 1.96 standard errors of its expectation)."
            )
        return Html("")
    found = [as_number(get_in(m, "residual_moran", "I")) for _, m in clustered]
    values = [v for v in found if v is not None]
    if len(clustered) == len(fits) and len(fits) > 1 and len(values) == len(found):
        names = (
            f"every model (Moran's I of the residuals from {fmt_fixed(min(values))} to "
            f"{fmt_fixed(max(values))})"
        )
    else:
        names = "; ".join(
            f"{_model_label(m, key).lower()} (Moran's I "
            f"{fmt_fixed(get_in(m, 'residual_moran', 'I'))})"
            for key, m in clustered
        )
    return para(
        tag("strong", "Space is not accounted for. "),
        "What these models leave unexplained is itself clustered on the map: neighbouring "
        "areas are more alike than the models predict, in ",
        names,
        ". Something that varies by place and is not among the controls goes with being "
        "left out, and the confidence intervals and p-values above are likely too "
        "narrow and too small.",
        class_="warning",
        id="residual-warning",
    )


def _model_notes(models: Mapping[str, Any]) -> Html:
    notes = [str(n) for n in models.get("notes") or [] if n]
    notes = list(dict.fromkeys(notes))
    dropped = _records(models.get("dropped_rows"))
    epp = as_number(models.get("events_per_parameter"))
    if dropped:
        shown = ", ".join(str(d.get("id")) for d in dropped[:10])
        more = f" and {len(dropped) - 10:,} more" if len(dropped) > 10 else ""
        notes.append(f"left out for missing values: {plural(len(dropped), 'area')} ({shown}{more})")
    if epp is not None:
        notes.append(
            f"events per parameter in the models with controls: {fmt_fixed(epp, 1)}"
            + (" (below the usual ten, so estimates may be unstable)" if epp < 10 else "")
        )
    if not notes:
        return Html("")
    items = [tag("li", n[:1].upper() + n[1:] + ("" if n.endswith(".") else ".")) for n in notes]
    return tag("ul", *items, class_="notes")


def _rules_part(rules: Mapping[str, Any], page: Page) -> Html:
    heading = tag("h3", "Where the gap is largest: rules by extended lift")
    reason = skipped_reason(rules)
    if reason:
        return heading + _skipped(reason)
    found = _records(rules.get("rules"))[:MAX_RULES]
    conditions = as_mapping(rules.get("conditions"))
    lead = (
        f"Conjunctions of area traits under which {rules.get('protected') or 'protected'} "
        f"areas are {rules.get('outcome') or 'left out'} more often than other areas with "
        f"the same traits. Searched over {fmt_count(rules.get('n_areas'))} areas "
        f"({fmt_count(rules.get('n_outcome'))} {rules.get('outcome') or 'with the outcome'}, "
        f"{fmt_count(rules.get('n_protected'))} {rules.get('protected') or 'protected'})"
        + (f" with the traits {', '.join(map(str, conditions))}" if conditions else "")
        + f"; a rule needs at least {fmt_count(rules.get('min_support_areas'))} areas with "
        f"all its conditions, and has at most {fmt_count(rules.get('max_length'))} conditions."
        " Confidences count " + ("residents." if rules.get("weight") == "population" else "areas.")
    )
    parts: list[Any] = [heading, para(lead)]
    if not found:
        why = rules.get("reason")
        parts.append(para(f"No rule was found{': ' + str(why) if why else ''}.", class_="note"))
        return join(parts)
    rows = [
        (
            Num(fmt_count(k + 1)),
            r.get("sentence") or ", ".join(map(str, r.get("context") or [])) or NA,
            Num(fmt_percent(r.get("support"))),
            Num(fmt_percent(r.get("confidence"))),
            Num(fmt_fixed(r.get("elift"))),
            Num(fmt_fixed(r.get("slift"))),
            Num(fmt_points(r.get("risk_difference"))),
        )
        for k, r in enumerate(found)
    ]
    parts.append(
        table(
            (
                Num("#"),
                "Rule",
                Num("Support"),
                Num("Confidence"),
                Num("elift"),
                Num("slift"),
                Num("Risk difference"),
            ),
            rows,
            table_id="rule-table",
            caption="Top rules, highest extended lift first",
        )
    )
    for note in rules.get("notes") or []:
        parts.append(para(f"Note: {note}.", class_="note"))
    return join(parts)


def explain_section(page: Page) -> Html:
    """Return "Is the gap explained by other factors?": models, rules and the caution."""
    explain = page.summary["explain"]
    title = "Is the gap explained by other factors?"
    reason = skipped_reason(explain)
    if reason:
        return section("explain", title, _skipped(reason))
    short, long, _ = ASSOCIATION_CAUTION
    parts: list[Any] = [
        para(tag("strong", short), " ", long, class_="caution-inline", id="association-caution")
    ]
    if "models" in explain:
        parts.append(_models_part(as_mapping(explain["models"])))
    if "rules" in explain:
        parts.append(_rules_part(as_mapping(explain["rules"]), page))
    return section("explain", title, *parts)


# --- does the finding hold? ---------------------------------------------------------------


def _sweep_groups(rows: Sequence[Mapping[str, Any]], page: Page) -> tuple[list[str], list[str]]:
    """All groups in the rows, and those to draw: every group but the comparison group."""
    present: list[str] = []
    for r in rows:
        present.extend(g for g in as_mapping(r.get("groups")) if g not in present)
    groups = ordered(page.groups, present)
    comparison = {r.get("comparison_group") for r in rows if r.get("comparison_group")}
    if not comparison:
        comparison = {get_in(page.summary, "coverage", "reference_group") or page.reference}
    # A group that is the comparison at every setting has ratio 1 throughout: not drawn.
    always = comparison if len(comparison) == 1 else set()
    return groups, [g for g in groups if g not in always]


def _flags(rows: Sequence[Mapping[str, Any]], group: str) -> list[bool]:
    return [bool(get_in(r, "groups", group, "below_four_fifths")) for r in rows]


def flag_sentence(
    rows: Sequence[Mapping[str, Any]],
    groups: Sequence[str],
    labels: Sequence[str],
    *,
    what: str,
) -> str:
    """Say in words whether each group's four-fifths flag changes across a sweep.

    Parameters
    ----------
    rows : sequence of mapping
        The sweep's rows, each with ``groups`` -> group -> ``below_four_fifths``.
    groups : sequence of str
        Groups to speak of.
    labels : sequence of str
        Text of each row's setting ("25.0%", "1,000 m").
    what : str
        The swept setting in words ("served threshold").

    Returns
    -------
    str
    """
    if not rows or not groups:
        return ""
    steady_flagged, steady_clear, moving = [], [], []
    for g in groups:
        flags = _flags(rows, g)
        if all(flags):
            steady_flagged.append(g)
        elif not any(flags):
            steady_clear.append(g)
        else:
            at = [lab for lab, f in zip(labels, flags, strict=True) if f]
            moving.append(f"{g} is below four-fifths at {_series(at)} but not at the other values")
    span = f"every {what} tried, from {labels[0]} to {labels[-1]}"
    if not moving:
        said = []
        if steady_flagged:
            said.append(f"{_series(steady_flagged)} {_are(steady_flagged)} below four-fifths")
        if steady_clear:
            said.append(
                f"{_series(steady_clear)} {_are(steady_clear)} not"
                + ("" if steady_flagged else " below four-fifths")
            )
        return (
            f"The four-fifths flags do not change across the sweep: at {span}, "
            + "; ".join(said)
            + "."
        )
    text = f"The four-fifths flags change with the {what}: " + "; ".join(moving) + "."
    if steady_flagged:
        text += f" {_series(steady_flagged)} {_are(steady_flagged)} below it at {span}."
    if steady_clear:
        text += f" {_series(steady_clear)} {_are(steady_clear)} never below it."
    return text


def _series(items: Sequence[str]) -> str:
    items = list(items)
    if len(items) <= 2:
        return " and ".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _are(items: Sequence[str]) -> str:
    return "is" if len(items) == 1 else "are"


def _close(a: Any, b: Any) -> bool:
    fa, fb = as_number(a), as_number(b)
    return fa is not None and fb is not None and math.isclose(fa, fb, rel_tol=1e-9, abs_tol=1e-9)


def _sweep_table(
    rows: Sequence[Mapping[str, Any]],
    groups: Sequence[str],
    labels: Sequence[str],
    marked: Sequence[bool],
    *,
    rate_key: str,
    first_headers: Sequence[Any],
    first_cells: Callable[[Mapping[str, Any], str], Sequence[Any]],
    table_id: str,
    caption: str,
) -> Html:
    body = []
    attrs = []
    for r, label, mine in zip(rows, labels, marked, strict=True):
        first = list(first_cells(r, label))
        if mine:
            marked_cell = join([first[0], " ", tag("span", "this audit", class_="cell-note")])
            first[0] = NumHtml(marked_cell) if isinstance(first[0], Num) else marked_cell
        body.append(
            (
                *first,
                Num(fmt_percent(r.get("served_area_share"))),
                *(
                    flagged_number(
                        f"{fmt_percent(get_in(r, 'groups', g, rate_key))} "
                        f"({fmt_fixed(get_in(r, 'groups', g, 'ratio'))})",
                        bool(get_in(r, "groups", g, "below_four_fifths")),
                    )
                    for g in groups
                ),
                Num(fmt_count(r.get("enclaves"))),
            )
        )
        attrs.append({"class_": "reference" if mine else None})
    headers = (
        *first_headers,
        Num("Areas served"),
        *(Num(g) for g in groups),
        Num("Enclaves"),
    )
    return table(headers, body, row_attrs=attrs, table_id=table_id, caption=caption)


def _verdict(
    rows: Sequence[Mapping[str, Any]],
    groups: Sequence[str],
    labels: Sequence[str],
    what: str,
    element_id: str,
) -> Html:
    return para(
        flag_sentence(rows, groups, labels, what=what), class_="sweep-verdict", id=element_id
    )


def sensitivity_section(page: Page) -> Html:
    """Return "Does the finding hold?": the sweeps' tables, chart and flag sentences."""
    sens = page.summary["sensitivity"]
    title = "Does the finding hold?"
    reason = skipped_reason(sens)
    if reason:
        return section("sensitivity", title, _skipped(reason))
    thresholds = _records(sens.get("thresholds"))
    radius = _records(sens.get("radius"))
    audit_threshold = get_in(page.summary, "coverage", "served_threshold")
    parts: list[Any] = [
        para(
            "The audit's findings rest on choices: when an area counts as served and, for "
            "service points, how far each point reaches. Here the choices are varied and "
            "the ratios and four-fifths flags recomputed. Each cell gives the group's rate "
            "and, in brackets, its ratio to the comparison group."
        )
    ]
    panels: list[charts.SweepPanel] = []
    if thresholds:
        groups, drawn = _sweep_groups(thresholds, page)
        labels = [fmt_percent(r.get("threshold")) for r in thresholds]
        marked = [_close(r.get("threshold"), audit_threshold) for r in thresholds]
        comparison = _series(
            list(dict.fromkeys(str(r.get("comparison_group")) for r in thresholds))
        )
        parts.append(tag("h3", "Served threshold"))
        parts.append(
            _sweep_table(
                thresholds,
                groups,
                labels,
                marked,
                rate_key="served_area_rate",
                first_headers=("Served threshold",),
                first_cells=lambda r, label: (label,),
                table_id="threshold-table",
                caption="Served-area rate (ratio to "
                f"{comparison}) of each group at each served threshold; {STAR_NOTE}",
            )
        )
        parts.append(_verdict(thresholds, drawn, labels, "served threshold", "threshold-verdict"))
        panels.append(
            charts.SweepPanel(
                x=[as_number(r.get("threshold")) or math.nan for r in thresholds],
                ratios={g: [get_in(r, "groups", g, "ratio") for r in thresholds] for g in drawn},
                tick_labels=[
                    f"{100 * (as_number(r.get('threshold')) or 0):.0f}%" for r in thresholds
                ],
                x_label="served threshold (least covered fraction of a served area)",
                y_label="served-area ratio",
                title="Served-area ratio by served threshold",
                marked=as_number(audit_threshold),
                marked_label=f"this audit ({fmt_percent(audit_threshold)})",
            )
        )
    if radius:
        parts.append(_radius_part(radius, page, panels))
    if panels:
        svg = charts.sweep_chart(panels, salt="report-sensitivity")
        parts.append(
            figure(
                svg,
                "Each group's ratio to the comparison group as the setting moves. Dashed "
                "line: four-fifths (0.8); the shaded band lies below it. Dotted line: the "
                "audit's own setting.",
            )
        )
    return section("sensitivity", title, *parts)


def _radius_part(
    radius: Sequence[Mapping[str, Any]], page: Page, panels: list[charts.SweepPanel]
) -> Html:
    groups, drawn = _sweep_groups(radius, page)
    factors = [as_number(r.get("factor")) for r in radius]
    labels = [fmt_distance(r.get("radius_m"), "m") for r in radius]
    marked = [f is not None and math.isclose(f, 1.0) for f in factors]
    audit_radius = next(
        (as_number(r.get("radius_m")) for r, m in zip(radius, marked, strict=True) if m), None
    )
    threshold = get_in(page.summary, "coverage", "served_threshold")
    parts: list[Any] = [
        tag("h3", "Reach of the service points"),
        _sweep_table(
            radius,
            groups,
            labels,
            marked,
            rate_key="rate",
            first_headers=(Num("Reach factor"), Num("Radius")),
            first_cells=lambda r, label: (
                Num(fmt_fixed(r.get("factor"), 2)),
                Num(label),
            ),
            table_id="radius-table",
            caption="Coverage rate (ratio) of each group as every radius is scaled; areas "
            f"served at the audit's threshold of {fmt_percent(threshold)}; {STAR_NOTE}",
        ),
        _verdict(radius, drawn, labels, "radius", "radius-verdict"),
    ]
    panels.append(
        charts.SweepPanel(
            x=[as_number(r.get("radius_m")) or math.nan for r in radius],
            ratios={g: [get_in(r, "groups", g, "ratio") for r in radius] for g in drawn},
            tick_labels=[f"{(as_number(r.get('radius_m')) or 0) / 1000:g} km" for r in radius],
            x_label="radius of every service point (median shown when radii differ)",
            y_label="coverage-rate ratio",
            title="Coverage-rate ratio by reach",
            marked=audit_radius,
            marked_label=f"this audit ({fmt_distance(audit_radius, 'm')})",
        )
    )
    return join(parts)


#: The further sections in page order: (anchor, title, render).
FURTHER_SECTIONS: tuple[tuple[str, str, Callable[[Page], Html]], ...] = (
    ("comparison", "Footprints compared", comparison_section),
    ("change", "Change between footprints", change_section),
    ("peers", "Lending activity against peers", peers_section),
    ("explain", "Is the gap explained by other factors?", explain_section),
    ("sensitivity", "Does the finding hold?", sensitivity_section),
)


def present(summary: Mapping[str, Any]) -> set[str]:
    """Return the further sections whose key the summary holds (a mapping, even skipped)."""
    return {anchor for anchor, _, _ in FURTHER_SECTIONS if isinstance(summary.get(anchor), Mapping)}


def method_topics(summary: Mapping[str, Any]) -> set[str]:
    """Return the methods topics of :data:`.text.METHODS` that the further sections used."""
    topics = set()
    for anchor in ("comparison", "change", "peers"):
        if isinstance(summary.get(anchor), Mapping) and not skipped_reason(summary[anchor]):
            topics.add(anchor)
    explain = as_mapping(summary.get("explain"))
    if not skipped_reason(explain):
        for key, topic in (("models", "explain_models"), ("rules", "explain_rules")):
            if isinstance(explain.get(key), Mapping) and not skipped_reason(explain[key]):
                topics.add(topic)
    sens = as_mapping(summary.get("sensitivity"))
    if not skipped_reason(sens):
        if _records(sens.get("thresholds")):
            topics.add("sensitivity")
        if _records(sens.get("radius")):
            topics.add("sensitivity_radius")
    return topics


def method_values(page: Page) -> dict[str, str]:
    """Return the values the further methods entries quote (escaped when filled)."""
    s = page.summary
    cmp = as_mapping(s.get("comparison"))
    thresholds = _records(get_in(s, "sensitivity", "thresholds"))
    radius = _records(get_in(s, "sensitivity", "radius"))
    change_threshold = get_in(s, "change", "threshold")
    if change_threshold is None:
        change_threshold = get_in(s, "coverage", "served_threshold")
    step = get_in(s, "explain", "models", "minority_step")
    rules = as_mapping(get_in(s, "explain", "rules"))
    alpha = get_in(s, "peers", "alpha")
    return {
        "comparison_rate": _by_text(cmp),
        "ranking_rule": str(cmp.get("ranking_rule") or "ranked from the most to the least even"),
        "change_threshold": fmt_percent(change_threshold),
        "peer_alpha": fmt_fixed(alpha, 2) if as_number(alpha) is not None else NA,
        "minority_step": "10" if as_number(step) is None else f"{100.0 * float(step):g}",
        "protected": str(rules.get("protected") or "protected"),
        "outcome": str(rules.get("outcome") or "outcome"),
        "sweep_low": fmt_percent(thresholds[0].get("threshold")) if thresholds else NA,
        "sweep_high": fmt_percent(thresholds[-1].get("threshold")) if thresholds else NA,
        "sweep_comparison": _series(
            list(dict.fromkeys(str(r.get("comparison_group")) for r in thresholds))
        )
        or page.comparison_label,
        "radius_factors": ", ".join(
            f"{f:g}\u00d7" for r in radius for f in [as_number(r.get("factor"))] if f is not None
        )
        or NA,
    }


def key_figures(page: Page) -> list[Html]:
    """Return the further analyses' lines of the page's "Key figures"."""
    summary = page.summary
    items: list[Html] = []
    peers = as_mapping(summary.get("peers"))
    if peers and not skipped_reason(peers):
        flagged = [str(f) for f in peers.get("flagged") or []]
        items.append(
            tag(
                "li",
                "Share of activity in majority-minority areas significantly below peers': "
                + (", ".join(flagged) if flagged else "no lender")
                + ".",
            )
        )
    sens = as_mapping(summary.get("sensitivity"))
    thresholds = _records(sens.get("thresholds"))
    if thresholds and not skipped_reason(sens):
        _, drawn = _sweep_groups(thresholds, page)
        steady = all(len(set(_flags(thresholds, g))) == 1 for g in drawn)
        items.append(
            tag(
                "li",
                "Four-fifths flags "
                + (
                    "hold at every served threshold tried"
                    if steady
                    else "change with the served threshold"
                )
                + f" ({fmt_percent(thresholds[0].get('threshold'))} to "
                f"{fmt_percent(thresholds[-1].get('threshold'))}).",
            )
        )
    return items
