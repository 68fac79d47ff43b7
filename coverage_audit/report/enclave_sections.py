"""The report's enclave section: enclaves, their group shares and figures, footprint holes.

Built, like the other core sections (:mod:`.sections`), only from what the summary holds.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from . import charts
from .markup import (
    NA,
    Html,
    Num,
    as_mapping,
    as_number,
    figure,
    first_of,
    fmt_auto,
    fmt_count,
    fmt_fixed,
    fmt_p,
    fmt_param,
    fmt_percent,
    fmt_points,
    get_in,
    kv_table,
    ordered,
    para,
    plural,
    section,
    table,
    tag,
)
from .sections import INCOME_TIERS, MAX_ENCLAVE_FIGURES, WEIGHT_LABELS, Page

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
