"""Variance replicate tables: 80 replicate estimates per count, per area.

The Census Bureau publishes, for ACS detailed tables, one row per geography and table
line with the full-sample estimate and 80 replicate estimates (columns ``GEOID``,
``TBLID``, ``ORDER``, ``ESTIMATE``, ``Var_Rep1`` ... ``Var_Rep80``; layout from memory of
the published variance replicate tables). A row's count is the spec column
``{TBLID}_{ORDER:03d}E`` (for example ``B03002_004E``). A table prepared by hand may name
the spec column directly in a ``variable`` column instead of ``TBLID`` and ``ORDER``.
``GEOID`` may carry the summary-level prefix (``1400000US``). The file is only read.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..inputs import Exclusions, ids_as_text, read_table

#: Replicate estimates in an ACS variance replicate table.
REPLICATES = 80
REPLICATE_COLUMNS = tuple(f"Var_Rep{k}" for k in range(1, REPLICATES + 1))


def _variable_names(table: pd.DataFrame, path: Path) -> pd.Series:
    if "variable" in table.columns:
        return table["variable"].astype(str).str.strip()
    if "TBLID" in table.columns and "ORDER" in table.columns:
        order = pd.to_numeric(table["ORDER"], errors="coerce")
        if order.isna().any():
            row = int(np.flatnonzero(order.isna().to_numpy())[0]) + 1
            raise InputError(f"replicate table '{path}' row {row}: ORDER is not a number")
        return table["TBLID"].astype(str).str.strip() + "_" + order.astype(int).map("{:03d}".format)
    raise InputError(
        f"replicate table '{path}' has neither a variable column nor TBLID and ORDER; "
        "name each row's count (TBLID and ORDER as published, or variable = the spec column)"
    )


def read_replicates(
    path: Path,
    columns: Mapping[str, str],
    ids: Sequence[str],
    *,
    id_width: int | None,
    exclusions: Exclusions,
) -> dict[str, np.ndarray]:
    """Read replicate estimates of the counts named in ``columns`` for the areas ``ids``.

    Parameters
    ----------
    path : Path
        The replicate table (CSV or Parquet).
    columns : Mapping[str, str]
        Key (group name, or ``population``) -> spec column of the count.
    ids : sequence of str
        Analysed area ids, in order.
    id_width : int, optional
        Zero-pad ids to this width (as ``[areas] id_width``).
    exclusions : Exclusions
        Rows of the counts named whose area is not analysed are recorded here.

    Returns
    -------
    dict
        Key -> replicate counts of shape (80, len(ids)).

    Raises
    ------
    InputError
        Missing columns, non-numeric replicates, or an analysed area without a row.
    """
    table = read_table(path, id_column="GEOID", role="replicate table")
    if "GEOID" not in table.columns:
        raise InputError(
            f"replicate table '{path}' has no GEOID column; its columns are {list(table.columns)}"
        )
    absent = [c for c in REPLICATE_COLUMNS if c not in table.columns]
    if absent:
        raise InputError(
            f"replicate table '{path}' lacks column {absent[0]!r}; a replicate table holds "
            f"{REPLICATES} replicate estimates Var_Rep1 ... Var_Rep{REPLICATES}"
        )
    geoid = table["GEOID"].astype(str).str.replace(r"^.*US", "", regex=True)
    geoid = ids_as_text(geoid, width=id_width, where=f"replicate table '{path}' column GEOID")
    variable = _variable_names(table, path)
    wanted = {}
    for key, column in columns.items():
        wanted[column] = key
        wanted.setdefault(column[:-1] if column.endswith("E") else column, key)
    keys = variable.map(wanted)
    position = {i: k for k, i in enumerate(ids)}
    pos = geoid.map(position)
    used = keys.notna()
    stray = used & pos.isna()
    exclusions.add(
        "replicates",
        np.flatnonzero(stray.to_numpy()) + 1,
        geoid[stray],
        "no analysed area with this id",
    )
    values = table.loc[used, list(REPLICATE_COLUMNS)].apply(pd.to_numeric, errors="coerce")
    bad = values.isna().any(axis=1).to_numpy()
    if bad.any():
        row = int(np.flatnonzero(used.to_numpy())[np.flatnonzero(bad)[0]]) + 1
        raise InputError(
            f"replicate table '{path}' row {row}: a replicate estimate is not a number"
        )
    out: dict[str, np.ndarray] = {}
    for key in columns:
        rows = (keys == key) & pos.notna()
        arr = np.full((REPLICATES, len(ids)), np.nan)
        arr[:, pos[rows].astype(int).to_numpy()] = values.loc[rows[rows].index].to_numpy().T
        missing = np.flatnonzero(np.isnan(arr[0]))
        if missing.size:
            raise InputError(
                f"replicate table '{path}' has no row for area {ids[missing[0]]} and count "
                f"{columns[key]}; every analysed area needs replicates for each count with a margin"
            )
        out[key] = arr
    return out
