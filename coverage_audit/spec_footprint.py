"""The ``[footprint]`` sections of the spec, and lengths with units (``"5 km"``).

A frozen :class:`FootprintSpec` and its parser; :func:`parse_length` reads a reach radius.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import SpecError
from .spec_values import (
    _check_keys,
    _choice,
    _path,
    _str,
    _table,
    default_of,
)

FOOTPRINT_KINDS = ("polygons", "points", "ids", "zips")


#: Largest number of vertices of a reach circle (the area error at 128 is already 1e-4).
MAX_CIRCLE_VERTICES = 4_096


#: Length units accepted for a reach radius, in metres.
LENGTH_UNITS = {"m": 1.0, "km": 1000.0, "mi": 1609.344, "ft": 0.3048}


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
    _check_zip_sources(zips, relationship, crosswalk, crosswalk_ratio, where, label)
    radius = fp_d.get("radius")
    radius_column = _str(fp_d, "radius_column", where, label)
    kind = fp_d.get("kind")
    if kind is None:
        kind = _inferred_kind(
            zips=zips,
            layer=layer_id is not None,
            listed=served_ids is not None or served_column is not None or ids is not None,
            reach=radius is not None or radius_column is not None,
            path=path,
            where=where,
            label=label,
        )
    if kind not in FOOTPRINT_KINDS:
        raise SpecError(
            f'{where}: [{label}] kind was "{kind}" but is expected to be one of {list(FOOTPRINT_KINDS)}'
        )
    unit = _choice(
        fp_d,
        "radius_unit",
        where,
        label,
        tuple(LENGTH_UNITS),
        default_of(FootprintSpec, "radius_unit"),
    )
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
    _check_served_list(kind, served_ids, served_column, ids, layer_id, where, label)
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


def _check_zip_sources(
    zips: Path | None,
    relationship: Path | None,
    crosswalk: Path | None,
    crosswalk_ratio: str | None,
    where: str,
    label: str,
) -> None:
    """Raise unless ZIP-code zones come with exactly one way to reach the areas."""
    if zips is None and relationship is None and crosswalk is None:
        return
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


def _inferred_kind(
    *,
    zips: Path | None,
    layer: bool,
    listed: bool,
    reach: bool,
    path: Path | None,
    where: str,
    label: str,
) -> str:
    """Return the footprint kind a table without ``kind`` implies by its other keys."""
    if zips is not None:
        return "zips"
    if layer:
        return "polygons"
    if listed:
        return "ids"
    if reach:
        return "points"
    if path is not None:
        return "polygons"
    raise SpecError(
        f"{where}: [{label}] needs a path (polygons, or points with radius), "
        "served_ids, served_column or ids"
    )


def _check_served_list(
    kind: str,
    served_ids: Path | None,
    served_column: str | None,
    ids: tuple[str, ...] | None,
    layer_id: str | None,
    where: str,
    label: str,
) -> None:
    """Raise unless a list footprint names its served areas exactly one way (others none)."""
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


def _footprints_from(raw_fp: object, base: Path, where: str) -> list[FootprintSpec]:
    """Read ``[footprint]`` (one table) or ``[[footprint]]`` (several), names all different."""
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
    return footprints
