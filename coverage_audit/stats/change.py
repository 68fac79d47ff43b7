"""Change between two footprints of the same areas: areas that lost or gained service.

Takes two per-area tables of the same areas, before and after, for :func:`change_between`,
and gives who lives in the areas that changed and how each group's rates moved.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .._util import safe_ratio, to_jsonable
from ..errors import AnalysisError, InputError, SpecError
from ._validate import column_names
from .sweeps import served_from_fraction


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
                f"{column_names(table)}"
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
