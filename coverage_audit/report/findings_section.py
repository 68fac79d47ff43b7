"""The top of the report: the headline findings in plain words, beside a small map.

Reads ``summary["findings"]`` (built by :mod:`coverage_audit.findings`) and the study
area section; draws nothing new (the small map is the region overview of
:mod:`.charts`). The section has the id ``findings`` so the map's title box can link to
``report.html#findings``.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .audited_section import overview_figure
from .markup import Html, fmt_count, get_in, para, tag
from .sections import Page

#: Anchor of the findings section (the map links to it).
FINDINGS_ANCHOR = "findings"


def _scope(page: Page) -> Html:
    """One sentence saying what was compared, and within which study area."""
    s = page.summary
    areas = s.get("areas") or {}
    footprint = s.get("footprint") or {}
    text = (
        f"Footprint {footprint.get('name') or 'n/a'} ({footprint.get('kind') or 'n/a'}) "
        f"against {fmt_count(areas.get('analysed'))} areas"
    )
    study = s.get("study_area")
    if isinstance(study, Mapping):
        text += (
            f" inside the study area {study.get('name') or ''} ({study.get('kind')}); "
            f"{fmt_count(study.get('areas_outside'))} areas outside it are left out of "
            "every figure and drawn grey on the map"
        )
    return para(text + ".", class_="scope")


def findings_section(page: Page) -> Html:
    """Return the findings section: the finding sentences and a small overview map."""
    items = [
        tag("li", str(f.get("sentence") or ""), data_kind=str(f.get("kind") or ""))
        for f in page.summary.get("findings") or []
        if isinstance(f, Mapping)
    ]
    listing = (
        tag("ol", *items, class_="finding-list")
        if items
        else para("No headline finding could be stated from the statistics present.")
    )
    text = tag(
        "div",
        _scope(page),
        listing,
        para(
            "Each sentence is built from the figures in the sections below; summary.json "
            "holds them under findings.",
            class_="muted",
        ),
        class_="finding-text",
    )
    small_map = overview_figure(page)
    return tag(
        "section",
        tag("h2", "Findings"),
        tag("div", text, tag("div", small_map, class_="finding-map"), class_="finding-grid"),
        id=FINDINGS_ANCHOR,
    )


def first_sentence(summary: Mapping[str, Any]) -> str | None:
    """Return the first finding sentence, or None."""
    sentence = get_in(summary, "findings")
    if isinstance(sentence, list) and sentence and isinstance(sentence[0], Mapping):
        return str(sentence[0].get("sentence"))
    return None
