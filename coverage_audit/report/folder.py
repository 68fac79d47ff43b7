"""The map and the report from a written output folder alone.

An audit writes, beside the data outputs, what the map and the report draw that the
tables do not hold: ``footprint.gpkg`` (layer ``footprint``: the dissolved footprint;
``sites``: the service points of a points footprint; ``outside_study_area``: the areas
left outside a ``[study_area]``) and ``moran_lag.csv`` (the spatial lag ``W z`` of the
standardised covered fraction under the Moran statistics' row-standardised weights, one
row per area in the statistics, as the findings carry it:
:attr:`coverage_audit.results.AuditFindings.moran_lag`). :func:`render_folder` draws map.html and report.html from
those files and summary.json, manifest.json, areas.gpkg and exclusions.csv; the audit
itself draws them with the same function from the same data, so ``coverage-audit report
FOLDER`` gives the same pages the run wrote.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio

from ..errors import InputError
from ..outputs import atomic_path, write_csv
from ..progress import SilentProgress
from .map import build_map
from .markup import Findings, summary_data
from .page import build_report

#: Files the map and the report are drawn from, besides the data outputs.
FOOTPRINT_FILE = "footprint.gpkg"
MORAN_FILE = "moran_lag.csv"


@dataclass(frozen=True)
class Display:
    """What the map and the report need besides the summary, manifest and tables.

    Attributes
    ----------
    id_column : str
        The area id column of ``areas``.
    groups : tuple of str
        Group names in display order.
    reference : str
        The reference group.
    footprint : mapping
        The footprint as :func:`~coverage_audit.report.build_map` takes it.
    outside : geopandas.GeoSeries or None
        Areas outside the study area.
    moran_lag : numpy.ndarray or None
        One value per area (NaN where the area is not in the spatial statistics).
    """

    id_column: str
    groups: tuple[str, ...]
    reference: str
    footprint: Mapping[str, Any]
    outside: gpd.GeoSeries | None = None
    moran_lag: np.ndarray | None = None


def write_display(out: Path, display: Display, areas: gpd.GeoDataFrame) -> dict[str, Path]:
    """Write footprint.gpkg and (when there is a lag) moran_lag.csv into ``out``."""
    fp = display.footprint
    paths = {"footprint": out / FOOTPRINT_FILE}
    layers: list[tuple[str, gpd.GeoDataFrame]] = [
        (
            "footprint",
            gpd.GeoDataFrame(
                {
                    "kind": [fp["kind"]],
                    "name": [fp["name"]],
                    "radius_m": [fp.get("radius_m")],
                },
                geometry=list(fp["geometry"]),
                crs=fp["geometry"].crs,
            ),
        )
    ]
    if fp.get("points") is not None:
        layers.append(("sites", fp["points"]))
    if display.outside is not None:
        layers.append(("outside_study_area", gpd.GeoDataFrame(geometry=display.outside)))
    with atomic_path(paths["footprint"], suffix=".gpkg") as tmp:
        tmp.unlink()  # GDAL wants to create the file itself
        for k, (layer, frame) in enumerate(layers):
            pyogrio.write_dataframe(frame, tmp, layer=layer, driver="GPKG", append=k > 0)
    moran = out / MORAN_FILE
    if display.moran_lag is not None:
        keep = np.isfinite(display.moran_lag)
        table = pd.DataFrame(
            {
                "id": areas[display.id_column].astype(str).to_numpy()[keep],
                "moran_lag": display.moran_lag[keep],
            }
        )
        write_csv(moran, table)
        paths["moran_lag"] = moran
    elif moran.exists():
        moran.unlink()  # a lag from an earlier run would not belong to these areas
    return paths


def render(
    out: Path,
    *,
    summary: Mapping[str, Any] | Findings,
    manifest: Mapping[str, Any],
    areas: gpd.GeoDataFrame,
    exclusions: pd.DataFrame,
    display: Display,
    progress: Any,
    output: Mapping[str, Any] | None = None,
) -> tuple[dict[str, Path], dict[str, Any]]:
    """Draw map.html and report.html as ``output`` (the spec's ``[output]``) asks.

    ``summary`` is the audit's typed findings or summary.json's content as read. Without
    ``output``, the manifest's resolved spec says. Returns the paths written and the
    map's description for the manifest.
    """
    summary = summary_data(summary)
    if output is None:
        output = manifest.get("spec", {}).get("output", {})
    paths: dict[str, Path] = {}
    extra: dict[str, Any] = {}
    if output.get("map", True):
        with progress.stage("drawing the map"):
            info = build_map(
                areas,
                id_column=display.id_column,
                groups=list(display.groups),
                reference=display.reference,
                footprint=display.footprint,
                summary=summary,
                title=summary.get("title") or "",
                path=out / "map.html",
                tiles=bool(output.get("tiles", False)),
                outside=display.outside,
            )
        paths["map"] = out / "map.html"
        extra["map"] = info
    if output.get("report", True):
        with progress.stage("writing the report"):
            build_report(
                summary,
                manifest,
                areas,
                exclusions=exclusions,
                id_column=display.id_column,
                groups=list(display.groups),
                reference=display.reference,
                footprint=display.footprint,
                path=out / "report.html",
                moran_lag=display.moran_lag,
            )
        paths["report"] = out / "report.html"
    return paths, extra


def _read_json(path: Path) -> Any:
    if not path.is_file():
        raise InputError(
            f"output folder: {path} is missing; name a folder written by 'coverage-audit run'"
        )
    return json.loads(path.read_text(encoding="utf-8"))


def read_folder(
    folder: str | Path,
) -> tuple[dict[str, Any], dict[str, Any], gpd.GeoDataFrame, pd.DataFrame, Display]:
    """Read what :func:`render` needs from a written output folder.

    Raises
    ------
    InputError
        If a file is missing or the folder was written by a version that did not write
        the display files.
    """
    folder = Path(folder)
    summary = _read_json(folder / "summary.json")
    manifest = _read_json(folder / "manifest.json")
    manifest.pop("outputs", None)
    settings = manifest.get("display")
    for name in ("areas.gpkg", "exclusions.csv", FOOTPRINT_FILE):
        if not (folder / name).is_file():
            raise InputError(
                f"output folder: {folder / name} is missing; rerun the audit to write it"
            )
    if not isinstance(settings, Mapping):
        raise InputError(
            f"output folder: {folder / 'manifest.json'} has no 'display' section (written by "
            "an older version); rerun the audit"
        )
    id_column = str(settings["id_column"])
    areas = pyogrio.read_dataframe(folder / "areas.gpkg", layer="areas")
    areas[id_column] = areas[id_column].astype(str)
    # Only an empty cell is missing: ids such as HMDA's "NA" stay text.
    exclusions = pd.read_csv(
        folder / "exclusions.csv",
        dtype={"source": str, "id": str, "reason": str},
        keep_default_na=False,
        na_values=[""],
    )
    exclusions["row"] = exclusions["row"].astype("Int64")
    layers = {str(name) for name, _ in pyogrio.list_layers(folder / FOOTPRINT_FILE)}
    fp = pyogrio.read_dataframe(folder / FOOTPRINT_FILE, layer="footprint")
    footprint: dict[str, Any] = {
        "kind": str(fp["kind"].iloc[0]),
        "name": str(fp["name"].iloc[0]),
        "geometry": fp.geometry.reset_index(drop=True),
    }
    if "sites" in layers:
        footprint["points"] = pyogrio.read_dataframe(folder / FOOTPRINT_FILE, layer="sites")
        footprint["radius_m"] = float(fp["radius_m"].iloc[0])
    outside = None
    if "outside_study_area" in layers:
        outside = pyogrio.read_dataframe(
            folder / FOOTPRINT_FILE, layer="outside_study_area"
        ).geometry
    lag = None
    if (folder / MORAN_FILE).is_file():
        table = pd.read_csv(
            folder / MORAN_FILE,
            dtype={"id": str},
            keep_default_na=False,
            float_precision="round_trip",
        )
        lag = np.full(len(areas), np.nan)
        where = pd.Index(areas[id_column]).get_indexer(table["id"])
        if (where < 0).any():
            raise InputError(
                f"output folder: {folder / MORAN_FILE} names areas not in areas.gpkg; rerun "
                "the audit"
            )
        lag[where] = table["moran_lag"].to_numpy(dtype=float)
    display = Display(
        id_column=id_column,
        groups=tuple(settings["groups"]),
        reference=str(settings["reference"]),
        footprint=footprint,
        outside=outside,
        moran_lag=lag,
    )
    return summary, manifest, areas, exclusions, display


def render_folder(folder: str | Path, *, progress: Any = None) -> dict[str, Path]:
    """Re-draw map.html and report.html of a written output folder from its files alone."""
    summary, manifest, areas, exclusions, display = read_folder(folder)
    paths, _ = render(
        Path(folder),
        summary=summary,
        manifest=manifest,
        areas=areas,
        exclusions=exclusions,
        display=display,
        progress=progress or SilentProgress(),
    )
    return paths
