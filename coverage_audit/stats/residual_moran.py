"""Moran's I of a model's residuals over the spatial weights, aligned by area id.

Computed by :func:`coverage_audit.stats.moran.moran_moments`, the package's one
implementation of Moran's I; this module only aligns the weights to the modelled rows and
keeps the p-value convention of the global statistic (``p_rand`` one-sided,
``p_rand_two_sided`` beside it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sp

from .._util import to_jsonable
from ..errors import AnalysisError
from ._spatial import WeightsLike, weights_parts
from .moran import MoranResult, moran_moments

#: |z| of residual Moran's I above which the residuals are called spatially clustered.
MORAN_Z_FLAG = 1.96


@dataclass(frozen=True)
class ResidualMoran:
    """Moran's I of a model's Pearson residuals, with its randomisation z-score.

    Attributes
    ----------
    I, EI, VI_rand, z_rand : float
        Moran's I, its expectation ``-1/(n-1)``, variance under randomisation and z-score
        (Cliff and Ord 1981, *Spatial Processes*, ch. 2).
    p_rand : float
        One-sided normal p-value in the direction of z, ``P(Z >= |z_rand|)``: the same
        meaning as the global Moran's ``p_rand`` (:class:`~coverage_audit.clustering.MoranResult`).
        Until this convention was fixed the key held the two-sided value.
    p_rand_two_sided : float
        ``2 P(Z >= |z_rand|)``, the p-value that matches the ``|z_rand| > 1.96`` screen.
    n : int
        Areas in the statistic (fitted areas that appear in the weights).
    space_not_accounted_for : bool
        ``|z_rand| > 1.96``: the residuals are spatially clustered, so the model leaves
        a spatial pattern unexplained and its standard errors are likely too small.
    """

    I: float  # noqa: E741 - the textbook symbol
    EI: float
    VI_rand: float
    z_rand: float
    p_rand: float
    n: int
    space_not_accounted_for: bool
    p_rand_two_sided: float = math.nan

    def to_dict(self) -> dict[str, Any]:
        """Return the statistic as JSON-safe data."""
        return to_jsonable(
            {
                "residuals": "pearson",
                "I": self.I,
                "EI": self.EI,
                "VI_rand": self.VI_rand,
                "z_rand": self.z_rand,
                "p_rand": self.p_rand,
                "p_rand_two_sided": self.p_rand_two_sided,
                "n": self.n,
                "space_not_accounted_for": self.space_not_accounted_for,
            }
        )


def _resolve_weights(
    weights: WeightsLike | np.ndarray | None, ids: np.ndarray
) -> tuple[np.ndarray, sp.csr_matrix] | None:
    """Return (table positions of the weight nodes, sparse weights over those nodes)."""
    if weights is None:
        return None
    n = ids.size
    parts = weights_parts(weights)
    node_ids: np.ndarray | None = None
    if parts is None:
        matrix = sp.csr_matrix(weights, dtype=float)
    else:
        matrix = parts.matrix
        if parts.mask is not None:
            node_ids = parts.node_ids
        elif parts.node_ids is not None:
            graph_ids = parts.node_ids
            if set(graph_ids) <= set(ids):
                node_ids = graph_ids
            elif graph_ids.size != n:
                raise AnalysisError(
                    f"the weights graph has {graph_ids.size} nodes whose ids are not area ids, "
                    f"and the table has {n} rows: give a graph indexed by area id or one node "
                    "per row"
                )
    if node_ids is None:
        if matrix.shape != (n, n):
            raise AnalysisError(
                f"the weights matrix is {matrix.shape[0]} x {matrix.shape[1]} but the table has "
                f"{n} "
                "rows; give one row and column per area, in table order"
            )
        return np.arange(n), matrix
    if len(set(ids)) != n:
        raise AnalysisError("area ids repeat, so the weights cannot be aligned by id")
    position = pd.Index(ids).get_indexer(node_ids)
    if (position < 0).any():
        missing = node_ids[position < 0][:5]
        raise AnalysisError(
            f"weights name areas that are not in the table, for example {list(missing)}"
        )
    return position, matrix


def _residual_moran(
    residuals: np.ndarray, keep: np.ndarray, resolved: tuple[np.ndarray, sp.csr_matrix]
) -> ResidualMoran | None:
    position, matrix = resolved
    inside = keep[position]
    sub = matrix[inside][:, inside]
    values = residuals[position[inside]]
    if values.size < 4 or sub.nnz == 0:
        return None
    row_sums = np.asarray(sub.sum(axis=1)).ravel()
    scale = np.divide(1.0, row_sums, out=np.zeros_like(row_sums), where=row_sums > 0)
    sub = sp.diags(scale) @ sub
    result = _randomisation_moran(values, sub)
    if result is None:  # constant residuals: I is undefined
        nan = math.nan
        return ResidualMoran(
            nan, -1.0 / (values.size - 1), nan, nan, nan, int(values.size), False, nan
        )
    z = float(result.z_rand)
    return ResidualMoran(
        I=float(result.I),
        EI=float(result.EI),
        VI_rand=float(result.VI_rand),
        z_rand=z,
        p_rand=result.p_rand,
        n=int(values.size),
        space_not_accounted_for=bool(math.isfinite(z) and abs(z) > MORAN_Z_FLAG),
        p_rand_two_sided=result.p_rand_two_sided,
    )


def _randomisation_moran(values: np.ndarray, weights: sp.spmatrix) -> MoranResult | None:
    """Moran's I of ``values`` by :func:`~coverage_audit.stats.moran.moran_moments`.

    None for constant values (I undefined), without the degenerate-statistic warning: a
    model whose residuals do not vary has nothing spatial left to test. The p-values keep
    the convention of the global statistic, named in its keys: ``p_rand`` one-sided,
    ``p_rand_two_sided`` doubled.
    """
    y = np.asarray(values, dtype=float)
    if y.size and float(np.ptp(y)) == 0.0:
        return None
    return moran_moments(y, weights)


def moran_randomisation(
    values: np.ndarray, weights: sp.spmatrix
) -> tuple[float, float, float, float, float]:
    """Return Moran's I with its moments and z-score under the randomisation hypothesis.

    Parameters
    ----------
    values : numpy.ndarray
        One value per area.
    weights : scipy sparse matrix
        Spatial weights (row-standardised for the usual reading of I), n x n.

    Returns
    -------
    tuple of float
        ``(I, EI, VI_rand, z_rand, p)`` with ``p`` two-sided, ``2 P(Z >= |z_rand|)`` (as
        esda's ``Moran`` gives ``p_rand`` by default). In summary.json the residual Moran
        keeps the project's convention: ``p_rand`` one-sided, ``p_rand_two_sided`` this.

    Notes
    -----
    ``I = (n / S0) z'Wz / z'z``, ``E[I] = -1/(n-1)`` and the randomisation variance with
    the kurtosis ``b2`` of Cliff and Ord (1981, *Spatial Processes*, eq. 1.38; equation
    number from memory), as esda's ``Moran.VI_rand`` computes it. For regression
    residuals this is a screen, not an exact test: it ignores that the residuals are
    estimated. Computed by :func:`coverage_audit.stats.moran.moran_moments`, the one
    implementation of Moran's I.
    """
    result = _randomisation_moran(values, weights)
    if result is None:
        nan = math.nan
        n = np.asarray(values).size
        return nan, -1.0 / (n - 1) if n > 1 else nan, nan, nan, nan
    return (
        float(result.I),
        float(result.EI),
        float(result.VI_rand),
        float(result.z_rand),
        result.p_rand_two_sided,
    )
