"""Checks of the enclave stage's inputs (:mod:`coverage_audit.enclaves`).

Turns what :func:`~coverage_audit.enclaves.find_enclaves` and
:func:`~coverage_audit.enclaves.count_enclaves` are given into validated numpy arrays,
raising :class:`~coverage_audit.errors.AnalysisError` or
:class:`~coverage_audit.errors.SpecError` with a message that names the argument.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import shapely

from .errors import AnalysisError, SpecError
from .weights import AreaGraph

#: Name of the group whose share the Monte Carlo contrast tests; derived as population minus
#: the reference group when the counts do not include it.
MINORITY = "minority"
#: Tier given to areas whose income tier is missing (a missing figure is not "low").
UNKNOWN_TIER = "unknown"


@dataclass(frozen=True, eq=False)
class _Inputs:
    n: int
    geometries: np.ndarray
    ids: np.ndarray
    served: np.ndarray
    population: np.ndarray
    groups: dict[str, np.ndarray]
    minority: np.ndarray
    minority_given: bool
    contrast_name: str
    reference_group: str
    transparent: np.ndarray
    income_tier: np.ndarray | None


def _validate(
    geometries: Any,
    ids: Any,
    served: Any,
    population: Any,
    counts: Mapping[str, Any],
    graph: AreaGraph,
    transparent: Any,
    income_tier: Any,
    reference_group: str,
    contrast_group: str | None = None,
) -> _Inputs:
    geoms = _as_geometries(geometries)
    n = geoms.size
    ids_arr = _as_ids(ids, n)
    if not isinstance(graph, AreaGraph):
        raise AnalysisError(
            f"graph was a {type(graph).__name__}; build it with weights.build_area_graph"
        )
    if graph.n != n or tuple(ids_arr.tolist()) != graph.ids:
        raise AnalysisError(
            f"graph was built for {graph.n} areas that are not the {n} areas given "
            "(ids or order differ); rebuild it from the same geometries and ids"
        )
    served_arr = _as_mask(served, n, "served")
    pop = _as_numbers(population, n, "population")
    if not isinstance(counts, Mapping) or not counts:
        raise SpecError("counts must be a mapping of group name to counts, with at least one group")
    groups = {str(g): _as_numbers(v, n, f"counts[{g!r}]") for g, v in counts.items()}
    if reference_group not in groups:
        raise SpecError(
            f'reference_group was "{reference_group}" but is expected to be one of '
            f"{sorted(groups)} (the keys of counts)"
        )
    for g, v in groups.items():
        over = np.flatnonzero(v > pop * (1 + 1e-9) + 1e-9)
        if over.size:
            raise AnalysisError(
                f"counts[{g!r}] exceeds population in {over.size} area(s), e.g. area "
                f"{ids_arr[over[0]]}; group counts must be parts of the population"
            )
    if contrast_group is not None and contrast_group not in groups:
        raise SpecError(
            f'contrast_group was "{contrast_group}" but is expected to be one of '
            f"{sorted(groups)} (the keys of counts)"
        )
    contrast = contrast_group or (MINORITY if MINORITY in groups else None)
    minority_given = contrast is not None
    minority = groups[contrast] if contrast is not None else pop - groups[reference_group]
    if transparent is None:
        transparent_arr = np.zeros(n, dtype=bool)
    else:
        transparent_arr = _as_mask(transparent, n, "transparent")
        peopled = np.flatnonzero(transparent_arr & (pop > 0))
        if peopled.size:
            shown = ", ".join(ids_arr[peopled[:5]].tolist())
            raise AnalysisError(
                f"transparent marks {peopled.size} area(s) with population above zero "
                f"({shown}); only zero-population areas (parks, water) can be transparent"
            )
    tiers = None
    if income_tier is not None:
        raw = np.asarray(income_tier, dtype=object).ravel()
        if raw.size != n:
            raise AnalysisError(f"income_tier has {raw.size} values for {n} areas")
        missing = np.array([v is None or (isinstance(v, float) and math.isnan(v)) for v in raw])
        tiers = np.where(missing, UNKNOWN_TIER, raw.astype(str)).astype(object)
    return _Inputs(
        n=n,
        geometries=geoms,
        ids=ids_arr,
        served=served_arr,
        population=pop,
        groups=groups,
        minority=minority,
        minority_given=minority_given,
        contrast_name=contrast if contrast is not None else f"1 - {reference_group}",
        reference_group=reference_group,
        transparent=transparent_arr,
        income_tier=tiers,
    )


def _as_geometries(geometries: Any) -> np.ndarray:
    geoms = np.asarray(geometries, dtype=object).ravel()
    if geoms.size and not np.all(shapely.is_geometry(geoms)):
        bad = int(np.flatnonzero(~shapely.is_geometry(geoms))[0])
        raise AnalysisError(f"geometries[{bad}] is not a shapely geometry; pass area polygons")
    return geoms


def _as_ids(ids: Any, n: int) -> np.ndarray:
    arr = np.asarray([str(i) for i in ids], dtype=object)
    if arr.size != n:
        raise AnalysisError(f"{arr.size} ids were given for {n} geometries")
    uniq, seen = np.unique(arr.astype(str), return_counts=True)
    if np.any(seen > 1):
        raise AnalysisError(
            f'area id "{uniq[seen > 1][0]}" appears more than once; ids must be unique'
        )
    return arr


def _as_numbers(values: Any, n: int, name: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"{name} must be numbers ({exc})") from None
    if arr.size != n:
        raise AnalysisError(f"{name} has {arr.size} values for {n} areas")
    bad = np.flatnonzero(~np.isfinite(arr) | (arr < 0))
    if bad.size:
        raise AnalysisError(
            f"{name} has {bad.size} missing, infinite or negative value(s), first at "
            f"position {bad[0]}; fill or exclude those areas before the enclave stage"
        )
    return arr


def _as_mask(values: Any, n: int, name: str) -> np.ndarray:
    arr = np.asarray(values).ravel()
    if arr.size != n:
        raise AnalysisError(f"{name} has {arr.size} values for {n} areas")
    if arr.dtype != bool:
        raise AnalysisError(f"{name} must be booleans (True/False), got dtype {arr.dtype}")
    return arr


def _is_finite_number(value: Any) -> bool:
    return (
        isinstance(value, (int, float, np.integer, np.floating))
        and not isinstance(value, (bool, np.bool_))
        and math.isfinite(float(value))
    )


def _check_fraction(name: str, value: Any) -> float:
    if not _is_finite_number(value) or not 0.0 <= float(value) <= 1.0:
        raise SpecError(f"{name} was {value!r} but must be a fraction between 0 and 1")
    return float(value)


def _check_draws(mc_draws: Any, rng: Any) -> int:
    if isinstance(mc_draws, (bool, np.bool_)) or not isinstance(mc_draws, (int, np.integer)):
        raise SpecError(f"mc_draws was {mc_draws!r} but must be a whole number >= 0")
    if mc_draws < 0:
        raise SpecError(
            f"mc_draws was {mc_draws} but must be a whole number >= 0 (0 skips the test)"
        )
    if mc_draws > 0 and not isinstance(rng, np.random.Generator):
        raise SpecError(
            "rng must be a numpy.random.Generator (e.g. numpy.random.default_rng(seed)) "
            f"when mc_draws > 0; got {type(rng).__name__}"
        )
    return int(mc_draws)


def _id_ranks(ids: np.ndarray) -> np.ndarray:
    """Rank of each id in string order (ties impossible: ids are unique)."""
    order = np.argsort(ids.astype(str), kind="stable")
    ranks = np.empty(ids.size, dtype=np.int64)
    ranks[order] = np.arange(ids.size)
    return ranks
