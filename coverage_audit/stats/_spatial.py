"""Weights and permutation machinery shared by the Moran, join count and local Moran statistics.

Resolves an :class:`~coverage_audit.weights.AreaGraph`, a libpysal ``Graph`` or a sparse
matrix into binary and row-standardised weights over the areas taking part, and draws the
permutation blocks and conditional permutations whose p-values the statistics report. The
draws come only from the generator handed in.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TypeAlias

import numpy as np
import pandas as pd
import scipy.sparse as sp
from libpysal.graph import Graph
from numpy.typing import ArrayLike
from scipy import stats

from ..errors import AnalysisError
from ..weights import AreaGraph
from ._validate import aligned_flags, aligned_floats

#: A simulated statistic within this relative distance of the observed one counts as a tie
#: (as extreme as observed, in both tails). Sums of the same numbers in another order differ
#: in the last bits, and covered fractions repeat exact 0s and 1s, so exact ties are common.
_TIE_RTOL = 1e-9


#: Matrix entries held at once by a block of permutations (bounds memory to ~32 MB each).
_BLOCK_ENTRIES = 1 << 22


#: Minimum number of areas of every statistic here.
_MIN_AREAS = 3


@dataclass(frozen=True)
class _Weights:
    """Weights over the areas in the statistic, and where those sit in the input."""

    binary: sp.csr_matrix
    row: sp.csr_matrix
    mask: np.ndarray | None  # positions of the input taking part; None: all of them
    n_input: int


def _length(values: ArrayLike) -> int:
    return int(np.asarray(values).size)


#: The spatial weights the statistics accept.
WeightsLike: TypeAlias = AreaGraph | Graph | sp.spmatrix | sp.sparray


@dataclass(frozen=True)
class WeightsParts:
    """What any accepted weights object comes down to.

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix
        The weights between the nodes, as float.
    mask : numpy.ndarray or None
        For an ``AreaGraph``: which of its areas take part (``stats_mask``); else None.
    node_ids : numpy.ndarray or None
        Ids (as text) of the matrix's rows, where the weights carry them: an
        ``AreaGraph``'s ids of the areas taking part, a libpysal ``Graph``'s ``unique_ids``.
    """

    matrix: sp.csr_matrix
    mask: np.ndarray | None
    node_ids: np.ndarray | None


def weights_parts(weights: object) -> WeightsParts | None:
    """Split an ``AreaGraph``, a libpysal ``Graph`` or a sparse matrix into its parts.

    The one reading of a weights object, shared by the spatial statistics and the residual
    Moran of the exclusion models; None for anything else (each caller says what it takes).
    """
    if isinstance(weights, AreaGraph):
        mask = np.asarray(weights.stats_mask, dtype=bool)
        ids = np.asarray(weights.ids, dtype=object)[mask]
        return WeightsParts(sp.csr_matrix(weights.stats_adjacency, dtype=np.float64), mask, ids)
    if isinstance(weights, Graph):
        ids = np.asarray(pd.Index(weights.unique_ids).astype(str), dtype=object)
        return WeightsParts(sp.csr_matrix(weights.sparse, dtype=np.float64), None, ids)
    if sp.issparse(weights):
        return WeightsParts(sp.csr_matrix(weights, dtype=np.float64), None, None)
    return None


def _resolve_weights(graph: WeightsLike, n_values: int, *, what: str) -> _Weights:
    """Binary and row-standardised weights over the areas taking part."""
    parts = weights_parts(graph)
    if parts is None:
        raise AnalysisError(
            f"weights were a {type(graph).__name__}; give an AreaGraph, a libpysal Graph or "
            "a square scipy sparse matrix"
        )
    matrix, mask = parts.matrix, parts.mask
    n_input = matrix.shape[0]
    if isinstance(graph, AreaGraph):
        n_input = graph.n
        if n_values != graph.n:
            raise AnalysisError(
                f"{what} has {n_values} values but the AreaGraph has {graph.n} areas; give "
                "one value per area, in the graph's order"
            )
    if matrix.shape[0] != matrix.shape[1]:
        raise AnalysisError(f"weights matrix is {matrix.shape[0]} x {matrix.shape[1]}, not square")
    if mask is None and n_values != n_input:
        raise AnalysisError(f"{what} has {n_values} values but the weights have {n_input} areas")
    matrix.eliminate_zeros()
    matrix.sort_indices()
    m = matrix.shape[0]
    if m < _MIN_AREAS:
        raise AnalysisError(
            f"only {m} area(s) take part in the spatial statistics; at least {_MIN_AREAS} are "
            "needed (islands are left out unless the graph links them with island_policy='knn')"
        )
    if (matrix.data < 0).any() or not np.isfinite(matrix.data).all():
        raise AnalysisError("weights must be finite and not negative")
    if matrix.diagonal().any():
        first = int(np.flatnonzero(matrix.diagonal())[0])
        raise AnalysisError(f"weights link area {first} to itself; remove self-links")
    lonely = np.flatnonzero(np.diff(matrix.indptr) == 0)
    if lonely.size:
        shown = ", ".join(str(int(i)) for i in lonely[:10])
        raise AnalysisError(
            f"{lonely.size} area(s) have no neighbour in the weights (positions {shown}); "
            "drop them, or build an AreaGraph with an island policy"
        )
    binary = matrix.copy()
    binary.data[:] = 1.0
    return _Weights(binary=binary, row=_row_standardise(matrix), mask=mask, n_input=n_input)


def _row_standardise(matrix: sp.csr_matrix) -> sp.csr_matrix:
    sums = np.asarray(matrix.sum(axis=1)).ravel()
    row = sp.csr_matrix(matrix, dtype=np.float64, copy=True)
    row.data /= np.repeat(sums, np.diff(row.indptr))
    return row


def _values(values: ArrayLike, name: str, weights: _Weights) -> np.ndarray:
    """Finite float values of the areas taking part."""
    arr = aligned_floats(values, weights.n_input, name)
    if weights.mask is not None:
        arr = arr[weights.mask]
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        raise AnalysisError(
            f"{name} must be finite in every area of the statistic; {bad.size} value(s) are "
            f"missing or infinite (first at statistic position {int(bad[0])})"
        )
    return arr


def _binary(values: ArrayLike, name: str, weights: _Weights) -> np.ndarray:
    flags = aligned_flags(values, weights.n_input, name)
    return flags[weights.mask] if weights.mask is not None else flags


def _is_constant(values: np.ndarray) -> bool:
    return bool(np.ptp(values) <= 1e-14 * max(1.0, float(np.abs(values).max())))


def _permutation_blocks(values: np.ndarray, permutations: int, rng: np.random.Generator):
    """Yield ``n x c`` blocks whose columns are random permutations of ``values``.

    Columns, so that the sparse products below run on C-contiguous dense operands (several
    times faster than on a transposed view); blocks bound the memory.
    """
    n = values.size
    block = max(1, min(permutations, _BLOCK_ENTRIES // max(n, 1)))
    done = 0
    while done < permutations:
        size = min(block, permutations - done)
        yield np.stack([rng.permutation(values) for _ in range(size)], axis=1)
        done += size


def _quadratic_forms(matrix: sp.csr_matrix, columns: np.ndarray) -> np.ndarray:
    """Return ``a' W a`` for each column ``a`` of ``columns``."""
    return np.einsum("ij,ij->j", columns, matrix @ columns)


def _folded_p(sim: np.ndarray, observed: np.ndarray | float) -> np.ndarray:
    """Fold the pseudo p-value as esda does, ties (within ``_TIE_RTOL``) counting in both tails."""
    tol = _TIE_RTOL * np.abs(observed)
    upper = np.count_nonzero(sim >= observed - tol, axis=0)
    lower = np.count_nonzero(sim <= observed + tol, axis=0)
    return (np.minimum(upper, lower) + 1.0) / (sim.shape[0] + 1.0)


def _sim_summary(sim: np.ndarray, observed: float) -> tuple[float, float, float]:
    if sim.size == 0:
        return math.nan, math.nan, math.nan
    mean = float(sim.mean())
    sd = float(sim.std())
    z = (observed - mean) / sd if sd > 0 else math.nan
    return mean, z, float(_folded_p(sim, observed))


def _one_sided_normal_p(z: float) -> float:
    if not math.isfinite(z):
        return math.nan
    return float(stats.norm.sf(z) if z > 0 else stats.norm.cdf(z))


def two_sided_normal_p(z: float) -> float:
    """Return ``2 P(Z >= |z|)`` for a standard normal Z (NaN for a z that is not finite)."""
    if not math.isfinite(z):
        return math.nan
    return float(2.0 * stats.norm.sf(abs(z)))


def _standardise(values: np.ndarray) -> np.ndarray:
    return (values - values.mean()) / values.std()


def _conditional_draws(n: int, k: int, permutations: int, rng: np.random.Generator) -> np.ndarray:
    """``permutations x k`` draws without replacement from ``0..n-2``, one row per permutation."""
    return np.stack([rng.choice(n - 1, size=k, replace=False) for _ in range(permutations)])


def _conditional_pvalues(
    z: np.ndarray,
    row: sp.csr_matrix,
    observed: np.ndarray,
    scale: np.ndarray,
    draws: np.ndarray,
    *,
    block_entries: int = _BLOCK_ENTRIES,
) -> tuple[np.ndarray, np.ndarray]:
    """Folded pseudo p-values and z_sim of local Moran's I under conditional permutation.

    Area ``i`` with ``k`` neighbours pairs its row weights with the values
    ``z[m_i(draws[:, :k])]``, where ``m_i`` maps ``i`` to ``n - 1`` and every other index to
    itself. The shared part ``z[draws]`` times the weights is one matrix product per
    neighbour count; the few draws equal to ``i`` are then corrected one by one.
    """
    n = z.size
    permutations, _ = draws.shape
    card = np.diff(row.indptr)
    base = z[draws]
    # Draws that hit their own area: entry (p, j) of area v = draws[p, j] when j < k_v.
    perm_of, col_of = np.divmod(np.arange(draws.size), draws.shape[1])
    area_of = draws.ravel()
    hit = col_of < card[area_of]
    perm_of, col_of, area_of = perm_of[hit], col_of[hit], area_of[hit]
    delta = row.data[row.indptr[area_of] + col_of] * (z[n - 1] - z[area_of])
    order = np.argsort(card, kind="stable")
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n)
    by_rank = np.argsort(rank[area_of], kind="stable")
    perm_of, area_of, delta = perm_of[by_rank], area_of[by_rank], delta[by_rank]
    hit_rank = rank[area_of]

    p_sim = np.empty(n)
    z_sim = np.empty(n)
    width = max(1, block_entries // permutations)
    bounds = np.flatnonzero(np.diff(card[order])) + 1
    for start, stop in zip(np.r_[0, bounds], np.r_[bounds, n], strict=True):
        k = int(card[order[start]])
        for lo in range(start, stop, width):
            hi = min(lo + width, stop)
            areas = order[lo:hi]
            w = row.data[row.indptr[areas][:, None] + np.arange(k)]
            lag_sim = base[:, :k] @ w.T
            a, b = np.searchsorted(hit_rank, (lo, hi))
            lag_sim[perm_of[a:b], hit_rank[a:b] - lo] += delta[a:b]
            sim = lag_sim * scale[areas]
            p_sim[areas] = _folded_p(sim, observed[areas])
            # One pass for both moments; z_sim is descriptive, so the cancellation of the
            # textbook formula (far below the Monte Carlo error) is acceptable here.
            mean = sim.sum(axis=0) / permutations
            var = np.einsum("ij,ij->j", sim, sim) / permutations - mean * mean
            sd = np.sqrt(np.maximum(var, 0.0))
            with np.errstate(divide="ignore", invalid="ignore"):
                z_sim[areas] = np.where(
                    sd > 1e-12 * np.abs(mean), (observed[areas] - mean) / sd, np.nan
                )
    return p_sim, z_sim
