"""Spatial weights: contiguity between analysed areas, islands, components, shared edges.

Takes the analysed area geometries (in the equal-area analysis CRS) and gives an
:class:`AreaGraph`: the binary queen or rook contiguity built with libpysal's immutable
``Graph``, the islands (areas with no contiguity neighbour) and connected components, and
the weights used by the spatial statistics under the chosen island policy:

- ``"exclude"`` (default): islands take no part in the spatial statistics; the caller
  lists them in exclusions with :data:`ISLAND_REASON`.
- ``"knn"``: each island is joined to its ``k`` nearest areas (by representative point),
  symmetrically, so every area takes part.

Statistics use :meth:`AreaGraph.stats_graph`, row-standardised, over
:attr:`AreaGraph.stats_mask`. Enclave detection uses the plain contiguity
(:attr:`AreaGraph.adjacency`) and exact shared-edge lengths from
:func:`shared_boundary_lengths`, never the k-nearest links.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from functools import cached_property
from typing import get_args

import geopandas as gpd
import numpy as np
import pandas as pd
import scipy.sparse as sp
import shapely
from libpysal.graph import Graph
from scipy.sparse.csgraph import connected_components

from .choices import ContiguityKind, IslandPolicy
from .edges import EDGE_TOLERANCE_M, EdgeTable, edge_table
from .errors import AnalysisError, IslandWarning, SpecError

CONTIGUITY_KINDS: tuple[str, ...] = get_args(ContiguityKind)
ISLAND_POLICIES: tuple[str, ...] = get_args(IslandPolicy)
ISLAND_REASON = "island: no contiguity neighbour, left out of spatial statistics"


@dataclass(frozen=True, eq=False)
class AreaGraph:
    """Contiguity of the analysed areas and the weights the spatial statistics use.

    Attributes
    ----------
    ids : tuple of str
        Area ids, in the order of the geometries given; position ``i`` is area ``i``.
    kind : {"queen", "rook"}
        Contiguity rule.
    adjacency : scipy.sparse.csr_matrix
        Symmetric binary contiguity (1 where two areas are neighbours), n x n.
    islands : tuple of str
        Ids of areas with no contiguity neighbour.
    component_labels : numpy.ndarray
        Connected-component label of each area under contiguity (islands are their own
        components); labels are 0..n_components-1 in order of first appearance.
    island_policy : {"exclude", "knn"}
        How islands enter the spatial statistics.
    knn_k : int
        Neighbours given to each island under the ``"knn"`` policy.
    """

    ids: tuple[str, ...]
    kind: ContiguityKind
    adjacency: sp.csr_matrix
    islands: tuple[str, ...]
    component_labels: np.ndarray
    island_policy: IslandPolicy
    knn_k: int
    _knn_links: sp.csr_matrix = field(repr=False)
    _geometries: np.ndarray | None = field(repr=False, default=None)

    @property
    def n(self) -> int:
        """Number of areas."""
        return len(self.ids)

    @property
    def n_components(self) -> int:
        """Number of connected components under contiguity (islands count as components)."""
        return int(self.component_labels.max()) + 1 if self.n else 0

    @cached_property
    def island_mask(self) -> np.ndarray:
        """Boolean mask of islands, by position."""
        return np.asarray(self.adjacency.sum(axis=1)).ravel() == 0

    @cached_property
    def stats_mask(self) -> np.ndarray:
        """Boolean mask of the areas that take part in the spatial statistics."""
        if self.island_policy == "knn":
            return np.ones(self.n, dtype=bool)
        return ~self.island_mask

    @cached_property
    def stats_adjacency(self) -> sp.csr_matrix:
        """Binary weights of the spatial statistics, restricted to :attr:`stats_mask`."""
        full = self.adjacency
        if self.island_policy == "knn":
            full = ((full + self._knn_links) > 0).astype(np.float64).tocsr()
        keep = np.flatnonzero(self.stats_mask)
        return full[keep][:, keep].tocsr()

    def stats_graph(self, transform: str = "r") -> Graph:
        """Return the libpysal ``Graph`` of the spatial statistics.

        Parameters
        ----------
        transform : str
            libpysal transformation; ``"r"`` (row-standardised, the default and what the
            Moran statistics use) or ``"b"`` (binary, for join counts).

        Returns
        -------
        libpysal.graph.Graph
            Indexed by position within :attr:`stats_mask` (0..m-1).
        """
        graph = Graph.from_sparse(self.stats_adjacency)
        return graph.transform(transform)

    def shared_lengths(self) -> SharedBoundaries:
        """Return the exact shared-edge length of every contiguous pair, computed once.

        Callers that measure boundaries many times over the same areas (the sensitivity
        sweeps) call this first; :func:`coverage_audit.enclaves.find_enclaves` then reads
        lengths from it instead of measuring again.
        """
        cached = self.__dict__.get("_shared_lengths")
        if cached is None:
            table = self.edges()
            frame = table.pairs
            # Only pairs that are neighbours under this graph's rule.
            i, j = frame["i"].to_numpy(), frame["j"].to_numpy()
            linked = np.zeros(i.size)
            if i.size:
                linked = np.asarray(self.adjacency[i, j]).ravel()
            cached = _from_table(table, frame[linked != 0].reset_index(drop=True))
            self.__dict__["_shared_lengths"] = cached
        return cached

    def edges(self) -> EdgeTable:
        """Return the shared-edge table of the areas (measured once, within the tolerance)."""
        cached = self.__dict__.get("_edges")
        if cached is None:
            if self._geometries is None:
                raise AnalysisError("this AreaGraph was built without its geometries")
            cached = edge_table(self._geometries)
            self.__dict__["_edges"] = cached
        return cached

    def cached_shared_lengths(self) -> SharedBoundaries | None:
        """Return the shared lengths if :meth:`shared_lengths` has run, else None."""
        return self.__dict__.get("_shared_lengths")

    def components(self) -> list[tuple[str, ...]]:
        """Return the ids of each connected component, largest first, then by first id."""
        ids = np.asarray(self.ids, dtype=object)
        groups = [tuple(ids[self.component_labels == c]) for c in range(self.n_components)]
        return sorted(groups, key=lambda g: (-len(g), g[0]))

    def to_dict(self) -> dict:
        """Describe the weights for summary.json."""
        sizes = np.bincount(self.component_labels) if self.n else np.array([], dtype=int)
        return {
            "contiguity": self.kind,
            "edge_tolerance_m": self.edges().tolerance if self.n > 1 else EDGE_TOLERANCE_M,
            "transform": "row-standardised",
            "areas": self.n,
            "links": int(self.adjacency.nnz // 2),
            "islands": list(self.islands),
            "island_policy": self.island_policy,
            "knn_k": self.knn_k if self.island_policy == "knn" else None,
            "components": int(self.n_components),
            "largest_component_areas": int(sizes.max()) if sizes.size else 0,
            # Every component but the largest, by id (islands are one-area components),
            # so that no disconnected part of the region goes unreported.
            "other_components": [list(c) for c in self.components()[1:]],
            "areas_in_statistics": int(self.stats_mask.sum()),
        }


def build_area_graph(
    geometries: np.ndarray,
    ids: list[str] | tuple[str, ...] | np.ndarray,
    *,
    kind: ContiguityKind = "queen",
    island_policy: IslandPolicy = "exclude",
    knn_k: int = 1,
) -> AreaGraph:
    """Build the contiguity of the analysed areas.

    Parameters
    ----------
    geometries : numpy.ndarray of shapely geometries
        Area polygons in a projected CRS, forming a coverage (no overlaps).
    ids : sequence of str
        Area ids, one per geometry.
    kind : {"queen", "rook"}
        Queen: areas sharing at least a point are neighbours; rook: sharing an edge.
    island_policy : {"exclude", "knn"}
        See the module docstring.
    knn_k : int
        Neighbours per island under ``"knn"`` (at least 1).

    Returns
    -------
    AreaGraph

    Notes
    -----
    Neighbours come from :func:`coverage_audit.edges.edge_table`: areas whose boundaries share a
    stretch of line within a tolerance (:func:`~coverage_audit.edges.default_tolerance`:
    0.1 m, or a millionth of the layer's extent when smaller; longer than twice it) are rook neighbours, areas whose boundaries come within it are queen
    neighbours, whether or not their vertices coincide. An
    :class:`~coverage_audit.errors.IslandWarning` is issued when there are islands or
    several components.
    """
    if kind not in CONTIGUITY_KINDS:
        raise SpecError(
            f'contiguity was "{kind}" but is expected to be one of {list(CONTIGUITY_KINDS)}'
        )
    if island_policy not in ISLAND_POLICIES:
        raise SpecError(
            f'islands was "{island_policy}" but is expected to be one of {list(ISLAND_POLICIES)}'
        )
    if int(knn_k) < 1:
        raise SpecError(f"knn_k was {knn_k} but must be a whole number of at least 1")
    geoms = np.asarray(geometries, dtype=object)
    n = geoms.size
    ids_t = tuple(str(i) for i in ids)
    if len(ids_t) != n:
        raise AnalysisError(f"{len(ids_t)} ids were given for {n} geometries")
    if n == 0:
        raise AnalysisError("no areas to build contiguity from")
    table: EdgeTable | None = None
    if n > 1:
        table = edge_table(geoms)
        adjacency = _table_contiguity(table, n, rook=(kind == "rook"))
    else:
        adjacency = sp.csr_matrix((1, 1), dtype=np.float64)
    island_mask = np.asarray(adjacency.sum(axis=1)).ravel() == 0
    _, labels = connected_components(adjacency, directed=False)
    labels = _relabel_in_order(labels)
    islands = tuple(np.asarray(ids_t, dtype=object)[island_mask])
    knn_links = sp.csr_matrix((n, n), dtype=np.float64)
    if island_policy == "knn" and island_mask.any():
        if n < 2:
            raise AnalysisError("a single area has no nearest neighbour to link to")
        knn_links = _island_knn_links(geoms, island_mask, min(int(knn_k), n - 1))
    graph = AreaGraph(
        ids=ids_t,
        kind=kind,
        adjacency=adjacency,
        islands=islands,
        component_labels=labels,
        island_policy=island_policy,
        knn_k=int(knn_k),
        _knn_links=knn_links,
        _geometries=geoms,
    )
    if table is not None:
        graph.__dict__["_edges"] = table
    if islands or graph.n_components > 1:
        shown = ", ".join(islands[:10]) + (" ..." if len(islands) > 10 else "")
        warnings.warn(
            f"{len(islands)} island(s) with no {kind} neighbour"
            + (f" ({shown})" if islands else "")
            + f"; {graph.n_components} connected component(s); island policy: {island_policy}",
            IslandWarning,
            stacklevel=2,
        )
    return graph


def _contiguity_matrix(geoms: np.ndarray, *, rook: bool) -> sp.csr_matrix:
    n = geoms.size
    if n == 1:
        return sp.csr_matrix((1, 1), dtype=np.float64)
    if _is_clean_coverage(geoms):
        return _vertex_contiguity(geoms, rook=rook)
    return _strict_contiguity(geoms, rook=rook)


def _is_clean_coverage(geoms: np.ndarray) -> bool:
    """Whether the polygons form a valid GEOS coverage (shared edges match vertex for vertex).

    In such a coverage two areas touch exactly where they share a vertex, and share an
    edge of positive length exactly where they share a segment between two vertices: a
    vertex lying inside another area's edge makes the coverage invalid (GEOS
    ``CoverageValidator``). So the vertex comparison below is exact there, and much faster
    than libpysal's strict topological test.
    """
    types = shapely.get_type_id(geoms)
    if not np.isin(types, (3, 6)).all() or shapely.is_empty(geoms).any():
        return False
    if not shapely.is_valid(geoms).all():
        return False
    try:
        return bool(shapely.coverage_is_valid(geoms))
    except (AttributeError, shapely.errors.UnsupportedGEOSVersionError):
        # coverage validation needs GEOS 3.12; without it take the strict path.
        return False


def _vertex_contiguity(geoms: np.ndarray, *, rook: bool) -> sp.csr_matrix:
    """Contiguity from shared vertices (queen) or shared segments (rook) of a clean coverage."""
    n = geoms.size
    parts, part_owner = shapely.get_parts(geoms, return_index=True)
    rings, ring_part = shapely.get_rings(parts, return_index=True)
    coords, coord_ring = shapely.get_coordinates(rings, return_index=True)
    owner = part_owner[ring_part[coord_ring]]
    # Exact coordinate identity; packing into a complex keeps the bits and makes -0.0 == 0.0.
    _, vertex = np.unique(coords[:, 0] + 1j * coords[:, 1], return_inverse=True)
    vertex = vertex.ravel().astype(np.int64)
    if rook:
        same_ring = coord_ring[1:] == coord_ring[:-1]
        a, b = vertex[:-1][same_ring], vertex[1:][same_ring]
        edge_owner = owner[:-1][same_ring]
        proper = a != b
        lo = np.minimum(a, b)[proper]
        hi = np.maximum(a, b)[proper]
        keys, owners = lo * (int(vertex.max()) + 1) + hi, edge_owner[proper]
    else:
        keys, owners = vertex, owner
    left, right = _pairs_sharing_key(keys, owners)
    data = np.ones(left.size, dtype=np.float64)
    matrix = sp.csr_matrix((data, (left, right)), shape=(n, n))
    matrix = ((matrix + matrix.T) > 0).astype(np.float64).tocsr()
    matrix.sort_indices()
    return matrix


def _pairs_sharing_key(keys: np.ndarray, owners: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every pair of distinct owners that share a key (a vertex or an edge)."""
    order = np.lexsort((owners, keys))
    keys, owners = keys[order], owners[order]
    distinct = np.r_[True, (keys[1:] != keys[:-1]) | (owners[1:] != owners[:-1])]
    keys, owners = keys[distinct], owners[distinct]
    left, right = [], []
    # Positions t and t + d hold the same key only if every position between them does,
    # so the candidate set shrinks with d and the loop runs as often as the largest group.
    step = 1
    start = np.flatnonzero(keys[1:] == keys[:-1])
    while start.size:
        left.append(owners[start])
        right.append(owners[start + step])
        step += 1
        start = start[start + step < keys.size]
        start = start[keys[start + step] == keys[start]]
    if not left:
        return np.array([], dtype=np.int64), np.array([], dtype=np.int64)
    return np.concatenate(left), np.concatenate(right)


def _table_contiguity(table: EdgeTable, n: int, *, rook: bool) -> sp.csr_matrix:
    """Contiguity from the edge table: shared edges (rook) or any contact (queen)."""
    if rook:
        left = table.pairs["i"].to_numpy(dtype=np.int64)
        right = table.pairs["j"].to_numpy(dtype=np.int64)
    else:
        left, right = table.touching[:, 0], table.touching[:, 1]
    data = np.ones(left.size, dtype=np.float64)
    matrix = sp.csr_matrix((data, (left, right)), shape=(n, n))
    matrix = ((matrix + matrix.T) > 0).astype(np.float64).tocsr()
    matrix.sort_indices()
    return matrix


def _strict_contiguity(geoms: np.ndarray, *, rook: bool) -> sp.csr_matrix:
    n = geoms.size
    series = gpd.GeoSeries(geoms, index=pd.RangeIndex(n))
    graph = Graph.build_contiguity(series, rook=rook, strict=True)
    adj = graph.adjacency
    focal = adj.index.get_level_values("focal").to_numpy()
    neighbor = adj.index.get_level_values("neighbor").to_numpy()
    keep = (focal != neighbor) & (adj.to_numpy() != 0)
    focal, neighbor = focal[keep], neighbor[keep]
    data = np.ones(focal.size, dtype=np.float64)
    matrix = sp.csr_matrix((data, (focal, neighbor)), shape=(n, n))
    matrix = ((matrix + matrix.T) > 0).astype(np.float64).tocsr()
    matrix.sort_indices()
    return matrix


def _relabel_in_order(labels: np.ndarray) -> np.ndarray:
    _, first = np.unique(labels, return_index=True)
    order = np.argsort(first, kind="stable")
    mapping = np.empty(order.size, dtype=np.int64)
    mapping[np.unique(labels)[order]] = np.arange(order.size)
    return mapping[labels]


def _island_knn_links(geoms: np.ndarray, island_mask: np.ndarray, k: int) -> sp.csr_matrix:
    """Symmetric links from each island to its ``k`` nearest other areas."""
    from scipy.spatial import cKDTree

    n = geoms.size
    coords = shapely.get_coordinates(shapely.point_on_surface(geoms))
    islands = np.flatnonzero(island_mask)
    # k + 1 because the nearest point is normally the island itself.
    _, idx = cKDTree(coords).query(coords[islands], k=k + 1)
    idx = idx.reshape(islands.size, k + 1)
    # Drop the island itself wherever it appears (a duplicate point may come first); a
    # stable sort keeps the remaining neighbours in distance order.
    others = idx != islands[:, None]
    first = np.argsort(~others, axis=1, kind="stable")[:, :k]
    cols = np.take_along_axis(idx, first, axis=1).ravel()
    rows = np.repeat(islands, k)
    data = np.ones(rows.size, dtype=np.float64)
    links = sp.csr_matrix((data, (rows, cols)), shape=(n, n))
    return ((links + links.T) > 0).astype(np.float64).tocsr()


@dataclass(frozen=True)
class SharedBoundaries:
    """Shared-edge lengths between pairs of areas, and each area's perimeter.

    Attributes
    ----------
    pairs : pandas.DataFrame
        Columns ``i``, ``j`` (positions, ``i < j``) and ``length`` (metres in the
        analysis CRS) for every pair with a shared edge of positive length.
    perimeter : numpy.ndarray
        Length of each area's whole boundary (exterior and interior rings).
    outer_edge : numpy.ndarray or None
        Length of each area's boundary on the region's outer edge.
    hole_edge : numpy.ndarray or None
        Length of each area's boundary along holes of the region (gaps inside it, such
        as areas left out of the analysis).
    tolerance : float
        Distance (metres) within which two boundaries were taken for one line.
    """

    pairs: pd.DataFrame
    perimeter: np.ndarray
    outer_edge: np.ndarray | None = None
    hole_edge: np.ndarray | None = None
    tolerance: float = EDGE_TOLERANCE_M


def _from_table(table: EdgeTable, pairs: pd.DataFrame) -> SharedBoundaries:
    return SharedBoundaries(
        pairs=pairs,
        perimeter=table.perimeter,
        outer_edge=table.outer_edge,
        hole_edge=table.hole_edge,
        tolerance=table.tolerance,
    )


def shared_boundary_lengths(
    geometries: np.ndarray, pairs: np.ndarray | None = None
) -> SharedBoundaries:
    """Return the length of boundary shared by each pair of areas.

    Parameters
    ----------
    geometries : numpy.ndarray of shapely geometries
        Area polygons in a projected (metric) CRS.
    pairs : numpy.ndarray of shape (m, 2), optional
        Positions of the pairs to keep; by default every pair sharing an edge.

    Returns
    -------
    SharedBoundaries

    Notes
    -----
    Lengths come from :func:`coverage_audit.edges.edge_table`: the stretch of each
    boundary that runs within the tolerance of the other, measured along each side and
    averaged, so it is exact for a clean coverage and still right where the two
    boundaries do not share vertices. Point contacts (queen-only neighbours) are dropped.
    """
    table = edge_table(np.asarray(geometries, dtype=object))
    frame = table.pairs
    if pairs is not None:
        pair_arr = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
        lo, hi = pair_arr.min(axis=1), pair_arr.max(axis=1)
        n = max(len(table.perimeter), 1)
        wanted = np.unique((lo * n + hi)[lo != hi])
        frame = frame[np.isin(frame["i"].to_numpy() * n + frame["j"].to_numpy(), wanted)]
    return _from_table(table, frame.reset_index(drop=True))
