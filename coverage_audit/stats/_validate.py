"""Input checks shared by the statistics modules, each with the message its callers promise.

Pure functions on arrays and tables: each returns the checked values or raises
:class:`~coverage_audit.errors.AnalysisError` (bad data) or
:class:`~coverage_audit.errors.SpecError` (bad option) naming the argument, the column or
the position and what to do. Nothing here reads files or keeps state.
"""

from __future__ import annotations

import numbers
import warnings
from collections.abc import Iterable
from typing import Any

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


def check_draws(permutations: Any, rng: Any) -> None:
    if isinstance(permutations, bool) or not isinstance(permutations, numbers.Integral):
        raise SpecError(f"permutations was {permutations!r} but must be a whole number")
    if int(permutations) < 0:
        raise SpecError(f"permutations was {permutations} but must be 0 or more")
    if int(permutations) > 0 and not isinstance(rng, np.random.Generator):
        raise SpecError(
            f"rng was {type(rng).__name__} but permutations need a numpy.random.Generator; "
            "pass rng=numpy.random.default_rng(seed)"
        )



def check_alpha(alpha: Any) -> None:
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
