"""The map's per-area fields: scaled fractions, codes of flags and categories, shares.

The page carries integers (fractions in 1/10000, shares in 1/1000) and small category
codes rather than floats and strings, so that 85,000 areas fit the size budget; missing
values are ``null``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError, SpecError
from .map_style import (
    FOOTPRINT_KINDS,
)

# --------------------------------------------------------------------------- fields


def _nullable(values: np.ndarray, valid: np.ndarray) -> list[Any]:
    out = values.astype(object)
    out[~valid] = None
    return out.tolist()


def _scaled_fraction(series: pd.Series, scale: int, name: str) -> list[Any]:
    """Return fractions as integers in ``1/scale`` (None where missing).

    Values are truncated, but never to 0 for a positive value nor to ``scale`` for a value
    below 1, so the page's classes (0%, 100%) match the exact figures.
    """
    values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
    valid = np.isfinite(values)
    if (values[valid] < -1e-9).any() or (values[valid] > 1 + 1e-9).any():
        raise InputError(
            f"column '{name}' holds values outside 0..1; shares and covered fractions must "
            "be fractions, not percentages"
        )
    clipped = np.clip(np.where(valid, values, 0.0), 0.0, 1.0)
    q = np.floor(clipped * scale + 1e-9).astype(np.int64)
    q = np.where((clipped > 0) & (q == 0), 1, q)
    q = np.where((clipped < 1) & (q >= scale), scale - 1, q)
    return _nullable(q, valid)


def _bool_codes(series: pd.Series) -> tuple[list[Any], bool]:
    """Booleans (possibly with missing values) as 0/1/None; also whether any is missing."""
    missing = series.isna().to_numpy()
    values = np.where(missing, False, series.fillna(False).astype(bool).to_numpy())
    return _nullable(values.astype(np.int64), ~missing), bool(missing.any())


def _category_codes(
    series: pd.Series, allowed: Sequence[str], column: str
) -> tuple[list[Any], bool]:
    """Category strings as indices into ``allowed`` (None stays None)."""
    missing = series.isna().to_numpy()
    text = series.astype(object).where(~series.isna(), None).astype("string")
    bad = (~text.isin(list(allowed))).to_numpy() & ~missing
    if not bad.any():
        codes = pd.Categorical(text, categories=list(allowed)).codes.astype(np.int64)
    else:
        found = sorted(set(text[bad].tolist()))[:5]
        raise InputError(
            f"column '{column}' holds {found} which the map does not know; allowed values "
            f"are {list(allowed)} (or empty)"
        )
    return _nullable(codes.astype(np.int64), ~missing), bool(missing.any())


def _share_series(areas: pd.DataFrame, group: str) -> pd.Series:
    share_col = f"{group}_share"
    if share_col in areas.columns:
        return areas[share_col]
    if group in areas.columns and "population" in areas.columns:
        pop = pd.to_numeric(areas["population"], errors="coerce")
        counts = pd.to_numeric(areas[group], errors="coerce")
        return (counts / pop.where(pop > 0)).astype(float)
    raise InputError(
        f"group '{group}' has neither a '{share_col}' column nor '{group}' and 'population' "
        "count columns in the areas; add the share column or drop the group from the list"
    )


def _check_footprint(footprint: Mapping[str, Any] | None) -> None:
    if footprint is None:
        return
    if not isinstance(footprint, Mapping):
        raise InputError(
            f"footprint must be a dict with 'kind', 'name' and 'geometry', got "
            f"{type(footprint).__name__}"
        )
    kind = footprint.get("kind")
    if kind not in FOOTPRINT_KINDS:
        raise SpecError(
            f"footprint kind was {kind!r} but is expected to be one of {list(FOOTPRINT_KINDS)}"
        )
    if kind == "points" and footprint.get("points") is None:
        raise InputError(
            "footprint of kind 'points' has no 'points' GeoDataFrame of service points; "
            "pass the points so the map can draw them"
        )
    radius = footprint.get("radius_m")
    if radius is not None and not (isinstance(radius, (int, float)) and radius >= 0):
        raise SpecError(f"footprint radius_m was {radius!r} but must be a number >= 0 (metres)")
