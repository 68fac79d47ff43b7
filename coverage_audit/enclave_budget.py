"""Boundary budget of unserved components, from the shared-edge table.

For each connected component of unserved areas (:func:`_masked_components`), the length
of its exterior boundary split into served, transparent (looked through) and region-edge
stretches, and the surround share, all from the shared-edge lengths measured once per
audit (:meth:`coverage_audit.weights.AreaGraph.shared_lengths`): never from a union of a
component's geometry. Used by :mod:`coverage_audit.enclaves` for the enclave stage and,
once per served set, by the sensitivity sweeps.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ._graph import csr_of_pairs, label_masked, reach
from .errors import AnalysisError
from .weights import SharedBoundaries

#: Relative tolerance under which a boundary length left over by subtraction is rounding.
_LENGTH_RTOL = 1e-9
#: Slack on ``surround_share >= min_surround`` so that a share of exactly 3/4 computed in
#: floating point is not missed by one ulp.
_SHARE_ATOL = 1e-12


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
