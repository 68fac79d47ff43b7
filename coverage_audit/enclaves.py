"""Enclaves: unserved pockets enclosed by a served region, and holes in the footprint.

Takes the analysed areas (geometries in the projected analysis CRS, ids, the ``served``
flag, population and group counts), their :class:`~coverage_audit.weights.AreaGraph` and,
for holes, the dissolved footprint. Gives an :class:`EnclaveResult`: the connected
components of unserved areas, the ones whose outer boundary runs mostly along served areas
(the enclaves, ranked ``E1``, ``E2``, ... by population), each described against its ring
of adjacent served areas and tested by Monte Carlo against random connected sets of the
same size; and the interior rings of the footprint that overlap populated areas (the
holes, ``H1``, ``H2``, ...), with their areal-weighted population. Boundary lengths are
exact shared-edge lengths in metres, never neighbour counts.

The boundary budget lives in :mod:`~coverage_audit.enclave_budget`, the checks of the
inputs in :mod:`~coverage_audit.enclave_checks` and the footprint holes in
:mod:`~coverage_audit.enclave_holes` (their public names are re-exported here).
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ._growth import forget, grow_block, set_sums
from ._util import clean_number, safe_ratio, to_jsonable
from .enclave_budget import _SHARE_ATOL, _boundary_budget, _Lengths, _masked_components

# Re-exported (``as``): callers import these names from here.
from .enclave_checks import MINORITY as MINORITY
from .enclave_checks import UNKNOWN_TIER as UNKNOWN_TIER
from .enclave_checks import (
    _as_mask,
    _as_numbers,
    _check_draws,
    _check_fraction,
    _id_ranks,
    _Inputs,
    _is_finite_number,
    _validate,
)
from .enclave_holes import FootprintHole as FootprintHole
from .enclave_holes import footprint_holes as footprint_holes
from .errors import AnalysisError, SpecError
from .weights import AreaGraph

#: Booleans held at once by the Monte Carlo "already reached" table (draws x areas): 128 MiB
#: holds 999 draws over 130,000 areas in one pass; larger regions are done in chunks.
_SEEN_BUDGET = 1 << 27


@dataclass(frozen=True)
class Enclave:
    """One enclave: an enclosed component of unserved areas and its served ring.

    Shares are fractions of the total population. ``share_difference`` is enclave share
    minus ring share; ``share_ratio`` is enclave share over ring share (``None`` when the
    ring share is zero).
    """

    id: str
    area_ids: tuple[str, ...]
    population: float
    surround_share: float
    boundary_m: float
    served_boundary_m: float
    edge_boundary_m: float
    transparent_boundary_m: float
    group_counts: Mapping[str, float]
    group_shares: Mapping[str, float | None]
    ring_area_ids: tuple[str, ...]
    ring_population: float
    ring_group_counts: Mapping[str, float]
    ring_group_shares: Mapping[str, float | None]
    share_difference: Mapping[str, float | None]
    share_ratio: Mapping[str, float | None]
    income_tiers: Mapping[str, int] | None
    ring_income_tiers: Mapping[str, int] | None
    minority_share: float | None
    mc_mean_minority_share: float | None
    p_value: float | None
    mc_draws: int

    def to_dict(self) -> dict[str, Any]:
        """Return the enclave as JSON-safe data (the output-contract keys and a few more)."""
        out: dict[str, Any] = {
            "id": self.id,
            "area_ids": list(self.area_ids),
            "population": clean_number(self.population),
            "surround_share": clean_number(self.surround_share),
            "boundary_m": clean_number(self.boundary_m),
            "served_boundary_m": clean_number(self.served_boundary_m),
            "edge_boundary_m": clean_number(self.edge_boundary_m),
            "transparent_boundary_m": clean_number(self.transparent_boundary_m),
            "group_counts": to_jsonable(self.group_counts),
            "group_shares": to_jsonable(self.group_shares),
            "ring_area_ids": list(self.ring_area_ids),
            "ring_population": clean_number(self.ring_population),
            "ring_group_counts": to_jsonable(self.ring_group_counts),
            "ring_group_shares": to_jsonable(self.ring_group_shares),
            "share_difference": to_jsonable(self.share_difference),
            "share_ratio": to_jsonable(self.share_ratio),
            "contrast_share": clean_number(self.minority_share),
            "mc_mean_contrast_share": clean_number(self.mc_mean_minority_share),
            "p_value": clean_number(self.p_value),
            "mc_draws": int(self.mc_draws),
        }
        if self.income_tiers is not None:
            out["income_tiers"] = to_jsonable(self.income_tiers)
            out["ring_income_tiers"] = to_jsonable(self.ring_income_tiers)
        return out


@dataclass(frozen=True, eq=False)
class EnclaveResult:
    """Enclaves, footprint holes and the per-area labels of the enclave stage.

    Attributes
    ----------
    enclaves : tuple of Enclave
        Ranked by population, descending; ties by smallest area id.
    holes : tuple of FootprintHole
        Ranked likewise (see :func:`footprint_holes`).
    settings : dict
        ``min_surround``, ``min_population``, ``contiguity``, ``transparent_area_ids``,
        ``mc_draws``, ``transparent_rule``, ``contrast_group``.
    unserved_components : int
        Number of connected components of unserved (non-transparent) areas.
    enclave_id : numpy.ndarray of object
        Enclave id of each area by position, ``None`` where the area is in no enclave.
    component : numpy.ndarray of int
        Unserved-component label of each area by position (0.. in order of first
        position), ``-1`` for served and transparent areas.
    """

    enclaves: tuple[Enclave, ...]
    holes: tuple[FootprintHole, ...]
    settings: Mapping[str, Any]
    unserved_components: int
    enclave_id: np.ndarray
    component: np.ndarray

    def with_holes(self, holes: Sequence[FootprintHole]) -> EnclaveResult:
        """Return a copy of the result carrying ``holes`` (from :func:`footprint_holes`)."""
        return replace(self, holes=tuple(holes))

    def to_dict(self) -> dict[str, Any]:
        """Return the stage's findings as JSON-safe data (the summary.json contract)."""
        return {
            "enclaves": [e.to_dict() for e in self.enclaves],
            "holes": [h.to_dict() for h in self.holes],
            "settings": to_jsonable(self.settings),
            "unserved_components": int(self.unserved_components),
        }


# --------------------------------------------------------------------------- public API


def find_enclaves(
    geometries: np.ndarray | Sequence[Any],
    ids: Sequence[str] | np.ndarray,
    served: np.ndarray | Sequence[bool],
    population: np.ndarray | Sequence[float],
    counts: Mapping[str, np.ndarray | Sequence[float]],
    graph: AreaGraph,
    *,
    min_surround: float = 0.75,
    min_population: float = 0.0,
    transparent: np.ndarray | Sequence[bool] | None = None,
    income_tier: np.ndarray | Sequence[str | None] | None = None,
    reference_group: str,
    mc_draws: int = 999,
    rng: np.random.Generator | None = None,
    holes: Sequence[FootprintHole] = (),
    contrast_group: str | None = None,
) -> EnclaveResult:
    """Find unserved pockets enclosed by served areas and contrast them with their ring.

    Parameters
    ----------
    geometries : array of shapely polygons
        Analysed areas in the projected (metric) analysis CRS, forming a coverage.
    ids : sequence of str
        Area ids, one per geometry, unique.
    served : array of bool
        Whether each area counts as served.
    population : array of float
        Total population of each area (finite, non-negative).
    counts : mapping of str to array of float
        Group counts by area, keyed by group name; must include ``reference_group``.
        A group named ``"minority"`` is used as is; otherwise the minority count is
        population minus the reference group.
    graph : AreaGraph
        Contiguity of the same areas in the same order (its queen/rook rule is used).
    min_surround : float
        Smallest surround share (0..1) at which a component is an enclave.
    min_population : float
        An enclave must have population strictly greater than this.
    transparent : array of bool, optional
        Zero-population areas (parks, water, rail yards) to look through; see Notes.
    income_tier : array of str or None, optional
        Income tier of each area; missing values count as ``"unknown"``.
    reference_group : str
        The comparison group of the audit (a key of ``counts``).
    mc_draws : int
        Random connected sets drawn per enclave for the p-value; 0 skips the test.
    rng : numpy.random.Generator, optional
        Source of randomness of the Monte Carlo test; required when ``mc_draws > 0``.
    holes : sequence of FootprintHole
        Footprint holes to carry in the result (from :func:`footprint_holes`).
    contrast_group : str, optional
        The group whose share the Monte Carlo test contrasts (a key of ``counts``);
        by default ``"minority"`` when given, else population minus the reference.

    Returns
    -------
    EnclaveResult

    Notes
    -----
    *Components.* Unserved, non-transparent areas are grouped into connected components
    under ``graph.adjacency`` restricted to them, so queen and rook contiguity give the
    same components as the spatial statistics: two pockets meeting only at a corner are
    one component under queen and two under rook.

    *Surround share.* For a component C, the outer boundary is the boundary of the union
    of its areas: the sum of its areas' perimeters minus twice the length they share with
    each other. It splits into the length shared with served areas, with transparent
    areas, and the rest, which lies on the edge of the study area (no analysed area on the
    other side) and counts as not served, so a pocket on the region's edge is not called
    enclosed. ``surround_share = served_boundary_m / boundary_m``.

    *Transparent areas (look-through rule).* Transparent areas belong to no component
    and no ring, whatever their served flag; touching transparent areas form one body.
    A stretch of C's boundary along a body B counts as served in proportion to what lies
    beyond B: the fraction
    ``f = served(B) / (outer(B) - shared(B, C))`` of B's own outer boundary, C's stretch
    excluded, that B shares with served areas (B's boundary with other pockets and with
    the study-area edge counts as not served). When B touches nothing but C (a lake
    inside a pocket) the stretch is left out of both numerator and denominator.

    *Monte Carlo contrast.* For an enclave of k areas, each draw grows a random connected
    set of k non-transparent areas: a seed drawn uniformly among areas whose component
    has at least k areas, then k - 1 times an area drawn uniformly from the set's current
    frontier (neighbours not yet in the set). The p-value is the one-sided Monte Carlo
    p-value ``(1 + #{share* >= share}) / (draws + 1)`` (North, Curtis and Sham 2002,
    *Am. J. Hum. Genet.* 71, 439-441; Davison and Hinkley 1997, ch. 4, from memory) of
    the population-weighted minority share; a draw with zero population counts as
    reaching the enclave's share (the conservative choice). Enclaves are tested in rank
    order, so the same inputs and seed give the same p-values.
    """
    data = _validate(
        geometries,
        ids,
        served,
        population,
        counts,
        graph,
        transparent,
        income_tier,
        reference_group,
        contrast_group,
    )
    min_surround = _check_fraction("min_surround", min_surround)
    if not _is_finite_number(min_population) or float(min_population) < 0:
        raise SpecError(f"min_population was {min_population!r} but must be a number >= 0")
    mc_draws = _check_draws(mc_draws, rng)

    n = data.n
    adjacency = graph.adjacency.tocsr()
    unserved = ~data.served & ~data.transparent
    comp, n_comp = _masked_components(adjacency, unserved)
    body, n_body = _masked_components(adjacency, data.transparent)
    lengths = _boundary_budget(
        data.geometries,
        adjacency,
        comp,
        body,
        data.served,
        n_comp,
        n_body,
        cache=graph.shared_lengths(),
        min_surround=min_surround,
    )

    flagged = np.flatnonzero(
        (lengths.surround >= min_surround - _SHARE_ATOL)
        & (np.bincount(comp[unserved], data.population[unserved], n_comp) > min_population)
    )
    ranked = _rank_components(flagged, comp, data.population, data.ids)

    enclave_id = np.full(n, None, dtype=object)
    enclaves: list[Enclave] = []
    if ranked.size:
        rank_of = np.full(n_comp, -1, dtype=np.int64)
        rank_of[ranked] = np.arange(ranked.size)
        member_rank = np.where(comp >= 0, rank_of[np.maximum(comp, 0)], -1)
        in_enclave = member_rank >= 0
        labels = np.array([f"E{k + 1}" for k in range(ranked.size)], dtype=object)
        enclave_id[in_enclave] = labels[member_rank[in_enclave]]
        members = sp.csr_matrix(
            (np.ones(int(in_enclave.sum())), (member_rank[in_enclave], np.flatnonzero(in_enclave))),
            shape=(ranked.size, n),
        )
        ring_served = data.served & ~data.transparent
        ring = (members @ adjacency).tocsr()
        ring = sp.csr_matrix(ring.multiply(ring_served[None, :]))
        ring.eliminate_zeros()
        ring.sort_indices()
        p_values, null_means = _contrast_tests(members, adjacency, data, mc_draws, rng)
        enclaves = [
            _describe(
                label=str(labels[k]),
                member_idx=members.indices[members.indptr[k] : members.indptr[k + 1]],
                ring_idx=ring.indices[ring.indptr[k] : ring.indptr[k + 1]],
                c=int(ranked[k]),
                data=data,
                lengths=lengths,
                p_value=p_values[k],
                null_mean=null_means[k],
                mc_draws=mc_draws,
            )
            for k in range(ranked.size)
        ]

    settings = {
        "min_surround": float(min_surround),
        "min_population": float(min_population),
        "contiguity": graph.kind,
        "transparent_area_ids": sorted(data.ids[data.transparent].tolist()),
        "transparent_rule": "look-through",
        "mc_draws": int(mc_draws),
        "contrast_group": data.contrast_name,
    }
    return EnclaveResult(
        enclaves=tuple(enclaves),
        holes=tuple(holes),
        settings=settings,
        unserved_components=int(n_comp),
        enclave_id=enclave_id,
        component=comp,
    )


def count_enclaves(
    served_sets: Sequence[np.ndarray],
    population: np.ndarray | Sequence[float],
    graph: AreaGraph,
    *,
    min_surround: float = 0.75,
    min_population: float = 0.0,
    transparent: np.ndarray | Sequence[bool] | None = None,
) -> list[int]:
    """Count the enclaves for each of several served flags, in one pass over the graph.

    Gives ``len(find_enclaves(...).enclaves)`` for each entry of ``served_sets`` (same
    components, surround shares and thresholds), without describing or testing them: the
    shared-edge table, the population and the transparent bodies are prepared once and
    each served set costs one component labelling and a few sums over the edge table.
    Used by the sensitivity sweeps.
    """
    min_surround = _check_fraction("min_surround", min_surround)
    if not _is_finite_number(min_population) or float(min_population) < 0:
        raise SpecError(f"min_population was {min_population!r} but must be a number >= 0")
    n = graph.n
    pop = _as_numbers(population, n, "population")
    clear = (
        np.zeros(n, dtype=bool) if transparent is None else _as_mask(transparent, n, "transparent")
    )
    adjacency = graph.adjacency.tocsr()
    cache = graph.shared_lengths()
    body, n_body = _masked_components(adjacency, clear)
    counts = []
    for served in served_sets:
        served_arr = _as_mask(np.asarray(served), n, "served")
        unserved = ~served_arr & ~clear
        comp, n_comp = _masked_components(adjacency, unserved)
        lengths = _boundary_budget(
            np.empty(0, dtype=object),
            adjacency,
            comp,
            body,
            served_arr,
            n_comp,
            n_body,
            cache=cache,
            min_surround=min_surround,
        )
        pop_c = np.bincount(comp[unserved], pop[unserved], n_comp)
        flagged = (lengths.surround >= min_surround - _SHARE_ATOL) & (pop_c > min_population)
        counts.append(int(np.count_nonzero(flagged)))
    return counts


# --------------------------------------------------------------------------- validation


# --------------------------------------------------------------------------- components


def _rank_components(
    flagged: np.ndarray, comp: np.ndarray, population: np.ndarray, ids: np.ndarray
) -> np.ndarray:
    """Order flagged components by population, descending, then by smallest area id."""
    if flagged.size == 0:
        return flagged
    n_comp = int(comp.max()) + 1
    in_comp = comp >= 0
    pop_c = np.bincount(comp[in_comp], population[in_comp], n_comp)
    smallest = np.full(n_comp, np.iinfo(np.int64).max)
    np.minimum.at(smallest, comp[in_comp], _id_ranks(ids)[in_comp])
    return flagged[np.lexsort((smallest[flagged], -pop_c[flagged]))]


# --------------------------------------------------------------------------- description


def _figures(
    idx: np.ndarray, data: _Inputs
) -> tuple[float, dict[str, float], dict[str, float | None]]:
    population = float(data.population[idx].sum())
    group_counts = {g: float(v[idx].sum()) for g, v in data.groups.items()}
    if not data.minority_given:
        group_counts[MINORITY] = float(data.minority[idx].sum())
    shares = {g: safe_ratio(c, population) for g, c in group_counts.items()}
    return population, group_counts, shares


def _tier_counts(idx: np.ndarray, data: _Inputs) -> dict[str, int] | None:
    if data.income_tier is None:
        return None
    tiers, n = np.unique(data.income_tier[idx].astype(str), return_counts=True)
    return {str(t): int(k) for t, k in zip(tiers, n, strict=True)}


def _describe(
    *,
    label: str,
    member_idx: np.ndarray,
    ring_idx: np.ndarray,
    c: int,
    data: _Inputs,
    lengths: _Lengths,
    p_value: float | None,
    null_mean: float | None,
    mc_draws: int,
) -> Enclave:
    population, group_counts, shares = _figures(member_idx, data)
    ring_population, ring_counts, ring_shares = _figures(ring_idx, data)
    difference: dict[str, float | None] = {}
    ratio: dict[str, float | None] = {}
    for g, share in shares.items():
        ring_share = ring_shares[g]
        if share is None or ring_share is None:
            difference[g] = ratio[g] = None
        else:
            difference[g] = share - ring_share
            ratio[g] = safe_ratio(share, ring_share)
    return Enclave(
        id=label,
        area_ids=tuple(sorted(data.ids[member_idx].tolist())),
        population=population,
        surround_share=float(lengths.surround[c]),
        boundary_m=float(lengths.boundary[c]),
        served_boundary_m=float(lengths.served[c]),
        edge_boundary_m=float(lengths.edge[c]),
        transparent_boundary_m=float(lengths.transparent[c]),
        group_counts=group_counts,
        group_shares=shares,
        ring_area_ids=tuple(sorted(data.ids[ring_idx].tolist())),
        ring_population=ring_population,
        ring_group_counts=ring_counts,
        ring_group_shares=ring_shares,
        share_difference=difference,
        share_ratio=ratio,
        income_tiers=_tier_counts(member_idx, data),
        ring_income_tiers=_tier_counts(ring_idx, data),
        minority_share=safe_ratio(float(data.minority[member_idx].sum()), population),
        mc_mean_minority_share=null_mean,
        p_value=p_value,
        mc_draws=mc_draws,
    )


# --------------------------------------------------------------------------- Monte Carlo


def _contrast_tests(
    members: sp.csr_matrix,
    adjacency: sp.csr_matrix,
    data: _Inputs,
    mc_draws: int,
    rng: np.random.Generator | None,
) -> tuple[list[float | None], list[float | None]]:
    """Monte Carlo p-value of each enclave's minority share against random connected sets."""
    k_enclaves = members.shape[0]
    if mc_draws == 0 or rng is None:
        return [None] * k_enclaves, [None] * k_enclaves
    active = np.flatnonzero(~data.transparent)
    sub = adjacency[active][:, active].tocsr()
    neighbours = _neighbour_table(sub)
    _, labels = connected_components(sub, directed=False)
    comp_size = np.bincount(labels)[labels]
    pop = data.population[active]
    minority = data.minority[active]
    p_values: list[float | None] = []
    null_means: list[float | None] = []
    scratch: dict[str, Any] = {}  # tables and buffers shared by the enclaves' draws
    for k in range(k_enclaves):
        idx = members.indices[members.indptr[k] : members.indptr[k + 1]]
        share = float(data.minority[idx].sum()) / float(data.population[idx].sum())
        pool = np.flatnonzero(comp_size >= idx.size)
        sets = grow_connected_sets(neighbours, pool, idx.size, mc_draws, rng, scratch=scratch)
        draw_pop, draw_minority = _set_sums(sets, pop, minority)
        with np.errstate(divide="ignore", invalid="ignore"):
            draw_share = draw_minority / draw_pop
        defined = draw_pop > 0
        # A zero-population draw has no share; counting it as a match keeps p conservative.
        reached = int(np.count_nonzero(~defined | (draw_share >= share - _SHARE_ATOL)))
        p_values.append((1 + reached) / (mc_draws + 1))
        null_means.append(float(draw_share[defined].mean()) if defined.any() else None)
    return p_values, null_means


def _set_sums(
    sets: np.ndarray, pop: np.ndarray, minority: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Return the population and minority count of each drawn set, summed in blocks."""
    if set_sums is not None:
        return set_sums(np.ascontiguousarray(sets), pop, minority)
    rows = max(1, (1 << 22) // max(sets.shape[1], 1))
    draw_pop = np.empty(sets.shape[0])
    draw_minority = np.empty(sets.shape[0])
    for start in range(0, sets.shape[0], rows):
        block = sets[start : start + rows]
        draw_pop[start : start + rows] = pop[block].sum(axis=1)
        draw_minority[start : start + rows] = minority[block].sum(axis=1)
    return draw_pop, draw_minority


def _neighbour_table(adjacency: sp.csr_matrix) -> np.ndarray:
    """Neighbours of each area as a padded table (n x max degree), -1 for no neighbour."""
    degree = np.diff(adjacency.indptr)
    width = max(int(degree.max()) if degree.size else 0, 1)
    table = np.full((adjacency.shape[0], width), -1, dtype=np.int64)
    rows = np.repeat(np.arange(adjacency.shape[0]), degree)
    cols = np.arange(adjacency.indices.size) - np.repeat(adjacency.indptr[:-1], degree)
    table[rows, cols] = adjacency.indices
    return table


def grow_connected_sets(
    neighbours: np.ndarray,
    pool: np.ndarray,
    size: int,
    draws: int,
    rng: np.random.Generator,
    *,
    scratch: dict[str, Any] | None = None,
) -> np.ndarray:
    """Grow ``draws`` random connected sets of ``size`` areas by random frontier growth.

    Parameters
    ----------
    neighbours : numpy.ndarray of int, shape (n, d)
        Padded neighbour table (``-1`` marks no neighbour).
    pool : numpy.ndarray of int
        Areas a set may start from; each must lie in a component of at least ``size``
        areas, so that growth never runs out of frontier.
    size : int
        Areas per set.
    draws : int
        Number of sets.
    rng : numpy.random.Generator
        Source of the seeds and of the frontier picks.
    scratch : dict, optional
        Kept between calls over the same ``neighbours`` (the compiled path's neighbour
        lists and its "already reached" table, left clean after each call).

    Returns
    -------
    numpy.ndarray of int, shape (draws, size)
        Each row lists the areas of one set, in the order they were added.

    Notes
    -----
    All draws grow in step, as arrays: each step picks one frontier slot per draw, moves
    the last frontier entry into it, and appends the picked area's neighbours not yet
    reached (a draws x n boolean table, processed in chunks to bound memory).
    """
    n, width = neighbours.shape
    if pool.size == 0:
        raise AnalysisError(f"no component of the region has {size} areas to draw sets from")
    stride = n + 1
    chunk = int(max(1, min(draws, _SEEN_BUDGET // stride)))
    if grow_block is not None:
        kept = {} if scratch is None else scratch
        if kept.get("neighbours") is not neighbours or kept["seen"].shape != (chunk, stride):
            seen = np.zeros((chunk, stride), dtype=bool)
            seen[:, n] = True
            # Padding points at the sentinel column n, always marked reached.
            padded = np.where(neighbours >= 0, neighbours, n).astype(np.int32)
            kept.update(neighbours=neighbours, table=padded, seen=seen)
        return _grow_compiled(kept["table"], pool, size, draws, rng, kept["seen"], chunk)
    # Members are stored step-major so each step writes one contiguous row; int32 halves
    # the memory traffic of the gathers, which is what bounds this loop.
    members_all = np.empty((size, draws), dtype=np.int32)
    # Padding points at a sentinel column n that is always marked reached, so no mask is
    # needed when reading a row of neighbours.
    table = np.where(neighbours >= 0, neighbours, n).astype(np.int32)
    seen = np.zeros((chunk, stride), dtype=bool)
    seen[:, n] = True
    seen_flat = seen.reshape(-1)
    for start in range(0, draws, chunk):
        m = min(chunk, draws - start)
        rows = np.arange(m, dtype=np.int64)
        base = (rows * stride)[:, None]
        members = members_all[:, start : start + m]
        capacity = min(n, 16 * width)
        frontier = np.empty(m * capacity, dtype=np.int32)
        fill = np.zeros(m, dtype=np.int64)
        added = pool[rng.integers(0, pool.size, m)]
        members[0] = added
        seen_flat[base[:, 0] + added] = True
        for step in range(1, size):
            if int(fill.max()) + width > capacity:
                capacity, frontier = _widen(frontier, m, capacity, n + width)
            # Append the neighbours of the last area added that no earlier step reached.
            reached = np.take(table, added, axis=0)
            flat = base + reached
            new = ~seen_flat[flat]
            seen_flat[flat] = True
            rank = np.add.accumulate(new, axis=1, dtype=np.int64)
            slot = (rows * capacity + fill - 1)[:, None] + rank
            frontier[slot[new]] = reached[new]
            fill += rank[:, -1]
            # Take a uniformly random frontier entry and fill its slot with the last one.
            # floor(u * fill) with u in [0, 1) is below fill for every fill < 2**53.
            pick = rows * capacity + (rng.random(m) * fill).astype(np.int64)
            added = frontier[pick]
            members[step] = added
            frontier[pick] = frontier[rows * capacity + fill - 1]
            fill -= 1
        # Reset only what this chunk touched: the members and the live frontier entries.
        seen_flat[(base + members.T).ravel()] = False
        live = np.arange(capacity)[None, :] < fill[:, None]
        seen_flat[(base + frontier.reshape(m, capacity))[live]] = False
    return members_all.T.astype(np.int64)


#: Steps whose uniform numbers the compiled path draws at once (one block of draws x steps).
_STEP_BLOCK = 1024
#: Steps (set size x draws) from which the draws of a block run on several threads.
_THREADED_STEPS = 2_000_000


def _grow_compiled(
    table: np.ndarray,
    pool: np.ndarray,
    size: int,
    draws: int,
    rng: np.random.Generator,
    seen: np.ndarray,
    chunk: int,
) -> np.ndarray:
    """:func:`grow_connected_sets` with the steps compiled; same calls on ``rng``, same sets.

    The array path draws, per chunk of draws, the seeds and then one uniform number per
    draw and step; ``rng.random((steps, m))`` yields the same numbers as ``steps`` calls
    of ``rng.random(m)``, so drawing a block of steps at once keeps the stream. The draws
    of a block run on all cores (the compiled step releases the GIL; each thread has its
    own rows), which changes no set.
    """
    # Threads only where the work outweighs their cost (and each gets enough draws).
    workers = (
        min(os.cpu_count() or 1, max(1, draws // 64)) if size * draws >= _THREADED_STEPS else 1
    )
    pool_threads = ThreadPoolExecutor(max_workers=workers) if workers > 1 else None
    try:
        return _grow_blocks(table, pool, size, draws, rng, seen, chunk, pool_threads)
    finally:
        if pool_threads is not None:
            pool_threads.shutdown()


def _grow_threads(
    threads: ThreadPoolExecutor | None,
    graph: tuple[np.ndarray, ...],
    rows: tuple[np.ndarray, ...],
    step: int,
) -> None:
    """Run :func:`grow_block` on the draws (rows of every array), split across threads."""
    m = rows[0].shape[0]
    if threads is None:
        grow_block(*graph, *rows, step)
        return
    parts = threads._max_workers  # the pool's own size
    cuts = np.linspace(0, m, parts + 1).astype(int)
    jobs = [
        threads.submit(grow_block, *graph, *[r[lo:hi] for r in rows], step)  # type: ignore[arg-type,call-arg]
        for lo, hi in zip(cuts[:-1], cuts[1:], strict=True)
        if hi > lo
    ]
    for job in jobs:
        job.result()


def _grow_blocks(
    table: np.ndarray,
    pool: np.ndarray,
    size: int,
    draws: int,
    rng: np.random.Generator,
    seen: np.ndarray,
    chunk: int,
    pool_threads: ThreadPoolExecutor | None,
) -> np.ndarray:
    """Grow the sets chunk by chunk of draws, block by block of steps (see the caller)."""
    n, width = table.shape
    members_all = np.empty((draws, size), dtype=np.int32)
    for start in range(0, draws, chunk):
        m = min(chunk, draws - start)
        rows = np.arange(m, dtype=np.int64)
        block_seen = seen[:m]
        members = members_all[start : start + m]
        capacity = min(n, 16 * width) + width
        frontier = np.empty((m, capacity), dtype=np.int32)
        fill = np.zeros(m, dtype=np.int64)
        added = pool[rng.integers(0, pool.size, m)].astype(np.int32)
        members[:, 0] = added
        block_seen[rows, added] = True
        step = 1
        while step < size:
            steps = min(_STEP_BLOCK, size - step)
            # Drawn steps x draws (the array path's order), laid out draw by draw.
            uniforms = np.ascontiguousarray(rng.random((steps, m)).T)
            need = min(int(fill.max()) + steps * width, n + width)
            if need > capacity:
                capacity = max(need, min(2 * capacity, n + width))
                grown = np.empty((m, capacity), dtype=np.int32)
                grown[:, : frontier.shape[1]] = frontier
                frontier = grown
            _grow_threads(
                pool_threads,
                (table,),
                (block_seen, frontier, fill, added, members, uniforms),
                step,
            )
            step += steps
        # Reset only what this chunk touched: the members and the live frontier entries.
        forget(block_seen, members, frontier, fill)
    return members_all


def _widen(frontier: np.ndarray, m: int, capacity: int, limit: int) -> tuple[int, np.ndarray]:
    """Double the per-draw frontier capacity, keeping each draw's entries in place."""
    wider = min(2 * capacity, limit)
    grown = np.empty((m, wider), dtype=frontier.dtype)
    grown[:, :capacity] = frontier.reshape(m, capacity)
    return wider, grown.reshape(-1)
