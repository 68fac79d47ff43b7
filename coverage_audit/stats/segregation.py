"""Segregation indices and the permutation test of a coverage gap between groups.

One family per module: :mod:`~coverage_audit.stats.segregation_indices` (dissimilarity,
isolation, exposure, correlation ratio), :mod:`~coverage_audit.stats.coverage_gap` (the
served / unserved dissimilarities and the gap test); this module re-exports them and builds
the summary.

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

from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from .._util import to_jsonable
from ..errors import SpecError
from ._validate import (
    as_counts,
    as_fractions,
    as_served,
    check_generator,
    check_permutation_count,
    same_length,
    warn_degenerate,
    within_total,
)
from .coverage_gap import (
    GapTest,
    _gap_test,
    _no_contrast_message,
    _split_dissim,
    areal_coverage_dissimilarity,
    coverage_dissimilarity,
    coverage_gap_test,
)
from .segregation_indices import (
    _dissim,
    _eta_squared,
    _interaction,
    correlation_ratio,
    dissimilarity,
    dissimilarity_vs_rest,
    exposure,
    isolation,
)

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


# --------------------------------------------------------------------------- results


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


# ------------------------------------------------------------------- pure kernels


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
    t = as_counts(total, "total")
    groups = {str(g): as_counts(v, f"group {g!r}") for g, v in counts.items()}
    mask = as_served(served)
    frac = as_fractions(covered_fraction)
    same_length(
        {
            "total": t,
            **{f"group {g!r}": a for g, a in groups.items()},
            "served": mask,
            "covered_fraction": frac,
        }
    )
    for g, arr in groups.items():
        within_total(arr, t, f"group {g!r}", "total")
    permutations = check_permutation_count(permutations)
    rng = check_generator(rng)

    T = t.sum()
    for g, arr in groups.items():
        X = arr.sum()
        if X <= 0:
            warn_degenerate(
                f"group {g!r} has zero total population, so its indices are undefined "
                "and reported as None"
            )
        elif X >= T:
            warn_degenerate(
                f"group {g!r} is the whole population, so its dissimilarity from the rest "
                "and its correlation ratio are undefined and reported as None"
            )
    y = groups[reference]
    others = [g for g in groups if g != reference]
    if y.sum() > 0 and others and (not mask.any() or mask.all()):
        warn_degenerate(_no_contrast_message(mask))

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
