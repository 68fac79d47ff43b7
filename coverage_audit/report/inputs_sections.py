"""Report part "Joins on ids": each input joined to the areas on an id, with its match rate.

Reads ``inputs.tables`` (demographics tables: layout detected, rows, matched, rate) and
the footprint's and peers' ``match`` entries of summary.json; renders nothing when no
input was joined on ids.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from .markup import NA, Html, Num, fmt_count, fmt_percent, table, tag


def joins_part(summary: Mapping[str, Any]) -> Html:
    """Return the table of joins on ids, or an empty string when there were none."""
    entries = [
        e for e in (summary.get("inputs") or {}).get("tables") or [] if isinstance(e, Mapping)
    ]
    for key in ("footprint", "peers"):
        match = (summary.get(key) or {}).get("match")
        if isinstance(match, Mapping):
            entries.append(match)
    if not entries:
        return Html("")
    rows: list[tuple[Any, ...]] = [
        (
            e.get("role") or "table",
            tag("span", Path(str(e.get("path") or NA)).name, class_="mono"),
            e.get("layout") or NA,
            Num(fmt_count(e.get("rows"))),
            Num(fmt_count(e.get("matched"))),
            Num(fmt_percent(e.get("match_rate"))),
        )
        for e in entries
    ]
    return table(
        ("Input", "File", "Layout read", Num("Rows"), Num("Matched"), Num("Match rate")),
        rows,
        caption="Inputs joined to the areas on ids: rows whose id is an area id",
    )
