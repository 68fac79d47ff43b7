"""Interactive offline map: analysed areas, switchable views, overlays, one ``map.html``.

Takes the analysed areas (a GeoDataFrame in the projected analysis CRS with the columns
the pipeline adds: ``covered_fraction``, ``served``, ``<group>_share``, ``income_tier``,
``lisa_cluster``, ``enclave_id`` ...), the footprint and the summary, and gives one
self-contained HTML page built on folium/Leaflet that works with no network: Leaflet is
inlined from the installed package, areas are drawn once on a canvas and restyled when the
reader picks another view, and geometry is simplified for display only (the shared
coverage is simplified as a whole, so neighbours keep their common edges). Every value
from the inputs reaches the page as JSON data and is shown with ``textContent``.
"""

from __future__ import annotations

import html
import json
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import folium
import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from branca.element import Element, Figure, MacroElement
from jinja2 import Template

from .._util import clean_number, to_jsonable
from ..errors import InputError, SpecError
from ..geographic import data_centre, unwrap_longitudes
from ..outputs import write_bytes
from . import assets
from .map_context import group_label, outside_overlay, site_change_overlay
from .map_fields import (
    _bool_codes,
    _category_codes,
    _check_footprint,
    _nullable,
    _scaled_fraction,
    _share_series,
)
from .map_geometry import (
    EXTENT_FRACTION,
    SMALL_AREA_FRACTION,
    _coordinate_decimals,
    _simplify,
    _unit_metres,
    display_tolerance,
)
from .map_overlays import _enclave_info, _enclave_overlay, _footprint_overlays
from .map_style import (
    CF_SCALE,
    COVERED_COLORS,
    COVERED_LABELS,
    COVERED_THRESHOLDS,
    FOOTPRINT_KINDS,
    INCOME_COLORS,
    INCOME_TIERS,
    LISA_COLORS,
    LISA_LABELS,
    MAJORITY_MINORITY_COLORS,
    SERVED_COLORS,
    SHARE_COLORS,
    SHARE_LABELS,
    SHARE_SCALE,
    SHARE_THRESHOLDS,
)
from .markup import Findings, summary_data
from .shapes import empty_shapes as _empty_shapes
from .shapes import encode_shapes
from .shapes import has_polygon as _has_polygon
from .view import MISSING_COLOR, View

__all__ = [
    "CF_SCALE",
    "COVERED_COLORS",
    "COVERED_LABELS",
    "COVERED_THRESHOLDS",
    "EXTENT_FRACTION",
    "INCOME_COLORS",
    "LISA_COLORS",
    "MAJORITY_MINORITY_COLORS",
    "SERVED_COLORS",
    "SHARE_COLORS",
    "SHARE_LABELS",
    "SHARE_SCALE",
    "SHARE_THRESHOLDS",
    "SMALL_AREA_FRACTION",
    "FOOTPRINT_KINDS",
    "INCOME_TIERS",
    "LISA_LABELS",
    "MapInfo",
    "View",
    "build_map",
    "display_tolerance",
    "encode_shapes",
]


_TILES = {
    "label": "Base map (online tiles)",
    "url": "https://tile.openstreetmap.org/{z}/{x}/{y}.png",
    "attribution": "(c) OpenStreetMap contributors",
}


@dataclass(frozen=True)
class MapInfo:
    """What :func:`build_map` wrote, for the manifest.

    Attributes
    ----------
    path : str
        The written ``map.html``.
    n_features : int
        Number of area shapes drawn.
    bytes : int
        Size of the file.
    simplify_tolerance : float
        Display simplification tolerance in units of the areas' CRS (0 when none).
    simplify_units : str
        Unit of ``simplify_tolerance`` (``"m"`` for a projected CRS in metres).
    simplify_method : {"coverage", "per_area", "none"}
        ``coverage``: shapely.coverage_simplify on the whole tessellation (shared edges
        kept); ``per_area``: each area simplified on its own because the areas do not form
        a valid coverage; ``none``: no simplification.
    coordinate_decimals : int
        Decimal places of the longitude/latitude written to the page.
    n_without_geometry : int
        Areas not drawn because they have no polygonal geometry.
    views : tuple of str
        Keys of the views offered.
    overlays : tuple of str
        Keys of the overlays offered.
    """

    path: str
    n_features: int
    bytes: int
    simplify_tolerance: float
    simplify_units: str
    simplify_method: str
    coordinate_decimals: int
    n_without_geometry: int
    views: tuple[str, ...]
    overlays: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return the map facts as JSON-safe data."""
        return {
            "path": self.path,
            "n_features": self.n_features,
            "bytes": self.bytes,
            "simplify_tolerance": clean_number(self.simplify_tolerance),
            "simplify_units": self.simplify_units,
            "simplify_method": self.simplify_method,
            "coordinate_decimals": self.coordinate_decimals,
            "n_without_geometry": self.n_without_geometry,
            "views": list(self.views),
            "overlays": list(self.overlays),
        }


# --------------------------------------------------------------------------- page data


def _views(
    areas: pd.DataFrame,
    fields: dict[str, list[Any]],
    missing: dict[str, bool],
    groups: Sequence[str],
    reference: str,
    summary: Mapping[str, Any],
) -> list[View]:
    views: list[View] = []
    coverage = summary.get("coverage") or {}
    if "cf" in fields:
        views.append(
            View(
                key="covered",
                label="Covered fraction",
                title="Covered fraction of the area",
                field="cf",
                type="bins",
                colors=COVERED_COLORS,
                labels=COVERED_LABELS,
                thresholds=COVERED_THRESHOLDS,
                has_missing=missing["cf"],
            )
        )
    if "served" in fields:
        threshold = clean_number(coverage.get("served_threshold"))
        note = (
            f"Served: covered fraction >= {threshold:g}"
            if isinstance(threshold, (int, float))
            else None
        )
        views.append(
            View(
                key="served",
                label="Served / unserved",
                title="Served areas",
                field="served",
                type="codes",
                colors=SERVED_COLORS,
                labels=("unserved", "served"),
                has_missing=missing["served"],
                note=note,
            )
        )
    for k, group in enumerate(groups):
        field = f"s{k}"
        note = "reference group" if group == reference else None
        views.append(
            View(
                key=f"share:{group}",
                label=f"Share: {group_label(summary, group)}",
                title=f"Share of population: {group_label(summary, group)}",
                field=field,
                type="bins",
                colors=SHARE_COLORS,
                labels=SHARE_LABELS,
                thresholds=SHARE_THRESHOLDS,
                has_missing=missing[field],
                missing_label="no population",
                note=note,
            )
        )
    if "mm" in fields:
        views.append(
            View(
                key="majority_minority",
                label="Majority-minority areas",
                title="Majority-minority areas",
                field="mm",
                type="codes",
                colors=MAJORITY_MINORITY_COLORS,
                labels=("not majority-minority", "majority-minority"),
                has_missing=missing["mm"],
                missing_label="no population",
            )
        )
    if "tier" in fields:
        views.append(
            View(
                key="income_tier",
                label="Income tiers",
                title="Income tier (median family income, % of area median)",
                field="tier",
                type="codes",
                colors=INCOME_COLORS,
                labels=(
                    "low (< 50)",
                    "moderate (50-80)",
                    "middle (80-120)",
                    "upper (>= 120)",
                    "unknown",
                ),
                has_missing=missing["tier"],
            )
        )
    if "lisa" in fields:
        local = (summary.get("clustering") or {}).get("local_moran") or {}
        alpha = clean_number(local.get("alpha"))
        fdr = local.get("fdr")
        parts = ["Local Moran's I of the covered fraction"]
        if isinstance(alpha, (int, float)):
            parts.append(f"alpha {alpha:g}" + (" with FDR" if fdr else ""))
        views.append(
            View(
                key="lisa",
                label="LISA clusters",
                title="LISA clusters",
                field="lisa",
                type="codes",
                colors=LISA_COLORS,
                labels=LISA_LABELS,
                has_missing=missing["lisa"],
                missing_label="left out of the statistic",
                note="; ".join(parts),
            )
        )
    if "lsh" in fields:
        views.extend(_lending_views(missing, summary))
    return views


def _lending_views(missing: dict[str, bool], summary: Mapping[str, Any]) -> list[View]:
    """Return the lending review's layers: lender share of applications by tract, and gaps."""
    lender = (summary.get("lending") or {}).get("lender") or {}
    name = str(lender.get("name") or lender.get("lei") or "the lender")
    return [
        View(
            key="lender_share",
            label="Lender share of applications",
            title=f"{name}: share of all applications in the area",
            field="lsh",
            type="bins",
            colors=SHARE_COLORS,
            labels=SHARE_LABELS,
            thresholds=SHARE_THRESHOLDS,
            has_missing=missing["lsh"],
            missing_label="no applications",
            note="HMDA records in the review's years and markets",
        ),
        View(
            key="lending_gap",
            label="Lending gaps",
            title=f"Footprint areas with no or few applications to {name}",
            field="lgap",
            type="codes",
            colors=("#e4e1d8", "#c2423b"),
            labels=("not a gap", "lending gap"),
            has_missing=missing["lgap"],
        ),
    ]


def _texts(title: str, summary: Mapping[str, Any], n: int, footprint: Mapping | None) -> dict:
    subtitle: list[str] = []
    counts = summary.get("areas") or {}
    analysed = clean_number(counts.get("analysed"))
    analysed = int(analysed) if isinstance(analysed, (int, float)) else n
    subtitle.append(f"{analysed:,} areas analysed")
    excluded = clean_number(counts.get("excluded"))
    if isinstance(excluded, (int, float)) and excluded > 0:
        subtitle.append(f"{int(excluded):,} input rows excluded (see exclusions.csv)")
    if footprint is not None and footprint.get("name"):
        subtitle.append(f"Footprint: {footprint['name']}")
    subtitle.extend(_interval_lines(summary))
    out: dict[str, Any] = {
        "title": str(title),
        "subtitle": subtitle,
        "hover_hint": "Point at an area to see its figures.",
    }
    findings = summary.get("findings")
    if isinstance(findings, list) and findings and isinstance(findings[0], Mapping):
        out["finding"] = str(findings[0].get("sentence") or "")
        out["findings_link"] = {"href": "report.html#findings", "text": "All findings"}
    return out


def _interval_lines(summary: Mapping[str, Any]) -> list[str]:
    """Each group's coverage rate and ratio with 90% intervals, when margins were carried."""
    coverage = summary.get("coverage") or {}
    if coverage.get("uncertainty") not in ("delta", "replicates"):
        return []

    def pct(v: Any) -> str:
        return "n/a" if clean_number(v) is None else f"{100 * v:.1f}%"

    def num(v: Any) -> str:
        return "n/a" if clean_number(v) is None else f"{v:.2f}"

    lines = ["Coverage with 90% intervals (survey margins):"]
    for g, row in (coverage.get("groups") or {}).items():
        rate_ci = row.get("rate_ci90") or [None, None]
        ratio_ci = row.get("ratio_ci90") or [None, None]
        lines.append(
            f"{g}: {pct(row.get('rate'))} ({pct(rate_ci[0])} to {pct(rate_ci[1])}), ratio "
            f"{num(row.get('ratio'))} ({num(ratio_ci[0])} to {num(ratio_ci[1])}), four-fifths "
            f"{row.get('four_fifths_confidence') or 'n/a'}"
        )
    return lines


def _page_json(data: Mapping[str, Any]) -> str:
    r"""JSON for a ``<script type="application/json">`` block.

    ``<`` is written as ``\\u003c`` so no value can close the element, and the two line
    separators that older JavaScript parsers reject are escaped too.
    """
    text = json.dumps(data, separators=(",", ":"), allow_nan=False, ensure_ascii=False)
    return (
        text.replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("&", "\\u0026")
        .replace("\u2028", "\\u2028")
        .replace("\u2029", "\\u2029")
    )


# --------------------------------------------------------------------------- page


class _OfflineMap(folium.Map):
    """A folium Map that links no CDN: Leaflet is inlined by :func:`_render_page`."""

    default_js: list[tuple[str, str]] = []
    default_css: list[tuple[str, str]] = []


class _DrawCall(MacroElement):
    _template = Template(
        """
        {% macro script(this, kwargs) %}
        coverageAuditDraw({{ this._parent.get_name() }},
            JSON.parse(document.getElementById("ca-map-data").textContent));
        {% endmacro %}
        """
    )


# Placeholders filled after folium renders, so no input value ever passes through Jinja.
_HEAD_MARK = "<!--ca-head-assets-->"
_DATA_MARK = "<!--ca-map-data-->"


def _render_page(title: str, bounds: list[list[float]], data_json: str) -> str:
    (south, west), (north, east) = bounds
    fmap = _OfflineMap(
        location=[(south + north) / 2, (west + east) / 2],
        zoom_start=8,
        tiles=None,
        prefer_canvas=True,
        control_scale=True,
    )
    # folium names elements with random ids; a fixed one makes the page reproducible.
    fmap._id = "coverage_audit"
    root = fmap.get_root()
    if not isinstance(root, Figure):  # pragma: no cover - folium always makes a Figure
        raise RuntimeError("folium map is not inside a Figure")
    root.title = html.escape(title)
    root.header.add_child(Element('<meta charset="utf-8" />'), name="ca_charset", index=0)
    root.header.add_child(Element(_HEAD_MARK), name="ca_assets")
    root.html.add_child(Element(_DATA_MARK), name="ca_data")
    fmap.add_child(_DrawCall(), name="ca_draw")
    page = root.render()
    head = "\n".join(
        [
            assets.inline_style(assets.leaflet_css()),
            assets.inline_script(assets.leaflet_js()),
            assets.inline_style(assets.MAP_CSS),
            assets.inline_script(assets.MAP_JS),
        ]
    )
    if page.count(_HEAD_MARK) != 1 or page.count(_DATA_MARK) != 1:  # pragma: no cover
        raise RuntimeError("folium page template changed: asset placeholders not found once")
    page = page.replace(_HEAD_MARK, head)
    block = f'<script type="application/json" id="ca-map-data">{data_json}</script>'
    return page.replace(_DATA_MARK, block)


def _write_atomic(path: Path, text: str) -> int:
    return write_bytes(path, text.encode("utf-8"))


# --------------------------------------------------------------------------- public


def build_map(
    areas: gpd.GeoDataFrame,
    *,
    id_column: str,
    groups: Sequence[str],
    reference: str,
    footprint: Mapping[str, Any] | None = None,
    summary: Mapping[str, Any] | Findings | None = None,
    title: str,
    path: str | os.PathLike[str],
    tiles: bool = False,
    label_column: str | None = None,
    simplify_tolerance: float | None = None,
    outside: gpd.GeoSeries | None = None,
) -> MapInfo:
    """Write a self-contained, offline interactive map of the analysed areas.

    Parameters
    ----------
    areas : geopandas.GeoDataFrame
        One row per analysed area in the projected analysis CRS, with ``id_column``,
        ``geometry`` and as present ``population``, ``covered_fraction``, ``served``,
        ``<group>_share`` (or the group count and ``population``), ``majority_minority``,
        ``income_tier``, ``income_ratio``, ``nearest_site_m``, ``lisa_cluster``,
        ``lisa_p`` and ``enclave_id``. Views whose column is absent are left out.
    id_column : str
        Name of the area id column (string ids such as GEOIDs).
    groups : sequence of str
        Group names; each gets a share view.
    reference : str
        The reference group; must be one of ``groups``.
    footprint : dict, optional
        ``{"kind": "polygons" | "points" | "ids", "name": str, "geometry": GeoSeries}``;
        points also give ``"points"`` (GeoDataFrame) and ``"radius_m"``.
    summary : mapping or AuditFindings, optional
        The audit's findings (the typed tree, or summary.json's content); used for the served threshold, the
        LISA settings, the area counts and enclave figures. Missing parts are skipped.
    title : str
        Page title.
    path : path-like
        Where to write ``map.html`` (written atomically; parent folders are created).
    tiles : bool, default False
        Add an OpenStreetMap tile layer (needs the network when viewed); without it the
        map has a neutral background and needs nothing from outside.
    label_column : str, optional
        A column shown under the id when hovering (for example area names); defaults to
        ``name`` when the areas have such a column.
    simplify_tolerance : float, optional
        Display simplification tolerance in CRS units; ``None`` picks one from the
        region's extent (:func:`display_tolerance`), ``0`` keeps the geometry as is.
    outside : geopandas.GeoSeries, optional
        Areas outside the study area: drawn greyed, without figures; the initial view
        fits the analysed areas.

    Returns
    -------
    MapInfo
        Path, number of shapes drawn, size in bytes and simplification facts.

    Raises
    ------
    InputError
        A required column is missing, the areas have no CRS, or a category column holds
        an unknown value.
    SpecError
        ``reference`` is not one of ``groups``, a bad footprint kind, or a negative
        tolerance.

    Notes
    -----
    Simplification and rounding change what is drawn only; the analysis never sees them.
    """
    _check_areas(areas, id_column, groups, reference, label_column)
    _check_footprint(footprint)
    if simplify_tolerance is not None and not (simplify_tolerance >= 0):
        raise SpecError(
            f"simplify_tolerance was {simplify_tolerance!r} but must be >= 0 (CRS units) or "
            "None for automatic"
        )
    summary = {} if summary is None else summary_data(summary)
    if label_column is None and "name" in areas.columns and id_column != "name":
        label_column = "name"

    geoms = np.asarray(areas.geometry.values)
    drawable = _has_polygon(geoms)
    frame = areas.loc[drawable]
    tolerance = (
        display_tolerance(geoms[drawable])
        if simplify_tolerance is None
        else float(simplify_tolerance)
    )
    display, method = _simplify(geoms[drawable], tolerance)
    metres_per_unit, unit = _unit_metres(areas.crs)
    decimals = _coordinate_decimals(tolerance * metres_per_unit)
    display_series = gpd.GeoSeries(display, crs=areas.crs)
    lonlat = np.asarray(display_series.to_crs(4326).values)
    lonlat_has = _has_polygon(lonlat)
    if not lonlat_has.all():  # pragma: no cover - reprojection keeps polygons polygons
        lonlat = np.where(lonlat_has, lonlat, np.asarray(frame.geometry.to_crs(4326).values))
    # A region across the antimeridian is drawn on one side of it, every layer alike.
    centre = data_centre(lonlat)
    lonlat = unwrap_longitudes(lonlat, centre)[0]
    n = int(len(frame))
    xmin, ymin, xmax, ymax = shapely.total_bounds(lonlat) if n else (0.0, 0.0, 0.0, 0.0)
    bounds = [[float(ymin), float(xmin)], [float(ymax), float(xmax)]]

    fields, missing = _fields(frame, id_column, groups, label_column)
    views = _views(frame, fields, missing, groups, reference, summary)
    from .access_sections import access_map_layer

    if (layer := access_map_layer(frame, summary)) is not None:
        fields["acc"], view = layer
        views.append(view)
    overlays = _footprint_overlays(footprint, areas.crs, tolerance, decimals, centre)
    region_bounds = None
    if outside is not None and len(outside):
        overlays.insert(0, outside_overlay(outside, tolerance, decimals))
        oxmin, oymin, oxmax, oymax = outside.to_crs(4326).total_bounds
        region_bounds = [
            [float(min(ymin, oymin)), float(min(xmin, oxmin))],
            [float(max(ymax, oymax)), float(max(xmax, oxmax))],
        ]
    changed = site_change_overlay(summary)
    if changed is not None:
        overlays.append(changed)
    codes: dict[str, list[str]] = {"tier": list(INCOME_TIERS), "lisa": list(LISA_LABELS)}
    if "enclave_id" in frame.columns:
        enclave = _enclave_overlay(
            display_series, frame["enclave_id"].reset_index(drop=True), decimals, centre
        )
        if enclave is not None:
            overlays.insert(0, enclave)
        enc_ids = sorted({str(v) for v in frame["enclave_id"].dropna()}, key=lambda s: (len(s), s))
        enc = frame["enclave_id"]
        enc_codes = pd.Categorical(enc.astype("string"), categories=enc_ids).codes
        fields["enc"] = _nullable(enc_codes.astype(np.int64), enc_codes >= 0)
        codes["enc"] = enc_ids

    data = {
        "n": n,
        "bounds": bounds,
        "region_bounds": region_bounds,
        "areas": encode_shapes(lonlat, decimals) if n else _empty_shapes(),
        "fields": fields,
        "scales": {"cf": CF_SCALE, "share": SHARE_SCALE},
        "codes": codes,
        "groups": [
            {"label": group_label(summary, g), "field": f"s{k}", "reference": g == reference}
            for k, g in enumerate(groups)
        ],
        "views": [v.to_dict() for v in views],
        "overlays": overlays,
        "enclave_info": to_jsonable(_enclave_info(summary)),
        "texts": _texts(title, summary, n, footprint),
        # Hover texts say when a p-value is after false-discovery-rate correction.
        "lisa_fdr": ((summary.get("clustering") or {}).get("local_moran") or {}).get("fdr") == "bh",
        "typical_size_m": _typical_size_m(geoms[drawable], metres_per_unit),
        "style": {
            "edge": "#ffffff",
            "edge_weight": 0.8,
            "edge_min_px": 8,
            "edge_opacity": 0.8,
            "fill_opacity": 0.55 if tiles else 0.9,
            "missing": MISSING_COLOR,
            "highlight": "#111111",
        },
        "tiles": dict(_TILES) if tiles else None,
        "collapse_control": False,
    }
    # The per-area arrays are already plain lists of ints, floats, strings and None; only
    # the small, summary-derived parts went through clean_number / to_jsonable.
    page = _render_page(str(title), bounds, _page_json(data))
    out = Path(path)
    size = _write_atomic(out, page)
    return MapInfo(
        path=str(out),
        n_features=n,
        bytes=size,
        simplify_tolerance=float(tolerance),
        simplify_units=unit,
        simplify_method=method,
        coordinate_decimals=decimals,
        n_without_geometry=int((~drawable).sum()),
        views=tuple(v.key for v in views),
        overlays=tuple(o["key"] for o in overlays) + (("tiles",) if tiles else ()),
    )


def _typical_size_m(geoms: np.ndarray, metres_per_unit: float) -> float | None:
    """Return the median square root of the area, in metres.

    The page hides area edges when areas of this size would be only a few pixels wide.
    """
    if geoms.size == 0:
        return None
    size = float(np.median(np.sqrt(shapely.area(geoms)))) * metres_per_unit
    return clean_number(size)


def _check_areas(
    areas: Any,
    id_column: str,
    groups: Sequence[str],
    reference: str,
    label_column: str | None,
) -> None:
    if not isinstance(areas, gpd.GeoDataFrame):
        raise InputError(
            f"areas must be a GeoDataFrame with a geometry column, got {type(areas).__name__}"
        )
    if id_column not in areas.columns:
        raise InputError(
            f"id column '{id_column}' is not among the area columns "
            f"{list(map(str, areas.columns))[:20]}; pass the name of the column holding the ids"
        )
    if areas.crs is None:
        raise InputError(
            "the areas have no CRS; the map must reproject them to longitude/latitude, so set "
            "the analysis CRS (GeoDataFrame.set_crs) before building the map"
        )
    if isinstance(groups, str):
        raise SpecError(f"groups must be a list of group names, got the string {groups!r}")
    if reference not in groups:
        raise SpecError(
            f"reference group was {reference!r} but is expected to be one of {list(groups)}"
        )
    if label_column is not None and label_column not in areas.columns:
        raise InputError(
            f"label column '{label_column}' is not among the area columns; pass an existing "
            "column or None"
        )
    if len(areas) == 0:
        raise InputError("the areas are empty: there is nothing to draw on the map")


def _fields(
    frame: gpd.GeoDataFrame, id_column: str, groups: Sequence[str], label_column: str | None
) -> tuple[dict[str, list[Any]], dict[str, bool]]:
    """Per-area value arrays for the page, compact: short keys, integer fractions."""
    fields: dict[str, list[Any]] = {}
    missing: dict[str, bool] = {}
    ids = frame[id_column]
    fields["id"] = ids.astype(object).where(ids.notna(), "").astype(str).tolist()
    if label_column is not None:
        lab = frame[label_column]
        labels = lab.astype(str).to_numpy(dtype=object, copy=True)
        labels[lab.isna().to_numpy()] = None
        fields["label"] = labels.tolist()
    if "population" in frame.columns:
        pop = pd.to_numeric(frame["population"], errors="coerce").to_numpy(dtype=float)
        ok = np.isfinite(pop)
        fields["pop"] = _nullable(np.rint(np.where(ok, pop, 0)).astype(np.int64), ok)
    if "covered_fraction" in frame.columns:
        fields["cf"] = _scaled_fraction(frame["covered_fraction"], CF_SCALE, "covered_fraction")
        missing["cf"] = any(v is None for v in fields["cf"])
    if "served" in frame.columns:
        fields["served"], missing["served"] = _bool_codes(frame["served"])
    for k, group in enumerate(groups):
        field = f"s{k}"
        fields[field] = _scaled_fraction(_share_series(frame, group), SHARE_SCALE, f"{group}_share")
        missing[field] = any(v is None for v in fields[field])
    if "majority_minority" in frame.columns:
        fields["mm"], missing["mm"] = _bool_codes(frame["majority_minority"])
    if "income_tier" in frame.columns:
        fields["tier"], missing["tier"] = _category_codes(
            frame["income_tier"], INCOME_TIERS, "income_tier"
        )
    if "income_ratio" in frame.columns:
        inc = pd.to_numeric(frame["income_ratio"], errors="coerce").to_numpy(dtype=float)
        ok = np.isfinite(inc)
        fields["inc"] = _nullable(np.round(np.where(ok, inc, 0.0), 1), ok)
    if "nearest_site_m" in frame.columns:
        dist = pd.to_numeric(frame["nearest_site_m"], errors="coerce").to_numpy(dtype=float)
        ok = np.isfinite(dist)
        fields["dist"] = _nullable(np.rint(np.where(ok, dist, 0.0)).astype(np.int64), ok)
    if "lisa_cluster" in frame.columns:
        fields["lisa"], missing["lisa"] = _category_codes(
            frame["lisa_cluster"], LISA_LABELS, "lisa_cluster"
        )
    if "lender_share" in frame.columns:  # the lending review's layers
        fields["lsh"] = _scaled_fraction(frame["lender_share"], SHARE_SCALE, "lender_share")
        missing["lsh"] = any(v is None for v in fields["lsh"])
        apps = pd.to_numeric(frame["lender_applications"], errors="coerce").to_numpy(dtype=float)
        fields["lapp"] = _nullable(np.rint(np.nan_to_num(apps)).astype(np.int64), np.isfinite(apps))
        fields["lgap"], missing["lgap"] = _bool_codes(frame["lending_gap"])
    if "lisa_p" in frame.columns:
        lp = pd.to_numeric(frame["lisa_p"], errors="coerce").to_numpy(dtype=float)
        ok = np.isfinite(lp)
        fields["lisa_p"] = _nullable(np.round(np.where(ok, lp, 0.0), 4), ok)
    if "lisa_q" in frame.columns:
        lq = pd.to_numeric(frame["lisa_q"], errors="coerce").to_numpy(dtype=float)
        ok = np.isfinite(lq)
        fields["lisa_q"] = _nullable(np.round(np.where(ok, lq, 0.0), 4), ok)
    return fields, missing
