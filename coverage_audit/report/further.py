"""The further analyses' sections, as the page orders them, and what they add elsewhere.

Takes the summary.json findings (and the page's shared state) and gives the list of
sections of the further analyses in page order, which of them the summary holds, the
methods topics and quoted values they need, and their lines in the page's key figures.
The sections themselves are drawn by :mod:`.compare_sections` (footprints compared,
change, peers) and :mod:`.explain_sections` (models and rules, sensitivity).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

from .access_sections import access_key_figures, access_section
from .compare_sections import change_section, comparison_section, peers_section, ranked_rate
from .explain_sections import explain_section, flags_of, sensitivity_section, sweep_groups
from .lending_sections import key_figures as lending_key_figures
from .lending_sections import lending_section
from .markup import (
    NA,
    Html,
    as_mapping,
    as_number,
    fmt_fixed,
    fmt_percent,
    get_in,
    records,
    series,
    skipped_reason,
    tag,
)
from .sections import Page

#: The further sections in page order: (anchor, title, render).
FURTHER_SECTIONS: tuple[tuple[str, str, Callable[[Page], Html]], ...] = (
    ("comparison", "Footprints compared", comparison_section),
    ("change", "Change between footprints", change_section),
    ("peers", "Lending activity against peers", peers_section),
    ("lending", "Lending patterns from loan records", lending_section),
    ("explain", "Is the gap explained by other factors?", explain_section),
    ("sensitivity", "Does the finding hold?", sensitivity_section),
    ("access", "Access to service capacity", access_section),
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
        if records(sens.get("thresholds")):
            topics.add("sensitivity")
        if records(sens.get("radius")):
            topics.add("sensitivity_radius")
    return topics


def method_values(page: Page) -> dict[str, str]:
    """Return the values the further methods entries quote (escaped when filled)."""
    s = page.summary
    cmp = as_mapping(s.get("comparison"))
    thresholds = records(get_in(s, "sensitivity", "thresholds"))
    radius = records(get_in(s, "sensitivity", "radius"))
    change_threshold = get_in(s, "change", "threshold")
    if change_threshold is None:
        change_threshold = get_in(s, "coverage", "served_threshold")
    step = get_in(s, "explain", "models", "minority_step")
    rules = as_mapping(get_in(s, "explain", "rules"))
    alpha = get_in(s, "peers", "alpha")
    return {
        "comparison_rate": ranked_rate(cmp),
        "ranking_rule": str(cmp.get("ranking_rule") or "ranked from the most to the least even"),
        "change_threshold": fmt_percent(change_threshold),
        "peer_alpha": fmt_fixed(alpha, 2) if as_number(alpha) is not None else NA,
        "minority_step": "10" if as_number(step) is None else f"{100.0 * float(step):g}",
        "protected": str(rules.get("protected") or "protected"),
        "outcome": str(rules.get("outcome") or "outcome"),
        "sweep_low": fmt_percent(thresholds[0].get("threshold")) if thresholds else NA,
        "sweep_high": fmt_percent(thresholds[-1].get("threshold")) if thresholds else NA,
        "sweep_comparison": series(
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
    items: list[Html] = access_key_figures(page) if "access" in summary else []
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
    items.extend(lending_key_figures(page))
    sens = as_mapping(summary.get("sensitivity"))
    thresholds = records(sens.get("thresholds"))
    if thresholds and not skipped_reason(sens):
        _, drawn = sweep_groups(thresholds, page)
        steady = all(len(set(flags_of(thresholds, g))) == 1 for g in drawn)
        any_flag = any(any(flags_of(thresholds, g)) for g in drawn)
        items.append(
            tag(
                "li",
                (
                    "No group is flagged at any served threshold tried"
                    if not any_flag
                    else "Four-fifths flags "
                    + (
                        "hold at every served threshold tried"
                        if steady
                        else "change with the served threshold"
                    )
                )
                + f" ({fmt_percent(thresholds[0].get('threshold'))} to "
                f"{fmt_percent(thresholds[-1].get('threshold'))}).",
            )
        )
    return items
