"""Join counts of served and unserved areas on binary weights, with analytic and permutation tests."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike

from .._util import clean_number
from ._spatial import (
    WeightsLike,
    _binary,
    _length,
    _permutation_blocks,
    _quadratic_forms,
    _resolve_weights,
)
from ._validate import check_draws, warn_degenerate
from .moran import _weight_sums


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


def join_counts(
    served: ArrayLike,
    graph: WeightsLike,
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
    check_draws(permutations, rng)
    weights = _resolve_weights(graph, _length(served), what="served")
    flags = _binary(served, "served", weights)
    return _join_counts(flags, weights.binary, permutations, rng)


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
        warn_degenerate(
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
