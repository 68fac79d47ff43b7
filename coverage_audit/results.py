"""The findings of an audit as one frozen tree: each stage's result object, typed.

Every stage returns a frozen result (:class:`~coverage_audit.coverage.CoverageResult`,
:class:`~coverage_audit.segregation.SegregationResult`, ...); :class:`AuditFindings` holds
them side by side, section by section, and :meth:`AuditFindings.to_dict` is exactly what
summary.json holds (``tests/test_summary_stable.py`` compares it byte for byte for every
demo scenario). Sections that have no result type yet (the further analyses, the lending
review, the input tables) are held as the plain data their stage returned.

The tree also carries what the pages draw that summary.json does not hold: the Moran
scatterplot's spatial lag (:attr:`AuditFindings.moran_lag`), written to moran_lag.csv.
"""

from __future__ import annotations

import copy
import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import geopandas as gpd
import numpy as np
import pandas as pd

from ._util import relative_paths
from .errors import InputError
from .manifest import to_plain
from .outputs import OutputClaim, claim_output_dir, folder_problem, write_all, write_json
from .progress import SilentProgress

if TYPE_CHECKING:
    from .clustering import ClusteringResult
    from .coverage import CoverageResult
    from .enclaves import EnclaveResult
    from .findings import Finding
    from .footprint import Footprint
    from .inputs import AreaInputs
    from .margins import SurveyFigures
    from .report.folder import Display
    from .segregation import SegregationResult
    from .spec import AuditSpec
    from .stats.assessment_area import AssessmentAreaReview
    from .study_area import StudyArea
    from .weights import AreaGraph

#: Version of summary.json's layout.
SCHEMA_VERSION = 1


class Section(Protocol):
    """A stage's typed result: its ``to_dict()`` is its section of summary.json."""

    def to_dict(self) -> Any:
        """Return the section as plain data."""
        ...


def section_data(value: Section | Mapping[str, Any]) -> Any:
    """Return a section as plain data: a typed result's ``to_dict()``, or the data as is."""
    return value.to_dict() if hasattr(value, "to_dict") else value


@dataclass(frozen=True)
class Skipped:
    """A section not computed, and why (``{"skipped": reason}``)."""

    reason: str

    def to_dict(self) -> dict[str, Any]:
        """Return ``{"skipped": reason}``."""
        return {"skipped": self.reason}


@dataclass(frozen=True, eq=False)
class WithDetails:
    """A typed result and a few plain entries written after its own (``result | details``).

    For sections whose statistic has a result type and whose stage adds context to it:
    the peer comparison and its match to the areas, the change between footprints and the
    sites closed and opened.
    """

    result: Section
    details: Mapping[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """Return the result's section with the details added."""
        return {**self.result.to_dict(), **self.details}


@dataclass(frozen=True, eq=False)
class ExplainFindings:
    """The ``explain`` section: the exclusion models and the rules, each result or skipped."""

    models: Section | None = None
    rules: Section | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return the section with the parts the spec asked for."""
        parts = (("models", self.models), ("rules", self.rules))
        return {key: part.to_dict() for key, part in parts if part is not None}


@dataclass(frozen=True, eq=False)
class FootprintsCompared:
    """The ``footprints_compared`` section: every footprint of the spec, described."""

    footprints: tuple[Footprint, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return each footprint's description by name."""
        return {f.name: f.to_dict() for f in self.footprints}


@dataclass(frozen=True)
class AreaCounts:
    """The ``areas`` section: rows read, analysed and left out, and why some are special.

    Attributes
    ----------
    input : int
        Rows of the areas file.
    analysed : int
    excluded : int
        Rows left out by the areas' checks (source ``areas``).
    repaired_geometries : int
    zero_population : int
        Analysed areas without people.
    income_unknown : int
        Analysed areas without an income ratio.
    water_only : tuple of str
        Areas with no land (ALAND = 0), kept; listed only when there are any.
    outside_study_area : int or None
        Areas left outside a ``[study_area]`` (None without one).
    """

    input: int
    analysed: int
    excluded: int
    repaired_geometries: int
    zero_population: int
    income_unknown: int
    water_only: tuple[str, ...] = ()
    outside_study_area: int | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return the section as summary.json holds it."""
        out: dict[str, Any] = {
            "input": self.input,
            "analysed": self.analysed,
            "excluded": self.excluded,
            "repaired_geometries": self.repaired_geometries,
            "zero_population": self.zero_population,
            "income_unknown": self.income_unknown,
        }
        if self.water_only:
            out["water_only"] = list(self.water_only)
        if self.outside_study_area is not None:
            out["outside_study_area"] = self.outside_study_area
        return out


@dataclass(frozen=True, eq=False)
class TablesJoined:
    """The ``inputs`` section: the demographics tables' rows and their matches to the areas."""

    rows: int
    excluded: int
    matches: tuple[Section, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return the section as summary.json holds it."""
        table = {"rows": self.rows, "matched": self.rows - self.excluded, "excluded": self.excluded}
        return {"table": table, "tables": [m.to_dict() for m in self.matches]}


@dataclass(frozen=True)
class ExclusionCounts:
    """The ``exclusions`` section: how many rows were left out, by reason."""

    count: int
    by_reason: Mapping[str, int]

    def to_dict(self) -> dict[str, Any]:
        """Return the section as summary.json holds it."""
        return {"count": self.count, "by_reason": dict(self.by_reason)}


@dataclass(frozen=True)
class SkippedClustering:
    """Clustering statistics not computed, and why (degenerate data)."""

    weights: AreaGraph
    reason: str

    def to_dict(self) -> dict[str, Any]:
        """Return the ``clustering`` section: the weights described and the reason."""
        return {"weights": self.weights.to_dict(), "skipped": self.reason}


@dataclass(frozen=True)
class SpatialFindings:
    """The statistics stage's typed results: segregation, contiguity, clustering, enclaves.

    Attributes
    ----------
    segregation : SegregationResult
    weights : AreaGraph
        The contiguity of the analysed areas (its description is ``weights``).
    clustering : ClusteringResult or SkippedClustering
    enclaves : EnclaveResult
        Enclaves, footprint holes and the enclave settings.
    further : mapping
        The further analyses' sections keyed as in summary.json, in order (comparison,
        footprints_compared, change, peers, lending, explain, sensitivity, access): typed
        results (:class:`Section`) where the statistic has a type, plain data otherwise
        (lending, sensitivity, access).
    """

    segregation: SegregationResult
    weights: AreaGraph
    clustering: ClusteringResult | SkippedClustering
    enclaves: EnclaveResult
    further: Mapping[str, Section | Mapping[str, Any]] = field(default_factory=dict)

    def sections(self) -> dict[str, Any]:
        """Return the stage's summary sections, keyed and ordered as in summary.json."""
        enclave = self.enclaves.to_dict()
        return {
            "segregation": self.segregation.to_dict(),
            "weights": self.weights.to_dict(),
            "clustering": self.clustering.to_dict(),
            "enclaves": enclave["enclaves"],
            "holes": enclave["holes"],
            "enclave_settings": {
                **enclave["settings"],
                "unserved_components": enclave["unserved_components"],
            },
            **{key: section_data(value) for key, value in self.further.items()},
        }


@dataclass(frozen=True, eq=False)
class AuditFindings:
    """Everything an audit found, one typed section per stage.

    Attributes
    ----------
    title : str
    population_notice : str or None
        The areas without people, said once (``population_notice``).
    footprint : Footprint
    areas : AreaCounts
        Areas read, analysed and left out (``areas``).
    coverage : CoverageResult
    statistics : SpatialFindings
    study_area : StudyArea or None
    inputs : TablesJoined or None
        The demographics tables' matches (``inputs``), when tables were joined.
    assessment_area : AssessmentAreaReview or None
        For a footprint of whole areas.
    survey : SurveyFigures or None
        The survey-error figures, set into the coverage, segregation, comparison and
        enclave sections.
    exclusions : ExclusionCounts
        Count and counts by reason of the rows not analysed.
    cautions : tuple of str
    group_labels : mapping
    population_unit : str
    headline : tuple of Finding
        The headline findings (``findings``), built from the rest.
    base_dir : Path or None
        Input paths in the summary are written relative to this folder (the spec's).
    moran_lag : numpy.ndarray or None
        The Moran scatterplot's ``W z`` per area (NaN outside the spatial statistics);
        not in summary.json, written to moran_lag.csv.
    """

    title: str
    population_notice: str | None
    footprint: Footprint
    areas: AreaCounts
    coverage: CoverageResult
    statistics: SpatialFindings
    study_area: StudyArea | None = None
    inputs: TablesJoined | None = None
    assessment_area: AssessmentAreaReview | None = None
    survey: SurveyFigures | None = None
    exclusions: ExclusionCounts = field(default_factory=lambda: ExclusionCounts(0, {}))
    cautions: tuple[str, ...] = ()
    group_labels: Mapping[str, str] = field(default_factory=dict)
    population_unit: str = "people"
    headline: tuple[Finding, ...] = ()
    base_dir: Path | None = None
    moran_lag: np.ndarray | None = None

    def sections(self) -> dict[str, Any]:
        """Return the sections as plain data, before the input paths are made relative.

        The data is a fresh copy: changing it changes nothing in the tree.
        """
        out: dict[str, Any] = {
            "schema_version": SCHEMA_VERSION,
            "title": self.title,
            "population_notice": self.population_notice,
            "footprint": self.footprint.to_dict(),
            "areas": self.areas.to_dict(),
        }
        if self.study_area is not None:
            out["study_area"] = self.study_area.to_dict()
        if self.inputs is not None:
            out["inputs"] = self.inputs.to_dict()
        out["coverage"] = self.coverage.to_dict()
        out.update(self.statistics.sections())
        if self.assessment_area is not None:
            out["assessment_area"] = self.assessment_area.to_dict()
        out["exclusions"] = self.exclusions.to_dict()
        out["cautions"] = list(self.cautions)
        out["group_labels"] = self.group_labels
        out["population_unit"] = self.population_unit
        out["findings"] = [h.to_dict() for h in self.headline]
        # Stages' to_dict may hand out their own mappings; the copy keeps them unchanged.
        out = copy.deepcopy(out)
        if self.survey is not None:
            self.survey.apply(out)
        return out

    def to_dict(self) -> dict[str, Any]:
        """Return summary.json's content (input paths relative to :attr:`base_dir`)."""
        out = self.sections()
        return out if self.base_dir is None else relative_paths(out, self.base_dir)

    def with_conclusions(
        self, cautions: tuple[str, ...], headline: tuple[Finding, ...]
    ) -> AuditFindings:
        """Return a copy carrying the cautions and the headline findings."""
        return replace(self, cautions=tuple(cautions), headline=tuple(headline))


@dataclass
class AuditResult:
    """Everything an audit found.

    Attributes
    ----------
    areas : geopandas.GeoDataFrame
        One row per analysed area (analysis CRS) with the output columns.
    findings : AuditFindings
        The typed findings; ``findings.to_dict()`` is exactly what summary.json holds.
    exclusions : pandas.DataFrame
        Every input row not analysed: source, row, id, reason.
    manifest : dict
        Provenance: versions, resolved spec, input digests, CRS, seed, times.
    spec : AuditSpec
    footprint : Footprint
    id_column : str
    groups : list of str
    inputs : AreaInputs or None
        The input stage's areas and tables, as read.
    outside_study_area : geopandas.GeoSeries or None
        The areas left outside a ``[study_area]``, for the map.
    """

    areas: gpd.GeoDataFrame
    findings: AuditFindings
    exclusions: pd.DataFrame
    manifest: dict[str, Any]
    spec: AuditSpec
    footprint: Footprint
    id_column: str
    groups: list[str]
    inputs: AreaInputs | None = None
    outside_study_area: gpd.GeoSeries | None = None
    _summary: dict[str, Any] | None = field(default=None, init=False, repr=False)

    @property
    def summary(self) -> dict[str, Any]:
        """The findings as plain data: exactly what summary.json holds (built once)."""
        if self._summary is None:
            self._summary = self.findings.to_dict()
        return self._summary

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
            summary=self.findings,
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
        from .report.folder import Display

        return Display(
            id_column=self.id_column,
            groups=tuple(self.groups),
            reference=self.spec.population.reference,
            footprint=self.footprint_for_display(),
            outside=self.outside_study_area,
            moran_lag=self.findings.moran_lag,
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
