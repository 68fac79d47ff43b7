"""Console summary: a short, readable table of the findings and where the files are."""

from __future__ import annotations

from pathlib import Path
from typing import IO, Any


def _pct(value: float | None) -> str:
    return "n/a" if value is None else f"{100 * value:.1f}%"


def _num(value: float | None, digits: int = 2) -> str:
    return "n/a" if value is None else f"{value:.{digits}f}"


def _interval(ci: Any, fmt: Any) -> str:
    return "n/a" if not ci else f"{fmt(ci[0])}-{fmt(ci[1])}"


def print_summary(result: Any, paths: dict[str, Path], *, seconds: float, stream: IO[str]) -> None:
    """Print the coverage table, key statistics and output paths with rich."""
    from rich.console import Console
    from rich.table import Table

    console = Console(file=stream, highlight=False, soft_wrap=True)
    s = result.summary
    cov = s["coverage"]
    areas = s["areas"]
    console.print(
        f"\n[bold]{s['title']}[/bold]  footprint: {s['footprint']['name']} ({s['footprint']['kind']})"
    )
    if s.get("population_notice"):
        console.print(f"[bold]note:[/bold] {s['population_notice']}")
    console.print(
        f"areas: {areas['input']} in, {areas['analysed']} analysed, {areas['excluded']} excluded; "
        f"served: {cov['served_areas']} of {cov['areas']} (threshold {cov['served_threshold']:g})"
    )
    for entry in (s.get("inputs") or {}).get("tables") or []:
        rate = entry.get("match_rate")
        console.print(
            f"table {Path(entry['path']).name}"
            + (f" ({entry['layout']})" if entry.get("layout") else "")
            + f": {entry['matched']} of {entry['rows']} rows matched the areas"
            + ("" if rate is None else f" ({100 * rate:.1f}%)")
        )
    labels = s.get("group_labels") or {}
    unit = s.get("population_unit") or "people"
    table = Table(show_edge=False, header_style="bold")
    comparison = labels.get(cov["comparison_group"], cov["comparison_group"])
    console.print(
        f"[dim]coverage = areal-weighted rate; served = share living in served areas; ratio and "
        f"diff (percentage points) against {comparison}; <4/5 = ratio below four-fifths[/dim]"
    )
    margins = cov.get("uncertainty") in ("delta", "replicates")
    columns = ["group", unit, "coverage", "served", "ratio", "diff pp", "<4/5"]
    if margins:
        console.print(
            "[dim]ratio 90% = interval from the survey margins; <4/5 with ? = the interval "
            "straddles 0.8 (four-fifths flag uncertain)[/dim]"
        )
        columns[5:5] = ["ratio 90%"]
    for col in columns:
        table.add_column(
            col,
            justify="left" if col == "group" else "right",
            no_wrap=col in ("ratio 90%", unit),
            # Labels such as "Black alone, not Hispanic" wrap in two lines, not five.
            min_width=22 if col == "group" else None,
        )
    for g, row in cov["groups"].items():
        diff = row["difference"]
        flag = "yes" if row["below_four_fifths"] else ""
        if margins and row.get("four_fifths_confidence") == "uncertain":
            flag = "yes?" if flag else "?"
        cells = [
            labels.get(g, g),
            f"{row['population']:,.0f}",
            _pct(row["rate"]),
            _pct(row["served_area_rate"]),
            _num(row["ratio"]),
            "n/a" if diff is None else f"{100 * diff:+.1f}",
            flag,
        ]
        if margins:
            cells[5:5] = [_interval(row.get("ratio_ci90"), _num)]
        table.add_row(*cells)
    console.print(table)
    findings = s.get("findings") or []
    if findings:
        console.print("[bold]Findings[/bold]")
        for item in findings:
            console.print(f"- {item['sentence']}")
    seg = s.get("segregation")
    if seg:
        d = ", ".join(
            f"{labels.get(g, g)} {_num(v)}" for g, v in seg.get("dissimilarity", {}).items()
        )
        ref = seg.get("reference_group")
        console.print(f"dissimilarity vs {labels.get(ref, ref)}: {d}")
    clu = s.get("clustering")
    if clu and clu.get("moran"):
        m = clu["moran"]
        console.print(
            f"Moran's I of covered fraction: {_num(m.get('I'), 3)} (pseudo p {_num(m.get('p_sim'), 3)}, {m.get('permutations')} permutations)"
        )
    enclaves = s.get("enclaves")
    if enclaves is not None:
        top = ", ".join(f"{e['id']} ({e['population']:,.0f} {unit})" for e in enclaves[:3])
        console.print(f"enclaves: {len(enclaves)}" + (f"; largest {top}" if top else ""))
    comparison = s.get("comparison")
    if comparison:
        ranked = ", ".join(
            f"{f['rank']}. {f['name']} (worst ratio {_num(f.get('worst_ratio'))})"
            for f in comparison.get("footprints", [])
        )
        console.print(f"footprints ranked: {ranked}")
    change = s.get("change")
    if change:
        lost, gained = change.get("lost_service", {}), change.get("gained_service", {})
        console.print(
            f"change: {lost.get('count', 0)} areas lost service ({lost.get('population', 0):,.0f} "
            f"{unit}), {gained.get('count', 0)} gained"
        )
    peers = s.get("peers")
    if peers:
        flagged = [row["lender"] for row in peers.get("lenders", []) if row.get("below_peers")]
        console.print(
            f"lenders below peers in majority-minority tracts: {', '.join(flagged) or 'none'}"
        )
    access = s.get("access")
    if access:
        ratios = ", ".join(f"{g} {_num(row.get('ratio'))}" for g, row in access["groups"].items())
        console.print(
            f"access ({access['method']}), mean ratio to {access['reference_group']}: {ratios}"
        )
    models = (s.get("explain") or {}).get("models") or {}
    for row in models.get("minority_change", []):
        if row.get("kind") == "logit":
            console.print(
                f"odds of not being served per +10 pp minority share: {_num(row.get('odds_ratio_alone'))} "
                f"alone, {_num(row.get('odds_ratio_with_controls'))} with controls"
            )
    if models.get("skipped"):
        console.print(f"exclusion models not estimated: {models['skipped']}")
    ex = s.get("exclusions", {})
    if ex.get("count"):
        console.print(f"excluded rows: {ex['count']} (see exclusions.csv)")
    console.print(
        "[dim]A disparity is a reason to look closer, not proof of discrimination; see the report's cautions.[/dim]"
    )
    out_dir = paths["summary"].parent
    names = ", ".join(p.name for p in paths.values())
    console.print(f"wrote {out_dir}/: {names}  ({seconds:.1f} s)")
