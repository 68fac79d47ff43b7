"""The ``[access]`` section of the spec: travel-time catchments and their origins."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import SpecError
from .spec_footprint import _LENGTH_RE, LENGTH_UNITS, FootprintSpec, parse_length
from .spec_values import (
    _check_keys,
    _choice,
    _float,
    _path,
    _str,
    _table,
    default_of,
)

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


def _access_from(
    value: object, base: Path, where: str, footprint: FootprintSpec
) -> AccessSpec | None:
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
    raw_decay = ac_d.get("decay", default_of(AccessSpec, "decay"))
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
    origins = _choice(
        ac_d, "origins", where, "access", ACCESS_ORIGINS, default_of(AccessSpec, "origins")
    )
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
        cost_origin=_str(ac_d, "cost_origin", where, "access")
        or default_of(AccessSpec, "cost_origin"),
        cost_site=_str(ac_d, "cost_site", where, "access") or default_of(AccessSpec, "cost_site"),
        cost_column=_str(ac_d, "cost_column", where, "access")
        or default_of(AccessSpec, "cost_column"),
        cost_unit=cost_unit,
        site_id=_str(ac_d, "site_id", where, "access"),
        low_access_fraction=_float(
            ac_d,
            "low_access_fraction",
            where,
            "access",
            default_of(AccessSpec, "low_access_fraction"),
            0.0,
            None,
            open_low=True,
        ),
    )
