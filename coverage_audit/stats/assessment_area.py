"""Assessment-area review: what a footprint of whole geographies leaves out, and where.

A bank's assessment area under the Community Reinvestment Act consists of whole
geographies (census tracts), may include only the part of a political subdivision the
bank can reasonably serve, may not reflect illegal discrimination and may not arbitrarily
exclude low- or moderate-income geographies (12 CFR 228.41(d) and (e); from memory of the
regulation's text, check the current edition). :func:`review_assessment_area` measures
the facts an examiner looks at for a footprint given as a list of areas:

- the low- or moderate-income (LMI) tracts and the majority-minority tracts *outside* the
  area that touch it (adjacent exclusions);
- the counties (GEOID prefixes, state + county = 5 characters) of which the area takes in
  only part;
- the area's shares of LMI and of majority-minority tracts against the counties it lies in.

Pure functions over arrays and shapely geometries; no randomness.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely

#: Income tiers counted as low or moderate income (tract median family income below 80%
#: of the area median; 12 CFR 228.12, from memory).
LMI_TIERS = ("low", "moderate")
#: Characters of a tract GEOID that name its state and county (2 + 3; Census Bureau
#: GEOID structure).
COUNTY_PREFIX = 5
#: Gap (in analysis-CRS units, metres) within which two areas count as touching: absorbs
#: slivers between boundaries digitised separately (common practice, no source).
TOUCH_TOLERANCE_M = 1.0


@dataclass(frozen=True)
class AssessmentAreaReview:
    """Facts about an assessment area of whole geographies.

    Attributes
    ----------
    areas_inside : int
        Analysed areas in the assessment area.
    adjacent_lmi : tuple of str
        Ids of LMI areas outside the assessment area that touch it.
    adjacent_lmi_population : float
    adjacent_majority_minority : tuple of str
        Ids of majority-minority areas outside it that touch it.
    adjacent_majority_minority_population : float
    partial_counties : dict
        County code -> ``{"inside": n, "areas": m}`` for counties only partly inside.
    lmi_share, lmi_share_counties : float or None
        Share of the area's tracts that are LMI, and of all tracts of its counties.
    majority_minority_share, majority_minority_share_counties : float or None
        The same for majority-minority tracts.
    counties : tuple of str
        The counties the assessment area lies in (the comparison region).
    """

    areas_inside: int
    adjacent_lmi: tuple[str, ...]
    adjacent_lmi_population: float
    adjacent_majority_minority: tuple[str, ...]
    adjacent_majority_minority_population: float
    partial_counties: dict[str, dict[str, int]] = field(default_factory=dict)
    lmi_share: float | None = None
    lmi_share_counties: float | None = None
    majority_minority_share: float | None = None
    majority_minority_share_counties: float | None = None
    counties: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        """Plain data for summary.json's ``assessment_area`` section."""
        return {
            "areas_inside": self.areas_inside,
            "adjacent_excluded_lmi": {
                "count": len(self.adjacent_lmi),
                "ids": list(self.adjacent_lmi),
                "population": self.adjacent_lmi_population,
            },
            "adjacent_excluded_majority_minority": {
                "count": len(self.adjacent_majority_minority),
                "ids": list(self.adjacent_majority_minority),
                "population": self.adjacent_majority_minority_population,
            },
            "counties": list(self.counties),
            "partial_counties": {k: dict(v) for k, v in self.partial_counties.items()},
            "lmi_share": self.lmi_share,
            "lmi_share_counties": self.lmi_share_counties,
            "majority_minority_share": self.majority_minority_share,
            "majority_minority_share_counties": self.majority_minority_share_counties,
            "lmi_tiers": list(LMI_TIERS),
            "comparison_region": "the counties (GEOID prefix of 5 characters) the area lies in",
        }


def _share(flags: np.ndarray, mask: np.ndarray) -> float | None:
    n = int(mask.sum())
    return float(flags[mask].sum() / n) if n else None


def review_assessment_area(
    ids: np.ndarray,
    geoms: np.ndarray,
    inside: np.ndarray,
    income_tier: np.ndarray | None,
    majority_minority: np.ndarray | None,
    population: np.ndarray,
    *,
    county_prefix: int = COUNTY_PREFIX,
    tolerance: float = TOUCH_TOLERANCE_M,
) -> AssessmentAreaReview:
    """Review an assessment area given as a set of whole areas.

    Parameters
    ----------
    ids : numpy.ndarray of str
        Area ids (GEOIDs); their first ``county_prefix`` characters name the county.
    geoms : numpy.ndarray of shapely geometries
        Area geometries in a projected CRS (metres).
    inside : numpy.ndarray of bool
        Whether each area is in the assessment area.
    income_tier : numpy.ndarray of str or None
        "low", "moderate", "middle", "upper" or "unknown" per area.
    majority_minority : numpy.ndarray of bool or None
    population : numpy.ndarray of float
    county_prefix : int
        Characters of an id naming its county (5 for tract GEOIDs).
    tolerance : float
        Areas within this distance of the assessment area count as touching it.

    Returns
    -------
    AssessmentAreaReview
    """
    ids = np.asarray(ids).astype(str)
    inside = np.asarray(inside, dtype=bool)
    n = ids.size
    lmi = (
        np.isin(np.asarray(income_tier, dtype=object), LMI_TIERS)
        if income_tier is not None
        else np.zeros(n, dtype=bool)
    )
    mm = (
        np.asarray(majority_minority, dtype=bool)
        if majority_minority is not None
        else np.zeros(n, dtype=bool)
    )
    population = np.asarray(population, dtype=float)
    area = shapely.union_all(np.asarray(geoms)[inside]) if inside.any() else shapely.Polygon()
    shapely.prepare(area)
    touching = ~inside & np.asarray(shapely.dwithin(area, np.asarray(geoms), tolerance), dtype=bool)
    adjacent_lmi = touching & lmi
    adjacent_mm = touching & mm
    counties = np.array([i[:county_prefix] for i in ids], dtype=object)
    inside_counties = sorted(set(counties[inside]))
    partial: dict[str, dict[str, int]] = {}
    for county in inside_counties:
        of_county = counties == county
        n_in = int((of_county & inside).sum())
        if n_in < int(of_county.sum()):
            partial[str(county)] = {"inside": n_in, "areas": int(of_county.sum())}
    region = np.isin(counties, inside_counties)
    return AssessmentAreaReview(
        areas_inside=int(inside.sum()),
        adjacent_lmi=tuple(sorted(ids[adjacent_lmi])),
        adjacent_lmi_population=float(np.nansum(population[adjacent_lmi])),
        adjacent_majority_minority=tuple(sorted(ids[adjacent_mm])),
        adjacent_majority_minority_population=float(np.nansum(population[adjacent_mm])),
        partial_counties=partial,
        lmi_share=_share(lmi, inside) if income_tier is not None else None,
        lmi_share_counties=_share(lmi, region) if income_tier is not None else None,
        majority_minority_share=_share(mm, inside) if majority_minority is not None else None,
        majority_minority_share_counties=(
            _share(mm, region) if majority_minority is not None else None
        ),
        counties=tuple(str(c) for c in inside_counties),
    )
