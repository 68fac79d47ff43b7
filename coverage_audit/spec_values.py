"""Readers of single spec values: each checks one key of a TOML table and names it.

Shared by :mod:`coverage_audit.spec` and the spec tables kept in modules of their own
(:mod:`coverage_audit.spec_lending`), so that those need not import ``spec`` back. Every
failure raises :class:`~coverage_audit.errors.SpecError` naming the spec file, the table
and the key.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import MISSING, fields
from pathlib import Path
from typing import Any, TypeVar, cast

from .errors import SpecError


def _check_keys(table: Mapping[str, Any], allowed: tuple[str, ...], where: str, label: str) -> None:
    unknown = [k for k in table if k not in allowed]
    if unknown:
        raise SpecError(
            f'{where}: unknown key "{unknown[0]}" in {label}; allowed keys are {list(allowed)}'
        )


def _table(value: Any, where: str, label: str) -> Mapping[str, Any]:
    if not isinstance(value, Mapping):
        raise SpecError(f"{where}: [{label}] must be a table of settings, got {value!r}")
    return value


def _str(
    d: Mapping[str, Any], key: str, where: str, label: str, required: bool = False
) -> str | None:
    value = d.get(key)
    if value is None:
        if required:
            raise SpecError(f"{where}: [{label}] {key} is required")
        return None
    if not isinstance(value, str) or not value.strip():
        raise SpecError(f"{where}: [{label}] {key} must be a non-empty string, got {value!r}")
    return value


def _path(
    d: Mapping[str, Any], key: str, base: Path, where: str, label: str, required: bool = False
) -> Path | None:
    value = _str(d, key, where, label, required)
    if value is None:
        return None
    p = Path(value).expanduser()
    return p if p.is_absolute() else (base / p)


def _bool(d: Mapping[str, Any], key: str, where: str, label: str, default: bool) -> bool:
    value = d.get(key, default)
    if not isinstance(value, bool):
        raise SpecError(f"{where}: [{label}] {key} must be true or false, got {value!r}")
    return value


def _number(value: Any, key: str, where: str, label: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SpecError(f"{where}: [{label}] {key} must be a number, got {value!r}")
    return float(value)


def _float(
    d: Mapping[str, Any],
    key: str,
    where: str,
    label: str,
    default: float,
    low: float | None,
    high: float | None,
    open_low: bool = False,
) -> float:
    if key not in d:
        return default
    value = _number(d[key], key, where, label)
    bad_low = low is not None and (value <= low if open_low else value < low)
    bad_high = high is not None and value > high
    if bad_low or bad_high:
        lo = "" if low is None else (f"above {low}" if open_low else f"at least {low}")
        hi = "" if high is None else f"at most {high}"
        rng = " and ".join(s for s in (lo, hi) if s)
        raise SpecError(f"{where}: [{label}] {key} was {value} but must be {rng}")
    return value


def _int(
    d: Mapping[str, Any],
    key: str,
    where: str,
    label: str,
    minimum: int = 0,
    maximum: int | None = None,
) -> int | None:
    if key not in d:
        return None
    value = d[key]
    if isinstance(value, bool) or not isinstance(value, int):
        raise SpecError(f"{where}: [{label}] {key} must be a whole number, got {value!r}")
    if value < minimum:
        raise SpecError(f"{where}: [{label}] {key} was {value} but must be at least {minimum}")
    if maximum is not None and value > maximum:
        raise SpecError(
            f"{where}: [{label}] {key} was {value} but must be at most {maximum:,} "
            f"(the largest this tool accepts); use a smaller number"
        )
    return value


def _int_default(
    d: Mapping[str, Any],
    key: str,
    where: str,
    label: str,
    default: int,
    minimum: int = 0,
    maximum: int | None = None,
) -> int:
    value = _int(d, key, where, label, minimum, maximum)
    return default if value is None else value


_Choice = TypeVar("_Choice", bound=str)


def _choice(
    d: Mapping[str, Any],
    key: str,
    where: str,
    label: str,
    allowed: tuple[_Choice, ...],
    default: _Choice,
) -> _Choice:
    value = d.get(key, default)
    if value not in allowed:
        raise SpecError(
            f'{where}: [{label}] {key} was "{value}" but is expected to be one of {list(allowed)}'
        )
    return cast(_Choice, str(value))


def default_of(section: Any, name: str) -> Any:
    """Return the default of field ``name`` of the spec dataclass ``section``.

    The defaults of a spec section are written once, in its dataclass; the parsers read
    them from there.
    """
    for f in fields(section):
        if f.name == name and f.default is not MISSING:
            return f.default
    raise TypeError(f"{section.__name__}.{name} has no default")
