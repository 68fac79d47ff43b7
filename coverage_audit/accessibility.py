"""The ``[access]`` stage: capacity-aware access to the footprint's points, by group.

Takes the spec, the analysed areas (analysis CRS, with ``population``, the group counts
and ``minority_share``) and the points footprint, and gives the ``access`` section of
summary.json and each area's score (column ``access`` of areas.csv). Site capacities come
from a column of the points file (1 each by default); distances are straight lines in the
analysis CRS between area centroids and sites, or the rows of a travel-cost table. The
sites and the cost table are checked and read in the input stage
(:func:`coverage_audit.io.costs.read_access_inputs`); this stage reads no file. The
statistics themselves are in :mod:`coverage_audit.stats.access`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .findings import Finding, label, number, pct, register_finding
from .inputs import AreaInputs
from .io.costs import AccessInputs
from .spec import AuditSpec
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


def measure_access(
    spec: AuditSpec, inputs: AreaInputs, frame: gpd.GeoDataFrame, access: AccessInputs
) -> tuple[dict[str, Any], np.ndarray]:
    """Run 2SFCA / E2SFCA as ``[access]`` asks; return the summary section and the scores.

    ``access`` is what the input stage read (:func:`~coverage_audit.io.costs.read_access_inputs`):
    the usable sites and their capacities, the matched cost table. Reads no file.
    """
    ac = spec.access
    assert ac is not None
    points, capacity = access.points, access.capacity
    site_xy = shapely.get_coordinates(np.asarray(points.geometry.array))
    # The centroid of each area in the analysis CRS ([access] origins = "centroid").
    origin_xy = shapely.get_coordinates(shapely.centroid(np.asarray(frame.geometry.array)))
    population = frame["population"].to_numpy(dtype=float)
    costs_info = None
    table = access.costs
    if table is not None:
        origin = _frame_positions(table.origin, access.area_ids, frame, inputs.id_column)
        pairs = pairs_from_costs(origin, table.site, table.cost, len(frame), len(points))
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


def _frame_positions(
    origin: np.ndarray, area_ids: tuple[str, ...], frame: gpd.GeoDataFrame, id_column: str
) -> np.ndarray:
    """Return the cost rows' area positions in ``frame`` (read against ``area_ids``)."""
    ids = frame[id_column].astype(str).to_numpy(dtype=object)
    if tuple(ids.tolist()) == area_ids:
        return origin
    moved = pd.Index(ids).get_indexer(np.asarray(area_ids, dtype=object)[origin])
    return moved.astype(np.int64)


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
