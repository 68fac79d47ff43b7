"""The ``[activity]`` table (lending or service activity by area and lender), read as is."""

from __future__ import annotations

import pandas as pd

from ..errors import InputError
from ..inputs import InputRecord, ids_as_text, read_hashed, read_table
from ..spec import AuditSpec
from .joins import MatchReport, match_ids


def read_activity(
    spec: AuditSpec, area_ids: list[str]
) -> tuple[pd.DataFrame, InputRecord, MatchReport]:
    """Read the ``[activity]`` table with text ids and report its match to the areas.

    Raises
    ------
    InputError
        When the id column is missing or too few rows match the areas.
    """
    activity = spec.activity
    assert activity is not None
    table, digest = read_hashed(
        activity.path,
        lambda: read_table(activity.path, id_column=activity.id, role="activity table"),
        role="activity table",
    )
    record = InputRecord("activity", str(activity.path), digest, len(table))
    if activity.id not in table.columns:
        raise InputError(
            f"activity table '{activity.path}' has no id column {activity.id!r}; its columns are "
            f"{list(table.columns)}"
        )
    table = table.copy()
    table[activity.id] = ids_as_text(
        table[activity.id],
        width=activity.id_width or spec.areas.id_width,
        where=f"activity table '{activity.path}'",
    )
    match = match_ids("activity table", str(activity.path), list(table[activity.id]), area_ids)
    return table, record, match
