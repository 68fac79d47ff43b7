"""The number format of each summary field the report's generic tables show.

The key/value tables (:func:`~coverage_audit.report.markup.kv_table`: spatial weights,
join count settings, bivariate Moran; the enclave settings' lists) format a number by
what the field holds, looked up here, not guessed from the shape of its name. A field
missing from :data:`FIELD_FORMATS` falls back to the older reading of its name
(:func:`kind_by_name`), so a new summary key still prints sensibly; add it here when it
lands in a generic table. Tables with columns of their own (Moran's I, join counts, the
group tables) name a formatter per column beside the column.

Only numbers written as floats are looked up: ``None``, flags, whole numbers (``int``),
text, lists and mappings are formatted by their type (lists and mappings item by item).
"""

from __future__ import annotations

from collections.abc import Mapping
from types import MappingProxyType
from typing import Literal

#: What a number holds, which decides how it prints:
#: ``count`` and ``measure`` print as whole numbers with thousands separators when whole,
#: else with 4 decimals; ``statistic``, ``share`` and ``ratio`` always with 4 decimals;
#: ``z`` with 2; ``p_value`` as p-values print everywhere in the report.
FormatKind = Literal["count", "measure", "statistic", "share", "ratio", "z", "p_value"]

#: Summary field -> the kind of number it holds (the generic tables' fields).
FIELD_FORMATS: Mapping[str, FormatKind] = MappingProxyType(
    {
        # weights (WeightsSummary / AreaGraph.to_dict)
        "areas": "count",
        "links": "count",
        "knn_k": "count",
        "components": "count",
        "largest_component_areas": "count",
        "other_components": "count",
        "areas_in_statistics": "count",
        "edge_tolerance_m": "measure",
        # bivariate Moran and the other Moran figures shown by name
        "I": "statistic",
        "EI": "statistic",
        "expected": "statistic",
        "expected_sim": "statistic",
        "variance_rand": "statistic",
        "z": "z",
        "z_sim": "z",
        "z_rand": "z",
        "z_norm": "z",
        "p": "p_value",
        "p_sim": "p_value",
        "p_rand": "p_value",
        "p_norm": "p_value",
        "p_rand_two_sided": "p_value",
        "p_norm_two_sided": "p_value",
        "n": "count",
        "permutations": "count",
        "areas_left_out": "count",
        "areas_without_neighbour_left_out": "count",
        # join count settings (the figures beside the per-kind table)
        "joins": "count",
        "served_areas": "count",
        # enclave settings
        "min_surround": "share",
        "min_population": "count",
        "mc_draws": "count",
        "unserved_components": "count",
    }
)

_STATISTIC_PREFIXES = ("z_", "p_", "expected", "variance", "mean", "share", "ratio")
_STATISTIC_KEYS = frozenset({"I", "EI", "z", "p"})


def kind_by_name(key: str) -> FormatKind:
    """Return the kind a field not in :data:`FIELD_FORMATS` is read as, from its name.

    The report's earlier rule, kept as the fallback: ``p_*``, ``*_p`` and ``p`` are
    p-values; ``z_*`` and ``z`` z-scores; ``I``, ``EI`` and names starting with
    ``expected``, ``variance``, ``mean``, ``share`` or ``ratio`` statistics; anything
    else a measure (printed whole when whole).
    """
    if key.startswith("p_") or key.endswith("_p") or key == "p":
        return "p_value"
    if key.startswith("z_") or key == "z":
        return "z"
    if key in _STATISTIC_KEYS or key.startswith(_STATISTIC_PREFIXES):
        return "statistic"
    return "measure"


def field_format(key: str) -> FormatKind:
    """Return the kind of number a summary field holds (:data:`FIELD_FORMATS`, else by name)."""
    return FIELD_FORMATS.get(key) or kind_by_name(key)
