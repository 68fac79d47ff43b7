"""The ``[study_area]`` section of the spec: which areas are analysed at all."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .errors import SpecError
from .spec_footprint import parse_length
from .spec_values import (
    _check_keys,
    _choice,
    _float,
    _path,
    _str,
    _table,
    default_of,
)

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


def _study_area_from(value: object, base: Path, where: str) -> StudyAreaSpec | None:
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
    name = _str(sa_d, "name", where, t) or default_of(StudyAreaSpec, "name")
    rule = _choice(sa_d, "inside", where, t, STUDY_AREA_RULES, default_of(StudyAreaSpec, "rule"))
    min_share = _float(
        sa_d,
        "min_share",
        where,
        t,
        default_of(StudyAreaSpec, "min_share"),
        0.0,
        1.0,
        open_low=True,
    )
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
