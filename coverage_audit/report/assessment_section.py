"""The report section of the assessment-area review (footprints of whole tracts).

Reads summary.json's ``assessment_area`` section (built by
:mod:`coverage_audit.stats.assessment_area`): the low- or moderate-income and
majority-minority tracts outside the area that border it, the counties it takes in only
part of, and its shares of LMI and majority-minority tracts against those counties.
"""

from __future__ import annotations

from typing import Any

from .markup import Html, Num, as_mapping, fmt_count, fmt_percent, para, section, table
from .sections import Page

#: Anchor and title of the section.
ANCHOR, TITLE = "assessment_area", "Listed tracts: assessment-area review"


def assessment_area_section(page: Page) -> Html:
    """Return "Assessment-area review": adjacent exclusions, partial counties, shares."""
    review = as_mapping(page.summary.get("assessment_area"))
    parts: list[Any] = [
        para(
            "An assessment area consists of whole geographies, may include only the part of "
            "a county the institution can reasonably serve, may not reflect illegal "
            "discrimination and may not arbitrarily exclude low- or moderate-income "
            "geographies (12 CFR 228.41(d) and (e)). The tables list the facts an examiner "
            "reads against those limits; whether an exclusion is arbitrary depends on the "
            "institution's size, branches and lending, which this audit does not know."
        )
    ]
    rows = []
    for key, label in (
        ("adjacent_excluded_lmi", "Low- or moderate-income tracts bordering the area, left out"),
        (
            "adjacent_excluded_majority_minority",
            "Majority-minority tracts bordering the area, left out",
        ),
    ):
        item = as_mapping(review.get(key))
        ids = [str(i) for i in item.get("ids") or []]
        rows.append(
            (
                label,
                Num(fmt_count(item.get("count"))),
                Num(fmt_count(item.get("population"))),
                ", ".join(ids) or "none",
            )
        )
    parts.append(
        table(
            ("Tracts", Num("Count"), Num("Population"), "Ids"),
            rows,
            caption="Tracts outside the assessment area that border it",
            table_id="assessment-adjacent",
        )
    )
    counties = ", ".join(str(c) for c in review.get("counties") or []) or "n/a"
    share_rows = [
        (
            "Low- or moderate-income tracts",
            Num(fmt_percent(review.get("lmi_share"))),
            Num(fmt_percent(review.get("lmi_share_counties"))),
        ),
        (
            "Majority-minority tracts",
            Num(fmt_percent(review.get("majority_minority_share"))),
            Num(fmt_percent(review.get("majority_minority_share_counties"))),
        ),
    ]
    parts.append(
        table(
            (
                "Share of tracts",
                Num("In the assessment area"),
                Num(f"In its counties ({counties})"),
            ),
            share_rows,
            caption="The assessment area against the counties it lies in",
            table_id="assessment-shares",
        )
    )
    partial = as_mapping(review.get("partial_counties"))
    if partial:
        parts.append(
            table(
                ("County", Num("Tracts inside"), Num("Tracts in the county")),
                [
                    (
                        c,
                        Num(fmt_count(as_mapping(v).get("inside"))),
                        Num(fmt_count(as_mapping(v).get("areas"))),
                    )
                    for c, v in partial.items()
                ],
                caption="Counties the assessment area takes in only part of",
                table_id="assessment-partial",
            )
        )
    else:
        parts.append(para("The assessment area takes in whole counties only."))
    return section(ANCHOR, TITLE, *parts)
