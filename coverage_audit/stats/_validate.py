"""Input checks shared by the statistics modules, each with the message its callers promise.

Pure functions on arrays and tables: each returns the checked values or raises
:class:`~coverage_audit.errors.AnalysisError` (bad data) or
:class:`~coverage_audit.errors.SpecError` (bad option) naming the argument, the column or
the position and what to do. Nothing here reads files or keeps state.
"""

from __future__ import annotations

import numbers
import warnings
from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ..errors import AnalysisError, DegenerateStatisticWarning, SpecError


def check_columns(table: pd.DataFrame, columns: Iterable[str], id_column: str | None) -> None:
    wanted = list(columns) + ([id_column] if id_column is not None else [])
    missing = [c for c in wanted if c not in table.columns]
    if missing:
        raise AnalysisError(
            f"column(s) {missing} are not in the area table; available columns: {column_names(table)}"
        )


def column_names(table: pd.DataFrame) -> list[str]:
    return [str(c) for c in table.columns]


def area_ids(table: pd.DataFrame, id_column: str | None) -> np.ndarray:
    source = table.index if id_column is None else table[id_column]
    return np.asarray(source.astype(str), dtype=object)


def numeric_values(series: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Return float values and a per-row problem text ('' where the value is usable)."""
    if pd.api.types.is_bool_dtype(series.dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
    else:
        values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    missing = series.isna().to_numpy()
    reasons = np.full(values.size, "", dtype=object)
    reasons[~np.isfinite(values)] = "not a number"
    reasons[np.isinf(values)] = "not finite"
    reasons[missing] = "missing"
    return values, reasons


def text_values(series: pd.Series) -> np.ndarray:
    """Return the values as text, with '' where missing."""
    text = series.astype(str).to_numpy(dtype=object)
    text[series.isna().to_numpy()] = ""
    return text


def check_draws(permutations: object, rng: object) -> None:
    if isinstance(permutations, bool) or not isinstance(permutations, numbers.Integral):
        raise SpecError(f"permutations was {permutations!r} but must be a whole number")
    if int(permutations) < 0:
        raise SpecError(f"permutations was {permutations} but must be 0 or more")
    if int(permutations) > 0 and not isinstance(rng, np.random.Generator):
        raise SpecError(
            f"rng was {type(rng).__name__} but permutations need a numpy.random.Generator; "
            "pass rng=numpy.random.default_rng(seed)"
        )


def check_alpha(alpha: object) -> None:
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not 0 < float(alpha) < 1:
        raise SpecError(f"alpha was {alpha!r} but must be a number strictly between 0 and 1")


def aligned_floats(values: ArrayLike, n: int, name: str) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"{name} must be numeric ({exc})") from None
    if arr.ndim != 1 or arr.size != n:
        raise AnalysisError(f"{name} has shape {arr.shape} but one value per area ({n}) is needed")
    return arr


def aligned_flags(values: ArrayLike, n: int, name: str) -> np.ndarray:
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.size != n:
        raise AnalysisError(f"{name} has shape {arr.shape} but one flag per area ({n}) is needed")
    if arr.dtype == bool:
        return arr
    try:
        num = arr.astype(np.float64)
    except (TypeError, ValueError):
        raise AnalysisError(f"{name} must be true/false (or 0/1)") from None
    bad = np.flatnonzero((num != 0) & (num != 1))
    if bad.size:
        raise AnalysisError(
            f"{name} must be true/false (or 0/1); position {int(bad[0])} is {arr[bad[0]]!r}"
        )
    return num == 1


def warn_degenerate(message: str) -> None:
    warnings.warn(message, DegenerateStatisticWarning, stacklevel=3)


#: Covered fractions this far outside [0, 1] are taken as rounding from the overlay and
#: clipped; anything further out is an error.
FRACTION_TOLERANCE = 1e-9


def as_counts(values: ArrayLike, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D float array of finite, non-negative counts."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            f"{name} must hold numeric population counts, one per area; "
            f"it could not be read as numbers ({exc})"
        ) from exc
    if arr.ndim != 1:
        raise AnalysisError(
            f"{name} must be a 1-D array with one count per area; got shape {arr.shape}"
        )
    if arr.size == 0:
        raise AnalysisError(f"{name} is empty: there are no areas to analyse")
    bad = ~np.isfinite(arr)
    if bad.any():
        i = int(np.argmax(bad))
        raise AnalysisError(
            f"{name} has a missing or infinite value ({arr[i]}) at position {i}; "
            "fill it or exclude that area before the analysis"
        )
    negative = arr < 0
    if negative.any():
        i = int(np.argmax(negative))
        raise AnalysisError(
            f"{name} has a negative count ({arr[i]:g}) at position {i}; "
            "population counts must be zero or more"
        )
    return arr


def same_length(arrays: Mapping[str, np.ndarray]) -> int:
    lengths = {name: a.shape[0] for name, a in arrays.items()}
    if len(set(lengths.values())) > 1:
        listed = ", ".join(f"{name}: {n}" for name, n in lengths.items())
        raise AnalysisError(
            f"the arrays must have one value per analysed area, in the same order; "
            f"their lengths differ ({listed})"
        )
    return next(iter(lengths.values()))


def within_total(x: np.ndarray, t: np.ndarray, name: str, total_name: str) -> None:
    over = x > t
    if over.any():
        i = int(np.argmax(over))
        raise AnalysisError(
            f"{name} exceeds {total_name} at position {i} ({x[i]:g} > {t[i]:g}); "
            "a group count cannot be larger than the total population of its area"
        )


def as_served(served: ArrayLike, name: str = "served") -> np.ndarray:
    """Return ``served`` as a 1-D bool array; accepts booleans or the numbers 0 and 1."""
    arr = np.asarray(served)
    if arr.ndim != 1:
        raise AnalysisError(
            f"{name} must be a 1-D array with one true/false value per area; got shape {arr.shape}"
        )
    if arr.dtype == np.bool_:
        return arr
    try:
        numeric = arr.astype(np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            f"{name} must hold true/false (or 1/0) per area; it could not be read ({exc})"
        ) from exc
    bad = ~np.isin(numeric, (0.0, 1.0))
    if bad.any():
        i = int(np.argmax(bad))
        raise AnalysisError(
            f"{name} must hold true/false (or 1/0) per area; position {i} has {arr[i].item()!r}"
        )
    return numeric == 1.0


def as_fractions(covered_fraction: ArrayLike, name: str = "covered_fraction") -> np.ndarray:
    """Return covered fractions in [0, 1], clipping overlay rounding of the tolerance."""
    try:
        arr = np.asarray(covered_fraction, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            f"{name} must hold numbers between 0 and 1, one per area ({exc})"
        ) from exc
    if arr.ndim != 1:
        raise AnalysisError(
            f"{name} must be a 1-D array with one fraction per area; got shape {arr.shape}"
        )
    bad = ~np.isfinite(arr) | (arr < -FRACTION_TOLERANCE) | (arr > 1 + FRACTION_TOLERANCE)
    if bad.any():
        i = int(np.argmax(bad))
        raise AnalysisError(f"{name} must lie between 0 and 1; position {i} has {arr[i]}")
    return np.clip(arr, 0.0, 1.0)


def check_permutation_count(permutations: object) -> int:
    if (
        isinstance(permutations, bool)
        or not isinstance(permutations, numbers.Integral)
        or permutations < 1
    ):
        raise SpecError(
            f"permutations must be a whole number of at least 1 (for example 999); "
            f"got {permutations!r}"
        )
    return int(permutations)


def check_generator(rng: object) -> np.random.Generator:
    if not isinstance(rng, np.random.Generator):
        raise SpecError(
            "rng must be a numpy.random.Generator, for example "
            f"numpy.random.default_rng(seed); got {type(rng).__name__}"
        )
    return rng
