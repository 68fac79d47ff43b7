"""Spatial clustering of coverage: global and bivariate Moran's I, join counts, local Moran.

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

import math
import numbers
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sp
from libpysal.graph import Graph
from numpy.typing import ArrayLike
from scipy import stats

from ._util import clean_number, to_jsonable
from .errors import AnalysisError, DegenerateStatisticWarning, SpecError
from .weights import AreaGraph

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

#: Cluster labels of the local Moran map, significant quadrants first.
CLUSTER_LABELS: tuple[str, ...] = (
    "high-high",
    "low-low",
    "high-low",
    "low-high",
    "not significant",
)

#: Multiple-testing policies of :func:`local_moran`.
FDR_METHODS: tuple[str, ...] = ("bh", "none")

#: Quadrant codes as esda numbers them (1 HH, 2 LH, 3 LL, 4 HL) and their labels.
_QUADRANT_LABELS = {1: "high-high", 2: "low-high", 3: "low-low", 4: "high-low"}

#: A simulated statistic within this relative distance of the observed one counts as a tie
#: (as extreme as observed, in both tails). Sums of the same numbers in another order differ
#: in the last bits, and covered fractions repeat exact 0s and 1s, so exact ties are common.
_TIE_RTOL = 1e-9

#: Matrix entries held at once by a block of permutations (bounds memory to ~32 MB each).
_BLOCK_ENTRIES = 1 << 22

#: Minimum number of areas of every statistic here.
_MIN_AREAS = 3


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class MoranResult:
    """Global Moran's I of one variable under row-standardised weights.

    Attributes
    ----------
    variable : str or None
        Name of the variable, as the caller gave it.
    n : int
        Areas in the statistic.
    I : float
        Moran's I.
    EI : float
        Expectation under the null, ``-1 / (n - 1)``.
    VI_norm, z_norm, p_norm : float
        Variance, z-value and one-sided p-value under the normality assumption.
    VI_rand, z_rand, p_rand : float
        Variance, z-value and one-sided p-value under randomisation.
    p_norm_two_sided, p_rand_two_sided : float
        (Properties.) The two-sided normal p-values, ``2 P(Z >= |z|)``. Every ``p_norm``
        and ``p_rand`` key in summary.json is one-sided, in the direction of z; keys
        ending ``_two_sided`` are two-sided (the project's one convention).
    permutations : int
        Random permutations drawn (0: no permutation test).
    EI_sim, z_sim, p_sim : float
        Mean of the permutation null, ``(I - EI_sim) / sd(sim)``, and the folded one-sided
        pseudo p-value (see :func:`moran`).
    sim : numpy.ndarray
        The permuted statistics (empty without permutations).
    """

    variable: str | None
    n: int
    I: float  # noqa: E741 - the published symbol
    EI: float
    VI_norm: float
    z_norm: float
    p_norm: float
    VI_rand: float
    z_rand: float
    p_rand: float
    permutations: int
    EI_sim: float
    z_sim: float
    p_sim: float
    sim: np.ndarray = field(repr=False)

    @property
    def p_norm_two_sided(self) -> float:
        """Two-sided p-value under normality, ``2 P(Z >= |z_norm|)``."""
        return two_sided_normal_p(self.z_norm)

    @property
    def p_rand_two_sided(self) -> float:
        """Two-sided p-value under randomisation, ``2 P(Z >= |z_rand|)``."""
        return two_sided_normal_p(self.z_rand)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (NaN as ``None``)."""
        return {
            "variable": self.variable,
            "I": clean_number(self.I),
            "expected": clean_number(self.EI),
            "variance_norm": clean_number(self.VI_norm),
            "z_norm": clean_number(self.z_norm),
            "p_norm": clean_number(self.p_norm),
            "p_norm_two_sided": clean_number(self.p_norm_two_sided),
            "variance_rand": clean_number(self.VI_rand),
            "z_rand": clean_number(self.z_rand),
            "p_rand": clean_number(self.p_rand),
            "p_rand_two_sided": clean_number(self.p_rand_two_sided),
            "expected_sim": clean_number(self.EI_sim),
            "z_sim": clean_number(self.z_sim),
            "p_sim": clean_number(self.p_sim),
            "permutations": int(self.permutations),
            "n": int(self.n),
        }


@dataclass(frozen=True)
class JoinCountResult:
    """Join counts of served and unserved areas on binary weights.

    "Served" plays the role of black (B) in the textbook's black / white colouring, so
    ``served_served`` is BB, ``unserved_unserved`` WW and ``served_unserved`` BW. An
    excess of unserved-unserved joins over chance is clustering of exclusion.

    Attributes
    ----------
    n, served_areas : int
        Areas in the statistic, and how many of them are served.
    joins : float
        Number of joins J (half the sum of the binary weights).
    served_served, unserved_unserved, served_unserved : float
        Observed join counts.
    expected_* , variance_*, z_* : float
        Moments under random placement of the served areas (non-free sampling) and the
        z-values they give.
    permutations : int
        Random permutations of the served flags.
    p_sim_served_served, p_sim_unserved_unserved : float
        Upper-tail pseudo p-values: ``(1 + #{sim >= observed}) / (permutations + 1)``.
    p_sim_served_unserved : float
        Lower-tail pseudo p-value (few mixed joins is the clustered direction).
    sim_served_served, sim_unserved_unserved, sim_served_unserved : numpy.ndarray
        The permuted counts.
    """

    n: int
    served_areas: int
    joins: float
    served_served: float
    unserved_unserved: float
    served_unserved: float
    expected_served_served: float
    expected_unserved_unserved: float
    expected_served_unserved: float
    variance_served_served: float
    variance_unserved_unserved: float
    variance_served_unserved: float
    z_served_served: float
    z_unserved_unserved: float
    z_served_unserved: float
    permutations: int
    p_sim_served_served: float
    p_sim_unserved_unserved: float
    p_sim_served_unserved: float
    sim_served_served: np.ndarray = field(repr=False)
    sim_unserved_unserved: np.ndarray = field(repr=False)
    sim_served_unserved: np.ndarray = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (NaN as ``None``)."""
        keys = (
            "served_served",
            "unserved_unserved",
            "served_unserved",
            "joins",
            "expected_served_served",
            "expected_unserved_unserved",
            "expected_served_unserved",
            "variance_served_served",
            "variance_unserved_unserved",
            "variance_served_unserved",
            "z_served_served",
            "z_unserved_unserved",
            "z_served_unserved",
            "p_sim_served_served",
            "p_sim_unserved_unserved",
            "p_sim_served_unserved",
        )
        out: dict[str, Any] = {k: clean_number(getattr(self, k)) for k in keys}
        out.update(
            n=int(self.n), served_areas=int(self.served_areas), permutations=self.permutations
        )
        return out


@dataclass(frozen=True)
class BivariateMoranResult:
    """Bivariate Moran's I of ``x`` against the spatial lag of ``y``.

    Attributes
    ----------
    x_variable, y_variable : str or None
        Names of the two variables.
    n : int
        Areas in the statistic.
    I : float
        ``sum_i zx_i (W zy)_i / n`` with ``zx``, ``zy`` standardised (population sd).
    permutations : int
        Random permutations of ``y``.
    EI_sim, z_sim, p_sim : float
        Mean of the permutation null, the z-value against it and the folded pseudo p.
    sim : numpy.ndarray
        The permuted statistics.
    """

    x_variable: str | None
    y_variable: str | None
    n: int
    I: float  # noqa: E741 - the published symbol
    permutations: int
    EI_sim: float
    z_sim: float
    p_sim: float
    sim: np.ndarray = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (NaN as ``None``)."""
        return {
            "x_variable": self.x_variable,
            "y_variable": self.y_variable,
            "I": clean_number(self.I),
            "expected_sim": clean_number(self.EI_sim),
            "z_sim": clean_number(self.z_sim),
            "p_sim": clean_number(self.p_sim),
            "permutations": int(self.permutations),
            "n": int(self.n),
        }


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
    fdr: str
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


def moran(
    y: ArrayLike,
    graph: AreaGraph | Graph | sp.spmatrix | sp.sparray,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    variable: str | None = None,
) -> MoranResult:
    """Global Moran's I with row-standardised weights.

    Parameters
    ----------
    y : array_like of float
        One value per area (see the module docstring for the alignment).
    graph : AreaGraph, libpysal.graph.Graph or scipy sparse matrix
        Spatial weights; row-standardised here.
    permutations : int
        Random permutations for the pseudo p-value (0 skips the test).
    rng : numpy.random.Generator
        Source of the permutations; required when ``permutations > 0``.
    variable : str, optional
        Name of ``y``, used in messages and in the result.

    Returns
    -------
    MoranResult

    Notes
    -----
    ``I = (n / S0) z'Wz / z'z`` with ``z`` the deviations from the mean; the moments under
    normality and under randomisation are those of Cliff and Ord (1981, *Spatial
    Processes*, ch. 1), with ``S0``, ``S1``, ``S2`` the usual weight sums and the
    randomisation variance using the sample kurtosis. ``p_norm`` and ``p_rand`` are
    one-sided, in the direction of the z-value, ``P(Z >= |z|)`` (esda's ``Moran`` with
    ``two_tailed=False``); ``p_norm_two_sided`` and ``p_rand_two_sided`` double them.
    This is the one convention of every Moran p-value in summary.json.

    The pseudo p-value is folded as in esda's ``Moran``: with ``P`` permutations,
    ``p_sim = (1 + min(#{I* >= I}, #{I* <= I})) / (P + 1)``, the tail on the side of the
    observed value. It is the upper tail whenever I is above the median of the null
    (in practice whenever I > EI). Simulated values within a relative ``1e-9`` of I count
    in both tails.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> ring = sp.csr_matrix(np.roll(np.eye(6), 1, axis=1) + np.roll(np.eye(6), -1, axis=1))
    >>> moran(np.array([1.0, 0, 1, 0, 1, 0]), ring, permutations=0).I
    -1.0
    """
    _check_permutations(permutations, rng)
    weights = _resolve_weights(graph, _length(y), what="y" if variable is None else variable)
    values = _values(y, variable or "y", weights)
    return _moran(values, weights.row, permutations, rng, variable)


def join_counts(
    served: ArrayLike,
    graph: AreaGraph | Graph | sp.spmatrix | sp.sparray,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
) -> JoinCountResult:
    """Count the served / unserved joins on binary weights and test them.

    Parameters
    ----------
    served : array_like of bool (or 0/1)
        Whether each area is served.
    graph : AreaGraph, libpysal.graph.Graph or scipy sparse matrix
        Spatial weights; every positive weight counts as one link.
    permutations : int
        Random permutations of the served flags (0 skips the test).
    rng : numpy.random.Generator
        Source of the permutations; required when ``permutations > 0``.

    Returns
    -------
    JoinCountResult

    Notes
    -----
    With ``J`` joins, ``n`` areas and ``n1`` of them served, the expectations under random
    placement of the served areas without replacement (non-free sampling; Cliff and Ord
    1981, *Spatial Processes*, section 1.5) are ``E[BB] = J n1(n1-1) / (n(n-1))``,
    ``E[WW] = J n0(n0-1) / (n(n-1))`` and ``E[BW] = 2J n1 n0 / (n(n-1))``. The variances
    are Cliff and Ord's non-free-sampling formulas in ``S0``, ``S1``, ``S2`` and falling
    factorials ``n^(b) = n(n-1)...(n-b+1)``.

    esda's ``Join_Counts`` reports the upper tail for BW; here the BW tail is the lower
    one, so that each of the three p-values tests clustering.
    """
    _check_permutations(permutations, rng)
    weights = _resolve_weights(graph, _length(served), what="served")
    flags = _binary(served, "served", weights)
    return _join_counts(flags, weights.binary, permutations, rng)


def bivariate_moran(
    x: ArrayLike,
    y: ArrayLike,
    graph: AreaGraph | Graph | sp.spmatrix | sp.sparray,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    x_variable: str | None = None,
    y_variable: str | None = None,
) -> BivariateMoranResult:
    """Bivariate Moran's I of ``x`` against the spatial lag of ``y``.

    Parameters
    ----------
    x, y : array_like of float
        One value each per area; ``x`` is the focal variable (minority share) and ``y``
        the lagged one (covered fraction).
    graph : AreaGraph, libpysal.graph.Graph or scipy sparse matrix
        Spatial weights; row-standardised here.
    permutations : int
        Random permutations of ``y`` (0 skips the test).
    rng : numpy.random.Generator
        Source of the permutations; required when ``permutations > 0``.
    x_variable, y_variable : str, optional
        Names of the two variables.

    Returns
    -------
    BivariateMoranResult

    Notes
    -----
    Anselin, Syabri and Smirnov (2002), "Visualizing multivariate spatial correlation with
    dynamically linked windows": ``I_B = sum_i zx_i (W zy)_i / n`` with both variables
    standardised. The null permutes ``y`` over the areas and keeps ``x`` in place, as
    esda's ``Moran_BV`` does; the pseudo p-value is folded as in :func:`moran`. A
    negative ``I_B`` says that areas of high minority share sit among areas of low
    coverage.
    """
    _check_permutations(permutations, rng)
    weights = _resolve_weights(graph, _length(x), what=x_variable or "x")
    xv = _values(x, x_variable or "x", weights)
    yv = _values(y, y_variable or "y", weights)
    return _bivariate_moran(xv, yv, weights.row, permutations, rng, x_variable, y_variable)


def local_moran(
    y: ArrayLike,
    graph: AreaGraph | Graph | sp.spmatrix | sp.sparray,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    fdr: str = "bh",
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
    _check_alpha(alpha)
    _check_permutations(permutations, rng)
    if permutations < 1:
        raise SpecError(
            f"permutations was {permutations} but local Moran needs at least 1 (999 is usual)"
        )
    weights = _resolve_weights(graph, _length(y), what=variable or "y")
    values = _values(y, variable or "y", weights)
    assert rng is not None  # checked by _check_permutations
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
    mm = _aligned_flags(majority_minority, n, "majority_minority")
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
    fdr: str = "bh",
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
    _check_alpha(alpha)
    _check_permutations(permutations, rng)
    if permutations < 1:
        raise SpecError(f"permutations was {permutations} but must be at least 1 (999 is usual)")
    assert rng is not None
    weights = _resolve_weights(graph, graph.n, what="the clustering statistics")
    mask = weights.mask
    assert mask is not None
    fraction = _values(covered_fraction, "covered_fraction", weights)
    flags = _binary(served, "served", weights)
    share_full = _aligned_floats(minority_share, graph.n, "minority_share")
    mm_full = _aligned_flags(majority_minority, graph.n, "majority_minority")
    pop_full = _aligned_floats(population, graph.n, "population")

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
        _warn(f"minority share is defined for only {share_in.size} linked areas")
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


# --------------------------------------------------------------------------- validation


@dataclass(frozen=True)
class _Weights:
    """Weights over the areas in the statistic, and where those sit in the input."""

    binary: sp.csr_matrix
    row: sp.csr_matrix
    mask: np.ndarray | None  # positions of the input taking part; None: all of them
    n_input: int


def _check_permutations(permutations: Any, rng: Any) -> None:
    if isinstance(permutations, bool) or not isinstance(permutations, numbers.Integral):
        raise SpecError(f"permutations was {permutations!r} but must be a whole number")
    if int(permutations) < 0:
        raise SpecError(f"permutations was {permutations} but must be 0 or more")
    if int(permutations) > 0 and not isinstance(rng, np.random.Generator):
        raise SpecError(
            f"rng was {type(rng).__name__} but permutations need a numpy.random.Generator; "
            "pass rng=numpy.random.default_rng(seed)"
        )


def _check_alpha(alpha: Any) -> None:
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not 0 < float(alpha) < 1:
        raise SpecError(f"alpha was {alpha!r} but must be a number strictly between 0 and 1")


def _length(values: ArrayLike) -> int:
    return int(np.asarray(values).size)


def _resolve_weights(graph: Any, n_values: int, *, what: str) -> _Weights:
    """Binary and row-standardised weights over the areas taking part."""
    mask = None
    if isinstance(graph, AreaGraph):
        if n_values != graph.n:
            raise AnalysisError(
                f"{what} has {n_values} values but the AreaGraph has {graph.n} areas; give "
                "one value per area, in the graph's order"
            )
        mask = np.asarray(graph.stats_mask, dtype=bool)
        matrix = graph.stats_adjacency
        n_input = graph.n
    elif isinstance(graph, Graph):
        matrix = graph.sparse
        n_input = matrix.shape[0]
    elif sp.issparse(graph):
        matrix = graph
        n_input = matrix.shape[0]
    else:
        raise AnalysisError(
            f"weights were a {type(graph).__name__}; give an AreaGraph, a libpysal Graph or "
            "a square scipy sparse matrix"
        )
    matrix = sp.csr_matrix(matrix, dtype=np.float64)
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
    arr = _aligned_floats(values, weights.n_input, name)
    if weights.mask is not None:
        arr = arr[weights.mask]
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        raise AnalysisError(
            f"{name} must be finite in every area of the statistic; {bad.size} value(s) are "
            f"missing or infinite (first at statistic position {int(bad[0])})"
        )
    return arr


def _aligned_floats(values: ArrayLike, n: int, name: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"{name} must be numeric ({exc})") from None
    if arr.ndim != 1 or arr.size != n:
        raise AnalysisError(f"{name} has shape {arr.shape} but one value per area ({n}) is needed")
    return arr


def _aligned_flags(values: ArrayLike, n: int, name: str) -> np.ndarray:
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.size != n:
        raise AnalysisError(f"{name} has shape {arr.shape} but one flag per area ({n}) is needed")
    if arr.dtype == bool:
        return arr
    try:
        num = arr.astype(np.float64)
    except (TypeError, ValueError):
        raise AnalysisError(f"{name} must be true/false (or 0/1)") from None
    bad = np.flatnonzero((num != 0) & (num != 1))
    if bad.size:
        raise AnalysisError(
            f"{name} must be true/false (or 0/1); position {int(bad[0])} is {arr[bad[0]]!r}"
        )
    return num == 1


def _binary(values: ArrayLike, name: str, weights: _Weights) -> np.ndarray:
    flags = _aligned_flags(values, weights.n_input, name)
    return flags[weights.mask] if weights.mask is not None else flags


def _warn(message: str) -> None:
    warnings.warn(message, DegenerateStatisticWarning, stacklevel=3)


def _is_constant(values: np.ndarray) -> bool:
    return bool(np.ptp(values) <= 1e-14 * max(1.0, float(np.abs(values).max())))


# --------------------------------------------------------------------------- permutations


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


# --------------------------------------------------------------------------- statistics


def _one_sided_normal_p(z: float) -> float:
    if not math.isfinite(z):
        return math.nan
    return float(stats.norm.sf(z) if z > 0 else stats.norm.cdf(z))


def two_sided_normal_p(z: float) -> float:
    """Return ``2 P(Z >= |z|)`` for a standard normal Z (NaN for a z that is not finite)."""
    if not math.isfinite(z):
        return math.nan
    return float(2.0 * stats.norm.sf(abs(z)))


def moran_moments(y: np.ndarray, weights: sp.spmatrix) -> MoranResult:
    """Moran's I with its analytic moments under the weights exactly as given.

    The one implementation of Moran's I behind :func:`moran` (which row-standardises and
    aligns first) and the residual Moran of :mod:`coverage_audit.explain`. No permutations;
    a constant ``y`` gives NaN figures with a :class:`DegenerateStatisticWarning`.
    """
    return _moran(np.asarray(y, dtype=float), sp.csr_matrix(weights, dtype=float), 0, None, None)


def _weight_sums(row: sp.csr_matrix) -> tuple[float, float, float]:
    """S0, S1, S2 of Cliff and Ord (1981) for a weights matrix."""
    s0 = float(row.sum())
    sym = row + row.T
    s1 = 0.5 * float(sym.multiply(sym).sum())
    s2 = float(
        ((np.asarray(row.sum(axis=1)).ravel() + np.asarray(row.sum(axis=0)).ravel()) ** 2).sum()
    )
    return s0, s1, s2


def _moran(
    y: np.ndarray,
    row: sp.csr_matrix,
    permutations: int,
    rng: np.random.Generator | None,
    variable: str | None,
) -> MoranResult:
    n = y.size
    if _is_constant(y):
        _warn(f"{variable or 'the variable'} is constant, so Moran's I is undefined")
        return _empty_moran(variable, n, permutations)
    z = y - y.mean()
    z2ss = float(z @ z)
    s0, s1, s2 = _weight_sums(row)
    scale = n / s0 / z2ss
    observed = float(scale * (z @ (row @ z)))
    ei = -1.0 / (n - 1)
    # Cliff and Ord (1981), moments of I under normality and under randomisation.
    vi_norm = (n * n * s1 - n * s2 + 3 * s0 * s0) / ((n - 1) * (n + 1) * s0 * s0) - ei * ei
    if n > 3:
        kurtosis = float((z**4).sum() / n / (z2ss / n) ** 2)
        a = n * ((n * n - 3 * n + 3) * s1 - n * s2 + 3 * s0 * s0)
        b = kurtosis * ((n * n - n) * s1 - 2 * n * s2 + 6 * s0 * s0)
        vi_rand = (a - b) / ((n - 1) * (n - 2) * (n - 3) * s0 * s0) - ei * ei
    else:
        _warn("the variance of Moran's I under randomisation needs at least 4 areas")
        vi_rand = math.nan
    z_norm = (observed - ei) / math.sqrt(vi_norm) if vi_norm > 0 else math.nan
    z_rand = (observed - ei) / math.sqrt(vi_rand) if vi_rand > 0 else math.nan
    sim = np.empty(0)
    if permutations:
        assert rng is not None
        sim = np.concatenate(
            [scale * _quadratic_forms(row, b) for b in _permutation_blocks(z, permutations, rng)]
        )
    ei_sim, z_sim, p_sim = _sim_summary(sim, observed)
    return MoranResult(
        variable=variable,
        n=n,
        I=observed,
        EI=ei,
        VI_norm=vi_norm,
        z_norm=z_norm,
        p_norm=_one_sided_normal_p(z_norm),
        VI_rand=vi_rand,
        z_rand=z_rand,
        p_rand=_one_sided_normal_p(z_rand),
        permutations=int(permutations),
        EI_sim=ei_sim,
        z_sim=z_sim,
        p_sim=p_sim,
        sim=sim,
    )


def _empty_moran(variable: str | None, n: int, permutations: int) -> MoranResult:
    nan = math.nan
    return MoranResult(
        variable=variable,
        n=n,
        I=nan,
        EI=-1.0 / (n - 1) if n > 1 else nan,
        VI_norm=nan,
        z_norm=nan,
        p_norm=nan,
        VI_rand=nan,
        z_rand=nan,
        p_rand=nan,
        permutations=int(permutations),
        EI_sim=nan,
        z_sim=nan,
        p_sim=nan,
        sim=np.empty(0),
    )


def _falling(n: int, b: int) -> float:
    """Falling factorial ``n (n-1) ... (n-b+1)`` (0 when ``n < b``)."""
    return float(math.prod(range(n - b + 1, n + 1))) if n >= b else 0.0


def _ratio(n1: int, n: int, b: int) -> float:
    """``n1^(b) / n^(b)``: chance that ``b`` given areas are all of a class of ``n1``."""
    return _falling(n1, b) / _falling(n, b) if n1 >= b else 0.0


def _join_moments(
    n1: int, n0: int, s0: float, s1: float, s2: float
) -> tuple[float, float, float, float, float, float]:
    """E and Var of BB, WW and BW under non-free sampling (Cliff and Ord 1981, section 1.5)."""
    n = n1 + n0

    def same(k: int) -> tuple[float, float]:
        mean = 0.5 * s0 * _ratio(k, n, 2)
        var = (
            0.25
            * (
                s1 * _ratio(k, n, 2)
                + (s2 - 2 * s1) * _ratio(k, n, 3)
                + (s0 * s0 + s1 - s2) * _ratio(k, n, 4)
            )
            - mean * mean
        )
        return mean, var

    e_bb, v_bb = same(n1)
    e_ww, v_ww = same(n0)
    n2, n3, n4 = _falling(n, 2), _falling(n, 3), _falling(n, 4)
    e_bw = s0 * n1 * n0 / n2
    v_bw = (
        0.25
        * (
            2 * s1 * n1 * n0 / n2
            + ((s2 - 2 * s1) * n1 * n0 * (n1 + n0 - 2) / n3 if n3 else 0.0)
            + (4 * (s0 * s0 + s1 - s2) * _falling(n1, 2) * _falling(n0, 2) / n4 if n4 else 0.0)
        )
        - e_bw * e_bw
    )
    return e_bb, e_ww, e_bw, v_bb, v_ww, v_bw


def _join_counts(
    served: np.ndarray,
    binary: sp.csr_matrix,
    permutations: int,
    rng: np.random.Generator | None,
) -> JoinCountResult:
    n = served.size
    y = served.astype(np.float64)
    n1 = int(served.sum())
    n0 = n - n1
    degree = np.asarray(binary.sum(axis=1)).ravel() + np.asarray(binary.sum(axis=0)).ravel()
    joins = 0.5 * float(binary.sum())

    def counts(yy: np.ndarray, bb: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # y'B(1-y) + (1-y)'By = y'(d_out + d_in) - 2 y'By, halved: mixed joins.
        bw = 0.5 * (degree @ yy) - 2 * bb
        return bw, joins - bb - bw

    bb = 0.5 * float(y @ (binary @ y))
    bw, ww = (float(v) for v in counts(y, np.asarray(bb)))
    s0, s1, s2 = _weight_sums(binary)
    e_bb, e_ww, e_bw, v_bb, v_ww, v_bw = _join_moments(n1, n0, s0, s1, s2)

    def zval(obs: float, mean: float, var: float) -> float:
        return (obs - mean) / math.sqrt(var) if var > 1e-12 * max(1.0, mean * mean) else math.nan

    sim_bb = sim_ww = sim_bw = np.empty(0)
    p_bb = p_ww = p_bw = math.nan
    if n1 == 0 or n0 == 0:
        _warn(
            f"{'no' if n1 == 0 else 'every'} area is served, so the join counts carry no "
            "information about clustering"
        )
    elif permutations:
        assert rng is not None
        blocks = []
        for block in _permutation_blocks(y, permutations, rng):
            sbb = 0.5 * _quadratic_forms(binary, block)
            sbw, sww = counts(block, sbb)
            blocks.append((sbb, sww, sbw))
        sim_bb, sim_ww, sim_bw = (np.concatenate(part) for part in zip(*blocks, strict=True))
        denom = permutations + 1.0
        # Counts are sums of ones and halves, so comparisons are exact.
        p_bb = float(np.count_nonzero(sim_bb >= bb) + 1.0) / denom
        p_ww = float(np.count_nonzero(sim_ww >= ww) + 1.0) / denom
        p_bw = float(np.count_nonzero(sim_bw <= bw) + 1.0) / denom
    degenerate = n1 == 0 or n0 == 0
    return JoinCountResult(
        n=n,
        served_areas=n1,
        joins=joins,
        served_served=bb,
        unserved_unserved=ww,
        served_unserved=bw,
        expected_served_served=e_bb,
        expected_unserved_unserved=e_ww,
        expected_served_unserved=e_bw,
        variance_served_served=v_bb,
        variance_unserved_unserved=v_ww,
        variance_served_unserved=v_bw,
        z_served_served=math.nan if degenerate else zval(bb, e_bb, v_bb),
        z_unserved_unserved=math.nan if degenerate else zval(ww, e_ww, v_ww),
        z_served_unserved=math.nan if degenerate else zval(bw, e_bw, v_bw),
        permutations=int(permutations),
        p_sim_served_served=p_bb,
        p_sim_unserved_unserved=p_ww,
        p_sim_served_unserved=p_bw,
        sim_served_served=sim_bb,
        sim_unserved_unserved=sim_ww,
        sim_served_unserved=sim_bw,
    )


def _standardise(values: np.ndarray) -> np.ndarray:
    return (values - values.mean()) / values.std()


def _bivariate_moran(
    x: np.ndarray,
    y: np.ndarray,
    row: sp.csr_matrix,
    permutations: int,
    rng: np.random.Generator | None,
    x_variable: str | None,
    y_variable: str | None,
) -> BivariateMoranResult:
    n = x.size
    constant = [
        name or "a variable" for name, v in ((x_variable, x), (y_variable, y)) if _is_constant(v)
    ]
    if constant:
        verb = "is" if len(constant) == 1 else "are"
        _warn(f"{' and '.join(constant)} {verb} constant, so the bivariate Moran's I is undefined")
        return _empty_bivariate(x_variable, y_variable, n, permutations)
    zx, zy = _standardise(x), _standardise(y)
    # Anselin, Syabri and Smirnov (2002): I_B = zx' W zy / n (S0 = n when row-standardised).
    scale = 1.0 / float(row.sum())
    observed = float(scale * (zx @ (row @ zy)))
    sim = np.empty(0)
    if permutations:
        assert rng is not None
        sim = np.concatenate(
            [scale * (zx @ (row @ block)) for block in _permutation_blocks(zy, permutations, rng)]
        )
    ei_sim, z_sim, p_sim = _sim_summary(sim, observed)
    return BivariateMoranResult(
        x_variable=x_variable,
        y_variable=y_variable,
        n=n,
        I=observed,
        permutations=int(permutations),
        EI_sim=ei_sim,
        z_sim=z_sim,
        p_sim=p_sim,
        sim=sim,
    )


def _empty_bivariate(
    x_variable: str | None, y_variable: str | None, n: int, permutations: int
) -> BivariateMoranResult:
    return BivariateMoranResult(
        x_variable=x_variable,
        y_variable=y_variable,
        n=n,
        I=math.nan,
        permutations=int(permutations),
        EI_sim=math.nan,
        z_sim=math.nan,
        p_sim=math.nan,
        sim=np.empty(0),
    )


# --------------------------------------------------------------------------- local Moran


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
        _warn(f"{variable or 'the variable'} is constant, so local Moran's I is undefined")
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


def _local_result(
    core: _LocalCore,
    mask: np.ndarray | None,
    fdr: str,
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
