"""Demographics tables joined to the areas on the id: one or several, in any layout.

Takes the areas' attribute frame and the tables named in the spec (``[areas] table`` and
every ``[[table]]``); reads each with :func:`coverage_audit.io.census.read_census_table`,
records rows without an id, duplicated ids and ids of no area in the exclusions, reports
each table's match rate (:func:`coverage_audit.io.joins.match_ids`) and joins the columns.
A column present in two tables is an error naming both (the id and ``NAME`` excepted).
Margin columns (``_M``) are made numbers (``*****`` is 0); other estimate columns of a
download that are not counts are made numbers with annotations as missing.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import InputError
from .census import TableRead, parse_margins, read_census_table
from .checks import read_hashed
from .joins import MatchReport, match_ids

if TYPE_CHECKING:
    from ..inputs import Exclusions

#: Columns every Census download repeats; kept from the first table only.
_SHARED = ("NAME", "GEO_ID", "GEOID", "state", "county", "tract", "block group")


@dataclass
class JoinedTables:
    """The areas' frame with every table's columns, and what was learnt on the way."""

    frame: pd.DataFrame
    #: Mask of areas with no row in a table, with the reason, per table.
    missing: list[tuple[np.ndarray, str]] = field(default_factory=list)
    reports: list[MatchReport] = field(default_factory=list)
    reads: list[tuple[Path, TableRead]] = field(default_factory=list)
    margins: dict[str, str] = field(default_factory=dict)
    #: Input record data: (path, rows).
    rows: list[tuple[Path, int]] = field(default_factory=list)
    #: SHA-256 of the bytes each table was read from (hashed before and after reading).
    digests: dict[Path, str] = field(default_factory=dict)


def join_tables(
    frame: pd.DataFrame,
    *,
    id_column: str,
    keep: np.ndarray,
    tables: list[tuple[Path, str | None]],
    id_width: int | None,
    exclusions: Exclusions,
    ids_as_text: Callable[..., Any],
) -> JoinedTables:
    """Join every table to ``frame`` on ``id_column``.

    Parameters
    ----------
    frame : pandas.DataFrame
        The areas' attributes with their text ids and ``_row``.
    id_column : str
        The areas' id column.
    keep : numpy.ndarray
        Areas still analysed (the rate of areas with a row is measured over these).
    tables : list of (Path, str or None)
        Each table's path and id column (None to detect).
    id_width : int, optional
        Zero-pad ids to this width.
    exclusions : Exclusions
        Where table rows not used are recorded.
    ids_as_text : callable
        The shared id normaliser of :mod:`coverage_audit.inputs`.

    Returns
    -------
    JoinedTables
    """
    out = JoinedTables(frame)
    area_ids = frame[id_column]
    kept_ids = set(area_ids[keep].dropna())
    all_ids = set(area_ids.dropna())
    owner: dict[str, Path] = {c: Path("areas") for c in frame.columns}
    several = len(tables) > 1
    for path, id_given in tables:
        source = f"table:{path.name}" if several else "table"
        read, out.digests[path] = read_hashed(
            path,
            lambda path=path, id_given=id_given: read_census_table(  # type: ignore[misc]
                path, id_column=id_given, role="demographics table", prefer=id_column
            ),
            role="demographics table",
        )
        table = read.frame  # freshly read: ours to change
        tid = read.id_column
        out.reads.append((path, read))
        out.rows.append((path, len(table)))
        table["_trow"] = np.arange(1, len(table) + 1)
        table[tid] = ids_as_text(
            table[tid], width=id_width, where=f"demographics table '{path}' column {tid}"
        )
        good = table[tid].notna().to_numpy().copy()
        add = exclusions.add
        add(source, table.loc[~good, "_trow"], table.loc[~good, tid], "missing id")
        counts = table.loc[good, tid].value_counts()
        dup = good & (table[tid].map(counts).fillna(0).to_numpy() > 1)
        add(
            source,
            table.loc[dup, "_trow"],
            table.loc[dup, tid],
            [
                f"duplicate id: appears {int(counts[v])} times in the table"
                for v in table.loc[dup, tid]
            ],
        )
        good &= ~dup
        ids_list = [v if ok else None for v, ok in zip(table[tid], good, strict=True)]
        found = set(table.loc[good, tid])
        areas_share = len(kept_ids & found) / len(kept_ids) if kept_ids else 0.0
        out.reports.append(
            match_ids(
                "demographics table",
                str(path),
                ids_list,
                all_ids,
                layout=read.layout + (f", {read.level} level" if read.level else ""),
                matched_share=areas_share,
                what="the areas",
            )
        )
        only_table = good & ~table[tid].isin(kept_ids).to_numpy()
        add(
            source,
            table.loc[only_table, "_trow"],
            table.loc[only_table, tid],
            [
                "no area with this id in the areas file"
                if v not in all_ids
                else "its area was excluded (see the areas rows)"
                for v in table.loc[only_table, tid]
            ],
        )
        good &= ~only_table
        for estimate, margin in read.margins.items():
            out.margins[estimate] = margin
            table[margin] = parse_margins(table[margin])
        rows = table.loc[good].set_index(tid)
        rows = rows.drop(columns=[c for c in _SHARED if c in rows.columns and c in owner])
        for column in rows.columns:
            if column == "_trow":
                continue
            if column in owner and owner[column] != Path("areas"):
                raise InputError(
                    f"column {column!r} is in two demographics tables, '{owner[column]}' and "
                    f"'{path}'; keep it in one of them"
                )
        overlap = [c for c in rows.columns if c in owner and owner[c] == Path("areas")]
        # Columns in both the areas and a table: the table's values are the demographics.
        frame = frame.rename(columns={c: f"{c}_areas" for c in overlap if c != "_trow"})
        for column in rows.columns:
            owner[column] = path
        joined = frame.join(rows, on=id_column)
        out.missing.append(
            (
                joined["_trow"].isna().to_numpy(),
                f"no row with this id in the demographics table '{path.name}'",
            )
        )
        frame = joined.drop(columns=["_trow"])
        owner.pop("_trow", None)
    out.frame = frame
    return out


def numeric_estimates(
    frame: pd.DataFrame, reads: list[tuple[Path, TableRead]], used: set[str]
) -> None:
    """Make the download estimate columns not used as counts numbers (annotations missing)."""
    for _, read in reads:
        if "Census" not in read.layout:
            continue
        for column in read.frame.columns:
            if column in used or column not in frame.columns or column == read.id_column:
                continue
            if (
                isinstance(column, str)
                and column[-1:] == "E"
                and column[-5:-1].lstrip("_").isdigit()
            ):
                frame[column] = pd.to_numeric(frame[column], errors="coerce")
