"""Boundary files as downloaded: TIGER/Line and cartographic boundary zips.

Takes a layer read by :func:`coverage_audit.inputs.read_layer` (GDAL reads a zipped
shapefile without unpacking) and finds what a user should not have to name: the GEOID
field (``GEOID``, ``GEOID20``, ``GEOID10``, or ``GEOIDFQ``/``GEO_ID`` with their summary-level
prefix), the layout (TIGER/Line ``tl_YYYY_SS_tract``, cartographic ``cb_YYYY_SS_tract_500k``,
else the file type), and the water-only areas (``ALAND = 0``). Layouts as published by the
Census Bureau (REFERENCES.md); their geographic CRS is NAD83 (EPSG:4269), read from the
``.prj`` like any other.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError

#: GEOID fields of Census boundary files, in the order they are preferred.
ID_FIELDS = ("GEOID", "GEOID20", "GEOID10", "GEOIDFQ", "GEOIDFQ20", "GEO_ID", "geoid", "GEOID_")
#: Land-area fields (square metres).
LAND_FIELDS = ("ALAND", "ALAND20", "ALAND10")
_TIGER_RE = re.compile(r"^(tl|cb)_(\d{4})_(\w+?)_(\w+?)(_\d+k)?(\.\w+)*$", re.IGNORECASE)
_PREFIX_RE = re.compile(r"^\d{7}US")


def detect_id_column(columns: list[str], path: Path) -> str:
    """Return the GEOID field of a boundary layer.

    Raises
    ------
    InputError
        When the layer has none of the known GEOID fields.
    """
    for name in ID_FIELDS:
        if name in columns:
            return name
    raise InputError(
        f"areas file '{path}' has no GEOID field (looked for {list(ID_FIELDS)}); name the id "
        f'column in [areas] with id = "COLUMN" (its columns are {columns[:15]})'
    )


def strip_prefix(ids: pd.Series) -> pd.Series:
    """Remove a summary-level prefix (``1400000US``) from fully qualified GEOIDs."""
    return ids.map(lambda v: _PREFIX_RE.sub("", v) if isinstance(v, str) else v)


def describe_layout(path: Path, driver: str | None = None) -> str:
    """Name the layout of a boundary file from its name and type."""
    name = path.name
    match = _TIGER_RE.match(name)
    kind = path.suffix.lower().lstrip(".") or "file"
    zipped = " (zip)" if path.suffix.lower() == ".zip" else ""
    if match:
        family = "TIGER/Line" if match.group(1).lower() == "tl" else "cartographic boundary"
        return f"{family} {match.group(4)} file, {match.group(2)}{zipped}"
    return f"{driver or kind} layer{zipped}"


def water_only(frame: pd.DataFrame) -> np.ndarray:
    """Mask of areas with no land (``ALAND = 0``): water-only tracts such as coastal ones."""
    for name in LAND_FIELDS:
        if name in frame.columns:
            land = pd.to_numeric(frame[name], errors="coerce")
            return (land == 0).to_numpy()
    return np.zeros(len(frame), dtype=bool)
