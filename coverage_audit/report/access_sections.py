"""Report section, key figure and map layer of the ``[access]`` findings (2SFCA, E2SFCA).

Takes the page's shared state (:class:`.sections.Page`) and reads the summary.json
section ``access`` that :mod:`coverage_audit.accessibility` writes: the method, catchment
and decay, the region's mean access, and by group the population-weighted mean access,
its ratio to the reference group's and the share living where access is low, plus the
concentration index across areas ranked by minority share. Gives one escaped HTML section
with a bar chart (inline SVG), one line of the page's key figures, and for the map a
per-area field with its view (access as a percent of the region's mean).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from . import charts
from .markup import (
    NA,
    Html,
    Num,
    as_mapping,
    as_number,
    figure,
    fmt_count,
    fmt_fixed,
    fmt_percent,
    ordered,
    para,
    section,
    table,
    tag,
)
from .sections import Page
from .view import View

#: Access is capacity per resident; the page shows it per 1,000 residents.
PER = 1_000
#: Map classes of access as a percent of the region's mean (integers on the page).
ACCESS_THRESHOLDS: tuple[int, ...] = (1, 50, 80, 120, 150)
ACCESS_LABELS: tuple[str, ...] = (
    "none in reach",
    "< 50% of the region's mean",
    "50-80%",
    "80-120%",
    "120-150%",
    ">= 150%",
)
#: Light to dark with strictly falling luminance (the map's sequential ramp).
ACCESS_COLORS: tuple[str, ...] = ("#f7f4d9", "#d3e7b6", "#93cda4", "#4fa79b", "#2b7186", "#233f6b")


def _per_thousand(value: Any) -> str:
    number = as_number(value)
    return NA if number is None else f"{number * PER:.3g}"


def _catchment_text(acc: Mapping[str, Any]) -> str:
    metres = as_number(acc.get("catchment_m"))
    if metres is not None:
        return f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"
    value = as_number(acc.get("catchment"))
    return NA if value is None else f"{value:g} {acc.get('catchment_unit') or ''}".strip()


def _decay_text(acc: Mapping[str, Any]) -> str:
    decay = acc.get("decay")
    if decay == "none":
        return "no distance decay (every site in reach counts fully)"
    if decay == "gaussian":
        return "Gaussian distance decay falling to 0 at the catchment (Dai 2010)"
    if isinstance(decay, list):
        metres = acc.get("catchment_unit") == "m"
        zones = []
        for pair in decay:
            edge, weight = as_number(pair[0]), as_number(pair[1])
            if edge is None or weight is None:
                continue
            edge_text = f"{edge / 1000:g} km" if metres else f"{edge:g} {acc.get('catchment_unit')}"
            zones.append(f"up to {edge_text}: weight {weight:g}")
        return "stepped distance-decay zones (" + "; ".join(zones) + ")"
    return NA


def access_bar_chart(
    labels: Sequence[str],
    values: Sequence[float | None],
    *,
    region_mean: float | None,
    low_line: float | None,
    salt: str = "access-bars",
) -> str:
    """Draw mean access by group (per 1,000 residents) with the region's mean marked."""
    n = len(labels)
    fig = Figure(figsize=(7.0, 0.9 + 0.42 * max(n, 1)), dpi=100, layout="constrained")
    ax = fig.add_subplot()
    y = np.arange(n)[::-1]
    vals = np.array([np.nan if v is None else PER * float(v) for v in values], dtype=float)
    low = None if low_line is None else PER * low_line
    flagged = [low is not None and not np.isnan(v) and v < low for v in vals]
    bars = ax.barh(
        y,
        np.nan_to_num(vals, nan=0.0),
        color=[charts.FLAG_TONE if f else charts.BAR_TONE for f in flagged],
        height=0.62,
    )
    for bar, f in zip(bars, flagged, strict=True):
        bar.set_hatch("///" if f else "")
        bar.set_edgecolor("white")
    top = float(np.nanmax(vals)) if np.isfinite(vals).any() else 1.0
    for yi, v in zip(y, vals, strict=True):
        ax.text(
            (0.0 if np.isnan(v) else v) + 0.01 * top,
            yi,
            "n/a" if np.isnan(v) else f"{v:.3g}",
            va="center",
            fontsize=9,
            color=charts.TEXT_TONE,
        )
    if region_mean is not None:
        ax.axvline(PER * region_mean, color=charts.TEXT_TONE, linewidth=1.4, label="region's mean")
        if low is not None:
            ax.axvline(
                low, color=charts.TEXT_TONE, linewidth=1.0, linestyle=":", label="low-access line"
            )
        ax.legend(loc="lower right", fontsize=8, frameon=True, framealpha=0.9)
    ax.set_yticks(y, [charts.mpl_text(label) for label in labels])
    ax.set_xlim(0, 1.18 * max(top, PER * (region_mean or 0.0)) or 1.0)
    ax.set_xlabel("Mean access (capacity per 1,000 residents, population-weighted)")
    ax.spines[["top", "right"]].set_visible(False)
    ax.tick_params(axis="y", length=0)
    return charts.figure_to_svg(fig, salt=salt, title="Mean access by group")


def access_section(page: Page) -> Html:
    """Return "Access to service capacity": settings, figures by group, chart, reading."""
    acc = as_mapping(page.summary.get("access"))
    data = as_mapping(acc.get("groups"))
    names = ordered(page.groups, data)
    ref = str(acc.get("reference_group") or page.reference)
    capacity = acc.get("capacity_column")
    parts: list[Any] = [
        para(
            f"Method: {acc.get('method') or NA} (two-step floating catchment area; Luo and "
            f"Wang 2003, enhanced form Luo and Qi 2009). Each of the "
            f"{fmt_count(acc.get('sites'))} sites offers its capacity "
            + (f"(column {capacity}, " if capacity else "(1 each, ")
            + f"{fmt_count(acc.get('total_capacity'))} in all) to the people within "
            f"{_catchment_text(acc)}, shared among them; an area's access is the sum of the "
            f"shares of every site in its reach, with {_decay_text(acc)}. Distances are "
            + (
                "taken from the travel-cost table given."
                if acc.get("distance") == "cost_table"
                else "straight lines from each area's centroid in the analysis projection."
            )
        )
    ]
    rows = []
    for g in names:
        row = as_mapping(data[g])
        rows.append(
            (
                page.label(g) + (" (reference)" if g == ref else ""),
                Num(fmt_count(row.get("population"))),
                Num(_per_thousand(row.get("mean_access"))),
                Num(fmt_fixed(row.get("ratio"), 2)),
                Num(fmt_percent(row.get("share_low_access"))),
            )
        )
    fraction = as_number(acc.get("low_access_fraction"))
    low_label = (
        f"share below {fraction:g} of the region's mean"
        if fraction is not None
        else "share with low access"
    )
    parts.append(
        table(
            (
                "Group",
                Num("People"),
                Num("Mean access per 1,000"),
                Num(f"Ratio to {page.label(ref)}"),
                Num(low_label.capitalize()),
            ),
            rows,
            caption=(
                f"Access by group. Region's mean: {_per_thousand(acc.get('region_mean'))} per "
                "1,000 residents (population-weighted)."
            ),
        )
    )
    if rows:
        svg = access_bar_chart(
            [page.label(g) for g in names],
            [as_number(as_mapping(data[g]).get("mean_access")) for g in names],
            region_mean=as_number(acc.get("region_mean")),
            low_line=as_number(acc.get("low_access_threshold")),
        )
        parts.append(
            figure(
                svg,
                "Mean access by group; hatched bars lie below the low-access line "
                f"({fmt_percent(fraction, 0) if fraction is not None else NA} of the region's mean).",
            )
        )
    ci = as_number(acc.get("concentration_index"))
    if ci is not None:
        direction = (
            "concentrated in areas with a higher minority share"
            if ci > 0
            else "concentrated in areas with a lower minority share"
            if ci < 0
            else "spread evenly across areas ranked by minority share"
        )
        parts.append(
            para(
                f"Concentration index of access across areas ranked by minority share: "
                f"{fmt_fixed(ci, 3)} (from -1 to 1; 0 is even). Access is {direction} "
                "(Kakwani, Wagstaff and van Doorslaer 1997, population-weighted)."
            )
        )
    notes = [
        f"{fmt_count(acc.get('areas_without_site'))} areas have no site within reach (access 0)."
    ]
    if as_number(acc.get("sites_without_demand")):
        notes.append(
            f"{fmt_count(acc.get('sites_without_demand'))} sites have no residents within reach "
            "and add nothing."
        )
    costs = as_mapping(acc.get("costs"))
    if costs:
        notes.append(
            f"Cost table: {fmt_count(costs.get('used'))} of {fmt_count(costs.get('rows'))} rows "
            f"used; {fmt_count(costs.get('pairs_missing'))} area-site pairs absent from it are "
            "treated as beyond the catchment."
        )
    parts.append(para(" ".join(notes)))
    parts.append(
        para(
            "Access scores depend on the catchment, the decay and where each area's people are "
            "taken to live (its centroid); a lower score for a group is a reason to look "
            "closer at where capacity sits, not by itself proof of discrimination.",
            class_="note",
        )
    )
    return section("access", "Access to service capacity", *parts)


def access_key_figures(page: Page) -> list[Html]:
    """Return the access line of the page's "Key figures" (the group with the lowest ratio)."""
    acc = as_mapping(page.summary.get("access"))
    data = as_mapping(acc.get("groups"))
    ratios = {
        g: as_number(as_mapping(v).get("ratio"))
        for g, v in data.items()
        if g != acc.get("reference_group")
    }
    ranked = sorted((r, g) for g, r in ratios.items() if r is not None)
    if not ranked:
        return []
    ratio, group = ranked[0]
    low = as_number(as_mapping(data[group]).get("share_low_access"))
    return [
        tag(
            "li",
            f"Access to capacity ({acc.get('method')}, {_catchment_text(acc)}): "
            f"{page.label(group)} mean access is {fmt_fixed(ratio, 2)} of "
            f"{page.label(str(acc.get('reference_group')))}'s; "
            f"{fmt_percent(low)} of them live where access is below "
            f"{fmt_percent(as_number(acc.get('low_access_fraction')), 0)} of the region's mean.",
        )
    ]


def access_map_layer(
    frame: pd.DataFrame, summary: Mapping[str, Any]
) -> tuple[list[Any], Any] | None:
    """Return the map's per-area access field (percent of the region's mean) and its view."""
    acc = as_mapping(summary.get("access"))
    mean = as_number(acc.get("region_mean"))
    if "access" not in frame.columns or not mean:
        return None
    values = pd.to_numeric(frame["access"], errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(values)
    # Floored, so that an integer on the page falls in the class its exact value is in.
    percent = np.floor(np.where(ok, 100.0 * values / mean, 0.0)).astype(np.int64)
    # A score of 0 (no site in reach) is its own class; a tiny positive one is not.
    percent = np.where(ok & (values > 0), np.maximum(percent, 1), percent)
    field = [int(v) if good else None for v, good in zip(percent, ok, strict=True)]
    view = View(
        key="access",
        label="Access (2SFCA)",
        title="Access: percent of the region's mean",
        field="acc",
        type="bins",
        colors=ACCESS_COLORS,
        labels=ACCESS_LABELS,
        thresholds=ACCESS_THRESHOLDS,
        has_missing=not bool(ok.all()),
        note=f"{acc.get('method')}, catchment {_catchment_text(acc)}",
    )
    return field, view
