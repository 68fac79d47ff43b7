"""Input checks shared by the statistics modules, each with the message its callers promise.

Pure functions on arrays and tables: each returns the checked values or raises
:class:`~coverage_audit.errors.AnalysisError` (bad data) or
:class:`~coverage_audit.errors.SpecError` (bad option) naming the argument, the column or
the position and what to do. Nothing here reads files or keeps state.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

from ..errors import AnalysisError


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
