"""Provenance in the report's appendix: shortened digests and the settings, each once.

Printed reports carry no page-long columns of digits: a SHA-256 digest shows its first
:data:`DIGEST_SHOWN` characters, with the full value in the cell's title and in
manifest.json. The resolved spec is flattened into one row per setting, lengths with
their unit.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .markup import NA, Html, fmt_param, tag


def flatten(mapping: Mapping[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    """Return nested settings as ``(dotted.key, value)`` rows (lists of tables indexed)."""
    out: list[tuple[str, Any]] = []
    for key, value in mapping.items():
        if isinstance(value, Mapping) and value:
            out.extend(flatten(value, f"{prefix}{key}."))
        elif isinstance(value, list) and value and all(isinstance(v, Mapping) for v in value):
            for k, item in enumerate(value):
                out.extend(flatten(item, f"{prefix}{key}[{k}]."))
        else:
            out.append((f"{prefix}{key}", value))
    return out


#: Up to this many settings the parameter table is one table; longer, two side by side.
PARAMETER_ROWS_IN_ONE = 24
#: Characters of a SHA-256 digest shown in the report (the full value is in the title
#: attribute and in manifest.json), so printed tables carry no page-long digit columns.
DIGEST_SHOWN = 16


def digest_cell(digest: Any) -> Html:
    """Return a digest shortened for print, the full value in the title attribute."""
    if not isinstance(digest, str) or not digest:
        return tag("span", NA, class_="digest")
    shown = digest if len(digest) <= DIGEST_SHOWN else digest[:DIGEST_SHOWN] + "\u2026"
    return tag("span", shown, class_="digest", title=digest)


def parameter_rows(spec: Mapping[str, Any]) -> list[tuple[str, Any]]:
    """Flatten the resolved spec into (key, value) rows, each setting once, with its unit.

    A footprint's radius appears once, as ``radius_m`` in metres with its unit, rather
    than as ``radius_m`` above a ``radius_unit`` that named the unit the spec was written in.
    """
    rows = flatten(spec)
    units = {k: v for k, v in rows if k.endswith("radius_unit")}
    out: list[tuple[str, Any]] = []
    for key, value in rows:
        if key.endswith("radius_unit"):
            continue
        if key.endswith("radius_m") or key.endswith("within_m"):
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                given = units.get(key[: -len("radius_m")] + "radius_unit")
                value = f"{fmt_param(value)} m" + (
                    f" (written in {given})" if given and given != "m" else ""
                )
        out.append((key, value))
    return out
