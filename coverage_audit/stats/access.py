"""Capacity-aware accessibility: two-step floating catchment area (2SFCA) and its forms.

Takes origin points (one per analysed area) with their demand (population), service sites
with their capacity, a catchment and a distance-decay rule, and gives each area's access
score, the supply-to-demand ratio of each site, and the figures by group: the
population-weighted mean access, its ratio to the reference group's, the share living
where access falls below a stated fraction of the region's mean, and a concentration
index of access across areas ranked by minority share. Pure numpy/scipy: the pairs within
the catchment come from a :class:`scipy.spatial.cKDTree` (straight lines) or from a
travel-cost table, and both steps are sparse matrix-vector products.

References
----------
Luo, W. and Wang, F. (2003). Measures of spatial accessibility to health care in a GIS
environment. Environment and Planning B 30(6), 865-884 (2SFCA).
Luo, W. and Qi, Y. (2009). An enhanced two-step floating catchment area (E2SFCA) method
for measuring spatial accessibility to primary care physicians. Health & Place 15(4),
1100-1107 (stepped distance-decay weights applied in both steps).
Dai, D. (2010). Black residential segregation, disparities in spatial access to health
care facilities, and late-stage breast cancer diagnosis in metropolitan Detroit.
Health & Place 16(5), 1038-1052 (the Gaussian weight that falls to 0 at the catchment;
from memory).
Kakwani, N., Wagstaff, A. and van Doorslaer, E. (1997). Socioeconomic inequalities in
health: measurement, computation and statistical inference. Journal of Econometrics
77(1), 87-103 (the concentration index as twice a weighted covariance with the
fractional rank, divided by the mean; Wagstaff, van Doorslaer and Paci 1991 for the
index itself; from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

from .._util import clean_number, safe_ratio

#: Decay rules: ``none`` (classic 2SFCA: weight 1 inside the catchment), ``gaussian``
#: (Dai 2010) and ``steps`` (E2SFCA zones with weights, Luo and Qi 2009).
DECAY_KINDS = ("none", "gaussian", "steps")
#: Relative slack of the tree query, so that pairs at exactly the catchment (<=) are
#: never lost to rounding inside the tree; they are then kept on our own distance.
_QUERY_SLACK = 1e-9


@dataclass(frozen=True)
class Decay:
    """A distance-decay rule within the catchment.

    Attributes
    ----------
    kind : {"none", "gaussian", "steps"}
    catchment : float
        Largest cost (metres, or the cost table's unit) at which a site is reached;
        pairs with ``cost <= catchment`` are inside (as in PySAL access' ``max_cost``).
    steps : tuple of (float, float)
        Zone upper edges (same unit as ``catchment``, increasing, the last equal to it)
        and their weights; a cost belongs to the first zone whose edge it does not exceed.
    """

    kind: str
    catchment: float
    steps: tuple[tuple[float, float], ...] = ()

    def __post_init__(self) -> None:
        if self.kind not in DECAY_KINDS:
            raise ValueError(f'decay kind was "{self.kind}" but must be one of {list(DECAY_KINDS)}')
        if not (math.isfinite(self.catchment) and self.catchment > 0):
            raise ValueError(f"catchment must be a positive number, got {self.catchment!r}")
        if self.kind == "steps":
            check_steps(self.steps, self.catchment)

    def weights(self, cost: np.ndarray) -> np.ndarray:
        """Return the weight of each cost (0 beyond the catchment).

        ``none``: 1 for ``cost <= catchment``. ``gaussian``: Dai's (2010) form
        ``(exp(-(d/d0)^2/2) - exp(-1/2)) / (1 - exp(-1/2))``, 1 at the site and 0 at the
        catchment ``d0``. ``steps``: the weight of the first zone whose upper edge is at
        least the cost (edges inclusive, as PySAL access' ``step_fn``).
        """
        cost = np.asarray(cost, dtype=float)
        inside = cost <= self.catchment
        if self.kind == "none":
            return inside.astype(float)
        if self.kind == "gaussian":
            tail = math.exp(-0.5)
            g = (np.exp(-0.5 * (cost / self.catchment) ** 2) - tail) / (1.0 - tail)
            return np.where(inside, g, 0.0)
        edges = np.array([e for e, _ in self.steps], dtype=float)
        values = np.array([w for _, w in self.steps] + [0.0], dtype=float)
        return values[np.searchsorted(edges, cost, side="left")]

    def to_dict(self) -> Any:
        """Return ``"none"``, ``"gaussian"`` or the list of [edge, weight] pairs."""
        if self.kind == "steps":
            return [[clean_number(e), clean_number(w)] for e, w in self.steps]
        return self.kind


def check_steps(steps: Sequence[Sequence[float]], catchment: float) -> None:
    """Check stepped weights: increasing positive edges, the last equal to the catchment.

    Raises
    ------
    ValueError
        Naming the first pair at fault and what is expected.
    """
    if not steps:
        raise ValueError("stepped weights need at least one [edge, weight] pair")
    previous = 0.0
    for k, pair in enumerate(steps):
        if len(pair) != 2:
            raise ValueError(f"pair #{k + 1} must be [edge, weight], got {list(pair)!r}")
        edge, weight = float(pair[0]), float(pair[1])
        if not (math.isfinite(edge) and edge > previous):
            raise ValueError(
                f"zone edges must be positive and increasing; pair #{k + 1} has edge {edge:g} "
                f"after {previous:g}"
            )
        if not (math.isfinite(weight) and 0.0 <= weight <= 1.0):
            raise ValueError(f"pair #{k + 1} has weight {weight:g}; weights lie in [0, 1]")
        previous = edge
    if not math.isclose(previous, catchment, rel_tol=1e-12):
        raise ValueError(
            f"the last zone edge ({previous:g}) must equal the catchment ({catchment:g}), "
            "in the same unit"
        )


@dataclass(frozen=True)
class Pairs:
    """Origin-site pairs within the catchment, with their cost (sparse, COO order)."""

    origin: np.ndarray
    site: np.ndarray
    cost: np.ndarray
    n_origins: int
    n_sites: int


def pairs_within(origins_xy: np.ndarray, sites_xy: np.ndarray, catchment: float) -> Pairs:
    """Return every origin-site pair at straight-line distance ``<= catchment``.

    Parameters
    ----------
    origins_xy, sites_xy : numpy.ndarray
        Coordinates, shape (n, 2), in a projected CRS.
    catchment : float
        Catchment radius in the coordinates' unit (inclusive).

    Returns
    -------
    Pairs
        In the tree's order (the same for the same inputs); ``cost`` is the Euclidean
        distance, computed here so that the inclusive boundary does not depend on the
        tree's rounding.
    """
    origins_xy = np.asarray(origins_xy, dtype=float).reshape(-1, 2)
    sites_xy = np.asarray(sites_xy, dtype=float).reshape(-1, 2)
    n, m = len(origins_xy), len(sites_xy)
    if n == 0 or m == 0:
        empty = np.zeros(0, dtype=np.int64)
        return Pairs(empty, empty.copy(), np.zeros(0), n, m)
    radius = catchment * (1.0 + _QUERY_SLACK)
    found = cKDTree(origins_xy).sparse_distance_matrix(
        cKDTree(sites_xy), radius, output_type="ndarray"
    )
    i = np.asarray(found["i"], dtype=np.int64)
    j = np.asarray(found["j"], dtype=np.int64)
    d = np.hypot(origins_xy[i, 0] - sites_xy[j, 0], origins_xy[i, 1] - sites_xy[j, 1])
    keep = d <= catchment
    return Pairs(i[keep], j[keep], d[keep], n, m)


def pairs_from_costs(
    origin: np.ndarray, site: np.ndarray, cost: np.ndarray, n_origins: int, n_sites: int
) -> Pairs:
    """Return the pairs of a travel-cost table (positions already matched) within reach.

    Costs beyond the catchment are kept here and weighted 0 by :meth:`Decay.weights`;
    pairs absent from the table are beyond the catchment.
    """
    return Pairs(
        np.asarray(origin, dtype=np.int64),
        np.asarray(site, dtype=np.int64),
        np.asarray(cost, dtype=float),
        int(n_origins),
        int(n_sites),
    )


@dataclass(frozen=True)
class AccessScores:
    """Each area's access score and each site's supply-to-demand ratio.

    Attributes
    ----------
    access : numpy.ndarray
        A_i = sum_j W(d_ij) R_j over sites within the catchment (0 where none is).
    site_ratio : numpy.ndarray
        R_j = S_j / sum_k W(d_kj) P_k (0 where no demand lies within the catchment).
    site_demand : numpy.ndarray
        sum_k W(d_kj) P_k, the weighted demand each site serves.
    pairs_within : int
        Pairs with a positive weight.
    areas_without_site : int
        Areas with no site within the catchment (access 0).
    sites_without_demand : int
        Sites with capacity but no weighted demand within the catchment (ratio set to 0).
    """

    access: np.ndarray
    site_ratio: np.ndarray
    site_demand: np.ndarray
    pairs_within: int
    areas_without_site: int
    sites_without_demand: int


def two_step_fca(
    demand: np.ndarray, capacity: np.ndarray, pairs: Pairs, decay: Decay
) -> AccessScores:
    """Two-step floating catchment area access (2SFCA, E2SFCA or Gaussian 2SFCA).

    Parameters
    ----------
    demand : numpy.ndarray
        P_k, the demand (population) at each origin, >= 0.
    capacity : numpy.ndarray
        S_j, the capacity of each site (doctors, beds, lanes), >= 0.
    pairs : Pairs
        Origin-site pairs with their cost; pairs not listed are beyond the catchment.
    decay : Decay
        Weight of a pair by its cost; 0 beyond the catchment.

    Returns
    -------
    AccessScores

    Notes
    -----
    Step 1 (Luo and Wang 2003; weights of Luo and Qi 2009):
    R_j = S_j / sum_{k: d_kj <= d0} W(d_kj) P_k. Step 2: A_i = sum_{j: d_ij <= d0} W(d_ij) R_j.
    With ``decay = none`` W is 1 inside the catchment. A site whose catchment holds no
    demand gets R_j = 0 (PySAL access divides by zero there); an area with no site within
    reach gets A_i = 0 (PySAL access leaves it missing).
    """
    demand = np.asarray(demand, dtype=float)
    capacity = np.asarray(capacity, dtype=float)
    w = decay.weights(pairs.cost)
    positive = w > 0
    matrix = sp.csr_matrix(
        (w[positive], (pairs.origin[positive], pairs.site[positive])),
        shape=(pairs.n_origins, pairs.n_sites),
    )
    site_demand = matrix.T @ demand
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(site_demand > 0, capacity / site_demand, 0.0)
    access = matrix @ ratio
    reached = np.diff(matrix.indptr) > 0
    return AccessScores(
        access=np.asarray(access, dtype=float),
        site_ratio=np.asarray(ratio, dtype=float),
        site_demand=np.asarray(site_demand, dtype=float),
        pairs_within=int(positive.sum()),
        areas_without_site=int((~reached).sum()),
        sites_without_demand=int(((site_demand <= 0) & (capacity > 0)).sum()),
    )


def fractional_rank(rank_by: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted fractional rank in (0, 1): the share of weight ranked below, plus half its own.

    Ties share one rank, that of their block taken as one group (common practice for
    grouped data; from memory).
    """
    rank_by = np.asarray(rank_by, dtype=float)
    weights = np.asarray(weights, dtype=float)
    total = weights.sum()
    order = np.argsort(rank_by, kind="mergesort")
    sorted_key = rank_by[order]
    starts = np.flatnonzero(np.r_[True, sorted_key[1:] != sorted_key[:-1]])
    block_weight = np.add.reduceat(weights[order], starts)
    below = np.r_[0.0, np.cumsum(block_weight)[:-1]]
    block_rank = (below + 0.5 * block_weight) / total
    block_of = np.repeat(np.arange(starts.size), np.diff(np.r_[starts, order.size]))
    out = np.empty_like(rank_by)
    out[order] = block_rank[block_of]
    return out


def concentration_index(
    values: np.ndarray, rank_by: np.ndarray, weights: np.ndarray
) -> float | None:
    """Concentration index of ``values`` across units ranked by ``rank_by``, weighted.

    C = 2 cov_w(h, R) / mu_w(h), with R the weighted fractional rank (Kakwani, Wagstaff
    and van Doorslaer 1997, the "convenient covariance" form; from memory). C lies in
    [-1, 1]; positive when ``values`` are concentrated among units ranked high. Units with
    zero weight or a missing value or rank are left out. ``None`` when the weighted mean
    is 0 or fewer than two units remain.
    """
    h = np.asarray(values, dtype=float)
    r = np.asarray(rank_by, dtype=float)
    w = np.asarray(weights, dtype=float)
    keep = np.isfinite(h) & np.isfinite(r) & np.isfinite(w) & (w > 0)
    if keep.sum() < 2:
        return None
    h, r, w = h[keep], r[keep], w[keep]
    total = w.sum()
    mean = float((w * h).sum() / total)
    if mean == 0:
        return None
    rank = fractional_rank(r, w)
    cov = float((w * (h - mean) * (rank - (w * rank).sum() / total)).sum() / total)
    return 2.0 * cov / mean


@dataclass(frozen=True)
class GroupAccess:
    """Access of one group."""

    population: float
    mean_access: float | None
    ratio: float | None
    share_low_access: float | None

    def to_dict(self) -> dict[str, Any]:
        """Return the group's figures as JSON-safe data."""
        return {
            "population": clean_number(self.population),
            "mean_access": clean_number(self.mean_access),
            "ratio": clean_number(self.ratio),
            "share_low_access": clean_number(self.share_low_access),
        }


@dataclass(frozen=True)
class AccessResult:
    """Access findings: settings, the region's figures and the figures by group."""

    method: str
    catchment: float
    catchment_unit: str
    decay: Decay
    origins: str
    capacity_column: str | None
    reference_group: str
    region_mean: float | None
    low_access_fraction: float
    low_access_threshold: float | None
    groups: Mapping[str, GroupAccess]
    concentration_index: float | None
    concentration_rank: str | None
    sites: int
    total_capacity: float
    scores: AccessScores = field(repr=False)
    costs: Mapping[str, Any] | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return the ``access`` section of summary.json."""
        metres = self.catchment_unit == "m"
        s = self.scores
        out: dict[str, Any] = {
            "method": self.method,
            "catchment_m": clean_number(self.catchment) if metres else None,
            "catchment": clean_number(self.catchment),
            "catchment_unit": self.catchment_unit,
            "decay": self.decay.to_dict(),
            "origins": self.origins,
            "distance": "cost_table" if self.costs is not None else "straight_line",
            "capacity_column": self.capacity_column,
            "sites": self.sites,
            "total_capacity": clean_number(self.total_capacity),
            "reference_group": self.reference_group,
            "region_mean": clean_number(self.region_mean),
            "low_access_fraction": clean_number(self.low_access_fraction),
            "low_access_threshold": clean_number(self.low_access_threshold),
            "groups": {g: v.to_dict() for g, v in self.groups.items()},
            "concentration_index": clean_number(self.concentration_index),
            "concentration_rank": self.concentration_rank,
            "pairs_within": s.pairs_within,
            "areas_without_site": s.areas_without_site,
            "sites_without_demand": s.sites_without_demand,
        }
        if self.costs is not None:
            out["costs"] = dict(self.costs)
        return out


def access_by_group(
    access: np.ndarray,
    population: np.ndarray,
    counts: Mapping[str, np.ndarray],
    reference: str,
    low_access_fraction: float,
) -> tuple[dict[str, GroupAccess], float | None, float | None]:
    """Population-weighted mean access by group, ratio to the reference, low-access shares.

    The region's mean is the population-weighted mean of access over all areas; an area
    has low access when its score is strictly below ``low_access_fraction`` times that
    mean (common practice, no single source).

    Returns
    -------
    groups : dict of GroupAccess
    region_mean : float or None
    threshold : float or None
        ``low_access_fraction * region_mean``.
    """
    access = np.asarray(access, dtype=float)
    population = np.asarray(population, dtype=float)
    total = float(population.sum())
    region_mean = float((population * access).sum() / total) if total > 0 else None
    threshold = None if region_mean is None else low_access_fraction * region_mean
    low = access < threshold if threshold is not None else np.zeros(access.size, dtype=bool)
    means: dict[str, float | None] = {}
    out: dict[str, GroupAccess] = {}
    for g, c in counts.items():
        c = np.asarray(c, dtype=float)
        pop = float(c.sum())
        means[g] = float((c * access).sum() / pop) if pop > 0 else None
    ref = means.get(reference)
    for g, c in counts.items():
        c = np.asarray(c, dtype=float)
        pop = float(c.sum())
        mean = means[g]
        out[g] = GroupAccess(
            population=pop,
            mean_access=mean,
            ratio=safe_ratio(mean, ref) if mean is not None and ref is not None else None,
            share_low_access=(
                float(c[low].sum() / pop) if pop > 0 and threshold is not None else None
            ),
        )
    return out, region_mean, threshold
