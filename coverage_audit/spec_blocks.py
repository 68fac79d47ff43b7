"""The ``[blocks]`` and ``[dasymetric]`` sections of the spec, with the block column presets."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from .errors import SpecError
from .spec_areas import PopulationSpec
from .spec_values import (
    _check_keys,
    _path,
    _str,
    _table,
    default_of,
)

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


_BLOCKS_KEYS = ("path", "id", "total", "groups", "preset")


def _dasymetric_from(
    value: object, base: Path, where: str, has_blocks: bool
) -> DasymetricSpec | None:
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
    value: object, base: Path, where: str, population: PopulationSpec
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
        id=_str(d, "id", where, "blocks") or default_of(BlocksSpec, "id"),
        total=total,
        groups=tuple((n, columns[n]) for n in given),
        preset=preset,
    )
