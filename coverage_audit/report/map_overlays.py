"""The map's overlays: the footprint (polygons, reach circles, listed areas), the enclaves.

Each overlay is plain data for the page script (report/map.js): GeoJSON-like shapes in
longitude and latitude with the figures shown on hover, built from the footprint as the
output folder holds it and from the summary's enclaves.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .._util import clean_number
from ..geographic import shift_longitudes, unwrap_longitudes
from .shapes import encode_shapes
from .shapes import has_polygon as _has_polygon


def _footprint_overlays(
    footprint: Mapping[str, Any] | None,
    crs: Any,
    tolerance: float,
    decimals: int,
    centre: float = float("nan"),
) -> list[dict[str, Any]]:
    if footprint is None:
        return []
    kind = footprint["kind"]
    name = str(footprint.get("name") or "footprint")
    out: list[dict[str, Any]] = []
    if kind in ("polygons", "ids", "zips") and footprint.get("geometry") is not None:
        geo = footprint["geometry"]
        series = geo.geometry if isinstance(geo, gpd.GeoDataFrame) else gpd.GeoSeries(geo)
        if series.crs is None:
            series = series.set_crs(crs)
        geoms = series.values.to_numpy() if hasattr(series.values, "to_numpy") else series.values
        # Part by part: simplifying one dissolved multipolygon of thousands of circles
        # with topology preserved across all of it is ten times slower, for the same look.
        geoms = shapely.get_parts(np.asarray(geoms))
        if tolerance > 0:
            geoms = shapely.simplify(geoms, tolerance, preserve_topology=True)
        lonlat = gpd.GeoSeries(geoms, crs=series.crs).to_crs(4326).values
        lonlat = unwrap_longitudes(np.asarray(lonlat), centre)[0]  # one side of 180
        lonlat = np.asarray(lonlat)[_has_polygon(np.asarray(lonlat))]
        if lonlat.size:
            label = {
                "ids": "Footprint (listed areas)",
                "zips": "Footprint (areas of the ZIP codes)",
            }.get(kind, "Footprint")
            out.append(
                {
                    "key": "footprint",
                    "label": f"{label}: {name}",
                    "kind": "outline",
                    "shapes": encode_shapes(lonlat, decimals),
                    "color": "#111111",
                    "weight": 2,
                    "dash": "6 4",
                    "fill_color": "#111111",
                    "fill_opacity": 0.04,
                    "visible": True,
                    "legend": [{"color": "#111111", "kind": "dash", "label": "footprint edge"}],
                }
            )
    if kind == "points":
        points = footprint["points"]
        pts = points.geometry if isinstance(points, gpd.GeoDataFrame) else gpd.GeoSeries(points)
        if pts.crs is None:
            pts = pts.set_crs(crs)
        pts = pts[~(pts.is_empty | pts.isna())].to_crs(4326)
        radius = clean_number(footprint.get("radius_m"))
        legend = [{"color": "#1f1f1f", "kind": "dot", "label": "service point"}]
        if radius:
            legend.append(
                {"color": "#5a3d8a", "kind": "line", "label": f"reach: {radius:,.0f} m radius"}
            )
        named = next((c for c in ("name", "site_name", "site_id") if c in points.columns), None)
        out.append(
            {
                "key": "points",
                "label": f"Service points: {name}",
                "kind": "points",
                # Site names show when pointing at a site.
                "names": (
                    [str(v) for v in points.loc[pts.index, named]] if named is not None else None
                ),
                "lon": np.round(shift_longitudes(pts.x.to_numpy(), centre), 6).tolist(),
                "lat": np.round(pts.y.to_numpy(), 6).tolist(),
                "radius_m": radius,
                "color": "#1f1f1f",
                "reach_color": "#5a3d8a",
                "visible": True,
                "legend": legend,
            }
        )
    return out


def _enclave_overlay(
    display: gpd.GeoSeries, enclave: pd.Series, decimals: int, centre: float = float("nan")
) -> dict[str, Any] | None:
    ids = enclave.where(enclave.notna(), None)
    mask = ids.notna().to_numpy()
    if not mask.any():
        return None
    frame = gpd.GeoDataFrame(
        {"enclave": ids[mask].astype(str).to_numpy()},
        geometry=display.values[mask],
        crs=display.crs,
    )
    dissolved = frame.dissolve(by="enclave", sort=False)
    # Natural order E1, E2, ..., E10 rather than the string order E1, E10, E2.
    keys = sorted(dissolved.index, key=lambda s: (len(s), s))
    dissolved = dissolved.loc[keys].to_crs(4326)
    geoms = unwrap_longitudes(np.asarray(dissolved.geometry.values), centre)[0]
    has = _has_polygon(geoms)
    return {
        "key": "enclaves",
        "label": "Enclaves",
        "kind": "outline",
        "shapes": encode_shapes(geoms[has], decimals),
        "labels": [str(k) for k, h in zip(keys, has, strict=True) if h],
        "color": "#111111",
        "casing": "#ffffff",
        "weight": 2.5,
        "dash": None,
        "fill_color": None,
        "visible": True,
        "legend": [{"color": "#111111", "kind": "line", "label": "unserved enclave (labelled)"}],
    }


def _enclave_info(summary: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    info: dict[str, dict[str, Any]] = {}
    for item in summary.get("enclaves") or []:
        if isinstance(item, Mapping) and item.get("id") is not None:
            info[str(item["id"])] = {
                "population": clean_number(item.get("population")),
                "p_value": clean_number(item.get("p_value")),
                "surround_share": clean_number(item.get("surround_share")),
            }
    return info
