"""The statistics stage: segregation, contiguity, clustering, enclaves, further analyses.

:func:`compute_statistics` takes the areas with their coverage (and the later inputs the
input stage read, :class:`~coverage_audit.io.further.FurtherInputs`), runs every
statistic the spec asks for on its own seeded stream and returns a :class:`Statistics`:
the typed results (:class:`~coverage_audit.results.SpatialFindings`), the frame with the
statistics' columns, and what the stage left out. It reads no file and changes no input
object.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import geopandas as gpd
import numpy as np

from . import analyses
from .accessibility import measure_access
from .clustering import ClusteringResult, clustering_summary
from .coverage import CoverageResult
from .enclaves import find_enclaves, footprint_holes
from .errors import AnalysisError, DegenerateStatisticWarning
from .footprint import Footprint
from .inputs import AreaInputs, Exclusions
from .io.further import FurtherInputs
from .lending import lending_section  # also registers the lending findings
from .options import enclave_options
from .progress import SilentProgress
from .results import FootprintsCompared, Section, SkippedClustering, SpatialFindings, WithDetails
from .segregation import segregation_summary
from .spec import AnalysisSpec, AuditSpec
from .stats.moran_scatter import spatial_lag
from .weights import ISLAND_REASON, AreaGraph, build_area_graph


@dataclass(frozen=True, eq=False)
class Statistics:
    """What the statistics stage returns.

    Attributes
    ----------
    findings : SpatialFindings
        The typed results (segregation, contiguity, clustering, enclaves, further).
    frame : geopandas.GeoDataFrame
        The per-area frame with the statistics' columns added.
    exclusions : Exclusions
        The rows the stage leaves out: the areas the spatial statistics leave out (islands).
    moran_lag : numpy.ndarray or None
        The Moran scatterplot's lag per area, when the clustering statistics ran.
    """

    findings: SpatialFindings
    frame: gpd.GeoDataFrame
    exclusions: Exclusions
    moran_lag: np.ndarray | None = None


def compute_statistics(
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    frame: gpd.GeoDataFrame,
    streams: dict[str, np.random.Generator],
    progress: SilentProgress,
    coverage: CoverageResult,
    further: FurtherInputs | None = None,
) -> Statistics:
    """Segregation, contiguity, clustering, enclaves and the further analyses.

    ``inputs`` is read, never changed: what the stage leaves out is returned.
    """
    further = further or FurtherInputs()
    an = spec.analysis
    frame = frame.copy()
    ids = frame[inputs.id_column].to_numpy(dtype=object)
    geoms = np.asarray(frame.geometry.array, dtype=object)
    population = frame["population"].to_numpy(dtype=float)
    counts = {g: frame[g].to_numpy(dtype=float) for g in inputs.groups}
    served = frame["served"].to_numpy(dtype=bool)
    fraction = frame["covered_fraction"].to_numpy(dtype=float)
    with progress.stage("segregation indices"):
        segregation = segregation_summary(
            counts,
            population,
            inputs.reference,
            served,
            fraction,
            permutations=an.permutations,
            rng=streams["segregation"],
        )
    with progress.stage(f"{an.contiguity} contiguity"):
        graph = build_area_graph(
            geoms, ids, kind=an.contiguity, island_policy=an.islands, knn_k=an.knn_k
        )
    left_out = Exclusions()
    if graph.islands and an.islands == "exclude":
        rows = frame.loc[graph.island_mask, "source_row"]
        left_out.add("spatial_statistics", rows, list(graph.islands), ISLAND_REASON)
    with progress.stage("clustering"):
        clustering = _clustering(frame, graph, an, streams["clustering"])
    with progress.stage("enclaves"):
        holes: tuple[Any, ...] = ()
        if footprint.kind not in ("ids", "zips"):
            holes = footprint_holes(footprint.geometry, geoms, ids, population, counts)
        enclaves = find_enclaves(
            geoms,
            ids,
            served,
            population,
            counts,
            graph,
            **enclave_options(an, population),
            income_tier=frame["income_tier"].to_numpy(dtype=object)
            if "income_tier" in frame
            else None,
            reference_group=inputs.reference,
            mc_draws=an.enclave_draws,
            rng=streams["enclaves"],
            holes=holes,
            contrast_group=an.contrast_group,
        )
    frame["enclave_id"] = enclaves.enclave_id
    primary = {"coverage": coverage.to_dict(), "enclave_count": len(enclaves.enclaves)}
    sections = _further_analyses(spec, inputs, footprint, frame, graph, primary, progress, further)
    if further.access is not None:
        # Sites and cost table as the input stage read them (io/costs.read_access_inputs).
        with progress.stage("access (two-step floating catchment)"):
            sections["access"], frame["access"] = measure_access(
                spec, inputs, frame, further.access
            )
    lag = None
    if isinstance(clustering, ClusteringResult) and graph.stats_mask.sum() >= 3:
        lag = spatial_lag(fraction, graph.stats_graph("r").sparse, graph.stats_mask)
    return Statistics(
        findings=SpatialFindings(segregation, graph, clustering, enclaves, sections),
        frame=frame,
        exclusions=left_out,
        moran_lag=lag,
    )


def _clustering(
    frame: gpd.GeoDataFrame, graph: AreaGraph, an: AnalysisSpec, rng: np.random.Generator
) -> ClusteringResult | SkippedClustering:
    """Moran, join counts, bivariate and local Moran; LISA columns added to ``frame``."""
    n = len(frame)
    minority = (
        frame["minority_share"].to_numpy(dtype=float)
        if "minority_share" in frame.columns
        else np.full(n, np.nan)
    )
    majority = (
        frame["majority_minority"].to_numpy(dtype=bool)
        if "majority_minority" in frame.columns
        else np.zeros(n, dtype=bool)
    )
    try:
        result = clustering_summary(
            frame["covered_fraction"].to_numpy(dtype=float),
            minority,
            frame["served"].to_numpy(dtype=bool),
            majority,
            frame["population"].to_numpy(dtype=float),
            graph,
            permutations=an.permutations,
            rng=rng,
            fdr=an.fdr,
            alpha=an.alpha,
        )
    except AnalysisError as exc:
        warnings.warn(
            f"spatial clustering statistics not computed: {exc}",
            DegenerateStatisticWarning,
            stacklevel=3,
        )
        return SkippedClustering(graph, str(exc))
    lisa = result.area_frame()
    for column in lisa.columns:
        frame[column] = lisa[column].to_numpy()
    return result


def _further_analyses(
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    frame: gpd.GeoDataFrame,
    graph: AreaGraph,
    primary: dict[str, Any],
    progress: SilentProgress,
    further: FurtherInputs,
) -> dict[str, Any]:
    """Comparisons, change, peers, lending, controls and sensitivity, as the spec asks.

    Adds per-area columns to ``frame`` in place (other footprints' covered fractions, the
    lending map columns). The other footprints, the activity table and the lending
    records come read, in ``further``. Returns the sections keyed as in summary.json.
    """
    out: dict[str, Section | dict[str, Any]] = {}
    built = list(further.footprints)
    if len(spec.footprints) > 1:
        with progress.stage("other footprints"):
            others, fractions = analyses.other_footprints(
                spec, inputs, frame, graph, further.footprints
            )
        for name, cf in fractions.items():
            if name != spec.footprint.name:
                frame[f"covered_fraction_{name}"] = cf
        out["comparison"] = analyses.comparison_section({spec.footprint.name: primary}, others)
        out["footprints_compared"] = FootprintsCompared((footprint, *built))
        if spec.change is not None:
            out["change"] = WithDetails(
                analyses.change_section(spec, inputs, frame, fractions),
                analyses.site_changes(spec.change, [footprint, *built]),
            )
    if further.activity is not None:
        with progress.stage("peer comparison"):
            out["peers"] = analyses.peers_section(spec, inputs, frame, further.activity)
    if further.lending is not None:
        with progress.stage("lending records"):
            out["lending"] = lending_section(spec, further.lending, frame, inputs.id_column)
    if spec.explain is not None:
        with progress.stage("exclusion models and rules"):
            out["explain"] = analyses.explain_section(frame, spec, inputs.id_column, graph)
    if spec.analysis.sensitivity:
        with progress.stage("sensitivity"):
            out["sensitivity"] = analyses.sensitivity_section(frame, spec, inputs, footprint, graph)
    return out
