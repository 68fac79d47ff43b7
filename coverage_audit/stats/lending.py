"""Lending statistics: a lender's share against its peers', volume-band peers, tract categories.

Pure functions on counts: each comparison takes the lender's and its peers' counts and
totals and gives a :class:`ShareComparison` (shares, ratio, difference, the
two-proportion z-test and, when a cell is small, Fisher's exact test, and the flags at the
stated alpha). :func:`band_peers` picks lenders of similar volume; :func:`tract_categories`
turns tract shares and income ratios into the categories a redlining review uses.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any

import numpy as np
from scipy import stats

from .._util import clean_number, safe_ratio
from ..compare import two_proportion_test
from ..errors import SpecError

#: Income ratio (tract median family income, % of the area median) below which a tract
#: is low- or moderate-income: 12 CFR 228.12(m) (paragraph letter from memory). Strictly
#: below: a tract at exactly 80 is middle-income.
LMI_RATIO = 80.0
#: Default volume band of the "band" peer rule (common practice, no single source).
DEFAULT_BAND = (0.5, 2.0)
#: Fisher's exact test is computed when the smallest expected cell count of the 2 x 2
#: table is below this (Cochran's rule of thumb; common practice, from memory).
SMALL_CELL = 5.0


@dataclass(frozen=True)
class ShareComparison:
    """A lender's share against its peers' share, with tests and flags.

    Attributes
    ----------
    lender_count, lender_total : int
        Records of the lender in the category, and all its records compared.
    lender_share : float or None
        ``lender_count / lender_total``.
    peer_count, peer_total : int
    peer_share : float or None
    ratio : float or None
        ``lender_share / peer_share``.
    difference : float or None
        ``lender_share - peer_share``.
    z, p_two_sided : float or None
        Two-proportion z-test with the pooled standard error.
    fisher_p : float or None
        Two-sided Fisher exact p-value, computed when the smallest expected cell is below
        ``small_cell`` (None otherwise).
    test : str
        ``"fisher"`` or ``"z"``: which p-value the flags use.
    p_value : float or None
        That p-value.
    below_peers, above_peers : bool
        The lender's share is below (above) its peers' and ``p_value < alpha``.
    """

    lender_count: int
    lender_total: int
    lender_share: float | None
    peer_count: int
    peer_total: int
    peer_share: float | None
    ratio: float | None
    difference: float | None
    z: float | None
    p_two_sided: float | None
    fisher_p: float | None
    test: str
    p_value: float | None
    below_peers: bool
    above_peers: bool

    def to_dict(self) -> dict[str, Any]:
        """Return the comparison as JSON-safe data."""
        return {f.name: clean_number(getattr(self, f.name)) for f in fields(self)}


def smallest_expected(x1: float, n1: float, x2: float, n2: float) -> float:
    """Return the smallest expected cell count of the 2 x 2 table under equal shares.

    Rows are the lender and its peers, columns in and out of the category; the expected
    count of a cell is row total times column total over the grand total.
    """
    total = n1 + n2
    if total <= 0:
        return 0.0
    col_in, col_out = x1 + x2, (n1 - x1) + (n2 - x2)
    return float(min(n * c / total for n in (n1, n2) for c in (col_in, col_out)))


def fisher_two_sided(x1: int, n1: int, x2: int, n2: int) -> float | None:
    """Return the two-sided Fisher exact p-value of ``[[x1, n1 - x1], [x2, n2 - x2]]``."""
    if n1 <= 0 or n2 <= 0:
        return None
    table = np.array([[x1, n1 - x1], [x2, n2 - x2]], dtype=np.int64)
    return float(stats.fisher_exact(table, alternative="two-sided").pvalue)


def compare_shares(
    lender_count: float,
    lender_total: float,
    peer_count: float,
    peer_total: float,
    *,
    alpha: float = 0.05,
    small_cell: float = SMALL_CELL,
) -> ShareComparison:
    """Compare a lender's share with its peers' share.

    Parameters
    ----------
    lender_count, lender_total : int
        The lender's records in the category and all its records compared.
    peer_count, peer_total : int
        The same for its peers together.
    alpha : float
        Level of the flags.
    small_cell : float
        Compute Fisher's exact test when the smallest expected cell is below this.

    Returns
    -------
    ShareComparison

    Notes
    -----
    ``z = (p1 - p2) / sqrt(p (1 - p) (1/n1 + 1/n2))`` with the pooled share
    ``p = (x1 + x2) / (n1 + n2)``, the form statsmodels' ``proportions_ztest`` computes by
    default; the two-sided p-value is ``2 (1 - Phi(|z|))``. Fisher's exact test conditions
    on the table's margins (scipy ``fisher_exact``). The flags use Fisher's p when it is
    computed, else the z-test's; a share below (above) the peers' with that p below alpha
    is flagged. Flagging at 0.05 is common practice in redlining reviews, not a rule.
    """
    if not 0 < alpha < 1:
        raise SpecError(f"alpha was {alpha} but must be strictly between 0 and 1")
    counts = [lender_count, lender_total, peer_count, peer_total]
    if any(not np.isfinite(c) or c < 0 for c in counts):
        raise ValueError(f"counts must be finite and non-negative, got {counts}")
    if lender_count > lender_total or peer_count > peer_total:
        raise ValueError(f"a count exceeds its total: {counts}")
    x1, n1, x2, n2 = (int(round(c)) for c in counts)
    test = two_proportion_test(np.array([x1]), np.array([n1]), np.array([x2]), np.array([n2]))
    z = clean_number(test["z"][0])
    p_z = clean_number(test["p_two_sided"][0])
    share1, share2 = safe_ratio(x1, n1), safe_ratio(x2, n2)
    fisher_p = None
    if n1 > 0 and n2 > 0 and smallest_expected(x1, n1, x2, n2) < small_cell:
        fisher_p = fisher_two_sided(x1, n1, x2, n2)
    kind = "fisher" if fisher_p is not None else "z"
    p_value = fisher_p if fisher_p is not None else p_z
    significant = p_value is not None and p_value < alpha
    both = share1 is not None and share2 is not None
    return ShareComparison(
        lender_count=x1,
        lender_total=n1,
        lender_share=share1,
        peer_count=x2,
        peer_total=n2,
        peer_share=share2,
        ratio=safe_ratio(share1, share2) if both else None,  # type: ignore[arg-type]
        difference=(share1 - share2) if both else None,  # type: ignore[operator]
        z=z,
        p_two_sided=p_z,
        fisher_p=fisher_p,
        test=kind,
        p_value=p_value,
        below_peers=bool(both and significant and share1 < share2),  # type: ignore[operator]
        above_peers=bool(both and significant and share1 > share2),  # type: ignore[operator]
    )


def band_peers(
    volumes: Mapping[str, float], subject: str, band: Sequence[float] = DEFAULT_BAND
) -> tuple[str, ...]:
    """Return the lenders whose volume lies within ``band`` times the subject's (inclusive).

    Parameters
    ----------
    volumes : mapping of str to float
        Applications (or another volume) by lender, the subject included.
    subject : str
        The lender under review.
    band : (low, high)
        Multipliers of the subject's volume; a lender at exactly ``low`` or ``high`` times
        it is a peer. The 50%-200% band is common practice, no single source.

    Returns
    -------
    tuple of str
        Peer lenders in the order given (the subject never among them).
    """
    low, high = float(band[0]), float(band[1])
    if not 0 <= low <= high:
        raise SpecError(f"band was {list(band)} but must be [low, high] with 0 <= low <= high")
    own = float(volumes.get(subject, 0.0))
    if own <= 0:
        return ()
    # Compare v / own with the multipliers so a volume of exactly low x own is inside.
    return tuple(
        lei for lei, v in volumes.items() if lei != subject and low <= float(v) / own <= high
    )


def share_flags(share: np.ndarray, cut: float, rule: str = "above") -> np.ndarray:
    """Return 1.0 where ``share`` passes ``cut`` (``above``: >, ``at_or_above``: >=), NaN if unknown."""
    share = np.asarray(share, dtype=float)
    known = np.isfinite(share)
    passed = share > cut if rule == "above" else share >= cut
    return np.where(known, passed.astype(float), np.nan)


def lmi_flags(income_ratio: np.ndarray) -> np.ndarray:
    """Return 1.0 for low- or moderate-income tracts (ratio below 80), NaN if unknown."""
    ratio = np.asarray(income_ratio, dtype=float)
    known = np.isfinite(ratio)
    return np.where(known, (ratio < LMI_RATIO).astype(float), np.nan)


@dataclass(frozen=True)
class StratifiedComparison:
    """The lender against its peers within strata (year and market), combined.

    Attributes
    ----------
    strata : int
        Strata used (those with at least two records).
    odds_ratio_mh : float or None
        Mantel-Haenszel common odds ratio of being in the category, lender over peers.
    statistic : float or None
        Cochran-Mantel-Haenszel chi-square statistic (1 degree of freedom, no continuity
        correction).
    p_value : float or None
    below_peers, above_peers : bool
        Common odds ratio below (above) 1 with ``p_value < alpha``.
    """

    strata: int
    odds_ratio_mh: float | None
    statistic: float | None
    p_value: float | None
    below_peers: bool
    above_peers: bool

    def to_dict(self) -> dict[str, Any]:
        """Return the comparison as JSON-safe data."""
        return {f.name: clean_number(getattr(self, f.name)) for f in fields(self)}


def mantel_haenszel(
    tables: Sequence[Sequence[float]], *, alpha: float = 0.05
) -> StratifiedComparison:
    """Combine a lender-against-peers comparison over strata (years and markets).

    Parameters
    ----------
    tables : sequence of (lender_count, lender_total, peer_count, peer_total)
        One per stratum.
    alpha : float

    Returns
    -------
    StratifiedComparison

    Notes
    -----
    With ``a, b`` the lender's records in and out of the category, ``c, d`` the peers',
    and ``n = a + b + c + d`` in each stratum: ``OR_MH = sum(a d / n) / sum(b c / n)``; the
    CMH statistic is ``(sum(a - E a))^2 / sum(Var a)`` with ``E a = (a + b)(a + c) / n`` and
    ``Var a = (a + b)(c + d)(a + c)(b + d) / (n^2 (n - 1))`` (Mantel and Haenszel 1959,
    J. Natl Cancer Inst. 22; Agresti 2013, sec. 6.4, from memory), as statsmodels'
    ``StratifiedTable`` computes them. Pooling the counts instead can mislead when
    markets differ in their share of minority tracts (Simpson's paradox); this test
    compares the lender with its peers within each market and year.
    """
    rows = np.asarray([list(t) for t in tables], dtype=float).reshape(-1, 4)
    a, n1, c, n2 = rows.T
    b, d = n1 - a, n2 - c
    n = n1 + n2
    use = n >= 2
    a, b, c, d, n = a[use], b[use], c[use], d[use], n[use]
    if a.size == 0:
        return StratifiedComparison(0, None, None, None, False, False)
    num, den = float(np.sum(a * d / n)), float(np.sum(b * c / n))
    odds = num / den if den > 0 else None
    expected = (a + b) * (a + c) / n
    variance = (a + b) * (c + d) * (a + c) * (b + d) / (n**2 * (n - 1))
    var_sum = float(variance.sum())
    statistic = float(np.sum(a - expected)) ** 2 / var_sum if var_sum > 0 else None
    p = float(stats.chi2.sf(statistic, 1)) if statistic is not None else None
    significant = p is not None and p < alpha
    return StratifiedComparison(
        strata=int(a.size),
        odds_ratio_mh=odds,
        statistic=statistic,
        p_value=p,
        below_peers=bool(significant and odds is not None and odds < 1),
        above_peers=bool(significant and odds is not None and odds > 1),
    )
