"""The report's core sections: what was audited, coverage, segregation, clustering, enclaves.

Takes the page's shared state (:class:`Page`: the summary.json findings, the manifest,
the analysed areas and the footprint, with the region geometry prepared once for the
figures) and gives one escaped HTML ``<section>`` per stage of the audit, each built
only from what the summary holds: a section whose data are absent is not called, a
part whose data are absent is left out, and a missing value shows as "n/a". The
sections of the further analyses (comparisons, explanations, sensitivity) live in
:mod:`.further`; the top of the page, methods and cautions in :mod:`.page`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from . import charts
from .inputs_sections import joins_part
from .markup import (
    NA,
    Html,
    Num,
    as_mapping,
    as_number,
    cell_text,
    figure,
    first_of,
    fmt_auto,
    fmt_bool,
    fmt_count,
    fmt_distance,
    fmt_fixed,
    fmt_p,
    fmt_param,
    fmt_percent,
    fmt_points,
    get_in,
    join,
    kv_table,
    ordered,
    para,
    plural,
    section,
    table,
    tag,
)
from .provenance import DIGEST_SHOWN, PARAMETER_ROWS_IN_ONE, digest_cell, parameter_rows
from .text import FOUR_FIFTHS_NOTE

#: Exclusion rows listed in the page; beyond this the page links to exclusions.csv.
MAX_LISTED_EXCLUSIONS = 50
#: Enclaves drawn with a locator figure (the most populous ones).
MAX_ENCLAVE_FIGURES = 6
#: Income tiers in the order of 12 CFR 228.12(m), then the catch-all.
INCOME_TIERS = ("low", "moderate", "middle", "upper", "unknown")
LISA_LABELS = ("high-high", "low-low", "high-low", "low-high", "not significant")
EXCLUSION_COLUMNS = ("source", "row", "id", "reason")


class Page:
    """Inputs shared by the sections, and the region geometry prepared once for figures."""

    def __init__(self, **inputs: Any) -> None:
        self.summary: Mapping[str, Any] = inputs["summary"]
        self.manifest: Mapping[str, Any] = inputs["manifest"]
        self.areas: gpd.GeoDataFrame = inputs["areas"]
        self.exclusions: pd.DataFrame | None = inputs["exclusions"]
        self.id_column: str = inputs["id_column"]
        self.groups: list[str] = list(inputs["groups"])
        self.reference: str = inputs["reference"]
        self.footprint: Mapping[str, Any] = inputs["footprint"] or {}
        self.moran: tuple[np.ndarray, np.ndarray] | None = inputs["moran"]
        self._layers: charts.RegionLayers | None = None
        coverage = self.summary.get("coverage") or {}
        self.highest = coverage.get("comparison") == "highest"
        self.comparison_group = coverage.get("comparison_group") or (
            None if self.highest else coverage.get("reference_group") or self.reference
        )

    @property
    def layers(self) -> charts.RegionLayers:
        """Region geometry for the map figures, built on first use."""
        if self._layers is None:
            served = self.areas["served"].astype("boolean").fillna(False).to_numpy(dtype=bool)
            self._layers = charts.RegionLayers.build(self.areas.geometry.to_numpy(), served)
        return self._layers

    def label(self, group: str) -> str:
        """Return a group's display label (``summary["group_labels"]``; its name without)."""
        labels = self.summary.get("group_labels")
        return str(labels.get(group, group)) if isinstance(labels, Mapping) else group

    @property
    def unit(self) -> str:
        """What is counted ("people", "households" ...)."""
        return str(self.summary.get("population_unit") or "people")

    @property
    def residents(self) -> str:
        """The word for what is counted in sentences ("residents" when people are)."""
        return "residents" if self.unit == "people" else self.unit

    @property
    def comparison_label(self) -> str:
        """The group every ratio divides by, in words ("the reference group (white_nh)")."""
        if self.highest:
            named = f" ({self.label(self.comparison_group)})" if self.comparison_group else ""
            return f"the highest-rate group{named}"
        return f"the reference group ({self.label(self.comparison_group or '')})"


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


# --- coverage --------------------------------------------------------------------------


def coverage_section(page: Page) -> Html:
    """Return "Coverage by group": rates, ratios, flags, classes of area, distances."""
    cov = page.summary["coverage"]
    data = as_mapping(cov.get("groups"))
    order = ordered(page.groups, data)
    parts: list[Any] = [
        para(
            "Coverage rate: the share of a group's population living inside the footprint, a "
            "partly covered area counting by its covered fraction. Served-area rate: the share "
            "living in areas counted as served (covered fraction at least "
            f"{fmt_percent(cov.get('served_threshold'))}). Ratios and differences compare each "
            f"group with {page.comparison_label}."
        )
    ]
    if cov.get("rate") is not None:
        parts.append(
            para(
                f"Whole population ({page.unit}): {fmt_percent(cov.get('rate'))} covered "
                f"({fmt_count(cov.get('covered_population'))} of "
                f"{fmt_count(cov.get('population'))}); {fmt_count(cov.get('served_areas'))}"
                f" of {fmt_count(cov.get('areas'))} areas served."
            )
        )
    rows: list[tuple[Any, ...]] = []
    attrs: list[dict[str, Any]] = []
    for g in order:
        item = as_mapping(data.get(g))
        flagged = bool(item.get("below_four_fifths"))
        is_comparison = g == page.comparison_group
        name = page.label(g)
        label = (
            name + (" (highest rate)" if page.highest else " (reference)")
            if is_comparison
            else name
        )
        rows.append(
            (
                label,
                Num(fmt_count(item.get("population"))),
                Num(fmt_count(item.get("covered_population"))),
                Num(fmt_percent(item.get("rate"))),
                Num(fmt_percent(item.get("served_area_rate"))),
                Num(fmt_fixed(item.get("ratio"))),
                Num(fmt_fixed(item.get("served_area_ratio"))),
                Num(fmt_points(item.get("difference"))),
                Num(fmt_points(item.get("served_area_difference"))),
                tag("span", "yes: below 4/5", class_="flag")
                if flagged
                else fmt_bool(item.get("below_four_fifths")),
            )
        )
        classes = " ".join(
            c for c, on in (("flagged", flagged), ("reference", is_comparison)) if on
        )
        attrs.append({"class_": classes or None, "data_group": g})
    headers = (
        "Group",
        Num("Population" if page.unit == "people" else f"Count ({page.unit})"),
        Num("Covered population" if page.unit == "people" else f"Covered ({page.unit})"),
        Num("Coverage rate"),
        Num("Served-area rate"),
        Num("Ratio"),
        Num("Served-area ratio"),
        Num("Difference"),
        Num("Served-area difference"),
        "Below four-fifths",
    )
    parts.append(
        table(
            headers,
            rows,
            row_attrs=attrs,
            table_id="coverage-table",
            caption="Coverage by group (rates in percent, differences in "
            f"percentage points, both against {page.comparison_label})",
        )
    )
    parts.append(para(FOUR_FIFTHS_NOTE, class_="note"))
    if order:
        rates = [as_number(get_in(data, g, "rate")) for g in order]
        comparison_rate = as_number(get_in(data, page.comparison_group or "", "rate"))
        if page.highest and comparison_rate is None:
            comparison_rate = max((r for r in rates if r is not None), default=None)
        svg = charts.coverage_bar_chart(
            [page.label(g) for g in order],
            rates,
            comparison_rate=comparison_rate,
            salt="report-coverage-bars",
            comparison_label=(
                f"{page.label(page.comparison_group) if page.comparison_group else 'highest rate'} "
                f"({'highest rate' if page.highest else 'reference'})"
            ),
            flagged=[bool(get_in(data, g, "below_four_fifths")) for g in order],
        )
        parts.append(
            figure(
                svg,
                "Coverage rate by group. Solid line: the comparison rate; "
                "dotted line: four-fifths of it. Hatched bars fall below it.",
            )
        )
    parts.append(_area_classes_part(cov.get("area_classes")))
    parts.append(_distance_part(cov.get("distance"), page))
    return section("coverage", "Coverage by group", *parts)


_CLASS_ROWS: tuple[tuple[tuple[str, ...], str], ...] = (
    (("all",), "All analysed areas"),
    (("majority_minority",), "Majority-minority areas"),
    (("not_majority_minority",), "Other areas (not majority-minority)"),
    *((("income_tiers", t), f"Income tier: {t}") for t in INCOME_TIERS),
    (("low_or_moderate",), "Low- or moderate-income areas"),
    (("middle_or_upper",), "Middle- or upper-income areas"),
)


def _area_classes_part(classes: Any) -> Html:
    if not isinstance(classes, Mapping):
        return Html("")
    rows = []
    for keys, label in _CLASS_ROWS:
        item = get_in(classes, *keys)
        if isinstance(item, Mapping):
            rows.append(
                (
                    label,
                    Num(fmt_count(item.get("areas"))),
                    Num(fmt_count(item.get("population"))),
                    Num(fmt_percent(item.get("rate"))),
                    Num(fmt_percent(item.get("served_share"))),
                    Num(fmt_percent(item.get("served_population_share"))),
                )
            )
    if not rows:
        return Html("")
    headers = (
        "Class of area",
        Num("Areas"),
        Num("Population"),
        Num("Coverage rate"),
        Num("Areas served"),
        Num("Population in served areas"),
    )
    return tag("h3", "Majority-minority and income classes") + table(
        headers, rows, caption="Coverage by class of area", table_id="class-table"
    )


def _distance_part(distance: Any, page: Page) -> Html:
    data = get_in(distance, "groups")
    if not isinstance(data, Mapping) or not data:
        return Html("")
    unit = str(distance.get("unit") or "m")
    rows = [
        (
            page.label(g),
            Num(fmt_distance(get_in(data, g, "mean"), unit)),
            Num(fmt_distance(get_in(data, g, "median"), unit)),
        )
        for g in ordered(page.groups, data)
    ]
    return tag("h3", "Distance to the nearest service point") + table(
        ("Group", Num("Mean"), Num("Median")),
        rows,
        table_id="distance-table",
        caption="Distance from each area to its nearest service point, weighted by the "
        "group's population",
    )


# --- segregation -----------------------------------------------------------------------

_SEGREGATION_COLUMNS: tuple[tuple[str, str], ...] = (
    ("dissimilarity", "D vs reference"),
    ("dissimilarity_vs_rest", "D vs rest"),
    ("isolation", "Isolation xPx*"),
    ("exposure_to_reference", "Exposure to reference xPy*"),
    ("correlation_ratio", "Correlation ratio \u03b7\u00b2"),
    ("coverage_dissimilarity", "Coverage dissimilarity"),
    ("areal_coverage_dissimilarity", "Areal coverage dissimilarity"),
)


def _negated_points(value: Any) -> str:
    """Format a gap (reference minus group) as a difference (group minus reference)."""
    number = as_number(value)
    return fmt_points(None if number is None else -number)


#: The gap test is shown with the sign convention of every difference in the report:
#: the group's rate minus the comparison rate (negative: the group is less served).
_GAP_COLUMNS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("gap", "Difference", _negated_points),
    ("p_value", "p (two-sided)", fmt_p),
    ("p_value_one_sided", "p (one-sided)", fmt_p),
    ("null_mean", "Null mean", _negated_points),
    ("null_sd", "Null sd", fmt_points),
    ("permutations", "Permutations", fmt_count),
)


def segregation_section(page: Page) -> Html:
    """Return "Segregation": the indices by group and the permutation gap test."""
    seg = page.summary["segregation"]
    ref = seg.get("reference_group") or page.reference
    columns = [(k, label) for k, label in _SEGREGATION_COLUMNS if isinstance(seg.get(k), Mapping)]
    present: list[str] = []
    for key, _ in columns:
        present.extend(g for g in seg[key] if g not in present)
    parts: list[Any] = [
        para(
            f"Indices over the analysed areas; the reference group is {page.label(ref)}. "
            "Dissimilarity runs from 0 (the same spread over the areas) to 1 "
            "(no area shared)."
        )
    ]
    if columns:
        rows = [
            (page.label(g), *(Num(fmt_fixed(get_in(seg, k, g))) for k, _ in columns))
            for g in ordered(page.groups, present)
        ]
        parts.append(
            table(
                ("Group", *(Num(label) for _, label in columns)),
                rows,
                caption="Segregation indices by group",
                table_id="segregation-table",
            )
        )
    gap = seg.get("coverage_gap_test")
    if isinstance(gap, Mapping) and gap:
        rows = [
            (page.label(g), *(Num(f(get_in(gap, g, k))) for k, _, f in _GAP_COLUMNS))
            for g in ordered(page.groups, gap)
        ]
        parts.append(
            table(
                ("Group", *(Num(label) for _, label, _ in _GAP_COLUMNS)),
                rows,
                table_id="gap-table",
                caption="Permutation test of the served-area "
                f"rate difference, the group's rate minus {ref}'s, in percentage points",
            )
        )
    return section("segregation", "Segregation", *parts)


# --- clustering ------------------------------------------------------------------------

_MORAN_COLUMNS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("I", "I", lambda v: fmt_fixed(v, 4)),
    ("expected", "E[I]", lambda v: fmt_fixed(v, 4)),
    ("variance_rand", "Var[I] (rand.)", lambda v: fmt_fixed(v, 6)),
    ("z_rand", "z (rand.)", lambda v: fmt_fixed(v, 2)),
    ("p_rand", "p (rand., one-sided)", fmt_p),
    ("z_sim", "z_sim", lambda v: fmt_fixed(v, 2)),
    ("p_sim", "p_sim", fmt_p),
    ("permutations", "Permutations", fmt_count),
    ("n", "n", fmt_count),
)
WEIGHT_LABELS = {
    "contiguity": "Contiguity",
    "transform": "Transform",
    "areas": "Areas",
    "links": "Links (neighbour pairs)",
    "islands": "Islands (no neighbour)",
    "island_policy": "Island policy",
    "knn_k": "Neighbours given to each island",
    "components": "Connected components",
    "largest_component_areas": "Areas in the largest component",
    "areas_in_statistics": "Areas in the spatial statistics",
}
_JOIN_KINDS = (
    ("served_served", "Served\u2013served"),
    ("unserved_unserved", "Unserved\u2013unserved"),
    ("served_unserved", "Served\u2013unserved"),
)
_JOIN_COLUMNS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("", "Joins", fmt_count),
    ("expected_", "Expected", lambda v: fmt_fixed(v, 1)),
    ("variance_", "Variance", lambda v: fmt_fixed(v, 1)),
    ("z_", "z", lambda v: fmt_fixed(v, 2)),
    ("p_sim_", "p_sim", fmt_p),
)


def _join_counts_part(joins: Mapping[str, Any]) -> Html:
    """One row per kind of join (count, expectation, variance, z, p_sim), then the rest."""
    used = {prefix + kind for kind, _ in _JOIN_KINDS for prefix, _, _ in _JOIN_COLUMNS}
    rows = [
        (label, *(Num(f(joins.get(prefix + kind))) for prefix, _, f in _JOIN_COLUMNS))
        for kind, label in _JOIN_KINDS
        if any(prefix + kind in joins for prefix, _, _ in _JOIN_COLUMNS)
    ]
    parts = [tag("h3", "Join counts")]
    if rows:
        headers = ("Kind of join", *(Num(label) for _, label, _ in _JOIN_COLUMNS))
        parts.append(
            table(
                headers,
                rows,
                table_id="join-table",
                caption="Joins of served and unserved neighbours (binary weights)"
                + (
                    "; expected values and variances under non-free sampling"
                    if any(k.startswith("expected_") for k in joins)
                    else ""
                ),
            )
        )
    rest = {k: v for k, v in joins.items() if k not in used}
    if rest:
        parts.append(kv_table(rest, caption="Join count settings", labels={"joins": "All joins"}))
    return join(parts)


def clustering_section(page: Page) -> Html:
    """Return "Spatial clustering": weights, Moran's I, join counts, bivariate, LISA."""
    cl = page.summary["clustering"]
    parts: list[Any] = []
    weights = as_mapping(cl.get("weights")) or as_mapping(page.summary.get("weights"))
    if weights:
        parts.append(kv_table(weights, caption="Spatial weights", labels=WEIGHT_LABELS))
    rows = [
        (
            cl[key].get("variable") or variable,
            *(Num(f(cl[key].get(k))) for k, _, f in _MORAN_COLUMNS),
        )
        for key, variable in (
            ("moran", "covered_fraction"),
            ("moran_minority_share", "minority_share"),
        )
        if isinstance(cl.get(key), Mapping)
    ]
    if rows:
        parts.append(tag("h3", "Moran's I"))
        parts.append(
            table(
                ("Variable", *(Num(label) for _, label, _ in _MORAN_COLUMNS)),
                rows,
                caption="Global Moran's I (row-standardised weights)",
                table_id="moran-table",
            )
        )
    if page.moran is not None:
        z, lag = page.moran
        svg = charts.moran_scatter_chart(
            z,
            lag,
            moran_i=as_number(get_in(cl, "moran", "I")),
            variable="covered_fraction",
            salt="report-moran",
        )
        parts.append(
            figure(
                svg,
                f"Moran scatterplot of covered fraction over {z.size:,} "
                "areas: each area's standardised value against the mean of its "
                "neighbours'. The slope of the line is Moran's I.",
            )
        )
    if isinstance(cl.get("join_counts"), Mapping) and cl["join_counts"]:
        parts.append(_join_counts_part(cl["join_counts"]))
    if isinstance(cl.get("bivariate_moran"), Mapping) and cl["bivariate_moran"]:
        parts.append(tag("h3", "Bivariate Moran's I"))
        parts.append(
            kv_table(
                cl["bivariate_moran"],
                caption="Bivariate Moran's I: x in each area against y in its neighbours",
            )
        )
    if isinstance(cl.get("local_moran"), Mapping) and cl["local_moran"]:
        parts.append(_local_moran_part(cl["local_moran"]))
    return section("clustering", "Spatial clustering", *parts)


def _local_moran_part(local: Mapping[str, Any]) -> Html:
    parts: list[Any] = [tag("h3", "Local Moran's I (LISA)")]
    settings = []
    if local.get("alpha") is not None:
        settings.append(f"significance level {fmt_fixed(local['alpha'], 3)}")
    fdr = local.get("fdr")
    if fdr is not None:
        applied = {True: "applied", "bh": "applied", False: "not applied", "none": "not applied"}
        done = applied.get(fdr, f"({fdr})") if isinstance(fdr, (bool, str)) else f"({fdr})"
        settings.append(f"Benjamini\u2013Hochberg false discovery rate control {done}")
    if settings:
        parts.append(para("Clusters at " + "; ".join(settings) + "."))
    counts = as_mapping(local.get("counts"))
    raw = as_mapping(local.get("crosstab"))
    # Two shapes are read: {label: {side: {...}}}, and the clustering stage's
    # {"rows": {label: {side: {...}}}, "areas_without_label": n, ...}.
    cross = as_mapping(raw.get("rows")) if "rows" in raw else raw
    labels = [*LISA_LABELS, *(k for k in [*counts, *cross] if k not in LISA_LABELS)]
    labels = [
        k for i, k in enumerate(labels) if (k in counts or k in cross) and k not in labels[:i]
    ]
    if not labels:
        return parts[0]
    sides = ("majority_minority", "not_majority_minority")
    rows = [
        (
            k,
            Num(fmt_count(counts.get(k))),
            *(
                Num(fmt_count(get_in(cross, k, side, what)))
                for side in sides
                for what in ("areas", "population")
            ),
        )
        for k in labels
    ]
    headers = (
        "Cluster",
        Num("Areas"),
        Num("Majority-minority areas"),
        Num("Majority-minority population"),
        Num("Other areas"),
        Num("Other population"),
    )
    parts.append(
        table(
            headers,
            rows,
            table_id="lisa-crosstab",
            caption="LISA clusters of covered fraction by majority-minority status",
        )
    )
    if as_number(raw.get("areas_without_label")):
        parts.append(
            para(
                f"{fmt_count(raw['areas_without_label'])} areas (population "
                f"{fmt_count(raw.get('population_without_label'))}) took no part in the local "
                "statistics and have no cluster label."
            )
        )
    return join(parts)


# --- enclaves --------------------------------------------------------------------------


def enclave_order(enclave: Mapping[str, Any]) -> tuple[float, int, str]:
    """Sort key: most populous first, then most areas, then id (a total order)."""
    return (
        -(as_number(enclave.get("population")) or 0.0),
        -len(enclave.get("area_ids") or ()),
        str(enclave.get("id")),
    )


def enclaves_section(page: Page) -> Html:
    """Return "Enclaves": the enclave table, shares, locator figures and holes."""
    enclaves = [e for e in page.summary["enclaves"] if isinstance(e, Mapping)]
    settings = as_mapping(page.summary.get("enclave_settings"))
    contrast = contrast_group(page)
    parts: list[Any] = []
    if not enclaves:
        parts.append(para("No enclave of unserved areas enclosed by served areas was found."))
    else:
        parts.append(
            para(
                "An enclave is a connected set of unserved areas whose outer boundary "
                "runs mostly along served areas; its ring is the served areas next to "
                "it. The p-value asks how often random connected sets of the same "
                f"size have a {contrast} share at least as high."
            )
        )
        rows = [
            (
                e.get("id") or NA,
                Num(fmt_count(len(e.get("area_ids") or ()))),
                Num(fmt_count(e.get("population"))),
                Num(fmt_percent(e.get("surround_share"))),
                # Earlier summaries named the tested share after the minority.
                Num(fmt_percent(first_of(e, "contrast_share", "minority_share"))),
                Num(fmt_percent(first_of(e, "mc_mean_contrast_share", "mc_mean_minority_share"))),
                Num(fmt_p(e.get("p_value"))),
                Num(fmt_count(e.get("mc_draws"))),
                _tiers_text(e.get("income_tiers")),
            )
            for e in enclaves
        ]
        headers = (
            "Enclave",
            Num("Areas"),
            Num("Population"),
            Num("Boundary along served"),
            Num(f"Share {contrast}"),
            Num("Random-set mean share"),
            Num("p-value"),
            Num("Monte Carlo draws"),
            "Income tiers (areas)",
        )
        parts.append(
            table(headers, rows, caption="Enclaves of unserved areas", table_id="enclave-table")
        )
        parts.append(_enclave_shares_part(enclaves, page))
        parts.append(_enclave_figures(enclaves, page))
    if "clustering" not in page.summary and isinstance(page.summary.get("weights"), Mapping):
        parts.append(
            kv_table(
                page.summary["weights"], caption="Contiguity between areas", labels=WEIGHT_LABELS
            )
        )
    if settings:
        parts.append(
            settings_table(settings, caption="Enclave settings", labels=_ENCLAVE_SETTING_LABELS)
        )
    holes = [h for h in page.summary.get("holes") or [] if isinstance(h, Mapping)]
    if holes:
        parts.append(_holes_part(holes, page))
    return section("enclaves", "Enclaves", *parts)


_ENCLAVE_SETTING_LABELS = {
    "min_surround": "Least share of the boundary along served areas",
    "min_population": "Population an enclave must exceed",
    "contiguity": "Contiguity",
    "transparent_area_ids": "Areas looked through (no population)",
    "transparent_rule": "Rule for looked-through areas",
    "mc_draws": "Monte Carlo draws per enclave",
    "contrast_group": "Group whose share is tested",
    "unserved_components": "Connected groups of unserved areas",
}


def contrast_group(page: Page) -> str:
    """Return the group whose share the enclave test compares (the minority by default)."""
    group = get_in(page.summary, "enclave_settings", "contrast_group")
    return str(group) if group else "minority"


def _tiers_text(tiers: Any) -> str:
    if not isinstance(tiers, Mapping) or not tiers:
        return NA
    order = [*INCOME_TIERS, *(t for t in tiers if t not in INCOME_TIERS)]
    return ", ".join(f"{t} {fmt_count(tiers[t])}" for t in order if t in tiers)


def settings_table(mapping: Mapping[str, Any], *, caption: str, labels: Mapping[str, str]) -> Html:
    """Render settings as written (lists shortened to their first ten entries)."""
    rows = [
        (
            labels.get(k, k.replace("_", " ")),
            Num(fmt_auto(k, v) if isinstance(v, (list, tuple)) else fmt_param(v)),
        )
        for k, v in mapping.items()
    ]
    return table(("Setting", Num("Value")), rows, caption=caption)


def _share_groups(records: Sequence[Mapping[str, Any]], page: Page, *keys: str) -> list[str]:
    present: list[str] = []
    for r in records:
        for key in keys:
            if isinstance(r.get(key), Mapping):
                present.extend(g for g in r[key] if g not in present)
    return ordered(page.groups, present)


def _enclave_shares_part(enclaves: Sequence[Mapping[str, Any]], page: Page) -> Html:
    order = _share_groups(enclaves, page, "group_shares", "ring_group_shares")
    if not order:
        return Html("")
    rows = []
    for e in enclaves:
        for g in order:
            diff = get_in(e, "share_difference", g)
            if diff is None:
                a, b = (
                    as_number(get_in(e, "group_shares", g)),
                    as_number(get_in(e, "ring_group_shares", g)),
                )
                diff = None if a is None or b is None else a - b
            rows.append(
                (
                    f"{e.get('id') or NA}: {page.label(g)}",
                    Num(fmt_percent(get_in(e, "group_shares", g))),
                    Num(fmt_percent(get_in(e, "ring_group_shares", g))),
                    Num(fmt_points(diff)),
                    Num(fmt_fixed(get_in(e, "share_ratio", g))),
                )
            )
    headers = (
        "Enclave and group",
        Num("Share in enclave"),
        Num("Share in ring"),
        Num("Difference"),
        Num("Ratio"),
    )
    return table(headers, rows, caption="Group shares in each enclave and in its served ring")


def _positions(index: pd.Index, ids: Any) -> np.ndarray:
    if not ids:
        return np.array([], dtype=np.int64)
    found = index.get_indexer([str(i) for i in ids])
    return np.sort(found[found >= 0])


def _enclave_figures(enclaves: Sequence[Mapping[str, Any]], page: Page) -> Html:
    index = pd.Index(page.areas[page.id_column].astype(str).to_numpy())
    figures: list[Html] = []
    for e in sorted(enclaves, key=enclave_order)[:MAX_ENCLAVE_FIGURES]:
        members = _positions(index, e.get("area_ids"))
        if members.size == 0:
            continue
        ring_ids = e.get("ring_area_ids")
        ring = _positions(index, ring_ids) if ring_ids else page.layers.neighbours(members)
        label = str(e.get("id") or NA)
        svg = charts.enclave_locator_chart(
            page.layers, members, ring, label=label, salt=f"report-enclave-{len(figures) + 1}"
        )
        figures.append(
            figure(
                svg,
                f"Enclave {label}: {plural(members.size, 'area')}, "
                f"{fmt_count(e.get('population'))} {page.residents}. Left: its place in "
                "the region (the box marks the close-up). Right: the enclave "
                "highlighted, its ring outlined.",
            )
        )
    if not figures:
        return Html("")
    note = (
        f" (the {MAX_ENCLAVE_FIGURES} most populous of {len(enclaves)})"
        if len(enclaves) > MAX_ENCLAVE_FIGURES
        else ""
    )
    return tag("h3", f"Where the enclaves lie{note}") + tag("div", *figures, class_="locators")


def _holes_part(holes: Sequence[Mapping[str, Any]], page: Page) -> Html:
    order = _share_groups(holes, page, "group_shares")
    rows = [
        (
            h.get("id") or NA,
            Num(fmt_count(len(h.get("area_ids") or ()))),
            Num(fmt_count(h.get("population"))),
            Num(
                fmt_fixed(
                    None
                    if as_number(h.get("hole_area_m2")) is None
                    else float(h["hole_area_m2"]) / 1e6,
                    2,
                )
            ),
            *(Num(fmt_percent(get_in(h, "group_shares", g))) for g in order),
        )
        for h in holes
    ]
    headers = (
        "Hole",
        Num("Areas touched"),
        Num("Population (est.)"),
        Num("Size (km\u00b2)"),
        *(Num(f"{g} share") for g in order),
    )
    return (
        tag("h3", "Holes in the footprint")
        + para(
            "Gaps inside the footprint that overlap populated areas; population is areal-weighted."
        )
        + table(headers, rows, caption="Holes in the footprint", table_id="hole-table")
    )
