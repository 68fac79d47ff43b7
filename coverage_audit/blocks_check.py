"""``coverage-audit check`` of a spec's ``[blocks]``: read every block as ``run`` would.

Takes the spec, the analysed areas and their exclusions, and reads the block layer
partition by partition (a county file of a prepared dataset at a time, or the one file
whole), checks each block as the audit does, and matches each block's GEOID prefix to the
analysed areas, without measuring coverage (no footprint is needed). Gives the lines that
``check`` prints; the blocks and areas the audit would leave out are added to the
exclusions, with the audit's reasons; a layer with no block in an analysed area raises
the audit's error.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np

from ._util import safe_ratio
from .apportion import (
    NO_BLOCK_REASON,
    NO_CRS,
    NO_MATCH,
    SCALE,
    PartitionSums,
    Task,
    _block_task,
    _check_county,
    block_sums,
    combine,
)
from .errors import InputError
from .io.blocks import check_columns, clean_blocks, dataset_files, is_partitioned, read_blocks

#: How ``check`` names a block file by its suffix.
LAYOUTS = {
    ".parquet": "GeoParquet",
    ".geoparquet": "GeoParquet",
    ".gpkg": "GeoPackage",
    ".zip": "zipped Shapefile",
    ".shp": "Shapefile",
}


def _partition(frame: gpd.GeoDataFrame, task: Task, path: str) -> PartitionSums:
    """Check and sum one partition's blocks by area (no covered fraction: zeros)."""
    check_columns(frame, task.columns, path)
    if frame.crs is None:
        raise InputError(NO_CRS.format(path=path))
    clean = clean_blocks(frame, task.columns)
    _check_county(clean, path)
    return block_sums(clean, np.zeros(len(clean.ids)), task)


def check_blocks(spec: Any, inputs: Any) -> list[str]:
    """Read and check ``[blocks]`` against the analysed areas; return the lines to print.

    Parameters
    ----------
    spec : AuditSpec
        With ``blocks`` set.
    inputs : AreaInputs
        The analysed areas (after any study area); its exclusions receive the blocks and
        areas the audit would leave out.

    Raises
    ------
    InputError
        As the audit would: the areas' ids are not 11- or 12-digit GEOIDs, the file or a
        column is missing, the layer has no CRS, or no block falls in an analysed area.
    """
    bspec = spec.blocks
    frame = inputs.frame
    id_col = inputs.id_column
    ids = frame[id_col].astype(str).to_numpy()
    task, names = _block_task(spec, inputs, ids, None)
    path = Path(bspec.path)
    parts: list[PartitionSums] = []
    if is_partitioned(path):
        files = dataset_files(path)
        kind = f"prepared dataset, {len(files)} files"
        for f in files:
            parts.append(_partition(gpd.read_parquet(f), task, str(f)))
    else:
        kind = LAYOUTS.get(path.suffix.lower(), path.suffix.lstrip(".") or "file")
        parts.append(_partition(read_blocks(path, task.columns), task, str(path)))
    rows = sum(p.rows for p in parts)
    excluded = sorted(
        (e for p in parts for e in p.excluded), key=lambda e: (e[0], e[1] or "", e[2])
    )
    sums = combine(parts, len(names))
    matched = int(sums["blocks"].sum()) if len(sums) else 0
    has = np.isin(ids, sums.index.to_numpy())
    if not has.any():
        raise InputError(NO_MATCH.format(path=bspec.path))
    inputs.exclusions.add(
        "blocks", [e[0] for e in excluded], [e[1] for e in excluded], [e[2] for e in excluded]
    )
    inputs.exclusions.add(
        "areas", frame.loc[~has, "source_row"], frame.loc[~has, id_col], NO_BLOCK_REASON
    )
    prefix_misses = sum(1 for e in excluded if e[2].startswith("no analysed area has GEOID"))
    usable = matched + prefix_misses
    rate = safe_ratio(float(matched), float(usable))
    people = float(sums["n0"].sum()) / SCALE
    own = float(frame["population"].to_numpy(dtype=float)[has].sum())
    lines = [
        f"blocks: {bspec.path} ({kind}), id column {bspec.id}: {rows} rows, {matched} would "
        f"be used, {len(excluded)} excluded",
        f"  block GEOID prefixes ({task.width} digits) matched {matched} of {usable} valid "
        "blocks to analysed areas" + ("" if rate is None else f" ({rate:.1%})"),
        f"  areas with blocks: {int(has.sum())} of {len(ids)}"
        + (f"; {int((~has).sum())} would be excluded (no block)" if (~has).any() else ""),
        f"  people ({bspec.total}): {people:,.0f} in the blocks of those areas; the areas' own "
        f"total {own:,.0f}",
    ]
    return lines
