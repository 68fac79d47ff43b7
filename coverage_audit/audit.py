"""The audit pipeline: spec -> inputs -> coverage -> statistics -> findings -> outputs.

:func:`run_audit` is a straight line of private steps, one per stage:

1. :func:`_read_inputs` reads every file the audit uses (areas and tables, footprints,
   study area, activity table, lending records, replicate table);
2. :func:`~coverage_audit.measure.measure_coverage` measures each area's coverage;
3. :func:`~coverage_audit.statistics.compute_statistics` runs the statistics on arrays;
4. :func:`_findings` gathers the stages' typed results into one
   :class:`~coverage_audit.results.AuditFindings` (``to_dict()`` is summary.json);
5. :func:`_result` adds the manifest and returns the :class:`AuditResult`, whose
   :meth:`~AuditResult.write` writes the output folder.

No stage after the first reads a file or changes the input stage's objects: each returns
what it left out, and the steps gather it here in stage order. Randomness enters only
through one ``numpy.random.Generator`` per statistic spawned from the spec's seed
(:func:`random_streams`), so adding a statistic does not change the others' draws.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np

from .analyses import add_derived_columns
from .apportion import block_cautions
from .coverage import CoverageResult
from .findings import headline_findings
from .footprint import Footprint, build_footprint
from .inputs import AreaInputs, Exclusions, load_areas
from .io.further import FurtherInputs, read_further_inputs
from .manifest import build_manifest
from .margins import cautions, survey_error
from .measure import measure_coverage
from .population_notice import population_scope
from .progress import SilentProgress
from .results import AreaCounts, AuditFindings, AuditResult, ExclusionCounts, TablesJoined
from .spec import AuditSpec, load_spec, spec_from_dict
from .statistics import Statistics, compute_statistics
from .stats.assessment_area import AssessmentAreaReview, review_assessment_area
from .study_area import StudyArea, apply_study_area

__all__ = ["CAUTIONS", "RNG_STREAMS", "AuditResult", "random_streams", "run_audit"]

#: The cautions every summary and report carries, in plain words.
CAUTIONS = (
    "A statistical disparity in coverage is a reason to look closer; it is not by itself "
    "proof of discrimination.",
    "Results depend on the areal units chosen (tracts, block groups or other boundaries "
    "can give other figures) and coverage is areal-weighted: people are assumed to be "
    "spread evenly within each area.",
    "Counts from surveys such as the American Community Survey are estimates with margins "
    "of error; small-area figures can be uncertain and this audit does not carry those "
    "margins into its figures.",
    "Legitimate business and operational factors must be considered before any conclusion "
    "is drawn about why a gap exists.",
    "Legal conclusions belong to counsel and to the regulators under the applicable law. "
    "The four-fifths screen (29 CFR 1607.4(D)) is an employment-selection rule, used here "
    "only as a rule of thumb.",
)

#: Child-stream names, in a fixed order, so each statistic has its own seeded stream.
RNG_STREAMS = ("segregation", "clustering", "enclaves", "explain", "sensitivity", "uncertainty")


def random_streams(seed: int) -> dict[str, np.random.Generator]:
    """One independent Generator per statistic, all from the spec's seed."""
    children = np.random.SeedSequence(seed).spawn(len(RNG_STREAMS))
    return {
        name: np.random.default_rng(child)
        for name, child in zip(RNG_STREAMS, children, strict=True)
    }


@dataclass(frozen=True, eq=False)
class _Read:
    """What the input stage read: the areas, the footprint, the study area, the rest."""

    inputs: AreaInputs
    footprint: Footprint
    study: tuple[StudyArea, gpd.GeoSeries] | None
    further: FurtherInputs


def run_audit(
    spec: AuditSpec | str | Path | dict[str, Any],
    *,
    progress: SilentProgress | None = None,
) -> AuditResult:
    """Run a coverage audit.

    Parameters
    ----------
    spec : AuditSpec, path or dict
        The audit spec, a TOML file, or a mapping with the TOML file's structure.
    progress : SilentProgress, optional
        Step reporter (the CLI passes a terminal one).

    Returns
    -------
    AuditResult

    Examples
    --------
    >>> result = run_audit("demo_regions/ostmere/delivery.toml")  # doctest: +SKIP
    >>> result.summary["coverage"]["groups"]["minority"]["ratio"]  # doctest: +SKIP
    """
    spec = _as_spec(spec)
    progress = progress or SilentProgress()
    started = _dt.datetime.now(_dt.timezone.utc)
    streams = random_streams(spec.analysis.seed)
    read = _read_inputs(spec, progress)
    with population_scope() as announce:  # every area without people: said once
        notice = announce(read.inputs.frame)
        coverage, frame, measured = _measure(spec, read, progress)
        statistics = compute_statistics(
            spec, read.inputs, read.footprint, frame, streams, progress, coverage, read.further
        )
        exclusions = _exclusions(read, measured, statistics)
        findings = _findings(spec, read, coverage, statistics, exclusions, notice, streams)
    return _result(spec, read, measured, statistics, findings, exclusions, started)


def _read_inputs(spec: AuditSpec, progress: SilentProgress) -> _Read:
    """Read every input: areas and tables, footprint, study area and the later inputs."""
    with progress.stage("reading areas"):
        inputs = load_areas(
            spec.areas,
            spec.population,
            analysis_crs=spec.analysis.analysis_crs,
            tables=spec.tables,
        )
    with progress.stage(f"building footprint '{spec.footprint.name}'"):
        footprint = build_footprint(
            spec.footprint,
            inputs,
            inputs.exclusions,
            circle_vertices=spec.analysis.circle_vertices,
            id_width=spec.areas.id_width,
        )
    inputs, study = _study_area(spec, inputs, footprint, progress)
    return _Read(inputs, footprint, study, read_further_inputs(spec, inputs, footprint))


def _measure(
    spec: AuditSpec, read: _Read, progress: SilentProgress
) -> tuple[CoverageResult, gpd.GeoDataFrame, AreaInputs]:
    """Coverage of each area; the derived control columns.

    People placed by blocks or a settlement mask are read by the apportionment, which
    records its file and the rows it leaves out: it gets lists of its own (the third
    value returned), so the input stage's objects stay as read.
    """
    own = replace(read.inputs, exclusions=Exclusions(), inputs=[])
    with progress.stage("measuring coverage"):
        coverage, frame = measure_coverage(spec, own, read.footprint, read.inputs.frame)
    return coverage, add_derived_columns(frame, spec, read.inputs.analysis_crs), own


def _exclusions(read: _Read, measured: AreaInputs, statistics: Statistics) -> Exclusions:
    """Every row left out, in stage order (the later inputs' after the statistics').

    The access sites and cost rows come before the statistics' (where that stage once
    read them), so exclusions.csv keeps its order.
    """
    further = read.further
    access = [] if further.access is None else [further.access.exclusions]
    stages = [read.inputs.exclusions, measured.exclusions, *access, statistics.exclusions]
    stages.append(further.exclusions)
    if further.lending is not None:
        stages.append(further.lending.exclusions)
    if further.replicates is not None:
        stages.append(further.replicates.exclusions)
    return Exclusions([r for stage in stages for r in stage.records])


def _findings(
    spec: AuditSpec,
    read: _Read,
    coverage: CoverageResult,
    statistics: Statistics,
    exclusions: Exclusions,
    notice: str | None,
    streams: dict[str, np.random.Generator],
) -> AuditFindings:
    """Gather the stages' results into the findings tree; survey error; conclusions."""
    inputs, footprint, frame = read.inputs, read.footprint, statistics.frame
    findings = AuditFindings(
        title=spec.title,
        population_notice=notice,
        footprint=footprint,
        areas=_area_counts(inputs, frame, exclusions, read.study),
        coverage=coverage,
        statistics=statistics.findings,
        study_area=None if read.study is None else read.study[0],
        inputs=_table_section(inputs, exclusions),
        assessment_area=(
            _assessment_area(frame, inputs.id_column, footprint)
            if footprint.kind == "ids"
            else None
        ),
        exclusions=ExclusionCounts(exclusions.count(), exclusions.by_reason()),
        group_labels=spec.population.group_labels,
        population_unit=spec.population.unit,
        base_dir=spec.base_dir,
        moran_lag=statistics.moran_lag,
    )
    replicates = read.further.replicates
    survey = survey_error(
        findings.sections(),
        frame,
        inputs,
        spec,
        streams["uncertainty"],
        None if replicates is None else replicates.aligned(_ids(frame, inputs)),
    )
    return _conclude(spec, replace(findings, survey=survey))


def _result(
    spec: AuditSpec,
    read: _Read,
    measured: AreaInputs,
    statistics: Statistics,
    findings: AuditFindings,
    exclusions: Exclusions,
    started: _dt.datetime,
) -> AuditResult:
    """Return the result: areas in output order, findings, exclusions, manifest."""
    inputs, further = read.inputs, read.further
    lending = () if further.lending is None else further.lending.records
    costs = () if further.access is None else further.access.records
    # Files read after the areas', in the manifest's order: the people placed in areas,
    # the access costs, the other footprints and activity table, the lending records.
    later = (*measured.inputs, *costs, *further.records, *lending)
    finished = _dt.datetime.now(_dt.timezone.utc)
    manifest = build_manifest(spec, inputs, read.footprint, started, finished, later)
    # Tolerance under which boundaries count as shared (tolerant contiguity, edges.py).
    manifest["edge_tolerance_m"] = findings.statistics.weights.to_dict()["edge_tolerance_m"]
    return AuditResult(
        areas=_order_columns(statistics.frame, inputs),
        findings=findings,
        exclusions=exclusions.to_frame(),
        manifest=manifest,
        spec=spec,
        footprint=read.footprint,
        id_column=inputs.id_column,
        groups=inputs.groups,
        inputs=inputs,
        outside_study_area=None if read.study is None else read.study[1],
    )


def _ids(frame: gpd.GeoDataFrame, inputs: AreaInputs) -> list[str]:
    return frame[inputs.id_column].astype(str).tolist()


def _as_spec(spec: AuditSpec | str | Path | dict[str, Any]) -> AuditSpec:
    if isinstance(spec, AuditSpec):
        return spec
    if isinstance(spec, dict):
        return spec_from_dict(spec)
    return load_spec(spec)


def _conclude(spec: AuditSpec, findings: AuditFindings) -> AuditFindings:
    """Add the cautions and the headline findings, both read from the other sections."""
    summary = findings.sections()
    said = cautions(CAUTIONS, summary)
    if spec.blocks is not None or spec.dasymetric is not None:
        said = block_cautions(said, summary)
    summary["cautions"] = said
    summary.pop("findings")
    return findings.with_conclusions(tuple(said), tuple(headline_findings(summary)))


def _assessment_area(
    frame: gpd.GeoDataFrame, id_column: str, footprint: Footprint
) -> AssessmentAreaReview:
    """Return the assessment-area review of a footprint of whole areas (12 CFR 228.41)."""
    ids = frame[id_column].astype(str).to_numpy()
    return review_assessment_area(
        ids,
        np.asarray(frame.geometry.array, dtype=object),
        np.isin(ids, sorted(footprint.served_ids or ())),
        frame["income_tier"].to_numpy(dtype=object) if "income_tier" in frame else None,
        frame["majority_minority"].to_numpy(dtype=bool) if "majority_minority" in frame else None,
        frame["population"].to_numpy(dtype=float),
    )


def _study_area(
    spec: AuditSpec, inputs: AreaInputs, footprint: Footprint, progress: SilentProgress
) -> tuple[AreaInputs, tuple[Any, gpd.GeoSeries] | None]:
    """Keep the areas inside ``[study_area]`` (all of them without one)."""
    if spec.study_area is None:
        return inputs, None
    with progress.stage(f"study area '{spec.study_area.name}'"):
        kept, study, outside = apply_study_area(
            spec.study_area, inputs, footprint, id_width=spec.areas.id_width
        )
    return kept, (study, outside)


def _area_counts(
    inputs: AreaInputs,
    frame: gpd.GeoDataFrame,
    exclusions: Exclusions,
    study: tuple[StudyArea, gpd.GeoSeries] | None,
) -> AreaCounts:
    return AreaCounts(
        input=inputs.input_rows,
        analysed=int(len(frame)),
        excluded=exclusions.count("areas"),
        repaired_geometries=inputs.repaired,
        zero_population=int((frame["population"] <= 0).sum()),
        income_unknown=inputs.income_unknown,
        water_only=tuple(inputs.water_only),
        outside_study_area=None if study is None else study[0].areas_outside,
    )


def _table_section(inputs: AreaInputs, exclusions: Exclusions) -> TablesJoined | None:
    table = [r for r in inputs.inputs if r.role == "table"]
    if not table:
        return None
    rows = table[0].rows
    excluded = exclusions.count("table") if len(table) == 1 else (rows - inputs.matches[0].matched)
    return TablesJoined(rows, excluded, tuple(inputs.matches))


def _order_columns(frame: gpd.GeoDataFrame, inputs: AreaInputs) -> gpd.GeoDataFrame:
    first = [inputs.id_column, "population", *inputs.groups, *[f"{g}_share" for g in inputs.groups]]
    middle = [
        c
        for c in (
            "majority_minority",
            "income_ratio",
            "income_tier",
            "area_km2",
            "covered_fraction",
            "served",
            "nearest_site_m",
            "lisa_cluster",
            "lisa_I",
            "lisa_p",
            "lisa_q",
            "enclave_id",
        )
        if c in frame.columns
    ]
    rest = [
        c for c in frame.columns if c not in first and c not in middle and c != frame.geometry.name
    ]
    return frame[[*first, *middle, *rest, frame.geometry.name]]
