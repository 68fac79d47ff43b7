"""The lending review: one lender's HMDA records against its peers', by tract category.

Takes the ``[lending]`` table of the spec, the analysed areas (with their demographics and
the footprint's ``served`` flag) and the HMDA public records as the input stage read them
(counts by cell, :mod:`coverage_audit.io.hmda_counts`), and gives the summary section ``lending``: the lender's
share of applications, originations, purchased loans (and, when asked, preapproval
requests) in majority-minority, majority Black-and-Hispanic, high-minority and low- and
moderate-income tracts against its peers' share, by year and market and pooled; denial
rates by tract category and by applicant race and ethnicity; every lender screened against
all others; and the tracts of the footprint where the lender takes no or few applications.
It also adds per-area columns for the map (``lender_applications``, ``lender_share``,
``lending_gap``).

Sets are kept apart as the public records code them (``action_taken``): applications are
1-5, originations 1, denials 3 (a denial rate is denials over decided applications, 1-3:
withdrawn and incomplete files are left out, the usual convention, from memory), purchased
loans 6, preapproval requests 7-8. Records are reduced chunk by chunk to counts by year,
market, lender, tract, action, race and ethnicity, so memory follows the number of such
cells, not of records.
"""

from __future__ import annotations

from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from .errors import InputError
from .findings import Finding, register_finding
from .io.hmda import RecordReader
from .io.hmda_counts import LendingRecords, tract_source_kind
from .spec import AuditSpec
from .spec_lending import LendingSpec
from .stats.lending import band_peers, compare_shares, lmi_flags, mantel_haenszel, share_flags

#: Record sets by ``action_taken`` code (public data-field documentation).
SETS: dict[str, tuple[str, ...]] = {
    "applications": ("1", "2", "3", "4", "5"),
    "originations": ("1",),
    "purchased": ("6",),
    "preapprovals": ("7", "8"),
}
#: Decided applications (the denominator of a denial rate) and denials.
DECIDED: tuple[str, ...] = ("1", "2", "3")
DENIED = "3"
CATEGORIES: tuple[str, ...] = (
    "majority_minority",
    "majority_black_hispanic",
    "high_minority",
    "lmi",
)
#: Lenders with fewer applications than this in the review's cells are left out of the
#: screen of every lender (their shares say little).
SCREEN_MIN_APPLICATIONS = 20


def lending_section(
    spec: AuditSpec, read: LendingRecords, frame: gpd.GeoDataFrame, id_column: str
) -> dict[str, Any]:
    """Run the lending review on the records read in the input stage.

    Adds the map columns to ``frame`` in place and returns the ``lending`` summary section.
    """
    ls = spec.lending
    assert ls is not None
    ids = frame[id_column].astype(str).to_numpy(dtype=object)
    source, area_cats, notes = _tract_source(spec, ls, frame, ids)
    agg = read.counts.copy()
    tract_figures, scans, outside = read.tract_figures, list(read.readers), read.outside
    cats = _categories(agg, source, area_cats, tract_figures, spec, ls)
    for name in CATEGORIES:
        agg[name] = cats[name]
    volumes = _volumes(agg, SETS["applications"])
    subject = ls.lender
    cells = sorted({(y, m) for (y, m, lei), v in volumes.items() if lei == subject and v > 0})
    if not cells:
        where = ", ".join(f"'{r.path.name}'" for r in scans)
        raise InputError(
            f"[lending] lender {subject} has no applications in scope in {where} "
            f"({sum(r.counts.kept for r in scans)} records kept); check lender, years, "
            "markets and the other filters"
        )
    peers_by_cell = _peers(ls, agg, volumes, cells)
    agg["role"] = _roles(agg, subject, peers_by_cell)
    names = dict(ls.lender_names)
    section: dict[str, Any] = {
        "lender": {"lei": subject, "name": ls.lender_name or names.get(subject) or subject},
        "peer_rule": ls.peer_rule,
        "peer_lenders": len({p for ps in peers_by_cell.values() for p in ps}),
        "peer_band": list(ls.band) if ls.peer_rule == "band" else None,
        "peer_list": list(ls.peers) if ls.peer_rule == "list" else None,
        "alpha": ls.alpha,
        "small_cell": ls.small_cell,
        "tract_source": source,
        "tract_source_note": notes["source"],
        "categories": notes["categories"],
        "sets": {k: list(v) for k, v in _sets(ls).items()},
        "denial_rate": "denied (action_taken 3) over decided applications (1-3)",
        "scope": _scope(ls, cells),
        "records": _records_summary(scans, outside),
    }
    cmp_kw = {"alpha": ls.alpha, "small_cell": ls.small_cell}
    in_cells = agg["role"].notna()
    rows = agg.loc[in_cells]
    for c in CATEGORIES:
        # Records of the compared lenders whose tract has no figure for the category (an
        # area without population, a tract without appended figures): left out of its shares.
        section["categories"][c]["unknown_records"] = int(rows.loc[rows[c].isna(), "n"].sum())
    section["lender_volume"] = {
        name: int(rows.loc[(rows["role"] == "lender") & rows["action"].isin(codes), "n"].sum())
        for name, codes in _sets(ls).items()
    }
    section["by_set"] = {
        name: {c: _compare(rows, codes, c, cmp_kw) for c in CATEGORIES}
        for name, codes in _sets(ls).items()
    }
    section["denials"] = {c: _compare_denials(rows, c, cmp_kw) for c in CATEGORIES}
    section["denials"]["all_tracts"] = _compare_denials(rows, None, cmp_kw)
    section["denials_by_applicant"] = _by_applicant(rows, cmp_kw)
    section["by_year_market"] = [
        _cell(rows, cell, peers_by_cell[cell], ls, cmp_kw) for cell in cells
    ]
    section["stratified"] = _stratified(section["by_year_market"], ls.alpha)
    section["screen"] = _screen(agg, cells, cmp_kw, ls.lender)
    for entry in section["screen"]["lenders"]:
        entry["name"] = section["lender"]["name"] if entry["subject"] else names.get(entry["lei"])
    gaps, columns = _gaps(agg, frame, ids, area_cats, ls, cmp_kw)
    section["gaps"] = gaps
    for name, values in columns.items():
        frame[name] = values
    section["findings"] = _findings(section)
    return section


# --------------------------------------------------------------------------- reading


def _tract_source(
    spec: AuditSpec, ls: LendingSpec, frame: gpd.GeoDataFrame, ids: np.ndarray
) -> tuple[str, pd.DataFrame | None, dict[str, Any]]:
    """Choose where tract categories come from; the areas' categories when used."""
    source = tract_source_kind(ls, "minority_share" in frame.columns)
    pop = spec.population
    rule = pop.majority_minority_rule
    comparison = ">" if rule == "above" else ">="
    categories: dict[str, dict[str, Any]] = {
        "majority_minority": {
            "definition": f"minority share {comparison} {pop.majority_minority_share:g}"
        },
        "majority_black_hispanic": {
            "definition": f"Black and Hispanic share {comparison} {pop.majority_minority_share:g}"
        },
        "high_minority": {"definition": f"minority share {comparison} {ls.high_minority_share:g}"},
        "lmi": {
            "definition": "tract income below 80% of the area median (12 CFR 228.12(m); "
            "exactly 80 is middle-income)"
        },
    }
    if source == "records":
        note = (
            "tract categories from the records' appended tract fields "
            "(tract_minority_population_percent, tract_to_msa_income_percentage)"
        )
        categories["majority_black_hispanic"]["available"] = False
        categories["majority_black_hispanic"]["reason"] = (
            "the records carry no Black or Hispanic share of the tract; use the audit's "
            'demographics (tract_source = "areas") for this category'
        )
        for name in ("majority_minority", "high_minority", "lmi"):
            categories[name]["available"] = True
        return "records", None, {"source": note, "categories": categories}
    share = frame["minority_share"].to_numpy(dtype=float)
    cats = pd.DataFrame(index=pd.Index(ids, name="tract"))
    cats["majority_minority"] = share_flags(share, pop.majority_minority_share, rule)
    cats["high_minority"] = share_flags(share, ls.high_minority_share, rule)
    groups = ls.black_hispanic_groups or _black_hispanic(pop.group_names)
    if groups and all(f"{g}_share" in frame.columns for g in groups):
        bh = sum(frame[f"{g}_share"].to_numpy(dtype=float) for g in groups)
        cats["majority_black_hispanic"] = share_flags(
            np.asarray(bh, dtype=float), pop.majority_minority_share, rule
        )
        categories["majority_black_hispanic"]["groups"] = list(groups)
        categories["majority_black_hispanic"]["available"] = True
    else:
        cats["majority_black_hispanic"] = np.nan
        categories["majority_black_hispanic"]["available"] = False
        categories["majority_black_hispanic"]["reason"] = (
            "no Black and Hispanic groups found in [population]; name them with "
            "black_hispanic_groups in [lending]"
        )
    if "income_ratio" in frame.columns:
        cats["lmi"] = lmi_flags(frame["income_ratio"].to_numpy(dtype=float))
        categories["lmi"]["available"] = True
    else:
        cats["lmi"] = np.nan
        categories["lmi"]["available"] = False
        categories["lmi"]["reason"] = "no income_ratio in [population]"
    for name in ("majority_minority", "high_minority"):
        categories[name]["available"] = True
    note = "tract categories from the audit's own demographics ([areas] and [population])"
    return "areas", cats, {"source": note, "categories": categories}


def _black_hispanic(groups: list[str]) -> tuple[str, ...] | None:
    black = next((g for g in ("black_nh", "black") if g in groups), None)
    hispanic = next((g for g in ("hispanic", "hispanic_latino", "latino") if g in groups), None)
    return (black, hispanic) if black and hispanic else None


def _categories(
    agg: pd.DataFrame,
    source: str,
    area_cats: pd.DataFrame | None,
    tract_figures: pd.DataFrame | None,
    spec: AuditSpec,
    ls: LendingSpec,
) -> pd.DataFrame:
    """Category flags (1.0, 0.0, NaN unknown) for each row of ``agg``."""
    if source == "areas":
        assert area_cats is not None
        return area_cats.reindex(agg["tract"].to_numpy()).reset_index(drop=True)
    assert tract_figures is not None
    pop = spec.population
    share = tract_figures["minority_pct"].to_numpy(dtype=float) / 100.0
    table = pd.DataFrame(
        {
            "year": tract_figures["year"].to_numpy(),
            "tract": tract_figures["tract"].to_numpy(),
            "majority_minority": share_flags(
                share, pop.majority_minority_share, pop.majority_minority_rule
            ),
            "majority_black_hispanic": np.nan,
            "high_minority": share_flags(share, ls.high_minority_share, pop.majority_minority_rule),
            "lmi": lmi_flags(tract_figures["income_pct"].to_numpy(dtype=float)),
        }
    )
    merged = agg[["year", "tract"]].merge(table, on=["year", "tract"], how="left")
    return merged[list(CATEGORIES)].reset_index(drop=True)


# --------------------------------------------------------------------------- peers


def _volumes(agg: pd.DataFrame, actions: tuple[str, ...]) -> dict[tuple[int, str, str], float]:
    apps = agg.loc[agg["action"].isin(actions)]
    grouped = apps.groupby(["year", "market", "lei"])["n"].sum()
    return {(int(k[0]), str(k[1]), str(k[2])): float(v) for k, v in grouped.items()}


def _peers(
    ls: LendingSpec,
    agg: pd.DataFrame,
    volumes: dict[tuple[int, str, str], float],
    cells: list[tuple[int, str]],
) -> dict[tuple[int, str], tuple[str, ...]]:
    """Return the peers of the lender in each (year, market) cell, by the spec's rule."""
    present = agg.groupby(["year", "market"])["lei"].unique()
    out: dict[tuple[int, str], tuple[str, ...]] = {}
    for year, market in cells:
        leis = [str(x) for x in present.get((year, market), [])]
        if ls.peer_rule == "market":
            peers = tuple(sorted(x for x in leis if x != ls.lender))
        elif ls.peer_rule == "band":
            vol = {x: volumes.get((year, market, x), 0.0) for x in leis}
            peers = tuple(sorted(band_peers(vol, ls.lender, ls.band)))
        else:
            listed = set(ls.peers)
            peers = tuple(sorted(x for x in leis if x in listed))
        out[(year, market)] = peers
    return out


def _roles(
    agg: pd.DataFrame, subject: str, peers_by_cell: dict[tuple[int, str], tuple[str, ...]]
) -> np.ndarray:
    """Return ``"lender"``, ``"peer"`` or None for each row of ``agg`` (by its cell)."""
    table = pd.DataFrame(
        [
            (year, market, lei, role)
            for (year, market), peers in peers_by_cell.items()
            for lei, role in [(subject, "lender"), *((p, "peer") for p in peers)]
        ],
        columns=["year", "market", "lei", "role"],
    )
    merged = agg[["year", "market", "lei"]].merge(
        table, on=["year", "market", "lei"], how="left", validate="many_to_one"
    )
    return merged["role"].astype(object).where(merged["role"].notna(), None).to_numpy()


# --------------------------------------------------------------------------- comparisons


def _sets(ls: LendingSpec) -> dict[str, tuple[str, ...]]:
    return {k: v for k, v in SETS.items() if k != "preapprovals" or ls.preapprovals}


def _pair(sel: pd.DataFrame, count: pd.Series, total: pd.Series) -> tuple[float, ...]:
    lender = (sel["role"] == "lender").to_numpy()
    peer = (sel["role"] == "peer").to_numpy()
    return (
        float(count[lender].sum()),
        float(total[lender].sum()),
        float(count[peer].sum()),
        float(total[peer].sum()),
    )


def _compare(
    rows: pd.DataFrame, actions: tuple[str, ...], category: str, kw: dict[str, Any]
) -> dict[str, Any] | None:
    sel = rows.loc[rows["action"].isin(actions) & rows[category].notna()]
    if sel.empty and rows[category].isna().all():
        return None
    n = sel["n"].astype(float)
    return compare_shares(*_pair(sel, n * sel[category], n), **kw).to_dict()


def _compare_denials(
    rows: pd.DataFrame, category: str | None, kw: dict[str, Any]
) -> dict[str, Any] | None:
    sel = rows.loc[rows["action"].isin(DECIDED)]
    if category is not None:
        if rows[category].isna().all():
            return None
        sel = sel.loc[sel[category] == 1.0]
    n = sel["n"].astype(float)
    return compare_shares(*_pair(sel, n * (sel["action"] == DENIED), n), **kw).to_dict()


def _by_applicant(rows: pd.DataFrame, kw: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    decided = rows.loc[rows["action"].isin(DECIDED)]
    for key, column in (("race", "race"), ("ethnicity", "ethnicity")):
        values = sorted(v for v in decided[column].unique() if v)
        groups = {}
        for value in values:
            sel = decided.loc[decided[column] == value]
            n = sel["n"].astype(float)
            groups[str(value)] = compare_shares(
                *_pair(sel, n * (sel["action"] == DENIED), n), **kw
            ).to_dict()
        out[key] = groups
    return out


def _cell(
    rows: pd.DataFrame,
    cell: tuple[int, str],
    peers: tuple[str, ...],
    ls: LendingSpec,
    kw: dict[str, Any],
) -> dict[str, Any]:
    year, market = cell
    sel = rows.loc[(rows["year"] == year) & (rows["market"] == market)]
    return {
        "year": int(year),
        "market": str(market),
        "peer_lenders": len(peers),
        "by_set": {
            name: {c: _compare(sel, codes, c, kw) for c in CATEGORIES}
            for name, codes in _sets(ls).items()
        },
        "denials": {c: _compare_denials(sel, c, kw) for c in CATEGORIES},
    }


def _stratified(cells: list[dict[str, Any]], alpha: float) -> dict[str, Any]:
    """Mantel-Haenszel combination of the year-and-market cells, per set and category."""

    def combine(path: tuple[str, ...]) -> dict[str, Any] | None:
        tables = []
        for cell in cells:
            entry: Any = cell
            for key in path:
                entry = entry.get(key) if isinstance(entry, dict) else None
            if entry:
                tables.append(
                    (
                        entry["lender_count"],
                        entry["lender_total"],
                        entry["peer_count"],
                        entry["peer_total"],
                    )
                )
        return mantel_haenszel(tables, alpha=alpha).to_dict() if tables else None

    sets = list(cells[0]["by_set"]) if cells else []
    out: dict[str, Any] = {
        name: {c: combine(("by_set", name, c)) for c in CATEGORIES} for name in sets
    }
    out["denials"] = {c: combine(("denials", c)) for c in CATEGORIES}
    return out


def _screen(
    agg: pd.DataFrame, cells: list[tuple[int, str]], kw: dict[str, Any], subject: str
) -> dict[str, Any]:
    """Every lender's applications in majority-minority tracts against all other lenders."""
    keys = pd.MultiIndex.from_frame(agg[["year", "market"]])
    in_cells = keys.isin(cells)
    sel = agg.loc[in_cells & agg["action"].isin(SETS["applications"]).to_numpy()]
    sel = sel.loc[sel["majority_minority"].notna()]
    n = sel["n"].astype(float)
    by = (
        pd.DataFrame({"lei": sel["lei"], "total": n, "count": n * sel["majority_minority"]})
        .groupby("lei")[["count", "total"]]
        .sum()
    )
    all_count, all_total = float(by["count"].sum()), float(by["total"].sum())
    lenders = []
    by = by.reset_index().sort_values(["total", "lei"], ascending=[False, True], kind="stable")
    for lei, row in zip(by["lei"], by.to_dict("records"), strict=True):
        if row["total"] < SCREEN_MIN_APPLICATIONS and lei != subject:
            continue
        cmp = compare_shares(
            row["count"],
            row["total"],
            all_count - row["count"],
            all_total - row["total"],
            **kw,
        )
        lenders.append({"lei": str(lei), "subject": lei == subject, **cmp.to_dict()})
    return {
        "set": "applications",
        "category": "majority_minority",
        "against": "all other lenders in the lender's years and markets",
        "min_applications": SCREEN_MIN_APPLICATIONS,
        "lenders": lenders,
        "below_peers": [x["lei"] for x in lenders if x["below_peers"]],
        "not_below_peers": [x["lei"] for x in lenders if not x["below_peers"]],
    }


# --------------------------------------------------------------------------- gaps and map


def _gaps(
    agg: pd.DataFrame,
    frame: gpd.GeoDataFrame,
    ids: np.ndarray,
    area_cats: pd.DataFrame | None,
    ls: LendingSpec,
    kw: dict[str, Any],
) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Tracts of the footprint with no or few applications from the lender."""
    apps = agg.loc[agg["action"].isin(SETS["applications"])]
    by_tract = apps.groupby("tract")["n"].sum()
    own = apps.loc[apps["lei"] == ls.lender].groupby("tract")["n"].sum()
    lender_apps = own.reindex(ids).fillna(0.0).to_numpy(dtype=float)
    all_apps = by_tract.reindex(ids).fillna(0.0).to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(all_apps > 0, lender_apps / np.where(all_apps > 0, all_apps, 1), np.nan)
    served = frame["served"].to_numpy(dtype=bool)
    gap = served & (lender_apps <= ls.gap_max_applications)
    if area_cats is not None:
        mm = area_cats["majority_minority"].to_numpy(dtype=float)
    else:
        latest = apps.sort_values("year").groupby("tract")["majority_minority"].last()
        mm = latest.reindex(ids).to_numpy(dtype=float)
    known = served & np.isfinite(mm)
    in_mm, out_mm = known & (mm == 1.0), known & (mm == 0.0)
    cmp = compare_shares(
        float((gap & in_mm).sum()),
        float(in_mm.sum()),
        float((gap & out_mm).sum()),
        float(out_mm.sum()),
        **kw,
    ).to_dict()
    section = {
        "max_applications": ls.gap_max_applications,
        "footprint_tracts": int(served.sum()),
        "gap_tracts": int(gap.sum()),
        "gap_ids": [str(i) for i in ids[gap]],
        "majority_minority": {"tracts": int(in_mm.sum()), "gaps": int((gap & in_mm).sum())},
        "other": {"tracts": int(out_mm.sum()), "gaps": int((gap & out_mm).sum())},
        "unknown_category": int((served & ~np.isfinite(mm)).sum()),
        # lender_* is majority-minority tracts, peer_* the footprint's other tracts.
        "comparison": cmp,
    }
    columns = {
        "lender_applications": lender_apps,
        "lender_share": share,
        "lending_gap": gap,
    }
    return section, columns


def _scope(ls: LendingSpec, cells: list[tuple[int, str]]) -> dict[str, Any]:
    return {
        "years": sorted({y for y, _ in cells}),
        "markets": sorted({m for _, m in cells}),
        "market_by": ls.market_by,
        "cells": len(cells),
        "filters": {
            "years": list(ls.years) if ls.years else None,
            "markets": list(ls.markets) if ls.markets else None,
            "loan_purpose": list(ls.purposes) if ls.purposes else None,
            "lien_status": list(ls.liens) if ls.liens else None,
            "occupancy_type": list(ls.occupancy) if ls.occupancy else None,
            "total_units": list(ls.total_units) if ls.total_units else None,
            "loan_type": list(ls.loan_types) if ls.loan_types else None,
        },
    }


def _records_summary(readers: list[RecordReader], outside: int) -> dict[str, Any]:
    files = [{"file": r.path.name, **r.counts.to_dict()} for r in readers]
    malformed: dict[str, int] = {}
    filtered: dict[str, int] = {}
    for r in readers:
        for k, v in r.counts.malformed.items():
            malformed[k] = malformed.get(k, 0) + v
        for k, v in r.counts.filtered.items():
            filtered[k] = filtered.get(k, 0) + v
    kept = sum(r.counts.kept for r in readers)
    return {
        "files": files,
        "lines": sum(r.counts.lines for r in readers),
        "malformed": sum(malformed.values()),
        "malformed_by_reason": dict(sorted(malformed.items())),
        "filtered_out": sum(filtered.values()),
        "filtered_by": dict(sorted(filtered.items())),
        "outside_areas": outside,
        "analysed": kept - outside,
    }


def _findings(section: dict[str, Any]) -> list[str]:
    """Plain sentences for the report's key figures."""
    name = section["lender"]["name"]
    out = []
    mm = (section["by_set"].get("applications") or {}).get("majority_minority")
    if mm and mm.get("lender_share") is not None and mm.get("peer_share") is not None:
        verdict = (
            "significantly below its peers'"
            if mm["below_peers"]
            else "significantly above its peers'"
            if mm["above_peers"]
            else "not significantly different from its peers'"
        )
        out.append(
            f"{name}: {100 * mm['lender_share']:.1f}% of its applications come from "
            f"majority-minority tracts against {100 * mm['peer_share']:.1f}% for its "
            f"{section['peer_lenders']} peers ({section['peer_rule']} rule), {verdict} "
            f"(p = {mm['p_value']:.3g}, {mm['test']} test)."
            if mm.get("p_value") is not None
            else f"{name}: share of applications from majority-minority tracts "
            f"{100 * mm['lender_share']:.1f}% against peers' {100 * mm['peer_share']:.1f}%."
        )
    screen = section.get("screen") or {}
    below = [x.get("name") or x["lei"] for x in screen.get("lenders", []) if x["below_peers"]]
    not_below = [
        x.get("name") or x["lei"] for x in screen.get("lenders", []) if not x["below_peers"]
    ]
    if screen.get("lenders"):
        out.append(
            "Screen of every lender (applications in majority-minority tracts against all "
            f"others): below their peers: {', '.join(below) if below else 'none'}; not "
            f"below: {', '.join(not_below) if not_below else 'none'}."
        )
    gaps = section.get("gaps") or {}
    if gaps.get("footprint_tracts"):
        g_mm, g_other = gaps["majority_minority"], gaps["other"]
        most = gaps["max_applications"]
        few = "no" if most == 0 else f"at most {most}"
        out.append(
            f"Lending gaps (footprint tracts with {few} "
            f"applications from {name}): {g_mm['gaps']} of {g_mm['tracts']} majority-minority "
            f"tracts against {g_other['gaps']} of {g_other['tracts']} other tracts."
        )
    return out


# First of all: lending findings exist only when the spec asks for a lending review, whose
# subject they are (before the coverage gap of the branches' reach, which frames them).
@register_finding("lending", order=3)
def lending_findings(summary: Any) -> list[Finding]:
    """Return the lending review's headline findings (the sentences of its section)."""
    section = summary.get("lending")
    if not isinstance(section, dict) or not section.get("findings"):
        return []
    mm = (section.get("by_set") or {}).get("applications", {}).get("majority_minority") or {}
    gaps = (section.get("gaps") or {}).get("comparison") or {}
    screen = section.get("screen") or {}
    salient = [
        bool(mm.get("below_peers")),
        bool(screen.get("below_peers")),
        bool(gaps.get("above_peers")),
    ]
    figures = [
        {k: mm.get(k) for k in ("lender_share", "peer_share", "ratio", "p_value", "test")},
        {
            "below_peers": screen.get("below_peers"),
            "not_below_peers": screen.get("not_below_peers"),
        },
        {k: gaps.get(k) for k in ("lender_share", "peer_share", "p_value")},
    ]
    out = []
    for k, sentence in enumerate(section["findings"]):
        out.append(
            Finding(
                "lending",
                str(sentence),
                figures[k] if k < len(figures) else {},
                salient=salient[k] if k < len(salient) else False,
            )
        )
    return out
