"""Outputs: summary.json, areas.csv, areas.gpkg, exclusions.csv, manifest.json; atomic.

Takes an :class:`~coverage_audit.audit.AuditResult` and writes the output contract of
DESIGN.md into a folder. Every file is written to a temporary name in the same folder and
moved into place with :func:`os.replace`, so a reader never sees a half-written file and an
interrupted run leaves the previous outputs whole. ``summary.json`` holds no times or
absolute paths, so the same spec gives the same bytes.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio

from ._util import to_jsonable
from .errors import InputError


@contextlib.contextmanager
def atomic_path(target: Path, suffix: str = "") -> Iterator[Path]:
    """Yield a temporary path beside ``target``; move it over ``target`` on success."""
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(
        prefix=f".{target.name}.", suffix=suffix or target.suffix, dir=target.parent
    )
    os.close(fd)
    tmp_path = Path(tmp)
    # mkstemp makes the file private (0600); give outputs the usual permissions.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp_path, 0o666 & ~umask)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def write_text(target: Path, text: str) -> None:
    """Write text (UTF-8, Unix newlines) atomically."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")


def json_text(data: Any) -> str:
    """Deterministic JSON: insertion order kept, NaN refused, two-space indent."""
    return json.dumps(to_jsonable(data), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(target: Path, data: Any) -> None:
    """Write JSON atomically."""
    write_text(target, json_text(data))


def write_csv(target: Path, frame: pd.DataFrame) -> None:
    """Write a CSV atomically (float columns with full precision, no index)."""
    with atomic_path(target) as tmp:
        frame.to_csv(tmp, index=False, lineterminator="\n")


def write_gpkg(target: Path, frame: gpd.GeoDataFrame, layer: str) -> None:
    """Write a one-layer GeoPackage atomically."""
    with atomic_path(target, suffix=".gpkg") as tmp:
        tmp.unlink()  # GDAL wants to create the file itself
        pyogrio.write_dataframe(frame, tmp, layer=layer, driver="GPKG")


def areas_for_output(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Per-area table for CSV/GPKG: booleans and missing values in portable form."""
    out = frame.copy()
    for column in out.columns:
        if column == out.geometry.name:
            continue
        series = out[column]
        if pd.api.types.is_bool_dtype(series.dtype):
            out[column] = series.astype(bool)
        elif series.dtype == object:
            out[column] = series.map(
                lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else v
            )
    return out


def prepare_output_dir(out_dir: Path) -> Path:
    """Create ``out_dir`` (and parents); refuse a path that is a file."""
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"output path '{out_dir}' is a file; name a folder")
    out_dir.mkdir(parents=True, exist_ok=True)
    return out_dir


def write_all(
    out_dir: Path,
    *,
    summary: dict[str, Any],
    areas: gpd.GeoDataFrame,
    exclusions: pd.DataFrame,
    manifest_fn: Callable[[], dict[str, Any]] | None = None,
) -> dict[str, Path]:
    """Write the data outputs; the manifest last, so it can list what was written.

    With ``manifest_fn=None`` the manifest is left to the caller, who writes it once
    everything else (map, report) is written.
    """
    out_dir = prepare_output_dir(out_dir)
    paths = {
        "summary": out_dir / "summary.json",
        "areas_csv": out_dir / "areas.csv",
        "areas_gpkg": out_dir / "areas.gpkg",
        "exclusions": out_dir / "exclusions.csv",
        "manifest": out_dir / "manifest.json",
    }
    write_json(paths["summary"], summary)
    table = areas_for_output(areas)
    write_csv(paths["areas_csv"], pd.DataFrame(table.drop(columns=table.geometry.name)))
    write_gpkg(paths["areas_gpkg"], table, layer="areas")
    write_csv(paths["exclusions"], exclusions)
    if manifest_fn is not None:
        write_json(paths["manifest"], manifest_fn())
    return paths
