"""The report's appendix of what was audited: inputs, footprint, settings, exclusions.

Also the overview map of the region the findings section opens with.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import geopandas as gpd
import shapely

from . import charts
from .inputs_sections import joins_part
from .markup import (
    NA,
    Html,
    Num,
    cell_text,
    figure,
    fmt_count,
    fmt_distance,
    fmt_param,
    get_in,
    join,
    para,
    section,
    table,
    tag,
)
from .provenance import DIGEST_SHOWN, PARAMETER_ROWS_IN_ONE, digest_cell, parameter_rows
from .sections import EXCLUSION_COLUMNS, MAX_LISTED_EXCLUSIONS, Page

# --- what was audited ------------------------------------------------------------------


def _footprint_text(page: Page) -> str:
    fp = page.footprint
    described = page.summary.get("footprint") or {}
    kind = fp.get("kind") or described.get("kind")
    name = fp.get("name") or described.get("name") or "an unnamed source"
    if kind == "points":
        points = fp.get("points")
        count = len(points) if points is not None else described.get("points")
        radius = fp.get("radius_m", described.get("radius_m"))
        vertices = page.manifest.get("circle_vertices") or get_in(
            page.manifest, "footprint", "circle_vertices"
        )
        text = (
            f"Footprint: {fmt_count(count)} service points from {name}, each reaching "
            f"{fmt_distance(radius, 'm')}"
        )
        if vertices:
            text += f" (circles drawn with {fmt_count(vertices)} vertices)"
        return text + ", dissolved into one footprint."
    if kind == "polygons":
        return f"Footprint: service-area polygons from {name}, dissolved into one footprint."
    if kind == "ids":
        return f"Footprint: the areas listed as served in {name}."
    if kind == "zips":
        return (
            f"Footprint: the ZIP codes listed in {name}; each area's covered fraction is the "
            "share of its land (ZCTA relationship file) or of its addresses (crosswalk) in them."
        )
    return "Footprint: not described."


def _to_crs(frame: Any, crs: Any) -> gpd.GeoSeries | gpd.GeoDataFrame:
    if not isinstance(frame, (gpd.GeoSeries, gpd.GeoDataFrame)):
        frame = gpd.GeoSeries(frame, crs=crs)
    if crs is not None and frame.crs is not None and frame.crs != crs:
        frame = frame.to_crs(crs)
    return frame


def overview_figure(page: Page) -> Html:
    """Return the small region map: served areas, footprint outline, service points."""
    if not len(page.areas):
        return Html("")
    fp = page.footprint
    outline = points = None
    if fp.get("geometry") is not None and fp.get("kind") != "ids":
        geoms = _to_crs(fp["geometry"], page.areas.crs).geometry.to_numpy()
        outline = shapely.union_all(geoms)
    if fp.get("kind") == "points" and fp.get("points") is not None:
        points = _to_crs(fp["points"], page.areas.crs).geometry.to_numpy()
    svg = charts.overview_chart(
        page.layers, footprint=outline, points=points, salt="report-overview"
    )
    return figure(
        svg,
        "The analysed region: served areas in the mid tone, the rest in light "
        "grey, the footprint outlined. The interactive map is in map.html.",
    )


def audited_section(page: Page) -> Html:
    """Return the appendix "What was audited", placed after the cautions.

    Areas, footprint, inputs with their digests, parameters, exclusions and versions.
    """
    m = page.manifest
    areas = page.summary.get("areas") or {}
    parts: list[Any] = [
        para(
            f"Areas: {fmt_count(areas.get('input'))} in the input, "
            f"{fmt_count(areas.get('analysed'))} analysed, {fmt_count(areas.get('excluded'))} "
            "excluded. Id column: ",
            tag("code", page.id_column),
            ". ",
            _footprint_text(page),
        )
    ]
    inputs = [i for i in m.get("inputs") or [] if isinstance(i, Mapping)]
    if inputs:
        input_rows: list[tuple[Any, ...]] = [
            (
                i.get("role") or NA,
                tag("span", i.get("path") or NA, class_="mono"),
                digest_cell(i.get("sha256")),
                Num(fmt_count(i.get("rows"))),
                i.get("crs") or NA,
            )
            for i in inputs
        ]
        parts.append(
            table(
                ("Role", "File", "SHA-256", Num("Rows"), "CRS"),
                input_rows,
                caption="Input files and their SHA-256 digests",
            )
        )
    parts.append(joins_part(page.summary))
    if m.get("analysis_crs"):
        parts.append(
            para(
                "Analysis CRS (areas and distances are measured in it): ",
                tag("code", m["analysis_crs"]),
            )
        )
    params = parameter_rows(m["spec"]) if isinstance(m.get("spec"), Mapping) else []
    if m.get("seed") is not None and not any(k.endswith("seed") for k, _ in params):
        params.append(("seed", m["seed"]))
    if params:
        rows: list[tuple[Any, ...]] = [(tag("code", k), fmt_param(v)) for k, v in params]
        # Two tables side by side: a long list of settings fills half the printed pages.
        half = (len(rows) + 1) // 2 if len(rows) > PARAMETER_ROWS_IN_ONE else len(rows)
        halves = [rows[:half], rows[half:]] if half < len(rows) else [rows]
        parts.append(
            tag(
                "div",
                *(
                    table(
                        ("Parameter", "Value"),
                        chunk,
                        caption="Parameters (resolved spec)" + (" continued" if k else ""),
                    )
                    for k, chunk in enumerate(halves)
                ),
                class_="table-pair",
            )
        )
    parts.append(_exclusions_part(page))
    libraries = m.get("libraries") or {}
    if isinstance(libraries, Mapping) and libraries:
        parts.append(tag("h3", "Software versions"))
        parts.append(
            para(
                "; ".join(f"{name} {cell_text(v)}" for name, v in libraries.items()) + ".",
                class_="versions",
            )
        )
    parts.insert(
        1,
        para(
            "Digests are shortened to their first "
            f"{DIGEST_SHOWN} characters; the full values are in manifest.json.",
            class_="muted",
        ),
    )
    return section("audited", "Appendix: what was audited, inputs and provenance", *parts)


def _exclusions_part(page: Page) -> Html:
    frame = page.exclusions
    recorded = page.summary.get("exclusions") or {}
    total = recorded.get("count")
    if total is None and frame is not None:
        total = len(frame)
    by_reason = recorded.get("by_reason")
    if by_reason is None and frame is not None and len(frame):
        by_reason = frame["reason"].astype(str).value_counts(sort=False).to_dict()
    parts: list[Any] = [tag("h3", "Rows excluded")]
    if not total:
        return parts[0] + para("No input row was excluded.")
    parts.append(para(f"{fmt_count(total)} input rows were not analysed."))
    if by_reason:
        rows: list[tuple[Any, ...]] = [
            (reason, Num(fmt_count(n))) for reason, n in by_reason.items()
        ]
        parts.append(table(("Reason", Num("Rows")), rows, caption="Excluded rows by reason"))
    if frame is not None and len(frame):
        shown = frame.loc[:, list(EXCLUSION_COLUMNS)].iloc[:MAX_LISTED_EXCLUSIONS]
        rows = [tuple(cell_text(v) for v in r) for r in shown.itertuples(index=False)]
        long = len(frame) > MAX_LISTED_EXCLUSIONS
        caption = (
            f"Excluded rows: the first {MAX_LISTED_EXCLUSIONS} of {len(frame):,}"
            if long
            else "Excluded rows"
        )
        parts.append(
            table(
                ("Source", "Row", "Id", "Reason"), rows, caption=caption, table_id="exclusion-list"
            )
        )
        if long:
            parts.append(
                para(
                    "The full list is in ",
                    tag("a", "exclusions.csv", href="exclusions.csv", class_="file-link"),
                    ", beside this report.",
                )
            )
    return join(parts)
