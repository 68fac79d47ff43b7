"""The audit spec: TOML (or a mapping) -> frozen dataclasses, validated with precise messages.

An audit is described once, in a TOML file whose paths are relative to the file itself, so
that any finding can be rerun exactly. :func:`load_spec` reads the file; :func:`spec_from_dict`
validates a mapping (the CLI builds one from its options). Every error names the table and
key, repeats the bad value and lists what is allowed. Unknown keys are errors.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any, get_args

from .choices import Comparison, ContiguityKind, Engine, FdrMethod, IslandPolicy
from .errors import SpecError
from .spec_access import (
    _ACCESS_KEYS as _ACCESS_KEYS,
)
from .spec_access import (
    _TIME_RE as _TIME_RE,
)
from .spec_access import (
    ACCESS_ORIGINS,
    TIME_UNITS,
    AccessSpec,
)
from .spec_access import (
    _access_from as _access_from,
)
from .spec_access import (
    _catchment as _catchment,
)
from .spec_areas import (
    _AREAS_KEYS as _AREAS_KEYS,
)
from .spec_areas import (
    _GROUP_KEYS as _GROUP_KEYS,
)
from .spec_areas import (
    _NAME_RE as _NAME_RE,
)
from .spec_areas import (
    _POP_KEYS as _POP_KEYS,
)
from .spec_areas import (
    _TABLE_KEYS as _TABLE_KEYS,
)
from .spec_areas import (
    MAJORITY_RULES,
    RESERVED_NAMES,
    AreasSpec,
    PopulationSpec,
    TableSpec,
    _areas_from,
)
from .spec_areas import (
    _population_from as _population_from,
)
from .spec_areas import (
    _tables_from as _tables_from,
)
from .spec_blocks import (
    _BLOCKS_KEYS as _BLOCKS_KEYS,
)
from .spec_blocks import (
    BLOCK_PRESETS,
    BlocksSpec,
    DasymetricSpec,
)
from .spec_blocks import (
    _blocks_from as _blocks_from,
)
from .spec_blocks import (
    _dasymetric_from as _dasymetric_from,
)
from .spec_explain import (
    _ACTIVITY_KEYS as _ACTIVITY_KEYS,
)
from .spec_explain import (
    _CHANGE_KEYS as _CHANGE_KEYS,
)
from .spec_explain import (
    _EXPLAIN_KEYS as _EXPLAIN_KEYS,
)
from .spec_explain import (
    MAX_RULE_LENGTH,
    ActivitySpec,
    ChangeSpec,
    ExplainSpec,
    _change_from,
)
from .spec_explain import (
    _activity_from as _activity_from,
)
from .spec_explain import (
    _explain_from as _explain_from,
)
from .spec_explain import (
    _str_list as _str_list,
)
from .spec_footprint import (
    _FOOT_KEYS as _FOOT_KEYS,
)
from .spec_footprint import (
    _LENGTH_RE as _LENGTH_RE,
)
from .spec_footprint import (
    FOOTPRINT_KINDS,
    LENGTH_UNITS,
    MAX_CIRCLE_VERTICES,
    FootprintSpec,
    _footprints_from,
    parse_length,
)
from .spec_footprint import (
    _footprint_from as _footprint_from,
)
from .spec_footprint import (
    _parse_length as _parse_length,
)
from .spec_lending import LendingSpec, lending_from
from .spec_study_area import (
    _STUDY_AREA_KEYS as _STUDY_AREA_KEYS,
)
from .spec_study_area import (
    ID_LIST_SUFFIXES,
    STUDY_AREA_RULES,
    StudyAreaSpec,
)
from .spec_study_area import (
    _study_area_from as _study_area_from,
)
from .spec_values import (
    _bool,
    _check_keys,
    _choice,
    _float,
    _int,
    _int_default,
    _path,
    _str,
    _table,
    default_of,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on Python 3.10
    import tomli as tomllib

__all__ = [
    "ACCESS_ORIGINS",
    "BLOCK_PRESETS",
    "COMPARISONS",
    "DEFAULT_SEED",
    "ENGINES",
    "FDR_METHODS",
    "FOOTPRINT_KINDS",
    "ID_LIST_SUFFIXES",
    "LENGTH_UNITS",
    "MAJORITY_RULES",
    "MAX_CIRCLE_VERTICES",
    "MAX_DRAWS",
    "MAX_KNN",
    "MAX_PARTITIONS",
    "MAX_RULE_LENGTH",
    "RESERVED_NAMES",
    "STUDY_AREA_RULES",
    "TIME_UNITS",
    "AccessSpec",
    "ActivitySpec",
    "AnalysisSpec",
    "AreasSpec",
    "AuditSpec",
    "BlocksSpec",
    "ChangeSpec",
    "DasymetricSpec",
    "ExplainSpec",
    "FootprintSpec",
    "LendingSpec",
    "OutputSpec",
    "PopulationSpec",
    "StudyAreaSpec",
    "TableSpec",
    "lending_from",
    "load_spec",
    "parse_length",
    "replace_output",
    "spec_from_dict",
    "toml_error_text",
    "tomllib",
]

#: Seed used when a spec names none, so that reruns are identical by default.
DEFAULT_SEED = 20_261_201

COMPARISONS: tuple[Comparison, ...] = get_args(Comparison)
FDR_METHODS: tuple[FdrMethod, ...] = get_args(FdrMethod)
#: Where covered fractions are computed: in this process, or on dask (threads, or the
#: cluster at ``dask_scheduler``), for regions past one machine.
ENGINES: tuple[Engine, ...] = get_args(Engine)
#: Largest number of random permutations or Monte Carlo draws a spec may ask for: p-values
#: then resolve 1/100,000, and the largest draws stay within memory and hours, not days
#: (one billion permutations would need terabytes).
MAX_DRAWS = 99_999
#: Largest number of nearest neighbours given to an island.
MAX_KNN = 100
#: Most dask partitions of the areas.
MAX_PARTITIONS = 100_000


@dataclass(frozen=True)
class AnalysisSpec:
    """Thresholds, inference settings and the seed."""

    served_threshold: float = 0.5
    comparison: Comparison = "reference"
    contiguity: ContiguityKind = "queen"
    islands: IslandPolicy = "exclude"
    knn_k: int = 1
    permutations: int = 999
    seed: int = DEFAULT_SEED
    fdr: FdrMethod = "bh"
    alpha: float = 0.05
    enclave_min_surround: float = 0.75
    enclave_min_population: float = 0.0
    enclave_draws: int = 999
    contrast_group: str | None = None
    transparent_zero_population: bool = False
    circle_vertices: int = 128
    analysis_crs: str | None = None
    sensitivity: bool = True
    engine: Engine = "local"
    dask_scheduler: str | None = None
    partitions: int | None = None


@dataclass(frozen=True)
class OutputSpec:
    """Which optional outputs to write."""

    map: bool = True
    report: bool = True
    tiles: bool = False


@dataclass(frozen=True)
class AuditSpec:
    """A whole audit, as resolved from a spec file or options.

    Attributes
    ----------
    footprints : tuple of FootprintSpec
        The first is the audited footprint; any others are compared with it.
    base_dir : Path
        Folder that relative paths were resolved against.
    source : Path or None
        The spec file, when the spec came from one.
    """

    title: str
    areas: AreasSpec
    population: PopulationSpec
    footprints: tuple[FootprintSpec, ...]
    analysis: AnalysisSpec = field(default_factory=AnalysisSpec)
    output: OutputSpec = field(default_factory=OutputSpec)
    explain: ExplainSpec | None = None
    change: ChangeSpec | None = None
    activity: ActivitySpec | None = None
    base_dir: Path = field(default_factory=Path.cwd)
    source: Path | None = None
    study_area: StudyAreaSpec | None = None
    #: Demographics tables joined on the id (``[[table]]``), beside ``[areas] table``.
    tables: tuple[TableSpec, ...] = ()
    lending: LendingSpec | None = None
    access: AccessSpec | None = None
    blocks: BlocksSpec | None = None
    dasymetric: DasymetricSpec | None = None

    @property
    def footprint(self) -> FootprintSpec:
        """The audited (first) footprint."""
        return self.footprints[0]

    def with_analysis(self, **changes: Any) -> AuditSpec:
        """Return a copy with some analysis settings changed (validated again)."""
        merged = {
            k: v for k, v in {**_dataclass_dict(self.analysis), **changes}.items() if v is not None
        }
        analysis = _analysis_from(merged, self._where())
        return replace(self, analysis=analysis)

    def _where(self) -> str:
        return str(self.source) if self.source else "spec"

    def to_dict(self) -> dict[str, Any]:
        """Return the resolved spec as TOML-like plain data (paths as given, resolved)."""
        out: dict[str, Any] = {"title": self.title}
        out["areas"] = _dataclass_dict(self.areas)
        pop = _dataclass_dict(self.population)
        labels, moes = dict(self.population.labels), dict(self.population.moes)
        pop["groups"] = {
            name: (
                {"column": column}
                | ({"label": labels[name]} if name in labels else {})
                | ({"moe": moes[name]} if name in moes else {})
                if name in labels or name in moes
                else column
            )
            for name, column in self.population.groups
        }
        for key in ("labels", "moes"):
            pop.pop(key)
        if pop["total_moe"] is None:
            pop.pop("total_moe")
        if pop["replicates"] is None:
            pop.pop("replicates")
        if pop["margin_draws"] == 200:
            pop.pop("margin_draws")
        out["population"] = pop
        out["footprint"] = []
        for f in self.footprints:
            fd = _dataclass_dict(f)
            ids_path = fd.pop("ids_path")
            if ids_path is not None:
                fd["ids"] = ids_path
            out["footprint"].append(fd)
        out["analysis"] = _dataclass_dict(self.analysis)
        out["output"] = _dataclass_dict(self.output)
        for key in (
            "explain",
            "change",
            "activity",
            "study_area",
            "access",
            "blocks",
            "dasymetric",
        ):
            value = getattr(self, key)
            if value is not None:
                out[key] = _dataclass_dict(value)
        if self.tables:
            out["table"] = [_dataclass_dict(t) for t in self.tables]
        if self.lending is not None:
            out["lending"] = self.lending.to_dict()
        return out


def _dataclass_dict(obj: Any) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for f in fields(obj):
        value = getattr(obj, f.name)
        if isinstance(value, Path):
            value = str(value)
        elif isinstance(value, tuple):
            value = list(value)
        out[f.name] = value
    return out


def load_spec(path: str | Path) -> AuditSpec:
    """Read and validate a TOML audit spec.

    Parameters
    ----------
    path : str or Path
        The spec file. Relative paths inside it are resolved against its folder.

    Returns
    -------
    AuditSpec

    Raises
    ------
    SpecError
        When the file is missing, is not valid TOML, or any key or value is invalid.
    """
    spec_path = Path(path)
    if not spec_path.is_file():
        raise SpecError(f"spec file '{spec_path}' was not found; check the path")
    try:
        text = spec_path.read_bytes().decode("utf-8")
    except UnicodeDecodeError:
        raise SpecError(f"{spec_path}: not a UTF-8 text file") from None
    except OSError as exc:
        raise SpecError(f"spec file '{spec_path}' could not be read ({exc.strerror})") from None
    # A byte-order mark (some Windows editors write one) is not part of the TOML: skip it.
    text = text.removeprefix("\ufeff")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{spec_path}: {toml_error_text(text, exc)}") from None
    return spec_from_dict(data, base_dir=spec_path.resolve().parent, source=spec_path)


_TOML_AT_RE = re.compile(r"\(at line (\d+), column (\d+)\)")


def toml_error_text(text: str, exc: Exception) -> str:
    """Return a TOML parse error as a sentence; a repeated key is named with its table.

    ``tomllib`` says only "Cannot overwrite a value (at line 3, column 6)" when a key is
    given twice; the key is read back from that line of the text.
    """
    message = str(exc)
    match = _TOML_AT_RE.search(message)
    if match and message.startswith("Cannot overwrite a value"):
        lineno = int(match.group(1))
        lines = text.splitlines()
        line = lines[lineno - 1] if 0 < lineno <= len(lines) else ""
        key = line.split("=", 1)[0].strip() if "=" in line else ""
        table = ""
        for previous in reversed(lines[: lineno - 1]):
            stripped = previous.strip()
            if stripped.startswith("["):
                table = stripped.split("#", 1)[0].strip()
                break
        if key:
            where = f" in {table}" if table else " at the top level"
            return (
                f'the key "{key}"{where} is given twice (the second time at line {lineno}); '
                "keep one of them"
            )
    return f"not valid TOML ({message}); fix the line it names"


_TOP_KEYS = (
    "title",
    "areas",
    "population",
    "footprint",
    "analysis",
    "output",
    "explain",
    "change",
    "activity",
    "study_area",
    "table",
    "lending",
    "access",
    "blocks",
    "dasymetric",
)
_ANALYSIS_KEYS = tuple(f.name for f in fields(AnalysisSpec))
_OUTPUT_KEYS = tuple(f.name for f in fields(OutputSpec))


def spec_from_dict(
    data: Mapping[str, Any],
    *,
    base_dir: str | Path | None = None,
    source: str | Path | None = None,
) -> AuditSpec:
    """Validate a spec given as a mapping with the TOML file's structure.

    Parameters
    ----------
    data : Mapping
        Keys ``title``, ``areas``, ``population``, ``footprint`` (a table, or a list of
        tables for several footprints), ``analysis`` and ``output``.
    base_dir : str or Path, optional
        Folder against which relative paths are resolved (default: the working folder).
    source : str or Path, optional
        Where the mapping came from, used in messages.

    Returns
    -------
    AuditSpec
    """
    where = str(source) if source else "spec"
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    if not isinstance(data, Mapping):
        raise SpecError(f"{where}: expected a table of settings")
    _check_keys(data, _TOP_KEYS, where, "top level")
    for required in ("areas", "population", "footprint"):
        if required not in data:
            raise SpecError(f"{where}: the [{required}] table is missing; it is required")

    areas = _areas_from(data["areas"], base, where)

    pop_d = _table(data["population"], where, "population")
    _check_keys(pop_d, _POP_KEYS, where, "[population]")
    population = replace(
        _population_from(pop_d, where),
        replicates=_path(pop_d, "replicates", base, where, "population"),
        margin_draws=_int(pop_d, "margin_draws", where, "population", minimum=19)
        or default_of(PopulationSpec, "margin_draws"),
    )

    footprints = _footprints_from(data["footprint"], base, where)
    names = [f.name for f in footprints]

    analysis = _analysis_from(_table(data.get("analysis", {}), where, "analysis"), where)
    if (
        analysis.contrast_group is not None
        and analysis.contrast_group not in population.group_names
    ):
        raise SpecError(
            f'{where}: [analysis] contrast_group was "{analysis.contrast_group}" but must be one of '
            f"the groups {population.group_names}"
        )
    output = _output_from(_table(data.get("output", {}), where, "output"), where)
    explain = _explain_from(data.get("explain"), where)
    change = _change_from(data["change"], where, names) if "change" in data else None
    activity = _activity_from(data.get("activity"), base, where)
    study_area = _study_area_from(data.get("study_area"), base, where)
    tables = _tables_from(data.get("table"), base, where)
    title = data.get("title", "Coverage audit")
    if not isinstance(title, str) or not title.strip():
        raise SpecError(f"{where}: title must be a non-empty string")
    return AuditSpec(
        title=title.strip(),
        areas=areas,
        population=population,
        footprints=tuple(footprints),
        analysis=analysis,
        output=output,
        explain=explain,
        change=change,
        activity=activity,
        base_dir=base,
        source=Path(source) if source else None,
        study_area=study_area,
        tables=tables,
        lending=lending_from(data.get("lending"), base, where),
        access=_access_from(data.get("access"), base, where, footprints[0]),
        blocks=_blocks_from(data.get("blocks"), base, where, population),
        dasymetric=_dasymetric_from(data.get("dasymetric"), base, where, "blocks" in data),
    )


def _output_from(out_d: Mapping[str, Any], where: str) -> OutputSpec:
    _check_keys(out_d, _OUTPUT_KEYS, where, "[output]")
    out = OutputSpec()  # the defaults
    return OutputSpec(
        map=_bool(out_d, "map", where, "output", out.map),
        report=_bool(out_d, "report", where, "output", out.report),
        tiles=_bool(out_d, "tiles", where, "output", out.tiles),
    )


def _analysis_from(an_d: Mapping[str, Any], where: str) -> AnalysisSpec:
    _check_keys(an_d, _ANALYSIS_KEYS, where, "[analysis]")
    t = "analysis"
    d = AnalysisSpec()  # the defaults, written once in the dataclass
    return AnalysisSpec(
        served_threshold=_float(
            an_d, "served_threshold", where, t, d.served_threshold, 0.0, 1.0, open_low=True
        ),
        comparison=_choice(an_d, "comparison", where, t, COMPARISONS, d.comparison),
        contiguity=_choice(an_d, "contiguity", where, t, get_args(ContiguityKind), d.contiguity),
        islands=_choice(an_d, "islands", where, t, get_args(IslandPolicy), d.islands),
        knn_k=_int(an_d, "knn_k", where, t, minimum=1, maximum=MAX_KNN) or d.knn_k,
        permutations=_int_default(
            an_d, "permutations", where, t, d.permutations, minimum=1, maximum=MAX_DRAWS
        ),
        seed=_int_default(an_d, "seed", where, t, d.seed, minimum=0),
        fdr=_choice(an_d, "fdr", where, t, FDR_METHODS, d.fdr),
        alpha=_float(an_d, "alpha", where, t, d.alpha, 0.0, 1.0, open_low=True),
        enclave_min_surround=_float(
            an_d, "enclave_min_surround", where, t, d.enclave_min_surround, 0.0, 1.0
        ),
        enclave_min_population=_float(
            an_d, "enclave_min_population", where, t, d.enclave_min_population, 0.0, None
        ),
        enclave_draws=_int_default(
            an_d, "enclave_draws", where, t, d.enclave_draws, minimum=0, maximum=MAX_DRAWS
        ),
        contrast_group=_str(an_d, "contrast_group", where, t),
        transparent_zero_population=_bool(
            an_d, "transparent_zero_population", where, t, d.transparent_zero_population
        ),
        circle_vertices=_int_default(
            an_d,
            "circle_vertices",
            where,
            t,
            d.circle_vertices,
            minimum=16,
            maximum=MAX_CIRCLE_VERTICES,
        ),
        analysis_crs=_str(an_d, "analysis_crs", where, t),
        sensitivity=_bool(an_d, "sensitivity", where, t, d.sensitivity),
        engine=_choice(an_d, "engine", where, t, ENGINES, d.engine),
        dask_scheduler=_str(an_d, "dask_scheduler", where, t),
        partitions=_int(an_d, "partitions", where, t, minimum=1, maximum=MAX_PARTITIONS),
    )


def replace_output(spec: AuditSpec, **changes: bool) -> AuditSpec:
    """Return a copy of ``spec`` with some ``[output]`` switches changed."""
    return replace(spec, output=replace(spec.output, **changes))
