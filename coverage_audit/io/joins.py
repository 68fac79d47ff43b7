"""Joins on ids: the match rate of every id join and, when it fails, the likely cause.

Every input joined to the areas on an id (demographics tables, served-id lists, activity
tables) goes through :func:`match_ids`, which returns a :class:`MatchReport` (rows read,
rows matched, rate) and raises :class:`~coverage_audit.errors.InputError` when nothing
matches or fewer than :data:`MIN_MATCH_SHARE` do. The message shows a few unmatched ids
from each side and names the likely cause: leading zeros lost (set ``id_width``), a
summary-level prefix (``1400000US``), another geography level (tract vs block group) or
another vintage (2010 vs 2020 tract codes in the same counties).
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from ..errors import InputError

#: Least share of an input's ids that must match the areas; below it the join is an error
#: (a stated policy: a join that loses most rows is almost always a wrong id column,
#: lost zeros or another geography, not a real gap).
MIN_MATCH_SHARE = 0.5
_PREFIX_RE = re.compile(r"^\d{7}US")
#: Lengths of GEOIDs by geography level.
_LEVELS = {2: "state", 5: "county or ZCTA", 11: "tract", 12: "block group", 15: "block"}


@dataclass(frozen=True)
class MatchReport:
    """How well one input's ids matched the areas."""

    role: str
    path: str
    rows: int
    matched: int
    layout: str | None = None

    @property
    def unmatched(self) -> int:
        """Rows whose id is not an area id."""
        return self.rows - self.matched

    @property
    def match_rate(self) -> float | None:
        """Share of rows whose id is an area id (None for an empty input)."""
        return self.matched / self.rows if self.rows else None

    def to_dict(self) -> dict[str, Any]:
        """Plain data for summary.json ``inputs.tables``."""
        return {
            "path": self.path,
            "rows": self.rows,
            "matched": self.matched,
            "unmatched": self.unmatched,
            "match_rate": self.match_rate,
            "role": self.role,
            "layout": self.layout,
        }

    def line(self) -> str:
        """One readable line for ``check`` and the console."""
        rate = "n/a" if self.match_rate is None else f"{self.match_rate:.1%}"
        layout = f" ({self.layout})" if self.layout else ""
        return (
            f"{self.role}: {self.path}{layout}: {self.rows} rows, {self.matched} matched the "
            f"areas ({rate}), {self.unmatched} not"
        )


def likely_cause(unmatched: list[str], targets: Iterable[str]) -> str:
    """Name the most likely reason why ``unmatched`` ids are not among ``targets``."""
    target_set = {t for t in targets if t}
    if not unmatched or not target_set:
        return "no ids to compare"
    sample = unmatched[:200]
    widths = sorted({len(t) for t in target_set})
    width = widths[-1]
    if any(_PREFIX_RE.match(u) for u in sample):
        stripped = [_PREFIX_RE.sub("", u) for u in sample]
        hit = sum(s in target_set for s in stripped)
        return (
            f"the ids carry a summary-level prefix such as {sample[0][:9]!r} (data.census.gov "
            f"GEO_ID); {hit} of {len(sample)} shown match without it: give the table itself "
            "(its GEO_ID prefix is removed on reading) or remove the prefix"
        )
    padded = [u.zfill(width) for u in sample if u.isdigit() and len(u) < width]
    if padded and sum(p in target_set for p in padded) >= len(padded) / 2:
        return (
            f"leading zeros were lost (the ids were read or saved as numbers): set "
            f"id_width = {width} so that ids are zero-padded to {width} digits"
        )
    lengths = sorted({len(u) for u in sample})
    if len(lengths) == 1 and lengths[0] != width:
        mine, theirs = lengths[0], width
        level_mine = _LEVELS.get(mine, f"{mine}-character ids")
        level_theirs = _LEVELS.get(theirs, f"{theirs}-character ids")
        if mine > theirs and sum(u[:theirs] in target_set for u in sample) >= len(sample) / 2:
            return (
                f"another geography level: these ids look like {level_mine} GEOIDs, the areas "
                f"are {level_theirs} GEOIDs; download the table at the areas' level"
            )
        if mine < theirs:
            parents = {t[:mine] for t in target_set}
            if sum(u in parents for u in sample) >= len(sample) / 2:
                return (
                    f"another geography level: these ids look like {level_mine} GEOIDs, the "
                    f"areas are {level_theirs} GEOIDs; download the table at the areas' level"
                )
        return (
            f"the ids have {mine} characters and the areas' {theirs}: another geography level "
            f"({level_mine} vs {level_theirs}) or ZIP codes (use [footprint] zips)"
        )
    counties = {t[:5] for t in target_set if len(t) >= 11}
    if counties and sum(u[:5] in counties for u in sample) >= len(sample) / 2:
        return (
            "the ids are in the areas' counties but the tract codes differ: another vintage "
            "(2010 vs 2020 tracts); use boundaries and tables of the same census year"
        )
    return "the ids come from another region or another id scheme; check the id column"


def match_ids(
    role: str,
    path: str,
    ids: Sequence[str | None],
    targets: Iterable[str],
    *,
    layout: str | None = None,
    min_share: float = MIN_MATCH_SHARE,
    matched_share: float | None = None,
    what: str = "rows",
) -> MatchReport:
    """Report how many ``ids`` are among ``targets``; fail below ``min_share``.

    Parameters
    ----------
    role, path : str
        The input's role ("table", "served ids", "activity") and file, for messages.
    ids : list of str or None
        The input's ids, one per row (None for a missing id; such rows count as unmatched).
    targets : iterable of str
        The area ids.
    layout : str, optional
        The detected layout, for the report.
    min_share : float
        Least share that must match; :data:`MIN_MATCH_SHARE` by default.
    matched_share : float, optional
        The share tested against ``min_share`` when it is not the rows' rate (a table may
        cover a whole state: then the share of areas that found a row is tested).
    what : str
        What ``matched_share`` is a share of, for the message.

    Raises
    ------
    InputError
        When no id matches, or the tested share is below ``min_share``.
    """
    target_list = [t for t in targets if t is not None]
    target_set = set(target_list)
    hits = [i is not None and i in target_set for i in ids]
    report = MatchReport(role, path, len(ids), int(sum(hits)), layout)
    share = report.match_rate if matched_share is None else matched_share
    if report.matched == 0 or (share is not None and share < min_share):
        unmatched = sorted({i for i, h in zip(ids, hits, strict=True) if i is not None and not h})
        others = sorted(target_set - {i for i in ids if i is not None})
        share_text = "none" if report.matched == 0 else f"only {share:.1%} of {what}"
        raise InputError(
            f"{role} '{path}': {share_text} matched the areas' ids "
            f"({report.matched} of {report.rows} rows; at least {min_share:.0%} needed). "
            f"Unmatched ids here: {unmatched[:4]}; area ids without a match: {others[:4]}. "
            f"Likely cause: {likely_cause(unmatched, target_list)}"
        )
    return report
