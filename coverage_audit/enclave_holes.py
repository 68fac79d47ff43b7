"""Footprint holes: interior rings of the dissolved footprint over populated areas.

Gives :class:`FootprintHole` records (``H1``, ``H2``, ...) with areal-weighted population
for :mod:`coverage_audit.enclaves` (which re-exports these names).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely

from ._util import clean_number, safe_ratio, to_jsonable
from .enclave_checks import _as_geometries, _as_ids, _as_numbers, _id_ranks
from .errors import AnalysisError


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
