"""The audit spec: TOML (or a mapping) -> frozen dataclasses, validated with precise messages.

An audit is described once, in a TOML file whose paths are relative to the file itself, so
that any finding can be rerun exactly. :func:`load_spec` reads the file; :func:`spec_from_dict`
validates a mapping (the CLI builds one from its options). Every error names the table and
key, repeats the bad value and lists what is allowed. Unknown keys are errors.
"""

from __future__ import annotations

import math
import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from .errors import SpecError
from .presets import preset_population
from .spec_lending import LendingSpec, lending_from
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
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised only on Python 3.10
    import tomli as tomllib

#: Seed used when a spec names none, so that reruns are identical by default.
DEFAULT_SEED = 20_261_201

FOOTPRINT_KINDS = ("polygons", "points", "ids", "zips")
COMPARISONS = ("reference", "highest")
FDR_METHODS = ("bh", "none")
#: Where covered fractions are computed: in this process, or on dask (threads, or the
#: cluster at ``dask_scheduler``), for regions past one machine.
ENGINES = ("local", "dask")
MAJORITY_RULES = ("above", "at_or_above")
#: Largest number of random permutations or Monte Carlo draws a spec may ask for: p-values
#: then resolve 1/100,000, and the largest draws stay within memory and hours, not days
#: (one billion permutations would need terabytes).
MAX_DRAWS = 99_999
#: Largest number of vertices of a reach circle (the area error at 128 is already 1e-4).
MAX_CIRCLE_VERTICES = 4_096
#: Largest number of nearest neighbours given to an island.
MAX_KNN = 100
#: Longest rule (conditions joined by "and") searched; the search grows combinatorially.
MAX_RULE_LENGTH = 5
#: Most dask partitions of the areas.
MAX_PARTITIONS = 100_000
#: Length units accepted for a reach radius, in metres.
LENGTH_UNITS = {"m": 1.0, "km": 1000.0, "mi": 1609.344, "ft": 0.3048}
#: Names a group may not take because the per-area output uses them.
RESERVED_NAMES = frozenset(
    {
        "population",
        "covered_fraction",
        "served",
        "geometry",
        "area_km2",
        "income_ratio",
        "income_tier",
        "majority_minority",
        "nearest_site_m",
        "lisa_cluster",
        "enclave_id",
        "access",
    }
)
_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class AreasSpec:
    """Where the areas and their demographics come from."""

    path: Path
    #: Id column of the layer; None to find ``GEOID``/``GEOID20``/``GEOID10`` by itself.
    id: str | None
    layer: str | None = None
    crs: str | None = None
    table: Path | None = None
    table_id: str | None = None
    id_width: int | None = None


@dataclass(frozen=True)
class PopulationSpec:
    """Which columns hold the total, each group and the income ratio."""

    total: str
    groups: tuple[tuple[str, str], ...]
    reference: str
    derive_minority: bool = False
    income_ratio: str | None = None
    majority_minority_share: float = 0.5
    majority_minority_rule: str = "above"
    #: Display labels by group name (a group without one shows its name).
    labels: tuple[tuple[str, str], ...] = ()
    #: Margin-of-error columns (90% level) by group name, for groups that name one.
    moes: tuple[tuple[str, str], ...] = ()
    #: Margin-of-error column of the total, when given.
    total_moe: str | None = None
    #: What is counted ("people", "households", "births", "loans" ...), used in sentences.
    unit: str = "people"
    #: Variance replicate table (80 replicate estimates per count), when given.
    replicates: Path | None = None
    #: Parametric-bootstrap draws for the segregation indices and enclave shares.
    margin_draws: int = 200

    @property
    def group_columns(self) -> dict[str, str]:
        """Group name -> input column, in the order given."""
        return dict(self.groups)

    @property
    def group_labels(self) -> dict[str, str]:
        """Group name -> display label, for every analysed group (the name when none)."""
        given = dict(self.labels)
        return {name: given.get(name, name) for name in self.group_names}

    @property
    def group_moes(self) -> dict[str, str]:
        """Group name -> margin-of-error column, for the groups that name one."""
        return dict(self.moes)

    @property
    def group_names(self) -> list[str]:
        """Every analysed group name, with ``minority`` last when derived."""
        names = [name for name, _ in self.groups]
        return names + (["minority"] if self.derive_minority else [])


@dataclass(frozen=True)
class FootprintSpec:
    """One service footprint: polygons, points with a reach radius, or listed area ids."""

    name: str
    kind: str
    path: Path | None = None
    layer: str | None = None
    crs: str | None = None
    radius_m: float | None = None
    radius_unit: str = "m"
    radius_column: str | None = None
    served_ids: Path | None = None
    served_ids_column: str | None = None
    served_column: str | None = None
    ids: tuple[str, ...] | None = None
    #: Id column of a polygon layer from which ``ids``/``ids_path`` choose the footprint.
    id: str | None = None
    #: A file of ids (one a line, or a CSV whose first column holds them) choosing polygons.
    ids_path: Path | None = None
    #: ZIP codes served (one a line, or a CSV with a ``zip`` column), kind "zips".
    zips: Path | None = None
    #: Census ZCTA-to-tract relationship file (pipe-delimited) for ``zips``.
    zcta_relationship: Path | None = None
    #: A ZIP-to-area crosswalk with a ratio column, instead of the relationship file.
    crosswalk: Path | None = None
    #: Ratio column of ``crosswalk`` (share of each area that a ZIP holds).
    crosswalk_ratio: str | None = None


@dataclass(frozen=True)
class TableSpec:
    """One demographics table joined to the areas on the id (``[[table]]``)."""

    path: Path
    #: Id column; None to detect ``GEO_ID``, ``GEOID``, ``GEOID20`` or geography columns.
    id: str | None = None


@dataclass(frozen=True)
class AnalysisSpec:
    """Thresholds, inference settings and the seed."""

    served_threshold: float = 0.5
    comparison: str = "reference"
    contiguity: str = "queen"
    islands: str = "exclude"
    knn_k: int = 1
    permutations: int = 999
    seed: int = DEFAULT_SEED
    fdr: str = "bh"
    alpha: float = 0.05
    enclave_min_surround: float = 0.75
    enclave_min_population: float = 0.0
    enclave_draws: int = 999
    contrast_group: str | None = None
    transparent_zero_population: bool = False
    circle_vertices: int = 128
    analysis_crs: str | None = None
    sensitivity: bool = True
    engine: str = "local"
    dask_scheduler: str | None = None
    partitions: int | None = None


@dataclass(frozen=True)
class ExplainSpec:
    """Whether and how to test if legitimate factors explain a gap."""

    controls: tuple[str, ...] = ()
    categorical: tuple[str, ...] = ()
    hub: tuple[float, float] | None = None
    hub_name: str = "hub"
    models: bool = True
    rules: bool = True
    rule_conditions: tuple[str, ...] = ()
    rule_max_length: int = 2
    rule_min_support: float = 0.05


@dataclass(frozen=True)
class ChangeSpec:
    """Two footprints of the same provider to compare (before and after)."""

    before: str
    after: str


@dataclass(frozen=True)
class ActivitySpec:
    """Activity by area (applications, originations) by lender, for the peer comparison."""

    path: Path
    id: str
    lender_column: str | None = None
    count_column: str | None = None
    lender_columns: tuple[str, ...] | None = None
    alpha: float = 0.05
    id_width: int | None = None


@dataclass(frozen=True)
class OutputSpec:
    """Which optional outputs to write."""

    map: bool = True
    report: bool = True
    tiles: bool = False


#: How an area is judged inside a polygon study area: by its representative point, or by
#: the share of its land the polygons cover (at least ``min_share``).
STUDY_AREA_RULES = ("point", "share")


@dataclass(frozen=True)
class StudyAreaSpec:
    """The region within which coverage is compared (``[study_area]``).

    Exactly one of ``path`` (a polygon layer, or a CSV/text list of area ids),
    ``ids`` (area ids), ``prefixes`` (GEOID prefixes such as county codes) or
    ``within_m`` (a distance from the footprint) is given; ``kind`` says which.
    """

    kind: str
    name: str = "study area"
    path: Path | None = None
    layer: str | None = None
    crs: str | None = None
    rule: str = "point"
    min_share: float = 0.5
    ids: tuple[str, ...] | None = None
    ids_column: str | None = None
    prefixes: tuple[str, ...] | None = None
    within_m: float | None = None


#: Time units accepted for a catchment measured on a travel-time table, in minutes.
TIME_UNITS = {"min": 1.0, "h": 60.0}
#: Where each area's demand sits: its centroid, or the population-weighted centroid of its
#: blocks (needs census blocks).
ACCESS_ORIGINS = ("centroid", "population")


@dataclass(frozen=True)
class AccessSpec:
    """Capacity-aware accessibility (2SFCA / E2SFCA) to the footprint's points.

    Attributes
    ----------
    catchment : float
        The catchment in its base unit: metres for a length, minutes for a time.
    catchment_unit : {"m", "min"}
        Base unit of ``catchment``, of the stepped edges and of the costs once converted.
    decay : {"none", "gaussian", "steps"}
    steps : tuple of (float, float)
        Zone upper edges (converted to the base unit) and weights, for ``steps``.
    """

    catchment: float
    catchment_unit: str = "m"
    decay: str = "none"
    steps: tuple[tuple[float, float], ...] = ()
    capacity: str | None = None
    origins: str = "centroid"
    costs: Path | None = None
    cost_origin: str = "origin"
    cost_site: str = "site"
    cost_column: str = "cost"
    cost_unit: str | None = None
    site_id: str | None = None
    low_access_fraction: float = 0.5

    @property
    def cost_factor(self) -> float:
        """Multiplier taking the cost column's unit to the catchment's base unit."""
        unit = self.cost_unit or self.catchment_unit
        return TIME_UNITS[unit] if self.catchment_unit == "min" else LENGTH_UNITS[unit]


#: Presets of block count columns: name -> (total column, {group name: column}).
#: ``pl_p2``: 2020 Census redistricting data (Public Law 94-171), table P2 "Hispanic or
#: Latino, and not Hispanic or Latino by race", variable codes from memory (listed in the
#: project's REFERENCES.md; check them against the Census Bureau's table shell).
BLOCK_PRESETS: dict[str, tuple[str, dict[str, str]]] = {
    "pl_p2": (
        "P2_001N",
        {
            "hispanic": "P2_002N",
            "white_nh": "P2_005N",
            "black_nh": "P2_006N",
            "aian_nh": "P2_007N",
            "asian_nh": "P2_008N",
            "nhpi_nh": "P2_009N",
            "other_nh": "P2_010N",
            "two_or_more_nh": "P2_011N",
        },
    )
}


@dataclass(frozen=True)
class BlocksSpec:
    """Census blocks whose counts apportion coverage to the areas (``[blocks]``).

    ``groups`` maps each analysed group name (as in ``[population]``) to a block column;
    a preset fills ``total`` and the groups it knows by name (``pl_p2``: the 2020
    redistricting data's table P2).
    """

    path: Path
    id: str = "GEOID20"
    total: str = ""
    groups: tuple[tuple[str, str], ...] = ()
    preset: str | None = None

    @property
    def group_columns(self) -> dict[str, str]:
        """Group name -> block column, in the order given."""
        return dict(self.groups)


@dataclass(frozen=True)
class DasymetricSpec:
    """A settlement mask that apportions each area's people to its settled part.

    ``mask`` is a polygon layer of settled land, or a raster whose cells with one of
    ``values`` (land-cover codes) are settled.
    """

    mask: Path
    values: tuple[int, ...] = ()


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
_TABLE_KEYS = ("path", "id")
_BLOCKS_KEYS = ("path", "id", "total", "groups", "preset")
_EXPLAIN_KEYS = tuple(f.name for f in fields(ExplainSpec))
_CHANGE_KEYS = ("before", "after")
_ACTIVITY_KEYS = tuple(f.name for f in fields(ActivitySpec))
_AREAS_KEYS = ("path", "id", "layer", "crs", "table", "table_id", "id_width")
_POP_KEYS = (
    "total",
    "groups",
    "reference",
    "derive_minority",
    "income_ratio",
    "majority_minority_share",
    "majority_minority_rule",
    "total_moe",
    "unit",
    "preset",
    "replicates",
    "margin_draws",
)
#: Keys of a group given as a table: { column = "...", label = "...", moe = "..." }.
_GROUP_KEYS = ("column", "label", "moe")
_FOOT_KEYS = (
    "name",
    "kind",
    "path",
    "layer",
    "crs",
    "radius",
    "radius_unit",
    "radius_column",
    "served_ids",
    "served_ids_column",
    "served_column",
    "ids",
    "id",
    "zips",
    "zcta_relationship",
    "crosswalk",
    "crosswalk_ratio",
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

    areas_d = _table(data["areas"], where, "areas")
    _check_keys(areas_d, _AREAS_KEYS, where, "[areas]")
    areas = AreasSpec(
        path=_path(areas_d, "path", base, where, "areas", required=True),  # type: ignore[arg-type]
        id=_str(areas_d, "id", where, "areas"),
        layer=_str(areas_d, "layer", where, "areas"),
        crs=_str(areas_d, "crs", where, "areas"),
        table=_path(areas_d, "table", base, where, "areas"),
        table_id=_str(areas_d, "table_id", where, "areas"),
        id_width=_int(areas_d, "id_width", where, "areas", minimum=1),
    )

    pop_d = _table(data["population"], where, "population")
    _check_keys(pop_d, _POP_KEYS, where, "[population]")
    population = replace(
        _population_from(pop_d, where),
        replicates=_path(pop_d, "replicates", base, where, "population"),
        margin_draws=_int(pop_d, "margin_draws", where, "population", minimum=19) or 200,
    )

    raw_fp = data["footprint"]
    fp_list = list(raw_fp) if isinstance(raw_fp, list) else [raw_fp]
    if not fp_list:
        raise SpecError(f"{where}: [footprint] is empty; give at least one footprint")
    footprints = []
    for k, item in enumerate(fp_list):
        label = "footprint" if len(fp_list) == 1 else f"footprint #{k + 1}"
        footprints.append(_footprint_from(_table(item, where, label), base, where, label, k))
    names = [f.name for f in footprints]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise SpecError(f"{where}: footprint names must differ; repeated: {dupes}")

    analysis = _analysis_from(_table(data.get("analysis", {}), where, "analysis"), where)
    if (
        analysis.contrast_group is not None
        and analysis.contrast_group not in population.group_names
    ):
        raise SpecError(
            f'{where}: [analysis] contrast_group was "{analysis.contrast_group}" but must be one of '
            f"the groups {population.group_names}"
        )
    out_d = _table(data.get("output", {}), where, "output")
    _check_keys(out_d, _OUTPUT_KEYS, where, "[output]")
    output = OutputSpec(
        map=_bool(out_d, "map", where, "output", True),
        report=_bool(out_d, "report", where, "output", True),
        tiles=_bool(out_d, "tiles", where, "output", False),
    )
    explain = _explain_from(data.get("explain"), where)
    change = None
    if "change" in data:
        ch_d = _table(data["change"], where, "change")
        _check_keys(ch_d, _CHANGE_KEYS, where, "[change]")
        before = _str(ch_d, "before", where, "change", required=True)
        after = _str(ch_d, "after", where, "change", required=True)
        for name in (before, after):
            if name not in names:
                raise SpecError(
                    f'{where}: [change] names footprint "{name}" but the footprints are {names}'
                )
        if before == after:
            raise SpecError(f"{where}: [change] before and after must be two different footprints")
        change = ChangeSpec(before=str(before), after=str(after))
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


def _dasymetric_from(value: Any, base: Path, where: str, has_blocks: bool) -> DasymetricSpec | None:
    """Parse ``[dasymetric]``: a mask path and, for a raster, the settled cell values."""
    if value is None:
        return None
    if has_blocks:
        raise SpecError(
            f"{where}: [blocks] and [dasymetric] are two ways of placing people; give one"
        )
    d = _table(value, where, "dasymetric")
    _check_keys(d, ("mask", "values"), where, "[dasymetric]")
    values = d.get("values", [])
    if not isinstance(values, list) or not all(
        isinstance(v, int) and not isinstance(v, bool) for v in values
    ):
        raise SpecError(
            f"{where}: [dasymetric] values must be a list of whole numbers (raster cell values "
            f"of settled land, e.g. [21, 22, 23, 24]), got {values!r}"
        )
    return DasymetricSpec(
        mask=_path(d, "mask", base, where, "dasymetric", required=True),  # type: ignore[arg-type]
        values=tuple(values),
    )


def _blocks_from(
    value: Any, base: Path, where: str, population: PopulationSpec
) -> BlocksSpec | None:
    """Parse ``[blocks]``; every analysed group must get a block column."""
    if value is None:
        return None
    d = _table(value, where, "blocks")
    _check_keys(d, _BLOCKS_KEYS, where, "[blocks]")
    preset = _str(d, "preset", where, "blocks")
    known: dict[str, str] = {}
    total = None
    if preset is not None:
        if preset not in BLOCK_PRESETS:
            raise SpecError(
                f'{where}: [blocks] preset was "{preset}" but is expected to be one of '
                f"{sorted(BLOCK_PRESETS)}"
            )
        total, known = BLOCK_PRESETS[preset]
    total = _str(d, "total", where, "blocks", required=preset is None) or total
    raw = d.get("groups", {})
    if not isinstance(raw, Mapping) or not all(isinstance(v, str) and v for v in raw.values()):
        raise SpecError(
            f'{where}: [blocks] groups must be a table of name = "column" with the names of '
            f'[population] groups, for example groups = {{ white_nh = "P2_005N" }}'
        )
    given = [name for name, _ in population.groups]
    unknown = [str(n) for n in raw if n not in given]
    if unknown:
        raise SpecError(
            f'{where}: [blocks] groups names "{unknown[0]}", which is not a [population] group; '
            f"the groups are {given}"
        )
    columns = {**known, **{str(k): str(v) for k, v in raw.items()}}
    missing = [n for n in given if n not in columns]
    if missing:
        hint = f" (preset {preset} knows {sorted(known)})" if preset else ""
        raise SpecError(
            f'{where}: [blocks] has no column for the group "{missing[0]}"{hint}; add '
            f'{missing[0]} = "COLUMN" to [blocks.groups]'
        )
    assert total is not None
    return BlocksSpec(
        path=_path(d, "path", base, where, "blocks", required=True),  # type: ignore[arg-type]
        id=_str(d, "id", where, "blocks") or "GEOID20",
        total=total,
        groups=tuple((n, columns[n]) for n in given),
        preset=preset,
    )


def _tables_from(value: Any, base: Path, where: str) -> tuple[TableSpec, ...]:
    if value is None:
        return ()
    items = list(value) if isinstance(value, list) else [value]
    out = []
    for k, item in enumerate(items):
        label = f"table #{k + 1}"
        t_d = _table(item, where, label)
        _check_keys(t_d, _TABLE_KEYS, where, f"[[table]] #{k + 1}")
        path = _path(t_d, "path", base, where, label, required=True)
        assert path is not None
        out.append(TableSpec(path=path, id=_str(t_d, "id", where, label)))
    return tuple(out)


def _population_from(pop_d: Mapping[str, Any], where: str) -> PopulationSpec:
    if "preset" in pop_d:
        pop_d = preset_population(pop_d, where)
    total = _str(pop_d, "total", where, "population", required=True)
    assert total is not None  # required=True raised otherwise
    groups_raw = pop_d.get("groups")
    if not isinstance(groups_raw, Mapping) or not groups_raw:
        raise SpecError(
            f'{where}: [population] groups must be a table of name = "column", '
            f'for example groups = {{ white_nh = "B03002_003E", black_nh = "B03002_004E" }}'
        )
    groups: list[tuple[str, str]] = []
    labels: list[tuple[str, str]] = []
    moes: list[tuple[str, str]] = []
    for name, value in groups_raw.items():
        if not _NAME_RE.match(str(name)):
            raise SpecError(
                f'{where}: [population] group name "{name}" must start with a letter or _ and '
                "hold only letters, digits and _"
            )
        if name in RESERVED_NAMES or str(name).endswith("_share"):
            raise SpecError(
                f'{where}: [population] group name "{name}" is reserved for outputs; '
                f"choose another (reserved: {sorted(RESERVED_NAMES)} and names ending in _share)"
            )
        column: Any = value
        if isinstance(value, Mapping):
            gwhere = f"population.groups.{name}"
            _check_keys(value, _GROUP_KEYS, where, f"[{gwhere}]")
            column = _str(value, "column", where, gwhere, required=True)
            label = _str(value, "label", where, gwhere)
            moe = _str(value, "moe", where, gwhere)
            if label is not None:
                labels.append((str(name), label))
            if moe is not None:
                moes.append((str(name), moe))
        if not isinstance(column, str) or not column:
            raise SpecError(
                f"{where}: [population] groups.{name} must name a column, got {column!r} "
                '(give "COLUMN" or { column = "COLUMN", label = "Label", moe = "MOE_COLUMN" })'
            )
        groups.append((str(name), column))
    names = [n for n, _ in groups]
    reference = _str(pop_d, "reference", where, "population", required=True)
    assert reference is not None
    if reference not in names:
        raise SpecError(
            f'{where}: [population] reference was "{reference}" but must be one of the groups '
            f"{names}"
        )
    derive = _bool(pop_d, "derive_minority", where, "population", False)
    if derive and "minority" in names:
        raise SpecError(
            f'{where}: [population] has a group named "minority" and derive_minority = true; '
            "use one or the other"
        )
    share = _float(pop_d, "majority_minority_share", where, "population", 0.5, 0.0, 1.0)
    rule = _choice(pop_d, "majority_minority_rule", where, "population", MAJORITY_RULES, "above")
    return PopulationSpec(
        total=total,
        groups=tuple(groups),
        reference=reference,
        derive_minority=derive,
        income_ratio=_str(pop_d, "income_ratio", where, "population"),
        majority_minority_share=share,
        majority_minority_rule=rule,
        labels=tuple(labels),
        moes=tuple(moes),
        total_moe=_str(pop_d, "total_moe", where, "population"),
        unit=_str(pop_d, "unit", where, "population") or "people",
    )


def _footprint_from(
    fp_d: Mapping[str, Any], base: Path, where: str, label: str, index: int
) -> FootprintSpec:
    _check_keys(fp_d, _FOOT_KEYS, where, f"[{label}]")
    name = _str(fp_d, "name", where, label) or (
        "footprint" if index == 0 else f"footprint_{index + 1}"
    )
    path = _path(fp_d, "path", base, where, label)
    served_ids = _path(fp_d, "served_ids", base, where, label)
    served_column = _str(fp_d, "served_column", where, label)
    ids_raw = fp_d.get("ids")
    ids: tuple[str, ...] | None = None
    ids_path: Path | None = None
    layer_id = _str(fp_d, "id", where, label)
    if isinstance(ids_raw, str) and layer_id is not None:
        ids_path = _path(fp_d, "ids", base, where, label)
    elif ids_raw is not None:
        if not isinstance(ids_raw, list) or not all(isinstance(i, (str, int)) for i in ids_raw):
            raise SpecError(
                f"{where}: [{label}] ids must be a list of area ids (strings), or with id and "
                "path a file of ids"
            )
        ids = tuple(str(i) for i in ids_raw)
    zips = _path(fp_d, "zips", base, where, label)
    relationship = _path(fp_d, "zcta_relationship", base, where, label)
    crosswalk = _path(fp_d, "crosswalk", base, where, label)
    crosswalk_ratio = _str(fp_d, "crosswalk_ratio", where, label)
    if layer_id is not None:
        if path is None or (ids is None and ids_path is None):
            raise SpecError(
                f"{where}: [{label}] id chooses polygons of a layer: give path = the layer and "
                'ids = ["...", ...] (or ids = "a file of ids") beside it'
            )
        if fp_d.get("kind", "polygons") != "polygons":
            raise SpecError(f'{where}: [{label}] id and ids with path need kind = "polygons"')
    if zips is not None or relationship is not None or crosswalk is not None:
        if zips is None or (relationship is None) == (crosswalk is None):
            raise SpecError(
                f'{where}: [{label}] ZIP-code zones need zips = "FILE" and exactly one of '
                'zcta_relationship = "FILE" (the Census ZCTA-to-tract relationship file) or '
                'crosswalk = "FILE" (with crosswalk_ratio = "COLUMN")'
            )
        if crosswalk is not None and crosswalk_ratio is None:
            raise SpecError(
                f'{where}: [{label}] crosswalk needs crosswalk_ratio = "COLUMN", the share of '
                "each area held by the ZIP code (for example a residential-address ratio)"
            )
    radius = fp_d.get("radius")
    radius_column = _str(fp_d, "radius_column", where, label)
    kind = fp_d.get("kind")
    if kind is None:
        if zips is not None:
            kind = "zips"
        elif layer_id is not None:
            kind = "polygons"
        elif served_ids is not None or served_column is not None or ids is not None:
            kind = "ids"
        elif radius is not None or radius_column is not None:
            kind = "points"
        elif path is not None:
            kind = "polygons"
        else:
            raise SpecError(
                f"{where}: [{label}] needs a path (polygons, or points with radius), "
                "served_ids, served_column or ids"
            )
    if kind not in FOOTPRINT_KINDS:
        raise SpecError(
            f'{where}: [{label}] kind was "{kind}" but is expected to be one of {list(FOOTPRINT_KINDS)}'
        )
    unit = _choice(fp_d, "radius_unit", where, label, tuple(LENGTH_UNITS), "m")
    radius_m: float | None = None
    if kind in ("polygons", "points") and path is None:
        raise SpecError(f'{where}: [{label}] kind = "{kind}" needs path = the footprint file')
    if kind == "points":
        if radius is None and radius_column is None:
            raise SpecError(
                f"{where}: [{label}] points need a reach: radius = 3000 (with radius_unit, "
                "default m) or radius_column = a column of the points file"
            )
        if radius is not None:
            radius_m = _parse_length(radius, unit, where, label)
    elif radius is not None or radius_column is not None:
        raise SpecError(f'{where}: [{label}] radius applies only to kind = "points"')
    if kind == "ids":
        given = [
            k
            for k, v in (("served_ids", served_ids), ("served_column", served_column), ("ids", ids))
            if v is not None
        ]
        if len(given) != 1:
            raise SpecError(
                f"{where}: [{label}] a list of served areas needs exactly one of served_ids "
                f"(a file of ids), served_column (a flag column of the areas) or ids; got {given}"
            )
    elif served_ids is not None or served_column is not None or (ids is not None and not layer_id):
        raise SpecError(
            f'{where}: [{label}] served_ids/served_column/ids apply only to kind = "ids"'
        )
    return FootprintSpec(
        name=name,
        kind=kind,
        path=path,
        layer=_str(fp_d, "layer", where, label),
        crs=_str(fp_d, "crs", where, label),
        radius_m=radius_m,
        radius_unit=unit,
        radius_column=radius_column,
        served_ids=served_ids,
        served_ids_column=_str(fp_d, "served_ids_column", where, label),
        served_column=served_column,
        ids=ids,
        id=layer_id,
        ids_path=ids_path,
        zips=zips,
        zcta_relationship=relationship,
        crosswalk=crosswalk,
        crosswalk_ratio=crosswalk_ratio,
    )


_LENGTH_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([a-zA-Z]*)\s*$")


def parse_length(value: Any, default_unit: str = "m") -> float:
    """Parse a length such as ``3000``, ``"3 km"`` or ``"2mi"`` into metres.

    Raises
    ------
    ValueError
        With a message listing the accepted units.
    """
    if isinstance(value, bool):
        raise ValueError(f"a length must be a number, got {value!r}")
    if isinstance(value, (int, float)):
        number, unit = float(value), default_unit
    elif isinstance(value, str):
        match = _LENGTH_RE.match(value)
        if not match:
            raise ValueError(f'"{value}" is not a length; write e.g. 3000, "3 km" or "2 mi"')
        number, unit = float(match.group(1)), (match.group(2) or default_unit).lower()
    else:
        raise ValueError(f"a length must be a number or a string, got {value!r}")
    if unit not in LENGTH_UNITS:
        raise ValueError(f'unit "{unit}" is not known; use one of {list(LENGTH_UNITS)}')
    if not math.isfinite(number) or number <= 0:
        raise ValueError(f"a length must be positive, got {value!r}")
    return number * LENGTH_UNITS[unit]


def _parse_length(value: Any, unit: str, where: str, label: str) -> float:
    try:
        return parse_length(value, unit)
    except ValueError as exc:
        raise SpecError(f"{where}: [{label}] radius: {exc}") from None


def _str_list(d: Mapping[str, Any], key: str, where: str, label: str) -> tuple[str, ...]:
    value = d.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
        raise SpecError(f"{where}: [{label}] {key} must be a list of column names, got {value!r}")
    return tuple(value)


def _explain_from(value: Any, where: str) -> ExplainSpec | None:
    if value is None:
        return None
    ex_d = _table(value, where, "explain")
    _check_keys(ex_d, _EXPLAIN_KEYS, where, "[explain]")
    hub = ex_d.get("hub")
    hub_t: tuple[float, float] | None = None
    if hub is not None:
        ok = (
            isinstance(hub, list)
            and len(hub) == 2
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in hub)
        )
        if not ok or not (-180 <= hub[0] <= 360 and -90 <= hub[1] <= 90):
            raise SpecError(
                f"{where}: [explain] hub must be [longitude, latitude] in degrees (WGS 84), "
                f"got {hub!r}"
            )
        hub_t = (float(hub[0]), float(hub[1]))
    support = ex_d.get("rule_min_support", 0.05)
    if isinstance(support, bool) or not isinstance(support, (int, float)) or support <= 0:
        raise SpecError(
            f"{where}: [explain] rule_min_support must be a share in (0, 1) or a count of areas, "
            f"got {support!r}"
        )
    return ExplainSpec(
        controls=_str_list(ex_d, "controls", where, "explain"),
        categorical=_str_list(ex_d, "categorical", where, "explain"),
        hub=hub_t,
        hub_name=_str(ex_d, "hub_name", where, "explain") or "hub",
        models=_bool(ex_d, "models", where, "explain", True),
        rules=_bool(ex_d, "rules", where, "explain", True),
        rule_conditions=_str_list(ex_d, "rule_conditions", where, "explain"),
        rule_max_length=_int_default(
            ex_d, "rule_max_length", where, "explain", 2, minimum=1, maximum=MAX_RULE_LENGTH
        ),
        rule_min_support=float(support),
    )


def _activity_from(value: Any, base: Path, where: str) -> ActivitySpec | None:
    if value is None:
        return None
    ac_d = _table(value, where, "activity")
    _check_keys(ac_d, _ACTIVITY_KEYS, where, "[activity]")
    lender_columns = tuple(_str_list(ac_d, "lender_columns", where, "activity")) or None
    lender_column = _str(ac_d, "lender_column", where, "activity")
    count_column = _str(ac_d, "count_column", where, "activity")
    if (lender_columns is None) == (lender_column is None):
        raise SpecError(
            f"{where}: [activity] give either lender_column and count_column (a long table: "
            "one row per area and lender) or lender_columns (a wide table: one column per lender)"
        )
    if lender_column is not None and count_column is None:
        raise SpecError(
            f"{where}: [activity] lender_column needs count_column, the column of counts"
        )
    path = _path(ac_d, "path", base, where, "activity", required=True)
    assert path is not None
    return ActivitySpec(
        path=path,
        id=_str(ac_d, "id", where, "activity", required=True) or "",
        lender_column=lender_column,
        count_column=count_column,
        lender_columns=lender_columns,
        alpha=_float(ac_d, "alpha", where, "activity", 0.05, 0.0, 1.0, open_low=True),
        id_width=_int(ac_d, "id_width", where, "activity", minimum=1),
    )


_STUDY_AREA_KEYS = (
    "name",
    "path",
    "layer",
    "crs",
    "inside",
    "min_share",
    "ids",
    "ids_column",
    "prefixes",
    "within",
)
#: File suffixes read as a list of ids rather than as a polygon layer.
ID_LIST_SUFFIXES = (".csv", ".tsv", ".txt", ".parquet", ".pq")


def _study_area_from(value: Any, base: Path, where: str) -> StudyAreaSpec | None:
    if value is None:
        return None
    t = "study_area"
    sa_d = _table(value, where, t)
    _check_keys(sa_d, _STUDY_AREA_KEYS, where, f"[{t}]")
    given = [k for k in ("path", "ids", "prefixes", "within") if k in sa_d]
    if len(given) != 1:
        raise SpecError(
            f"{where}: [study_area] give exactly one of path (a polygon layer or a list of ids), "
            f"ids, prefixes (GEOID prefixes such as county codes) or within (a distance from "
            f'the footprint, e.g. "5 km"); found {given or "none"}'
        )
    name = _str(sa_d, "name", where, t) or "study area"
    rule = _choice(sa_d, "inside", where, t, STUDY_AREA_RULES, "point")
    min_share = _float(sa_d, "min_share", where, t, 0.5, 0.0, 1.0, open_low=True)
    key = given[0]
    if key == "within":
        try:
            within_m = parse_length(sa_d["within"], "m")
        except ValueError as exc:
            raise SpecError(f"{where}: [study_area] within: {exc}") from None
        return StudyAreaSpec(kind="within", name=name, within_m=within_m)
    if key in ("ids", "prefixes"):
        items = sa_d[key]
        if isinstance(items, str):
            items = [items]
        if (
            not isinstance(items, list)
            or not items
            or not all(isinstance(v, (str, int)) and not isinstance(v, bool) for v in items)
        ):
            raise SpecError(
                f"{where}: [study_area] {key} must be a non-empty list of ids as text, got {items!r}"
            )
        listed = tuple(str(v).strip() for v in items)
        if key == "ids":
            return StudyAreaSpec(kind="ids", name=name, ids=listed)
        return StudyAreaSpec(kind="prefixes", name=name, prefixes=listed)
    path = _path(sa_d, "path", base, where, t, required=True)
    assert path is not None
    if path.suffix.lower() in ID_LIST_SUFFIXES:
        return StudyAreaSpec(
            kind="ids", name=name, path=path, ids_column=_str(sa_d, "ids_column", where, t)
        )
    return StudyAreaSpec(
        kind="polygons",
        name=name,
        path=path,
        layer=_str(sa_d, "layer", where, t),
        crs=_str(sa_d, "crs", where, t),
        rule=rule,
        min_share=min_share,
    )


def _analysis_from(an_d: Mapping[str, Any], where: str) -> AnalysisSpec:
    _check_keys(an_d, _ANALYSIS_KEYS, where, "[analysis]")
    t = "analysis"
    return AnalysisSpec(
        served_threshold=_float(an_d, "served_threshold", where, t, 0.5, 0.0, 1.0, open_low=True),
        comparison=_choice(an_d, "comparison", where, t, COMPARISONS, "reference"),
        contiguity=_choice(an_d, "contiguity", where, t, ("queen", "rook"), "queen"),
        islands=_choice(an_d, "islands", where, t, ("exclude", "knn"), "exclude"),
        knn_k=_int(an_d, "knn_k", where, t, minimum=1, maximum=MAX_KNN) or 1,
        permutations=_int_default(
            an_d, "permutations", where, t, 999, minimum=1, maximum=MAX_DRAWS
        ),
        seed=_int_default(an_d, "seed", where, t, DEFAULT_SEED, minimum=0),
        fdr=_choice(an_d, "fdr", where, t, FDR_METHODS, "bh"),
        alpha=_float(an_d, "alpha", where, t, 0.05, 0.0, 1.0, open_low=True),
        enclave_min_surround=_float(an_d, "enclave_min_surround", where, t, 0.75, 0.0, 1.0),
        enclave_min_population=_float(an_d, "enclave_min_population", where, t, 0.0, 0.0, None),
        enclave_draws=_int_default(
            an_d, "enclave_draws", where, t, 999, minimum=0, maximum=MAX_DRAWS
        ),
        contrast_group=_str(an_d, "contrast_group", where, t),
        transparent_zero_population=_bool(an_d, "transparent_zero_population", where, t, False),
        circle_vertices=_int_default(
            an_d, "circle_vertices", where, t, 128, minimum=16, maximum=MAX_CIRCLE_VERTICES
        ),
        analysis_crs=_str(an_d, "analysis_crs", where, t),
        sensitivity=_bool(an_d, "sensitivity", where, t, True),
        engine=_choice(an_d, "engine", where, t, ENGINES, "local"),
        dask_scheduler=_str(an_d, "dask_scheduler", where, t),
        partitions=_int(an_d, "partitions", where, t, minimum=1, maximum=MAX_PARTITIONS),
    )


def replace_output(spec: AuditSpec, **changes: bool) -> AuditSpec:
    """Return a copy of ``spec`` with some ``[output]`` switches changed."""
    return replace(spec, output=replace(spec.output, **changes))


_ACCESS_KEYS = (
    "capacity",
    "catchment",
    "decay",
    "origins",
    "costs",
    "cost_origin",
    "cost_site",
    "cost_column",
    "cost_unit",
    "site_id",
    "low_access_fraction",
)
_TIME_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([a-zA-Z]+)\s*$")


def _catchment(value: Any, where: str) -> tuple[float, str, float]:
    """Return (catchment in base unit, base unit, factor of the unit as written)."""
    if isinstance(value, str):
        match = _TIME_RE.match(value)
        if match and match.group(2).lower() in TIME_UNITS:
            number = float(match.group(1))
            if not (math.isfinite(number) and number > 0):
                raise SpecError(f"{where}: [access] catchment must be positive, got {value!r}")
            factor = TIME_UNITS[match.group(2).lower()]
            return number * factor, "min", factor
    try:
        metres = parse_length(value, "m")
    except ValueError as exc:
        raise SpecError(
            f'{where}: [access] catchment: {exc}; or a travel time such as "20 min" (with costs)'
        ) from None
    unit = "m"
    if isinstance(value, str):
        match = _LENGTH_RE.match(value)
        unit = (match.group(2) or "m").lower() if match else "m"
    return metres, "m", LENGTH_UNITS[unit]


def _access_from(value: Any, base: Path, where: str, footprint: FootprintSpec) -> AccessSpec | None:
    if value is None:
        return None
    ac_d = _table(value, where, "access")
    _check_keys(ac_d, _ACCESS_KEYS, where, "[access]")
    if footprint.kind != "points":
        raise SpecError(
            f"{where}: [access] measures access to the footprint's points, but footprint "
            f'"{footprint.name}" is kind = "{footprint.kind}"; give a points footprint first'
        )
    if "catchment" not in ac_d:
        raise SpecError(f'{where}: [access] catchment is required, e.g. catchment = "15 km"')
    catchment, unit, factor = _catchment(ac_d["catchment"], where)
    raw_decay = ac_d.get("decay", "none")
    steps: tuple[tuple[float, float], ...] = ()
    if isinstance(raw_decay, list):
        from .stats.access import check_steps

        ok = all(
            isinstance(p, list)
            and len(p) == 2
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in p)
            for p in raw_decay
        )
        if not ok:
            raise SpecError(
                f"{where}: [access] decay as steps must be a list of [edge, weight] pairs, e.g. "
                f"[[5, 1.0], [10, 0.68], [15, 0.22]]; got {raw_decay!r}"
            )
        try:
            check_steps(raw_decay, catchment / factor)
        except ValueError as exc:
            raise SpecError(f"{where}: [access] decay: {exc}") from None
        # The last edge is the catchment itself, exactly (no rounding from the unit).
        steps = tuple(
            (catchment if k == len(raw_decay) - 1 else float(e) * factor, float(w))
            for k, (e, w) in enumerate(raw_decay)
        )
        decay = "steps"
    elif raw_decay in ("none", "gaussian"):
        decay = str(raw_decay)
    else:
        raise SpecError(
            f'{where}: [access] decay was {raw_decay!r} but is expected to be "none", '
            '"gaussian" or a list of [edge, weight] pairs such as [[5, 1.0], [10, 0.68], [15, 0.22]]'
        )
    origins = _choice(ac_d, "origins", where, "access", ACCESS_ORIGINS, "centroid")
    if origins == "population":
        raise SpecError(
            f'{where}: [access] origins = "population" needs census blocks (population-weighted '
            'centroids), which this version does not read yet; use origins = "centroid"'
        )
    costs = _path(ac_d, "costs", base, where, "access")
    allowed_units = tuple(TIME_UNITS) if unit == "min" else tuple(LENGTH_UNITS)
    cost_unit = _str(ac_d, "cost_unit", where, "access")
    if cost_unit is not None and cost_unit not in allowed_units:
        raise SpecError(
            f'{where}: [access] cost_unit was "{cost_unit}" but with this catchment it must be '
            f"one of {list(allowed_units)}"
        )
    if unit == "min" and costs is None:
        raise SpecError(
            f"{where}: [access] a catchment in time ({ac_d['catchment']!r}) needs costs = a "
            "travel-time table; straight lines are lengths"
        )
    return AccessSpec(
        catchment=catchment,
        catchment_unit=unit,
        decay=decay,
        steps=steps,
        capacity=_str(ac_d, "capacity", where, "access"),
        origins=origins,
        costs=costs,
        cost_origin=_str(ac_d, "cost_origin", where, "access") or "origin",
        cost_site=_str(ac_d, "cost_site", where, "access") or "site",
        cost_column=_str(ac_d, "cost_column", where, "access") or "cost",
        cost_unit=cost_unit,
        site_id=_str(ac_d, "site_id", where, "access"),
        low_access_fraction=_float(
            ac_d, "low_access_fraction", where, "access", 0.5, 0.0, None, open_low=True
        ),
    )
