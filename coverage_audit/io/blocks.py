"""Census blocks: read, check and partition the block layer that apportions coverage.

Takes a block layer (GeoPackage, Shapefile or a zip of one, GeoParquet, or a folder of
GeoParquet partitioned by state and county as :func:`prepare_blocks` writes it) with a
15-digit block GEOID column and count columns, and gives clean blocks: text ids, one
count matrix (total first, then each group), polygons, and the 1-based source row of
every block, with each block that cannot be used recorded as an exclusion (source
``blocks``). :func:`prepare_blocks` converts a national block file once into GeoParquet
partitioned by state and county, with bounding-box covering columns, so that each
county's blocks can be read, and sent the footprint pieces near them, on their own.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely

from ..errors import InputError
from ..inputs import PARQUET_SUFFIXES, ids_as_text
from ..spec import BLOCK_PRESETS

#: Digits of a census block GEOID: state 2 + county 3 + tract 6 + block 4.
BLOCK_ID_WIDTH = 15
#: Digits of the county prefix (state + county); blocks never cross counties.
COUNTY_WIDTH = 5
#: Column that :func:`prepare_blocks` adds: each block's 1-based row in its source file.
ROW_COLUMN = "block_row"

#: Presets of block count columns (defined in spec.py, which validates them).
PRESETS = BLOCK_PRESETS


@dataclass(frozen=True)
class BlockColumns:
    """Which block columns hold the id, the total and each group (picklable for workers)."""

    id: str
    total: str
    groups: tuple[tuple[str, str], ...]

    @property
    def count_columns(self) -> list[str]:
        """The total's column, then each group's."""
        return [self.total, *[c for _, c in self.groups]]


@dataclass(frozen=True, eq=False)
class CleanBlocks:
    """Blocks that can be used, and the records of those that cannot.

    Attributes
    ----------
    ids : numpy.ndarray of str
        15-digit block GEOIDs.
    counts : numpy.ndarray
        Shape (blocks, 1 + groups): the total, then each group, as floats.
    geometry : numpy.ndarray of shapely polygons
        In the layer's CRS.
    rows : numpy.ndarray
        1-based row of each block in its source file.
    excluded : list of (row, id, reason)
    """

    ids: np.ndarray
    counts: np.ndarray
    geometry: np.ndarray
    rows: np.ndarray
    excluded: list[tuple[int, str | None, str]]


def _suffix(path: Path) -> str:
    return path.suffix.lower()


def is_partitioned(path: Path) -> bool:
    """Whether ``path`` is a folder of GeoParquet files (a partitioned block dataset)."""
    return path.is_dir() and any(
        p.suffix.lower() in PARQUET_SUFFIXES for p in path.rglob("*") if p.is_file()
    )


def dataset_files(path: Path) -> list[Path]:
    """Return the Parquet files of a partitioned dataset, in sorted (state, county) order."""
    return sorted(p for p in path.rglob("*") if p.is_file() and _suffix(p) in PARQUET_SUFFIXES)


def read_blocks(path: Path, columns: BlockColumns) -> gpd.GeoDataFrame:
    """Read a block layer whole: the id, count and row columns and the geometry.

    Raises
    ------
    InputError
        When the file is missing or unreadable, or a named column is absent.
    """
    if not path.exists():
        raise InputError(f"blocks file '{path}' was not found; check [blocks] path in the spec")
    try:
        if path.is_dir() or _suffix(path) in PARQUET_SUFFIXES:
            frame = gpd.read_parquet(path)
        else:
            frame = pyogrio.read_dataframe(path)
    except Exception as exc:  # GDAL and pyarrow raise many kinds; all mean "unreadable"
        raise InputError(
            f"blocks file '{path}' could not be read as a spatial layer ({exc}); use "
            "GeoPackage, a zipped Shapefile or GeoParquet"
        ) from None
    check_columns(frame, columns, path)
    return frame


def check_columns(frame: pd.DataFrame, columns: BlockColumns, path: Path | str) -> None:
    """Raise an InputError naming the first [blocks] column the layer lacks."""
    for label, column in [("id", columns.id), ("total", columns.total), *columns.groups]:
        if column not in frame.columns:
            raise InputError(
                f"blocks file '{path}' has no column \"{column}\" (the {label} of [blocks]); "
                f"its columns are {[c for c in frame.columns if c != 'geometry'][:30]}"
            )


def clean_blocks(frame: gpd.GeoDataFrame, columns: BlockColumns) -> CleanBlocks:
    """Check each block; keep the usable ones and say why the others were left out.

    A block is left out when its id is missing or not 15 digits, it repeats an id, a
    count is missing, not a number or negative, a group count exceeds the total, or its
    geometry is null, empty or not a polygon. Rows are the ``block_row`` column when
    present (a prepared dataset), else the 1-based position in ``frame``.
    """
    n = len(frame)
    rows = (
        frame[ROW_COLUMN].to_numpy(dtype=np.int64)
        if ROW_COLUMN in frame.columns
        else np.arange(1, n + 1, dtype=np.int64)
    )
    raw = frame[columns.id].reset_index(drop=True)
    # Zeros lost to a numeric column are restored; text ids are taken as written.
    numeric = pd.api.types.is_numeric_dtype(raw.dtype)
    ids = ids_as_text(
        raw, width=BLOCK_ID_WIDTH if numeric else None, where=f"blocks column {columns.id}"
    ).to_numpy(dtype=object)
    reason = np.full(n, "", dtype=object)

    def flag(mask: Any, why: str | np.ndarray) -> None:
        mask = np.asarray(mask, dtype=bool) & (reason == "")
        reason[mask] = why if isinstance(why, str) else why[mask]

    flag(np.array([v is None for v in ids], dtype=bool), "missing block id")
    bad_id = np.array(
        [v is not None and (len(v) != BLOCK_ID_WIDTH or not v.isdigit()) for v in ids], dtype=bool
    )
    flag(bad_id, f"block id is not a {BLOCK_ID_WIDTH}-digit GEOID")
    counts = np.empty((n, 1 + len(columns.groups)), dtype=float)
    for k, column in enumerate(columns.count_columns):
        raw = frame[column].reset_index(drop=True)
        values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
        counts[:, k] = values
        flag(~np.isfinite(values), f"count in column {column} is missing or not a number")
        flag(values < 0, f"negative count in column {column}")
    above = (counts[:, 1:] > counts[:, :1] + 1e-9).any(axis=1)
    flag(above, f"a group count exceeds the total {columns.total}")
    geoms = np.asarray(frame.geometry.array, dtype=object)
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    flag(missing, "null or empty geometry")
    flag(~np.isin(shapely.get_type_id(geoms), (3, 6)) & ~missing, "not a polygon")
    ok = reason == ""
    # Every usable block whose id another usable block repeats (all copies are left out).
    dup = np.zeros(n, dtype=bool)
    dup[ok] = pd.Series(ids[ok], dtype=object).duplicated(keep=False).to_numpy()
    flag(dup, "duplicate block id")
    ok = reason == ""
    bad = np.flatnonzero(~ok)
    return CleanBlocks(
        ids=ids[ok].astype(str) if ok.any() else np.array([], dtype=str),
        counts=counts[ok],
        geometry=geoms[ok],
        rows=rows[ok],
        excluded=[(int(rows[k]), ids[k], str(reason[k])) for k in bad],
    )


def file_bounds(path: Path) -> np.ndarray:
    """Return (xmin, ymin, xmax, ymax) of a GeoParquet file, in the file's CRS.

    Read from the row-group statistics of the ``bbox`` covering column when the file has
    them (no geometry is read), else from the geometry.
    """
    import pyarrow.parquet as pq

    meta = pq.ParquetFile(path).metadata
    names = {meta.schema.column(j).path: j for j in range(meta.num_columns)}
    wanted = ["bbox.xmin", "bbox.ymin", "bbox.xmax", "bbox.ymax"]
    if all(w in names for w in wanted):
        lows: list[list[float]] = [[], [], [], []]
        ok = True
        for g in range(meta.num_row_groups):
            for k, w in enumerate(wanted):
                stats = meta.row_group(g).column(names[w]).statistics
                if stats is None or not stats.has_min_max:
                    ok = False
                    break
                lows[k].append(stats.min if k < 2 else stats.max)
        if ok and meta.num_row_groups:
            return np.array([min(lows[0]), min(lows[1]), max(lows[2]), max(lows[3])], float)
    geoms = gpd.read_parquet(path, columns=["geometry"]).geometry
    return np.asarray(geoms.total_bounds, dtype=float)


#: Features read at a time by :func:`prepare_blocks` (memory stays bounded by a chunk).
PREPARE_CHUNK = 500_000


def prepare_blocks(
    sources: Sequence[str | Path],
    out_dir: str | Path,
    *,
    id_column: str = "GEOID20",
    chunk: int = PREPARE_CHUNK,
) -> dict[str, Any]:
    """Convert block files into GeoParquet partitioned by state and county, once.

    Parameters
    ----------
    sources : sequence of paths
        Block layers: zipped Shapefiles (TIGER/Line ``tl_2020_SS_tabblock20.zip``),
        Shapefiles, GeoPackages or GeoParquet; all in one CRS.
    out_dir : path
        Output folder (created; must be empty or absent). Written as
        ``state=SS/county=CCC/part-SSSS-KKKK.parquet`` (source and chunk numbers), each
        with a ``bbox`` covering column and a ``block_row`` column (the block's 1-based
        row in its source file).
    id_column : str
        The 15-digit block GEOID column.
    chunk : int
        Features read at a time from an OGR source, so that a national file is
        converted without holding it in memory.

    Returns
    -------
    dict
        Blocks and files written.

    Raises
    ------
    InputError
        When a source is missing or unreadable, lacks the id column, the sources' CRSs
        differ, or the output folder is not empty.
    """
    out = Path(out_dir)
    if out.exists() and any(out.iterdir()):
        raise InputError(f"output folder '{out}' is not empty; name a new folder")
    crs = None
    blocks = files = 0
    for k, source in enumerate(sources, start=1):
        path = Path(source)
        if not path.exists():
            raise InputError(f"blocks file '{path}' was not found; check the path")
        for offset, frame in _chunks(path, chunk):
            if id_column not in frame.columns:
                raise InputError(
                    f"blocks file '{path}' has no id column \"{id_column}\"; its columns are "
                    f"{[c for c in frame.columns if c != 'geometry'][:30]}; give --id"
                )
            if crs is not None and frame.crs is not None and not frame.crs.equals(crs):
                raise InputError(f"blocks file '{path}' is in {frame.crs} but the others in {crs}")
            crs = crs or frame.crs
            frame[ROW_COLUMN] = np.arange(offset + 1, offset + len(frame) + 1, dtype=np.int64)
            files += _write_counties(frame, out, id_column, f"part-{k:04d}-{offset // chunk:04d}")
            blocks += len(frame)
    return {"blocks": blocks, "files": files, "folder": str(out)}


def _chunks(path: Path, chunk: int) -> Any:
    """Yield (offset, frame) chunks of a block layer."""
    try:
        if _suffix(path) in PARQUET_SUFFIXES:
            yield 0, gpd.read_parquet(path)
            return
        total = int(pyogrio.read_info(path)["features"])
        if total < 0:
            yield 0, pyogrio.read_dataframe(path)
            return
        for offset in range(0, max(total, 1), chunk):
            yield offset, pyogrio.read_dataframe(path, skip_features=offset, max_features=chunk)
    except InputError:
        raise
    except Exception as exc:
        raise InputError(f"blocks file '{path}' could not be read ({exc})") from None


def _write_counties(frame: gpd.GeoDataFrame, out: Path, id_column: str, name: str) -> int:
    """Write one chunk's blocks county by county; return the files written."""
    numeric = pd.api.types.is_numeric_dtype(frame[id_column].dtype)
    ids = ids_as_text(
        frame[id_column], width=BLOCK_ID_WIDTH if numeric else None, where=f"column {id_column}"
    )
    frame[id_column] = ids
    county = ids.map(lambda v: v[:COUNTY_WIDTH] if isinstance(v, str) else "")
    # Kept in a partition of their own, so that each bad row is reported when audited.
    county[(county.str.len() != COUNTY_WIDTH) | ~county.str.isdigit()] = "99999"
    written = 0
    for key in sorted(county.unique()):
        part = frame[(county == key).to_numpy()]
        folder = out / f"state={key[:2]}" / f"county={key[2:]}"
        folder.mkdir(parents=True, exist_ok=True)
        part.to_parquet(folder / f"{name}.parquet", index=False, write_covering_bbox=True)
        written += 1
    return written


def default_chunks(n_blocks: int, per_partition: int = 50_000) -> int:
    """Partitions of an in-memory block layer when the spec names none."""
    return max(1, math.ceil(n_blocks / per_partition))
