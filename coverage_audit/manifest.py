"""The manifest of an audit: provenance, versions, input digests, times.

manifest.json holds what summary.json must not (times, versions, absolute paths), so that
summary.json is byte-identical across reruns while the manifest says how to rerun.
"""

from __future__ import annotations

import datetime as _dt
import platform
from importlib import metadata
from typing import Any

from ._util import to_jsonable
from ._version import __version__
from .footprint import Footprint
from .inputs import AreaInputs, InputRecord
from .spec import AuditSpec

#: Libraries whose versions go into the manifest.
LIBRARIES = (
    "numpy",
    "pandas",
    "shapely",
    "pyproj",
    "pyogrio",
    "geopandas",
    "libpysal",
    "esda",
    "scipy",
    "statsmodels",
    "folium",
    "xstatic-leaflet",
    "matplotlib",
)


def library_versions() -> dict[str, str | None]:
    """Installed versions of the libraries the results depend on."""
    out: dict[str, str | None] = {}
    for name in LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out


def to_plain(value: Any) -> Any:
    """Return a dataclass or object as plain data for the manifest."""
    if hasattr(value, "__dataclass_fields__"):
        return to_jsonable(value)
    return str(value)


def build_manifest(
    spec: AuditSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    started: _dt.datetime,
    finished: _dt.datetime,
    later: tuple[InputRecord, ...] = (),
) -> dict[str, Any]:
    """Provenance of an audit: everything needed to rerun it and check its inputs.

    ``later`` are the records of the inputs read for the further analyses (other
    footprints, the activity table), listed after the areas' and before the footprint's.
    """
    records = [r.to_dict() for r in (*inputs.inputs, *later)]
    records += [r.to_dict() for r in footprint.records]
    return {
        "tool": "coverage_audit",
        "version": __version__,
        "python": platform.python_version(),
        "libraries": library_versions(),
        "spec_file": str(spec.source) if spec.source else None,
        "spec": spec.to_dict(),
        "inputs": records,
        "source_crs": inputs.source_crs.to_string(),
        "analysis_crs": inputs.analysis_crs.srs,
        "analysis_crs_wkt": inputs.analysis_crs.to_wkt(),
        "seed": spec.analysis.seed,
        "footprint": footprint.manifest(),
        "display": {
            "id_column": inputs.id_column,
            "groups": list(inputs.groups),
            "reference": inputs.reference,
        },
        "started": started.isoformat(timespec="seconds"),
        "finished": finished.isoformat(timespec="seconds"),
    }
