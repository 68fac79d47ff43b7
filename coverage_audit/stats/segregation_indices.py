"""Residential segregation indices over areas: dissimilarity, isolation, exposure, eta squared.

Pure functions of 1-D count arrays (Massey and Denton 1988 for the definitions); inputs are
checked by :mod:`coverage_audit.stats._validate` with the policy stated in
:mod:`coverage_audit.stats.segregation`.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

from ._validate import as_counts, same_length, warn_degenerate, within_total


def _empty_group_message(name: str, what: str) -> str:
    return (
        f"group {name} has zero total population, so its {what} is undefined and reported as None"
    )


def _group_and_total(x: ArrayLike, t: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Return the checked counts of group ``x`` and the total ``t`` (same length, x <= t)."""
    xa = as_counts(x, "x")
    ta = as_counts(t, "t")
    same_length({"x": xa, "t": ta})
    within_total(xa, ta, "x", "t")
    return xa, ta


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
    xa = as_counts(x, "x")
    ya = as_counts(y, "y")
    same_length({"x": xa, "y": ya})
    for name, arr in (("x", xa), ("y", ya)):
        if arr.sum() <= 0:
            warn_degenerate(_empty_group_message(name, "dissimilarity"))
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
    xa, ta = _group_and_total(x, t)
    rest = ta - xa
    if xa.sum() <= 0:
        warn_degenerate(_empty_group_message("x", "dissimilarity"))
    elif rest.sum() <= 0:
        warn_degenerate(
            "group x is the whole population, so its dissimilarity from the rest is undefined"
        )
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
    xa, ta = _group_and_total(x, t)
    if xa.sum() <= 0:
        warn_degenerate(_empty_group_message("x", "isolation"))
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
    xa = as_counts(x, "x")
    ya = as_counts(y, "y")
    ta = as_counts(t, "t")
    same_length({"x": xa, "y": ya, "t": ta})
    within_total(xa, ta, "x", "t")
    within_total(ya, ta, "y", "t")
    if xa.sum() <= 0:
        warn_degenerate(_empty_group_message("x", "exposure"))
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
    xa, ta = _group_and_total(x, t)
    if xa.sum() <= 0:
        warn_degenerate(_empty_group_message("x", "correlation ratio"))
    elif xa.sum() >= ta.sum():
        warn_degenerate("group x is the whole population, so its correlation ratio is undefined")
    return _eta_squared(xa, ta)
