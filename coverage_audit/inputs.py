"""Inputs: read the areas layer and demographics table, validate, repair, project.

Takes the ``[areas]`` and ``[population]`` parts of a spec and gives :class:`AreaInputs`:
the analysed areas as a GeoDataFrame in the equal-area analysis CRS, with string ids,
numeric group counts, shares, income tiers and the input row each came from; the
:class:`Exclusions` (every input row not analysed, with its reason); and a record of each
input file read (path, SHA-256, rows, CRS). Files are only ever read.

Row numbers in exclusions are 1-based data rows: row 1 is the first feature of a layer or
the first line after the header of a CSV file.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from .errors import IdWarning, InputError, MarginWarning, RepairWarning
from .geographic import unwrap_longitudes
from .io.areas import (  # re-exported: other modules import them from here
    PARQUET_SUFFIXES as PARQUET_SUFFIXES,
)
from .io.areas import choose_analysis_crs as choose_analysis_crs
from .io.areas import crs_text as crs_text
from .io.areas import kept_geometries as kept_geometries
from .io.areas import polygonal as polygonal
from .io.areas import project_geometries, require_file
from .io.areas import read_layer as read_layer
from .io.areas import repair as repair
from .io.areas import resolve_crs as resolve_crs
from .io.boundaries import describe_layout, detect_id_column, strip_prefix, water_only
from .io.census import annotation_reasons
from .io.checks import (
    check_sums,
    finite_coordinates_with,
    hint_float_ids,
    read_hashed_later,
)
from .io.checks import finite_coordinates as finite_coordinates  # re-exported
from .io.checks import read_hashed as read_hashed  # re-exported
from .io.checks import sha256_file as sha256_file  # re-exported: readers import it from here
from .io.joins import MatchReport
from .io.tables import join_tables, numeric_estimates
from .spec import AreasSpec, PopulationSpec, TableSpec

TABLE_SUFFIXES = (".csv", ".txt", ".tsv") + PARQUET_SUFFIXES
INCOME_TIERS = ("low", "moderate", "middle", "upper", "unknown")


@dataclass(frozen=True)
class InputRecord:
    """One input file as read: for the manifest."""

    role: str
    path: str
    sha256: str
    rows: int
    crs: str | None = None
    layer: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain data for the manifest."""
        return {
            "role": self.role,
            "path": self.path,
            "sha256": self.sha256,
            "rows": self.rows,
            "crs": self.crs,
            "layer": self.layer,
        }


@dataclass
class Exclusions:
    """Rows left out of an analysis, each with its source file, row, id and reason."""

    records: list[dict[str, Any]] = field(default_factory=list)

    def add(
        self, source: str, rows: Iterable[Any], ids: Iterable[Any], reason: str | Iterable[str]
    ) -> None:
        """Record rows; ``reason`` is one string for all or one per row."""
        rows_l = list(rows)
        ids_l = list(ids)
        reasons = [reason] * len(rows_l) if isinstance(reason, str) else list(reason)
        for r, i, why in zip(rows_l, ids_l, reasons, strict=True):
            self.records.append(
                {
                    "source": source,
                    "row": None if r is None else int(r),
                    "id": None if i is None or (isinstance(i, float) and np.isnan(i)) else str(i),
                    "reason": why,
                }
            )

    def count(self, source: str | None = None) -> int:
        """Return the number of records, optionally of one source."""
        return sum(1 for r in self.records if source is None or r["source"] == source)

    def to_frame(self) -> pd.DataFrame:
        """Return the records as a table with columns source, row, id, reason."""
        frame = pd.DataFrame(self.records, columns=["source", "row", "id", "reason"])
        frame["row"] = frame["row"].astype("Int64")
        return frame

    def by_reason(self) -> dict[str, int]:
        """Return counts by a short form of the reason (the text before any colon)."""
        out: dict[str, int] = {}
        for r in self.records:
            key = f"{r['source']}: {str(r['reason']).split(':')[0]}"
            out[key] = out.get(key, 0) + 1
        return dict(sorted(out.items()))


@dataclass
class AreaInputs:
    """The analysed areas and everything learnt while reading them."""

    frame: gpd.GeoDataFrame
    id_column: str
    groups: list[str]
    reference: str
    input_rows: int
    exclusions: Exclusions
    inputs: list[InputRecord]
    analysis_crs: CRS
    repaired: int
    income_unknown: int
    source_crs: CRS
    #: The population spec as resolved: margins paired from downloads filled in.
    population: PopulationSpec | None = None
    #: Match report of every table joined on the id.
    matches: list[MatchReport] = field(default_factory=list)
    #: Detected layout of the areas file.
    layout: str | None = None
    #: Ids of water-only areas (``ALAND = 0``), kept in the analysis and listed.
    water_only: list[str] = field(default_factory=list)
    #: Every estimate column of the tables with its margin column (``X_E`` -> ``X_M``); the
    #: margins are numbers in ``frame`` (``*****`` read as 0, other annotations missing).
    margins: dict[str, str] = field(default_factory=dict)
    #: Group name (and "population" for the total) -> per-area margin column of ``frame``.
    margin_columns: dict[str, str] = field(default_factory=dict)
    #: Margin cells that were blank or annotated without a number, by margin column.
    margins_missing: dict[str, int] = field(default_factory=dict)


def read_table(path: Path, *, id_column: str, role: str) -> pd.DataFrame:
    """Read a CSV or Parquet table keeping ``id_column`` as text (leading zeros kept)."""
    require_file(path, role)
    suffix = path.suffix.lower()
    try:
        if suffix in PARQUET_SUFFIXES:
            table = pd.read_parquet(path)
        else:
            sep = "\t" if suffix == ".tsv" else ","
            table = pd.read_csv(path, sep=sep, dtype={id_column: str}, keep_default_na=True)
    except Exception as exc:
        raise InputError(f"{role} file '{path}' could not be read as a table ({exc})") from None
    if "geometry" in table.columns and isinstance(table, gpd.GeoDataFrame):
        table = pd.DataFrame(table.drop(columns="geometry"))
    return table


def ids_as_text(values: pd.Series, *, width: int | None, where: str) -> pd.Series:
    """Return ids as strings; numbers become integers' text, zero-padded to ``width``.

    Census GEOIDs must be strings (states 01-09 start with a zero). When ids arrive as
    numbers the zeros are already gone; ``width`` (11 for tracts, 12 for block groups)
    restores them, and without it an :class:`IdWarning` says so.
    """
    series = values.copy()
    missing = series.isna()
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(series.dtype):
        numbers = pd.to_numeric(series, errors="coerce")
        integral = numbers.dropna()
        if (integral % 1 != 0).any():
            raise InputError(
                f"{where}: ids must be whole numbers or text, found {integral[integral % 1 != 0].iloc[0]}"
            )
        text = numbers.map(lambda v: None if pd.isna(v) else str(int(v)))
        if width is None:
            warnings.warn(
                f"{where}: ids are stored as numbers, so leading zeros may be lost "
                "(GEOIDs of states 01-09); set id_width (11 for tracts, 12 for block groups) "
                "to restore them",
                IdWarning,
                stacklevel=2,
            )
        series = text
    else:
        series = series.map(
            lambda v: (
                None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip()
            )
        )
        hint_float_ids(series, where)
    if width is not None:
        series = series.map(lambda v: v if v is None else v.zfill(width))
    series = series.where(~missing, None)
    series = series.map(lambda v: None if v == "" else v)
    return series.astype(object)


def income_tier(ratio: np.ndarray | pd.Series) -> np.ndarray:
    """Return the income tier of each tract income ratio.

    The ratio is tract median family income as a percent of the area median. Tiers per
    the CRA rule's definition of income level, 12 CFR 228.12(m) (paragraph letter from
    memory): low < 50; moderate >= 50 and < 80; middle >= 80 and < 120; upper >= 120.
    A missing ratio is "unknown", never low.
    """
    r = np.asarray(pd.to_numeric(pd.Series(ratio), errors="coerce"), dtype=float)
    tiers = np.full(r.size, "unknown", dtype=object)
    ok = np.isfinite(r)
    tiers[ok & (r < 50)] = "low"
    tiers[ok & (r >= 50) & (r < 80)] = "moderate"
    tiers[ok & (r >= 80) & (r < 120)] = "middle"
    tiers[ok & (r >= 120)] = "upper"
    return tiers


def _numeric_problem(raw: pd.Series) -> tuple[pd.Series, pd.Series]:
    """Return numbers and a per-row problem text ('' where fine).

    Census annotation values (``-``, ``N``, ``(X)``, ``250,000+``, API sentinels ...) are
    never read as numbers: each gets its meaning as the problem.
    """
    numbers = pd.to_numeric(raw, errors="coerce")
    if pd.api.types.is_bool_dtype(raw.dtype):
        numbers = numbers.astype(float)
    notes = annotation_reasons(raw, numbers)
    noted = notes.notna().to_numpy()
    if noted.any():
        numbers = numbers.astype(float).mask(noted)
    if pd.api.types.is_numeric_dtype(raw.dtype):
        missing = raw.isna().to_numpy()  # numbers: no blank text to look for
    else:
        missing = (raw.isna() | (raw.astype(str).str.strip() == "")).to_numpy()
    flags = np.full(len(raw), "", dtype=object)
    flags[missing & ~noted] = "missing"
    flags[numbers.isna().to_numpy() & ~missing & ~noted] = "not a number"
    flags[noted] = notes.to_numpy()[noted]
    values = numbers.to_numpy(dtype=float, na_value=np.nan)
    with np.errstate(invalid="ignore"):
        flags[np.isinf(values)] = "not a finite number"
        flags[(values < 0) & (flags == "")] = "negative"
    problem = pd.Series(flags, index=raw.index, dtype=object)
    return numbers.astype(float), problem


def _pair_margins(
    pop_spec: PopulationSpec, margins: dict[str, str], frame: pd.DataFrame
) -> PopulationSpec:
    """Fill each group's and the total's margin column from a download's ``_E``/``_M`` pairs.

    Margins named by the convention (``X_E`` -> ``X_M``, as the preset does) but absent
    from the tables are dropped; a margin the spec names explicitly must exist.
    """
    moes = dict(pop_spec.moes)
    for name, column in pop_spec.groups:
        if name not in moes and column in margins:
            moes[name] = margins[column]
    for name, moe in list(moes.items()):
        if moe not in frame.columns:
            if moe == pop_spec.group_columns[name][:-1] + "M":
                del moes[name]
            else:
                raise InputError(
                    f"margin column {moe!r} of group {name!r} is in no demographics table; "
                    "name an existing column or remove moe"
                )
    total_moe = pop_spec.total_moe
    if total_moe is None and pop_spec.total in margins:
        total_moe = margins[pop_spec.total]
    if total_moe is not None and total_moe not in frame.columns:
        if total_moe == pop_spec.total[:-1] + "M":
            total_moe = None
        else:
            raise InputError(
                f"total_moe column {total_moe!r} is in no demographics table; name an existing "
                "column or remove total_moe"
            )
    return replace(
        pop_spec,
        moes=tuple((n, moes[n]) for n, _ in pop_spec.groups if n in moes),
        total_moe=total_moe,
    )


#: Census Bureau annotation of a controlled estimate: the margin is not applicable, i.e. 0.
CONTROLLED_MARGIN = "*****"
#: Census API sentinel of a controlled estimate's margin (annotation value, treat as 0).
CONTROLLED_SENTINEL = -555555555.0


def margin_numbers(raw: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Return margins of error as numbers and a mask of cells without a usable margin.

    Cells may carry the Census Bureau's annotations instead of numbers: ``*****`` (and the
    API's ``-555555555``) mark a controlled estimate whose margin is not applicable, read
    as 0; ``**``, ``***``, ``-``, ``N``, ``(X)``, blanks and other negative sentinels give
    no margin and are read as 0 but flagged in the mask, so the caller can count and
    report them. Thousands separators and a leading ``+/-`` are ignored.
    """
    text = raw.astype(str).str.strip().str.replace(",", "", regex=False)
    text = text.str.replace(r"^(\+/-|±)", "", regex=True)
    numbers = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float)
    controlled = (text == CONTROLLED_MARGIN).to_numpy() | (numbers == CONTROLLED_SENTINEL)
    usable = np.isfinite(numbers) & (numbers >= 0)
    values = np.where(usable, numbers, 0.0)
    return values, ~usable & ~controlled


def add_shares(out: pd.DataFrame, pop_spec: PopulationSpec) -> pd.DataFrame:
    """Set each group's ``<group>_share`` of the population and ``majority_minority``."""
    pop = out["population"].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        for name in pop_spec.group_names:
            out[f"{name}_share"] = np.where(
                pop > 0, out[name].to_numpy() / np.where(pop > 0, pop, 1), np.nan
            )
    if "minority" in pop_spec.group_names:
        share = out["minority_share"].to_numpy()
        cut = pop_spec.majority_minority_share
        if pop_spec.majority_minority_rule == "above":
            out["majority_minority"] = share > cut
        else:
            out["majority_minority"] = share >= cut
        out.loc[~np.isfinite(share), "majority_minority"] = False
    return out


def load_areas(
    areas_spec: AreasSpec,
    pop_spec: PopulationSpec,
    *,
    analysis_crs: str | None = None,
    tables: tuple[TableSpec, ...] = (),
) -> AreaInputs:
    """Read, join, validate, repair and project the areas.

    Parameters
    ----------
    areas_spec, pop_spec : AreasSpec, PopulationSpec
        The spec's ``[areas]`` and ``[population]``.
    analysis_crs : str, optional
        Projected CRS to use instead of the automatic local equal-area one.
    tables : tuple of TableSpec
        Further demographics tables (``[[table]]``) joined on the id.

    Returns
    -------
    AreaInputs
    """
    exclusions = Exclusions()
    records: list[InputRecord] = []
    path = areas_spec.path
    # The second digest is taken on another thread while the areas are checked and
    # projected; it is compared (and the record completed) before returning.
    layer, layer_digest = read_hashed_later(
        path,
        lambda: read_layer(path, layer=areas_spec.layer, role="areas", id_column=areas_spec.id),
        role="areas",
    )
    layer = resolve_crs(layer, areas_spec.crs, role="areas", path=path, key="[areas] crs")
    source_crs = CRS(layer.crs)
    records.append(
        InputRecord(
            "areas",
            str(path),
            "",
            len(layer),
            crs_text(layer.crs),
            areas_spec.layer,
        )
    )
    n_input = len(layer)
    matches: list[MatchReport] = []
    id_col = areas_spec.id or detect_id_column([str(c) for c in layer.columns], path)
    if id_col not in layer.columns:
        raise InputError(
            f"areas file '{path}' has no id column \"{id_col}\"; its columns are "
            f"{[c for c in layer.columns if c != 'geometry']}"
        )
    frame = pd.DataFrame(layer.drop(columns=layer.geometry.name))
    frame["_row"] = np.arange(1, n_input + 1)
    frame[id_col] = ids_as_text(
        frame[id_col], width=areas_spec.id_width, where=f"areas file '{path}' column {id_col}"
    )
    if areas_spec.id is None:
        frame[id_col] = strip_prefix(frame[id_col])
    water = water_only(frame)
    geoms = np.asarray(layer.geometry.array, dtype=object)
    keep = np.ones(n_input, dtype=bool)

    def drop(
        mask: np.ndarray,
        reason: str | Callable[[np.ndarray], list[str]],
        source: str = "areas",
    ) -> None:
        # ``reason``: one text, or a function giving one text per row from the rows'
        # positions, so that only excluded rows are worded (85,000 f-strings cost seconds).
        nonlocal keep
        mask = mask & keep
        if mask.any():
            reasons = reason if isinstance(reason, str) else reason(np.flatnonzero(mask))
            exclusions.add(source, frame.loc[mask, "_row"], frame.loc[mask, id_col], reasons)
            keep &= ~mask

    ids = frame[id_col]
    drop(ids.isna().to_numpy(), "missing id")
    dup_counts = ids[keep].value_counts()
    dup_mask = ids.map(dup_counts).fillna(0).to_numpy() > 1
    drop(
        dup_mask,
        lambda at: [
            f"duplicate id: appears {int(dup_counts.get(v, 0))} times in the areas file"
            for v in ids.to_numpy()[at]
        ],
    )
    missing_geom = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    drop(missing_geom, "null or empty geometry")
    finite, all_xy, xy_owner = finite_coordinates_with(geoms)
    drop(~finite, "a coordinate is not a finite number (NaN or infinite)")
    type_ids = shapely.get_type_id(geoms)
    wrong_type = ~np.isin(type_ids, (3, 6, 7)) & ~missing_geom
    drop(
        wrong_type,
        lambda at: [f"not a polygon: {'' if g is None else g.geom_type}" for g in geoms[at]],
    )
    repaired_geoms, repaired_mask = repair(kept_geometries(geoms, keep))
    collection = keep & (type_ids == 7)
    if collection.any():
        repaired_geoms[collection] = polygonal(repaired_geoms[collection])
    still_empty = keep & (shapely.is_missing(repaired_geoms) | shapely.is_empty(repaired_geoms))
    drop(still_empty, "geometry has no polygonal part after repair")
    repaired = int((repaired_mask & keep).sum())
    if repaired:
        warnings.warn(
            f"repaired {repaired} invalid area geometries with make_valid",
            RepairWarning,
            stacklevel=2,
        )
    geoms = repaired_geoms

    table_list = ([(areas_spec.table, areas_spec.table_id)] if areas_spec.table else []) + [
        (t.path, t.id) for t in tables
    ]
    joined = None
    if table_list:
        joined = join_tables(
            frame,
            id_column=id_col,
            keep=keep,
            tables=table_list,
            id_width=areas_spec.id_width,
            exclusions=exclusions,
            ids_as_text=ids_as_text,
        )
        for tpath, rows in joined.rows:
            records.append(InputRecord("table", str(tpath), joined.digests[tpath], rows))
        for mask, reason in joined.missing:
            drop(mask & keep, reason)
        frame = joined.frame
        matches.extend(joined.reports)
        pop_spec = _pair_margins(pop_spec, joined.margins, frame)

    # Count columns: the total, each group and the optional income ratio.
    where_counts = (
        f"'{areas_spec.table}'" if areas_spec.table is not None else f"areas file '{path}'"
    )
    needed = [pop_spec.total] + [c for _, c in pop_spec.groups]
    missing_cols = [c for c in needed if c not in frame.columns]
    if missing_cols:
        raise InputError(
            f"{where_counts} has no column {missing_cols[0]!r} named in [population]; its columns are "
            f"{[c for c in frame.columns if not c.startswith('_')]}"
        )
    if pop_spec.income_ratio is not None and pop_spec.income_ratio not in frame.columns:
        raise InputError(
            f"{where_counts} has no income ratio column {pop_spec.income_ratio!r}; its columns are "
            f"{[c for c in frame.columns if not c.startswith('_')]}"
        )
    numbers: dict[str, pd.Series] = {}
    for label, column in [("total", pop_spec.total)] + list(pop_spec.groups):
        values, problem = _numeric_problem(frame[column])
        numbers[label] = values
        bad = (problem != "").to_numpy()

        def numeric_reasons(
            at: np.ndarray, problem: pd.Series = problem, column: str = column
        ) -> list[str]:
            return [
                f"{p} in column {column} instead of a count"
                if p.startswith("annotation")
                else f"{p} count in column {column}: {v!r}"
                for p, v in zip(problem.iloc[at], frame[column].iloc[at].tolist(), strict=True)
            ]

        drop(bad, numeric_reasons)
    total = numbers["total"]
    for name, column in pop_spec.groups:
        above = (numbers[name] > total + 1e-9).to_numpy()

        def above_reasons(at: np.ndarray, name: str = name, column: str = column) -> list[str]:
            return [
                f"group count above the total: {column} = {g:g} > {pop_spec.total} = {t:g}"
                for g, t in zip(numbers[name].to_numpy()[at], total.to_numpy()[at], strict=True)
            ]

        drop(above, above_reasons)
    income_unknown = 0
    if joined is not None:
        numeric_estimates(frame, joined.reads, {pop_spec.total, *pop_spec.group_columns.values()})
    if pop_spec.income_ratio is not None:
        ratio = pd.to_numeric(frame[pop_spec.income_ratio], errors="coerce")
        negative = (ratio < 0).to_numpy()
        drop(negative, f"negative income ratio in column {pop_spec.income_ratio}")

    # Build the analysed frame.
    sel = np.flatnonzero(keep)
    out = pd.DataFrame({id_col: frame[id_col].to_numpy()[sel]})
    out["population"] = total.to_numpy()[sel]
    groups = pop_spec.group_names
    for name, _ in pop_spec.groups:
        out[name] = numbers[name].to_numpy()[sel]
    if pop_spec.derive_minority:
        out["minority"] = np.clip(out["population"] - out[pop_spec.reference], 0.0, None)
    margin_columns, margins_missing = _add_margins(out, frame, sel, pop_spec, where_counts)
    out = add_shares(out, pop_spec)
    if pop_spec.income_ratio is not None:
        ratio = pd.to_numeric(frame[pop_spec.income_ratio], errors="coerce").to_numpy()[sel]
        out["income_ratio"] = ratio
        out["income_tier"] = income_tier(ratio)
        income_unknown = int((out["income_tier"] == "unknown").sum())
    used = {id_col, pop_spec.total, pop_spec.income_ratio, *[c for _, c in pop_spec.groups]}
    used |= {*pop_spec.group_moes.values(), pop_spec.total_moe}
    for column in frame.columns:
        if column in used or column.startswith("_") or column in out.columns:
            continue
        out[column] = frame[column].to_numpy()[sel]
    out["source_row"] = frame["_row"].to_numpy()[sel]

    check_sums(
        out,
        {
            "population": pop_spec.total,
            **dict(pop_spec.groups),
            "minority": f"{pop_spec.total} minus {pop_spec.reference}",
        },
        where_counts,
    )

    kept = geoms[sel]
    # The coordinates read for the finite check serve the projection when no kept
    # geometry was changed since (no repair, no collection, no antimeridian rejoin).
    changed = keep & (repaired_mask | (type_ids == 7))
    kept_xy = None if source_crs.is_geographic or changed.any() else all_xy[keep[xy_owner]]
    del all_xy, xy_owner
    if source_crs.is_geographic:
        # Halves cut at the antimeridian become one area before projection (RFC 7946).
        kept, _ = unwrap_longitudes(kept)
    analysed = gpd.GeoDataFrame(
        out, geometry=gpd.GeoSeries(kept, crs=layer.crs).values, crs=layer.crs
    )
    if len(analysed) == 0:
        first = [
            f"row {r['row']} ({r['source']}, id {r['id']}): {r['reason']}"
            for r in exclusions.records[:3]
        ]
        raise InputError(
            f"no area of '{path}' can be analysed: all {n_input} rows were excluded "
            f"({exclusions.by_reason()}); for example {'; '.join(first)}. Fix the inputs "
            "(exclusions.csv of a partial run lists every row)"
        )
    crs = choose_analysis_crs(analysed.geometry, analysis_crs)
    analysed = gpd.GeoDataFrame(
        analysed.drop(columns=analysed.geometry.name),
        geometry=project_geometries(
            np.asarray(analysed.geometry.array, dtype=object), analysed.crs, crs, kept_xy
        ),
        crs=crs,
    )
    analysed["area_km2"] = analysed.geometry.area.to_numpy() / 1e6
    analysed = analysed.reset_index(drop=True)
    assert exclusions.count("areas") + len(analysed) == n_input, (
        "area rows lost between input and output"
    )
    records[0] = replace(records[0], sha256=layer_digest())
    return AreaInputs(
        frame=analysed,
        id_column=id_col,
        groups=groups,
        reference=pop_spec.reference,
        input_rows=n_input,
        exclusions=exclusions,
        inputs=records,
        analysis_crs=crs,
        repaired=repaired,
        income_unknown=income_unknown,
        source_crs=source_crs,
        population=pop_spec,
        matches=matches,
        layout=describe_layout(path),
        water_only=[str(i) for i in frame.loc[water & keep, id_col]],
        margins=dict(joined.margins) if joined is not None else {},
        margin_columns=margin_columns,
        margins_missing=margins_missing,
    )


def _add_margins(
    out: pd.DataFrame, frame: pd.DataFrame, sel: np.ndarray, pop_spec: PopulationSpec, where: str
) -> tuple[dict[str, str], dict[str, int]]:
    """Add a ``<group>_moe`` column (90% margin) to ``out`` for each group that names one.

    The total's margin becomes ``population_moe``. The derived minority count (total minus
    reference) gets ``minority_moe`` = sqrt(MOE_total^2 + MOE_reference^2): the Census
    Bureau's approximation for a sum or difference of estimates (ACS General Handbook,
    chapter on calculating measures of error), which treats the two as independent.
    """
    named = dict(pop_spec.group_moes)
    if pop_spec.total_moe is not None:
        named = {"population": pop_spec.total_moe, **named}
    missing_cols = [c for c in named.values() if c not in frame.columns]
    if missing_cols:
        raise InputError(
            f"{where} has no margin-of-error column {missing_cols[0]!r} named in [population]; "
            f"its columns are {[c for c in frame.columns if not c.startswith('_')]}"
        )
    columns: dict[str, str] = {}
    missing: dict[str, int] = {}
    for name, column in named.items():
        values, absent = margin_numbers(frame[column])
        out[f"{name}_moe"] = values[sel]
        columns[name] = f"{name}_moe"
        if absent[sel].any():
            missing[column] = int(absent[sel].sum())
    ref = pop_spec.reference
    if pop_spec.derive_minority and "population" in columns and ref in columns:
        out["minority_moe"] = np.hypot(out["population_moe"], out[f"{ref}_moe"])
        columns["minority"] = "minority_moe"
    if missing:
        warnings.warn(
            f"{where}: margin-of-error cells without a number (annotations such as ** or "
            f"blanks) were read as 0, so intervals there understate the survey error: {missing}",
            MarginWarning,
            stacklevel=3,
        )
    return columns, missing
