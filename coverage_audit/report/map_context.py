"""Map context: the areas outside the study area, changed sites, group labels.

Small overlays the map page draws around the analysed areas: the areas outside the study
area, greyed and without figures; the sites closed and opened between two footprints
(from summary.json's ``change`` section); and the display labels of the groups.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import geopandas as gpd
import numpy as np
import shapely

from .shapes import empty_shapes, encode_shapes, has_polygon


def group_label(summary: Mapping[str, Any], group: str) -> str:
    """Return a group's display label (``summary["group_labels"]``; its name without)."""
    labels = summary.get("group_labels")
    return str(labels.get(group, group)) if isinstance(labels, Mapping) else str(group)


#: Colours of sites closed and opened between two footprints.
SITE_CHANGE_COLORS = {"closed": "#9a5b00", "opened": "#1f6f6b"}


def site_change_overlay(summary: Mapping[str, Any]) -> dict[str, Any] | None:
    """Return the sites closed and opened between two footprints (summary ``change``)."""
    rows = (summary.get("change") or {}).get("site_changes") or []
    if not rows:
        return None
    change = summary.get("change") or {}
    return {
        "key": "site_changes",
        "label": f"Sites closed and opened ({change.get('before')} to {change.get('after')})",
        "kind": "sites",
        "names": [f"{r['name']} ({r['change']})" for r in rows],
        "lon": [r["lon"] for r in rows],
        "lat": [r["lat"] for r in rows],
        "colors": [SITE_CHANGE_COLORS.get(r["change"], "#555555") for r in rows],
        "visible": True,
        "legend": [
            {"color": c, "kind": "dot", "label": f"site {k}"}
            for k, c in SITE_CHANGE_COLORS.items()
            if any(r["change"] == k for r in rows)
        ],
    }


#: Fill of the areas outside the study area (greyed: not analysed).
OUTSIDE_COLOR = "#a3a3a3"


def outside_overlay(outside: gpd.GeoSeries, tolerance: float, decimals: int) -> dict[str, Any]:
    """Return the areas outside the study area as one greyed overlay, below the others."""
    geoms = shapely.get_parts(np.asarray(outside.values))
    if tolerance > 0:
        geoms = shapely.simplify(geoms, tolerance, preserve_topology=True)
    lonlat = np.asarray(gpd.GeoSeries(geoms, crs=outside.crs).to_crs(4326).values)
    lonlat = lonlat[has_polygon(lonlat)]
    return {
        "key": "outside_study_area",
        "label": "Outside the study area (not analysed)",
        "kind": "outline",
        "shapes": encode_shapes(lonlat, decimals) if lonlat.size else empty_shapes(),
        "color": "#8c8c8c",
        "weight": 0.5,
        "dash": None,
        "fill_color": OUTSIDE_COLOR,
        "fill_opacity": 0.7,
        "visible": True,
        "legend": [{"color": OUTSIDE_COLOR, "kind": "box", "label": "outside the study area"}],
    }
