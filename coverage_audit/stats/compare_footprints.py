"""Several footprints side by side: coverage rates, ratios and enclave counts per footprint.

Takes finished results rather than geometry: the ``coverage`` section of each footprint's
summary (with its enclave count) for :func:`compare_footprints`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import pandas as pd

from .._util import clean_number, safe_ratio, to_jsonable
from ..errors import AnalysisError, SpecError
from .four_fifths import below_four_fifths

_GROUP_FIELDS = (
    "rate",
    "served_area_rate",
    "ratio",
    "served_area_ratio",
    "difference",
    "below_four_fifths",
)


@dataclass(frozen=True)
class FootprintRow:
    """One footprint in the comparison.

    Attributes
    ----------
    name : str
        Footprint name as given.
    rank : int
        1 for the most even coverage (see :func:`compare_footprints`).
    worst_group : str or None
        Non-reference group with the lowest ratio.
    worst_ratio : float or None
        That ratio; None when no group ratio is defined.
    enclave_count : int or None
        Enclaves found for this footprint, when given.
    below_four_fifths : tuple of str
        Groups whose ranking ratio is strictly below 4/5, compared exactly (on the
        covered and total populations where the summary gives them) by
        :func:`~coverage_audit.stats.four_fifths.below_four_fifths`.
    groups : dict
        Per group: ``rate``, ``served_area_rate``, ``ratio``, ``served_area_ratio``,
        ``difference``, ``below_four_fifths`` as given in the summaries,
        ``ranking_ratio``, the ratio to the reference group that the ranking used, and
        ``ranking_below_four_fifths``, its four-fifths flag.
    """

    name: str
    rank: int
    worst_group: str | None
    worst_ratio: float | None
    enclave_count: int | None
    below_four_fifths: tuple[str, ...]
    groups: Mapping[str, Mapping[str, Any]]

    def to_dict(self) -> dict[str, Any]:
        """Return the row as JSON-safe data."""
        return to_jsonable(
            {
                "name": self.name,
                "rank": self.rank,
                "worst_group": self.worst_group,
                "worst_ratio": self.worst_ratio,
                "enclave_count": self.enclave_count,
                "below_four_fifths": list(self.below_four_fifths),
                "groups": self.groups,
            }
        )


@dataclass(frozen=True)
class FootprintComparison:
    """Footprints ranked from the most to the least even coverage.

    Attributes
    ----------
    by : {"rate", "served_area_rate"}
        Which group ratio the ranking used.
    reference_group : str
    groups : tuple of str
        Groups seen in any footprint, in first-seen order.
    footprints : tuple of FootprintRow
        In rank order.
    ranking_rule : str
        The rule, in words.
    notes : tuple of str
    """

    by: str
    reference_group: str
    groups: tuple[str, ...]
    footprints: tuple[FootprintRow, ...]
    ranking_rule: str
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return the comparison as JSON-safe data."""
        return to_jsonable(
            {
                "by": self.by,
                "reference_group": self.reference_group,
                "groups": list(self.groups),
                "ranking_rule": self.ranking_rule,
                "footprints": [f.to_dict() for f in self.footprints],
                "notes": list(self.notes),
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """Return one row per footprint, with ``<group>_<field>`` columns."""
        records = []
        for f in self.footprints:
            record: dict[str, Any] = {
                "footprint": f.name,
                "rank": f.rank,
                "worst_group": f.worst_group,
                "worst_ratio": f.worst_ratio,
                "enclave_count": f.enclave_count,
            }
            for g in self.groups:
                for field in (*_GROUP_FIELDS, "ranking_ratio"):
                    record[f"{g}_{field}"] = f.groups.get(g, {}).get(field)
            records.append(record)
        return pd.DataFrame.from_records(records)


def compare_footprints(
    results: Mapping[str, Mapping[str, Any]],
    *,
    by: Literal["rate", "served_area_rate"] = "rate",
) -> FootprintComparison:
    """Put several footprints' coverage side by side and rank them.

    Parameters
    ----------
    results : mapping of footprint name to summary
        Each summary is either a whole ``summary.json`` document (with a ``coverage``
        section and an ``enclaves`` list) or the ``coverage`` section itself with an
        optional ``enclave_count``; ``enclave_count`` wins over ``len(enclaves)``.
    by : {"rate", "served_area_rate"}
        Rank on the ratio of areal-weighted rates or of served-area rates. Both are
        recomputed here as ``rate / reference rate`` from each summary's rates; the
        summary's own ``ratio`` or ``served_area_ratio`` is used only where a rate is
        missing and the summary compared with the reference group.

    Returns
    -------
    FootprintComparison

    Raises
    ------
    AnalysisError
        No footprint is given, a summary has no ``coverage`` groups, or the footprints
        use different reference groups (their ratios would not be comparable).

    Notes
    -----
    Ranking rule: footprints are ordered by their worst (lowest) ratio of any
    non-reference group to the reference group, highest first, so rank 1 is the
    footprint whose least-reached group is reached most nearly as well as the reference.
    Ties go to the footprint with fewer enclaves, then to the name in alphabetical order;
    footprints with no defined ratio come last.
    """
    if by not in ("rate", "served_area_rate"):
        raise SpecError(f'by was "{by}" but is expected to be one of ["rate", "served_area_rate"]')
    if not results:
        raise AnalysisError("no footprints to compare: give at least one footprint summary")
    parsed = {str(name): _coverage_of(str(name), summary) for name, summary in results.items()}
    references = {name: cov.get("reference_group") for name, (cov, _) in parsed.items()}
    if len(set(references.values())) > 1:
        raise AnalysisError(
            "the footprints use different reference groups, so their ratios cannot be compared: "
            + ", ".join(f"{n}: {r}" for n, r in references.items())
            + "; rerun them with one reference group"
        )
    reference = str(next(iter(references.values())))
    thresholds = {cov.get("served_threshold") for cov, _ in parsed.values()}
    notes = []
    if len(thresholds) > 1:
        notes.append(
            f"the footprints use different served thresholds {sorted(map(str, thresholds))}; "
            "served-area rates are not like for like"
        )
    groups: list[str] = []
    for cov, _ in parsed.values():
        groups.extend(g for g in cov["groups"] if g not in groups)
    rows = []
    for name, (cov, enclaves) in parsed.items():
        table = {g: _group_fields(cov["groups"][g]) for g in cov["groups"]}
        # Ratios are recomputed against the reference from the rates, so footprints whose
        # summaries compared with the highest-rate group still rank on one scale; the given
        # ratio is used only when a rate is missing and it is a ratio to the reference.
        rate_key = "rate" if by == "rate" else "served_area_rate"
        given_key = "ratio" if by == "rate" else "served_area_ratio"
        to_reference = cov.get("comparison", "reference") == "reference"
        ref_rate = table.get(reference, {}).get(rate_key)
        ref_counts = _group_counts(cov["groups"].get(reference), by)
        for g, fields in table.items():
            counts = _group_counts(cov["groups"][g], by)
            if fields[rate_key] is not None and ref_rate is not None:
                fields["ranking_ratio"] = safe_ratio(fields[rate_key], ref_rate)
                # Exact rule of 29 CFR 1607.4(D) on the counts where the summary has them.
                fields["ranking_below_four_fifths"] = fields["ranking_ratio"] is not None and (
                    below_four_fifths(*counts, *ref_counts)
                    if counts is not None and ref_counts is not None
                    else below_four_fifths(fields[rate_key], 1.0, ref_rate, 1.0)
                )
            else:
                fields["ranking_ratio"] = fields[given_key] if to_reference else None
                fields["ranking_below_four_fifths"] = fields[
                    "ranking_ratio"
                ] is not None and below_four_fifths(fields["ranking_ratio"], 1.0, 1.0, 1.0)
        candidates = [
            (fields["ranking_ratio"], g)
            for g, fields in table.items()
            if g != reference and fields["ranking_ratio"] is not None
        ]
        worst_ratio, worst_group = min(candidates) if candidates else (None, None)
        below = tuple(g for g, fields in table.items() if fields["ranking_below_four_fifths"])
        rows.append((name, worst_group, worst_ratio, enclaves, below, table))
    rows.sort(
        key=lambda r: (
            r[2] is None,
            -(r[2] if r[2] is not None else 0.0),
            r[3] if r[3] is not None else math.inf,
            r[0],
        )
    )
    footprints = tuple(
        FootprintRow(name, k + 1, wg, wr, enc, below, table)
        for k, (name, wg, wr, enc, below, table) in enumerate(rows)
    )
    rule = (
        f"ranked by the lowest {'areal-rate' if by == 'rate' else 'served-area-rate'} ratio of "
        f"any group to {reference}, highest first; ties by fewer enclaves, then by name"
    )
    return FootprintComparison(by, reference, tuple(groups), footprints, rule, tuple(notes))


def _coverage_of(name: str, summary: Mapping[str, Any]) -> tuple[Mapping[str, Any], int | None]:
    coverage = summary.get("coverage", summary)
    if not isinstance(coverage, Mapping) or not isinstance(coverage.get("groups"), Mapping):
        raise AnalysisError(
            f'footprint "{name}" has no coverage groups; give its summary.json document or its '
            '"coverage" section (with "groups")'
        )
    enclaves = summary.get("enclave_count", coverage.get("enclave_count"))
    if enclaves is None and isinstance(summary.get("enclaves"), Sequence):
        enclaves = len(summary["enclaves"])
    return coverage, None if enclaves is None else int(enclaves)


def _group_counts(entry: object, by: str) -> tuple[float, float] | None:
    """Return a group's (covered population, population) for the areal rate, if given."""
    if by != "rate" or not isinstance(entry, Mapping):
        return None
    covered = clean_number(entry.get("covered_population"))
    total = clean_number(entry.get("population"))
    if not isinstance(covered, (int, float)) or not isinstance(total, (int, float)) or total <= 0:
        return None
    return float(covered), float(total)


def _group_fields(entry: Mapping[str, Any]) -> dict[str, Any]:
    return {field: clean_number(entry.get(field)) for field in _GROUP_FIELDS}
