"""The audit report page: one self-contained, printable report.html.

Takes the findings (the ``summary`` dict written to summary.json), the run ``manifest``,
the analysed ``areas`` (a GeoDataFrame in the projected analysis CRS), the exclusions
table and the dissolved footprint, and gives one HTML file with the stylesheet and every
figure inline (SVG drawn by :mod:`coverage_audit.report.charts`): what was audited,
coverage by group, segregation, clustering, enclaves, methods and cautions. Sections
appear only when their data are present; missing values show as "n/a". Every value taken
from the inputs is HTML-escaped, the page carries no script and refers to nothing on a
network, and a Content-Security-Policy forbids both. The same inputs give the same bytes,
apart from the run times quoted from the manifest.
"""

from __future__ import annotations

import html
import math
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from importlib import resources
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import scipy.sparse as sp
import shapely

from ..errors import InputError
from . import charts

#: The summary.json schema this page renders.
SUPPORTED_SCHEMA_VERSION = 1
#: Exclusion rows listed in the page; beyond this the page links to exclusions.csv.
MAX_LISTED_EXCLUSIONS = 50
#: Enclaves drawn with a locator figure (the most populous ones).
MAX_ENCLAVE_FIGURES = 6
#: Income tiers in the order of 12 CFR 228.12(m), then the catch-all.
INCOME_TIERS = ("low", "moderate", "middle", "upper", "unknown")
LISA_LABELS = ("high-high", "low-low", "high-low", "low-high", "not significant")
EXCLUSION_COLUMNS = ("source", "row", "id", "reason")
REQUIRED_AREA_COLUMNS = ("geometry", "served", "covered_fraction")
#: Row sums of a row-standardised matrix may differ from 1 by rounding only.
ROW_SUM_TOLERANCE = 1e-8

NA = "n/a"

#: Cautions every report carries, in plain words. Shown briefly at the top and in full at
#: the end, before any caution the analysis itself raised.
STANDARD_CAUTIONS: tuple[tuple[str, str], ...] = (
    (
        "A statistical disparity is a reason to look closer, not proof of discrimination.",
        "The figures in this report describe where a service footprint reaches and who "
        "lives there. A gap between groups, a cluster of unserved areas or an enclave is a "
        "pattern worth examining; it does not by itself show intent, practice or cause.",
    ),
    (
        "Results depend on the areal units chosen.",
        "Other boundaries or another level of geography (tracts, block groups, blocks) can "
        "give different rates and indices for the same footprint: this is the modifiable "
        "areal unit problem. Areas partly covered are counted by covered fraction, which "
        "assumes people are spread evenly within each area.",
    ),
    (
        "Population figures are estimates with error.",
        "Survey estimates such as the American Community Survey carry margins of error, "
        "large for small areas and small groups. Differences that lie within those margins "
        "may not be real.",
    ),
    (
        "Legitimate business factors must be considered.",
        "Where a service is offered can depend on demand, cost, zoning, existing "
        "facilities, size and financial condition, and other factors not measured here. "
        "Any disparity must be weighed against them.",
    ),
    (
        "Legal conclusions belong to counsel and regulators.",
        "Whether a pattern breaches any law is for counsel and the responsible regulators "
        "to decide under the applicable law. This report makes no legal finding.",
    ),
)

FOUR_FIFTHS_NOTE = (
    "The four-fifths rule of 29 CFR 1607.4(D) is a rule about employment selection: a "
    "selection rate below four-fifths (80%) of the rate of the group with the highest rate "
    "is generally regarded as evidence of adverse impact. It is used here only as a "
    "screening rule of thumb for coverage rates, not as a legal test; a ratio of exactly "
    "0.80 is not flagged."
)


class Html(str):
    """Markup that is already safe to place in the page (built here, or escaped)."""

    __slots__ = ()


def esc(value: Any) -> Html:
    """Return ``value`` as escaped text; :class:`Html` passes through unchanged."""
    if isinstance(value, Html):
        return value
    return Html(html.escape(str(value), quote=True))


def join(parts: Iterable[Any], sep: str = "") -> Html:
    """Concatenate escaped parts."""
    return Html(sep.join(esc(p) for p in parts))


def tag(name: str, *content: Any, **attrs: Any) -> Html:
    """Return an element; attribute names ending in ``_`` lose it (``class_``)."""
    rendered = "".join(
        f' {key.rstrip("_").replace("_", "-")}="{esc(value)}"'
        for key, value in attrs.items()
        if value is not None and value is not False
    )
    return Html(f"<{name}{rendered}>{join(content)}</{name}>")


# --- number formatting -----------------------------------------------------------------


def _number(value: Any) -> float | None:
    """Return a finite float, or ``None`` for missing, NaN, inf, booleans and non-numbers."""
    if value is None or isinstance(value, (bool, np.bool_)):
        return None
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _signed(text: str, value: float) -> str:
    # A typographic minus reads as "minus" in screen readers and does not break lines.
    if text.startswith("-"):
        return "\u2212" + text[1:]
    return ("+" if value > 0 else "") + text


def fmt_percent(value: Any, digits: int = 1) -> str:
    """Format a fraction as a percentage: ``0.6234 -> "62.3%"``."""
    f = _number(value)
    return NA if f is None else f"{100.0 * f:.{digits}f}%"


def fmt_points(value: Any, digits: int = 1) -> str:
    """Format a difference of fractions in percentage points: ``-0.123 -> "−12.3 pp"``."""
    f = _number(value)
    if f is None:
        return NA
    text = f"{100.0 * f:.{digits}f}"
    if float(text) == 0.0:
        text = f"{0.0:.{digits}f}"
    return _signed(text, float(text)) + " pp"


def fmt_fixed(value: Any, digits: int = 3) -> str:
    """Format a statistic with a fixed number of decimals (ratios, indices, I, z)."""
    f = _number(value)
    if f is None:
        return NA
    text = f"{f:.{digits}f}"
    return "\u2212" + text[1:] if text.startswith("-") and float(text) != 0 else text.lstrip("-")


def fmt_p(value: Any) -> str:
    """Format a p-value: three decimals, and ``< 0.001`` below that (usual reporting)."""
    f = _number(value)
    if f is None:
        return NA
    return "< 0.001" if f < 0.001 else f"{f:.3f}"


def fmt_count(value: Any) -> str:
    """Format a count or a population with thousands separators (rounded to whole people)."""
    f = _number(value)
    return NA if f is None else f"{round(f):,}"


def fmt_distance(value: Any, unit: str) -> str:
    """Format a distance in its unit, rounded to whole units."""
    f = _number(value)
    return NA if f is None else f"{round(f):,} {unit}"


def fmt_bool(value: Any) -> str:
    """Format a flag as yes/no."""
    if value is None:
        return NA
    return "yes" if bool(value) else "no"


def fmt_auto(key: str, value: Any) -> str:
    """Format a value of a generic key/value table by the shape of its key."""
    if value is None:
        return NA
    if isinstance(value, (bool, np.bool_)):
        return fmt_bool(value)
    if isinstance(value, (int, np.integer)):
        return fmt_count(value)
    if isinstance(value, (float, np.floating)):
        if key.startswith("p_") or key == "p_value" or key.endswith("_p"):
            return fmt_p(value)
        return fmt_fixed(value, 4)
    if isinstance(value, Mapping):
        return "; ".join(f"{k}: {fmt_auto(str(k), v)}" for k, v in value.items()) or NA
    if isinstance(value, (list, tuple)):
        shown = ", ".join(str(v) for v in value[:10])
        more = f" … ({len(value)} in all)" if len(value) > 10 else ""
        return (shown + more) if value else "none"
    return str(value)


# --- tables ----------------------------------------------------------------------------


class Cell:
    """A table cell: text or markup, optionally right-aligned as a number."""

    __slots__ = ("content", "numeric")

    def __init__(self, content: Any, numeric: bool = False) -> None:
        self.content = content
        self.numeric = numeric


def num(content: Any) -> Cell:
    """Return a right-aligned numeric cell."""
    return Cell(content, numeric=True)


def _td(cell: Any, header: bool = False) -> Html:
    if not isinstance(cell, Cell):
        cell = Cell(cell)
    name = "th" if header else "td"
    classes = []
    if cell.numeric:
        classes.append("num")
    if cell.content == NA:
        classes.append("na")
    scope = "row" if header else None
    return tag(name, cell.content, class_=" ".join(classes) or None, scope=scope)


def table(
    headers: Sequence[Any],
    rows: Iterable[Sequence[Any]],
    *,
    caption: str | None = None,
    row_attrs: Sequence[Mapping[str, Any]] | None = None,
    table_id: str | None = None,
    row_headers: bool = True,
) -> Html:
    """Render a table; the first cell of each row is a row header when ``row_headers``."""
    head_cells = join(
        tag("th", h.content, class_="num", scope="col")
        if isinstance(h, Cell) and h.numeric
        else tag("th", h.content if isinstance(h, Cell) else h, scope="col")
        for h in headers
    )
    body = []
    for k, row in enumerate(rows):
        cells = join(_td(c, header=row_headers and j == 0) for j, c in enumerate(row))
        attrs = dict(row_attrs[k]) if row_attrs is not None else {}
        body.append(tag("tr", cells, **attrs))
    parts = [tag("caption", caption) if caption else Html("")]
    parts.append(tag("thead", tag("tr", head_cells)))
    parts.append(tag("tbody", join(body)))
    return tag("div", tag("table", *parts, id=table_id), class_="table-wrap")


def kv_table(
    mapping: Mapping[str, Any],
    *,
    caption: str,
    labels: Mapping[str, str] | None = None,
    formatters: Mapping[str, Callable[[Any], str]] | None = None,
) -> Html:
    """Render a mapping as a two-column table, keys labelled and values formatted."""
    labels = labels or {}
    formatters = formatters or {}
    rows = []
    for key, value in mapping.items():
        formatter = formatters.get(key)
        text = formatter(value) if formatter else fmt_auto(key, value)
        rows.append((labels.get(key, key.replace("_", " ")), num(text)))
    return table(("Item", "Value"), rows, caption=caption)


def _section(section_id: str, title: str, *content: Any) -> Html:
    return tag("section", tag("h2", title), *content, id=section_id, class_="major")


def _figure(svg: str, caption: str) -> Html:
    return tag("figure", Html(svg), tag("figcaption", caption))


def _get(mapping: Any, *keys: str) -> Any:
    """Walk nested mappings; ``None`` as soon as a key is missing or a value is not a dict."""
    for key in keys:
        if not isinstance(mapping, Mapping):
            return None
        mapping = mapping.get(key)
    return mapping


def _ordered_groups(groups: Sequence[str], present: Iterable[str]) -> list[str]:
    """Groups in the order given, then any other group the data have."""
    present = list(present)
    return [g for g in groups if g in present] + [g for g in present if g not in groups]


# --- inputs ----------------------------------------------------------------------------


def _check_inputs(
    summary: Mapping[str, Any],
    manifest: Mapping[str, Any],
    areas: gpd.GeoDataFrame,
    exclusions: pd.DataFrame | None,
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
            f"schema_version {SUPPORTED_SCHEMA_VERSION}; rerun the audit with this version "
            "of coverage_audit"
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
            f"report: reference group {reference!r} is not among groups "
            f"{list(groups)!r}; pass the reference group's name as it appears in groups"
        )
    if exclusions is not None:
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


def _moran_points(
    areas: gpd.GeoDataFrame,
    moran_lag: Any,
    moran_weights: Any,
    moran_mask: Any,
) -> tuple[np.ndarray, np.ndarray] | None:
    """Return (z, W z) of the covered fraction over the areas in the statistics, or None.

    ``z`` uses the population standard deviation, as Moran's I does, so that with
    row-standardised weights the slope of ``W z`` on ``z`` is I.
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
    if moran_weights is not None:
        matrix = getattr(moran_weights, "sparse", moran_weights)
        if not sp.issparse(matrix):
            raise InputError(
                "report: moran_weights must be a scipy sparse matrix or a libpysal Graph, "
                f"not {type(moran_weights).__name__}"
            )
        matrix = sp.csr_matrix(matrix, dtype=float)
        if matrix.shape == (n, n):
            if mask is None:
                mask = np.asarray(matrix.sum(axis=1)).ravel() != 0
            keep = np.flatnonzero(mask)
            matrix = matrix[keep][:, keep]
        elif mask is None or matrix.shape != (int(mask.sum()), int(mask.sum())):
            raise InputError(
                f"report: moran_weights is {matrix.shape[0]} x {matrix.shape[1]} but areas "
                f"has {n} rows; pass an n x n matrix in the order of areas, or an m x m one "
                "with moran_mask marking its m areas"
            )
        row_sums = np.asarray(matrix.sum(axis=1)).ravel()
        linked = row_sums != 0
        if not np.allclose(row_sums[linked], 1.0, atol=ROW_SUM_TOLERANCE, rtol=0):
            raise InputError(
                "report: moran_weights is not row-standardised (row sums differ from 1); "
                "pass the row-standardised weights the Moran statistics used"
            )
        y = y_all[mask]
        z = _standardise(y)
        if z is None:
            return None
        return z, np.asarray(matrix @ z).ravel()
    lag_all = np.asarray(moran_lag, dtype=float).ravel()
    if lag_all.size == n:
        mask = np.isfinite(lag_all) if mask is None else mask
        lag = lag_all[mask]
    elif mask is not None and lag_all.size == int(mask.sum()):
        lag = lag_all
    else:
        raise InputError(
            f"report: moran_lag has {lag_all.size} values but areas has {n} rows; pass one "
            "value per area (NaN where left out) or one per area marked in moran_mask"
        )
    if not np.all(np.isfinite(lag)):
        raise InputError(
            "report: moran_lag has missing values for areas marked as in the statistics"
        )
    z = _standardise(y_all[mask])
    return None if z is None else (z, lag)


def _standardise(y: np.ndarray) -> np.ndarray | None:
    if y.size == 0:
        return None
    if not np.all(np.isfinite(y)):
        raise InputError(
            "report: covered_fraction is missing for areas in the spatial statistics; "
            "every area in moran_mask needs a covered fraction"
        )
    sd = float(y.std())
    return None if sd == 0 else (y - y.mean()) / sd


# --- sections --------------------------------------------------------------------------


class _Page:
    """What every section needs: the inputs and a counter for unique figure salts."""

    def __init__(
        self,
        summary: Mapping[str, Any],
        manifest: Mapping[str, Any],
        areas: gpd.GeoDataFrame,
        exclusions: pd.DataFrame | None,
        id_column: str,
        groups: Sequence[str],
        reference: str,
        footprint: Mapping[str, Any] | None,
        moran: tuple[np.ndarray, np.ndarray] | None,
    ) -> None:
        self.summary = summary
        self.manifest = manifest
        self.areas = areas
        self.exclusions = exclusions
        self.id_column = id_column
        self.groups = list(groups)
        self.reference = reference
        self.footprint = footprint
        self.moran = moran
        self._layers: charts.RegionLayers | None = None

    @property
    def layers(self) -> charts.RegionLayers:
        if self._layers is None:
            served = self.areas["served"].fillna(False).to_numpy(dtype=bool)
            self._layers = charts.RegionLayers.build(self.areas.geometry.to_numpy(), served)
        return self._layers

    @property
    def comparison_label(self) -> str:
        coverage = self.summary.get("coverage") or {}
        if coverage.get("comparison") == "highest":
            return "the highest-rate group"
        ref = coverage.get("reference_group") or self.reference
        return f"the reference group ({ref})"


def _header(page: _Page) -> Html:
    title = page.summary.get("title") or "Coverage audit"
    tool = page.manifest.get("tool") or "coverage_audit"
    version = page.manifest.get("version")
    run = [f"Report of {tool}" + (f" {version}" if version else "")]
    if page.manifest.get("started"):
        run.append(f"run started {page.manifest['started']}")
    if page.manifest.get("finished"):
        run.append(f"finished {page.manifest['finished']}")
    return tag("header", tag("h1", title), tag("p", "; ".join(run)), class_="report-head")


def _cautions_box(page: _Page) -> Html:
    items = [tag("li", tag("strong", short)) for short, _ in STANDARD_CAUTIONS]
    extra = page.summary.get("cautions") or []
    if extra:
        items.append(
            tag(
                "li",
                f"This analysis raised {len(extra)} further caution"
                f"{'s' if len(extra) != 1 else ''} about its data; see ",
                tag("a", "Cautions", href="#cautions"),
                ".",
            )
        )
    return tag(
        "aside",
        tag("h2", "Read this first"),
        tag("ul", *items),
        class_="cautions-box",
        id="cautions-summary",
    )


def _key_figures(page: _Page) -> Html:
    items: list[Html] = []
    areas = page.summary.get("areas") or {}
    if areas:
        items.append(
            tag(
                "li",
                f"{fmt_count(areas.get('analysed'))} areas analysed of "
                f"{fmt_count(areas.get('input'))} in the input; "
                f"{fmt_count(areas.get('excluded'))} excluded.",
            )
        )
    cov_groups = _get(page.summary, "coverage", "groups") or {}
    flagged = [
        g for g, v in cov_groups.items() if isinstance(v, Mapping) and v.get("below_four_fifths")
    ]
    if cov_groups:
        if flagged:
            parts = [
                f"{g} {fmt_percent(cov_groups[g].get('rate'))} "
                f"(ratio {fmt_fixed(cov_groups[g].get('ratio'))})"
                for g in _ordered_groups(page.groups, flagged)
            ]
            items.append(
                tag(
                    "li",
                    f"Below four-fifths of the rate of {page.comparison_label}: ",
                    "; ".join(parts),
                    ".",
                )
            )
        else:
            items.append(
                tag(
                    "li",
                    f"No group's coverage rate is below four-fifths of the rate of "
                    f"{page.comparison_label}.",
                )
            )
    moran = _get(page.summary, "clustering", "moran")
    if isinstance(moran, Mapping):
        items.append(
            tag(
                "li",
                f"Moran's I of {moran.get('variable') or 'covered_fraction'}: "
                f"{fmt_fixed(moran.get('I'), 4)} (pseudo p-value {fmt_p(moran.get('p_sim'))}, "
                f"{fmt_count(moran.get('permutations'))} permutations).",
            )
        )
    enclaves = page.summary.get("enclaves")
    if isinstance(enclaves, list):
        if enclaves:
            largest = max(enclaves, key=lambda e: _number(e.get("population")) or 0.0)
            items.append(
                tag(
                    "li",
                    f"{len(enclaves)} enclave{'s' if len(enclaves) != 1 else ''} of unserved "
                    f"areas enclosed by served ones; the most populous, {largest.get('id')}, "
                    f"has {fmt_count(largest.get('population'))} residents.",
                )
            )
        else:
            items.append(tag("li", "No enclave of unserved areas was found."))
    if not items:
        return Html("")
    return tag("section", tag("h2", "Key figures"), tag("ul", *items), class_="key-figures")


def _toc(entries: Sequence[tuple[str, str]]) -> Html:
    links = [tag("li", tag("a", title, href=f"#{anchor}")) for anchor, title in entries]
    return tag("nav", tag("strong", "Contents"), tag("ol", *links), class_="toc")


def _flatten(mapping: Mapping[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    out: list[tuple[str, Any]] = []
    for key, value in mapping.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping) and value:
            out.extend(_flatten(value, name + "."))
        else:
            out.append((name, value))
    return out


def _footprint_text(page: _Page) -> str:
    fp = page.footprint
    if not fp:
        return "Footprint: not given to the report."
    kind = fp.get("kind")
    name = fp.get("name") or "unnamed footprint"
    if kind == "points":
        points = fp.get("points")
        count = len(points) if points is not None else None
        vertices = page.manifest.get("circle_vertices")
        text = (
            f"Footprint: {fmt_count(count)} service points from {name}, each reaching a "
            f"radius of {fmt_distance(fp.get('radius_m'), 'm')}"
        )
        if vertices:
            text += f" (circles drawn with {fmt_count(vertices)} vertices)"
        return text + ", dissolved into one footprint."
    if kind == "polygons":
        return f"Footprint: service-area polygons from {name}, dissolved into one footprint."
    if kind == "ids":
        return f"Footprint: the areas listed as served in {name}."
    return f"Footprint: {name} ({kind or 'form not stated'})."


def _audited_section(page: _Page) -> Html:
    manifest = page.manifest
    parts: list[Any] = []
    areas = page.summary.get("areas") or {}
    parts.append(
        tag(
            "p",
            f"Areas: {fmt_count(areas.get('input'))} in the input, "
            f"{fmt_count(areas.get('analysed'))} analysed, "
            f"{fmt_count(areas.get('excluded'))} excluded. Id column: ",
            tag("code", page.id_column),
            ". ",
            _footprint_text(page),
        )
    )
    inputs = manifest.get("inputs") or []
    if inputs:
        rows = [
            (
                item.get("role") or NA,
                tag("span", item.get("path") or NA, class_="mono"),
                tag("span", item.get("sha256") or NA, class_="digest"),
                num(fmt_count(item.get("rows"))),
                item.get("crs") or NA,
            )
            for item in inputs
        ]
        parts.append(
            table(
                ("Role", "File", "SHA-256", num("Rows"), "CRS"),
                rows,
                caption="Input files and their SHA-256 digests",
            )
        )
    if manifest.get("analysis_crs"):
        parts.append(
            tag(
                "p",
                "Analysis CRS (areas and distances are measured in it): ",
                tag("code", manifest["analysis_crs"]),
            )
        )
    if page.areas is not None and len(page.areas):
        fp = page.footprint or {}
        geometry = fp.get("geometry")
        footprint_geom = None
        if geometry is not None and fp.get("kind") != "ids":
            geometry = _to_crs(geometry, page.areas.crs)
            footprint_geom = shapely.union_all(np.asarray(geometry.geometry.to_numpy()))
        points = None
        if fp.get("kind") == "points" and fp.get("points") is not None:
            points = _to_crs(fp["points"], page.areas.crs).geometry.to_numpy()
        svg = charts.overview_chart(
            page.layers, footprint=footprint_geom, points=points, salt="report-overview"
        )
        parts.append(
            _figure(
                svg,
                "The analysed region: served areas in the mid tone, the rest in light grey, "
                "the footprint outlined. An interactive map is in map.html.",
            )
        )
    spec = manifest.get("spec")
    params: list[tuple[str, Any]] = []
    if isinstance(spec, Mapping):
        params = _flatten(spec)
    if manifest.get("seed") is not None and not any(k.endswith("seed") for k, _ in params):
        params.append(("seed", manifest["seed"]))
    if params:
        rows = [(tag("code", k), fmt_auto(k.rsplit(".", 1)[-1], v)) for k, v in params]
        parts.append(table(("Parameter", "Value"), rows, caption="Parameters (resolved spec)"))
    parts.append(_exclusions_part(page))
    libraries = manifest.get("libraries") or {}
    if libraries:
        rows = [(name, num(version)) for name, version in libraries.items()]
        parts.append(table(("Library", num("Version")), rows, caption="Software versions"))
    return _section("audited", "What was audited", *parts)


def _to_crs(frame: Any, crs: Any) -> gpd.GeoSeries | gpd.GeoDataFrame:
    if not isinstance(frame, (gpd.GeoSeries, gpd.GeoDataFrame)):
        frame = gpd.GeoSeries(frame, crs=crs)
    if crs is not None and frame.crs is not None and frame.crs != crs:
        frame = frame.to_crs(crs)
    return frame


def _exclusions_part(page: _Page) -> Html:
    frame = page.exclusions
    summary_part = page.summary.get("exclusions") or {}
    by_reason = summary_part.get("by_reason")
    total = summary_part.get("count")
    if by_reason is None and frame is not None and len(frame):
        by_reason = frame["reason"].astype(str).value_counts(sort=False).to_dict()
    if total is None and frame is not None:
        total = len(frame)
    if not total:
        return tag("h3", "Rows excluded") + tag("p", "No input row was excluded.")
    parts: list[Any] = [tag("h3", "Rows excluded"), tag("p", f"{fmt_count(total)} rows excluded.")]
    if by_reason:
        rows = [(reason, num(fmt_count(n))) for reason, n in by_reason.items()]
        parts.append(table(("Reason", num("Rows")), rows, caption="Excluded rows by reason"))
    if frame is not None and len(frame):
        shown = frame.iloc[:MAX_LISTED_EXCLUSIONS]
        rows = [
            tuple(_cell_text(v) for v in record)
            for record in shown.loc[:, list(EXCLUSION_COLUMNS)].itertuples(index=False)
        ]
        caption = "Excluded rows"
        if len(frame) > MAX_LISTED_EXCLUSIONS:
            caption = f"Excluded rows: the first {MAX_LISTED_EXCLUSIONS} of {len(frame):,}"
        parts.append(table(("Source", "Row", "Id", "Reason"), rows, caption=caption))
        if len(frame) > MAX_LISTED_EXCLUSIONS:
            parts.append(
                tag(
                    "p",
                    "The full list is in ",
                    tag("a", "exclusions.csv", href="exclusions.csv", class_="file-link"),
                    ", beside this report.",
                )
            )
    return join(parts)


def _cell_text(value: Any) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return NA
    return str(value)


def _coverage_section(page: _Page) -> Html:
    coverage = page.summary["coverage"]
    groups_data = coverage.get("groups") or {}
    comparison = coverage.get("comparison") or "reference"
    ref = coverage.get("reference_group") or page.reference
    order = _ordered_groups(page.groups, groups_data)
    parts: list[Any] = [
        tag(
            "p",
            "Coverage rate: the share of each group's population living in the footprint, "
            "counting a partly covered area by its covered fraction. Served-area rate: the "
            "share living in areas counted as served (covered fraction at least "
            f"{fmt_percent(coverage.get('served_threshold'))}). Ratios and differences compare "
            f"each group with {page.comparison_label}.",
        )
    ]
    ratio_label = "Ratio to highest" if comparison == "highest" else "Ratio to reference"
    headers = (
        "Group",
        num("Population"),
        num("Covered population"),
        num("Coverage rate"),
        num("Served-area rate"),
        num(ratio_label),
        num("Served-area ratio"),
        num("Difference"),
        num("Served-area difference"),
        "Below four-fifths",
    )
    rows, attrs = [], []
    for g in order:
        item = groups_data.get(g) or {}
        flagged = bool(item.get("below_four_fifths"))
        label = f"{g} (reference)" if g == ref and comparison != "highest" else g
        rows.append(
            (
                label,
                num(fmt_count(item.get("population"))),
                num(fmt_count(item.get("covered_population"))),
                num(fmt_percent(item.get("rate"))),
                num(fmt_percent(item.get("served_area_rate"))),
                num(fmt_fixed(item.get("ratio"))),
                num(fmt_fixed(item.get("served_area_ratio"))),
                num(fmt_points(item.get("difference"))),
                num(fmt_points(item.get("served_area_difference"))),
                tag("span", "yes: below 4/5", class_="flag")
                if flagged
                else fmt_bool(item.get("below_four_fifths")),
            )
        )
        classes = " ".join(c for c, on in (("flagged", flagged), ("reference", g == ref)) if on)
        attrs.append({"class_": classes or None, "data_group": g})
    parts.append(
        table(
            headers,
            rows,
            caption="Coverage by group (rates in percent; differences in percentage points)",
            row_attrs=attrs,
            table_id="coverage-table",
        )
    )
    parts.append(tag("p", FOUR_FIFTHS_NOTE, class_="note"))
    comparison_rate = None
    if comparison == "highest":
        rates = [_number((groups_data.get(g) or {}).get("rate")) for g in order]
        finite = [r for r in rates if r is not None]
        comparison_rate = max(finite) if finite else None
    else:
        comparison_rate = _number((groups_data.get(ref) or {}).get("rate"))
    if order:
        svg = charts.coverage_bar_chart(
            order,
            [_number((groups_data.get(g) or {}).get("rate")) for g in order],
            comparison_rate=comparison_rate,
            comparison_label=f"{'highest rate' if comparison == 'highest' else ref + ' (reference)'}",
            flagged=[bool((groups_data.get(g) or {}).get("below_four_fifths")) for g in order],
            salt="report-coverage-bars",
        )
        parts.append(
            _figure(
                svg,
                "Coverage rate by group. Solid line: the comparison rate; dotted line: "
                "four-fifths of it. Hatched bars fall below four-fifths.",
            )
        )
    parts.append(_area_classes_part(coverage.get("area_classes")))
    parts.append(_distance_part(coverage.get("distance"), page))
    return _section("coverage", "Coverage by group", *parts)


def _class_row(label: str, item: Any) -> tuple[Any, ...]:
    item = item if isinstance(item, Mapping) else {}
    return (
        label,
        num(fmt_count(item.get("areas"))),
        num(fmt_count(item.get("population"))),
        num(fmt_percent(item.get("rate"))),
        num(fmt_percent(item.get("served_share"))),
    )


def _area_classes_part(classes: Any) -> Html:
    if not isinstance(classes, Mapping) or not classes:
        return Html("")
    rows = []
    if "majority_minority" in classes:
        rows.append(_class_row("Majority-minority areas", classes["majority_minority"]))
    if "not_majority_minority" in classes:
        rows.append(_class_row("Other areas", classes["not_majority_minority"]))
    tiers = classes.get("income_tiers")
    if isinstance(tiers, Mapping):
        for tier in [*INCOME_TIERS, *(t for t in tiers if t not in INCOME_TIERS)]:
            if tier in tiers:
                rows.append(_class_row(f"Income tier: {tier}", tiers[tier]))
    if "low_or_moderate" in classes:
        rows.append(_class_row("Low- or moderate-income areas", classes["low_or_moderate"]))
    if not rows:
        return Html("")
    headers = (
        "Class of area",
        num("Areas"),
        num("Population"),
        num("Coverage rate"),
        num("Served share"),
    )
    return tag("h3", "Majority-minority and income classes") + table(
        headers, rows, caption="Coverage by class of area"
    )


def _distance_part(distance: Any, page: _Page) -> Html:
    if not isinstance(distance, Mapping) or not isinstance(distance.get("groups"), Mapping):
        return Html("")
    unit = str(distance.get("unit") or "m")
    data = distance["groups"]
    rows = [
        (
            g,
            num(fmt_distance(_get(data, g, "mean"), unit)),
            num(fmt_distance(_get(data, g, "median"), unit)),
        )
        for g in _ordered_groups(page.groups, data)
    ]
    return tag("h3", "Distance to the nearest service point") + table(
        ("Group", num("Mean"), num("Median")),
        rows,
        caption="Population-weighted distance from home area to the nearest service point",
    )


_SEGREGATION_COLUMNS: tuple[tuple[str, str], ...] = (
    ("dissimilarity", "D vs reference"),
    ("dissimilarity_vs_rest", "D vs rest"),
    ("isolation", "Isolation xPx*"),
    ("exposure_to_reference", "Exposure to reference xPy*"),
    ("correlation_ratio", "Correlation ratio \u03b7\u00b2"),
    ("coverage_dissimilarity", "Coverage dissimilarity"),
    ("areal_coverage_dissimilarity", "Areal coverage dissimilarity"),
)


def _segregation_section(page: _Page) -> Html:
    seg = page.summary["segregation"]
    ref = seg.get("reference_group") or page.reference
    columns = [(k, label) for k, label in _SEGREGATION_COLUMNS if isinstance(seg.get(k), Mapping)]
    present: list[str] = []
    for key, _ in columns:
        present.extend(g for g in seg[key] if g not in present)
    parts: list[Any] = [
        tag(
            "p",
            f"Indices over the analysed areas; the reference group is {ref}. Dissimilarity "
            "ranges from 0 (the same distribution over areas) to 1 (complete separation).",
        )
    ]
    if columns:
        rows = [
            (g, *(num(fmt_fixed(_get(seg, key, g))) for key, _ in columns))
            for g in _ordered_groups(page.groups, present)
        ]
        parts.append(
            table(
                ("Group", *(num(label) for _, label in columns)),
                rows,
                caption="Segregation indices by group",
            )
        )
    scalars = {
        k: v
        for k, v in seg.items()
        if k not in dict(_SEGREGATION_COLUMNS)
        and k not in ("reference_group", "coverage_gap_test", "permutations")
        and not isinstance(v, (Mapping, list))
    }
    if scalars:
        parts.append(kv_table(scalars, caption="Further segregation figures"))
    gap = seg.get("coverage_gap_test")
    if isinstance(gap, Mapping) and gap:
        rows = []
        for g in _ordered_groups(page.groups, gap):
            item = gap.get(g) or {}
            rows.append(
                (
                    g,
                    num(fmt_points(item.get("gap"))),
                    num(fmt_p(item.get("p_value"))),
                    num(fmt_p(item.get("p_value_one_sided"))),
                    num(fmt_points(item.get("null_mean"))),
                    num(fmt_points(item.get("null_sd"))),
                    num(fmt_count(item.get("permutations"))),
                )
            )
        parts.append(
            table(
                (
                    "Group",
                    num("Gap"),
                    num("p (two-sided)"),
                    num("p (one-sided)"),
                    num("Null mean"),
                    num("Null sd"),
                    num("Permutations"),
                ),
                rows,
                caption="Coverage gap permutation test (gaps in percentage points)",
            )
        )
    return _section("segregation", "Segregation", *parts)


_MORAN_KEYS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("I", "I", lambda v: fmt_fixed(v, 4)),
    ("expected", "E[I]", lambda v: fmt_fixed(v, 4)),
    ("variance_rand", "Var[I] (rand.)", lambda v: fmt_fixed(v, 6)),
    ("z_rand", "z (rand.)", lambda v: fmt_fixed(v, 2)),
    ("p_rand", "p (rand.)", fmt_p),
    ("z_sim", "z_sim", lambda v: fmt_fixed(v, 2)),
    ("p_sim", "p_sim", fmt_p),
    ("permutations", "Permutations", fmt_count),
    ("n", "n", fmt_count),
)

_WEIGHT_LABELS = {
    "contiguity": "Contiguity",
    "transform": "Transform",
    "areas": "Areas",
    "links": "Links (neighbour pairs)",
    "islands": "Islands (no neighbour)",
    "island_policy": "Island policy",
    "components": "Connected components",
    "knn_k": "Neighbours given to each island",
    "largest_component_areas": "Areas in the largest component",
    "areas_in_statistics": "Areas in the spatial statistics",
}

_JOIN_LABELS = {
    "served_served": "Served–served joins",
    "unserved_unserved": "Unserved–unserved joins",
    "served_unserved": "Served–unserved joins",
    "joins": "All joins",
    "p_sim_unserved_unserved": "p_sim, unserved–unserved",
}


def _clustering_section(page: _Page) -> Html:
    clustering = page.summary["clustering"]
    parts: list[Any] = []
    weights = clustering.get("weights")
    if isinstance(weights, Mapping) and weights:
        parts.append(kv_table(weights, caption="Spatial weights", labels=_WEIGHT_LABELS))
    moran_rows = []
    for key, default_variable in (
        ("moran", "covered_fraction"),
        ("moran_minority_share", "minority_share"),
    ):
        item = clustering.get(key)
        if isinstance(item, Mapping):
            moran_rows.append(
                (
                    item.get("variable") or default_variable,
                    *(num(f(item.get(k))) for k, _, f in _MORAN_KEYS),
                )
            )
    if moran_rows:
        parts.append(tag("h3", "Moran's I"))
        parts.append(
            table(
                ("Variable", *(num(label) for _, label, _ in _MORAN_KEYS)),
                moran_rows,
                caption="Global Moran's I (row-standardised weights)",
            )
        )
    if page.moran is not None:
        z, lag = page.moran
        moran_i = _number(_get(clustering, "moran", "I"))
        svg = charts.moran_scatter_chart(
            z, lag, moran_i=moran_i, variable="covered_fraction", salt="report-moran-scatter"
        )
        parts.append(
            _figure(
                svg,
                f"Moran scatterplot of covered fraction over {z.size:,} areas: each area's "
                "standardised value against the average of its neighbours'. The slope of the "
                "line is Moran's I.",
            )
        )
    joins = clustering.get("join_counts")
    if isinstance(joins, Mapping) and joins:
        parts.append(tag("h3", "Join counts"))
        parts.append(
            kv_table(
                joins,
                caption="Join counts of served and unserved areas (binary weights)",
                labels=_JOIN_LABELS,
            )
        )
    bivariate = clustering.get("bivariate_moran")
    if isinstance(bivariate, Mapping) and bivariate:
        parts.append(tag("h3", "Bivariate Moran's I"))
        parts.append(kv_table(bivariate, caption="Bivariate Moran's I"))
    local = clustering.get("local_moran")
    if isinstance(local, Mapping) and local:
        parts.append(_local_moran_part(local))
    return _section("clustering", "Spatial clustering", *parts)


def _local_moran_part(local: Mapping[str, Any]) -> Html:
    parts: list[Any] = [tag("h3", "Local Moran's I (LISA)")]
    settings = []
    if local.get("alpha") is not None:
        settings.append(f"significance level {fmt_fixed(local.get('alpha'), 3)}")
    if local.get("fdr") is not None:
        fdr = local.get("fdr")
        settings.append(
            "Benjamini–Hochberg false discovery rate control "
            + ("applied" if fdr is True else ("not applied" if fdr is False else f"({fdr})"))
        )
    if settings:
        parts.append(tag("p", "Clusters at " + "; ".join(settings) + "."))
    counts = local.get("counts")
    crosstab = local.get("crosstab")
    labels = [*LISA_LABELS]
    for source in (counts, crosstab):
        if isinstance(source, Mapping):
            labels.extend(k for k in source if k not in labels)
    if isinstance(crosstab, Mapping) and crosstab:
        rows = []
        for label in labels:
            if label not in crosstab and not (isinstance(counts, Mapping) and label in counts):
                continue
            row = crosstab.get(label) or {}
            rows.append(
                (
                    label,
                    num(fmt_count(counts.get(label)) if isinstance(counts, Mapping) else NA),
                    num(fmt_count(_get(row, "majority_minority", "areas"))),
                    num(fmt_count(_get(row, "majority_minority", "population"))),
                    num(fmt_count(_get(row, "not_majority_minority", "areas"))),
                    num(fmt_count(_get(row, "not_majority_minority", "population"))),
                )
            )
        parts.append(
            table(
                (
                    "Cluster",
                    num("Areas"),
                    num("Majority-minority areas"),
                    num("Majority-minority population"),
                    num("Other areas"),
                    num("Other population"),
                ),
                rows,
                caption="LISA clusters of covered fraction by majority-minority status",
                table_id="lisa-crosstab",
            )
        )
    elif isinstance(counts, Mapping) and counts:
        rows = [(k, num(fmt_count(counts[k]))) for k in labels if k in counts]
        parts.append(table(("Cluster", num("Areas")), rows, caption="LISA clusters"))
    return join(parts)


def _enclave_sort_key(enclave: Mapping[str, Any]) -> tuple[float, int]:
    return (-(_number(enclave.get("population")) or 0.0), -len(enclave.get("area_ids") or []))


def _enclaves_section(page: _Page) -> Html:
    enclaves = [e for e in page.summary["enclaves"] if isinstance(e, Mapping)]
    parts: list[Any] = []
    if not enclaves:
        parts.append(tag("p", "No enclave of unserved areas enclosed by served areas was found."))
    else:
        parts.append(
            tag(
                "p",
                "An enclave is a connected set of unserved areas whose boundary runs mostly "
                "along served areas; its ring is the areas around it. The p-value compares the "
                "enclave's group shares with random connected sets of the same size.",
            )
        )
        rows = []
        for e in enclaves:
            scalar_diff = e.get("share_difference")
            scalar_ratio = e.get("share_ratio")
            rows.append(
                (
                    e.get("id") or NA,
                    num(fmt_count(len(e.get("area_ids") or []))),
                    num(fmt_count(e.get("population"))),
                    num(fmt_percent(e.get("surround_share"))),
                    num(
                        fmt_points(scalar_diff)
                        if not isinstance(scalar_diff, Mapping)
                        else "by group"
                    ),
                    num(
                        fmt_fixed(scalar_ratio)
                        if not isinstance(scalar_ratio, Mapping)
                        else "by group"
                    ),
                    num(fmt_p(e.get("p_value"))),
                    num(fmt_count(e.get("mc_draws"))),
                )
            )
        parts.append(
            table(
                (
                    "Enclave",
                    num("Areas"),
                    num("Population"),
                    num("Boundary along served areas"),
                    num("Share difference"),
                    num("Share ratio"),
                    num("p-value"),
                    num("Monte Carlo draws"),
                ),
                rows,
                caption="Enclaves of unserved areas",
                table_id="enclave-table",
            )
        )
        parts.append(_enclave_shares_part(enclaves, page))
        parts.append(_enclave_figures(enclaves, page))
    holes = page.summary.get("holes")
    if isinstance(holes, list) and holes:
        parts.append(tag("h3", "Holes in the footprint"))
        parts.append(
            _records_table(
                [h for h in holes if isinstance(h, Mapping)], caption="Holes in the footprint"
            )
        )
    return _section("enclaves", "Enclaves", *parts)


def _enclave_shares_part(enclaves: Sequence[Mapping[str, Any]], page: _Page) -> Html:
    present: list[str] = []
    for e in enclaves:
        for key in ("group_shares", "ring_group_shares"):
            if isinstance(e.get(key), Mapping):
                present.extend(g for g in e[key] if g not in present)
    if not present:
        return Html("")
    order = _ordered_groups(page.groups, present)
    rows = []
    for e in enclaves:
        diffs = e.get("share_difference")
        for g in order:
            rows.append(
                (
                    f"{e.get('id') or NA}: {g}",
                    num(fmt_percent(_get(e, "group_shares", g))),
                    num(fmt_percent(_get(e, "ring_group_shares", g))),
                    num(
                        fmt_points(diffs.get(g))
                        if isinstance(diffs, Mapping)
                        else fmt_points(
                            _difference(_get(e, "group_shares", g), _get(e, "ring_group_shares", g))
                        )
                    ),
                )
            )
    return table(
        ("Enclave and group", num("Share in enclave"), num("Share in ring"), num("Difference")),
        rows,
        caption="Group shares in each enclave and in its ring",
    )


def _difference(a: Any, b: Any) -> float | None:
    fa, fb = _number(a), _number(b)
    return None if fa is None or fb is None else fa - fb


def _enclave_figures(enclaves: Sequence[Mapping[str, Any]], page: _Page) -> Html:
    ids = page.areas[page.id_column].astype(str).to_numpy()
    position = pd.Index(ids)
    figures = []
    for e in sorted(enclaves, key=_enclave_sort_key)[:MAX_ENCLAVE_FIGURES]:
        members = _positions(position, e.get("area_ids"))
        if members.size == 0:
            continue
        ring_ids = e.get("ring_ids")
        ring = _positions(position, ring_ids) if ring_ids else page.layers.neighbours(members)
        label = str(e.get("id") or NA)
        svg = charts.enclave_locator_chart(
            page.layers, members, ring, label=label, salt=f"report-enclave-{len(figures)}"
        )
        figures.append(
            _figure(
                svg,
                f"Enclave {label}: {fmt_count(members.size)} areas, "
                f"{fmt_count(e.get('population'))} residents. Left: its place in the region "
                "(box: the close-up). Right: the enclave highlighted and its ring outlined.",
            )
        )
    if not figures:
        return Html("")
    note = ""
    if len(enclaves) > MAX_ENCLAVE_FIGURES:
        note = f" (the {MAX_ENCLAVE_FIGURES} most populous of {len(enclaves)})"
    return tag("h3", f"Where the enclaves lie{note}") + tag("div", *figures, class_="locators")


def _positions(index: pd.Index, ids: Any) -> np.ndarray:
    if not ids:
        return np.array([], dtype=np.int64)
    found = index.get_indexer([str(i) for i in ids])
    return np.sort(found[found >= 0])


def _records_table(records: Sequence[Mapping[str, Any]], *, caption: str) -> Html:
    keys: list[str] = []
    for r in records:
        keys.extend(k for k in r if k not in keys)
    rows = [
        tuple(num(fmt_auto(k, r.get(k))) if k != keys[0] else fmt_auto(k, r.get(k)) for k in keys)
        for r in records
    ]
    return table([k.replace("_", " ") for k in keys], rows, caption=caption)


# --- methods and cautions --------------------------------------------------------------


def _formula(*content: Any) -> Html:
    return tag("span", *content, class_="formula")


def _methods_section(page: _Page, present: set[str]) -> Html:
    s = page.summary
    items: list[Html] = []
    if "coverage" in present:
        cov = s["coverage"]
        items.append(tag("dt", "Coverage rates"))
        items.append(
            tag(
                "dd",
                "For group g, with x",
                Html("<sub>gi</sub>"),
                " its count in area i and c",
                Html("<sub>i</sub>"),
                " the covered fraction of area i (its area inside the "
                "footprint over its whole area):",
                _formula(
                    Html(
                        "r<sub>g</sub> = &Sigma;<sub>i</sub> c<sub>i</sub> x<sub>gi</sub>"
                        " / &Sigma;<sub>i</sub> x<sub>gi</sub>"
                    )
                ),
                "The served-area rate replaces c",
                Html("<sub>i</sub>"),
                " by 1 for areas "
                "counted as served and 0 otherwise. An area counts as served when its covered "
                f"fraction is at least the served threshold, "
                f"{fmt_percent(cov.get('served_threshold'))}. Ratios divide by the comparison "
                "rate; differences subtract it and are shown in percentage points.",
            )
        )
        items.append(tag("dt", "Four-fifths screen (29 CFR 1607.4(D))"))
        items.append(
            tag(
                "dd",
                "A group is flagged when its rate is strictly less than 0.8 times the rate of "
                f"{page.comparison_label}. ",
                FOUR_FIFTHS_NOTE,
            )
        )
        if cov.get("area_classes"):
            items.append(tag("dt", "Classes of area"))
            items.append(
                tag(
                    "dd",
                    "Majority-minority areas: minority share (total population less "
                    "non-Hispanic White alone) above one half, as set in the parameters. "
                    "Income tiers follow the CRA rule, 12 CFR 228.12(m): the area's median "
                    "family income as a percent of the area median is low below 50, moderate "
                    "from 50 to below 80, middle from 80 to below 120, upper at 120 and above; "
                    "an area without an income figure is unknown, not low. Low or moderate "
                    "joins the first two tiers.",
                )
            )
        if cov.get("distance"):
            items.append(tag("dt", "Distance"))
            items.append(
                tag(
                    "dd",
                    "Straight-line distance in the analysis CRS from each area to its nearest "
                    "service point, averaged over each group's population (mean and median).",
                )
            )
    if "segregation" in present:
        seg = s["segregation"]
        items.append(tag("dt", "Dissimilarity index (Duncan and Duncan 1955)"))
        items.append(
            tag(
                "dd",
                _formula(
                    Html(
                        "D = &frac12; &Sigma;<sub>i</sub> | x<sub>i</sub>/X &minus; "
                        "y<sub>i</sub>/Y |"
                    )
                ),
                "with x",
                Html("<sub>i</sub>"),
                " and y",
                Html("<sub>i</sub>"),
                " the counts "
                "of the two groups in area i and X, Y their totals (Duncan, O. D. and Duncan, "
                "B. 1955, American Sociological Review 20(2)). \u201cD vs reference\u201d "
                "compares a group with the reference group; \u201cD vs rest\u201d with everyone "
                "else. The coverage dissimilarities apply the same index to a group's "
                "population inside and outside the footprint (by served area, and by covered "
                "fraction).",
            )
        )
        items.append(
            tag("dt", "Isolation, exposure and correlation ratio (Massey and Denton 1988)")
        )
        items.append(
            tag(
                "dd",
                _formula(
                    Html(
                        "<sub>x</sub>P*<sub>x</sub> = &Sigma;<sub>i</sub> (x<sub>i</sub>/X)"
                        "(x<sub>i</sub>/t<sub>i</sub>), &nbsp; <sub>x</sub>P*<sub>y</sub>"
                        " = &Sigma;<sub>i</sub> (x<sub>i</sub>/X)(y<sub>i</sub>/t<sub>i"
                        "</sub>), &nbsp; &eta;&sup2; = (<sub>x</sub>P*<sub>x</sub> &minus;"
                        " P) / (1 &minus; P)"
                    )
                ),
                "with t",
                Html("<sub>i</sub>"),
                " the total population of area i and P = X/T "
                "the group's overall share (Massey, D. S. and Denton, N. A. 1988, Social "
                "Forces 67(2), 281\u2013315).",
            )
        )
        if seg.get("coverage_gap_test"):
            items.append(tag("dt", "Coverage gap permutation test"))
            items.append(
                tag(
                    "dd",
                    "The gap between a group's coverage rate and the reference rate is "
                    "compared with the gaps obtained when covered fractions are shuffled "
                    f"among areas ({fmt_count(seg.get('permutations'))} permutations). The "
                    "p-value is the share of permutations, counting the observed one, with a "
                    "gap at least as large.",
                )
            )
    if "clustering" in present:
        items.append(tag("dt", "Moran's I (Moran 1950; Cliff and Ord 1981)"))
        items.append(
            tag(
                "dd",
                _formula(
                    Html(
                        "I = (n / S<sub>0</sub>) &Sigma;<sub>i</sub>&Sigma;<sub>j</sub> "
                        "w<sub>ij</sub> z<sub>i</sub> z<sub>j</sub> / &Sigma;<sub>i</sub>"
                        " z<sub>i</sub>&sup2;, &nbsp; E[I] = &minus;1/(n &minus; 1)"
                    )
                ),
                "with z the deviations from the mean, w",
                Html("<sub>ij</sub>"),
                " the row-standardised contiguity weights and S",
                Html("<sub>0</sub>"),
                " their sum "
                "(Moran, P. A. P. 1950, Biometrika 37, 17\u201323). The variance and z under "
                "randomisation follow Cliff, A. D. and Ord, J. K. 1981, Spatial Processes: "
                "Models and Applications. The pseudo p-value p_sim comes from random "
                "permutations of the values over the areas: (number at least as extreme as "
                "observed + 1) / (permutations + 1).",
            )
        )
        items.append(tag("dt", "Join counts, bivariate Moran's I"))
        items.append(
            tag(
                "dd",
                "Join counts tally neighbour pairs that are both served, both unserved or "
                "mixed, under binary weights (Cliff and Ord 1981); many unserved\u2013unserved "
                "joins mean unserved areas cluster. The bivariate Moran's I relates one "
                "variable in an area to another in its neighbours (Wartenberg, D. 1985, "
                "Geographical Analysis 17(4)).",
            )
        )
        items.append(tag("dt", "Local Moran's I, LISA (Anselin 1995)"))
        items.append(
            tag(
                "dd",
                _formula(
                    Html(
                        "I<sub>i</sub> = z<sub>i</sub> &Sigma;<sub>j</sub> w<sub>ij</sub>"
                        " z<sub>j</sub> / m<sub>2</sub>, &nbsp; m<sub>2</sub> = "
                        "&Sigma;<sub>i</sub> z<sub>i</sub>&sup2; / n"
                    )
                ),
                "Significance by conditional permutation (Anselin, L. 1995, Geographical "
                "Analysis 27(2), 93\u2013115); an area is labelled high-high, low-low, "
                "high-low or low-high by its quadrant in the Moran scatterplot when "
                "significant. With false discovery rate control the p-values are adjusted by "
                "the step-up procedure of Benjamini, Y. and Hochberg, Y. 1995, Journal of the "
                "Royal Statistical Society B 57(1), 289\u2013300.",
            )
        )
    if "enclaves" in present:
        items.append(tag("dt", "Enclave Monte Carlo test"))
        items.append(
            tag(
                "dd",
                "For each enclave of k areas, random connected sets of k areas are grown: a "
                "seed area is drawn at random and neighbours are added one at a time, drawn "
                "at random among the set's contiguous neighbours, until the set has k areas. "
                "The p-value is the share of such sets, counting the enclave itself, whose "
                "contrast in group share with their own ring is at least the enclave's "
                "(Monte Carlo test in the sense of Hope, A. C. A. 1968, Journal of the Royal "
                "Statistical Society B 30(3), 582\u2013598).",
            )
        )
    settings = _randomness_settings(page, present)
    if settings:
        items.append(tag("dt", "Permutations, Monte Carlo draws and seed"))
        items.append(tag("dd", settings))
    if not items:
        return Html("")
    return _section("methods", "Methods", tag("dl", *items, class_="methods"))


def _randomness_settings(page: _Page, present: set[str]) -> str:
    s = page.summary
    parts = []
    if "segregation" in present and s["segregation"].get("permutations") is not None:
        parts.append(
            f"segregation tests {fmt_count(s['segregation']['permutations'])} permutations"
        )
    moran = _get(s, "clustering", "moran")
    if "clustering" in present and isinstance(moran, Mapping) and moran.get("permutations"):
        parts.append(f"Moran's I {fmt_count(moran['permutations'])} permutations")
    if "enclaves" in present:
        draws = sorted(
            {
                int(d)
                for e in s["enclaves"]
                if isinstance(e, Mapping)
                for d in [_number(e.get("mc_draws"))]
                if d is not None
            }
        )
        if draws:
            parts.append("enclave test " + ", ".join(f"{d:,}" for d in draws) + " draws")
    seed = page.manifest.get("seed")
    text = "; ".join(parts)
    if seed is not None:
        text += ("; " if text else "") + (
            f"all random draws come from one generator seeded with {seed}, so a rerun with "
            "the same spec gives the same figures"
        )
    return (text[0].upper() + text[1:] + ".") if text else ""


def _cautions_section(page: _Page) -> Html:
    items = [tag("li", tag("strong", short), " ", long) for short, long in STANDARD_CAUTIONS]
    items.append(
        tag("li", tag("strong", "The four-fifths rule is a screen."), " ", FOUR_FIFTHS_NOTE)
    )
    parts: list[Any] = [tag("ul", *items)]
    extra = [c for c in page.summary.get("cautions") or [] if c is not None]
    if extra:
        parts.append(tag("h3", "Cautions raised by this analysis"))
        parts.append(tag("ul", *(tag("li", str(c)) for c in extra), id="analysis-cautions"))
    return _section("cautions", "Cautions", *parts)


# --- the page --------------------------------------------------------------------------


def _stylesheet() -> str:
    return resources.files("coverage_audit.report").joinpath("report.css").read_text("utf-8")


#: Nothing may load: no script, no remote style, font or image; images only as data URIs.
CONTENT_SECURITY_POLICY = (
    "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; "
    "form-action 'none'"
)


def render_report(
    summary: Mapping[str, Any],
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
    """Return the report page as a string; see :func:`build_report` for the parameters."""
    _check_inputs(summary, manifest, areas, exclusions, id_column, groups, reference)
    return _render(
        summary,
        manifest,
        areas,
        exclusions,
        id_column,
        groups,
        reference,
        footprint,
        moran_lag,
        moran_weights,
        moran_mask,
    )


def _render(
    summary: Mapping[str, Any],
    manifest: Mapping[str, Any],
    areas: gpd.GeoDataFrame,
    exclusions: pd.DataFrame | None,
    id_column: str,
    groups: Sequence[str],
    reference: str,
    footprint: Mapping[str, Any] | None,
    moran_lag: Any,
    moran_weights: Any,
    moran_mask: Any,
) -> str:
    if moran_lag is not None:
        moran_weights = None
    moran = _moran_points(areas, moran_lag, moran_weights, moran_mask)
    page = _Page(
        summary, manifest, areas, exclusions, id_column, groups, reference, footprint, moran
    )
    present = {
        key
        for key in ("coverage", "segregation", "clustering")
        if isinstance(summary.get(key), Mapping) and summary.get(key)
    }
    if isinstance(summary.get("enclaves"), list):
        present.add("enclaves")
    sections: list[tuple[str, str, Callable[[_Page], Html]]] = [
        ("audited", "What was audited", _audited_section),
        ("coverage", "Coverage by group", _coverage_section),
        ("segregation", "Segregation", _segregation_section),
        ("clustering", "Spatial clustering", _clustering_section),
        ("enclaves", "Enclaves", _enclaves_section),
    ]
    sections = [s for s in sections if s[0] == "audited" or s[0] in present]
    body = [_header(page), _cautions_box(page), _key_figures(page)]
    toc = [(anchor, title) for anchor, title, _ in sections]
    methods = _methods_section(page, present)
    if methods:
        toc.append(("methods", "Methods"))
    toc.append(("cautions", "Cautions"))
    body.append(_toc(toc))
    body.extend(render(page) for _, _, render in sections)
    body.append(methods)
    body.append(_cautions_section(page))
    title = summary.get("title") or "Coverage audit"
    head = join(
        [
            Html('<meta charset="utf-8">'),
            Html(
                f'<meta http-equiv="Content-Security-Policy" content="{CONTENT_SECURITY_POLICY}">'
            ),
            Html('<meta name="viewport" content="width=device-width, initial-scale=1">'),
            tag("title", f"{title}: coverage audit report"),
            Html(f"<style>\n{_stylesheet()}</style>"),
        ],
        "\n",
    )
    main = tag("main", *body)
    return f'<!DOCTYPE html>\n<html lang="en">\n<head>\n{head}\n</head>\n<body>\n{main}\n</body>\n</html>\n'


def build_report(
    summary: Mapping[str, Any],
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
    summary : mapping
        The findings, as written to summary.json (schema_version 1). Any section may be
        absent; the page shows what is present.
    manifest : mapping
        The run manifest: ``tool``, ``version``, ``spec``, ``inputs``, ``analysis_crs``,
        ``seed``, ``libraries``, ``circle_vertices``, ``started``, ``finished``.
    areas : geopandas.GeoDataFrame
        Analysed areas in the projected analysis CRS, with the id column, ``geometry``,
        ``served`` and ``covered_fraction``.
    exclusions : pandas.DataFrame or None
        Input rows not analysed: ``source``, ``row``, ``id``, ``reason``.
    id_column : str
        Name of the area id column.
    groups : sequence of str
        Group names, in display order.
    reference : str
        The reference group (one of ``groups``).
    footprint : mapping, optional
        ``{"kind": "polygons" | "points" | "ids", "name": str, "geometry": GeoSeries}``
        and, for points, ``"points"`` (GeoDataFrame) and ``"radius_m"``.
    path : str or os.PathLike
        Where to write report.html; its folder must exist. Written atomically.
    moran_lag : array-like, optional
        Spatial lag ``W z`` of the standardised covered fraction (row-standardised
        weights), one value per area of ``areas`` with NaN for areas left out of the
        spatial statistics, or one per area marked in ``moran_mask``. Enables the Moran
        scatterplot.
    moran_weights : scipy.sparse matrix or libpysal.graph.Graph, optional
        Row-standardised weights to compute the lag from instead: n x n in the order of
        ``areas`` (rows without neighbours are left out), or m x m over the areas marked
        in ``moran_mask``. Ignored when ``moran_lag`` is given; when both are None the
        scatterplot is omitted.
    moran_mask : array-like of bool, optional
        Areas that take part in the spatial statistics.

    Raises
    ------
    InputError
        When an input does not have the expected form; the message names it.

    Notes
    -----
    The page holds no script, loads nothing and embeds every figure as inline SVG, so
    it can be archived, mailed and printed as one file. Output bytes depend only on the
    inputs (the run times come from the manifest).
    """
    target = Path(path)
    _check_target(target)
    _check_inputs(summary, manifest, areas, exclusions, id_column, groups, reference)
    text = _render(
        summary,
        manifest,
        areas,
        exclusions,
        id_column,
        groups,
        reference,
        footprint,
        moran_lag,
        moran_weights,
        moran_mask,
    )
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, target)
    finally:
        if temporary.exists():
            temporary.unlink()
