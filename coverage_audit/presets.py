"""Standard population presets: a Census table's codes -> groups with labels and margins.

``[population] preset = "acs_b03002"`` expands, before the usual checks of
:mod:`coverage_audit.spec`, into the total, the groups (each with its label and its ``_M``
margin column), the reference group and ``derive_minority``.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .errors import SpecError

#: Standard population presets: table codes -> groups with labels and margins.
PRESETS: dict[str, dict[str, Any]] = {
    "acs_b03002": {
        "total": "B03002_001E",
        "reference": "white_nh",
        "groups": (
            ("white_nh", "B03002_003E", "White alone, not Hispanic"),
            ("black_nh", "B03002_004E", "Black alone, not Hispanic"),
            ("aian_nh", "B03002_005E", "American Indian and Alaska Native alone, not Hispanic"),
            ("asian_nh", "B03002_006E", "Asian alone, not Hispanic"),
            (
                "nhpi_nh",
                "B03002_007E",
                "Native Hawaiian and Other Pacific Islander alone, not Hispanic",
            ),
            ("other_nh", "B03002_008E", "Some other race alone, not Hispanic"),
            ("multi_nh", "B03002_009E", "Two or more races, not Hispanic"),
            ("hispanic", "B03002_012E", "Hispanic or Latino"),
        ),
    },
}


def preset_population(pop_d: Mapping[str, Any], where: str) -> dict[str, Any]:
    """Expand ``preset = "acs_b03002"`` into total, groups (with labels and margins), reference.

    Codes per ACS table B03002 (REFERENCES.md): _001E total, _003E..._009E not Hispanic by
    race, _012E Hispanic or Latino; each _E estimate's margin is the matching _M column.
    """
    name = pop_d["preset"]
    if name not in PRESETS:
        raise SpecError(
            f'{where}: [population] preset was "{name}" but is expected to be one of '
            f"{list(PRESETS)}"
        )
    preset = PRESETS[name]
    chosen = pop_d.get("groups")
    names = [g[0] for g in preset["groups"]]
    if chosen is not None and not (
        isinstance(chosen, list) and all(isinstance(c, str) and c in names for c in chosen)
    ):
        raise SpecError(
            f'{where}: [population] with preset = "{name}", groups is a list of the preset\'s '
            f"groups to report, chosen from {names}; got {chosen!r}"
        )
    keep = set(chosen or names) | {preset["reference"]}
    groups = {
        g: {"column": col, "label": label, "moe": col[:-1] + "M"}
        for g, col, label in preset["groups"]
        if g in keep
    }
    out = {k: v for k, v in pop_d.items() if k not in ("preset", "groups")}
    out.setdefault("total", preset["total"])
    out.setdefault("total_moe", preset["total"][:-1] + "M")
    out.setdefault("reference", preset["reference"])
    out.setdefault("derive_minority", True)
    out["groups"] = groups
    return out
