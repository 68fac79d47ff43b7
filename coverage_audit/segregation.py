"""Segregation indices and the permutation test of a coverage gap between groups.

Takes 1-D arrays over the analysed areas (group counts, the total population, whether
each area is served, the covered fraction of each area) and gives plain floats: the
dissimilarity index, isolation and exposure, the correlation ratio, the dissimilarity of
two groups across the served / unserved split, and a :class:`GapTest` of whether a group
lives in served areas less often than the reference group beyond what chance placement
of the served areas gives. :func:`segregation_summary` runs them all for every group and
returns one :class:`SegregationResult` whose ``to_dict()`` is the ``segregation`` part of
``summary.json``.

Policy, the same in every function:

- Counts must be finite and non-negative, and no group may exceed the total of an area;
  otherwise :class:`~coverage_audit.errors.AnalysisError` names the first offending
  position (0-based, in the order of the arrays given).
- An area with zero population contributes 0 to isolation and exposure terms (0/0 is
  taken as 0).
- A group with zero total population has undefined indices: they are NaN (``None`` in
  ``to_dict()``) and a :class:`~coverage_audit.errors.DegenerateStatisticWarning` says so.
- With no served area, or with every area served, every group has the same served-area
  rate, so the gap is 0 and its p-values are undefined (NaN / ``None``, with a warning).
- A single area is a valid, if uninformative, input.
"""

from __future__ import annotations

import math
import numbers
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from ._util import clean_number, to_jsonable
from .errors import AnalysisError, DegenerateStatisticWarning, SpecError

__all__ = [
    "GapTest",
    "SegregationResult",
    "areal_coverage_dissimilarity",
    "correlation_ratio",
    "coverage_dissimilarity",
    "coverage_gap_test",
    "dissimilarity",
    "dissimilarity_vs_rest",
    "exposure",
    "isolation",
    "segregation_summary",
]

#: Covered fractions this far outside [0, 1] are taken as rounding from the overlay and
#: clipped; anything further out is an error.
FRACTION_TOLERANCE = 1e-9

#: Index entries held at once by the permutation test (bounds its memory to a few tens
#: of MB whatever the number of areas or permutations).
_CHUNK_ENTRIES = 2**21

_EPS = float(np.finfo(np.float64).eps)


# --------------------------------------------------------------------------- results


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


@dataclass(frozen=True, eq=False)
class SegregationResult:
    """Segregation indices of every group, keyed by the group names given.

    Attributes
    ----------
    reference_group : str
        Name of the reference group.
    dissimilarity : Mapping[str, float]
        Two-group D of each non-reference group against the reference.
    dissimilarity_vs_rest : Mapping[str, float]
        D of every group (reference included) against the rest of the total.
    isolation : Mapping[str, float]
        xPx* of every group.
    exposure_to_reference : Mapping[str, float]
        xPy* of each non-reference group x to the reference y.
    correlation_ratio : Mapping[str, float]
        eta squared of every group.
    coverage_dissimilarity : Mapping[str, float]
        D of each non-reference group against the reference across served / unserved.
    areal_coverage_dissimilarity : Mapping[str, float]
        The same across the covered / uncovered parts of each area's population.
    coverage_gap_test : Mapping[str, GapTest]
        Permutation test of the served-area rate gap of each non-reference group.
    permutations : int
        Permutations used by every gap test.
    """

    reference_group: str
    dissimilarity: Mapping[str, float]
    dissimilarity_vs_rest: Mapping[str, float]
    isolation: Mapping[str, float]
    exposure_to_reference: Mapping[str, float]
    correlation_ratio: Mapping[str, float]
    coverage_dissimilarity: Mapping[str, float]
    areal_coverage_dissimilarity: Mapping[str, float]
    coverage_gap_test: Mapping[str, GapTest]
    permutations: int

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe ``segregation`` block of ``summary.json``."""
        return {
            "reference_group": self.reference_group,
            "dissimilarity": to_jsonable(self.dissimilarity),
            "dissimilarity_vs_rest": to_jsonable(self.dissimilarity_vs_rest),
            "isolation": to_jsonable(self.isolation),
            "exposure_to_reference": to_jsonable(self.exposure_to_reference),
            "correlation_ratio": to_jsonable(self.correlation_ratio),
            "coverage_dissimilarity": to_jsonable(self.coverage_dissimilarity),
            "areal_coverage_dissimilarity": to_jsonable(self.areal_coverage_dissimilarity),
            "coverage_gap_test": {g: t.to_dict() for g, t in self.coverage_gap_test.items()},
            "permutations": int(self.permutations),
        }


# ------------------------------------------------------------------------ validation


def _counts(values: ArrayLike, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D float array of finite, non-negative counts."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            f"{name} must hold numeric population counts, one per area; "
            f"it could not be read as numbers ({exc})"
        ) from exc
    if arr.ndim != 1:
        raise AnalysisError(
            f"{name} must be a 1-D array with one count per area; got shape {arr.shape}"
        )
    if arr.size == 0:
        raise AnalysisError(f"{name} is empty: there are no areas to analyse")
    bad = ~np.isfinite(arr)
    if bad.any():
        i = int(np.argmax(bad))
        raise AnalysisError(
            f"{name} has a missing or infinite value ({arr[i]}) at position {i}; "
            "fill it or exclude that area before the analysis"
        )
    negative = arr < 0
    if negative.any():
        i = int(np.argmax(negative))
        raise AnalysisError(
            f"{name} has a negative count ({arr[i]:g}) at position {i}; "
            "population counts must be zero or more"
        )
    return arr


def _same_length(arrays: Mapping[str, np.ndarray]) -> int:
    lengths = {name: a.shape[0] for name, a in arrays.items()}
    if len(set(lengths.values())) > 1:
        listed = ", ".join(f"{name}: {n}" for name, n in lengths.items())
        raise AnalysisError(
            f"the arrays must have one value per analysed area, in the same order; "
            f"their lengths differ ({listed})"
        )
    return next(iter(lengths.values()))


def _within_total(x: np.ndarray, t: np.ndarray, name: str, total_name: str) -> None:
    over = x > t
    if over.any():
        i = int(np.argmax(over))
        raise AnalysisError(
            f"{name} exceeds {total_name} at position {i} ({x[i]:g} > {t[i]:g}); "
            "a group count cannot be larger than the total population of its area"
        )


def _served_mask(served: ArrayLike, name: str = "served") -> np.ndarray:
    """Return ``served`` as a 1-D bool array; accepts booleans or the numbers 0 and 1."""
    arr = np.asarray(served)
    if arr.ndim != 1:
        raise AnalysisError(
            f"{name} must be a 1-D array with one true/false value per area; got shape {arr.shape}"
        )
    if arr.dtype == np.bool_:
        return arr
    try:
        numeric = arr.astype(np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            f"{name} must hold true/false (or 1/0) per area; it could not be read ({exc})"
        ) from exc
    bad = ~np.isin(numeric, (0.0, 1.0))
    if bad.any():
        i = int(np.argmax(bad))
        raise AnalysisError(
            f"{name} must hold true/false (or 1/0) per area; position {i} has {arr[i].item()!r}"
        )
    return numeric == 1.0


def _fractions(covered_fraction: ArrayLike, name: str = "covered_fraction") -> np.ndarray:
    """Return covered fractions in [0, 1], clipping overlay rounding of the tolerance."""
    try:
        arr = np.asarray(covered_fraction, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            f"{name} must hold numbers between 0 and 1, one per area ({exc})"
        ) from exc
    if arr.ndim != 1:
        raise AnalysisError(
            f"{name} must be a 1-D array with one fraction per area; got shape {arr.shape}"
        )
    bad = ~np.isfinite(arr) | (arr < -FRACTION_TOLERANCE) | (arr > 1 + FRACTION_TOLERANCE)
    if bad.any():
        i = int(np.argmax(bad))
        raise AnalysisError(f"{name} must lie between 0 and 1; position {i} has {arr[i]}")
    return np.clip(arr, 0.0, 1.0)


def _check_permutations(permutations: Any) -> int:
    if (
        isinstance(permutations, bool)
        or not isinstance(permutations, numbers.Integral)
        or permutations < 1
    ):
        raise SpecError(
            f"permutations must be a whole number of at least 1 (for example 999); "
            f"got {permutations!r}"
        )
    return int(permutations)


def _check_rng(rng: Any) -> np.random.Generator:
    if not isinstance(rng, np.random.Generator):
        raise SpecError(
            "rng must be a numpy.random.Generator, for example "
            f"numpy.random.default_rng(seed); got {type(rng).__name__}"
        )
    return rng


def _warn(message: str) -> None:
    # stacklevel 3: past this helper and the public function, to the caller's line.
    warnings.warn(message, DegenerateStatisticWarning, stacklevel=3)


def _empty_group_message(name: str, what: str) -> str:
    return (
        f"group {name} has zero total population, so its {what} is undefined and reported as None"
    )


# ------------------------------------------------------------------- pure kernels


def _dissim(x: np.ndarray, y: np.ndarray) -> float:
    """Two-group dissimilarity, Duncan and Duncan (1955), ASR 20(2), 210-217.

    ``D = 1/2 * sum_i |x_i/X - y_i/Y|``; NaN when either group total is zero.
    """
    X = x.sum()
    Y = y.sum()
    if X <= 0 or Y <= 0:
        return math.nan
    return float(0.5 * np.abs(x / X - y / Y).sum())


def _interaction(x: np.ndarray, y: np.ndarray, t: np.ndarray) -> float:
    """Exposure of x to y, Massey and Denton (1988), Social Forces 67(2), 281-315.

    ``xPy* = sum_i (x_i/X)(y_i/t_i)``, with ``y_i/t_i`` taken as 0 where ``t_i`` is 0
    (such areas hold no one of x either, so the term is 0/0 and contributes nothing).
    """
    X = x.sum()
    if X <= 0:
        return math.nan
    share = np.divide(y, t, out=np.zeros_like(y), where=t > 0)
    return float(np.dot(x / X, share))


def _eta_squared(x: np.ndarray, t: np.ndarray) -> float:
    """Correlation ratio ``eta^2 = (xPx* - P) / (1 - P)``, ``P = X/T``.

    Massey and Denton (1988), Social Forces 67(2), 281-315 (isolation adjusted for the
    group's share of the population). NaN when the group is empty or is everyone.
    """
    X = x.sum()
    T = t.sum()
    if X <= 0 or X >= T:
        return math.nan
    P = X / T
    return float((_interaction(x, x, t) - P) / (1.0 - P))


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


# ---------------------------------------------------------------- public functions


def dissimilarity(x: ArrayLike, y: ArrayLike) -> float:
    """Two-group index of dissimilarity of group ``x`` against group ``y``.

    Parameters
    ----------
    x, y : array_like
        Counts of the two groups in each analysed area (1-D, same order).

    Returns
    -------
    float
        ``D = 1/2 * sum_i |x_i/X - y_i/Y|`` in [0, 1]: the share of either group that
        would have to move for the two to be spread alike. NaN (with a
        :class:`~coverage_audit.errors.DegenerateStatisticWarning`) when a group total is
        zero.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, or the lengths differ.

    Notes
    -----
    Duncan, O. D. and Duncan, B. (1955), "A methodological analysis of segregation
    indexes", American Sociological Review 20(2), 210-217. This is the two-group D; it
    equals :func:`dissimilarity_vs_rest` only when ``x + y`` is the whole total.

    Examples
    --------
    >>> dissimilarity([30, 10, 0, 10], [10, 10, 30, 50])
    0.6
    """
    xa = _counts(x, "x")
    ya = _counts(y, "y")
    _same_length({"x": xa, "y": ya})
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            _warn(_empty_group_message(name, "dissimilarity"))
    return _dissim(xa, ya)


def dissimilarity_vs_rest(x: ArrayLike, t: ArrayLike) -> float:
    """Dissimilarity of group ``x`` against everyone else (``t - x``).

    Parameters
    ----------
    x, t : array_like
        Group counts and total population of each area.

    Returns
    -------
    float
        D of x against ``t - x``, the form PySAL segregation's ``Dissim`` computes. NaN
        (with a warning) when x, or the rest, has zero total population.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, ``x`` exceeds ``t`` somewhere, or the lengths
        differ.

    Notes
    -----
    Duncan and Duncan (1955), American Sociological Review 20(2), 210-217.

    Examples
    --------
    >>> round(dissimilarity_vs_rest([80, 20, 0], [100, 100, 100]), 12)
    0.7
    """
    xa = _counts(x, "x")
    ta = _counts(t, "t")
    _same_length({"x": xa, "t": ta})
    _within_total(xa, ta, "x", "t")
    rest = ta - xa
    if xa.sum() <= 0:
        _warn(_empty_group_message("x", "dissimilarity"))
    elif rest.sum() <= 0:
        _warn("group x is the whole population, so its dissimilarity from the rest is undefined")
    return _dissim(xa, rest)


def isolation(x: ArrayLike, t: ArrayLike) -> float:
    """Isolation index xPx*: the group share met by the average member of group ``x``.

    Parameters
    ----------
    x, t : array_like
        Group counts and total population of each area.

    Returns
    -------
    float
        ``xPx* = sum_i (x_i/X)(x_i/t_i)`` in [0, 1]; zero-population areas contribute 0
        (0/0 taken as 0). NaN (with a warning) when X is zero.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, ``x`` exceeds ``t``, or the lengths differ.

    Notes
    -----
    Massey, D. S. and Denton, N. A. (1988), "The dimensions of residential segregation",
    Social Forces 67(2), 281-315.

    Examples
    --------
    >>> round(isolation([80, 20, 0], [100, 100, 100]), 12)
    0.68
    """
    xa = _counts(x, "x")
    ta = _counts(t, "t")
    _same_length({"x": xa, "t": ta})
    _within_total(xa, ta, "x", "t")
    if xa.sum() <= 0:
        _warn(_empty_group_message("x", "isolation"))
    return _interaction(xa, xa, ta)


def exposure(x: ArrayLike, y: ArrayLike, t: ArrayLike) -> float:
    """Exposure index xPy*: the share of group ``y`` met by the average member of ``x``.

    Parameters
    ----------
    x, y, t : array_like
        Counts of groups x and y and the total population of each area.

    Returns
    -------
    float
        ``xPy* = sum_i (x_i/X)(y_i/t_i)``; zero-population areas contribute 0 (0/0 taken
        as 0). Not symmetric in x and y. NaN (with a warning) when X is zero.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, ``x`` or ``y`` exceeds ``t``, or the lengths
        differ.

    Notes
    -----
    Massey and Denton (1988), Social Forces 67(2), 281-315.

    Examples
    --------
    >>> round(exposure([80, 20, 0], [20, 80, 100], [100, 100, 100]), 12)
    0.32
    """
    xa = _counts(x, "x")
    ya = _counts(y, "y")
    ta = _counts(t, "t")
    _same_length({"x": xa, "y": ya, "t": ta})
    _within_total(xa, ta, "x", "t")
    _within_total(ya, ta, "y", "t")
    if xa.sum() <= 0:
        _warn(_empty_group_message("x", "exposure"))
    return _interaction(xa, ya, ta)


def correlation_ratio(x: ArrayLike, t: ArrayLike) -> float:
    """Correlation ratio eta squared: isolation adjusted for the group's overall share.

    Parameters
    ----------
    x, t : array_like
        Group counts and total population of each area.

    Returns
    -------
    float
        ``eta^2 = (xPx* - P) / (1 - P)`` with ``P = X/T``; 0 when the group is spread
        evenly, 1 when it is fully apart. NaN (with a warning) when X is zero or X = T.

    Raises
    ------
    AnalysisError
        If a count is negative or missing, ``x`` exceeds ``t``, or the lengths differ.

    Notes
    -----
    Massey and Denton (1988), Social Forces 67(2), 281-315.

    Examples
    --------
    >>> round(correlation_ratio([80, 20, 0], [100, 100, 100]), 12)
    0.52
    """
    xa = _counts(x, "x")
    ta = _counts(t, "t")
    _same_length({"x": xa, "t": ta})
    _within_total(xa, ta, "x", "t")
    if xa.sum() <= 0:
        _warn(_empty_group_message("x", "correlation ratio"))
    elif xa.sum() >= ta.sum():
        _warn("group x is the whole population, so its correlation ratio is undefined")
    return _eta_squared(xa, ta)


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
    xa = _counts(x, "x")
    ya = _counts(y, "y")
    mask = _served_mask(served)
    _same_length({"x": xa, "y": ya, "served": mask})
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            _warn(_empty_group_message(name, "coverage dissimilarity"))
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
    xa = _counts(x, "x")
    ya = _counts(y, "y")
    frac = _fractions(covered_fraction)
    _same_length({"x": xa, "y": ya, "covered_fraction": frac})
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            _warn(_empty_group_message(name, "areal coverage dissimilarity"))
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
    xa = _counts(x, "x")
    ya = _counts(y, "y")
    mask = _served_mask(served)
    _same_length({"x": xa, "y": ya, "served": mask})
    permutations = _check_permutations(permutations)
    rng = _check_rng(rng)
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            _warn(_empty_group_message(name, "coverage gap test"))
    if xa.sum() > 0 and ya.sum() > 0 and (not mask.any() or mask.all()):
        _warn(_no_contrast_message(mask))
    return _gap_test(xa, ya, mask, permutations, rng)


def _no_contrast_message(mask: np.ndarray) -> str:
    which = "no area is served" if not mask.any() else "every area is served"
    return (
        f"{which}, so every group has the same served-area rate: the gap is 0 and its "
        "p-values are undefined (reported as None)"
    )


def segregation_summary(
    counts: Mapping[str, ArrayLike],
    total: ArrayLike,
    reference: str,
    served: ArrayLike,
    covered_fraction: ArrayLike,
    *,
    permutations: int,
    rng: np.random.Generator,
) -> SegregationResult:
    """Compute every segregation index and gap test for every group.

    Parameters
    ----------
    counts : Mapping[str, array_like]
        Group name -> counts per area; results are keyed by these names, in this order.
    total : array_like
        Total population of each area; no group may exceed it.
    reference : str
        Name of the reference group (one of ``counts``).
    served : array_like of bool
        Whether each area is served.
    covered_fraction : array_like
        Fraction of each area inside the footprint, in [0, 1].
    permutations : int
        Permutations of each gap test.
    rng : numpy.random.Generator
        Source of randomness, used by the gap tests in the order of ``counts``.

    Returns
    -------
    SegregationResult
        Its ``to_dict()`` has the keys ``reference_group``, ``dissimilarity``,
        ``dissimilarity_vs_rest``, ``isolation``, ``exposure_to_reference``,
        ``correlation_ratio``, ``coverage_dissimilarity``,
        ``areal_coverage_dissimilarity``, ``coverage_gap_test`` and ``permutations``.
        Two-group indices and gap tests cover the non-reference groups against the
        reference; single-group indices cover every group.

    Raises
    ------
    SpecError
        If ``reference`` is not one of the groups, there are no groups, or
        ``permutations`` / ``rng`` are invalid.
    AnalysisError
        If counts are negative or missing, a group exceeds the total, ``served`` or
        ``covered_fraction`` are invalid, or the lengths differ.

    Notes
    -----
    The module docstring states the policy on zero populations, empty groups and a
    footprint that serves no area or every area. Each problem is warned about once (per
    group, or once for the footprint), not once per index.
    """
    if not counts:
        raise SpecError("counts names no group; give at least the reference group's counts")
    names = [str(g) for g in counts]
    if reference not in counts:
        raise SpecError(
            f"reference group {reference!r} is not among the groups; expected one of {names}"
        )
    t = _counts(total, "total")
    groups = {str(g): _counts(v, f"group {g!r}") for g, v in counts.items()}
    mask = _served_mask(served)
    frac = _fractions(covered_fraction)
    _same_length(
        {
            "total": t,
            **{f"group {g!r}": a for g, a in groups.items()},
            "served": mask,
            "covered_fraction": frac,
        }
    )
    for g, arr in groups.items():
        _within_total(arr, t, f"group {g!r}", "total")
    permutations = _check_permutations(permutations)
    rng = _check_rng(rng)

    T = t.sum()
    for g, arr in groups.items():
        X = arr.sum()
        if X <= 0:
            _warn(
                f"group {g!r} has zero total population, so its indices are undefined "
                "and reported as None"
            )
        elif X >= T:
            _warn(
                f"group {g!r} is the whole population, so its dissimilarity from the rest "
                "and its correlation ratio are undefined and reported as None"
            )
    y = groups[reference]
    others = [g for g in groups if g != reference]
    if y.sum() > 0 and others and (not mask.any() or mask.all()):
        _warn(_no_contrast_message(mask))

    served_weight = mask.astype(np.float64)
    proxy = MappingProxyType
    return SegregationResult(
        reference_group=reference,
        dissimilarity=proxy({g: _dissim(groups[g], y) for g in others}),
        dissimilarity_vs_rest=proxy({g: _dissim(a, t - a) for g, a in groups.items()}),
        isolation=proxy({g: _interaction(a, a, t) for g, a in groups.items()}),
        exposure_to_reference=proxy({g: _interaction(groups[g], y, t) for g in others}),
        correlation_ratio=proxy({g: _eta_squared(a, t) for g, a in groups.items()}),
        coverage_dissimilarity=proxy(
            {g: _split_dissim(groups[g], y, served_weight) for g in others}
        ),
        areal_coverage_dissimilarity=proxy({g: _split_dissim(groups[g], y, frac) for g in others}),
        coverage_gap_test=proxy(
            {g: _gap_test(groups[g], y, mask, permutations, rng) for g in others}
        ),
        permutations=permutations,
    )
