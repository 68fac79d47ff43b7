"""Block apportionment: covered people counted where they live, from census blocks up.

Takes the analysed areas (tracts or block groups, GEOIDs of 11 or 12 digits), the
footprint and the spec's ``[blocks]``, and gives each area its counts summed from its
blocks (the block GEOID's first 11 or 12 digits name the area), the people of each group
the footprint covers (sum over the area's blocks of f_b x_gb, with f_b the block's exact
covered fraction) and ``covered_population_share`` = covered people / people. The work
runs partition by partition (a county's file of a prepared dataset, or a chunk of an
in-memory layer), in this process or on dask (local processes, or the cluster at
``dask_scheduler``); each partition is sent only the footprint pieces that meet its
envelope and returns per-area sums, which are added up. Sums are kept in fixed point
(integers of 2**-30 person), so they are the same bit for bit whatever the partitioning.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from ._util import safe_ratio
from .coverage import covered_fraction
from .dasymetric import Apportioned, apportion_dasymetric
from .errors import AnalysisError, InputError
from .inputs import InputRecord
from .io.areas import project_geometries
from .io.blocks import (
    ROW_COLUMN,
    BlockColumns,
    CleanBlocks,
    check_columns,
    clean_blocks,
    dataset_files,
    default_chunks,
    file_bounds,
    is_partitioned,
    read_blocks,
)

#: Fixed-point unit of the sums: integer sums do not depend on the order of addition.
SCALE = float(2**30)
#: Area GEOID lengths whose blocks are found by prefix: tract 11, block group 12.
PREFIX_WIDTHS = (11, 12)
#: Margin (metres) added round a partition's projected bounding box when picking pieces.
ENVELOPE_PAD_M = 1_000.0
#: dask scheduler of ``engine = "dask"`` without ``dask_scheduler``: local processes.
LOCAL_SCHEDULER = "processes"
NO_CRS = "blocks file '{path}' has no CRS; save it with its CRS (EPSG:4269)"
NO_BLOCK_REASON = "no census block of the blocks file has this area's GEOID as its prefix"


@dataclass(frozen=True)
class Task:
    """What every partition needs besides its blocks (picklable, sent once per task)."""

    columns: BlockColumns
    area_ids: np.ndarray  # sorted
    width: int
    crs_wkt: str
    minority_of: int | None  # column of the reference group when minority is derived
    served: frozenset[str] | None  # served area ids of an "ids" footprint


@dataclass(frozen=True, eq=False)
class PartitionSums:
    """Per-area sums of one partition (fixed point), and the blocks it left out."""

    area_ids: np.ndarray
    blocks: np.ndarray
    counts: np.ndarray
    covered: np.ndarray
    excluded: list[tuple[int, str | None, str]]
    rows: int


def block_sums(clean: CleanBlocks, fraction: np.ndarray, task: Task) -> PartitionSums:
    """Sum blocks' counts and covered counts to the areas their GEOID prefixes name.

    Blocks whose prefix is no analysed area are returned as exclusions.
    """
    counts = clean.counts
    if task.minority_of is not None:
        minority = np.clip(counts[:, 0] - counts[:, task.minority_of], 0.0, None)
        counts = np.column_stack([counts, minority])
    prefix = np.array([v[: task.width] for v in clean.ids], dtype=object)
    where = np.searchsorted(task.area_ids, prefix.astype(str)) if prefix.size else prefix
    known = np.zeros(prefix.size, dtype=bool)
    if prefix.size:
        inside = where < task.area_ids.size
        known[inside] = task.area_ids[where[inside]] == prefix[inside]
    excluded = list(clean.excluded)
    excluded += [
        (int(r), str(i), f"no analysed area has GEOID {p} (the block's first {task.width} digits)")
        for r, i, p in zip(clean.rows[~known], clean.ids[~known], prefix[~known], strict=True)
    ]
    slot = np.asarray(where, dtype=np.int64)[known]
    fixed = np.rint(counts[known] * SCALE).astype(np.int64)
    covered = np.rint(counts[known] * fraction[known, None] * SCALE).astype(np.int64)
    order = np.argsort(slot, kind="stable")
    slot, fixed, covered = slot[order], fixed[order], covered[order]
    areas, start, n_blocks = np.unique(slot, return_index=True, return_counts=True)
    width = counts.shape[1]
    sums = np.add.reduceat(fixed, start, axis=0) if areas.size else np.zeros((0, width), np.int64)
    csum = np.add.reduceat(covered, start, axis=0) if areas.size else np.zeros((0, width), np.int64)
    return PartitionSums(
        area_ids=task.area_ids[areas],
        blocks=n_blocks.astype(np.int64),
        counts=sums,
        covered=csum,
        excluded=excluded,
        rows=len(clean.ids) + len(clean.excluded),
    )


def _fractions(clean: CleanBlocks, geoms: np.ndarray, pieces: np.ndarray, task: Task) -> np.ndarray:
    if task.served is not None:
        return np.array([1.0 if v[: task.width] in task.served else 0.0 for v in clean.ids])
    return covered_fraction(geoms, pieces)


def memory_task(chunk: tuple[Any, ...], pieces_wkb: np.ndarray, task: Task) -> PartitionSums:
    """One in-memory chunk: blocks already checked and projected (geometry as WKB)."""
    ids, counts, wkb, rows, excluded = chunk
    geoms = shapely.from_wkb(wkb)
    clean = CleanBlocks(ids=ids, counts=counts, geometry=geoms, rows=rows, excluded=excluded)
    return block_sums(clean, _fractions(clean, geoms, shapely.from_wkb(pieces_wkb), task), task)


def file_task(path: str, pieces_wkb: np.ndarray, envelope: np.ndarray, task: Task) -> PartitionSums:
    """One partition file of a prepared dataset: read it, then :func:`frame_task`."""
    return frame_task(_read_partition(path, task), pieces_wkb, envelope, task, path)


def _read_partition(path: str, task: Task, columns_only: bool = False) -> Any:
    """Read a partition file's id, count, row and geometry columns (not the others).

    With ``columns_only``, return those column names instead ([] when one is absent).
    """
    import pyarrow.parquet as pq

    present = set(pq.read_schema(path).names)
    wanted = [task.columns.id, *task.columns.count_columns, ROW_COLUMN]
    geometry = _geo_metadata(path).get("primary_column", "geometry")
    columns = list(dict.fromkeys(c for c in [*wanted, geometry] if c in present))
    # A named column that is absent: all are read, so that check_columns names it.
    if any(c not in present for c in wanted[:-1]):
        return [] if columns_only else gpd.read_parquet(path)
    return columns if columns_only else gpd.read_parquet(path, columns=columns)


def _geo_metadata(path: str | Path) -> dict[str, Any]:
    """Return the GeoParquet ``geo`` metadata of a file ({} when it has none)."""
    import json

    import pyarrow.parquet as pq

    meta = pq.read_schema(path).metadata or {}
    try:
        return dict(json.loads(meta[b"geo"])) if b"geo" in meta else {}
    except ValueError:
        return {}


def _file_crs(path: Path) -> CRS | None:
    """Return a GeoParquet file's CRS from its metadata, without reading any geometry.

    GeoParquet: a column's ``crs`` is PROJJSON; absent means OGC:CRS84; null, unknown.
    """
    geo = _geo_metadata(path)
    if not geo:
        return None
    column = geo.get("columns", {}).get(geo.get("primary_column", "geometry"), {})
    if "crs" not in column:
        return CRS.from_user_input("OGC:CRS84")
    value = column["crs"]
    return (
        None
        if value is None
        else CRS.from_json_dict(value)
        if isinstance(value, dict)
        else CRS(value)
    )


def frame_task(
    frame: gpd.GeoDataFrame, pieces_wkb: np.ndarray, envelope: np.ndarray, task: Task, path: str
) -> PartitionSums:
    """One partition of a prepared dataset, as read: check, project, measure, sum.

    Raises an AnalysisError if a block lies outside the envelope its pieces were chosen
    for, or outside the county the partition's file names (``state=SS/county=CCC``):
    either would mean the partitions and their pieces or area ids got out of step.
    """
    check_columns(frame, task.columns, path)
    clean = clean_blocks(frame, task.columns)
    _check_county(clean, path)
    return block_sums(clean, _measure(clean, frame.crs, pieces_wkb, envelope, task, path), task)


def _measure(
    clean: CleanBlocks,
    crs: Any,
    pieces_wkb: np.ndarray,
    envelope: np.ndarray,
    task: Task,
    path: str,
) -> np.ndarray:
    """Return each block's covered fraction, projecting only the blocks near a piece.

    Blocks in another CRS than the analysis CRS are first placed by their bounding boxes
    (sampled at corners, edge midpoints and centre, projected, padded); those whose box
    meets no piece's box cannot meet a piece and get 0 without being projected. The
    others are projected and measured exactly, as all blocks would be, so the fractions
    are the same as projecting every block.
    """
    if crs is None:
        raise InputError(NO_CRS.format(path=path))
    if task.served is not None:
        return _fractions(clean, clean.geometry, np.array([], dtype=object), task)
    pieces = shapely.from_wkb(pieces_wkb)
    target = CRS.from_wkt(task.crs_wkt)
    same = CRS(crs).equals(target)
    boxes = (
        shapely.bounds(clean.geometry)
        if same
        else _projected_boxes(shapely.bounds(clean.geometry), CRS(crs), target)
    )
    if boxes.size:
        lo, hi = np.fmin.reduce(boxes[:, :2], axis=0), np.fmax.reduce(boxes[:, 2:], axis=0)
        if np.any(lo < envelope[:2]) or np.any(hi > envelope[2:]):
            raise AnalysisError(
                f"blocks of '{path}' reach beyond the envelope their footprint pieces were "
                "chosen for; prepare the dataset again with coverage-audit prepare-blocks"
            )
    if same:
        return covered_fraction(clean.geometry, pieces)
    fraction = np.zeros(len(clean.ids), dtype=float)
    near = _near_pieces(boxes, pieces)
    if near.any():
        geoms = _project(clean.geometry[near], crs, task.crs_wkt, path)
        fraction[near] = covered_fraction(geoms, pieces)
    return fraction


#: Padding of a block's projected box (metres, and share of its size) when picking blocks.
BOX_PAD_M, BOX_PAD_SHARE = 1.0, 0.01


def _projected_boxes(bounds: np.ndarray, crs: CRS, target: CRS) -> np.ndarray:
    """Return (n, 4) boxes in ``target`` around boxes in ``crs`` (9 points each, unpadded)."""
    from pyproj import Transformer

    to = Transformer.from_crs(crs, target, always_xy=True)
    fx = np.array([0.0, 0.5, 1.0])
    xs = bounds[:, [0]] + (bounds[:, [2]] - bounds[:, [0]]) * fx  # (n, 3)
    ys = bounds[:, [1]] + (bounds[:, [3]] - bounds[:, [1]]) * fx
    px, py = to.transform(np.repeat(xs, 3, axis=1), np.tile(ys, (1, 3)))
    px, py = np.asarray(px), np.asarray(py)
    return np.column_stack([px.min(axis=1), py.min(axis=1), px.max(axis=1), py.max(axis=1)])


def _near_pieces(boxes: np.ndarray, pieces: np.ndarray) -> np.ndarray:
    """Return whether each padded box meets a piece's bounding box.

    A box that could not be placed (not finite) counts as near, so that its block is
    projected and measured.
    """
    near = ~np.isfinite(boxes).all(axis=1)
    if pieces.size == 0 or boxes.size == 0:
        return near
    size = np.fmax(boxes[:, 2] - boxes[:, 0], boxes[:, 3] - boxes[:, 1])
    pad = BOX_PAD_M + BOX_PAD_SHARE * np.nan_to_num(size)
    padded = shapely.box(boxes[:, 0] - pad, boxes[:, 1] - pad, boxes[:, 2] + pad, boxes[:, 3] + pad)
    ok = ~near
    hit = shapely.STRtree(pieces).query(padded[ok])[0]
    near[np.flatnonzero(ok)[np.unique(hit)]] = True
    return near


def _check_county(clean: CleanBlocks, path: str) -> None:
    county = _county_of(Path(path))
    if county is not None and not all(v.startswith(county[0]) for v in clean.ids):
        raise AnalysisError(
            f"blocks of '{path}' are not all of county {county[0]}; prepare the dataset again "
            "with coverage-audit prepare-blocks"
        )


def _project(geoms: np.ndarray, crs: Any, target_wkt: str, path: str) -> np.ndarray:
    if crs is None:
        raise InputError(NO_CRS.format(path=path))
    # The areas' projection: threaded, nothing done when already in the analysis CRS.
    return project_geometries(geoms, crs, CRS.from_wkt(target_wkt))


def combine(parts: Sequence[PartitionSums], width: int) -> pd.DataFrame:
    """Add the partitions' sums area by area (integer sums: any order gives the same)."""
    ids = np.concatenate([p.area_ids for p in parts]) if parts else np.array([], dtype=str)
    frame = pd.DataFrame({"id": ids.astype(str)})
    frame["blocks"] = np.concatenate([p.blocks for p in parts]) if parts else []
    counts = np.vstack([p.counts for p in parts]) if parts else np.zeros((0, width), np.int64)
    covered = np.vstack([p.covered for p in parts]) if parts else np.zeros((0, width), np.int64)
    for k in range(width):
        frame[f"n{k}"] = counts[:, k]
        frame[f"c{k}"] = covered[:, k]
    return frame.groupby("id", sort=True).sum()


def apportion(
    spec: Any, inputs: Any, footprint: Any, frame: gpd.GeoDataFrame, *, record: bool = True
) -> Apportioned:
    """Place people within areas by census blocks or by a settlement mask, as the spec says.

    With ``record=False`` (a further footprint over areas already apportioned once) the
    inputs' records and exclusions are left as they are, so nothing is counted twice.
    """
    if spec.dasymetric is not None:
        return apportion_dasymetric(spec, inputs, footprint, frame, record=record)
    return apportion_blocks(spec, inputs, footprint, frame, record=record)


def apportion_blocks(
    spec: Any, inputs: Any, footprint: Any, frame: gpd.GeoDataFrame, *, record: bool = True
) -> Apportioned:
    """Replace the areas' counts by their blocks' sums and count covered people by block.

    Parameters
    ----------
    spec : AuditSpec
        With ``blocks`` set; ``analysis.engine``, ``dask_scheduler`` and ``partitions``
        choose where the partitions run.
    inputs : AreaInputs
        Its exclusions receive the blocks left out and the areas without blocks.
    footprint : Footprint
    frame : geopandas.GeoDataFrame
        The analysed areas with their areal ``covered_fraction``.
    record : bool
        Add the blocks file to the inputs and its left-out rows to the exclusions (False
        when the same blocks are apportioned again for a further footprint).

    Returns
    -------
    Apportioned
        ``frame`` without the areas that have no block, with ``population`` and group
        counts summed from blocks, shares recomputed, ``covered_population_share`` and
        ``served`` (share at or above the threshold; the areal fraction where an area
        has no people); ``covered``: covered people of each group in each area.
    """
    from .inputs import add_shares

    bspec = spec.blocks
    id_col = inputs.id_column
    ids = frame[id_col].astype(str).to_numpy()
    task, names = _block_task(
        spec, inputs, ids, footprint.served_ids if footprint.kind == "ids" else None
    )
    pieces = np.asarray(footprint.pieces, dtype=object) if footprint.kind != "ids" else None
    parts, how = run_partitions(bspec.path, task, pieces, spec.analysis)
    sums = combine(parts, len(names))
    excluded = sorted(
        (e for p in parts for e in p.excluded), key=lambda e: (e[0], e[1] or "", e[2])
    )
    if record:
        inputs.inputs.append(
            InputRecord("blocks", str(bspec.path), digest(bspec.path), sum(p.rows for p in parts))
        )
        inputs.exclusions.add(
            "blocks", [e[0] for e in excluded], [e[1] for e in excluded], [e[2] for e in excluded]
        )
    has = np.isin(ids, sums.index.to_numpy())
    if not has.any():
        raise InputError(NO_MATCH.format(path=bspec.path))
    if record:
        inputs.exclusions.add(
            "areas", frame.loc[~has, "source_row"], frame.loc[~has, id_col], NO_BLOCK_REASON
        )
    out = frame.loc[has].reset_index(drop=True)
    row = sums.loc[out[id_col].astype(str).to_numpy()]
    covered: dict[str, np.ndarray] = {}
    for k, name in enumerate(names):
        out[name] = row[f"n{k}"].to_numpy() / SCALE
        covered[name] = row[f"c{k}"].to_numpy() / SCALE
    out["block_count"] = row["blocks"].to_numpy()
    pop = out["population"].to_numpy(dtype=float)
    areal = out["covered_fraction"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(pop > 0, covered["population"] / np.where(pop > 0, pop, 1.0), areal)
    share = np.clip(share, 0.0, 1.0)
    out["covered_population_share"] = share
    out["served"] = share >= spec.analysis.served_threshold
    out = add_shares(out, spec.population)
    # Block counts are full counts, not survey estimates: no sampling margins apply.
    inputs.margin_columns = {}
    block_groups = [g for g in inputs.groups if g in covered]
    section = {
        "blocks_read": int(sum(p.rows for p in parts)),
        "blocks_used": int(out["block_count"].sum()),
        "blocks_excluded": len(excluded),
        "areas_without_blocks": int((~has).sum()),
        "prefix_digits": task.width,
        "areal_rates": {
            g: safe_ratio(float((out[g].to_numpy() * areal).sum()), float(out[g].to_numpy().sum()))
            for g in block_groups
        },
    }
    return Apportioned(
        frame=gpd.GeoDataFrame(out, geometry=frame.geometry.name, crs=frame.crs),
        covered={g: covered[g] for g in block_groups},
        share=share,
        section=section,
        partitions=how,
    )


NO_MATCH = (
    "no block of '{path}' falls in an analysed area (by GEOID prefix); check that the "
    "blocks and the areas are of the same state and county"
)


def _block_task(
    spec: Any, inputs: Any, ids: np.ndarray, served: frozenset[str] | None
) -> tuple[Task, list[str]]:
    """Return the partitions' task and the names of its count columns (total first).

    Raises an InputError unless the area ids are GEOIDs of 11 or 12 digits, one length.
    """
    widths = {len(v) for v in ids}
    if (
        len(widths) != 1
        or next(iter(widths)) not in PREFIX_WIDTHS
        or not all(v.isdigit() for v in ids)
    ):
        raise InputError(
            f"[blocks] needs areas whose ids are GEOIDs of one length, 11 digits (tracts) or "
            f"12 (block groups); the areas' {inputs.id_column} values have lengths "
            f"{sorted(widths)[:5]}"
        )
    bspec = spec.blocks
    names = ["population", *[n for n, _ in spec.population.groups]]
    reference_at = names.index(spec.population.reference)
    task = Task(
        columns=BlockColumns(bspec.id, bspec.total, bspec.groups),
        area_ids=np.array(sorted(ids), dtype=str),
        width=next(iter(widths)),
        crs_wkt=CRS(inputs.analysis_crs).to_wkt(),
        minority_of=reference_at if spec.population.derive_minority else None,
        served=served,
    )
    if spec.population.derive_minority:
        names.append("minority")
    return task, names


# --- running the partitions ------------------------------------------------------------------


def run_partitions(
    path: Path, task: Task, pieces: np.ndarray | None, analysis: Any
) -> tuple[list[PartitionSums], str]:
    """Run every partition of the blocks: local in order, or on dask; say how."""
    func, args, how = partition_tasks(path, task, pieces, analysis)
    return _run(func, args, analysis, path if func is file_task else None), how


def partition_tasks(
    path: Path, task: Task, pieces: np.ndarray | None, analysis: Any
) -> tuple[Any, list[tuple[Any, ...]], str]:
    """Return the task function, one argument tuple per partition, and how it was split.

    A prepared dataset gives one partition per file (county); any other block file is
    read here, checked, projected and cut into ``analysis.partitions`` chunks in GEOID
    order (one with the local engine). Each partition's pieces are those meeting its
    envelope, as WKB.
    """
    pieces_all = pieces if pieces is not None else np.array([], dtype=object)
    if is_partitioned(path):
        files = dataset_files(path)
        envelopes = [_envelope(f, task.crs_wkt) for f in files]
        chosen = _pieces_for(pieces_all, envelopes)
        args: list[tuple[Any, ...]] = [
            (str(f), shapely.to_wkb(pieces_all[s]), e, _task_for(task, _county_of(f)))
            for f, e, s in zip(files, envelopes, chosen, strict=True)
        ]
        return file_task, args, f"{len(files)} files of a prepared dataset"
    frame = read_blocks(path, task.columns)
    clean = clean_blocks(frame, task.columns)
    geoms = _project(clean.geometry, frame.crs, task.crs_wkt, str(path))
    k = 1
    if analysis.engine == "dask":
        k = analysis.partitions or default_chunks(len(clean.ids))
    order = np.argsort(clean.ids, kind="stable")
    chunks = list(np.array_split(order, max(1, min(k, max(order.size, 1)))))
    bounds = shapely.bounds(geoms) if geoms.size else np.zeros((0, 4))
    envelopes = [
        np.concatenate([bounds[c, :2].min(axis=0), bounds[c, 2:].max(axis=0)])
        if c.size
        else np.full(4, np.nan)
        for c in chunks
    ]
    chosen = _pieces_for(pieces_all, envelopes)
    args = []  # (chunk, pieces, task) per chunk
    for j, (c, s) in enumerate(zip(chunks, chosen, strict=True)):
        excluded = clean.excluded if j == 0 else []
        chunk = (clean.ids[c], clean.counts[c], shapely.to_wkb(geoms[c]), clean.rows[c], excluded)
        span = (clean.ids[c[0]][: task.width], clean.ids[c[-1]][: task.width]) if c.size else None
        args.append((chunk, shapely.to_wkb(pieces_all[s]), _task_for(task, span)))
    return memory_task, args, f"{len(chunks)} chunks of one file"


def _county_of(path: Path) -> tuple[str, str] | None:
    """Return the GEOID prefix range of a prepared partition (``state=SS/county=CCC``)."""
    state, county = path.parent.parent.name, path.parent.name
    if state.startswith("state=") and county.startswith("county="):
        prefix = state[6:] + county[7:]
        return prefix, prefix + "\uffff"
    return None


def _task_for(task: Task, span: tuple[str, str] | None) -> Task:
    """Return ``task`` with only the area ids in ``span`` (ids sorted; both ends kept).

    A partition is sent the ids of its own areas, not the whole country's; a block whose
    area lies outside the span could not be in this partition's county or id range.
    """
    if span is None:
        return task
    lo = int(np.searchsorted(task.area_ids, span[0][: task.width], side="left"))
    hi = int(np.searchsorted(task.area_ids, span[1][: task.width] + "\uffff", side="right"))
    return replace(task, area_ids=task.area_ids[lo:hi])


def digest(path: Path) -> str:
    """Return the SHA-256 of a file, or of a prepared folder (its files' names and digests)."""
    from .inputs import sha256_file

    if not path.is_dir():
        return sha256_file(path)
    import hashlib

    total = hashlib.sha256()
    for f in dataset_files(path):
        total.update(f"{f.relative_to(path).as_posix()} {sha256_file(f)}\n".encode())
    return total.hexdigest()


def _envelope(path: Path, crs_wkt: str) -> np.ndarray:
    """Return a partition's bounding box in the analysis CRS, padded (ENVELOPE_PAD_M)."""
    from pyproj import Transformer

    box = file_bounds(path)
    crs = _file_crs(path)
    if crs is None:
        raise InputError(f"blocks file '{path}' has no CRS; prepare it with its CRS")
    to = Transformer.from_crs(crs, CRS.from_wkt(crs_wkt), always_xy=True)
    x0, y0, x1, y1 = to.transform_bounds(box[0], box[1], box[2], box[3], densify_pts=21)
    pad = ENVELOPE_PAD_M + 1e-3 * max(x1 - x0, y1 - y0)
    return np.array([x0 - pad, y0 - pad, x1 + pad, y1 + pad], dtype=float)


def _pieces_for(pieces: np.ndarray, envelopes: list[np.ndarray]) -> list[np.ndarray]:
    """Return the indices (ascending) of the pieces meeting each envelope."""
    if pieces.size == 0:
        return [np.array([], dtype=np.int64) for _ in envelopes]
    tree = shapely.STRtree(pieces)
    out = []
    for e in envelopes:
        if not np.all(np.isfinite(e)):
            out.append(np.array([], dtype=np.int64))
            continue
        out.append(np.sort(tree.query(shapely.box(*e), predicate="intersects")))
    return out


def _run(
    func: Any, args: list[tuple[Any, ...]], analysis: Any, dataset: Path | None = None
) -> list[PartitionSums]:
    """Run ``func`` on each argument tuple: here, on local processes, or on a cluster.

    On a dask cluster, the county files of a prepared dataset are read as the partitions
    of a dask-geopandas collection (one per file, in file order: checked in each task),
    so the workers read their own counties.
    """
    if analysis.engine != "dask":
        return [func(*a) for a in args]
    from .distributed import _import_dask

    dask, dask_geopandas = _import_dask()
    # On a cluster the county files are read as a dask-geopandas collection and each read
    # partition is measured where it was read. Local processes share no memory (a read
    # partition would travel back through this process), so there each task reads its own.
    if analysis.dask_scheduler is not None:
        from distributed import Client

        with Client(analysis.dask_scheduler) as client:
            # Each partition's footprint pieces (and, for one block file cut into chunks,
            # its blocks) go to the workers directly, ahead of the task graph, so the graph
            # stays small however many pieces a county meets.
            pieces = client.scatter([a[1] for a in args], hash=False) if args else []
            first = [a[0] for a in args]
            if func is memory_task and args:
                first = client.scatter(first, hash=False)
            args = [(f, p, *a[2:]) for f, p, a in zip(first, pieces, args, strict=True)]
            tasks = _dask_tasks(dask, dask_geopandas, func, args, dataset)
            return list(client.gather(client.compute(tasks)))
    tasks = _dask_tasks(dask, dask_geopandas, func, args, None)
    workers = max(1, min(len(tasks), os.cpu_count() or 1))
    return list(dask.compute(*tasks, scheduler=LOCAL_SCHEDULER, num_workers=workers))


def _dask_tasks(
    dask: Any, dask_geopandas: Any, func: Any, args: list[tuple[Any, ...]], dataset: Path | None
) -> list[Any]:
    """Return one delayed task per partition (see :func:`_run`)."""
    if dataset is not None and args:
        root = dataset
        task0 = args[0][3]
        first = dataset_files(root)[0]
        columns = list(_read_partition(str(first), task0, columns_only=True))
        parts = dask_geopandas.read_parquet(root, columns=columns or None).to_delayed()
        if len(parts) != len(args):
            raise AnalysisError(
                f"dask-geopandas read {len(parts)} partitions from '{root}' but it has "
                f"{len(args)} files; prepare the dataset again with coverage-audit prepare-blocks"
            )
        task = dask.delayed(frame_task, pure=False)
        return [task(part, *a[1:], a[0]) for part, a in zip(parts, args, strict=True)]
    return [dask.delayed(func, pure=False)(*a) for a in args]


def run_on_client(client: Any, func: Any, args: list[tuple[Any, ...]]) -> list[PartitionSums]:
    """Run the partitions on a ``dask.distributed.Client``'s cluster, in order."""
    futures = [client.submit(func, *a, pure=False) for a in args]
    return list(client.gather(futures))


def group_rates(apportioned: Apportioned, groups: Sequence[str]) -> dict[str, float | None]:
    """Block-based rate of each group: sum of covered people over sum of people."""
    frame = apportioned.frame
    return {
        g: safe_ratio(float(apportioned.covered[g].sum()), float(frame[g].to_numpy().sum()))
        for g in groups
    }


#: How the areal-weighting caution of audit.CAUTIONS reads (replaced when blocks are used).
AREAL_CAUTION_PART = "coverage is areal-weighted"


def block_cautions(cautions: Sequence[str], summary: Mapping[str, Any]) -> list[str]:
    """Return the cautions with the areal-weighting one saying how people were placed."""
    if summary["coverage"].get("apportionment") == "dasymetric":
        text = (
            "Results depend on the areal units chosen (tracts, block groups or other "
            "boundaries can give other figures). People were placed by a settlement mask "
            "(dasymetric apportionment): each area's people are assumed to live only on its "
            "settled land, spread evenly over it; the mask's accuracy and date bound the "
            "figures."
        )
    else:
        text = (
            "Results depend on the areal units chosen (tracts, block groups or other "
            "boundaries can give other figures). People were counted where they live, by "
            "census block: each block's covered fraction weights its people, who are assumed "
            "to be spread evenly within the block; the area counts are the blocks' sums "
            "(decennial census counts, which may differ from survey estimates of the same "
            "areas)."
        )
    return [text if AREAL_CAUTION_PART in c else c for c in cautions]


# --- comparisons and sweeps ------------------------------------------------------------------

#: Why the reach sweep stays areal when people are placed within areas.
RADIUS_AREAL_NOTE = (
    "the reach sweep uses areal covered fractions: counting people by {method} would need "
    "the people placed again for every reach; the served-threshold sweep uses the covered "
    "population shares"
)
#: How the change section's group rates read when people are placed within areas.
CHANGE_NOTE = (
    "served areas by covered population share ({method}); a group's covered rate on each side "
    "weights the group's people in each area by the area's covered population share"
)


def placement(spec: Any) -> str:
    """How the audit placed people within areas: "blocks", "dasymetric" or "areal"."""
    if getattr(spec, "dasymetric", None) is not None:
        return "dasymetric"
    return "blocks" if getattr(spec, "blocks", None) is not None else "areal"


def served_basis(frame: pd.DataFrame) -> np.ndarray:
    """Return the per-area value compared with the served threshold, as ``run`` does.

    The covered population share where people were placed within areas (blocks or a
    settlement mask), else the areal covered fraction.
    """
    column = (
        "covered_population_share"
        if "covered_population_share" in frame.columns
        else "covered_fraction"
    )
    return frame[column].to_numpy(dtype=float)


def further_footprint(
    spec: Any, inputs: Any, footprint: Any, frame: gpd.GeoDataFrame, fraction: np.ndarray
) -> tuple[np.ndarray, dict[str, np.ndarray] | None]:
    """Return a further footprint's served basis and covered people, placed like the first.

    Parameters
    ----------
    spec : AuditSpec
    inputs : AreaInputs
        Its records and exclusions are not touched (the first footprint recorded them).
    footprint : Footprint
        A footprint after the first.
    frame : geopandas.GeoDataFrame
        The analysed areas (already apportioned once: counts summed from blocks).
    fraction : numpy.ndarray
        The footprint's areal covered fraction of each area.

    Returns
    -------
    numpy.ndarray, dict or None
        Each area's covered population share and each group's covered people, by the
        spec's blocks or mask; with neither, ``fraction`` itself and None (areal).
    """
    if placement(spec) == "areal":
        return np.asarray(fraction, dtype=float), None
    placed = apportion(
        spec, inputs, footprint, frame.assign(covered_fraction=fraction), record=False
    )
    if len(placed.frame) != len(frame):  # the same blocks: no further area can drop out
        raise AnalysisError(
            f"footprint '{getattr(footprint, 'name', '')}' was apportioned over "
            f"{len(placed.frame)} areas, not the {len(frame)} analysed"
        )
    return placed.share, placed.covered


def sweep_apportionment(spec: Any, footprint: Any) -> dict[str, Any]:
    """Keys of the sensitivity section saying how each sweep placed people.

    Empty for an areal audit (nothing differs from ``coverage.apportionment = "areal"``).
    """
    method = placement(spec)
    if method == "areal":
        return {}
    out: dict[str, Any] = {"apportionment": method}
    if getattr(footprint, "kind", None) == "points":
        out["radius_apportionment"] = "areal"
        out["radius_note"] = RADIUS_AREAL_NOTE.format(method=method)
    return out


def change_apportionment(spec: Any) -> dict[str, Any]:
    """Keys of the change section saying how its served areas and rates were counted.

    Empty for an areal audit.
    """
    method = placement(spec)
    if method == "areal":
        return {}
    return {"apportionment": method, "apportionment_note": CHANGE_NOTE.format(method=method)}
