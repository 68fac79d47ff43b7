"""Coverage: covered fraction per area, rates by group, disparity, distances.

Takes the analysed areas (analysis CRS) and a :class:`~coverage_audit.footprint.Footprint`
and gives each area's ``covered_fraction`` = area(area ∩ footprint) / area(area), computed
exactly and vectorised (STRtree candidate pairs; areas wholly inside a footprint piece skip
the intersection), its ``served`` flag, and a :class:`CoverageResult` with each group's
areal-weighted coverage rate, served-area rate, ratio and difference to the comparison
group, the four-fifths screen, coverage of majority-minority areas and income tiers, and
for point footprints the distance to the nearest service point.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import shapely
from pyproj import Geod, Transformer

from ._util import clean_number, safe_ratio
from .footprint import Footprint

# The four-fifths rule, 29 CFR 1607.4(D): a rate "less than four-fifths (4/5) (or eighty
# percent) of the rate for the group with the highest rate" is regarded as evidence of
# adverse impact. Strictly less than; a screening rule of thumb in coverage work. One
# exact comparison serves every stage (stats/four_fifths.py).
from .stats.four_fifths import FOUR_FIFTHS, FOUR_FIFTHS_REL_TOL, below_four_fifths


def covered_fraction(areas: np.ndarray, pieces: np.ndarray) -> np.ndarray:
    """Return area(area ∩ footprint) / area(area) for each area.

    Parameters
    ----------
    areas : numpy.ndarray of shapely polygons
        Areas in a projected equal-area CRS.
    pieces : numpy.ndarray of shapely polygons
        Disjoint pieces of the dissolved footprint (see
        :func:`~coverage_audit.footprint.cut_pieces`), in the same CRS.

    Returns
    -------
    numpy.ndarray
        Fractions in [0, 1]; 0 for an area of zero size.

    Notes
    -----
    Because the pieces are disjoint, the covered area of an area is the sum over the
    pieces it meets of the intersection areas; no place is counted twice. Pairs where the
    piece contains the area properly contribute the whole area without an intersection.
    """
    areas = np.asarray(areas, dtype=object)
    n = areas.size
    size = shapely.area(areas)
    if n == 0 or pieces.size == 0:
        return np.zeros(n, dtype=float)
    tree = shapely.STRtree(areas)
    piece_idx, area_idx = tree.query(pieces, predicate="intersects")
    shapely.prepare(pieces)
    inside = shapely.contains_properly(pieces[piece_idx], areas[area_idx])
    overlap = np.empty(piece_idx.size, dtype=float)
    overlap[inside] = size[area_idx[inside]]
    cross = np.flatnonzero(~inside)
    if cross.size:
        overlap[cross] = _intersection_areas(areas[area_idx[cross]], pieces[piece_idx[cross]])
    covered = np.bincount(area_idx, weights=overlap, minlength=n)
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = np.where(size > 0, covered / np.where(size > 0, size, 1.0), 0.0)
    return np.clip(fraction, 0.0, 1.0)


#: Pairs per task when intersections run on several threads (shapely releases the GIL).
_CHUNK = 2_048


def _intersection_areas(
    left: np.ndarray, right: np.ndarray, workers: int | None = None
) -> np.ndarray:
    """Area of ``left[k] ∩ right[k]`` for each k, on all cores for large inputs."""
    n = left.size
    workers = workers or os.cpu_count() or 1
    if workers == 1 or n < 2 * _CHUNK:
        return shapely.area(shapely.intersection(left, right))
    bounds = list(range(0, n, _CHUNK)) + [n]
    out = np.empty(n, dtype=float)

    def work(k: int) -> None:
        lo, hi = bounds[k], bounds[k + 1]
        out[lo:hi] = shapely.area(shapely.intersection(left[lo:hi], right[lo:hi]))

    with ThreadPoolExecutor(max_workers=workers) as pool:
        list(pool.map(work, range(len(bounds) - 1)))
    return out


def footprint_fractions(footprint: Footprint, areas: np.ndarray, ids: Sequence[str]) -> np.ndarray:
    """Covered fraction of each area under any kind of footprint (listed ids: 1 or 0)."""
    if footprint.fractions is not None:
        return np.array([footprint.fractions.get(i, 0.0) for i in ids], dtype=float)
    if footprint.kind == "ids":
        served = footprint.served_ids or frozenset()
        return np.array([1.0 if i in served else 0.0 for i in ids], dtype=float)
    return covered_fraction(areas, footprint.pieces)


def weighted_median(values: np.ndarray, weights: np.ndarray) -> float | None:
    """Lower weighted median: the smallest value whose cumulative weight reaches half."""
    ok = np.isfinite(values) & (weights > 0)
    if not ok.any():
        return None
    v, w = values[ok], weights[ok]
    order = np.argsort(v, kind="stable")
    cum = np.cumsum(w[order])
    k = int(np.searchsorted(cum, 0.5 * cum[-1], side="left"))
    return float(v[order][k])


def nearest_site_distance(areas: np.ndarray, points: np.ndarray, crs: Any) -> np.ndarray:
    """Geodesic distance in metres from each area's representative point to the nearest site.

    The nearest site is found in the analysis projection (an STRtree nearest query); the
    distance to it is then measured on the WGS 84 ellipsoid, so it does not depend on the
    projection's scale distortion.
    """
    reps = shapely.point_on_surface(np.asarray(areas, dtype=object))
    pts = np.asarray(points, dtype=object)
    if pts.size == 0:
        return np.full(reps.size, np.nan)
    tree = shapely.STRtree(pts)
    nearest = tree.nearest(reps)
    to_geo = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    rx, ry = to_geo.transform(shapely.get_x(reps), shapely.get_y(reps))
    px, py = to_geo.transform(shapely.get_x(pts[nearest]), shapely.get_y(pts[nearest]))
    _, _, dist = Geod(ellps="WGS84").inv(rx, ry, px, py)
    return np.asarray(dist, dtype=float)


@dataclass(frozen=True)
class GroupCoverage:
    """Coverage of one group."""

    population: float
    covered_population: float
    rate: float | None
    served_area_rate: float | None
    ratio: float | None
    served_area_ratio: float | None
    difference: float | None
    served_area_difference: float | None
    below_four_fifths: bool

    def to_dict(self) -> dict[str, Any]:
        """Plain data, keys as in the output contract."""
        return {k: clean_number(v) for k, v in self.__dict__.items()}


@dataclass(frozen=True)
class CoverageResult:
    """Coverage by group and by class of area."""

    served_threshold: float
    reference_group: str
    comparison: str
    comparison_group: str
    groups: Mapping[str, GroupCoverage]
    area_classes: Mapping[str, Any]
    distance: Mapping[str, Any] | None
    served_areas: int
    areas: int
    population: float
    covered_population: float

    def to_dict(self) -> dict[str, Any]:
        """Plain data for summary.json's ``coverage`` section."""
        out: dict[str, Any] = {
            "served_threshold": self.served_threshold,
            "reference_group": self.reference_group,
            "comparison": self.comparison,
            "comparison_group": self.comparison_group,
            "four_fifths_threshold": FOUR_FIFTHS,
            # The flag compares counts exactly; rounding within this share is not a shortfall.
            "four_fifths_relative_tolerance": float(FOUR_FIFTHS_REL_TOL),
            "areas": self.areas,
            "served_areas": self.served_areas,
            "population": clean_number(self.population),
            "covered_population": clean_number(self.covered_population),
            "rate": safe_ratio(self.covered_population, self.population),
            "groups": {g: c.to_dict() for g, c in self.groups.items()},
            "area_classes": self.area_classes,
        }
        if self.distance is not None:
            out["distance"] = self.distance
        return out


def _class_coverage(
    mask: np.ndarray, population: np.ndarray, fraction: np.ndarray, served: np.ndarray
) -> dict[str, Any]:
    pop = float(population[mask].sum())
    n = int(mask.sum())
    return {
        "areas": n,
        "population": pop,
        "rate": safe_ratio(float((population[mask] * fraction[mask]).sum()), pop),
        "served_share": safe_ratio(float(served[mask].sum()), n),
        "served_population_share": safe_ratio(float(population[mask & served].sum()), pop),
    }


def coverage_by_group(
    table: pd.DataFrame,
    *,
    groups: Sequence[str],
    reference: str,
    fraction: np.ndarray,
    threshold: float,
    comparison: str = "reference",
    distance_m: np.ndarray | None = None,
) -> CoverageResult:
    """Compute coverage rates by group and by class of area.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per analysed area with ``population``, a count column per group and, as
        available, ``majority_minority`` and ``income_tier``.
    groups : sequence of str
        Group names (count columns).
    reference : str
        The named reference group.
    fraction : numpy.ndarray
        Covered fraction of each area.
    threshold : float
        An area is served when its covered fraction is at least this.
    comparison : {"reference", "highest"}
        Ratios against the reference group, or against the group with the highest
        coverage rate (the four-fifths rule's own comparison, 29 CFR 1607.4(D)).
    distance_m : numpy.ndarray, optional
        Distance of each area to the nearest service point.

    Returns
    -------
    CoverageResult

    Notes
    -----
    rate_g = sum_i x_gi f_i / sum_i x_gi (areal weighting: people assumed spread evenly
    within an area); served_area_rate_g = sum_i x_gi s_i / sum_i x_gi with s_i the served
    flag. ratio = rate_g / rate_c, difference = rate_g - rate_c (fractions; percentage
    points in the report), where c is the comparison group. ``below_four_fifths`` is
    ``ratio < 4/5`` (strictly), compared exactly on the counts by
    :func:`~coverage_audit.stats.four_fifths.below_four_fifths`; it is False where the
    ratio is undefined.
    """
    fraction = np.asarray(fraction, dtype=float)
    served = fraction >= threshold
    population = table["population"].to_numpy(dtype=float)
    rates: dict[str, tuple[float, float, float | None, float | None]] = {}
    for g in groups:
        x = table[g].to_numpy(dtype=float)
        total = float(x.sum())
        covered = float((x * fraction).sum())
        rates[g] = (
            total,
            covered,
            safe_ratio(covered, total),
            safe_ratio(float(x[served].sum()), total),
        )
    if comparison == "highest":
        defined = [(r[2], g) for g, r in rates.items() if r[2] is not None]
        comparison_group = max(defined)[1] if defined else reference
    else:
        comparison_group = reference
    ref_total, ref_covered, ref_rate, ref_served = rates[comparison_group]
    results: dict[str, GroupCoverage] = {}
    for g, (total, covered, rate, srate) in rates.items():
        ratio = safe_ratio(rate, ref_rate) if rate is not None and ref_rate is not None else None
        sratio = (
            safe_ratio(srate, ref_served) if srate is not None and ref_served is not None else None
        )
        results[g] = GroupCoverage(
            population=total,
            covered_population=covered,
            rate=rate,
            served_area_rate=srate,
            ratio=ratio,
            served_area_ratio=sratio,
            difference=None if rate is None or ref_rate is None else rate - ref_rate,
            served_area_difference=None
            if srate is None or ref_served is None
            else srate - ref_served,
            below_four_fifths=ratio is not None
            and below_four_fifths(covered, total, ref_covered, ref_total),
        )
    classes: dict[str, Any] = {
        "all": _class_coverage(np.ones(len(table), bool), population, fraction, served)
    }
    if "majority_minority" in table.columns:
        mm = table["majority_minority"].to_numpy(dtype=bool)
        classes["majority_minority"] = _class_coverage(mm, population, fraction, served)
        classes["not_majority_minority"] = _class_coverage(~mm, population, fraction, served)
    if "income_tier" in table.columns:
        tiers = table["income_tier"].to_numpy(dtype=object)
        classes["income_tiers"] = {
            t: _class_coverage(tiers == t, population, fraction, served)
            for t in ("low", "moderate", "middle", "upper", "unknown")
        }
        lmi = np.isin(tiers, ("low", "moderate"))
        classes["low_or_moderate"] = _class_coverage(lmi, population, fraction, served)
        classes["middle_or_upper"] = _class_coverage(
            np.isin(tiers, ("middle", "upper")), population, fraction, served
        )
    distance = None
    if distance_m is not None:
        by_group: dict[str, Any] = {}
        distance = {
            "unit": "m",
            "measured_from": "representative point of each area",
            "groups": by_group,
        }
        for g in groups:
            x = table[g].to_numpy(dtype=float)
            ok = np.isfinite(distance_m) & (x > 0)
            by_group[g] = {
                "mean": safe_ratio(float((x[ok] * distance_m[ok]).sum()), float(x[ok].sum())),
                "median": weighted_median(distance_m, x),
            }
    return CoverageResult(
        served_threshold=float(threshold),
        reference_group=reference,
        comparison=comparison,
        comparison_group=comparison_group,
        groups=results,
        area_classes=classes,
        distance=distance,
        served_areas=int(served.sum()),
        areas=int(len(table)),
        population=float(population.sum()),
        covered_population=float((population * fraction).sum()),
    )
