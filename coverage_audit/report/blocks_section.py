"""Report section "Where people live": block-based coverage beside areal weighting.

Reads ``coverage.apportionment``, ``coverage.blocks`` and ``coverage.groups`` from the
summary and gives a table of each group's coverage rate counted by census block and the
rate areal weighting would give, with a sentence on the difference. Shown only when the
audit counted people by block (``coverage.apportionment == "blocks"``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .markup import (
    Html,
    Num,
    as_mapping,
    fmt_count,
    fmt_percent,
    fmt_points,
    ordered,
    para,
    section,
    table,
)
from .sections import Page

ANCHOR = "blocks"
TITLE = "Where people live: coverage counted by census block"


def has_blocks(summary: Mapping[str, Any]) -> bool:
    """Whether the audit placed people by census block or by a settlement mask."""
    return as_mapping(summary.get("coverage")).get("apportionment") in ("blocks", "dasymetric")


def difference_sentence(
    groups: Mapping[str, Any],
    areal: Mapping[str, Any],
    how: str = "by census block",
    label: Any = str,
) -> str:
    """Plain words for the largest gap between block-based and areal rates."""
    gaps = []
    for g, item in groups.items():
        rate, other = as_mapping(item).get("rate"), areal.get(g)
        if isinstance(rate, (int, float)) and isinstance(other, (int, float)):
            gaps.append((abs(rate - other), g, rate, other))
    if not gaps:
        return "No group has both a block-based and an areal rate to compare."
    _, g, rate, other = max(gaps)
    direction = "higher" if rate > other else "lower" if rate < other else "the same"
    return (
        f"Counting people where they live, {how}, the coverage rate of {label(g)} is "
        f"{fmt_percent(rate)}, against {fmt_percent(other)} if people were spread evenly "
        f"over each area ({fmt_points(rate - other)}, {direction}): the largest difference "
        "between the two ways of counting. Where the two differ, the footprint's edges cut "
        "areas whose people live unevenly; the block-based figures are the ones used "
        "throughout this report."
    )


def further_sentence(summary: Mapping[str, Any], how: str = "by census block") -> str:
    """Say which further analyses counted people the same way and which stayed areal."""
    same = []
    for key, name in (
        ("comparison", "the footprint comparison"),
        ("change", "the change between footprints"),
        ("sensitivity", "the served-threshold sweep"),
    ):
        if as_mapping(summary.get(key)).get("apportionment") not in (None, "areal"):
            same.append(name)
    text = ""
    if same:
        names = same[0] if len(same) == 1 else ", ".join(same[:-1]) + " and " + same[-1]
        text = f"{names[0].upper()}{names[1:]} also counted people {how}."
    if as_mapping(summary.get("sensitivity")).get("radius_apportionment") == "areal":
        text += (
            " The reach sweep did not: it uses areal covered fractions, since counting "
            "people for every reach would need them placed again each time."
        )
    return text.strip()


def blocks_section(page: Page) -> Html:
    """Return the section: rates by block and by areal weighting, and the blocks used."""
    cov = as_mapping(page.summary.get("coverage"))
    method = str(cov.get("apportionment"))
    info = as_mapping(cov.get(method))
    groups = as_mapping(cov.get("groups"))
    areal = as_mapping(info.get("areal_rates"))
    rows = []
    for g in ordered(page.groups, groups):
        rate = as_mapping(groups.get(g)).get("rate")
        other = areal.get(g)
        gap = rate - other if isinstance(rate, float) and isinstance(other, float) else None
        rows.append((g, Num(fmt_percent(rate)), Num(fmt_percent(other)), Num(fmt_points(gap))))
    by = "block" if method == "blocks" else "settled land"
    headers = ("Group", Num(f"Rate by {by}"), Num("Rate by areal weighting"), Num("Difference"))
    if method == "dasymetric":
        intro = para(
            f"Census blocks were not given; the settlement mask {info.get('mask', '')} "
            "placed each area's people on its settled land only, spread evenly over it "
            "(masked areal interpolation, as PySAL's tobler computes it). "
            f"{fmt_count(info.get('areas_without_settled_land'))} areas had no settled land "
            "and keep their areal fraction. The mask's accuracy and date bound these figures."
        )
        return section(
            ANCHOR,
            "Where people live: coverage of settled land",
            intro,
            table(
                headers, rows, table_id="blocks-table", caption="Coverage rate by group, two ways"
            ),
            para(difference_sentence(groups, areal, "on settled land", page.label)),
            *_further(page.summary, "on settled land"),
        )
    return section(
        ANCHOR,
        TITLE,
        para(
            "Each census block's covered fraction was measured exactly and its people "
            "counted as covered in that proportion; covered people were then summed to "
            f"each area by the first {info.get('prefix_digits', '')} digits of the block "
            f"GEOID. {fmt_count(info.get('blocks_used'))} of "
            f"{fmt_count(info.get('blocks_read'))} blocks were used "
            f"({fmt_count(info.get('blocks_excluded'))} listed in exclusions.csv; "
            f"{fmt_count(info.get('areas_without_blocks'))} areas had no block). The area "
            "counts used by every statistic are the blocks' sums. People are still assumed "
            "to be spread evenly within each block."
        ),
        table(headers, rows, table_id="blocks-table", caption="Coverage rate by group, two ways"),
        para(difference_sentence(groups, areal, label=page.label)),
        *_further(page.summary),
    )


def _further(summary: Mapping[str, Any], how: str = "by census block") -> list[Html]:
    text = further_sentence(summary, how)
    return [para(text)] if text else []
