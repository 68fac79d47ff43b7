"""Local Moran's I: conditional permutation pseudo p-values, FDR q-values and cluster labels."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, get_args

import numpy as np
import pandas as pd
import scipy.sparse as sp
from numpy.typing import ArrayLike

from ..choices import FdrMethod
from ..errors import AnalysisError, SpecError
from ._spatial import (
    WeightsLike,
    _conditional_draws,
    _conditional_pvalues,
    _is_constant,
    _length,
    _resolve_weights,
    _standardise,
    _values,
)
from ._validate import aligned_flags, check_alpha, check_draws, warn_degenerate

#: Cluster labels of the local Moran map, significant quadrants first.
CLUSTER_LABELS: tuple[str, ...] = (
    "high-high",
    "low-low",
    "high-low",
    "low-high",
    "not significant",
)


#: Multiple-testing policies of :func:`local_moran`.
FDR_METHODS: tuple[FdrMethod, ...] = get_args(FdrMethod)


#: Quadrant codes as esda numbers them (1 HH, 2 LH, 3 LL, 4 HL) and their labels.
_QUADRANT_LABELS = {1: "high-high", 2: "low-high", 3: "low-low", 4: "high-low"}


@dataclass(frozen=True)
class LocalMoranResult:
    """Local Moran's I of every area, with its significance and cluster label.

    Arrays have one entry per input position (all areas of an ``AreaGraph``); areas that
    take no part in the statistic (``in_statistics`` False) have NaN numbers, quadrant 0
    and cluster ``None``.

    Attributes
    ----------
    variable : str or None
        Name of the variable.
    n : int
        Areas in the statistic.
    Ii : numpy.ndarray
        Local Moran's I.
    quadrant : numpy.ndarray of int
        1 high-high, 2 low-high, 3 low-low, 4 high-low (esda's coding), 0 outside.
    p_sim : numpy.ndarray
        Folded conditional-permutation pseudo p-values.
    q : numpy.ndarray
        Benjamini-Hochberg adjusted p-values over the areas in the statistic.
    z_sim : numpy.ndarray
        ``(Ii - mean(sim)) / sd(sim)`` per area.
    significant : numpy.ndarray of bool
        ``q <= alpha`` under ``fdr="bh"``, ``p_sim <= alpha`` under ``fdr="none"``.
    cluster : numpy.ndarray of object
        Quadrant label where significant, ``"not significant"`` elsewhere, ``None`` outside.
    in_statistics : numpy.ndarray of bool
        Positions that take part.
    fdr : {"bh", "none"}
    alpha : float
    permutations : int
    """

    variable: str | None
    n: int
    Ii: np.ndarray = field(repr=False)
    quadrant: np.ndarray = field(repr=False)
    p_sim: np.ndarray = field(repr=False)
    q: np.ndarray = field(repr=False)
    z_sim: np.ndarray = field(repr=False)
    significant: np.ndarray = field(repr=False)
    cluster: np.ndarray = field(repr=False)
    in_statistics: np.ndarray = field(repr=False)
    fdr: FdrMethod
    alpha: float
    permutations: int

    def counts(self) -> dict[str, int]:
        """Areas per cluster label, in the order of :data:`CLUSTER_LABELS`."""
        inside = self.cluster[self.in_statistics]
        return {label: int(np.count_nonzero(inside == label)) for label in CLUSTER_LABELS}

    def frame(self) -> pd.DataFrame:
        """Per-area columns ``lisa_I``, ``lisa_p``, ``lisa_q``, ``lisa_cluster`` by position."""
        return pd.DataFrame(
            {
                "lisa_I": self.Ii,
                "lisa_p": self.p_sim,
                "lisa_q": self.q,
                # object dtype keeps None (pandas would infer a string column with NaN).
                "lisa_cluster": pd.Series(self.cluster, dtype=object),
            }
        )

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (per-area arrays stay in :meth:`frame`)."""
        return {
            "variable": self.variable,
            "fdr": self.fdr,
            "alpha": float(self.alpha),
            "permutations": int(self.permutations),
            "n": int(self.n),
            "counts": self.counts(),
        }


def local_moran(
    y: ArrayLike,
    graph: WeightsLike,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    fdr: FdrMethod = "bh",
    alpha: float = 0.05,
    variable: str | None = None,
) -> LocalMoranResult:
    """Local Moran's I (LISA) with conditional permutation inference.

    Parameters
    ----------
    y : array_like of float
        One value per area.
    graph : AreaGraph, libpysal.graph.Graph or scipy sparse matrix
        Spatial weights; row-standardised here.
    permutations : int
        Conditional permutations per area (at least 1; 999 is usual).
    rng : numpy.random.Generator
        Source of the permutations.
    fdr : {"bh", "none"}
        ``"bh"``: an area is significant when its Benjamini-Hochberg q-value is at most
        ``alpha`` (the false discovery rate over all areas is then at most ``alpha``);
        ``"none"``: when its own pseudo p-value is at most ``alpha``.
    alpha : float
        Level, in (0, 1).
    variable : str, optional
        Name of ``y``.

    Returns
    -------
    LocalMoranResult

    Notes
    -----
    Anselin (1995), "Local indicators of spatial association - LISA", *Geographical
    Analysis* 27(2): ``I_i = (n - 1) z_i (W z)_i / sum_j z_j^2`` with ``z`` standardised,
    the scaling esda's ``Moran_Local`` uses. Quadrants follow the signs of ``z_i`` and
    ``(W z)_i`` (a zero counts as low).

    Conditional permutation holds ``y_i`` fixed and draws its ``k_i`` neighbours' values
    from the other ``n - 1`` areas without replacement. As in esda, one matrix of
    ``permutations x max(k_i)`` draws from ``0..n-2`` is shared by all areas; draw ``j``
    stands for area ``j``, except that area ``i`` itself stands for area ``n - 1``, which
    maps the draws one-to-one onto the other areas. The pseudo p-value is folded as in
    esda: ``(1 + min(#{I_i* >= I_i}, #{I_i* <= I_i})) / (P + 1)``. The work is a few
    dense matrix products per neighbour count, in blocks of bounded memory.
    """
    if fdr not in FDR_METHODS:
        raise SpecError(f'fdr was "{fdr}" but is expected to be one of {list(FDR_METHODS)}')
    check_alpha(alpha)
    check_draws(permutations, rng)
    if permutations < 1:
        raise SpecError(
            f"permutations was {permutations} but local Moran needs at least 1 (999 is usual)"
        )
    weights = _resolve_weights(graph, _length(y), what=variable or "y")
    values = _values(y, variable or "y", weights)
    assert rng is not None  # checked by check_draws
    core = _local_moran(values, weights.row, permutations, rng, variable)
    return _local_result(core, weights.mask, fdr, alpha, permutations, variable)


def benjamini_hochberg(p: ArrayLike) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values).

    Parameters
    ----------
    p : array_like of float
        p-values in [0, 1]; NaN entries stay NaN and do not count as tests.

    Returns
    -------
    numpy.ndarray
        ``q_(i) = min_{j >= i} m p_(j) / j`` over the ``m`` finite p-values in ascending
        order, capped at 1 (Benjamini and Hochberg 1995, *JRSS B* 57(1), 289-300).
    """
    p = np.asarray(p, dtype=np.float64)
    q = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    m = ok.size
    if m == 0:
        return q
    order = ok[np.argsort(p[ok], kind="stable")]
    scaled = p[order] * m / np.arange(1, m + 1)
    q[order] = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    return q


def lisa_crosstab(
    labels: Sequence[str | None] | np.ndarray,
    majority_minority: ArrayLike,
    population: ArrayLike,
) -> dict[str, Any]:
    """Areas and population by local-cluster label and majority-minority status.

    Parameters
    ----------
    labels : sequence of str or None
        Cluster label of each area (one of :data:`CLUSTER_LABELS`); ``None`` (or NaN) marks
        an area outside the statistics, which is counted apart.
    majority_minority : array_like of bool
        Whether each area is a majority-minority area.
    population : array_like of float
        Population of each area (finite, not negative).

    Returns
    -------
    dict
        ``{"columns": ["majority_minority", "not_majority_minority"],
        "rows": {label: {column: {"areas": int, "population": float}}},
        "areas_without_label": int, "population_without_label": float}``; every label
        of :data:`CLUSTER_LABELS` has a row, in that order.
    """
    labels_arr = np.asarray(labels, dtype=object).ravel()
    n = labels_arr.size
    mm = aligned_flags(majority_minority, n, "majority_minority")
    try:
        pop = np.asarray(population, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"population must be numeric ({exc})") from None
    if pop.size != n:
        raise AnalysisError(f"population has {pop.size} values for {n} cluster labels")
    bad = np.flatnonzero(~np.isfinite(pop) | (pop < 0))
    if bad.size:
        raise AnalysisError(
            f"population must be finite and not negative; position {int(bad[0])} is "
            f"{pop[bad[0]]!r} ({bad.size} such areas)"
        )
    # None (or NaN, as pandas may store a missing label) marks an area outside the statistics.
    unlabelled = np.asarray(pd.isna(labels_arr), dtype=bool)
    known = np.isin(labels_arr[~unlabelled], np.asarray(CLUSTER_LABELS, dtype=object))
    if not known.all():
        wrong = labels_arr[~unlabelled][~known][0]
        raise AnalysisError(
            f'cluster label "{wrong}" is not one of {list(CLUSTER_LABELS)} (or None)'
        )
    rows: dict[str, Any] = {}
    for label in CLUSTER_LABELS:
        is_label = labels_arr == label
        rows[label] = {
            column: {
                "areas": int(np.count_nonzero(is_label & side)),
                "population": float(pop[is_label & side].sum()),
            }
            for column, side in (("majority_minority", mm), ("not_majority_minority", ~mm))
        }
    return {
        "columns": ["majority_minority", "not_majority_minority"],
        "rows": rows,
        "areas_without_label": int(unlabelled.sum()),
        "population_without_label": float(pop[unlabelled].sum()),
    }


@dataclass(frozen=True)
class _LocalCore:
    Ii: np.ndarray
    quadrant: np.ndarray
    p_sim: np.ndarray
    z_sim: np.ndarray


def _local_moran(
    y: np.ndarray,
    row: sp.csr_matrix,
    permutations: int,
    rng: np.random.Generator,
    variable: str | None,
) -> _LocalCore:
    n = y.size
    if _is_constant(y):
        warn_degenerate(
            f"{variable or 'the variable'} is constant, so local Moran's I is undefined"
        )
        nan = np.full(n, np.nan)
        return _LocalCore(Ii=nan, quadrant=np.zeros(n, dtype=np.int8), p_sim=nan, z_sim=nan)
    z = _standardise(y)
    lag = row @ z
    # Anselin (1995) with esda's scaling: I_i = (n - 1) z_i (Wz)_i / z'z.
    scale = (n - 1) * z / float(z @ z)
    observed = scale * lag
    quadrant = np.where(z > 0, np.where(lag > 0, 1, 4), np.where(lag > 0, 2, 3)).astype(np.int8)
    draws = _conditional_draws(n, int(np.diff(row.indptr).max()), permutations, rng)
    p_sim, z_sim = _conditional_pvalues(z, row, observed, scale, draws)
    return _LocalCore(Ii=observed, quadrant=quadrant, p_sim=p_sim, z_sim=z_sim)


def _local_result(
    core: _LocalCore,
    mask: np.ndarray | None,
    fdr: FdrMethod,
    alpha: float,
    permutations: int,
    variable: str | None,
) -> LocalMoranResult:
    m = core.Ii.size
    if mask is None:
        mask = np.ones(m, dtype=bool)
    n_input = mask.size

    def spread(values: np.ndarray, fill: Any, dtype: Any) -> np.ndarray:
        out = np.full(n_input, fill, dtype=dtype)
        out[mask] = values
        return out

    q = benjamini_hochberg(core.p_sim)
    decision = q if fdr == "bh" else core.p_sim
    with np.errstate(invalid="ignore"):
        significant = decision <= alpha
    labels = np.full(m, "not significant", dtype=object)
    for code, label in _QUADRANT_LABELS.items():
        labels[significant & (core.quadrant == code)] = label
    return LocalMoranResult(
        variable=variable,
        n=m,
        Ii=spread(core.Ii, np.nan, np.float64),
        quadrant=spread(core.quadrant, 0, np.int8),
        p_sim=spread(core.p_sim, np.nan, np.float64),
        q=spread(q, np.nan, np.float64),
        z_sim=spread(core.z_sim, np.nan, np.float64),
        significant=spread(significant, False, bool),
        cluster=spread(labels, None, object),
        in_statistics=mask.copy(),
        fdr=fdr,
        alpha=float(alpha),
        permutations=int(permutations),
    )
