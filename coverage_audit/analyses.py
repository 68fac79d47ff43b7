"""Further analyses a spec may ask for: controls, rules, sensitivity, comparisons, peers.

Takes the audited areas (with coverage and statistics), the spec and the footprint, and
gives the summary sections ``explain``, ``sensitivity``, ``comparison``, ``change`` and
``peers``. Each section calls the pure functions of :mod:`coverage_audit.explain` and
:mod:`coverage_audit.compare`; this module only prepares their inputs (derived control
variables, other footprints' coverage) and records why a section could not be computed
instead of failing the whole audit. It reads no file: the other footprints and the
activity table come read by the input stage (:mod:`coverage_audit.io.further`).
"""

from __future__ import annotations

import warnings
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import Geod, Transformer

from .apportion import (
    change_apportionment,
    further_footprint,
    placement,
    served_basis,
    sweep_apportionment,
)
from .compare import change_between, compare_footprints, peer_comparison
from .coverage import coverage_by_group, footprint_fractions
from .enclaves import count_enclaves
from .errors import AnalysisError, DegenerateStatisticWarning, InputError
from .explain import DEFAULT_THRESHOLDS, discover_rules, exclusion_models, sensitivity_thresholds
from .footprint import Footprint
from .inputs import AreaInputs, InputRecord
from .io.joins import MatchReport
from .options import enclave_options
from .reach_sweep import circle_fractions
from .results import ExplainFindings, Section, Skipped, WithDetails
from .spec import AuditSpec
from .weights import AreaGraph

#: Served thresholds of the sensitivity sweep: the one grid, 0.25 to 0.75 (stats.sweeps).
SWEEP_THRESHOLDS = DEFAULT_THRESHOLDS
#: Reach multipliers of the radius sweep for point footprints (half to double).
SWEEP_RADII = (0.5, 0.75, 1.0, 1.25, 1.5, 2.0)


def add_derived_columns(frame: gpd.GeoDataFrame, spec: AuditSpec, crs: Any) -> gpd.GeoDataFrame:
    """Add the control variables the tool derives: density, distances in km."""
    frame = frame.copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        area = frame["area_km2"].to_numpy(dtype=float)
        frame["population_density"] = np.where(
            area > 0, frame["population"] / np.where(area > 0, area, 1), np.nan
        )
    if "nearest_site_m" in frame.columns:
        frame["nearest_site_km"] = frame["nearest_site_m"] / 1000.0
    explain = spec.explain
    if explain is not None and explain.hub is not None:
        reps = shapely.point_on_surface(np.asarray(frame.geometry.array, dtype=object))
        to_geo = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
        lon, lat = to_geo.transform(shapely.get_x(reps), shapely.get_y(reps))
        hub_lon = np.full(len(frame), explain.hub[0])
        hub_lat = np.full(len(frame), explain.hub[1])
        _, _, dist = Geod(ellps="WGS84").inv(lon, lat, hub_lon, hub_lat)
        frame[f"distance_to_{explain.hub_name}_km"] = np.asarray(dist) / 1000.0
    return frame


def explain_section(
    frame: gpd.GeoDataFrame, spec: AuditSpec, id_column: str, graph: AreaGraph
) -> ExplainFindings:
    """Exclusion models and rule discovery, as the ``[explain]`` table asks."""
    explain = spec.explain
    assert explain is not None
    models: Section | None = None
    rules: Section | None = None
    table = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    missing = [c for c in (*explain.controls, *explain.rule_conditions) if c not in table.columns]
    if missing:
        raise InputError(
            f"[explain] names column {missing[0]!r}, which the areas do not have; available "
            f"columns are {[c for c in table.columns if not c.endswith('_share')]}"
        )
    if "minority_share" not in table.columns:
        reason = "needs the minority share: set derive_minority = true or name a group minority"
        return ExplainFindings(Skipped(reason), Skipped(reason))
    if explain.models:
        try:
            models = exclusion_models(
                table,
                controls=explain.controls,
                id_column=id_column,
                categorical=explain.categorical,
                weights=graph,
            )
        except AnalysisError as exc:
            warnings.warn(
                f"exclusion models not estimated: {exc}", DegenerateStatisticWarning, stacklevel=2
            )
            models = Skipped(str(exc))
    if explain.rules:
        try:
            rules = discover_rules(
                table,
                conditions=explain.rule_conditions,
                max_length=explain.rule_max_length,
                min_support=explain.rule_min_support,
            )
        except AnalysisError as exc:
            rules = Skipped(str(exc))
    return ExplainFindings(models, rules)


def _enclave_counts(
    served_sets: list[np.ndarray], frame: gpd.GeoDataFrame, graph: AreaGraph, spec: AuditSpec
) -> list[int]:
    """Enclave count for each served set, in one pass over the edge table."""
    population = frame["population"].to_numpy(dtype=float)
    return count_enclaves(
        served_sets, population, graph, **enclave_options(spec.analysis, population)
    )


def sensitivity_section(
    frame: gpd.GeoDataFrame,
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    graph: AreaGraph,
) -> dict[str, Any]:
    """Recompute the disparity and enclave count over served thresholds and reaches."""
    groups, reference = inputs.groups, inputs.reference
    fraction = served_basis(frame)  # covered population share when people were placed
    counts = {g: frame[g].to_numpy(dtype=float) for g in groups}
    geoms = np.asarray(frame.geometry.array, dtype=object)
    rows = sensitivity_thresholds(
        fraction,
        counts,
        reference,
        SWEEP_THRESHOLDS,
        against="highest" if spec.analysis.comparison == "highest" else "reference",
    )
    threshold_rows = []
    counts_at = _enclave_counts([fraction >= t for t in SWEEP_THRESHOLDS], frame, graph, spec)
    for row, count in zip(rows, counts_at, strict=True):
        entry = row.to_dict()
        entry["enclaves"] = count
        threshold_rows.append(entry)
    out: dict[str, Any] = {"thresholds": threshold_rows, **sweep_apportionment(spec, footprint)}
    if footprint.kind == "points" and footprint.points is not None:
        points = footprint.points.to_crs("EPSG:4326")
        lon = points.geometry.x.to_numpy()
        lat = points.geometry.y.to_numpy()
        base = footprint.points["radius_m"].to_numpy(dtype=float)
        radius_rows = []
        radius_served = []
        # One pass over the areas per reach, without dissolving the circles (reach_sweep).
        swept = circle_fractions(
            geoms,
            lon,
            lat,
            [base * factor for factor in SWEEP_RADII],
            footprint.crs,
            spec.analysis.circle_vertices,
        )
        for factor, cf in zip(SWEEP_RADII, swept, strict=True):
            cov = coverage_by_group(
                frame,
                groups=groups,
                reference=reference,
                fraction=cf,
                threshold=spec.analysis.served_threshold,
                comparison=spec.analysis.comparison,
            )
            radius_rows.append(
                {
                    "factor": factor,
                    "radius_m": float(np.median(base) * factor),
                    "served_area_share": float(np.mean(cf >= spec.analysis.served_threshold)),
                    "groups": {
                        g: {
                            "rate": c.rate,
                            "ratio": c.ratio,
                            "served_area_ratio": c.served_area_ratio,
                            "below_four_fifths": c.below_four_fifths,
                        }
                        for g, c in cov.groups.items()
                    },
                }
            )
            radius_served.append(cf >= spec.analysis.served_threshold)
        for entry, count in zip(
            radius_rows, _enclave_counts(radius_served, frame, graph, spec), strict=True
        ):
            entry["enclaves"] = count
        out["radius"] = radius_rows
    return out


def other_footprints(
    spec: AuditSpec,
    inputs: AreaInputs,
    frame: gpd.GeoDataFrame,
    graph: AreaGraph,
    built: tuple[Footprint, ...],
) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Coverage and enclave counts of every footprint after the first.

    Returns the comparison section and each footprint's covered fractions by name (the
    first included): covered population shares when people were placed by blocks or a
    mask (:func:`~coverage_audit.apportion.further_footprint`).
    """
    geoms = np.asarray(frame.geometry.array, dtype=object)
    ids = frame[inputs.id_column].to_numpy(dtype=object)
    threshold = spec.analysis.served_threshold
    fractions = {spec.footprint.name: served_basis(frame)}
    results: dict[str, Any] = {}
    for fp in built:
        # Counted by blocks or mask as the first footprint was, when the spec places people.
        cf, covered = further_footprint(
            spec, inputs, fp, frame, footprint_fractions(fp, geoms, ids.tolist())
        )
        fractions[fp.name] = cf
        cov = coverage_by_group(
            frame,
            groups=inputs.groups,
            reference=inputs.reference,
            fraction=cf,
            threshold=threshold,
            comparison=spec.analysis.comparison,
            covered=covered,
        ).to_dict()
        if covered is not None:
            cov["apportionment"] = placement(spec)
        results[fp.name] = {
            "coverage": cov,
            "enclave_count": _enclave_counts([cf >= threshold], frame, graph, spec)[0],
        }
    return results, fractions


def comparison_section(primary: dict[str, Any], others: dict[str, Any]) -> Section:
    """Side-by-side coverage of every footprint, ranked."""
    merged = {**primary, **others}
    methods = {str(v["coverage"].get("apportionment", "areal")) for v in merged.values()}
    placed = {} if methods == {"areal"} else {"apportionment": "/".join(sorted(methods))}
    return WithDetails(compare_footprints(merged), placed)


def change_section(
    spec: AuditSpec, inputs: AreaInputs, frame: gpd.GeoDataFrame, fractions: dict[str, np.ndarray]
) -> Section:
    """Areas that lost or gained service between two footprints, and the rate changes."""
    assert spec.change is not None
    table = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    threshold = spec.analysis.served_threshold

    def side(name: str) -> pd.DataFrame:
        cf = fractions[name]
        return table.assign(covered_fraction=cf, served=cf >= threshold)

    change = change_between(
        side(spec.change.before),
        side(spec.change.after),
        id_column=inputs.id_column,
        groups=inputs.groups,
        reference=inputs.reference,
        threshold=threshold,
    )
    return WithDetails(change, change_apportionment(spec))


#: Columns that name a service site, in order of preference.
SITE_NAME_COLUMNS = ("name", "site_name", "site_id", "id")


def _site_names(footprint: Footprint) -> dict[str, tuple[str, float, float]]:
    """Site key -> (display name, longitude, latitude) of a points footprint.

    The key is the name column when there is one, else the location.
    """
    points = footprint.points
    if points is None or points.empty:
        return {}
    column = next((c for c in SITE_NAME_COLUMNS if c in points.columns), None)
    xy = [f"{p.x:.0f} {p.y:.0f}" for p in points.geometry]
    names = [str(v) for v in points[column]] if column is not None else xy
    keys = names if column is not None else xy
    lonlat = points.geometry.to_crs(4326)
    places = [
        (n, round(float(p.x), 6), round(float(p.y), 6)) for n, p in zip(names, lonlat, strict=True)
    ]
    return dict(zip(keys, places, strict=True))


def site_changes(change: Any, footprints: list[Footprint]) -> dict[str, Any]:
    """Return the footprints compared and, for points, the sites closed and opened."""
    by_name = {f.name: f for f in footprints}
    before, after = by_name.get(change.before), by_name.get(change.after)
    out: dict[str, Any] = {"before": change.before, "after": change.after}
    if before is not None and after is not None and before.kind == after.kind == "points":
        old, new = _site_names(before), _site_names(after)
        closed = sorted(old[k] for k in old.keys() - new.keys())
        opened = sorted(new[k] for k in new.keys() - old.keys())
        out["sites_closed"] = [name for name, _, _ in closed]
        out["sites_opened"] = [name for name, _, _ in opened]
        # Positions (longitude, latitude in degrees) for the map's layer of changed sites.
        out["site_changes"] = [
            {"name": name, "change": change, "lon": lon, "lat": lat}
            for change, rows in (("closed", closed), ("opened", opened))
            for name, lon, lat in rows
        ]
    return out


def peers_section(
    spec: AuditSpec,
    inputs: AreaInputs,
    frame: gpd.GeoDataFrame,
    activity_read: tuple[pd.DataFrame, InputRecord, MatchReport],
) -> WithDetails:
    """Each lender's share of activity in majority-minority areas against its peers."""
    activity = spec.activity
    assert activity is not None
    if "majority_minority" not in frame.columns:
        raise InputError(
            "[activity] needs majority-minority areas: set derive_minority = true or name a "
            "group minority in [population]"
        )
    table, _, match = activity_read
    flags = pd.Series(
        frame["majority_minority"].to_numpy(dtype=bool),
        index=frame[inputs.id_column].to_numpy(dtype=object),
    )
    result = peer_comparison(
        table,
        id_column=activity.id,
        majority_minority=flags,
        lender_column=activity.lender_column,
        count_column=activity.count_column,
        lender_columns=list(activity.lender_columns) if activity.lender_columns else None,
        alpha=activity.alpha,
    )
    return WithDetails(result, {"match": match.to_dict()})
