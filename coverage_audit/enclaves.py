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
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import scipy.sparse as sp
import shapely
from scipy.sparse.csgraph import connected_components

from ._graph import csr_of_pairs, label_masked, reach
from ._growth import forget, grow_block
from ._util import clean_number, safe_ratio, to_jsonable
from .errors import AnalysisError, SpecError
from .weights import AreaGraph, SharedBoundaries

#: Name of the group whose share the Monte Carlo contrast tests; derived as population minus
#: the reference group when the counts do not include it.
MINORITY = "minority"
#: Tier given to areas whose income tier is missing (a missing figure is not "low").
UNKNOWN_TIER = "unknown"
#: Relative tolerance under which a boundary length left over by subtraction is rounding.
_LENGTH_RTOL = 1e-9
#: Slack on ``surround_share >= min_surround`` so that a share of exactly 3/4 computed in
#: floating point is not missed by one ulp.
_SHARE_ATOL = 1e-12
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


@dataclass(frozen=True)
class FootprintHole:
    """One hole of the footprint (an interior ring) that overlaps populated areas.

    ``population`` and ``group_counts`` are areal-weighted estimates: each overlapping
    area contributes its count times the fraction of its area inside the hole.
    ``area_fractions`` is that fraction for each of ``area_ids``.
    """

    id: str
    area_ids: tuple[str, ...]
    area_fractions: tuple[float, ...]
    population: float
    group_counts: Mapping[str, float]
    group_shares: Mapping[str, float | None]
    hole_area_m2: float
    representative_point: tuple[float, float]
    geometry: Any = field(repr=False, compare=False)

    def to_dict(self) -> dict[str, Any]:
        """Return the hole as JSON-safe data (without the geometry)."""
        return {
            "id": self.id,
            "area_ids": list(self.area_ids),
            "area_fractions": [clean_number(v) for v in self.area_fractions],
            "population": clean_number(self.population),
            "group_counts": to_jsonable(self.group_counts),
            "group_shares": to_jsonable(self.group_shares),
            "hole_area_m2": clean_number(self.hole_area_m2),
            "representative_point": [clean_number(v) for v in self.representative_point],
        }


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


def footprint_holes(
    footprint: Any,
    geometries: np.ndarray | Sequence[Any],
    ids: Sequence[str] | np.ndarray,
    population: np.ndarray | Sequence[float],
    counts: Mapping[str, np.ndarray | Sequence[float]],
    *,
    study_area: Any = None,
) -> tuple[FootprintHole, ...]:
    """Return the holes of a dissolved footprint that overlap populated areas.

    Parameters
    ----------
    footprint : shapely Polygon or MultiPolygon
        The dissolved service footprint in the analysis CRS. Gaps fully enclosed by
        touching service polygons are interior rings once dissolved; an invalid or
        undissolved input (overlapping parts, a GeometryCollection) is dissolved here.
    geometries : array of shapely polygons
        Analysed areas in the same CRS.
    ids : sequence of str
        Area ids, one per geometry.
    population : array of float
        Population of each area.
    counts : mapping of str to array of float
        Group counts by area.
    study_area : shapely geometry, optional
        When given, holes are clipped to it and those outside it are dropped.

    Returns
    -------
    tuple of FootprintHole
        Holes with an estimated population above zero, ranked by that population,
        descending; ties by smallest overlapping area id, then by position.

    Notes
    -----
    A hole is reported even when it lies inside a single area. Its population is the
    areal-weighted (area-proportional) estimate ``sum_i P_i * |h ∩ a_i| / |a_i|``, the
    simplest areal interpolation, which assumes population is spread evenly within each
    area (Goodchild and Lam 1980, *Geo-Processing* 1, 297-312; from memory).
    """
    geoms = _as_geometries(geometries)
    n = geoms.size
    ids_arr = _as_ids(ids, n)
    pop = _as_numbers(population, n, "population")
    groups = {str(g): _as_numbers(v, n, f"counts[{g!r}]") for g, v in counts.items()}
    hole_geoms = _interior_rings(footprint)
    if study_area is not None:
        if not isinstance(study_area, shapely.Geometry):
            raise AnalysisError(
                f"study_area was a {type(study_area).__name__}; pass a shapely polygon"
            )
        hole_geoms = shapely.intersection(hole_geoms, study_area)
        hole_geoms = hole_geoms[shapely.area(hole_geoms) > 0]
    if hole_geoms.size == 0 or n == 0:
        return ()
    tree = shapely.STRtree(geoms)
    hole_idx, area_idx = tree.query(hole_geoms, predicate="intersects")
    overlap = shapely.area(shapely.intersection(hole_geoms[hole_idx], geoms[area_idx]))
    area = shapely.area(geoms[area_idx])
    keep = (overlap > 0) & (area > 0)
    hole_idx, area_idx = hole_idx[keep], area_idx[keep]
    weight = np.minimum(overlap[keep] / area[keep], 1.0)
    n_holes = hole_geoms.size
    est_pop = np.bincount(hole_idx, pop[area_idx] * weight, n_holes)
    est_groups = {
        g: np.bincount(hole_idx, v[area_idx] * weight, n_holes) for g, v in groups.items()
    }
    populated = np.flatnonzero(est_pop > 0)
    if populated.size == 0:
        return ()
    # Pairs come out grouped by hole; sorting by (hole, id) lists each hole's areas by id.
    id_rank = _id_ranks(ids_arr)
    order = np.lexsort((id_rank[area_idx], hole_idx))
    hole_idx, area_idx, weight = hole_idx[order], area_idx[order], weight[order]
    starts = np.searchsorted(hole_idx, np.arange(n_holes + 1))
    smallest = np.full(n_holes, np.iinfo(np.int64).max)
    np.minimum.at(smallest, hole_idx, id_rank[area_idx])
    ranked = populated[np.lexsort((populated, smallest[populated], -est_pop[populated]))]
    points = shapely.get_coordinates(shapely.point_on_surface(hole_geoms[ranked]))
    result = []
    for k, h in enumerate(ranked):
        span = slice(starts[h], starts[h + 1])
        group_counts = {g: float(v[h]) for g, v in est_groups.items()}
        result.append(
            FootprintHole(
                id=f"H{k + 1}",
                area_ids=tuple(ids_arr[area_idx[span]].tolist()),
                area_fractions=tuple(float(w) for w in weight[span]),
                population=float(est_pop[h]),
                group_counts=group_counts,
                group_shares={g: safe_ratio(c, est_pop[h]) for g, c in group_counts.items()},
                hole_area_m2=float(shapely.area(hole_geoms[h])),
                representative_point=(float(points[k, 0]), float(points[k, 1])),
                geometry=hole_geoms[h],
            )
        )
    return tuple(result)


def _interior_rings(footprint: Any) -> np.ndarray:
    """Return the holes of the dissolved footprint as polygons (islands inside removed)."""
    if not isinstance(footprint, shapely.Geometry):
        raise AnalysisError(
            f"footprint was a {type(footprint).__name__}; pass the dissolved footprint as a "
            "shapely Polygon or MultiPolygon"
        )
    if footprint.is_empty:
        return np.empty(0, dtype=object)
    geom = footprint
    if geom.geom_type not in ("Polygon", "MultiPolygon") or not geom.is_valid:
        parts = shapely.get_parts(shapely.get_parts(shapely.make_valid(geom)))
        parts = parts[np.isin(shapely.get_type_id(parts), (3, 6))]
        if parts.size == 0:
            raise AnalysisError(
                f"footprint is a {footprint.geom_type} without polygons; holes need a polygonal "
                "footprint (buffer points and lines first)"
            )
        geom = shapely.union_all(parts)
    polys = shapely.get_parts(geom)
    polys = polys[shapely.get_type_id(polys) == 3]
    rings, owner = shapely.get_rings(polys, return_index=True)
    exterior = np.r_[True, owner[1:] != owner[:-1]] if owner.size else np.zeros(0, dtype=bool)
    holes = shapely.polygons(rings[~exterior])
    if holes.size == 0:
        return np.empty(0, dtype=object)
    # A served island inside a hole is footprint, not hole.
    hole_idx, poly_idx = shapely.STRtree(polys).query(holes, predicate="contains_properly")
    if hole_idx.size:
        for h in np.unique(hole_idx):
            holes[h] = shapely.difference(
                holes[h], shapely.union_all(polys[poly_idx[hole_idx == h]])
            )
    return holes


# --------------------------------------------------------------------------- validation


@dataclass(frozen=True, eq=False)
class _Inputs:
    n: int
    geometries: np.ndarray
    ids: np.ndarray
    served: np.ndarray
    population: np.ndarray
    groups: dict[str, np.ndarray]
    minority: np.ndarray
    minority_given: bool
    contrast_name: str
    reference_group: str
    transparent: np.ndarray
    income_tier: np.ndarray | None


def _validate(
    geometries: Any,
    ids: Any,
    served: Any,
    population: Any,
    counts: Mapping[str, Any],
    graph: AreaGraph,
    transparent: Any,
    income_tier: Any,
    reference_group: str,
    contrast_group: str | None = None,
) -> _Inputs:
    geoms = _as_geometries(geometries)
    n = geoms.size
    ids_arr = _as_ids(ids, n)
    if not isinstance(graph, AreaGraph):
        raise AnalysisError(
            f"graph was a {type(graph).__name__}; build it with weights.build_area_graph"
        )
    if graph.n != n or tuple(ids_arr.tolist()) != graph.ids:
        raise AnalysisError(
            f"graph was built for {graph.n} areas that are not the {n} areas given "
            "(ids or order differ); rebuild it from the same geometries and ids"
        )
    served_arr = _as_mask(served, n, "served")
    pop = _as_numbers(population, n, "population")
    if not isinstance(counts, Mapping) or not counts:
        raise SpecError("counts must be a mapping of group name to counts, with at least one group")
    groups = {str(g): _as_numbers(v, n, f"counts[{g!r}]") for g, v in counts.items()}
    if reference_group not in groups:
        raise SpecError(
            f'reference_group was "{reference_group}" but is expected to be one of '
            f"{sorted(groups)} (the keys of counts)"
        )
    for g, v in groups.items():
        over = np.flatnonzero(v > pop * (1 + 1e-9) + 1e-9)
        if over.size:
            raise AnalysisError(
                f"counts[{g!r}] exceeds population in {over.size} area(s), e.g. area "
                f"{ids_arr[over[0]]}; group counts must be parts of the population"
            )
    if contrast_group is not None and contrast_group not in groups:
        raise SpecError(
            f'contrast_group was "{contrast_group}" but is expected to be one of '
            f"{sorted(groups)} (the keys of counts)"
        )
    contrast = contrast_group or (MINORITY if MINORITY in groups else None)
    minority_given = contrast is not None
    minority = groups[contrast] if contrast is not None else pop - groups[reference_group]
    if transparent is None:
        transparent_arr = np.zeros(n, dtype=bool)
    else:
        transparent_arr = _as_mask(transparent, n, "transparent")
        peopled = np.flatnonzero(transparent_arr & (pop > 0))
        if peopled.size:
            shown = ", ".join(ids_arr[peopled[:5]].tolist())
            raise AnalysisError(
                f"transparent marks {peopled.size} area(s) with population above zero "
                f"({shown}); only zero-population areas (parks, water) can be transparent"
            )
    tiers = None
    if income_tier is not None:
        raw = np.asarray(income_tier, dtype=object).ravel()
        if raw.size != n:
            raise AnalysisError(f"income_tier has {raw.size} values for {n} areas")
        missing = np.array([v is None or (isinstance(v, float) and math.isnan(v)) for v in raw])
        tiers = np.where(missing, UNKNOWN_TIER, raw.astype(str)).astype(object)
    return _Inputs(
        n=n,
        geometries=geoms,
        ids=ids_arr,
        served=served_arr,
        population=pop,
        groups=groups,
        minority=minority,
        minority_given=minority_given,
        contrast_name=contrast if contrast is not None else f"1 - {reference_group}",
        reference_group=reference_group,
        transparent=transparent_arr,
        income_tier=tiers,
    )


def _as_geometries(geometries: Any) -> np.ndarray:
    geoms = np.asarray(geometries, dtype=object).ravel()
    if geoms.size and not np.all(shapely.is_geometry(geoms)):
        bad = int(np.flatnonzero(~shapely.is_geometry(geoms))[0])
        raise AnalysisError(f"geometries[{bad}] is not a shapely geometry; pass area polygons")
    return geoms


def _as_ids(ids: Any, n: int) -> np.ndarray:
    arr = np.asarray([str(i) for i in ids], dtype=object)
    if arr.size != n:
        raise AnalysisError(f"{arr.size} ids were given for {n} geometries")
    uniq, seen = np.unique(arr.astype(str), return_counts=True)
    if np.any(seen > 1):
        raise AnalysisError(
            f'area id "{uniq[seen > 1][0]}" appears more than once; ids must be unique'
        )
    return arr


def _as_numbers(values: Any, n: int, name: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"{name} must be numbers ({exc})") from None
    if arr.size != n:
        raise AnalysisError(f"{name} has {arr.size} values for {n} areas")
    bad = np.flatnonzero(~np.isfinite(arr) | (arr < 0))
    if bad.size:
        raise AnalysisError(
            f"{name} has {bad.size} missing, infinite or negative value(s), first at "
            f"position {bad[0]}; fill or exclude those areas before the enclave stage"
        )
    return arr


def _as_mask(values: Any, n: int, name: str) -> np.ndarray:
    arr = np.asarray(values).ravel()
    if arr.size != n:
        raise AnalysisError(f"{name} has {arr.size} values for {n} areas")
    if arr.dtype != bool:
        raise AnalysisError(f"{name} must be booleans (True/False), got dtype {arr.dtype}")
    return arr


def _is_finite_number(value: Any) -> bool:
    return (
        isinstance(value, (int, float, np.integer, np.floating))
        and not isinstance(value, (bool, np.bool_))
        and math.isfinite(float(value))
    )


def _check_fraction(name: str, value: Any) -> float:
    if not _is_finite_number(value) or not 0.0 <= float(value) <= 1.0:
        raise SpecError(f"{name} was {value!r} but must be a fraction between 0 and 1")
    return float(value)


def _check_draws(mc_draws: Any, rng: Any) -> int:
    if isinstance(mc_draws, (bool, np.bool_)) or not isinstance(mc_draws, (int, np.integer)):
        raise SpecError(f"mc_draws was {mc_draws!r} but must be a whole number >= 0")
    if mc_draws < 0:
        raise SpecError(
            f"mc_draws was {mc_draws} but must be a whole number >= 0 (0 skips the test)"
        )
    if mc_draws > 0 and not isinstance(rng, np.random.Generator):
        raise SpecError(
            "rng must be a numpy.random.Generator (e.g. numpy.random.default_rng(seed)) "
            f"when mc_draws > 0; got {type(rng).__name__}"
        )
    return int(mc_draws)


# --------------------------------------------------------------------------- components


def _masked_components(adjacency: sp.csr_matrix, mask: np.ndarray) -> tuple[np.ndarray, int]:
    """Label the connected components of the areas in ``mask``; -1 elsewhere.

    Labels run in order of each component's first position, so they do not depend on
    the order of the search (compiled breadth-first search, :mod:`._graph`).
    """
    if not mask.any():
        return np.full(mask.size, -1, dtype=np.int64), 0
    labels, count = label_masked(
        adjacency.indptr.astype(np.int64, copy=False),
        adjacency.indices.astype(np.int64, copy=False),
        np.ascontiguousarray(mask, dtype=bool),
    )
    return labels, int(count)


@dataclass(frozen=True, eq=False)
class _Lengths:
    """Boundary budget of each unserved component (arrays indexed by component)."""

    boundary: np.ndarray
    served: np.ndarray
    edge: np.ndarray
    transparent: np.ndarray
    surround: np.ndarray


def _pair_arrays(
    cache: SharedBoundaries, n: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, tuple[np.ndarray, np.ndarray]]:
    """Oriented pairs (both ways), their lengths, the outer-edge lengths and the pairs' CSR.

    Kept on the shared-edge table, so the sweeps build them once for all served sets.
    """
    kept = cache.__dict__.get("_oriented_pairs")
    if kept is not None and kept[3].size == n:
        return kept
    a = cache.pairs["i"].to_numpy(dtype=np.int64)
    b = cache.pairs["j"].to_numpy(dtype=np.int64)
    length = cache.pairs["length"].to_numpy(dtype=np.float64)
    outer_edge = (
        np.zeros(n) if cache.outer_edge is None else np.asarray(cache.outer_edge, dtype=float)
    )
    x = np.concatenate([a, b])
    y = np.concatenate([b, a])
    kept = (x, y, np.concatenate([length, length]), outer_edge, csr_of_pairs(x, y, n))
    cache.__dict__["_oriented_pairs"] = kept
    return kept


def _boundary_budget(
    geoms: np.ndarray,
    adjacency: sp.csr_matrix,
    comp: np.ndarray,
    body: np.ndarray,
    served: np.ndarray,
    n_comp: int,
    n_body: int,
    cache: SharedBoundaries | None = None,
    min_surround: float | None = None,
) -> _Lengths:
    """Split each component's exterior boundary into served, transparent and edge lengths.

    Everything comes from the shared-edge table (``cache``, from
    :meth:`AreaGraph.shared_lengths`, measured once): a component's exterior is the sum
    of its members' edges to non-members plus their stretches of the region's outer edge;
    no union of a component's geometry is ever formed. Edges facing holes of the region
    (gaps inside it, areas left out of the analysis) count neither way. Where a component
    surrounds other areas (a served island), the edges along them are its inner boundary
    and count neither way too, so a large unserved background around scattered served
    sites is never taken for an enclave: such enclosed areas are found on the contiguity
    graph (the areas outside the component that cannot reach the region's outer edge
    without crossing it), only for the components that could reach ``min_surround`` (with
    enclosed areas counted as served the share is an upper bound).
    """
    del geoms  # lengths come from the table
    if n_comp == 0:
        empty = np.zeros(0)
        return _Lengths(empty, empty, empty, empty, empty)
    if cache is None:
        raise AnalysisError("the enclave stage needs the shared-edge table of the graph")
    n = comp.size
    in_comp = comp >= 0
    in_body = body >= 0
    x, y, both, outer_edge, pair_graph = _pair_arrays(cache, n)
    is_served = served & ~in_body

    # Transparent bodies: their exterior, and how much of it is served.
    outer_b: np.ndarray = np.zeros(0)
    served_b: np.ndarray = np.zeros(0)
    if n_body:
        leave = in_body[x] & (body[x] != body[y])
        outer_b = np.bincount(body[x[leave]], both[leave], n_body) + np.bincount(
            body[in_body], outer_edge[in_body], n_body
        )
        sel_b = in_body[x] & is_served[y]
        served_b = np.bincount(body[x[sel_b]], both[sel_b], n_body)
    edge_c = np.bincount(comp[in_comp], outer_edge[in_comp], n_comp)

    def budget(drop: np.ndarray) -> _Lengths:
        # ``drop``: oriented pairs (x in a component, y outside) along an enclosed area.
        use = ~drop
        sel = use & in_comp[x] & is_served[y]
        served_c = np.bincount(comp[x[sel]], both[sel], n_comp)
        look_through: np.ndarray = np.zeros(n_comp)
        along_body: np.ndarray = np.zeros(n_comp)
        sel = use & in_comp[x] & in_body[y]
        if n_body and sel.any():
            key = comp[x[sel]] * n_body + body[y[sel]]
            pair_key, inverse = np.unique(key, return_inverse=True)
            shared_cb = np.bincount(inverse, both[sel], pair_key.size)
            c_of, b_of = pair_key // n_body, pair_key % n_body
            beyond = outer_b[b_of] - shared_cb
            alone = beyond <= _LENGTH_RTOL * np.maximum(outer_b[b_of], 1.0)
            fraction = np.where(alone, 0.0, served_b[b_of] / np.where(alone, 1.0, beyond))
            look_through = np.bincount(c_of, shared_cb * fraction, n_comp)
            # A body touching nothing but the component (a lake inside a pocket) is
            # left out of both sides.
            along_body = np.bincount(c_of[~alone], shared_cb[~alone], n_comp)
        boundary = served_c + along_body + edge_c
        served_total = served_c + look_through
        with np.errstate(divide="ignore", invalid="ignore"):
            surround = np.where(
                boundary > 0,
                np.minimum(served_total / np.where(boundary > 0, boundary, 1.0), 1.0),
                np.nan,
            )
        return _Lengths(
            boundary=boundary,
            served=served_total,
            edge=edge_c,
            transparent=along_body,
            surround=surround,
        )

    first = budget(np.zeros(x.size, dtype=bool))
    threshold = 0.0 if min_surround is None else min_surround - _SHARE_ATOL
    candidates = np.flatnonzero(np.nan_to_num(first.surround, nan=0.0) >= threshold)
    drop = _enclosed_pairs(comp, candidates, x, y, outer_edge, pair_graph)
    if not drop.any():
        return first
    return budget(drop)


def _enclosed_pairs(
    comp: np.ndarray,
    candidates: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    outer_edge: np.ndarray,
    pair_graph: tuple[np.ndarray, np.ndarray] | None = None,
) -> np.ndarray:
    """Mark the oriented pairs (x in C, y outside C) where y is enclosed by component C.

    An area outside C is enclosed by C when, on the graph of shared edges with C's areas
    removed, it cannot reach any area on the region's outer edge. The areas outside every
    component (served and transparent ones) are first grouped into pieces, once: a piece
    on the outer edge is enclosed by nothing, and a piece off it that borders a single
    component is enclosed by that one. Only a piece bordering several components needs
    a search of its own, for each candidate among them. ``pair_graph`` is the CSR
    neighbour list of the oriented pairs (built here when not given).
    """
    drop = np.zeros(x.size, dtype=bool)
    n = comp.size
    if candidates.size == 0 or x.size == 0:
        return drop
    indptr, indices = pair_graph if pair_graph is not None else csr_of_pairs(x, y, n)
    in_comp = comp >= 0
    on_edge = outer_edge > 0
    piece, n_piece = label_masked(indptr, indices, ~in_comp)
    if n_piece == 0:
        return drop
    piece_on_edge = np.bincount(piece[~in_comp & on_edge], minlength=n_piece) > 0
    across = np.flatnonzero(in_comp[x] & ~in_comp[y])
    width = int(comp.max()) + 1
    key = np.unique(piece[y[across]] * width + comp[x[across]])
    key_piece = key // width
    borders = np.bincount(key_piece, minlength=n_piece)
    single = (borders == 1) & ~piece_on_edge
    drop[across] = single[piece[y[across]]]
    shared_pieces = np.flatnonzero((borders > 1) & ~piece_on_edge)
    if shared_pieces.size == 0:
        return drop
    key_comp = key % width
    involved = np.intersect1d(key_comp[np.isin(key_piece, shared_pieces)], candidates)
    if involved.size == 0:
        return drop
    # The pairs leaving each involved component, grouped by component.
    from_comp = comp[x[across]]
    mine = np.isin(from_comp, involved)
    rows = across[mine]
    rows = rows[np.argsort(from_comp[mine], kind="stable")]
    bounds = np.searchsorted(comp[x[rows]], np.append(involved, width))
    for k, c in enumerate(involved):
        # Areas reachable from the outer edge (the world beyond it) without crossing c.
        allowed = comp != c
        reached = reach(indptr, indices, allowed, np.flatnonzero(on_edge & allowed))
        sel = rows[bounds[k] : bounds[k + 1]]
        drop[sel] |= ~reached[y[sel]]
    return drop


def _id_ranks(ids: np.ndarray) -> np.ndarray:
    """Rank of each id in string order (ties impossible: ids are unique)."""
    order = np.argsort(ids.astype(str), kind="stable")
    ranks = np.empty(ids.size, dtype=np.int64)
    ranks[order] = np.arange(ids.size)
    return ranks


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
    for k in range(k_enclaves):
        idx = members.indices[members.indptr[k] : members.indptr[k + 1]]
        share = float(data.minority[idx].sum()) / float(data.population[idx].sum())
        pool = np.flatnonzero(comp_size >= idx.size)
        sets = grow_connected_sets(neighbours, pool, idx.size, mc_draws, rng)
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
    # Members are stored step-major so each step writes one contiguous row; int32 halves
    # the memory traffic of the gathers, which is what bounds this loop.
    members_all = np.empty((size, draws), dtype=np.int32)
    # Padding points at a sentinel column n that is always marked reached, so no mask is
    # needed when reading a row of neighbours.
    table = np.where(neighbours >= 0, neighbours, n).astype(np.int32)
    stride = n + 1
    chunk = int(max(1, min(draws, _SEEN_BUDGET // stride)))
    seen = np.zeros((chunk, stride), dtype=bool)
    seen[:, n] = True
    seen_flat = seen.reshape(-1)
    if grow_block is not None:
        return _grow_compiled(table, pool, size, draws, rng, seen, chunk)
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
_STEP_BLOCK = 256


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
    of ``rng.random(m)``, so drawing a block of steps at once keeps the stream.
    """
    n, width = table.shape[0], table.shape[1]
    # The padded table as CSR, rows in the same order (no padding to step over).
    valid = table < n
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(valid.sum(axis=1), out=indptr[1:])
    indices = np.ascontiguousarray(table[valid])
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
            uniforms = rng.random((steps, m))
            need = min(int(fill.max()) + steps * width, n + width)
            if need > capacity:
                capacity = max(need, min(2 * capacity, n + width))
                grown = np.empty((m, capacity), dtype=np.int32)
                grown[:, : frontier.shape[1]] = frontier
                frontier = grown
            grow_block(indptr, indices, block_seen, frontier, fill, added, members, uniforms, step)
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
