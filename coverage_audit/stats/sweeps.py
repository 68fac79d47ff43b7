"""Threshold sensitivity: group served-area rates as the served threshold moves.

:func:`served_from_fraction` is the one rule turning covered fractions into served flags
(used by the audit, the sweep and the footprint comparisons); :func:`sensitivity_thresholds`
gives one :class:`SensitivityRow` per threshold with the four-fifths flags.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from .._util import clean_number, safe_ratio, to_jsonable
from ..errors import AnalysisError, SpecError
from .four_fifths import below_four_fifths

#: Served thresholds of the sensitivity sweep: 0.25 to 0.75 in steps of 0.05.
DEFAULT_THRESHOLDS: tuple[float, ...] = tuple(np.round(np.linspace(0.25, 0.75, 11), 10).tolist())


def served_from_fraction(covered_fraction: np.ndarray, threshold: float) -> np.ndarray:
    """Return the served flag: served means a covered fraction of at least ``threshold``."""
    return np.asarray(covered_fraction, dtype=float) >= threshold


@dataclass(frozen=True)
class GroupAtThreshold:
    """One group's served-area rate at one threshold, against the comparison rate."""

    served_area_rate: float | None
    ratio: float | None
    below_four_fifths: bool

    def to_dict(self) -> dict[str, Any]:
        """Return the figures as JSON-safe data."""
        return to_jsonable(
            {
                "served_area_rate": self.served_area_rate,
                "ratio": self.ratio,
                "below_four_fifths": self.below_four_fifths,
            }
        )


@dataclass(frozen=True)
class SensitivityRow:
    """Served shares at one served threshold.

    Attributes
    ----------
    threshold : float
        Served means ``covered_fraction >= threshold``.
    served_area_share : float
        Share of areas served.
    comparison_group : str
        Group whose rate the ratios divide by (the reference, or the highest-rate group).
    groups : dict of str to GroupAtThreshold
    """

    threshold: float
    served_area_share: float
    comparison_group: str
    groups: Mapping[str, GroupAtThreshold]

    def to_dict(self) -> dict[str, Any]:
        """Return the row as JSON-safe data."""
        return to_jsonable(
            {
                "threshold": self.threshold,
                "served_area_share": self.served_area_share,
                "comparison_group": self.comparison_group,
                "groups": {g: v.to_dict() for g, v in self.groups.items()},
            }
        )


def sensitivity_thresholds(
    covered_fraction: np.ndarray,
    counts: Mapping[str, np.ndarray],
    reference: str,
    thresholds: Sequence[float] | np.ndarray = DEFAULT_THRESHOLDS,
    *,
    against: Literal["reference", "highest"] = "reference",
) -> list[SensitivityRow]:
    """Recompute served-area rates and four-fifths flags over a range of served thresholds.

    Parameters
    ----------
    covered_fraction : numpy.ndarray
        Covered fraction of each area, in [0, 1].
    counts : mapping of str to numpy.ndarray
        Population of each group in each area.
    reference : str
        Reference group (one of ``counts``).
    thresholds : sequence of float
        Served thresholds in (0, 1].
    against : {"reference", "highest"}
        Compare each group with the reference group, or, as 29 CFR 1607.4(D) does, with
        the group that has the highest rate at that threshold.

    Returns
    -------
    list of SensitivityRow
        One per threshold, in the order given.

    Notes
    -----
    A group's served-area rate is the share of its population living in served areas.
    The four-fifths flag is ``ratio < 4/5``, strictly (29 CFR 1607.4(D)), compared
    exactly on the served and total counts by
    :func:`~coverage_audit.stats.four_fifths.below_four_fifths`; an undefined ratio
    (comparison rate 0) does not raise the flag. Raising the threshold can only
    remove areas from the served set, so every served share is non-increasing in it.
    """
    if against not in ("reference", "highest"):
        raise SpecError(
            f'against was "{against}" but is expected to be one of ["reference", "highest"]'
        )
    if reference not in counts:
        raise SpecError(f'reference group "{reference}" is not among the groups {list(counts)}')
    cf = np.asarray(covered_fraction, dtype=float)
    if not np.isfinite(cf).all():
        raise AnalysisError(
            f"{int((~np.isfinite(cf)).sum())} covered fraction(s) are missing or not finite"
        )
    names = list(counts)
    matrix = np.column_stack([np.asarray(counts[g], dtype=float) for g in names])
    if matrix.shape[0] != cf.size:
        raise AnalysisError(
            f"counts have {matrix.shape[0]} areas but covered_fraction has {cf.size}; "
            "give one value per area"
        )
    t = np.asarray(thresholds, dtype=float)
    if t.size == 0 or not np.isfinite(t).all() or (t <= 0).any() or (t > 1).any():
        raise SpecError(f"thresholds must be numbers in (0, 1]; got {t.tolist()}")
    served = cf[None, :] >= t[:, None]
    totals = matrix.sum(axis=0)
    served_counts = served.astype(float) @ matrix
    with np.errstate(invalid="ignore", divide="ignore"):
        rates = served_counts / totals
    ref_index = names.index(reference)
    rows = []
    for k, threshold in enumerate(t):
        if against == "highest" and np.isfinite(rates[k]).any():
            comp = int(np.nanargmax(rates[k]))
        else:
            comp = ref_index
        groups = {}
        for j, g in enumerate(names):
            rate = clean_number(rates[k, j])
            ratio = None if rate is None else safe_ratio(rates[k, j], rates[k, comp])
            flag = ratio is not None and below_four_fifths(
                served_counts[k, j], totals[j], served_counts[k, comp], totals[comp]
            )
            groups[g] = GroupAtThreshold(rate, ratio, flag)
        rows.append(
            SensitivityRow(
                threshold=float(threshold),
                served_area_share=float(served[k].mean()) if cf.size else float("nan"),
                comparison_group=names[comp],
                groups=groups,
            )
        )
    return rows
