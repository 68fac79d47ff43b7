"""Report sections on explanations and robustness: models, rules and sensitivity sweeps.

Takes the page's shared state (:class:`.sections.Page`) and reads the summary.json
sections that :mod:`coverage_audit.explain` results write through the audit:
``explain`` (``models``: logit and fractional logit of exclusion on minority share,
alone and with controls, with residual Moran's I; ``rules``: conjunctions of area
traits ranked by extended lift) and ``sensitivity`` (``thresholds`` and, for service
points, ``radius``). Gives the escaped HTML sections "Is the gap explained by other
factors?" (with the caution that associations are not causes) and "Does the finding
hold?" (tables, a sentence on whether the four-fifths flags move, and a figure of each
group's ratio against the swept setting).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from . import charts
from .markup import (
    NA,
    STAR_NOTE,
    Html,
    Num,
    NumHtml,
    are,
    as_mapping,
    as_number,
    figure,
    flagged_number,
    fmt_count,
    fmt_distance,
    fmt_fixed,
    fmt_odds,
    fmt_p,
    fmt_percent,
    fmt_points,
    get_in,
    join,
    not_computed,
    ordered,
    para,
    plural,
    records,
    section,
    series,
    skipped_reason,
    table,
    tag,
)
from .sections import Page
from .text import ASSOCIATION_CAUTION

#: Rules shown (the summary keeps the top ones, highest extended lift first).
MAX_RULES = 10


# --- is the gap explained by other factors? -------------------------------------------------

_KIND_LABELS = {
    "logit": "Logit: odds of an area being unserved",
    "fractional_logit": "Fractional logit: odds of the uncovered share",
}


def _step_points(models: Mapping[str, Any]) -> str:
    step = as_number(models.get("minority_step"))
    return "10" if step is None else f"{100.0 * step:g}"


def _term(model: Mapping[str, Any], name: str) -> Mapping[str, Any]:
    for t in records(model.get("terms")):
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
        return heading + not_computed(reason)
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
    changes = records(models.get("minority_change"))
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
        for t in records(m.get("terms")):
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
    dropped = records(models.get("dropped_rows"))
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
        return heading + not_computed(reason)
    found = records(rules.get("rules"))[:MAX_RULES]
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
        return section("explain", title, not_computed(reason))
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


def sweep_groups(rows: Sequence[Mapping[str, Any]], page: Page) -> tuple[list[str], list[str]]:
    """Return all groups in the rows, and those to draw: all but the comparison group."""
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


def flags_of(rows: Sequence[Mapping[str, Any]], group: str) -> list[bool]:
    """Return a group's four-fifths flag at each setting of a sweep."""
    return [bool(get_in(r, "groups", group, "below_four_fifths")) for r in rows]


def flag_sentence(
    rows: Sequence[Mapping[str, Any]],
    groups: Sequence[str],
    labels: Sequence[str],
    *,
    what: str,
    name: Callable[[str], str] = str,
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
    name : callable
        A group's display label from its key (the key itself by default).

    Returns
    -------
    str
    """
    if not rows or not groups:
        return ""
    steady_flagged, steady_clear, moving = [], [], []
    for g in groups:
        flags = flags_of(rows, g)
        if all(flags):
            steady_flagged.append(name(g))
        elif not any(flags):
            steady_clear.append(name(g))
        else:
            at = [lab for lab, f in zip(labels, flags, strict=True) if f]
            moving.append(
                f"{name(g)} is below four-fifths at {series(at)} but not at the other values"
            )
    span = f"every {what} tried, from {labels[0]} to {labels[-1]}"
    if not moving:
        said = []
        if steady_flagged:
            said.append(f"{series(steady_flagged)} {are(steady_flagged)} below four-fifths")
        if steady_clear:
            said.append(
                f"{series(steady_clear)} {are(steady_clear)} not"
                + ("" if steady_flagged else " below four-fifths")
            )
        return (
            f"The four-fifths flags do not change across the sweep: at {span}, "
            + "; ".join(said)
            + "."
        )
    text = f"The four-fifths flags change with the {what}: " + "; ".join(moving) + "."
    if steady_flagged:
        text += f" {series(steady_flagged)} {are(steady_flagged)} below it at {span}."
    if steady_clear:
        text += f" {series(steady_clear)} {are(steady_clear)} never below it."
    return text


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
    name: Callable[[str], str],
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
        *(Num(name(g)) for g in groups),
        Num("Enclaves"),
    )
    return table(headers, body, row_attrs=attrs, table_id=table_id, caption=caption)


def _verdict(
    rows: Sequence[Mapping[str, Any]],
    groups: Sequence[str],
    labels: Sequence[str],
    what: str,
    element_id: str,
    name: Callable[[str], str],
) -> Html:
    return para(
        flag_sentence(rows, groups, labels, what=what, name=name),
        class_="sweep-verdict",
        id=element_id,
    )


def sensitivity_section(page: Page) -> Html:
    """Return "Does the finding hold?": the sweeps' tables, chart and flag sentences."""
    sens = page.summary["sensitivity"]
    title = "Does the finding hold?"
    reason = skipped_reason(sens)
    if reason:
        return section("sensitivity", title, not_computed(reason))
    thresholds = records(sens.get("thresholds"))
    radius = records(sens.get("radius"))
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
        groups, drawn = sweep_groups(thresholds, page)
        labels = [fmt_percent(r.get("threshold")) for r in thresholds]
        marked = [_close(r.get("threshold"), audit_threshold) for r in thresholds]
        comparison = series(
            list(dict.fromkeys(page.label(str(r.get("comparison_group"))) for r in thresholds))
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
                name=page.label,
            )
        )
        parts.append(
            _verdict(thresholds, drawn, labels, "served threshold", "threshold-verdict", page.label)
        )
        panels.append(
            charts.SweepPanel(
                x=[as_number(r.get("threshold")) or math.nan for r in thresholds],
                ratios={
                    page.label(g): [get_in(r, "groups", g, "ratio") for r in thresholds]
                    for g in drawn
                },
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
    groups, drawn = sweep_groups(radius, page)
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
            name=page.label,
        ),
        _verdict(radius, drawn, labels, "radius", "radius-verdict", page.label),
    ]
    panels.append(
        charts.SweepPanel(
            x=[as_number(r.get("radius_m")) or math.nan for r in radius],
            ratios={
                page.label(g): [get_in(r, "groups", g, "ratio") for r in radius] for g in drawn
            },
            tick_labels=[f"{(as_number(r.get('radius_m')) or 0) / 1000:g} km" for r in radius],
            x_label="radius of every service point (median shown when radii differ)",
            y_label="coverage-rate ratio",
            title="Coverage-rate ratio by reach",
            marked=audit_radius,
            marked_label=f"this audit ({fmt_distance(audit_radius, 'm')})",
        )
    )
    return join(parts)
