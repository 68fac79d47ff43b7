"""The audit report page: one self-contained, printable report.html.

Takes the findings (the ``summary`` dict written to summary.json), the run ``manifest``,
the analysed ``areas`` (a GeoDataFrame in the projected analysis CRS), the exclusions
table and the dissolved footprint, and gives one HTML file with the stylesheet and every
figure inline (SVG drawn by :mod:`coverage_audit.report.charts`): what was audited,
coverage by group, segregation, clustering, enclaves, the further analyses (footprints
compared, change between footprints, lending against peers, models and rules, sensitivity
sweeps), methods and cautions. Sections
appear only when their data are present, and a missing value shows as "n/a". Every value
taken from the inputs is HTML-escaped; the page holds no script, refers to nothing on a
network, and its Content-Security-Policy forbids both. The same inputs give the same
bytes, apart from the run times quoted from the manifest.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from importlib import resources
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import scipy.sparse as sp

from ..errors import InputError
from ..outputs import write_bytes
from . import blocks_section, further, uncertainty_section
from .assessment_section import ANCHOR as ASSESSMENT_ANCHOR
from .assessment_section import TITLE as ASSESSMENT_TITLE
from .assessment_section import assessment_area_section
from .audited_section import audited_section
from .enclave_sections import contrast_group, enclave_order, enclaves_section
from .findings_section import findings_section
from .markup import (
    NA,
    Findings,
    Html,
    as_number,
    fill,
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
    ordered,
    para,
    section,
    summary_data,
    tag,
)
from .sections import (
    EXCLUSION_COLUMNS,
    MAX_ENCLAVE_FIGURES,
    MAX_LISTED_EXCLUSIONS,
    Page,
    clustering_section,
    coverage_section,
    segregation_section,
)
from .text import ASSOCIATION_CAUTION, FOUR_FIFTHS_NOTE, METHODS, STANDARD_CAUTIONS

__all__ = [
    "MAX_ENCLAVE_FIGURES",
    "MAX_LISTED_EXCLUSIONS",
    "NA",
    "build_report",
    "fmt_auto",
    "fmt_bool",
    "fmt_count",
    "fmt_distance",
    "fmt_fixed",
    "fmt_p",
    "fmt_param",
    "fmt_percent",
    "fmt_points",
    "moran_points",
    "render_report",
]

#: The summary.json schema this page renders.
SUPPORTED_SCHEMA_VERSION = 1
REQUIRED_AREA_COLUMNS = ("geometry", "served", "covered_fraction")
#: Row sums of a row-standardised matrix may differ from 1 by rounding only.
ROW_SUM_TOLERANCE = 1e-8

#: Nothing may load: no script, no remote style, font or image; images only as data URIs.
CONTENT_SECURITY_POLICY = (
    "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; "
    "form-action 'none'"
)


# --- inputs ----------------------------------------------------------------------------


def _check_inputs(
    summary: Any,
    manifest: Any,
    areas: Any,
    exclusions: Any,
    id_column: str,
    groups: Sequence[str],
    reference: str,
) -> None:
    if not isinstance(summary, Mapping):
        raise InputError(
            f"report: summary must be the summary.json mapping, not {type(summary).__name__}"
        )
    version = summary.get("schema_version")
    if version != SUPPORTED_SCHEMA_VERSION:
        raise InputError(
            f"report: summary schema_version is {version!r} but this report renders "
            f"schema_version {SUPPORTED_SCHEMA_VERSION}; rerun the audit with this version"
        )
    if not isinstance(manifest, Mapping):
        raise InputError(
            f"report: manifest must be the manifest.json mapping, not {type(manifest).__name__}"
        )
    if not isinstance(areas, gpd.GeoDataFrame):
        raise InputError(
            f"report: areas must be a GeoDataFrame of the analysed areas, not "
            f"{type(areas).__name__}"
        )
    missing = [c for c in (id_column, *REQUIRED_AREA_COLUMNS) if c not in areas.columns]
    if missing:
        raise InputError(
            f"report: areas has no column {', '.join(map(repr, missing))}; it needs the id "
            f"column {id_column!r} and {', '.join(REQUIRED_AREA_COLUMNS)} "
            f"(columns present: {', '.join(map(str, areas.columns))})"
        )
    if not groups:
        raise InputError("report: groups is empty; pass the group names of the audit")
    if reference not in groups:
        raise InputError(
            f"report: reference group {reference!r} is not among groups {list(groups)!r}; "
            "pass the reference group's name as it appears in groups"
        )
    if exclusions is not None:
        if not isinstance(exclusions, pd.DataFrame):
            raise InputError(
                f"report: exclusions must be a DataFrame, not {type(exclusions).__name__}"
            )
        absent = [c for c in EXCLUSION_COLUMNS if c not in exclusions.columns]
        if absent:
            raise InputError(
                f"report: exclusions has no column {', '.join(map(repr, absent))}; expected "
                f"columns {', '.join(EXCLUSION_COLUMNS)}"
            )


def _check_target(path: Path) -> None:
    if path.is_dir():
        raise InputError(f"report: {path} is a folder; pass the path of report.html")
    if not path.parent.is_dir():
        raise InputError(
            f"report: output folder {path.parent} does not exist; create it before writing "
            "the report"
        )


def moran_points(
    areas: gpd.GeoDataFrame,
    *,
    moran_lag: Any = None,
    moran_weights: Any = None,
    moran_mask: Any = None,
) -> tuple[np.ndarray, np.ndarray] | None:
    """Return the Moran scatterplot's points: ``(z, W z)`` of ``covered_fraction``.

    Parameters
    ----------
    areas : geopandas.GeoDataFrame
        The analysed areas, with ``covered_fraction``.
    moran_lag, moran_weights, moran_mask
        As in :func:`build_report`; ``moran_lag`` wins when both it and the weights are
        given.

    Returns
    -------
    tuple of numpy.ndarray or None
        Standardised covered fraction of the areas in the statistics and its spatial lag;
        ``None`` when neither lag nor weights are given or the covered fraction is
        constant (no scatterplot to draw).

    Raises
    ------
    InputError
        If the lag, weights or mask do not match ``areas``, the weights are not
        row-standardised, or a value needed is missing.

    Notes
    -----
    ``z`` uses the population standard deviation, as Moran's I does, so that with
    row-standardised weights the least-squares slope of ``W z`` on ``z`` is I (Anselin
    1996, "The Moran scatterplot as an ESDA tool").
    """
    if moran_lag is None and moran_weights is None:
        return None
    n = len(areas)
    mask = None
    if moran_mask is not None:
        mask = np.asarray(moran_mask, dtype=bool).ravel()
        if mask.size != n:
            raise InputError(
                f"report: moran_mask has {mask.size} entries but areas has {n} rows; pass "
                "one boolean per area (True where the area is in the spatial statistics)"
            )
    y_all = pd.to_numeric(areas["covered_fraction"], errors="coerce").to_numpy(dtype=float)
    if moran_lag is None:
        matrix, mask = _weights_matrix(moran_weights, mask, n)
        z = _standardise(y_all[mask])
        return None if z is None else (z, np.asarray(matrix @ z).ravel())
    lag = np.asarray(moran_lag, dtype=float).ravel()
    if lag.size == n:
        mask = np.isfinite(lag) if mask is None else mask
        lag = lag[mask]
    elif mask is None or lag.size != int(mask.sum()):
        raise InputError(
            f"report: moran_lag has {lag.size} values but areas has {n} rows; pass one value "
            "per area (NaN where left out) or one per area marked in moran_mask"
        )
    if not np.all(np.isfinite(lag)):
        raise InputError("report: moran_lag is missing for areas marked as in the statistics")
    z = _standardise(y_all[mask])
    return None if z is None else (z, lag)


def _weights_matrix(weights: Any, mask: np.ndarray | None, n: int) -> tuple[Any, np.ndarray]:
    matrix = getattr(weights, "sparse", weights)
    if not sp.issparse(matrix):
        raise InputError(
            "report: moran_weights must be a scipy sparse matrix or a libpysal Graph, not "
            f"{type(weights).__name__}"
        )
    matrix = sp.csr_matrix(matrix, dtype=float)
    if matrix.shape == (n, n):
        if mask is None:
            mask = np.asarray(matrix.sum(axis=1)).ravel() != 0
        keep = np.flatnonzero(mask)
        matrix = matrix[keep][:, keep]
    elif mask is None or matrix.shape != (int(mask.sum()),) * 2:
        raise InputError(
            f"report: moran_weights is {matrix.shape[0]} x {matrix.shape[1]} but areas has "
            f"{n} rows; pass an n x n matrix in the order of areas, or an m x m one with "
            "moran_mask marking its m areas"
        )
    row_sums = np.asarray(matrix.sum(axis=1)).ravel()
    if not np.allclose(row_sums[row_sums != 0], 1.0, rtol=0.0, atol=ROW_SUM_TOLERANCE):
        raise InputError(
            "report: moran_weights is not row-standardised (row sums differ from 1); pass "
            "the row-standardised weights the Moran statistics used"
        )
    return matrix, mask


def _standardise(y: np.ndarray) -> np.ndarray | None:
    if not np.all(np.isfinite(y)):
        raise InputError(
            "report: covered_fraction is missing for areas in the spatial statistics; every "
            "area that takes part needs a covered fraction"
        )
    if y.size == 0 or float(y.std()) == 0.0:
        return None
    return (y - y.mean()) / y.std()


# --- top of the page -------------------------------------------------------------------


def _header(page: Page) -> Html:
    m = page.manifest
    run = f"Report of {m.get('tool') or 'coverage_audit'}"
    run += f" {m['version']}" if m.get("version") else ""
    if m.get("started"):
        run += f"; run started {m['started']}"
    if m.get("finished"):
        run += f", finished {m['finished']}"
    title = page.summary.get("title") or "Coverage audit"
    notice = page.summary.get("population_notice")
    said = para(f"Note: {notice}.", class_="note population-notice") if notice else ""
    return tag("header", tag("h1", title), para(run), said, class_="report-head")


def _cautions(page: Page) -> tuple[tuple[str, str, str], ...]:
    """Return the standard cautions, and the one on causes when models or rules are shown."""
    explained = {"explain_models", "explain_rules"} & further.method_topics(page.summary)
    return STANDARD_CAUTIONS + ((ASSOCIATION_CAUTION,) if explained else ())


def _cautions_box(page: Page) -> Html:
    items = [tag("li", tag("strong", short)) for short, _, _ in _cautions(page)]
    items.append(tag("li", "Four-fifths flags are a screening rule of thumb, not a legal test."))
    items.append(
        tag(
            "li",
            "Each caution is explained in ",
            tag("a", "Cautions", href="#cautions"),
            " at the end of this report.",
        )
    )
    return tag(
        "aside",
        tag("h2", "Read this first"),
        tag("ul", *items),
        class_="cautions-box",
        id="cautions-summary",
    )


def _key_figures(page: Page) -> Html:
    s = page.summary
    items: list[Html] = []
    areas = s.get("areas") or {}
    if areas:
        items.append(
            tag(
                "li",
                f"{fmt_count(areas.get('analysed'))} areas analysed of "
                f"{fmt_count(areas.get('input'))} in the input; "
                f"{fmt_count(areas.get('excluded'))} excluded.",
            )
        )
    cov = get_in(s, "coverage", "groups")
    if isinstance(cov, Mapping) and cov:
        flagged = [g for g in ordered(page.groups, cov) if get_in(cov, g, "below_four_fifths")]
        if flagged:
            parts = "; ".join(
                f"{page.label(g)} {fmt_percent(get_in(cov, g, 'rate'))} (ratio "
                f"{fmt_fixed(get_in(cov, g, 'ratio'))})"
                for g in flagged
            )
            items.append(
                tag(
                    "li",
                    "Coverage rate below four-fifths of the rate of "
                    f"{page.comparison_label}: {parts}.",
                )
            )
        else:
            items.append(
                tag(
                    "li",
                    "No group's coverage rate is below four-fifths of the rate "
                    f"of {page.comparison_label}.",
                )
            )
    moran = get_in(s, "clustering", "moran")
    if isinstance(moran, Mapping):
        items.append(
            tag(
                "li",
                f"Moran's I of {moran.get('variable') or 'covered_fraction'}: "
                f"{fmt_fixed(moran.get('I'), 4)} (pseudo p-value "
                f"{fmt_p(moran.get('p_sim'))}).",
            )
        )
    enclaves = s.get("enclaves")
    if isinstance(enclaves, list):
        if enclaves:
            top = min(enclaves, key=enclave_order)
            plural = "s" if len(enclaves) != 1 else ""
            items.append(
                tag(
                    "li",
                    f"{len(enclaves)} enclave{plural} of unserved areas enclosed "
                    f"by served ones; the most populous, {top.get('id') or NA}, has "
                    f"{fmt_count(top.get('population'))} {page.residents}.",
                )
            )
        else:
            items.append(tag("li", "No enclave of unserved areas was found."))
    items.extend(further.key_figures(page))
    if not items:
        return Html("")
    return tag("section", tag("h2", "Key figures"), tag("ul", *items), class_="key-figures")


def _toc(entries: Sequence[tuple[str, str]]) -> Html:
    links = [tag("li", tag("a", title, href=f"#{anchor}")) for anchor, title in entries]
    return tag("nav", tag("strong", "Contents"), tag("ol", *links), class_="toc")


def _spec_percent(page: Page, *keys: str) -> str | None:
    value = as_number(get_in(page.manifest, "spec", *keys))
    return None if value is None else fmt_percent(value)


def _majority_rule(page: Page) -> str:
    share = _spec_percent(page, "population", "majority_minority_share")
    if share is None:
        return "above the cut set in the parameters (one half unless changed)"
    rule = get_in(page.manifest, "spec", "population", "majority_minority_rule")
    return f"{'at or above' if rule == 'at_or_above' else 'above'} {share}"


def _methods_section(page: Page, present: set[str]) -> Html:
    s = page.summary
    cov = s.get("coverage") or {}
    topics = (set(present) - {a for a, _, _ in further.FURTHER_SECTIONS}) | further.method_topics(s)
    if isinstance(cov.get("area_classes"), Mapping):
        topics.add("area_classes")
    if get_in(cov, "distance", "groups"):
        topics.add("distance")
    if get_in(s, "segregation", "coverage_gap_test"):
        topics.add("gap_test")
    draws = sorted(
        {
            round(d)
            for e in s.get("enclaves") or []
            if isinstance(e, Mapping)
            for d in [as_number(e.get("mc_draws"))]
            if d is not None
        }
    )
    values = {
        "threshold": fmt_percent(cov.get("served_threshold")),
        "comparison": page.comparison_label,
        "four_fifths": FOUR_FIFTHS_NOTE,
        "permutations": fmt_count(get_in(s, "segregation", "permutations")),
        "draws": ", ".join(f"{d:,}" for d in draws) or NA,
        "majority_rule": _majority_rule(page),
        "min_surround": (
            fmt_percent(get_in(s, "enclave_settings", "min_surround"))
            if as_number(get_in(s, "enclave_settings", "min_surround")) is not None
            else _spec_percent(page, "analysis", "enclave_min_surround")
            or "the enclave threshold set in the parameters"
        ),
        "contrast": contrast_group(page),
        **further.method_values(page),
    }
    items = [
        tag("dt", title) + tag("dd", fill(text, **values))
        for topic, entries in METHODS.items()
        if topic in topics
        for title, text in entries
    ]
    settings = _randomness_text(page, present)
    if settings:
        items.append(tag("dt", "Random draws and seed") + tag("dd", settings))
    if not items:
        return Html("")
    return section("methods", "Methods", tag("dl", *items, class_="methods"))


def _randomness_text(page: Page, present: set[str]) -> str:
    s = page.summary
    parts = []
    if "segregation" in present and get_in(s, "segregation", "permutations") is not None:
        parts.append(f"gap tests {fmt_count(s['segregation']['permutations'])} permutations")
    if "clustering" in present:
        for key, name in (("moran", "Moran's I"), ("local_moran", "local Moran's I")):
            if get_in(s, "clustering", key, "permutations") is not None:
                parts.append(
                    f"{name} {fmt_count(s['clustering'][key]['permutations'])} permutations"
                )
    if "enclaves" in present:
        draws = sorted(
            {
                round(d)
                for e in s["enclaves"]
                if isinstance(e, Mapping)
                for d in [as_number(e.get("mc_draws"))]
                if d is not None
            }
        )
        if draws:
            parts.append("enclave tests " + ", ".join(f"{d:,}" for d in draws) + " draws")
    seed = page.manifest.get("seed")
    if seed is not None:
        parts.append(
            f"every random draw comes from one generator seeded with {seed}, so a "
            "rerun of the same spec gives the same figures"
        )
    text = "; ".join(parts)
    return text[:1].upper() + text[1:] + "." if text else ""


def _cautions_section(page: Page) -> Html:
    recorded = [str(c) for c in page.summary.get("cautions") or [] if c is not None]
    said = " ".join(recorded).lower()
    items = [
        tag("li", tag("strong", short), " ", long)
        for short, long, keyword in _cautions(page)
        if keyword not in said
    ]
    if "1607.4" not in said:
        items.append(
            tag("li", tag("strong", "The four-fifths rule is a screen."), " ", FOUR_FIFTHS_NOTE)
        )
    items.extend(tag("li", c) for c in recorded)
    return section("cautions", "Cautions", tag("ul", *items, id="caution-list"))


# --- the page --------------------------------------------------------------------------


def _stylesheet() -> str:
    return resources.files("coverage_audit.report").joinpath("report.css").read_text("utf-8")


def render_report(
    summary: Mapping[str, Any] | Findings,
    manifest: Mapping[str, Any],
    areas: gpd.GeoDataFrame,
    *,
    exclusions: pd.DataFrame | None,
    id_column: str,
    groups: Sequence[str],
    reference: str,
    footprint: Mapping[str, Any] | None = None,
    moran_lag: Any = None,
    moran_weights: Any = None,
    moran_mask: Any = None,
) -> str:
    """Return the report page as a string; the parameters are those of :func:`build_report`."""
    summary = summary_data(summary)
    _check_inputs(summary, manifest, areas, exclusions, id_column, groups, reference)
    moran = moran_points(
        areas, moran_lag=moran_lag, moran_weights=moran_weights, moran_mask=moran_mask
    )
    page = Page(
        summary=summary,
        manifest=manifest,
        areas=areas,
        exclusions=exclusions,
        id_column=id_column,
        groups=groups,
        reference=reference,
        footprint=footprint,
        moran=moran,
    )
    present = {
        k
        for k in ("coverage", "segregation", "clustering")
        if isinstance(summary.get(k), Mapping) and summary[k]
    }
    if isinstance(summary.get("enclaves"), list):
        present.add("enclaves")
    present |= further.present(summary)
    present |= {"assessment_area"} if isinstance(summary.get("assessment_area"), Mapping) else set()
    present |= {uncertainty_section.ANCHOR} if uncertainty_section.has_margins(summary) else set()
    present |= {blocks_section.ANCHOR} if blocks_section.has_blocks(summary) else set()
    sections = [
        (anchor, title, render)
        for anchor, title, render in (
            ("coverage", "Coverage by group", coverage_section),
            (blocks_section.ANCHOR, blocks_section.TITLE, blocks_section.blocks_section),
            (
                uncertainty_section.ANCHOR,
                uncertainty_section.TITLE,
                uncertainty_section.survey_error_section,
            ),
            ("segregation", "Segregation", segregation_section),
            ("clustering", "Spatial clustering", clustering_section),
            ("enclaves", "Enclaves", enclaves_section),
            (ASSESSMENT_ANCHOR, ASSESSMENT_TITLE, assessment_area_section),
            *further.FURTHER_SECTIONS,
        )
        if anchor in present
    ]
    methods = _methods_section(page, present)
    toc = (
        [("findings", "Findings"), *((a, t) for a, t, _ in sections)]
        + ([("methods", "Methods")] if methods else [])
        + [("cautions", "Cautions"), ("audited", "Appendix: inputs and provenance")]
    )
    body = [
        _header(page),
        findings_section(page),
        _cautions_box(page),
        _key_figures(page),
        _toc(toc),
    ]
    body.extend(render(page) for _, _, render in sections)
    body.extend([methods, _cautions_section(page), audited_section(page)])
    title = f"{summary.get('title') or 'Coverage audit'}: coverage audit report"
    head = "\n".join(
        [
            '<meta charset="utf-8">',
            f'<meta http-equiv="Content-Security-Policy" content="{CONTENT_SECURITY_POLICY}">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            tag("title", title),
            f"<style>\n{_stylesheet()}</style>",
        ]
    )
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n'
        + head
        + "\n</head>\n<body>\n"
        + tag("main", *body)
        + "\n</body>\n</html>\n"
    )


def build_report(
    summary: Mapping[str, Any] | Findings,
    manifest: Mapping[str, Any],
    areas: gpd.GeoDataFrame,
    *,
    exclusions: pd.DataFrame | None,
    id_column: str,
    groups: Sequence[str],
    reference: str,
    footprint: Mapping[str, Any] | None = None,
    path: str | os.PathLike[str],
    moran_lag: Any = None,
    moran_weights: Any = None,
    moran_mask: Any = None,
) -> None:
    """Write the self-contained, printable audit report page.

    Parameters
    ----------
    summary : mapping or AuditFindings
        The findings: the audit's typed tree (:class:`coverage_audit.results.AuditFindings`)
        or summary.json's content as read (schema_version 1). Any section may be absent; the page shows what is present, and ``None`` values as "n/a".
    manifest : mapping
        The run manifest: ``tool``, ``version``, ``spec``, ``inputs``, ``analysis_crs``,
        ``seed``, ``libraries``, ``circle_vertices``, ``started``, ``finished``.
    areas : geopandas.GeoDataFrame
        Analysed areas in the projected analysis CRS, with the id column, ``geometry``,
        ``served`` and ``covered_fraction``.
    exclusions : pandas.DataFrame or None
        Input rows not analysed, with columns ``source``, ``row``, ``id``, ``reason``.
    id_column : str
        Name of the area id column.
    groups : sequence of str
        Group names, in display order.
    reference : str
        The reference group, one of ``groups``.
    footprint : mapping, optional
        ``{"kind": "polygons" | "points" | "ids", "name": str, "geometry": GeoSeries}``
        and, for points, ``"points"`` (GeoDataFrame) and ``"radius_m"``.
    path : str or os.PathLike
        Where to write report.html; its folder must exist. The file is replaced
        atomically.
    moran_lag : array-like, optional
        Spatial lag ``W z`` of the standardised covered fraction under the
        row-standardised weights of the Moran statistics: one value per row of ``areas``
        (NaN for areas left out), or one per area marked in ``moran_mask``. Enables the
        Moran scatterplot.
    moran_weights : scipy.sparse matrix or libpysal.graph.Graph, optional
        Row-standardised weights to compute the lag from when ``moran_lag`` is not
        given: n x n in the order of ``areas`` (rows without neighbours are left out), or
        m x m over the areas marked in ``moran_mask``. With neither, no scatterplot.
    moran_mask : array-like of bool, optional
        The areas that take part in the spatial statistics.

    Raises
    ------
    InputError
        When an input does not have the expected form; the message names it and says
        what to pass.

    Notes
    -----
    The page holds no script, loads nothing and embeds every figure as inline SVG, so it
    can be archived, mailed and printed as one file (print styles start each section on
    a new page). Its bytes depend only on the inputs; the run times come from the
    manifest.
    """
    target = Path(path)
    _check_target(target)
    text = render_report(
        summary,
        manifest,
        areas,
        exclusions=exclusions,
        id_column=id_column,
        groups=groups,
        reference=reference,
        footprint=footprint,
        moran_lag=moran_lag,
        moran_weights=moran_weights,
        moran_mask=moran_mask,
    )
    write_bytes(target, text.encode("utf-8"))
