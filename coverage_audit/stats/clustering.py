"""Spatial clustering of coverage: the summary over Moran's I, join counts and local Moran.

The statistics live one family per module: :mod:`~coverage_audit.stats.moran` (global and
bivariate Moran's I), :mod:`~coverage_audit.stats.join_counts` and
:mod:`~coverage_audit.stats.lisa` (local Moran, FDR, cluster labels), over the weights and
permutation machinery of :mod:`~coverage_audit.stats._spatial`; this module re-exports
their public names and builds the ``clustering`` part of ``summary.json``.

Takes per-area arrays (covered fraction, minority share, served flag, majority-minority
flag, population) aligned to the positions of an :class:`~coverage_audit.weights.AreaGraph`
and gives frozen result objects: :class:`MoranResult` (global Moran's I with its moments
under normality and randomisation and a permutation test), :class:`JoinCountResult`
(served / unserved joins on binary weights), :class:`BivariateMoranResult` (minority share
against the spatial lag of coverage), :class:`LocalMoranResult` (local Moran's I, conditional
permutation pseudo p-values, Benjamini-Hochberg q-values and cluster labels) and, from
:func:`clustering_summary`, one :class:`ClusteringResult` whose ``to_dict()`` is the
``clustering`` part of ``summary.json``.

Policy, the same in every function:

- Weights are an ``AreaGraph`` (values are given for all of its areas, aligned to its
  positions, and only the areas in ``stats_mask`` take part), a libpysal ``Graph``
  (values in the order of ``graph.unique_ids``) or a square scipy sparse matrix. Moran
  statistics row-standardise them; join counts use them as binary. Weights with an area
  that has no neighbour, a self-link or a negative weight raise
  :class:`~coverage_audit.errors.AnalysisError` (build the graph with an island policy).
- Fewer than 3 areas, non-finite values, misaligned arrays and non-binary ``served`` raise
  ``AnalysisError``; bad options (``permutations``, ``rng``, ``fdr``, ``alpha``) raise
  :class:`~coverage_audit.errors.SpecError`.
- A constant variable, or no / every area served, gives a result whose undefined fields are
  NaN (``None`` in ``to_dict()``) and a
  :class:`~coverage_audit.errors.DegenerateStatisticWarning`; so do moments that need more
  areas than given (the variance of I needs 4).
- Permutation draws come only from the ``rng`` handed in; the same inputs and seed give
  identical results.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from .._util import to_jsonable
from ..choices import FdrMethod
from ..errors import AnalysisError, SpecError
from ..weights import AreaGraph
from ._spatial import _MIN_AREAS, _binary, _resolve_weights, _row_standardise, _values
from ._validate import aligned_flags, aligned_floats, check_alpha, check_draws, warn_degenerate
from .join_counts import JoinCountResult, _join_counts, join_counts
from .lisa import (
    CLUSTER_LABELS,
    FDR_METHODS,
    LocalMoranResult,
    _local_moran,
    _local_result,
    benjamini_hochberg,
    lisa_crosstab,
    local_moran,
)
from .moran import (
    BivariateMoranResult,
    MoranResult,
    _bivariate_moran,
    _empty_bivariate,
    _empty_moran,
    _moran,
    bivariate_moran,
    moran,
    moran_moments,
    two_sided_normal_p,
)

__all__ = [
    "CLUSTER_LABELS",
    "FDR_METHODS",
    "BivariateMoranResult",
    "ClusteringResult",
    "JoinCountResult",
    "LocalMoranResult",
    "MoranResult",
    "benjamini_hochberg",
    "bivariate_moran",
    "clustering_summary",
    "join_counts",
    "lisa_crosstab",
    "local_moran",
    "moran",
    "moran_moments",
    "two_sided_normal_p",
]


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class ClusteringResult:
    """Every clustering statistic of an audit.

    Attributes
    ----------
    weights : AreaGraph
        The contiguity the statistics used.
    moran : MoranResult
        Global Moran's I of the covered fraction.
    moran_minority_share : MoranResult
        Global Moran's I of the minority share, over the areas where it is defined.
    join_counts : JoinCountResult
        Served / unserved join counts.
    bivariate_moran : BivariateMoranResult
        Minority share against the spatial lag of the covered fraction.
    local_moran : LocalMoranResult
        Local Moran's I of the covered fraction.
    crosstab : dict
        :func:`lisa_crosstab` of the local clusters by majority-minority status.
    minority_share_left_out : int
        Areas in the statistics whose minority share is undefined (no population), left
        out of the minority-share statistics.
    minority_share_unlinked : int
        Further areas left out because every neighbour of theirs was left out.
    permutations : int
    """

    weights: AreaGraph
    moran: MoranResult
    moran_minority_share: MoranResult
    join_counts: JoinCountResult
    bivariate_moran: BivariateMoranResult
    local_moran: LocalMoranResult
    crosstab: dict[str, Any]
    minority_share_left_out: int
    minority_share_unlinked: int
    permutations: int

    @property
    def lisa_I(self) -> np.ndarray:  # noqa: N802 - the published symbol
        """Local Moran's I by AreaGraph position (NaN outside the statistics)."""
        return self.local_moran.Ii

    @property
    def lisa_p(self) -> np.ndarray:
        """Conditional-permutation pseudo p-values by position."""
        return self.local_moran.p_sim

    @property
    def lisa_q(self) -> np.ndarray:
        """Benjamini-Hochberg q-values by position."""
        return self.local_moran.q

    @property
    def lisa_cluster(self) -> np.ndarray:
        """Cluster label by position (``None`` outside the statistics)."""
        return self.local_moran.cluster

    def area_frame(self) -> pd.DataFrame:
        """Per-area LISA columns aligned to the AreaGraph positions."""
        return self.local_moran.frame()

    def to_dict(self) -> dict[str, Any]:
        """Return the ``clustering`` section of summary.json."""
        left_out = {
            "areas_left_out": self.minority_share_left_out,
            "areas_without_neighbour_left_out": self.minority_share_unlinked,
        }
        local = self.local_moran.to_dict()
        local["crosstab"] = self.crosstab
        return to_jsonable(
            {
                "weights": self.weights.to_dict(),
                "moran": self.moran.to_dict(),
                "moran_minority_share": {**self.moran_minority_share.to_dict(), **left_out},
                "join_counts": self.join_counts.to_dict(),
                "bivariate_moran": {**self.bivariate_moran.to_dict(), **left_out},
                "local_moran": local,
                "permutations": self.permutations,
            }
        )


# --------------------------------------------------------------------------- public API


def clustering_summary(
    covered_fraction: ArrayLike,
    minority_share: ArrayLike,
    served: ArrayLike,
    majority_minority: ArrayLike,
    population: ArrayLike,
    graph: AreaGraph,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    fdr: FdrMethod = "bh",
    alpha: float = 0.05,
) -> ClusteringResult:
    """Run every clustering statistic of an audit.

    Parameters
    ----------
    covered_fraction : array_like of float
        Covered fraction of each area, aligned to ``graph`` positions.
    minority_share : array_like of float
        Minority share of each area; NaN where it is undefined (no population). Those areas
        are left out of the minority-share statistics, with the weights among the other
        areas kept (and re-standardised); areas left with no neighbour go too.
    served : array_like of bool
        Whether each area is served.
    majority_minority : array_like of bool
        Whether each area is a majority-minority area (for the crosstab).
    population : array_like of float
        Population of each area (for the crosstab).
    graph : AreaGraph
        Contiguity of the analysed areas; only ``graph.stats_mask`` areas take part.
    permutations : int
        Permutations of every test (at least 1).
    rng : numpy.random.Generator
        Source of all the permutations, drawn in the order: Moran of the covered fraction,
        Moran of the minority share, join counts, bivariate Moran, local Moran.
    fdr : {"bh", "none"}
        Multiple-testing policy of the local clusters (see :func:`local_moran`).
    alpha : float
        Level of the local clusters.

    Returns
    -------
    ClusteringResult

    Raises
    ------
    AnalysisError
        When fewer than 3 areas take part, or an input is misaligned or not finite where
        it must be.
    """
    if not isinstance(graph, AreaGraph):
        raise AnalysisError(
            f"graph was a {type(graph).__name__}; build it with weights.build_area_graph"
        )
    if fdr not in FDR_METHODS:
        raise SpecError(f'fdr was "{fdr}" but is expected to be one of {list(FDR_METHODS)}')
    check_alpha(alpha)
    check_draws(permutations, rng)
    if permutations < 1:
        raise SpecError(f"permutations was {permutations} but must be at least 1 (999 is usual)")
    assert rng is not None
    weights = _resolve_weights(graph, graph.n, what="the clustering statistics")
    mask = weights.mask
    assert mask is not None
    fraction = _values(covered_fraction, "covered_fraction", weights)
    flags = _binary(served, "served", weights)
    share_full = aligned_floats(minority_share, graph.n, "minority_share")
    mm_full = aligned_flags(majority_minority, graph.n, "majority_minority")
    pop_full = aligned_floats(population, graph.n, "population")

    moran_cf = _moran(fraction, weights.row, permutations, rng, "covered_fraction")

    share = share_full[mask]
    defined = np.isfinite(share)
    left_out = int((~defined).sum())
    sub = weights.binary[defined][:, defined].tocsr()
    linked = np.diff(sub.indptr) > 0
    unlinked = int((~linked).sum())
    sub = sub[linked][:, linked].tocsr()
    share_in = share[defined][linked]
    fraction_in = fraction[defined][linked]
    if share_in.size >= _MIN_AREAS:
        sub_row = _row_standardise(sub)
        moran_ms = _moran(share_in, sub_row, permutations, rng, "minority_share")
    else:
        warn_degenerate(f"minority share is defined for only {share_in.size} linked areas")
        moran_ms = _empty_moran("minority_share", share_in.size, permutations)
        sub_row = None

    joins = _join_counts(flags, weights.binary, permutations, rng)

    if sub_row is not None:
        bivariate = _bivariate_moran(
            share_in, fraction_in, sub_row, permutations, rng, "minority_share", "covered_fraction"
        )
    else:
        bivariate = _empty_bivariate(
            "minority_share", "covered_fraction", share_in.size, permutations
        )

    core = _local_moran(fraction, weights.row, permutations, rng, "covered_fraction")
    local = _local_result(core, mask, fdr, alpha, permutations, "covered_fraction")
    crosstab = lisa_crosstab(local.cluster, mm_full, pop_full)
    return ClusteringResult(
        weights=graph,
        moran=moran_cf,
        moran_minority_share=moran_ms,
        join_counts=joins,
        bivariate_moran=bivariate,
        local_moran=local,
        crosstab=crosstab,
        minority_share_left_out=left_out,
        minority_share_unlinked=unlinked,
        permutations=int(permutations),
    )


# --------------------------------------------------------------------------- permutations


# --------------------------------------------------------------------------- local Moran
