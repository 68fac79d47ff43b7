"""Travel-cost tables: one row per origin area and service site, with a time or a distance.

Takes the ``[access] costs`` table (CSV, TSV or Parquet; columns named by ``cost_origin``,
``cost_site`` and ``cost_column``, by default ``origin``, ``site`` and ``cost``), the
analysed area ids and the site ids, and gives the matched pairs as positions into those
two lists with the cost in the catchment's base unit (metres or minutes), plus the counts
the summary reports. Rows that cannot be used (missing or negative cost, an id that
matches no analysed area or no site, a repeated pair) are listed in the exclusions under
``access_costs``; pairs absent from the table are beyond the catchment. Any routing
engine's output can be used as is; nothing is downloaded.

:func:`read_access_inputs` is the ``[access]`` section's part of the input stage: it
checks the points' site ids and capacities and reads the cost table, so that the access
stage (:func:`coverage_audit.accessibility.measure_access`) works on what was read here.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from ..errors import InputError
from ..footprint import Footprint
from ..inputs import AreaInputs, Exclusions, InputRecord, ids_as_text, read_hashed, read_table
from ..spec import AccessSpec, AuditSpec

#: Exclusions source of the cost table's rows.
COSTS_SOURCE = "access_costs"


@dataclass(frozen=True)
class CostTable:
    """Matched rows of a travel-cost table.

    Attributes
    ----------
    origin, site : numpy.ndarray
        Positions of each used row's area and site.
    cost : numpy.ndarray
        Cost in the catchment's base unit (metres or minutes).
    record : InputRecord
        The file as read, for the manifest.
    rows, excluded : int
        Rows read, rows not used.
    """

    origin: np.ndarray
    site: np.ndarray
    cost: np.ndarray
    record: InputRecord
    rows: int
    excluded: int

    def summary(self, catchment: float, n_origins: int, n_sites: int) -> dict[str, Any]:
        """Return the counts for summary.json: rows used, pairs within, beyond and missing."""
        within = int((self.cost <= catchment).sum())
        return {
            "rows": self.rows,
            "used": int(self.cost.size),
            "excluded": self.excluded,
            "pairs_within_catchment": within,
            "pairs_beyond_catchment": int(self.cost.size) - within,
            # Missing pairs are treated as beyond the catchment.
            "pairs_missing": int(n_origins) * int(n_sites) - int(self.cost.size),
            "origins_without_row": int(n_origins - np.unique(self.origin).size),
            "sites_without_row": int(n_sites - np.unique(self.site).size),
        }


def site_ids_as_text(values: pd.Series) -> np.ndarray:
    """Return site ids as text (``None`` where missing); whole numbers lose a trailing ``.0``."""
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        numbers = pd.to_numeric(values, errors="coerce")
        whole = numbers.notna() & (numbers % 1 == 0)
        text = numbers.astype("string")
        text = text.where(~whole, numbers.where(whole).astype("Int64").astype("string"))
        return text.to_numpy(dtype=object, na_value=None)
    return _stripped(values, None)


def _stripped(values: pd.Series, width: int | None) -> np.ndarray:
    """Return text ids stripped (and zero-padded to ``width``), vectorised."""
    text = values.astype("string").str.strip()
    if width is not None:
        text = text.str.zfill(width)
    text = text.mask((text == "").fillna(False))
    return text.to_numpy(dtype=object, na_value=None)


def read_costs(
    path: Path,
    *,
    origin_column: str,
    site_column: str,
    cost_column: str,
    factor: float,
    area_ids: np.ndarray,
    site_ids: np.ndarray,
    id_width: int | None,
    exclusions: Exclusions,
) -> CostTable:
    """Read a travel-cost table and match its rows to the analysed areas and the sites.

    Parameters
    ----------
    path : Path
        The table (CSV, TSV or Parquet).
    origin_column, site_column, cost_column : str
        Its columns: area id, site id, cost.
    factor : float
        Multiplier from the cost column's unit to the catchment's base unit.
    area_ids, site_ids : numpy.ndarray
        Ids (text) of the analysed areas and of the sites, in analysis order.
    id_width : int or None
        Zero-pad numeric area ids to this width (as ``[areas] id_width``).
    exclusions : Exclusions
        Unused rows are added here (source ``access_costs``).

    Returns
    -------
    CostTable

    Raises
    ------
    InputError
        A column is missing, or no row matches an analysed area and a site.
    """
    role = "[access] costs"
    table, digest = read_hashed(
        path, lambda: read_table(path, id_column=origin_column, role=role), role=role
    )
    missing = [c for c in (origin_column, site_column, cost_column) if c not in table.columns]
    if missing:
        raise InputError(
            f"{role} file '{path}' has no column {missing[0]!r}; its columns are "
            f"{list(table.columns)} (set cost_origin, cost_site and cost_column in [access])"
        )
    n = len(table)
    record = InputRecord("access_costs", str(path), digest, n)
    raw = table[origin_column]
    if pd.api.types.is_numeric_dtype(raw.dtype) and not pd.api.types.is_bool_dtype(raw.dtype):
        origins = ids_as_text(
            raw, width=id_width, where=f"{role} '{path}' column {origin_column}"
        ).to_numpy(dtype=object)
    else:
        # read_table keeps the id column as text: strip and pad without a Python loop.
        origins = _stripped(raw, id_width)
    sites = site_ids_as_text(table[site_column])
    cost = pd.to_numeric(table[cost_column], errors="coerce").to_numpy(dtype=float) * factor
    # Ids are unique on both sides (areas by load_areas, sites checked by the caller).
    o_idx = pd.Index(np.asarray(area_ids, dtype=object).astype(str)).get_indexer(origins)
    s_idx = pd.Index(np.asarray(site_ids, dtype=object).astype(str)).get_indexer(sites)
    reasons = np.full(n, "", dtype=object)
    bad_cost = ~(np.isfinite(cost) & (cost >= 0))
    reasons[bad_cost] = f"cost in column {cost_column} missing, not a number or negative"
    reasons[(reasons == "") & (s_idx < 0)] = (
        f"site id in column {site_column} matches no service point"
    )
    reasons[(reasons == "") & (o_idx < 0)] = (
        f"origin id in column {origin_column} matches no analysed area"
    )
    ok = reasons == ""
    key = o_idx.astype(np.int64) * max(len(site_ids), 1) + s_idx
    seen = pd.Series(key).where(ok).duplicated(keep="first").to_numpy() & ok
    reasons[seen] = "repeats an origin-site pair given on an earlier row"
    ok &= ~seen
    rows = np.arange(1, n + 1)
    bad = ~ok
    exclusions.add(
        COSTS_SOURCE,
        rows[bad],
        [f"{o}/{s}" for o, s in zip(origins[bad], sites[bad], strict=True)],
        list(reasons[bad]),
    )
    if not ok.any():
        raise InputError(
            f"{role} file '{path}': no row matches an analysed area and a service point "
            f"({n} rows); check that {origin_column} holds the areas' ids and {site_column} "
            "the sites' ids ([access] site_id names the points' id column)"
        )
    return CostTable(
        origin=o_idx[ok].astype(np.int64),
        site=s_idx[ok].astype(np.int64),
        cost=cost[ok],
        record=record,
        rows=n,
        excluded=int(bad.sum()),
    )


@dataclass(frozen=True, eq=False)
class AccessInputs:
    """What the ``[access]`` stage reads, read in the input stage.

    Attributes
    ----------
    points : geopandas.GeoDataFrame
        The footprint's points with a usable capacity, in file order.
    capacity : numpy.ndarray
        Their capacities.
    costs : CostTable or None
        The matched cost table (``[access] costs``), positions into ``area_ids`` and
        ``points``.
    area_ids : tuple of str
        The analysed area ids the cost table was matched to, in that order.
    exclusions : Exclusions
        Points without a usable capacity, then the cost table's unused rows.
    records : tuple of InputRecord
        The cost table as read, for the manifest.
    """

    points: gpd.GeoDataFrame
    capacity: np.ndarray
    costs: CostTable | None = None
    area_ids: tuple[str, ...] = ()
    exclusions: Exclusions = field(default_factory=Exclusions)
    records: tuple[InputRecord, ...] = ()


def read_access_inputs(
    spec: AuditSpec, inputs: AreaInputs, footprint: Footprint
) -> AccessInputs | None:
    """Check the sites of ``[access]`` and read its cost table (``None`` without ``[access]``).

    Raises
    ------
    InputError
        A named column is missing, no site is usable, two sites share an id, or the cost
        table matches nothing.
    """
    ac = spec.access
    if ac is None:
        return None
    assert footprint.points is not None
    points = footprint.points
    if ac.site_id is not None and ac.site_id not in points.columns:
        raise InputError(
            f"footprint '{footprint.name}' has no site id column {ac.site_id!r}; its columns are "
            f"{_point_columns(points)}"
        )
    left_out = Exclusions()
    capacity = _site_capacity(points, ac, footprint, left_out)
    usable = np.isfinite(capacity)
    if not usable.any():
        raise InputError(
            f"footprint '{footprint.name}': no point has a usable capacity in column "
            f"{ac.capacity!r}; capacities must be numbers >= 0"
        )
    points = points.loc[usable]
    capacity = capacity[usable]
    if ac.costs is None:
        return AccessInputs(points, capacity, exclusions=left_out)
    site_ids = _site_ids(points, ac)
    repeated = pd.Series(site_ids).duplicated()
    if repeated.any():
        raise InputError(
            f"footprint '{footprint.name}': site id {site_ids[repeated.to_numpy()][0]!r} "
            "names more than one point, so cost rows cannot be matched; give each site its "
            "own id ([access] site_id)"
        )
    area_ids = inputs.frame[inputs.id_column].astype(str).to_numpy(dtype=object)
    table = read_costs(
        ac.costs,
        origin_column=ac.cost_origin,
        site_column=ac.cost_site,
        cost_column=ac.cost_column,
        factor=ac.cost_factor,
        area_ids=area_ids,
        site_ids=site_ids,
        id_width=spec.areas.id_width,
        exclusions=left_out,
    )
    return AccessInputs(
        points, capacity, table, tuple(area_ids.tolist()), left_out, (table.record,)
    )


def _point_columns(points: gpd.GeoDataFrame) -> list[str]:
    return [c for c in points.columns if c not in ("geometry", "radius_m", "source_row")]


def _site_capacity(
    points: gpd.GeoDataFrame, ac: AccessSpec, footprint: Footprint, exclusions: Exclusions
) -> np.ndarray:
    """Return each point's capacity; unusable ones are NaN and listed in ``exclusions``."""
    if ac.capacity is None:
        return np.ones(len(points))
    if ac.capacity not in points.columns:
        path = footprint.records[0].path if footprint.records else footprint.name
        raise InputError(
            f"footprint '{footprint.name}' file '{path}' has no capacity column "
            f"{ac.capacity!r}; its columns are {_point_columns(points)} "
            "(set [access] capacity to one of them, or leave it out for 1 each)"
        )
    raw = pd.to_numeric(points[ac.capacity], errors="coerce").to_numpy(dtype=float)
    bad = ~(np.isfinite(raw) & (raw >= 0))
    exclusions.add(
        f"footprint:{footprint.name}",
        points["source_row"].to_numpy()[bad],
        _site_ids(points, ac)[bad],
        f"capacity in column {ac.capacity} missing, not a number or negative (left out of access)",
    )
    return np.where(bad, np.nan, raw)


def _site_ids(points: gpd.GeoDataFrame, ac: AccessSpec) -> np.ndarray:
    if ac.site_id is None:
        return np.array([str(int(r)) for r in points["source_row"]], dtype=object)
    return site_ids_as_text(points[ac.site_id])
