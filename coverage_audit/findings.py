"""Headline findings: plain sentences with their numbers, built from the statistics.

:func:`build_findings` reads the summary (the content of summary.json) and returns the
``findings`` list: one ``{"kind", "sentence", "figures"}`` item per finding, the most
telling first. Nothing is written per scenario: each finding kind is a *builder*, a
function that takes the summary and returns zero or more :class:`Finding` objects, and
builders are kept in a registry (:data:`BUILDERS`), so a new statistic adds its own kind
with :func:`register_finding`::

    @register_finding("lending_gap", order=35)
    def _lending(summary):
        section = summary.get("lending")
        if not section:
            return []
        return [Finding("lending_gap", "...", {"ratio": section["ratio"]}, salient=True)]

Findings marked ``salient`` (a flag raised, an enclave found, a loss of service) come
first, each group in builder order; the rest follow. Sentences use the group labels of
the spec (``summary["group_labels"]``) and one sign convention everywhere: a
*difference* is a group's rate minus the comparison group's rate, in percentage points,
and sentences say "below" or "above" rather than printing a sign.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

__all__ = [
    "BUILDERS",
    "Finding",
    "build_findings",
    "headline_findings",
    "register_finding",
]


@dataclass(frozen=True)
class Finding:
    """One headline finding.

    Attributes
    ----------
    kind : str
        What it is about ("coverage_gap", "enclave", "clustering", ...).
    sentence : str
        The finding in plain words, with its numbers.
    figures : dict
        The numbers the sentence quotes, unrounded, keyed by name.
    salient : bool
        Whether it states something flagged or found (ordered first).
    """

    kind: str
    sentence: str
    figures: dict[str, Any] = field(default_factory=dict)
    salient: bool = False

    def to_dict(self) -> dict[str, Any]:
        """Plain data for summary.json."""
        return {"kind": self.kind, "sentence": self.sentence, "figures": dict(self.figures)}


Builder = Callable[[Mapping[str, Any]], list[Finding]]

#: Registered builders: (order, kind, function), kept sorted by order.
BUILDERS: list[tuple[int, str, Builder]] = []


def register_finding(kind: str, *, order: int = 100) -> Callable[[Builder], Builder]:
    """Register a finding builder (a decorator).

    Parameters
    ----------
    kind : str
        The kind of the findings it builds (one builder per kind; registering a kind
        again replaces the earlier builder).
    order : int
        Position among the builders (lower first); the built-in kinds use 10-90.
    """

    def wrap(function: Builder) -> Builder:
        BUILDERS[:] = [b for b in BUILDERS if b[1] != kind]
        BUILDERS.append((order, kind, function))
        BUILDERS.sort(key=lambda b: (b[0], b[1]))
        return function

    return wrap


def headline_findings(summary: Mapping[str, Any]) -> list[Finding]:
    """Return the headline findings of an audit as :class:`Finding` objects, salient first.

    Parameters
    ----------
    summary : mapping
        The audit summary; any section may be missing (its findings are then absent).
    """
    found: list[Finding] = []
    for _, _, builder in BUILDERS:
        found.extend(builder(summary))
    return [f for f in found if f.salient] + [f for f in found if not f.salient]


def build_findings(summary: Mapping[str, Any]) -> list[dict[str, Any]]:
    """Return the headline findings of an audit as summary.json's ``findings`` list.

    Parameters
    ----------
    summary : mapping
        The audit summary; any section may be missing (its findings are then absent).

    Returns
    -------
    list of dict
        ``{"kind", "sentence", "figures"}`` items, salient findings first.
    """
    return [f.to_dict() for f in headline_findings(summary)]


# --- wording ---------------------------------------------------------------------------


def number(value: Any) -> float | None:
    """Return a finite float, or None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value) if math.isfinite(value) else None


def pct(value: Any, digits: int = 1) -> str:
    """Format a share as a percentage: 0.1234 -> "12.3%"."""
    v = number(value)
    return "n/a" if v is None else f"{100 * v:.{digits}f}%"


def count(value: Any) -> str:
    """Format a count with thousands separators."""
    v = number(value)
    return "n/a" if v is None else f"{v:,.0f}"


def p_text(value: Any) -> str:
    """Format a p-value as quoted in sentences."""
    v = number(value)
    if v is None:
        return "n/a"
    return "< 0.001" if v < 0.001 else f"{v:.3f}"


def gap_words(difference: Any) -> str:
    """Say a difference (group rate minus comparison rate) in words: "12.5 percentage points below"."""
    v = number(difference)
    if v is None:
        return "n/a"
    points = abs(100 * v)
    if points < 0.05:
        return "level with"
    return f"{points:.1f} percentage points {'below' if v < 0 else 'above'}"


def label(summary: Mapping[str, Any], group: str) -> str:
    """Return the display label of a group (its name when the spec gives none)."""
    labels = summary.get("group_labels") or {}
    return str(labels.get(group, group))


def _unit(summary: Mapping[str, Any]) -> str:
    return str(summary.get("population_unit") or "people")


def _get(d: Any, *keys: str) -> Any:
    for k in keys:
        if not isinstance(d, Mapping):
            return None
        d = d.get(k)
    return d


# --- built-in builders -------------------------------------------------------------------

#: Level below which a p-value makes a finding salient (common practice, no source).
SIGNIFICANCE = 0.05
#: How many groups and enclaves the headline names at most.
MAX_GROUPS = 3
MAX_ENCLAVES = 2


def _interval(row: Mapping[str, Any]) -> tuple[float, float] | None:
    """Return a ratio interval where margins exist (``ratio_low``/``ratio_high`` or ``ratio_interval``)."""
    low, high = number(row.get("ratio_low")), number(row.get("ratio_high"))
    if low is None or high is None:
        pair = row.get("ratio_ci90") or row.get("ratio_interval") or row.get("ratio_ci")
        if isinstance(pair, (list, tuple)) and len(pair) == 2:
            low, high = number(pair[0]), number(pair[1])
    return None if low is None or high is None else (low, high)


@register_finding("coverage_gap", order=30)
def coverage_gaps(summary: Mapping[str, Any]) -> list[Finding]:
    """Who is left out: the groups with the lowest coverage ratios."""
    cov = summary.get("coverage")
    groups = _get(cov, "groups")
    if not isinstance(groups, Mapping) or not groups:
        return []
    comparison = str(_get(cov, "comparison_group") or _get(cov, "reference_group") or "")
    ref_rate = number(_get(groups, comparison, "rate"))
    rows = [
        (g, row)
        for g, row in groups.items()
        if g != comparison and isinstance(row, Mapping) and number(row.get("ratio")) is not None
    ]
    if not rows:
        return []
    rows.sort(key=lambda item: (item[1]["ratio"], item[0]))
    threshold = number(_get(cov, "four_fifths_threshold")) or 0.8
    flagged = [(g, r) for g, r in rows if r.get("below_four_fifths")]
    unit = _unit(summary)
    ref = label(summary, comparison)
    out: list[Finding] = []
    if not flagged:
        g, row = rows[0]
        lowest = number(row["ratio"])
        if lowest is not None and lowest >= 1:
            sentence = (
                f"No group is covered at a lower rate than {ref} ({pct(ref_rate)}); the lowest "
                f"ratio is {lowest:.2f} ({label(summary, g)})."
            )
        else:
            sentence = (
                f"No group's coverage falls below four-fifths of the rate of {ref} "
                f"({pct(ref_rate)}); the lowest is {label(summary, g)} at {pct(row.get('rate'))}, "
                f"a ratio of {row['ratio']:.2f}, {gap_words(row.get('difference'))} {ref}."
            )
        figures = {
            "group": g,
            "comparison_group": comparison,
            "rate": row.get("rate"),
            "comparison_rate": ref_rate,
            "ratio": row.get("ratio"),
            "difference": row.get("difference"),
            "below_four_fifths": False,
        }
        return [Finding("coverage_gap", sentence, figures)]
    for g, row in flagged[:MAX_GROUPS]:
        interval = _interval(row)
        extra = f" (90% interval {interval[0]:.2f} to {interval[1]:.2f})" if interval else ""
        uncertain = row.get("four_fifths_confidence") == "uncertain"
        sentence = (
            f"Of {count(row.get('population'))} {label(summary, g)} {unit}, "
            f"{pct(row.get('rate'))} are covered, against {pct(ref_rate)} of {ref} {unit}: "
            f"a ratio of {row['ratio']:.2f}{extra}, below four-fifths ({threshold:g}), "
            f"{gap_words(row.get('difference'))}"
            + (
                "; the interval reaches the four-fifths line, so the survey error leaves the "
                "flag uncertain."
                if uncertain
                else "."
            )
        )
        figures = {
            "group": g,
            "comparison_group": comparison,
            "population": row.get("population"),
            "rate": row.get("rate"),
            "comparison_rate": ref_rate,
            "ratio": row.get("ratio"),
            "difference": row.get("difference"),
            "below_four_fifths": True,
        }
        if interval:
            figures["ratio_interval"] = list(interval)
            figures["four_fifths_confidence"] = row.get("four_fifths_confidence")
        out.append(Finding("coverage_gap", sentence, figures, salient=True))
    return out


def _enclave_group(summary: Mapping[str, Any], enclave: Mapping[str, Any]) -> str | None:
    """Return the group to describe an enclave by.

    The contrast group of the enclave test when it is a named group, else the named group
    whose share most exceeds the ring's, else the contrast group.
    """
    contrast = _get(summary, "enclave_settings", "contrast_group")
    diffs = enclave.get("share_difference") or {}
    reference = _get(summary, "coverage", "reference_group")
    # The derived "minority" share is the complement of the reference group's; a named
    # group says more when one stands out.
    if isinstance(contrast, str) and contrast not in (reference, "minority") and contrast in diffs:
        return contrast
    named = {
        g: number(v)
        for g, v in diffs.items()
        if g not in (reference, "minority") and number(v) is not None
    }
    if named:
        best = max(sorted(named), key=lambda g: named[g] or 0.0)
        if (named[best] or 0.0) > 0:
            return best
    if isinstance(contrast, str) and contrast in (enclave.get("group_shares") or {}):
        return contrast
    return None


@register_finding("enclave", order=20)
def enclaves(summary: Mapping[str, Any]) -> list[Finding]:
    """Where: the most populous enclaves of unserved areas, against their ring."""
    items = summary.get("enclaves")
    if not isinstance(items, list) or not items:
        return []
    unit = _unit(summary)
    ranked = sorted(
        (e for e in items if isinstance(e, Mapping)),
        key=lambda e: (-(number(e.get("population")) or 0.0), str(e.get("id"))),
    )
    out = []
    for enclave in ranked[:MAX_ENCLAVES]:
        areas = len(enclave.get("area_ids") or [])
        g = _enclave_group(summary, enclave)
        sentence = (
            f"Enclave {enclave.get('id')}, {areas} unserved area{'s' if areas != 1 else ''} "
            f"with {count(enclave.get('population'))} {unit} enclosed by served areas"
        )
        figures: dict[str, Any] = {
            "id": enclave.get("id"),
            "areas": areas,
            "population": enclave.get("population"),
            "surround_share": enclave.get("surround_share"),
            "p_value": enclave.get("p_value"),
        }
        if g is not None:
            share = _get(enclave, "group_shares", g)
            ring = _get(enclave, "ring_group_shares", g)
            sentence += f", is {pct(share, 0)} {label(summary, g)} against {pct(ring, 0)} in the ring of areas around it"
            figures.update({"group": g, "group_share": share, "ring_group_share": ring})
        p = number(enclave.get("p_value"))
        contrast = _get(summary, "enclave_settings", "contrast_group")
        if p is not None:
            if g is None or g == contrast or not isinstance(contrast, str):
                sentence += f" (composition test p = {p_text(p)})"
            else:
                # The test is of the contrast group's share; say so when another is described.
                sentence += (
                    f" (test of the {label(summary, contrast)} share against random "
                    f"placements: p = {p_text(p)})"
                )
            figures["test_group"] = contrast
        # An enclave whose composition differs from its ring beyond chance leads the
        # headlines; one that does not is still listed, after the salient findings.
        salient = p is not None and p <= SIGNIFICANCE
        out.append(Finding("enclave", sentence + ".", figures, salient=salient))
    return out


@register_finding("clustering", order=50)
def clustering(summary: Mapping[str, Any]) -> list[Finding]:
    """How unusual: Moran's I of coverage and LISA cold spots in majority-minority tracts."""
    moran = _get(summary, "clustering", "moran")
    if not isinstance(moran, Mapping) or number(moran.get("I")) is None:
        return []
    i_value = float(moran["I"])
    p = number(moran.get("p_sim"))
    clustered = p is not None and p <= 0.05 and i_value > 0
    sentence = (
        f"Coverage is {'spatially clustered' if clustered else 'not clearly clustered'}: "
        f"Moran's I {i_value:.2f} (pseudo p {p_text(p)}, "
        f"{count(moran.get('permutations'))} permutations)"
    )
    figures: dict[str, Any] = {"I": moran.get("I"), "p_sim": moran.get("p_sim")}
    local = _get(summary, "clustering", "local_moran")
    rows = _get(local, "crosstab", "rows")
    cold = _get(rows, "low-low") if isinstance(rows, Mapping) else None
    if isinstance(cold, Mapping):
        mm = _get(cold, "majority_minority", "areas") or 0
        other = _get(cold, "not_majority_minority", "areas") or 0
        total = int(mm) + int(other)
        corrected = " after false-discovery-rate correction" if _get(local, "fdr") == "bh" else ""
        if total:
            sentence += (
                f"; {total} area{'s' if total != 1 else ''} form cold spots of coverage "
                f"(LISA low-low{corrected}), {int(mm)} of them majority-minority tracts "
                f"({count(_get(cold, 'majority_minority', 'population'))} {_unit(summary)})"
            )
        else:
            sentence += f"; no cold spot of coverage (LISA low-low{corrected})"
        figures.update(
            {
                "cold_spots": total,
                "cold_spots_majority_minority": int(mm),
                "cold_spots_majority_minority_population": _get(
                    cold, "majority_minority", "population"
                ),
            }
        )
    salient = clustered and bool(figures.get("cold_spots_majority_minority"))
    return [Finding("clustering", sentence + ".", figures, salient=salient)]


@register_finding("models", order=60)
def models(summary: Mapping[str, Any]) -> list[Finding]:
    """Whether other factors explain it: minority odds ratio alone and with controls."""
    section = _get(summary, "explain", "models")
    if not isinstance(section, Mapping):
        return []
    change = [r for r in section.get("minority_change") or [] if r.get("kind") == "logit"]
    if not change:
        return []
    row = change[0]
    alone, with_controls = (
        number(row.get("odds_ratio_alone")),
        number(row.get("odds_ratio_with_controls")),
    )
    if alone is None:
        return []
    controls = [str(c) for c in section.get("controls") or []]
    sentence = (
        f"Each 10-point rise in an area's minority share multiplies the odds of the area "
        f"being unserved by {alone:.2f}"
    )
    if with_controls is not None:
        sentence += f", and by {with_controls:.2f} with controls ({', '.join(controls) or 'none'})"
    residual = _get(section, "models", "unserved_with_controls", "residual_moran") or _get(
        section, "models", "unserved_minority_only", "residual_moran"
    )
    figures: dict[str, Any] = {
        "odds_ratio_alone": alone,
        "odds_ratio_with_controls": with_controls,
        "controls": controls,
    }
    if isinstance(residual, Mapping) and number(residual.get("I")) is not None:
        sentence += (
            f"; the residuals stay clustered (Moran's I {float(residual['I']):.2f}), so the "
            "model does not account for where areas lie"
            if residual.get("space_not_accounted_for")
            else f"; residual Moran's I {float(residual['I']):.2f}"
        )
        figures["residual_moran_I"] = residual.get("I")
    salient = with_controls is not None and with_controls > 1.5
    return [Finding("models", sentence + ".", figures, salient=salient)]


@register_finding("sensitivity", order=70)
def sensitivity(summary: Mapping[str, Any]) -> list[Finding]:
    """State what did not hold: sweeps in which a four-fifths flag disappears."""
    section = summary.get("sensitivity")
    if not isinstance(section, Mapping):
        return []
    out: list[Finding] = []
    sweeps = (("thresholds", "threshold", "served threshold"), ("radius", "radius_m", "reach"))
    for key, setting, words in sweeps:
        rows = section.get(key)
        if not isinstance(rows, list) or not rows:
            continue
        # The flags raised at the audit's own settings: do they hold across the sweep?
        flagged = [
            g
            for g, v in (_get(summary, "coverage", "groups") or {}).items()
            if isinstance(v, Mapping) and v.get("below_four_fifths")
        ]
        if not flagged:
            continue
        holds, lost = [], {}
        for g in flagged:
            off = [r.get(setting) for r in rows if not _get(r, "groups", g, "below_four_fifths")]
            if off:
                lost[g] = off
            else:
                holds.append(g)
        values = [r.get(setting) for r in rows]
        span = f"{_setting(values[0], setting)} to {_setting(values[-1], setting)}"
        parts = []
        if holds:
            parts.append(
                f"the four-fifths flag of {', '.join(label(summary, g) for g in holds)} holds "
                f"at every {words} from {span}"
            )
        for g, off in lost.items():
            parts.append(
                f"the flag of {label(summary, g)} disappears at {words} "
                + ", ".join(_setting(v, setting) for v in off)
            )
        sentence = "Across the " + words + " sweep, " + "; ".join(parts) + "."
        out.append(
            Finding(
                "sensitivity",
                sentence,
                {"sweep": key, "holds": holds, "disappears": {g: v for g, v in lost.items()}},
                salient=bool(lost),
            )
        )
    return out


def _setting(value: Any, setting: str) -> str:
    v = number(value)
    if v is None:
        return "n/a"
    if setting == "radius_m":
        return f"{v / 1000:g} km" if v >= 1000 else f"{v:g} m"
    return f"{v:g}"


@register_finding("change", order=10)
def change(summary: Mapping[str, Any]) -> list[Finding]:
    """Service lost and gained between two footprints (sites closed and opened)."""
    section = summary.get("change")
    if not isinstance(section, Mapping):
        return []
    lost, gained = section.get("lost_service") or {}, section.get("gained_service") or {}
    n_lost, n_gained = int(lost.get("count") or 0), int(gained.get("count") or 0)
    unit = _unit(summary)
    before, after = section.get("before"), section.get("after")
    between = f"From {before} to {after}" if before and after else "Between the two footprints"
    closed = section.get("sites_closed") or []
    sites = ""
    if closed:
        names = ", ".join(str(s) for s in closed[:3]) + (" ..." if len(closed) > 3 else "")
        sites = f" ({len(closed)} site{'s' if len(closed) != 1 else ''} closed: {names})"
    sentence = (
        f"{between}{sites}, {n_lost} area{'s' if n_lost != 1 else ''} lost service "
        f"({count(lost.get('population'))} {unit})"
    )
    share = _get(lost, "group_shares", "minority")
    overall = _overall_share(summary, "minority")
    if number(share) is not None:
        sentence += f", {pct(share, 0)} minority against {pct(overall, 0)} across all areas"
    sentence += f"; {n_gained or 'none'} gained service."
    figures = {
        "lost_areas": n_lost,
        "lost_population": lost.get("population"),
        "lost_minority_share": share,
        "overall_minority_share": overall,
        "gained_areas": n_gained,
        "sites_closed": list(closed),
    }
    return [Finding("change", sentence, figures, salient=n_lost > 0)]


def _overall_share(summary: Mapping[str, Any], group: str) -> float | None:
    pop = number(_get(summary, "coverage", "groups", group, "population"))
    total = number(_get(summary, "coverage", "population"))
    return pop / total if pop is not None and total else None


@register_finding("peers", order=80)
def peers(summary: Mapping[str, Any]) -> list[Finding]:
    """Lenders whose share of activity in majority-minority tracts falls below peers'."""
    section = summary.get("peers")
    if not isinstance(section, Mapping):
        return []
    out = []
    for row in section.get("lenders") or []:
        if not row.get("below_peers"):
            continue
        sentence = (
            f"{row.get('lender')} makes {pct(row.get('share'))} of its activity in "
            f"majority-minority tracts against {pct(row.get('peer_share'))} for its peers "
            f"(p {p_text(row.get('p_below'))})."
        )
        figures = {
            k: row.get(k) for k in ("lender", "share", "peer_share", "difference", "p_below")
        }
        out.append(Finding("peers", sentence, figures, salient=True))
    return out


def _area_name(summary: Mapping[str, Any], *, start: bool = True) -> str:
    """Name a footprint of listed tracts: "The listed tracts of <footprint>"."""
    name = _get(summary, "footprint", "name")
    text = f"the listed tracts of {name}" if name else "the listed tracts"
    return text[0].upper() + text[1:] if start else text


def _ids_text(ids: list[Any], limit: int = 4) -> str:
    shown = ", ".join(str(i) for i in ids[:limit])
    return shown + (f" and {len(ids) - limit} more" if len(ids) > limit else "")


@register_finding("assessment_area", order=5)
def assessment_area(summary: Mapping[str, Any]) -> list[Finding]:
    """Review an assessment area of whole tracts (12 CFR 228.41(d) and (e)).

    Adjacent LMI and majority-minority tracts left out, partial counties, and the area's
    LMI and majority-minority shares against its counties.
    """
    section = summary.get("assessment_area")
    if not isinstance(section, Mapping):
        return []
    unit = _unit(summary)
    out: list[Finding] = []
    lmi = section.get("adjacent_excluded_lmi") or {}
    mm = section.get("adjacent_excluded_majority_minority") or {}
    n_lmi, n_mm = int(lmi.get("count") or 0), int(mm.get("count") or 0)
    if n_lmi or n_mm:
        parts = []
        if n_lmi:
            parts.append(
                f"{n_lmi} low- or moderate-income tract{'s' if n_lmi != 1 else ''} "
                f"({_ids_text(list(lmi.get('ids') or []))}; {count(lmi.get('population'))} {unit})"
            )
        if n_mm:
            parts.append(
                f"{n_mm} majority-minority tract{'s' if n_mm != 1 else ''} "
                f"({count(mm.get('population'))} {unit})"
            )
        sentence = (
            f"{_area_name(summary)} leave out " + " and ".join(parts) + " that border them "
            "(an assessment area may not arbitrarily exclude low- or moderate-income tracts, "
            "12 CFR 228.41(e))."
        )
        out.append(
            Finding(
                "assessment_area",
                sentence,
                {
                    "adjacent_excluded_lmi": n_lmi,
                    "adjacent_excluded_lmi_ids": list(lmi.get("ids") or []),
                    "adjacent_excluded_lmi_population": lmi.get("population"),
                    "adjacent_excluded_majority_minority": n_mm,
                    "adjacent_excluded_majority_minority_population": mm.get("population"),
                },
                salient=True,
            )
        )
    share, region = section.get("lmi_share"), section.get("lmi_share_counties")
    mm_share, mm_region = (
        section.get("majority_minority_share"),
        section.get("majority_minority_share_counties"),
    )
    counties = ", ".join(str(c) for c in section.get("counties") or []) or "n/a"
    if number(share) is not None and number(region) is not None:
        sentence = (
            f"Low- or moderate-income tracts are {pct(share)} of "
            f"{_area_name(summary, start=False)} against {pct(region)} of all tracts of "
            f"the count{'ies' if len(section.get('counties') or []) > 1 else 'y'} "
            f"around them ({counties})"
        )
        if number(mm_share) is not None and number(mm_region) is not None:
            sentence += f"; majority-minority tracts {pct(mm_share)} against {pct(mm_region)}"
        below = (number(share) or 0) < (number(region) or 0) or (number(mm_share) or 0) < (
            number(mm_region) or 0
        )
        out.append(
            Finding(
                "assessment_area",
                sentence + ".",
                {
                    "lmi_share": share,
                    "lmi_share_counties": region,
                    "majority_minority_share": mm_share,
                    "majority_minority_share_counties": mm_region,
                    "counties": list(section.get("counties") or []),
                },
                salient=below,
            )
        )
    partial = section.get("partial_counties") or {}
    if partial:
        listed = "; ".join(
            f"county {c}: {v.get('inside')} of {v.get('areas')} tracts" for c, v in partial.items()
        )
        out.append(
            Finding(
                "assessment_area",
                f"{_area_name(summary)} take in only part of {len(partial)} "
                f"count{'ies' if len(partial) != 1 else 'y'} ({listed}); a partial county "
                "should be the part the institution can reasonably serve.",
                {"partial_counties": {k: dict(v) for k, v in partial.items()}},
            )
        )
    return out
