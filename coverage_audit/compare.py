"""Comparing footprints: several footprints side by side, change over time, peer lenders.

Takes finished results rather than geometry: the ``coverage`` section of each footprint's
summary (with its enclave count) for :func:`compare_footprints`; two per-area tables of the
same areas, before and after, for :func:`change_between`; and an activity table (loans,
applications or branches by area and lender) with the majority-minority flag of each area
for :func:`peer_comparison`. Each gives a frozen result with ``to_dict()`` for summary.json
and ``to_frame()`` for CSV output.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy import stats

from ._util import clean_number, safe_ratio, to_jsonable
from .errors import AnalysisError, InputError, SpecError
from .stats.four_fifths import FOUR_FIFTHS, below_four_fifths  # noqa: F401 (re-export)
from .stats.models import Z_95
from .stats.sweeps import served_from_fraction

_GROUP_FIELDS = (
    "rate",
    "served_area_rate",
    "ratio",
    "served_area_ratio",
    "difference",
    "below_four_fifths",
)


def _available(table: pd.DataFrame) -> list[str]:
    return [str(c) for c in table.columns]


# --------------------------------------------------------------------------------------
# Several footprints side by side
# --------------------------------------------------------------------------------------


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
        ref_counts = _counts(cov["groups"].get(reference), by)
        for g, fields in table.items():
            counts = _counts(cov["groups"][g], by)
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


def _counts(entry: Any, by: str) -> tuple[float, float] | None:
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


# --------------------------------------------------------------------------------------
# Change between two footprints of the same areas
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class AreaChange:
    """Areas that lost or gained service, with who lives there.

    Attributes
    ----------
    ids : tuple of str
        Area ids, sorted.
    population : float
        Their total population (from the ``before`` table).
    group_counts, group_shares : dict of str to float
        Each group's population there, and its share of their population.
    """

    ids: tuple[str, ...]
    population: float
    group_counts: Mapping[str, float]
    group_shares: Mapping[str, float | None]

    def to_dict(self) -> dict[str, Any]:
        """Return the change as JSON-safe data."""
        return to_jsonable(
            {
                "count": len(self.ids),
                "ids": list(self.ids),
                "population": self.population,
                "group_counts": self.group_counts,
                "group_shares": self.group_shares,
            }
        )


@dataclass(frozen=True)
class GroupChange:
    """One group's rates before and after, and the change in percentage points."""

    rate_before: float | None
    rate_after: float | None
    rate_change_pp: float | None
    served_area_rate_before: float | None
    served_area_rate_after: float | None
    served_area_rate_change_pp: float | None
    ratio_before: float | None
    ratio_after: float | None

    def to_dict(self) -> dict[str, Any]:
        """Return the figures as JSON-safe data."""
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


@dataclass(frozen=True)
class ChangeResult:
    """Change of service between two footprints over the same areas.

    Attributes
    ----------
    areas_compared : int
        Ids present on both sides.
    only_before, only_after : tuple of str
        Ids present on one side only (left out of everything else).
    lost, gained : AreaChange
        Areas served before and not after, and the reverse.
    groups : dict of str to GroupChange
        Areal-weighted and served-area rates on each side, over the common areas.
    reference_group : str
    threshold : float or None
        Served threshold used to recompute ``served``; None when the tables' own
        ``served`` columns were used.
    """

    areas_compared: int
    only_before: tuple[str, ...]
    only_after: tuple[str, ...]
    lost: AreaChange
    gained: AreaChange
    groups: Mapping[str, GroupChange]
    reference_group: str
    threshold: float | None

    def to_dict(self) -> dict[str, Any]:
        """Return the change as JSON-safe data."""
        return to_jsonable(
            {
                "areas_compared": self.areas_compared,
                "only_before": list(self.only_before),
                "only_after": list(self.only_after),
                "lost_service": self.lost.to_dict(),
                "gained_service": self.gained.to_dict(),
                "groups": {g: v.to_dict() for g, v in self.groups.items()},
                "reference_group": self.reference_group,
                "threshold": self.threshold,
                "rates_note": "rates are fractions; changes are percentage points (after - before)",
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """Return one row per group with the before/after rates and changes."""
        return pd.DataFrame.from_records(
            [{"group": g, **v.to_dict()} for g, v in self.groups.items()]
        )


def change_between(
    before: pd.DataFrame,
    after: pd.DataFrame,
    *,
    id_column: str,
    groups: Sequence[str],
    reference: str,
    threshold: float | None = None,
    population_column: str = "population",
) -> ChangeResult:
    """Compare service between two footprints (or two dates) over the same areas.

    Parameters
    ----------
    before, after : pandas.DataFrame
        Per-area tables with ``id_column``, ``covered_fraction``, the group count columns,
        ``population_column`` and, unless ``threshold`` is given, ``served``.
    id_column : str
        Area id column (compared as text, so leading zeros matter).
    groups : sequence of str
        Group count columns.
    reference : str
        Reference group for the ratios (one of ``groups``).
    threshold : float, optional
        When given, ``served`` is recomputed on both sides as ``covered_fraction >=
        threshold``, so both use one rule.
    population_column : str
        Total population, the denominator of the group shares of lost and gained areas.

    Returns
    -------
    ChangeResult

    Raises
    ------
    InputError
        A column is missing or an id repeats within one table.
    AnalysisError
        The two tables have no id in common.

    Notes
    -----
    Each side's rates use its own counts, so a change can come from the population as
    well as the footprint. The areal-weighted rate of a group is ``sum(count *
    covered_fraction) / sum(count)`` and its served-area rate ``sum(count * served) /
    sum(count)``; lost and gained areas are described with the ``before`` counts.
    """
    groups = list(groups)
    if reference not in groups:
        raise SpecError(f'reference group "{reference}" is not among the groups {groups}')
    needed = [id_column, "covered_fraction", population_column, *groups]
    if threshold is None:
        needed.append("served")
    elif not 0 < float(threshold) <= 1:
        raise SpecError(f"threshold was {threshold} but must be in (0, 1]")
    sides = {}
    for label, table in (("before", before), ("after", after)):
        missing = [c for c in needed if c not in table.columns]
        if missing:
            raise InputError(
                f"the {label} table lacks column(s) {missing}; available columns: "
                f"{_available(table)}"
            )
        ids = table[id_column].astype(str)
        repeated = ids[ids.duplicated()].unique()
        if repeated.size:
            raise InputError(
                f"the {label} table repeats area id(s) {list(repeated[:5])} in {id_column}; "
                "each area must appear once"
            )
        sides[label] = table.set_index(ids)
    b, a = sides["before"], sides["after"]
    common = b.index.intersection(a.index, sort=False)
    only_before = tuple(sorted(set(b.index) - set(a.index)))
    only_after = tuple(sorted(set(a.index) - set(b.index)))
    if common.size == 0:
        raise AnalysisError(
            f"the before and after tables share no area id in {id_column}; check that both use "
            "the same id format"
        )
    common = pd.Index(sorted(common))
    b, a = b.loc[common], a.loc[common]
    served_b = _served(b, threshold, "before")
    served_a = _served(a, threshold, "after")
    lost = served_b & ~served_a
    gained = ~served_b & served_a
    group_changes = {}
    rates = {side: _rates(t, s, groups) for side, t, s in (("b", b, served_b), ("a", a, served_a))}
    for g in groups:
        rb, sb = rates["b"][g]
        ra, sa = rates["a"][g]
        group_changes[g] = GroupChange(
            rate_before=rb,
            rate_after=ra,
            rate_change_pp=_pp(rb, ra),
            served_area_rate_before=sb,
            served_area_rate_after=sa,
            served_area_rate_change_pp=_pp(sb, sa),
            ratio_before=None if rb is None else safe_ratio(rb, rates["b"][reference][0] or 0.0),
            ratio_after=None if ra is None else safe_ratio(ra, rates["a"][reference][0] or 0.0),
        )
    return ChangeResult(
        areas_compared=int(common.size),
        only_before=only_before,
        only_after=only_after,
        lost=_area_change(b, lost, groups, population_column),
        gained=_area_change(b, gained, groups, population_column),
        groups=group_changes,
        reference_group=reference,
        threshold=None if threshold is None else float(threshold),
    )


def _served(table: pd.DataFrame, threshold: float | None, label: str) -> np.ndarray:
    if threshold is not None:
        cf = pd.to_numeric(table["covered_fraction"], errors="coerce").to_numpy(dtype=float)
        if not np.isfinite(cf).all():
            raise InputError(
                f"the {label} table has {int((~np.isfinite(cf)).sum())} missing or non-numeric "
                "covered_fraction value(s)"
            )
        return served_from_fraction(cf, float(threshold))
    served = table["served"]
    values = pd.to_numeric(served, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    if not np.isin(values, (0.0, 1.0)).all():
        raise InputError(
            f"the {label} table's served column must be true/false for every area; "
            f"{int((~np.isin(values, (0.0, 1.0))).sum())} value(s) are not"
        )
    return values == 1.0


def _rates(
    table: pd.DataFrame, served: np.ndarray, groups: Sequence[str]
) -> dict[str, tuple[float | None, float | None]]:
    cf = pd.to_numeric(table["covered_fraction"], errors="coerce").to_numpy(dtype=float)
    counts = table[list(groups)].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    if not (np.isfinite(cf).all() and np.isfinite(counts).all()):
        raise InputError("covered_fraction and the group counts must be numbers in every area")
    totals = counts.sum(axis=0)
    covered = cf @ counts
    in_served = served.astype(float) @ counts
    return {
        g: (safe_ratio(covered[j], totals[j]), safe_ratio(in_served[j], totals[j]))
        for j, g in enumerate(groups)
    }


def _pp(before: float | None, after: float | None) -> float | None:
    return None if before is None or after is None else 100.0 * (after - before)


def _area_change(
    table: pd.DataFrame, mask: np.ndarray, groups: Sequence[str], population_column: str
) -> AreaChange:
    part = table.loc[mask]
    population = float(pd.to_numeric(part[population_column], errors="coerce").sum())
    counts = {g: float(pd.to_numeric(part[g], errors="coerce").sum()) for g in groups}
    shares = {g: safe_ratio(v, population) for g, v in counts.items()}
    return AreaChange(tuple(sorted(part.index)), population, counts, shares)


# --------------------------------------------------------------------------------------
# Peer comparison of activity
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LenderComparison:
    """One lender's share of activity in majority-minority areas against all other lenders.

    Attributes
    ----------
    lender : str
    activity, mm_activity : float
        Its total activity and that in majority-minority areas.
    share : float or None
        ``mm_activity / activity``.
    peer_activity, peer_mm_activity : float
        The same for all other lenders together.
    peer_share : float or None
    difference : float or None
        ``share - peer_share``.
    ci_low, ci_high : float or None
        95 % Wald interval of the difference (unpooled standard error).
    z : float or None
        Two-proportion z statistic with the pooled standard error.
    p_two_sided, p_below : float or None
        Two-sided p-value, and one-sided p-value for "share below peers".
    below_peers : bool
        ``p_below < alpha`` (so also ``share < peer_share``).
    """

    lender: str
    activity: float
    mm_activity: float
    share: float | None
    peer_activity: float
    peer_mm_activity: float
    peer_share: float | None
    difference: float | None
    ci_low: float | None
    ci_high: float | None
    z: float | None
    p_two_sided: float | None
    p_below: float | None
    below_peers: bool

    def to_dict(self) -> dict[str, Any]:
        """Return the comparison as JSON-safe data."""
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


@dataclass(frozen=True)
class PeerResult:
    """Every lender against its peers.

    Attributes
    ----------
    alpha : float
    lenders : tuple of LenderComparison
        In the order the lenders first appear.
    areas : int
        Areas with activity that carry a majority-minority flag.
    unmatched_ids : tuple of str
        Activity area ids with no majority-minority flag (left out), sorted.
    unmatched_activity : float
        Activity in those areas.
    """

    alpha: float
    lenders: tuple[LenderComparison, ...]
    areas: int
    unmatched_ids: tuple[str, ...]
    unmatched_activity: float

    @property
    def flagged(self) -> tuple[str, ...]:
        """Return the lenders whose share is significantly below their peers'."""
        return tuple(x.lender for x in self.lenders if x.below_peers)

    def to_dict(self) -> dict[str, Any]:
        """Return the result as JSON-safe data."""
        return to_jsonable(
            {
                "method": "two-proportion z-test against all other lenders combined",
                "alpha": self.alpha,
                "areas": self.areas,
                "lenders": [x.to_dict() for x in self.lenders],
                "flagged": list(self.flagged),
                "unmatched_ids": list(self.unmatched_ids),
                "unmatched_activity": self.unmatched_activity,
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """Return one row per lender."""
        return pd.DataFrame.from_records([x.to_dict() for x in self.lenders])


def peer_comparison(
    activity: pd.DataFrame,
    *,
    id_column: str,
    majority_minority: pd.Series,
    lender_column: str | None = None,
    count_column: str | None = None,
    lender_columns: Sequence[str] | None = None,
    alpha: float = 0.05,
) -> PeerResult:
    """Compare each lender's share of activity in majority-minority areas with its peers'.

    Parameters
    ----------
    activity : pandas.DataFrame
        Long form (one row per area and lender: ``id_column``, ``lender_column``,
        ``count_column``; repeated pairs are summed) or wide form (``id_column`` and one
        count column per lender).
    id_column : str
        Area id column, matched as text to the index of ``majority_minority``.
    majority_minority : pandas.Series
        True/false (or 1/0) per area id.
    lender_column, count_column : str, optional
        Give both for a long table.
    lender_columns : sequence of str, optional
        Lender columns of a wide table; by default every numeric column but the id.
    alpha : float
        Level of the one-sided "below peers" test.

    Returns
    -------
    PeerResult

    Raises
    ------
    InputError
        A column is missing, a count is negative or missing, or a flag is not true/false.
    AnalysisError
        Fewer than two lenders, so there are no peers.

    Notes
    -----
    For a lender with ``x1`` of ``n1`` actions in majority-minority areas and its peers
    with ``x2`` of ``n2``, ``p1 = x1/n1``, ``p2 = x2/n2`` and the pooled
    ``p = (x1 + x2)/(n1 + n2)``. The test statistic is ``z = (p1 - p2) / sqrt(p (1 - p)
    (1/n1 + 1/n2))`` and the 95 % interval of ``p1 - p2`` uses the unpooled standard
    error ``sqrt(p1 (1 - p1)/n1 + p2 (1 - p2)/n2)`` (Agresti 2013, *Categorical Data
    Analysis*, 3rd ed., sec. 3.1.2 and 3.1.3 for the interval, and the score test of
    equal proportions; section numbers from memory). The peer group is every other
    lender combined, so the lender is not compared with itself. Flagging at ``p < 0.05``
    is common practice in redlining reviews, not a rule.
    """
    if not 0 < alpha < 1:
        raise SpecError(f"alpha was {alpha} but must be strictly between 0 and 1")
    long = _long_activity(activity, id_column, lender_column, count_column, lender_columns)
    flags = _flags(majority_minority)
    # Lenders are listed from all activity, so a lender whose areas all lack a flag still
    # appears (with no matched activity) whichever table form was given.
    lenders = list(dict.fromkeys(long["lender"]))
    mm = long["id"].map(flags)
    matched = mm.notna().to_numpy()
    unmatched = long.loc[~matched & (long["count"] > 0).to_numpy()]
    long = long.loc[matched].assign(mm=mm[matched].astype(bool).to_numpy())
    if len(lenders) < 2:
        raise AnalysisError(
            f"peer comparison needs at least two lenders with matched activity; found {lenders}"
        )
    totals = (
        long.groupby("lender", sort=False)["count"].sum().reindex(lenders).fillna(0.0).to_numpy()
    )
    in_mm = (
        (long.loc[long["mm"]].groupby("lender", sort=False)["count"].sum().reindex(lenders))
        .fillna(0.0)
        .to_numpy()
    )
    x2, n2 = in_mm.sum() - in_mm, totals.sum() - totals
    test = two_proportion_test(in_mm, totals, x2, n2)
    rows = []
    for k, lender in enumerate(lenders):
        p_below = clean_number(test["p_below"][k])
        rows.append(
            LenderComparison(
                lender=str(lender),
                activity=float(totals[k]),
                mm_activity=float(in_mm[k]),
                share=clean_number(test["p1"][k]),
                peer_activity=float(n2[k]),
                peer_mm_activity=float(x2[k]),
                peer_share=clean_number(test["p2"][k]),
                difference=clean_number(test["difference"][k]),
                ci_low=clean_number(test["ci_low"][k]),
                ci_high=clean_number(test["ci_high"][k]),
                z=clean_number(test["z"][k]),
                p_two_sided=clean_number(test["p_two_sided"][k]),
                p_below=p_below,
                below_peers=bool(p_below is not None and p_below < alpha),
            )
        )
    return PeerResult(
        alpha=float(alpha),
        lenders=tuple(rows),
        areas=int(long.loc[long["count"] > 0, "id"].nunique()),
        unmatched_ids=tuple(sorted(unmatched["id"].unique())),
        unmatched_activity=float(unmatched["count"].sum()),
    )


def two_proportion_test(
    x1: np.ndarray, n1: np.ndarray, x2: np.ndarray, n2: np.ndarray
) -> dict[str, np.ndarray]:
    """Two-proportion z-test (pooled SE) and 95 % Wald interval of the difference (unpooled).

    Parameters
    ----------
    x1, n1, x2, n2 : array_like
        Successes and trials of the two samples (vectorised over comparisons).

    Returns
    -------
    dict of numpy.ndarray
        ``p1``, ``p2``, ``difference``, ``ci_low``, ``ci_high``, ``z``, ``p_two_sided``,
        ``p_below`` (one-sided, alternative ``p1 < p2``); NaN where undefined (an empty
        sample, or a pooled share of 0 or 1).

    Notes
    -----
    Formulas as in :func:`peer_comparison` (Agresti 2013; from memory).
    """
    x1, n1, x2, n2 = (np.asarray(v, dtype=float) for v in (x1, n1, x2, n2))
    with np.errstate(invalid="ignore", divide="ignore"):
        p1, p2 = x1 / n1, x2 / n2
        pooled = (x1 + x2) / (n1 + n2)
        se0 = np.sqrt(pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2))
        z = np.where(se0 > 0, (p1 - p2) / se0, np.nan)
        se1 = np.sqrt(p1 * (1.0 - p1) / n1 + p2 * (1.0 - p2) / n2)
    diff = p1 - p2
    return {
        "p1": p1,
        "p2": p2,
        "difference": diff,
        "ci_low": diff - Z_95 * se1,
        "ci_high": diff + Z_95 * se1,
        "z": z,
        "p_two_sided": 2.0 * stats.norm.sf(np.abs(z)),
        "p_below": stats.norm.cdf(z),
    }


def _long_activity(
    activity: pd.DataFrame,
    id_column: str,
    lender_column: str | None,
    count_column: str | None,
    lender_columns: Sequence[str] | None,
) -> pd.DataFrame:
    if (lender_column is None) != (count_column is None):
        raise SpecError("a long activity table needs both lender_column and count_column")
    if lender_column is not None and lender_columns is not None:
        raise SpecError("give lender_column and count_column (long table) or lender_columns (wide)")
    if lender_column is not None:
        wanted = [id_column, lender_column, count_column]
    else:
        if lender_columns is None:
            lender_columns = [
                c
                for c in activity.columns
                if c != id_column and pd.api.types.is_numeric_dtype(activity[c].dtype)
            ]
        wanted = [id_column, *lender_columns]
    missing = [c for c in wanted if c not in activity.columns]
    if missing:
        raise InputError(
            f"the activity table lacks column(s) {missing}; available columns: "
            f"{_available(activity)}"
        )
    if lender_column is not None:
        long = pd.DataFrame(
            {
                "id": activity[id_column].astype(str).to_numpy(),
                "lender": activity[lender_column].astype(str).to_numpy(),
                "count": activity[count_column].to_numpy(),
            }
        )
        column_label = count_column
    else:
        wide = activity[[id_column, *(lender_columns or [])]].copy()
        wide[id_column] = wide[id_column].astype(str)
        long = wide.melt(id_vars=id_column, var_name="lender", value_name="count")
        long = long.rename(columns={id_column: "id"})
        long["lender"] = long["lender"].astype(str)
        column_label = "the lender columns"
    counts = pd.to_numeric(long["count"], errors="coerce")
    bad = counts.isna() | ~np.isfinite(counts) | (counts < 0)
    if bad.any():
        raise InputError(
            f"{int(bad.sum())} activity count(s) in {column_label} are missing, negative or not "
            "numbers (fill areas with no activity with 0)"
        )
    return long.assign(count=counts.astype(float))


def _flags(series: pd.Series) -> pd.Series:
    if not isinstance(series, pd.Series):
        raise InputError(
            "majority_minority must be a pandas Series of true/false indexed by area id"
        )
    values = pd.to_numeric(series, errors="coerce")
    bad = values.notna() & ~values.isin([0.0, 1.0])
    if bad.any() or (series.notna() & values.isna()).any():
        raise InputError(
            "majority_minority must be true/false (or 1/0) for every area; some values are not"
        )
    flags = pd.Series(values.to_numpy(), index=series.index.astype(str)).dropna()
    if flags.index.duplicated().any():
        raise InputError("majority_minority repeats an area id in its index")
    return flags == 1.0
