"""Design matrix of the exclusion models: columns read, categories coded, rows dropped.

Used by :func:`coverage_audit.stats.models.exclusion_models`; every row that cannot enter
the models is returned as a :class:`DroppedRow` with its reason instead of being lost.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from ._validate import numeric_values, text_values

#: A text column with more distinct values than this is not coded as categories.
MAX_LEVELS = 20


@dataclass(frozen=True)
class _Design:
    matrix: np.ndarray
    names: list[str]
    served: np.ndarray
    covered: np.ndarray
    keep: np.ndarray
    dropped: list[DroppedRow]
    references: dict[str, str]


def _is_categorical(series: pd.Series, forced: bool) -> bool:
    if forced or isinstance(series.dtype, pd.CategoricalDtype):
        return True
    if pd.api.types.is_bool_dtype(series.dtype) or pd.api.types.is_numeric_dtype(series.dtype):
        return False
    present = series.dropna()
    # A text column where nothing parses as a number is a category; one where most values
    # parse is a numeric column with a few bad entries, reported row by row.
    return bool(present.size) and pd.to_numeric(present, errors="coerce").isna().all()


def _build_design(
    table: pd.DataFrame,
    ids: np.ndarray,
    minority_column: str,
    controls: tuple[str, ...],
    categorical: set[str],
    references: Mapping[str, str],
) -> _Design:
    n = len(table)
    problems: dict[str, np.ndarray] = {}
    served, problems["served"] = numeric_values(table["served"])
    bad = np.isfinite(served) & ~np.isin(served, (0.0, 1.0))
    if bad.any():
        raise AnalysisError(
            f"served must be true/false (or 1/0); {int(bad.sum())} row(s) hold other values, "
            f"for example area {ids[np.flatnonzero(bad)[0]]}"
        )
    covered, problems["covered_fraction"] = numeric_values(table["covered_fraction"])
    _check_unit_interval(covered, "covered_fraction", ids, hint="")
    minority, problems[minority_column] = numeric_values(table[minority_column])
    _check_unit_interval(
        minority, minority_column, ids, hint=" (if it is a percent, divide it by 100)"
    )
    columns = [np.ones(n), minority / MINORITY_STEP]
    names = ["intercept", f"{minority_column}_per_10pp"]
    used_refs: dict[str, str] = {}
    for col in controls:
        series = table[col]
        if _is_categorical(series, col in categorical):
            text = text_values(series)
            present = text[text != ""]
            uniq, counts = np.unique(present.astype(str), return_counts=True)
            if uniq.size > MAX_LEVELS:
                raise AnalysisError(
                    f'control "{col}" has {uniq.size} distinct non-numeric values; a categorical '
                    f"control may have at most {MAX_LEVELS}: group the levels or give numbers"
                )
            ref = references.get(col)
            if ref is None:
                ref = str(uniq[int(np.argmax(counts))]) if uniq.size else ""
            elif ref not in uniq:
                raise AnalysisError(
                    f'reference level "{ref}" of control "{col}" does not occur; '
                    f"levels: {list(uniq)}"
                )
            used_refs[col] = ref
            problems[col] = np.where(text == "", "missing", "").astype(object)
            for level in uniq:
                if level != ref:
                    columns.append((text == level).astype(float))
                    names.append(f"{col}[{level}]")
        else:
            values, problems[col] = numeric_values(series)
            columns.append(values)
            names.append(col)
    matrix = np.column_stack(columns)
    problem_table = np.column_stack([problems[c] for c in problems])
    bad_rows = (problem_table != "").any(axis=1)
    dropped = []
    labels = list(problems)
    for r in np.flatnonzero(bad_rows):
        reason = "; ".join(
            f"{labels[j]}: {problem_table[r, j]}" for j in np.flatnonzero(problem_table[r] != "")
        )
        dropped.append(DroppedRow(id=str(ids[r]), row=int(r), reason=reason))
    return _Design(matrix, names, served, covered, ~bad_rows, dropped, used_refs)


def _check_unit_interval(values: np.ndarray, column: str, ids: np.ndarray, hint: str) -> None:
    out = np.isfinite(values) & ((values < -1e-9) | (values > 1 + 1e-9))
    if out.any():
        first = int(np.flatnonzero(out)[0])
        raise AnalysisError(
            f"{column} must be a fraction between 0 and 1; {int(out.sum())} row(s) are outside, "
            f"for example {values[first]:g} in area {ids[first]}{hint}"
        )


#: Minority share enters the models per 10 percentage points (0.10 as a fraction), so an
#: odds ratio reads "per 10-point rise in minority share" instead of "from 0 % to 100 %".
MINORITY_STEP = 0.10


@dataclass(frozen=True)
class DroppedRow:
    """A table row left out of the models, with the columns and reasons."""

    id: str
    row: int
    reason: str

    def to_dict(self) -> dict[str, Any]:
        """Return the row as JSON-safe data."""
        return {"id": self.id, "row": int(self.row), "reason": self.reason}
