"""The coverage stage: covered fraction, served flag and nearest-site distance per area.

Wires :mod:`coverage_audit.coverage` (or the dask engine of
:mod:`coverage_audit.distributed`) and, when the spec places people within areas, the
block or settlement-mask apportionment (:mod:`coverage_audit.apportion`).
"""

from __future__ import annotations

from dataclasses import replace

import geopandas as gpd
import numpy as np

from .apportion import apportion
from .coverage import CoverageResult, coverage_by_group, footprint_fractions, nearest_site_distance
from .distributed import covered_fraction_distributed
from .footprint import Footprint
from .inputs import AreaInputs
from .spec import AuditSpec


def measure_coverage(
    spec: AuditSpec, inputs: AreaInputs, footprint: Footprint, frame: gpd.GeoDataFrame
) -> tuple[CoverageResult, gpd.GeoDataFrame]:
    """Covered fraction, served flag and (points) nearest-site distance of each area."""
    geoms = np.asarray(frame.geometry.array, dtype=object)
    if spec.analysis.engine == "dask" and footprint.kind not in ("ids", "zips"):
        fraction = _dask_fractions(spec, frame, footprint)
    else:
        fraction = footprint_fractions(footprint, geoms, frame[inputs.id_column].tolist())
    frame = frame.copy()
    frame["covered_fraction"] = fraction
    frame["served"] = fraction >= spec.analysis.served_threshold
    placed = None
    if spec.blocks is not None or spec.dasymetric is not None:  # people placed within areas
        placed = apportion(spec, inputs, footprint, frame)
        frame, fraction = placed.frame, placed.share
        geoms = np.asarray(frame.geometry.array, dtype=object)
    distance = None
    if footprint.kind == "points" and footprint.points is not None:
        distance = nearest_site_distance(
            geoms, np.asarray(footprint.points.geometry.array), inputs.analysis_crs
        )
        frame["nearest_site_m"] = distance
    coverage = coverage_by_group(
        frame,
        groups=inputs.groups,
        reference=inputs.reference,
        fraction=fraction,
        threshold=spec.analysis.served_threshold,
        comparison=spec.analysis.comparison,
        distance_m=distance,
        covered=None if placed is None else placed.covered,
    )
    if placed is not None:
        coverage = replace(
            coverage, apportionment=placed.method, apportionment_detail=placed.section
        )
    return coverage, frame


def _dask_fractions(spec: AuditSpec, frame: gpd.GeoDataFrame, footprint: Footprint) -> np.ndarray:
    """Covered fractions on dask: local threads, or the cluster at ``dask_scheduler``."""
    an = spec.analysis
    if an.dask_scheduler is None:
        return covered_fraction_distributed(
            frame[["geometry"]], footprint.pieces, npartitions=an.partitions
        )
    from distributed import Client

    with Client(an.dask_scheduler) as client:
        return covered_fraction_distributed(
            frame[["geometry"]], footprint.pieces, npartitions=an.partitions, client=client
        )
