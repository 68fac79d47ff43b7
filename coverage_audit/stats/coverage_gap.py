"""Coverage across groups: served / unserved dissimilarity and the permutation gap test.

:func:`coverage_gap_test` asks whether a group lives in served areas less often than the
reference group beyond what chance placement of the served areas gives; the draws come only
from the generator handed in and are taken in chunks of bounded memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from .._util import clean_number
from ._validate import (
    as_counts,
    as_fractions,
    as_served,
    check_generator,
    check_permutation_count,
    same_length,
    warn_degenerate,
)
from .segregation_indices import _dissim, _empty_group_message

#: Index entries held at once by the permutation test (bounds its memory to a few tens
#: of MB whatever the number of areas or permutations).
_CHUNK_ENTRIES = 2**21


_EPS = float(np.finfo(np.float64).eps)


@dataclass(frozen=True, eq=False)
class GapTest:
    """Permutation test of the served-area rate gap between a group and the reference.

    Attributes
    ----------
    gap : float
        Served-area rate of the reference minus that of the group (positive when the
        group is less often in served areas); NaN when a group has no population.
    p_value : float
        Two-sided pseudo p-value, ``(1 + #{|gap*| >= |gap|}) / (permutations + 1)``.
    p_value_one_sided : float
        Pseudo p-value for "the group is less served than the reference",
        ``(1 + #{gap* >= gap}) / (permutations + 1)``.
    null_mean, null_sd : float
        Mean and standard deviation (ddof 0, as esda reports its simulated nulls) of the
        permutation distribution of the gap.
    permutations : int
        Number of random reassignments of served status.
    null_distribution : numpy.ndarray
        The simulated gaps ``gap*`` (empty when the test was not run).
    """

    gap: float
    p_value: float
    p_value_one_sided: float
    null_mean: float
    null_sd: float
    permutations: int
    null_distribution: np.ndarray = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (NaN as ``None``; the null sample is left out)."""
        return {
            "gap": clean_number(self.gap),
            "p_value": clean_number(self.p_value),
            "p_value_one_sided": clean_number(self.p_value_one_sided),
            "null_mean": clean_number(self.null_mean),
            "null_sd": clean_number(self.null_sd),
            "permutations": int(self.permutations),
        }


def _split_dissim(x: np.ndarray, y: np.ndarray, weight: np.ndarray) -> float:
    """D of x against y over two bins: the ``weight`` part and the rest of each area.

    With bins (in, out), ``D = 1/2 (|a - b| + |(1-a) - (1-b)|) = |a - b|`` where ``a``
    and ``b`` are the shares of x and y in the first bin (Duncan and Duncan 1955 applied
    to two bins).
    """
    X = x.sum()
    Y = y.sum()
    if X <= 0 or Y <= 0:
        return math.nan
    x_in = float(np.dot(x, weight))
    y_in = float(np.dot(y, weight))
    return _dissim(np.array([x_in, X - x_in]), np.array([y_in, Y - y_in]))


def _gap_test(
    x: np.ndarray,
    y: np.ndarray,
    served: np.ndarray,
    permutations: int,
    rng: np.random.Generator,
) -> GapTest:
    """Permutation test of ``rate_y(served) - rate_x(served)``; no validation, no warnings.

    The null keeps the number of served areas and reassigns served status among areas
    uniformly at random (a conditional randomisation test; pseudo p-values as in Hope
    1968, JRSS B 30(3), 582-598, and as esda computes ``p_sim``).
    """
    nan_result = GapTest(
        math.nan, math.nan, math.nan, math.nan, math.nan, permutations, np.empty(0)
    )
    X = x.sum()
    Y = y.sum()
    if X <= 0 or Y <= 0:
        return nan_result
    n = served.shape[0]
    k = int(served.sum())
    if k == 0 or k == n:
        return GapTest(0.0, math.nan, math.nan, 0.0, 0.0, permutations, np.empty(0))
    # The gap is linear in the served indicator: gap(S) = sum_{i in S} w_i. Drawing only
    # the smaller of the served and unserved sets halves the work when most areas are
    # served; gap(S) = sum(w) - sum_{i not in S} w_i.
    w = y / Y - x / X
    w_total = float(w.sum())
    use_complement = k > n - k
    m = n - k if use_complement else k
    observed_set = ~served if use_complement else served
    observed = float(w[observed_set].sum())
    if use_complement:
        observed = w_total - observed
    gap = float(np.dot(served, y) / Y - np.dot(served, x) / X)

    null = np.empty(permutations)
    rows = max(1, _CHUNK_ENTRIES // m)
    for start in range(0, permutations, rows):
        stop = min(start + rows, permutations)
        # One row per permutation: a uniform random m-subset of the areas. Generator.choice
        # without replacement is a partial shuffle (O(n) per draw, no sort), measured
        # faster than ranking a random matrix; the gather-sum below is the product of the
        # 0/1 assignment matrix of the chunk with w.
        chosen = np.empty((stop - start, m), dtype=np.intp)
        for r in range(stop - start):
            chosen[r] = rng.choice(n, size=m, replace=False, shuffle=False)
        sums = w[chosen].sum(axis=1)
        null[start:stop] = w_total - sums if use_complement else sums

    # Equal gaps summed in a different order can differ by rounding; bound that error
    # (Higham 2002, Accuracy and Stability of Numerical Algorithms, 2nd ed., ch. 4, the
    # recursive-summation bound |error| <= (n-1) u sum|w_i| + O(u^2), chapter from memory;
    # taken for both sums and the complement) so ties count as ties.
    tol = 2.0 * (n + 1) * _EPS * float(np.abs(w).sum())
    extreme_two = int(np.count_nonzero(np.abs(null) >= abs(observed) - tol))
    extreme_one = int(np.count_nonzero(null >= observed - tol))
    return GapTest(
        gap=gap,
        p_value=(1 + extreme_two) / (permutations + 1),
        p_value_one_sided=(1 + extreme_one) / (permutations + 1),
        null_mean=float(null.mean()),
        null_sd=float(null.std()),
        permutations=permutations,
        null_distribution=null,
    )


def coverage_dissimilarity(x: ArrayLike, y: ArrayLike, served: ArrayLike) -> float:
    """Dissimilarity of ``x`` against ``y`` across the served and unserved areas.

    Parameters
    ----------
    x, y : array_like
        Counts of the two groups in each area.
    served : array_like of bool
        Whether each area is served (booleans, or the numbers 1 and 0).

    Returns
    -------
    float
        D over the two bins served / unserved, which equals
        ``|served-area rate of x - served-area rate of y|`` (the rate being the share of
        the group living in served areas). 0 when no area, or every area, is served. NaN
        (with a warning) when a group total is zero.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, ``served`` is not true/false, or the lengths
        differ.

    Notes
    -----
    Duncan and Duncan (1955), American Sociological Review 20(2), 210-217, applied to the
    two bins of the served / unserved split.

    Examples
    --------
    >>> round(coverage_dissimilarity([30, 10, 0, 10], [10, 10, 30, 50], [1, 0, 1, 0]), 12)
    0.2
    """
    xa = as_counts(x, "x")
    ya = as_counts(y, "y")
    mask = as_served(served)
    same_length({"x": xa, "y": ya, "served": mask})
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            warn_degenerate(_empty_group_message(name, "coverage dissimilarity"))
    return _split_dissim(xa, ya, mask.astype(np.float64))


def areal_coverage_dissimilarity(x: ArrayLike, y: ArrayLike, covered_fraction: ArrayLike) -> float:
    """Dissimilarity of ``x`` against ``y`` across the covered and uncovered population.

    Parameters
    ----------
    x, y : array_like
        Counts of the two groups in each area.
    covered_fraction : array_like
        Fraction of each area inside the service footprint, in [0, 1]; each group is
        taken as spread evenly within its area (areal weighting). Values within
        :data:`FRACTION_TOLERANCE` outside [0, 1] are clipped as overlay rounding.

    Returns
    -------
    float
        D over the bins covered / uncovered, which equals
        ``|areal-weighted rate of x - that of y|``. NaN (with a warning) when a group
        total is zero.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, a fraction is outside [0, 1] or missing, or the
        lengths differ.

    Notes
    -----
    Duncan and Duncan (1955), American Sociological Review 20(2), 210-217, applied to
    the covered and uncovered parts of each area's population.

    Examples
    --------
    >>> round(areal_coverage_dissimilarity([30, 10, 0, 10], [10, 10, 30, 50],
    ...                                    [1, 0.5, 0, 0.25]), 12)
    0.475
    """
    xa = as_counts(x, "x")
    ya = as_counts(y, "y")
    frac = as_fractions(covered_fraction)
    same_length({"x": xa, "y": ya, "covered_fraction": frac})
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            warn_degenerate(_empty_group_message(name, "areal coverage dissimilarity"))
    return _split_dissim(xa, ya, frac)


def coverage_gap_test(
    x: ArrayLike,
    y: ArrayLike,
    served: ArrayLike,
    *,
    permutations: int,
    rng: np.random.Generator,
) -> GapTest:
    """Permutation test of the gap in served-area rates between group ``x`` and ``y``.

    Parameters
    ----------
    x : array_like
        Counts of the group under review in each area.
    y : array_like
        Counts of the reference group in each area.
    served : array_like of bool
        Whether each area is served (booleans, or the numbers 1 and 0).
    permutations : int
        Number of random reassignments of served status (at least 1; 999 is usual).
    rng : numpy.random.Generator
        Source of randomness; the same inputs and generator state give identical output.

    Returns
    -------
    GapTest
        Observed gap ``rate_y - rate_x`` (rate = share of the group in served areas),
        two-sided p ``(1 + #{|gap*| >= |gap|}) / (permutations + 1)``, one-sided p for
        "x less served than y" ``(1 + #{gap* >= gap}) / (permutations + 1)``, and the mean
        and sd of the null. With no served area or every area served: gap 0, p-values NaN
        (``None`` in ``to_dict()``) and a warning; a group with zero population gives NaN
        throughout, with a warning.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, ``served`` is not true/false, or the lengths
        differ.
    SpecError
        If ``permutations`` is not a whole number >= 1 or ``rng`` is not a Generator.

    Notes
    -----
    The null keeps the number of served areas fixed and draws which areas are served
    uniformly at random among all areas, the usual conditional randomisation (as in
    esda's conditional permutations); the pseudo p-value with the observed statistic
    counted among the draws follows Hope (1968), JRSS B 30(3), 582-598. Simulated gaps
    that equal the observed one up to summation rounding count as ties. Permutations are
    drawn in chunks that hold at most about two million area indices, so memory stays
    bounded for any number of areas (about 33 MiB); 85,000 areas x 999 permutations take
    about half a second (benchmarks/bench_segregation.py).
    """
    xa = as_counts(x, "x")
    ya = as_counts(y, "y")
    mask = as_served(served)
    same_length({"x": xa, "y": ya, "served": mask})
    permutations = check_permutation_count(permutations)
    rng = check_generator(rng)
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            warn_degenerate(_empty_group_message(name, "coverage gap test"))
    if xa.sum() > 0 and ya.sum() > 0 and (not mask.any() or mask.all()):
        warn_degenerate(_no_contrast_message(mask))
    return _gap_test(xa, ya, mask, permutations, rng)


def _no_contrast_message(mask: np.ndarray) -> str:
    which = "no area is served" if not mask.any() else "every area is served"
    return (
        f"{which}, so every group has the same served-area rate: the gap is 0 and its "
        "p-values are undefined (reported as None)"
    )
