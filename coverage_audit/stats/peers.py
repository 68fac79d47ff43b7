"""Peer comparison of activity: a lender's share in majority-minority areas against its peers.

Takes an activity table (loans, applications or branches by area and lender) with the
majority-minority flag of each area for :func:`peer_comparison`, tested with
:func:`two_proportion_test`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from .._util import clean_number, to_jsonable
from ..errors import AnalysisError, InputError, SpecError
from ._validate import column_names
from .models import Z_95


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
            f"{column_names(activity)}"
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
