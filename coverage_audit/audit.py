"""The audit pipeline: spec -> inputs -> footprint -> coverage -> statistics -> findings.

:func:`run_audit` runs every stage in order and returns an :class:`AuditResult` holding the
per-area GeoDataFrame, the summary (the content of summary.json), the exclusions table and
the manifest; :meth:`AuditResult.write` writes the output folder. Randomness enters only
through one ``numpy.random.Generator`` made from the spec's seed, from which each
statistic gets its own child stream, so adding a statistic does not change the others.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import platform
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from importlib import metadata
from pathlib import Path
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import numpy as np
import pandas as pd

from . import analyses
from ._util import relative_paths, to_jsonable
from ._version import __version__
from .accessibility import measure_access
from .analyses import FurtherInputs, add_derived_columns, read_further_inputs
from .clustering import clustering_summary
from .coverage import CoverageResult, coverage_by_group, footprint_fractions, nearest_site_distance
from .enclaves import find_enclaves, footprint_holes
from .errors import AnalysisError, DegenerateStatisticWarning, InputError
from .findings import build_findings
from .footprint import Footprint, build_footprint
from .inputs import AreaInputs, Exclusions, InputRecord, load_areas
from .lending import lending_section  # also registers the lending findings
from .margins import cautions, survey_error
from .options import enclave_options
from .outputs import OutputClaim, claim_output_dir, folder_problem, write_all, write_json
from .population_notice import population_scope
from .progress import SilentProgress
from .segregation import segregation_summary
from .spec import AnalysisSpec, AuditSpec, load_spec, spec_from_dict
from .stats.assessment_area import review_assessment_area
from .study_area import apply_study_area
from .weights import ISLAND_REASON, AreaGraph, build_area_graph

if TYPE_CHECKING:
    from .report.folder import Display

SCHEMA_VERSION = 1

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

#: Libraries whose versions go into the manifest.
LIBRARIES = (
    "numpy",
    "pandas",
    "shapely",
    "pyproj",
    "pyogrio",
    "geopandas",
    "libpysal",
    "esda",
    "scipy",
    "statsmodels",
    "folium",
    "xstatic-leaflet",
    "matplotlib",
)

#: Child-stream names, in a fixed order, so each statistic has its own seeded stream.
RNG_STREAMS = ("segregation", "clustering", "enclaves", "explain", "sensitivity", "uncertainty")


def library_versions() -> dict[str, str | None]:
    """Installed versions of the libraries the results depend on."""
    out: dict[str, str | None] = {}
    for name in LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def random_streams(seed: int) -> dict[str, np.random.Generator]:
    """One independent Generator per statistic, all from the spec's seed."""
    children = np.random.SeedSequence(seed).spawn(len(RNG_STREAMS))
    return {
        name: np.random.default_rng(child)
        for name, child in zip(RNG_STREAMS, children, strict=True)
    }


@dataclass
class AuditResult:
    """Everything an audit found.

    Attributes
    ----------
    areas : geopandas.GeoDataFrame
        One row per analysed area (analysis CRS) with the output columns.
    summary : dict
        The findings; exactly what summary.json holds.
    exclusions : pandas.DataFrame
        Every input row not analysed: source, row, id, reason.
    manifest : dict
        Provenance: versions, resolved spec, input digests, CRS, seed, times.
    spec : AuditSpec
    footprint : Footprint
    """

    areas: gpd.GeoDataFrame
    summary: dict[str, Any]
    exclusions: pd.DataFrame
    manifest: dict[str, Any]
    spec: AuditSpec
    footprint: Footprint
    id_column: str
    groups: list[str]
    extras: dict[str, Any] = field(default_factory=dict)

    def write(
        self,
        out_dir: str | Path,
        *,
        progress: SilentProgress | None = None,
        claim: OutputClaim | None = None,
    ) -> dict[str, Path]:
        """Write the output folder (see DESIGN.md's output contract); return the paths.

        Everything is written into a fresh folder beside ``out_dir`` and swapped in at the
        end (see :mod:`coverage_audit.outputs`), so the folder never mixes this run's
        outputs with an earlier run's. ``claim`` is the folder already checked and locked
        by :func:`~coverage_audit.outputs.claim_output_dir` (the CLI claims it before the
        analysis); without it the folder is claimed here.
        """
        out = Path(out_dir)
        own = claim is None
        held = claim_output_dir(out) if claim is None else claim
        try:
            staged = self._write_into(held.staging(), out, progress or SilentProgress())
            held.commit()
        except OSError as exc:  # disk full, permissions changed meanwhile, ...
            raise InputError(folder_problem(out, exc) + "; nothing was changed") from None
        finally:
            if own:
                held.release()
        return {key: out / path.name for key, path in staged.items()}

    def _write_into(self, out: Path, final: Path, progress: SilentProgress) -> dict[str, Path]:
        # The drawing modules (matplotlib, the map) load only when an audit is written.
        from .report.folder import render, write_display

        with progress.stage("writing tables"):
            paths = write_all(
                out,
                summary=self.summary,
                areas=self.areas,
                exclusions=self.exclusions,
                id_columns=(self.id_column,),
            )
            display = self.display()
            if self.spec.output.map or self.spec.output.report:  # what the pages draw
                paths.update(write_display(out, display, self.areas))
        drawn, extra = render(
            out,
            summary=self.summary,
            manifest=self.manifest,
            areas=self.areas,
            exclusions=self.exclusions,
            display=display,
            progress=progress,
            output=dataclasses.asdict(self.spec.output),
        )
        paths.update(drawn)
        outputs = {key: to_plain(value) for key, value in extra.items()}
        if isinstance(outputs.get("map"), dict) and "path" in outputs["map"]:
            outputs["map"]["path"] = str(final / "map.html")  # where it ends up
        # Written last and once, so it can say what the map and report hold.
        write_json(paths["manifest"], {**self.manifest, "outputs": outputs})
        return paths

    def display(self) -> Display:
        """Return what the map and the report draw besides the summary and tables."""
        from .report.folder import Display, moran_lag

        moran = self.extras.get("moran", {})
        return Display(
            id_column=self.id_column,
            groups=tuple(self.groups),
            reference=self.spec.population.reference,
            footprint=self.footprint_for_display(),
            outside=self.extras.get("outside_study_area"),
            moran_lag=moran_lag(self.areas, moran.get("moran_weights"), moran.get("moran_mask")),
        )

    def footprint_for_display(self) -> dict[str, Any]:
        """Return the footprint as the map and report take it."""
        fp = self.footprint
        shown: dict[str, Any] = {
            "kind": fp.kind,
            "name": fp.name,
            "geometry": gpd.GeoSeries([fp.geometry], crs=fp.crs),
        }
        if fp.kind == "points" and fp.points is not None:
            shown["points"] = fp.points
            shown["radius_m"] = (
                fp.radius_m if fp.radius_m is not None else float(fp.points["radius_m"].max())
            )
        return shown


def to_plain(value: Any) -> Any:
    """Return a dataclass or object as plain data for the manifest."""
    if hasattr(value, "__dataclass_fields__"):
        return to_jsonable(value)
    return str(value)


def _as_spec(spec: AuditSpec | str | Path | dict[str, Any]) -> AuditSpec:
    if isinstance(spec, AuditSpec):
        return spec
    if isinstance(spec, dict):
        return spec_from_dict(spec)
    return load_spec(spec)


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
    with progress.stage("reading areas"):
        inputs = load_areas(
            spec.areas,
            spec.population,
            analysis_crs=spec.analysis.analysis_crs,
            tables=spec.tables,
        )
    frame = inputs.frame
    with population_scope() as announce:  # every area without people: said once
        return _run_audit(spec, progress, started, streams, inputs, frame, announce)


def _run_audit(
    spec: AuditSpec,
    progress: SilentProgress,
    started: _dt.datetime,
    streams: dict[str, np.random.Generator],
    inputs: AreaInputs,
    frame: gpd.GeoDataFrame,
    announce: Callable[[pd.DataFrame], str | None],
) -> AuditResult:
    with progress.stage(f"building footprint '{spec.footprint.name}'"):
        footprint = build_footprint(
            spec.footprint,
            inputs,
            inputs.exclusions,
            circle_vertices=spec.analysis.circle_vertices,
            id_width=spec.areas.id_width,
        )
    inputs, study = _study_area(spec, inputs, footprint, progress)
    further = read_further_inputs(spec, inputs)
    frame = inputs.frame
    notice = announce(frame)
    with progress.stage("measuring coverage"):
        coverage, frame = measure_coverage(spec, inputs, footprint, frame)
    frame = add_derived_columns(frame, spec, inputs.analysis_crs)

    summary: dict[str, Any] = {
        "schema_version": SCHEMA_VERSION,
        "title": spec.title,
        "population_notice": notice,
        "footprint": footprint.to_dict(),
        "areas": _areas_section(inputs, frame),
    }
    if study is not None:
        summary["areas"]["outside_study_area"] = study[0].areas_outside
        summary["study_area"] = study[0].to_dict()
    table_section = _table_section(inputs)
    if table_section:
        summary["inputs"] = table_section
    summary["coverage"] = coverage.to_dict()
    statistics = compute_statistics(
        spec, inputs, footprint, frame, streams, progress, summary["coverage"], further
    )
    frame = statistics.pop("_frame")
    statistics_extras = statistics.pop("_report")
    # The stages return what they left out; the pipeline gathers it, in stage order.
    inputs.exclusions.records.extend(statistics.pop("_exclusions").records)
    inputs.exclusions.records.extend(further.exclusions.records)
    inputs.exclusions.records.extend(statistics.pop("_later_exclusions", Exclusions()).records)
    later_records = (*further.records, *statistics.pop("_records", ()))
    summary.update(statistics)
    if footprint.kind == "ids":
        summary["assessment_area"] = _assessment_area(frame, inputs.id_column, footprint)
    survey_error(summary, frame, inputs, spec, streams["uncertainty"])

    exclusions = inputs.exclusions
    summary["exclusions"] = {"count": exclusions.count(), "by_reason": exclusions.by_reason()}
    summary["cautions"] = cautions(CAUTIONS, summary)
    if spec.blocks is not None or spec.dasymetric is not None:
        from .apportion import block_cautions

        summary["cautions"] = block_cautions(summary["cautions"], summary)
    summary["group_labels"] = spec.population.group_labels
    summary["population_unit"] = spec.population.unit
    summary["findings"] = build_findings(summary)
    summary = relative_paths(summary, spec.base_dir)
    finished = _dt.datetime.now(_dt.timezone.utc)
    manifest = build_manifest(spec, inputs, footprint, started, finished, later_records)
    if isinstance(summary.get("weights"), dict) and "edge_tolerance_m" in summary["weights"]:
        # Tolerance under which boundaries count as shared (tolerant contiguity, edges.py).
        manifest["edge_tolerance_m"] = summary["weights"]["edge_tolerance_m"]
    frame = _order_columns(frame, inputs)
    return AuditResult(
        areas=frame,
        summary=summary,
        exclusions=exclusions.to_frame(),
        manifest=manifest,
        spec=spec,
        footprint=footprint,
        id_column=inputs.id_column,
        groups=inputs.groups,
        extras={
            "streams": streams,
            "inputs": inputs,
            "coverage": coverage,
            "moran": statistics_extras,
            "outside_study_area": None if study is None else study[1],
        },
    )


def _assessment_area(
    frame: gpd.GeoDataFrame, id_column: str, footprint: Footprint
) -> dict[str, Any]:
    """Return the assessment-area review of a footprint of whole areas (12 CFR 228.41)."""
    ids = frame[id_column].astype(str).to_numpy()
    return review_assessment_area(
        ids,
        np.asarray(frame.geometry.array, dtype=object),
        np.isin(ids, sorted(footprint.served_ids or ())),
        frame["income_tier"].to_numpy(dtype=object) if "income_tier" in frame else None,
        frame["majority_minority"].to_numpy(dtype=bool) if "majority_minority" in frame else None,
        frame["population"].to_numpy(dtype=float),
    ).to_dict()


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


def compute_statistics(
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    frame: gpd.GeoDataFrame,
    streams: dict[str, np.random.Generator],
    progress: SilentProgress,
    coverage_section: dict[str, Any],
    further: FurtherInputs | None = None,
) -> dict[str, Any]:
    """Segregation, contiguity, clustering and enclaves over the analysed areas.

    Returns the summary sections keyed as in summary.json, under ``"_frame"`` the per-area
    frame with the statistics' columns added, under ``"_exclusions"`` the areas the
    spatial statistics leave out and under ``"_records"`` the input records of files the
    further analyses read (the lending records) with, under ``"_later_exclusions"``, the
    rows they leave out. ``inputs`` is read, never changed.
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
    out: dict[str, Any] = {}
    with progress.stage("segregation indices"):
        out["segregation"] = segregation_summary(
            counts,
            population,
            inputs.reference,
            served,
            fraction,
            permutations=an.permutations,
            rng=streams["segregation"],
        ).to_dict()
    with progress.stage(f"{an.contiguity} contiguity"):
        graph = build_area_graph(
            geoms, ids, kind=an.contiguity, island_policy=an.islands, knn_k=an.knn_k
        )
    left_out = Exclusions()
    if graph.islands and an.islands == "exclude":
        rows = frame.loc[graph.island_mask, "source_row"]
        left_out.add("spatial_statistics", rows, list(graph.islands), ISLAND_REASON)
    out["weights"] = graph.to_dict()
    with progress.stage("clustering"):
        out["clustering"] = _clustering(frame, graph, an, streams["clustering"])
    with progress.stage("enclaves"):
        holes: tuple[Any, ...] = ()
        if footprint.kind not in ("ids", "zips"):
            holes = footprint_holes(footprint.geometry, geoms, ids, population, counts)
        result = find_enclaves(
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
    enclave_dict = result.to_dict()
    out["enclaves"] = enclave_dict["enclaves"]
    out["holes"] = enclave_dict["holes"]
    out["enclave_settings"] = {
        **enclave_dict["settings"],
        "unserved_components": enclave_dict["unserved_components"],
    }
    frame["enclave_id"] = result.enclave_id
    sections = {**out, "coverage": coverage_section}
    out.update(
        _further_analyses(spec, inputs, footprint, frame, graph, sections, progress, further)
    )
    if spec.access is not None:
        with progress.stage("access (two-step floating catchment)"):
            out["access"], frame["access"] = measure_access(spec, inputs, footprint, frame)
    out["_frame"] = frame
    out["_exclusions"] = left_out
    out["_report"] = (
        {"moran_weights": graph.stats_graph("r"), "moran_mask": graph.stats_mask}
        if "skipped" not in out["clustering"] and graph.stats_mask.sum() >= 3
        else {}
    )
    return out


def _clustering(
    frame: gpd.GeoDataFrame, graph: AreaGraph, an: AnalysisSpec, rng: np.random.Generator
) -> dict[str, Any]:
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
        return {"weights": graph.to_dict(), "skipped": str(exc)}
    lisa = result.area_frame()
    for column in lisa.columns:
        frame[column] = lisa[column].to_numpy()
    return result.to_dict()


def _further_analyses(
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    frame: gpd.GeoDataFrame,
    graph: AreaGraph,
    sections: dict[str, Any],
    progress: SilentProgress,
    further: FurtherInputs,
) -> dict[str, Any]:
    """Comparisons, change, peers, controls and sensitivity, as the spec asks.

    Adds per-area columns to ``frame`` in place (other footprints' covered fractions).
    The other footprints and the activity table come read, in ``further``.
    """
    out: dict[str, Any] = {}
    built = list(further.footprints)
    if len(spec.footprints) > 1:
        with progress.stage("other footprints"):
            others, fractions = analyses.other_footprints(
                spec, inputs, frame, graph, further.footprints
            )
        for name, cf in fractions.items():
            if name != spec.footprint.name:
                frame[f"covered_fraction_{name}"] = cf
        primary = {
            spec.footprint.name: {
                "coverage": sections["coverage"],
                "enclave_count": len(sections["enclaves"]),
            }
        }
        out["comparison"] = analyses.comparison_section(primary, others)
        out["footprints_compared"] = {
            spec.footprint.name: footprint.to_dict(),
            **{f.name: f.to_dict() for f in built},
        }
        if spec.change is not None:
            out["change"] = analyses.change_section(spec, inputs, frame, fractions)
            out["change"].update(analyses.site_changes(spec.change, [footprint, *built]))
    if further.activity is not None:
        with progress.stage("peer comparison"):
            out["peers"] = analyses.peers_section(spec, inputs, frame, further.activity)
    if spec.lending is not None:
        # The lending review reads its own files here and lists the records it leaves out
        # in an Exclusions of its own; run_audit gathers them after the other stages'.
        lending_left_out = Exclusions()
        with progress.stage("lending records"):
            out["lending"], lending_inputs = lending_section(
                spec, replace(inputs, exclusions=lending_left_out), frame
            )
        out["_records"] = tuple(lending_inputs)
        out["_later_exclusions"] = lending_left_out
    if spec.explain is not None:
        with progress.stage("exclusion models and rules"):
            out["explain"] = analyses.explain_section(frame, spec, inputs.id_column, graph)
    if spec.analysis.sensitivity:
        with progress.stage("sensitivity"):
            out["sensitivity"] = analyses.sensitivity_section(frame, spec, inputs, footprint, graph)
    return out


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
        from .apportion import apportion

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
    from .distributed import covered_fraction_distributed

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


def _areas_section(inputs: AreaInputs, frame: gpd.GeoDataFrame) -> dict[str, Any]:
    excluded = inputs.exclusions.count("areas")
    return {
        "input": inputs.input_rows,
        "analysed": int(len(frame)),
        "excluded": excluded,
        "repaired_geometries": inputs.repaired,
        "zero_population": int((frame["population"] <= 0).sum()),
        "income_unknown": inputs.income_unknown,
    } | ({"water_only": list(inputs.water_only)} if inputs.water_only else {})


def _table_section(inputs: AreaInputs) -> dict[str, Any] | None:
    table = [r for r in inputs.inputs if r.role == "table"]
    if not table:
        return None
    rows = table[0].rows
    excluded = (
        inputs.exclusions.count("table") if len(table) == 1 else (rows - inputs.matches[0].matched)
    )
    out: dict[str, Any] = {
        "table": {"rows": rows, "matched": rows - excluded, "excluded": excluded}
    }
    out["tables"] = [m.to_dict() for m in inputs.matches]
    return out


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


def build_manifest(
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    started: _dt.datetime,
    finished: _dt.datetime,
    later: tuple[InputRecord, ...] = (),
) -> dict[str, Any]:
    """Provenance of an audit: everything needed to rerun it and check its inputs.

    ``later`` are the records of the inputs read for the further analyses (other
    footprints, the activity table), listed after the areas' and before the footprint's.
    """
    records = [r.to_dict() for r in (*inputs.inputs, *later)]
    records += [r.to_dict() for r in footprint.records]
    return {
        "tool": "coverage_audit",
        "version": __version__,
        "python": platform.python_version(),
        "libraries": library_versions(),
        "spec_file": str(spec.source) if spec.source else None,
        "spec": spec.to_dict(),
        "inputs": records,
        "source_crs": inputs.source_crs.to_string(),
        "analysis_crs": inputs.analysis_crs.srs,
        "analysis_crs_wkt": inputs.analysis_crs.to_wkt(),
        "seed": spec.analysis.seed,
        "footprint": footprint.manifest(),
        "display": {
            "id_column": inputs.id_column,
            "groups": list(inputs.groups),
            "reference": inputs.reference,
        },
        "started": started.isoformat(timespec="seconds"),
        "finished": finished.isoformat(timespec="seconds"),
    }
