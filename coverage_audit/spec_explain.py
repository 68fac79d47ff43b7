"""The ``[explain]``, ``[change]`` and ``[activity]`` sections of the spec (further analyses)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from .errors import SpecError
from .spec_values import (
    _bool,
    _check_keys,
    _float,
    _int,
    _int_default,
    _path,
    _str,
    _table,
    default_of,
)

#: Longest rule (conditions joined by "and") searched; the search grows combinatorially.
MAX_RULE_LENGTH = 5


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


_EXPLAIN_KEYS = tuple(f.name for f in fields(ExplainSpec))


_CHANGE_KEYS = ("before", "after")


_ACTIVITY_KEYS = tuple(f.name for f in fields(ActivitySpec))


def _str_list(d: Mapping[str, Any], key: str, where: str, label: str) -> tuple[str, ...]:
    value = d.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
        raise SpecError(f"{where}: [{label}] {key} must be a list of column names, got {value!r}")
    return tuple(value)


def _explain_from(value: object, where: str) -> ExplainSpec | None:
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
    d = ExplainSpec()  # the defaults, written once in the dataclass
    support = ex_d.get("rule_min_support", d.rule_min_support)
    if isinstance(support, bool) or not isinstance(support, (int, float)) or support <= 0:
        raise SpecError(
            f"{where}: [explain] rule_min_support must be a share in (0, 1) or a count of areas, "
            f"got {support!r}"
        )
    return ExplainSpec(
        controls=_str_list(ex_d, "controls", where, "explain"),
        categorical=_str_list(ex_d, "categorical", where, "explain"),
        hub=hub_t,
        hub_name=_str(ex_d, "hub_name", where, "explain") or d.hub_name,
        models=_bool(ex_d, "models", where, "explain", d.models),
        rules=_bool(ex_d, "rules", where, "explain", d.rules),
        rule_conditions=_str_list(ex_d, "rule_conditions", where, "explain"),
        rule_max_length=_int_default(
            ex_d, "rule_max_length", where, "explain", 2, minimum=1, maximum=MAX_RULE_LENGTH
        ),
        rule_min_support=float(support),
    )


def _activity_from(value: object, base: Path, where: str) -> ActivitySpec | None:
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
        alpha=_float(
            ac_d,
            "alpha",
            where,
            "activity",
            default_of(ActivitySpec, "alpha"),
            0.0,
            1.0,
            open_low=True,
        ),
        id_width=_int(ac_d, "id_width", where, "activity", minimum=1),
    )


def _change_from(value: object, where: str, names: list[str]) -> ChangeSpec:
    """Read ``[change]``: two different footprints among ``names``."""
    ch_d = _table(value, where, "change")
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
    return ChangeSpec(before=str(before), after=str(after))
