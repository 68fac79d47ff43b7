"""The report's core sections: coverage, segregation, clustering (and the shared Page).

Takes the page's shared state (:class:`Page`: the summary.json findings, the manifest,
the analysed areas and the footprint, with the region geometry prepared once for the
figures) and gives one escaped HTML ``<section>`` per stage of the audit, each built
only from what the summary holds: a section whose data are absent is not called, a
part whose data are absent is left out, and a missing value shows as "n/a". The
sections of the further analyses (comparisons, explanations, sensitivity) live in
:mod:`.further`, the enclaves in :mod:`.enclave_sections`, what was audited in
:mod:`.audited_section`; the top of the page, methods and cautions in :mod:`.page`.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from . import charts
from .markup import (
    Html,
    Num,
    as_mapping,
    as_number,
    figure,
    fmt_bool,
    fmt_count,
    fmt_distance,
    fmt_fixed,
    fmt_p,
    fmt_percent,
    fmt_points,
    get_in,
    join,
    kv_table,
    ordered,
    para,
    section,
    table,
    tag,
)
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
