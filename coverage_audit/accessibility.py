"""The ``[access]`` stage: capacity-aware access to the footprint's points, by group.

Takes the spec, the analysed areas (analysis CRS, with ``population``, the group counts
and ``minority_share``) and the points footprint, and gives the ``access`` section of
summary.json and each area's score (column ``access`` of areas.csv). Site capacities come
from a column of the points file (1 each by default); distances are straight lines in the
analysis CRS between area centroids and sites, or the rows of a travel-cost table. The
statistics themselves are in :mod:`coverage_audit.stats.access`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .errors import InputError
from .findings import Finding, label, number, pct, register_finding
from .footprint import Footprint
from .inputs import AreaInputs
from .spec import AccessSpec, AuditSpec
from .stats.access import (
    AccessResult,
    Decay,
    access_by_group,
    concentration_index,
    pairs_from_costs,
    pairs_within,
    two_step_fca,
)

#: Method names by decay rule, as the literature names them.
METHOD_NAMES = {"none": "2SFCA", "steps": "E2SFCA", "gaussian": "Gaussian 2SFCA"}


def site_capacity(
    points: gpd.GeoDataFrame, ac: AccessSpec, footprint: Footprint, inputs: AreaInputs
) -> np.ndarray:
    """Return each point's capacity; unusable ones are excluded (NaN) and listed."""
    if ac.capacity is None:
        return np.ones(len(points))
    if ac.capacity not in points.columns:
        path = footprint.records[0].path if footprint.records else footprint.name
        raise InputError(
            f"footprint '{footprint.name}' file '{path}' has no capacity column "
            f"{ac.capacity!r}; its columns are "
            f"{[c for c in points.columns if c not in ('geometry', 'radius_m', 'source_row')]} "
            "(set [access] capacity to one of them, or leave it out for 1 each)"
        )
    raw = pd.to_numeric(points[ac.capacity], errors="coerce").to_numpy(dtype=float)
    bad = ~(np.isfinite(raw) & (raw >= 0))
    inputs.exclusions.add(
        f"footprint:{footprint.name}",
        points["source_row"].to_numpy()[bad],
        _site_ids(points, ac)[bad],
        f"capacity in column {ac.capacity} missing, not a number or negative (left out of access)",
    )
    return np.where(bad, np.nan, raw)


def _site_ids(points: gpd.GeoDataFrame, ac: AccessSpec) -> np.ndarray:
    from .io.costs import site_ids_as_text

    if ac.site_id is None:
        return np.array([str(int(r)) for r in points["source_row"]], dtype=object)
    return site_ids_as_text(points[ac.site_id])


def measure_access(
    spec: AuditSpec, inputs: AreaInputs, footprint: Footprint, frame: gpd.GeoDataFrame
) -> tuple[dict[str, Any], np.ndarray]:
    """Run 2SFCA / E2SFCA as ``[access]`` asks; return the summary section and the scores.

    Raises
    ------
    InputError
        A named column is missing, no site is usable, or the cost table matches nothing.
    """
    ac = spec.access
    assert ac is not None and footprint.points is not None
    points = footprint.points
    if ac.site_id is not None and ac.site_id not in points.columns:
        raise InputError(
            f"footprint '{footprint.name}' has no site id column {ac.site_id!r}; its columns are "
            f"{[c for c in points.columns if c not in ('geometry', 'radius_m', 'source_row')]}"
        )
    capacity = site_capacity(points, ac, footprint, inputs)
    usable = np.isfinite(capacity)
    if not usable.any():
        raise InputError(
            f"footprint '{footprint.name}': no point has a usable capacity in column "
            f"{ac.capacity!r}; capacities must be numbers >= 0"
        )
    points = points.loc[usable]
    capacity = capacity[usable]
    site_xy = shapely.get_coordinates(np.asarray(points.geometry.array))
    # The centroid of each area in the analysis CRS ([access] origins = "centroid").
    origin_xy = shapely.get_coordinates(shapely.centroid(np.asarray(frame.geometry.array)))
    population = frame["population"].to_numpy(dtype=float)
    costs_info = None
    if ac.costs is not None:
        from .io.costs import read_costs

        site_ids = _site_ids(points, ac)
        repeated = pd.Series(site_ids).duplicated()
        if repeated.any():
            raise InputError(
                f"footprint '{footprint.name}': site id {site_ids[repeated.to_numpy()][0]!r} "
                "names more than one point, so cost rows cannot be matched; give each site its "
                "own id ([access] site_id)"
            )
        table = read_costs(
            ac.costs,
            origin_column=ac.cost_origin,
            site_column=ac.cost_site,
            cost_column=ac.cost_column,
            factor=ac.cost_factor,
            area_ids=frame[inputs.id_column].astype(str).to_numpy(dtype=object),
            site_ids=site_ids,
            id_width=spec.areas.id_width,
            exclusions=inputs.exclusions,
        )
        inputs.inputs.append(table.record)
        pairs = pairs_from_costs(table.origin, table.site, table.cost, len(frame), len(points))
        costs_info = {
            "origin_column": ac.cost_origin,
            "site_column": ac.cost_site,
            "cost_column": ac.cost_column,
            "unit": ac.cost_unit or ac.catchment_unit,
            **table.summary(ac.catchment, len(frame), len(points)),
        }
    else:
        pairs = pairs_within(origin_xy, site_xy, ac.catchment)
    decay = Decay(ac.decay, ac.catchment, ac.steps)
    scores = two_step_fca(population, capacity, pairs, decay)
    counts = {g: frame[g].to_numpy(dtype=float) for g in inputs.groups}
    groups, region_mean, threshold = access_by_group(
        scores.access, population, counts, inputs.reference, ac.low_access_fraction
    )
    ci = None
    if "minority_share" in frame.columns:
        ci = concentration_index(
            scores.access, frame["minority_share"].to_numpy(dtype=float), population
        )
    result = AccessResult(
        method=METHOD_NAMES[ac.decay],
        catchment=ac.catchment,
        catchment_unit=ac.catchment_unit,
        decay=decay,
        origins=ac.origins,
        capacity_column=ac.capacity,
        reference_group=inputs.reference,
        region_mean=region_mean,
        low_access_fraction=ac.low_access_fraction,
        low_access_threshold=threshold,
        groups=groups,
        concentration_index=ci,
        concentration_rank="minority_share" if "minority_share" in frame.columns else None,
        sites=int(len(points)),
        total_capacity=float(capacity.sum()),
        scores=scores,
        costs=costs_info,
    )
    return result.to_dict(), scores.access


#: Ratio of mean access under which a group's finding is salient: the four-fifths rule of
#: thumb borrowed from coverage (29 CFR 1607.4(D) is about selection rates; common
#: practice for access ratios, no single source).
ACCESS_FLAG_RATIO = 0.8


@register_finding("access", order=40)
def access_findings(summary: Mapping[str, Any]) -> list[Finding]:
    """Return the access findings: the groups with the lowest mean access against the reference."""
    section = summary.get("access")
    groups = section.get("groups") if isinstance(section, Mapping) else None
    if not isinstance(section, Mapping) or not isinstance(groups, Mapping):
        return []
    ref = str(section.get("reference_group") or "")
    rows = sorted(
        (float(r), g)
        for g, row in groups.items()
        if g != ref and isinstance(row, Mapping) and (r := number(row.get("ratio"))) is not None
    )
    if not rows:
        return []
    metres = number(section.get("catchment_m"))
    reach = (
        f"{metres / 1000:g} km"
        if metres is not None
        else f"{section.get('catchment')} {section.get('catchment_unit')}"
    )
    low = number(section.get("low_access_fraction"))
    unit = str(summary.get("population_unit") or "people")
    flagged = [(r, g) for r, g in rows if r < ACCESS_FLAG_RATIO] or rows[:1]
    out = []
    for ratio, g in flagged[:3]:
        row = groups[g]
        sentence = (
            f"Access to capacity ({section.get('method')}, catchment {reach}): mean access of "
            f"{label(summary, g)} {unit} is {ratio:.2f} times that of {label(summary, ref)} "
            f"{unit}; {pct(row.get('share_low_access'))} of them live where access is below "
            f"{pct(low, 0)} of the region's mean."
        )
        figures = {
            "group": g,
            "reference_group": ref,
            "mean_access": row.get("mean_access"),
            "reference_mean_access": _reference_mean(groups, ref),
            "ratio": ratio,
            "share_low_access": row.get("share_low_access"),
            "method": section.get("method"),
            "catchment_m": section.get("catchment_m"),
        }
        out.append(Finding("access", sentence, figures, salient=ratio < ACCESS_FLAG_RATIO))
    return out


def _reference_mean(groups: Mapping[str, Any], ref: str) -> Any:
    row = groups.get(ref)
    return row.get("mean_access") if isinstance(row, Mapping) else None
