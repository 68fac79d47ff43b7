"""The ``[areas]``, ``[population]`` and ``[[table]]`` sections of the spec: what is analysed.

Each section is a frozen dataclass and one parser that checks every key and names it in a
:class:`~coverage_audit.errors.SpecError`; :mod:`coverage_audit.spec` assembles them.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import SpecError
from .presets import preset_population
from .spec_values import (
    _bool,
    _check_keys,
    _choice,
    _float,
    _int,
    _path,
    _str,
    _table,
    default_of,
)

MAJORITY_RULES = ("above", "at_or_above")


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
class TableSpec:
    """One demographics table joined to the areas on the id (``[[table]]``)."""

    path: Path
    #: Id column; None to detect ``GEO_ID``, ``GEOID``, ``GEOID20`` or geography columns.
    id: str | None = None


_TABLE_KEYS = ("path", "id")


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


def _tables_from(value: object, base: Path, where: str) -> tuple[TableSpec, ...]:
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
    derive = _bool(
        pop_d, "derive_minority", where, "population", default_of(PopulationSpec, "derive_minority")
    )
    if derive and "minority" in names:
        raise SpecError(
            f'{where}: [population] has a group named "minority" and derive_minority = true; '
            "use one or the other"
        )
    share = _float(
        pop_d,
        "majority_minority_share",
        where,
        "population",
        default_of(PopulationSpec, "majority_minority_share"),
        0.0,
        1.0,
    )
    rule = _choice(
        pop_d,
        "majority_minority_rule",
        where,
        "population",
        MAJORITY_RULES,
        default_of(PopulationSpec, "majority_minority_rule"),
    )
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
        unit=_str(pop_d, "unit", where, "population") or default_of(PopulationSpec, "unit"),
    )


def _areas_from(value: object, base: Path, where: str) -> AreasSpec:
    areas_d = _table(value, where, "areas")
    _check_keys(areas_d, _AREAS_KEYS, where, "[areas]")
    return AreasSpec(
        path=_path(areas_d, "path", base, where, "areas", required=True),  # type: ignore[arg-type]
        id=_str(areas_d, "id", where, "areas"),
        layer=_str(areas_d, "layer", where, "areas"),
        crs=_str(areas_d, "crs", where, "areas"),
        table=_path(areas_d, "table", base, where, "areas"),
        table_id=_str(areas_d, "table_id", where, "areas"),
        id_width=_int(areas_d, "id_width", where, "areas", minimum=1),
    )
