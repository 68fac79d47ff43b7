"""The audit report page: one self-contained, printable report.html.

Takes the findings (the ``summary`` dict written to summary.json), the run ``manifest``,
the analysed ``areas`` (a GeoDataFrame in the projected analysis CRS), the exclusions
table and the dissolved footprint, and gives one HTML file with the stylesheet and every
figure inline (SVG drawn by :mod:`coverage_audit.report.charts`): what was audited,
coverage by group, segregation, clustering, enclaves, methods and cautions. Sections
appear only when their data are present, and a missing value shows as "n/a". Every value
taken from the inputs is HTML-escaped; the page holds no script, refers to nothing on a
network, and its Content-Security-Policy forbids both. The same inputs give the same
bytes, apart from the run times quoted from the manifest.
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

#: Nothing may load: no script, no remote style, font or image; images only as data URIs.
CONTENT_SECURITY_POLICY = (
    "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; "
    "form-action 'none'"
)

#: Cautions every report carries: (headline, explanation, keyword). The headlines stand at
#: the top of the page; the full text closes it, unless a caution recorded in the summary
#: already speaks of the same thing (it contains the keyword), so nothing is said twice.
STANDARD_CAUTIONS: tuple[tuple[str, str, str], ...] = (
    (
        "A statistical disparity is a reason to look closer, not proof of discrimination.",
        "The figures describe where a service footprint reaches and who lives there. A gap "
        "between groups, a cluster of unserved areas or an enclave is a pattern worth "
        "examining; it does not by itself show intent, practice or cause.",
        "proof",
    ),
    (
        "Results depend on the areal units chosen.",
        "Other boundaries or another level of geography (tracts, block groups, blocks) can "
        "give other rates and indices for the same footprint: the modifiable areal unit "
        "problem. A partly covered area counts by its covered fraction, which assumes that "
        "people are spread evenly within it.",
        "areal unit",
    ),
    (
        "Population figures are estimates with error.",
        "Survey estimates such as those of the American Community Survey carry margins of "
        "error, wide for small areas and small groups; differences within those margins may "
        "not be real.",
        "margin",
    ),
    (
        "Legitimate business factors must be considered.",
        "Where a service is offered can depend on demand, cost, zoning, existing facilities, "
        "size and financial condition and other factors not measured here; any disparity "
        "must be weighed against them.",
        "business",
    ),
    (
        "Legal conclusions belong to counsel and regulators.",
        "Whether a pattern breaches any law is for counsel and the responsible regulators to "
        "decide under the applicable law. This report makes no legal finding.",
        "counsel",
    ),
)

FOUR_FIFTHS_NOTE = (
    "The four-fifths rule of 29 CFR 1607.4(D) is a rule about employment selection: a "
    "selection rate less than four-fifths (80%) of the rate of the group with the highest "
    "rate is generally regarded as evidence of adverse impact. It is used here only as a "
    "screening rule of thumb for coverage rates, not as a legal test; a ratio of exactly "
    "0.80 is not flagged."
)


# --- markup ----------------------------------------------------------------------------


class Html(str):
    """Markup already safe to place in the page (authored here, or escaped)."""

    __slots__ = ()

    def __add__(self, other: object) -> Html:
        # Concatenation keeps the type, escaping plain text, so markup built piecewise is
        # never escaped twice nor left unescaped.
        return Html(str.__add__(self, esc(other)))


def esc(value: Any) -> Html:
    """Return ``value`` as escaped text; :class:`Html` passes through unchanged."""
    if isinstance(value, Html):
        return value
    return Html(html.escape(str(value), quote=True))


def join(parts: Iterable[Any], sep: str = "") -> Html:
    """Concatenate parts, escaping each."""
    return Html(sep.join(esc(p) for p in parts))


def tag(name: str, *content: Any, **attrs: Any) -> Html:
    """Return an element; a trailing ``_`` is dropped from names, ``_`` becomes ``-``."""
    rendered = "".join(
        f' {key.rstrip("_").replace("_", "-")}="{esc(value)}"'
        for key, value in attrs.items()
        if value is not None and value is not False
    )
    return Html(f"<{name}{rendered}>{join(content)}</{name}>")


def fill(template: str, **values: Any) -> Html:
    """Fill an authored HTML ``template`` with escaped values."""
    return Html(template.format(**{k: esc(v) for k, v in values.items()}))


def _p(*content: Any, **attrs: Any) -> Html:
    return tag("p", *content, **attrs)


def _section(section_id: str, title: str, *content: Any) -> Html:
    return tag("section", tag("h2", title), *content, id=section_id, class_="major")


def _figure(svg: str, caption: str) -> Html:
    return tag("figure", Html(svg), tag("figcaption", caption))


# --- numbers ---------------------------------------------------------------------------


def _number(value: Any) -> float | None:
    """Return a finite float, or ``None`` for missing, NaN, inf, booleans and non-numbers."""
    if value is None or isinstance(value, (bool, np.bool_)):
        return None
    try:
        f = float(value)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _minus(text: str) -> str:
    # A typographic minus is read as "minus" by screen readers and never breaks a line;
    # a value that rounds to zero loses its sign.
    if text.startswith("-"):
        return text[1:] if float(text[1:]) == 0 else "\u2212" + text[1:]
    return text


def fmt_percent(value: Any, digits: int = 1) -> str:
    """Format a fraction as a percentage: ``0.6234 -> "62.3%"``."""
    f = _number(value)
    return NA if f is None else _minus(f"{100.0 * f:.{digits}f}") + "%"


def fmt_points(value: Any, digits: int = 1) -> str:
    """Format a difference of fractions in percentage points: ``-0.123 -> "−12.3 pp"``."""
    f = _number(value)
    if f is None:
        return NA
    text = _minus(f"{100.0 * f:.{digits}f}")
    return ("+" if f > 0 and float(text) != 0 else "") + text + " pp"


def fmt_fixed(value: Any, digits: int = 3) -> str:
    """Format a statistic with a fixed number of decimals (ratios, indices, I, z)."""
    f = _number(value)
    return NA if f is None else _minus(f"{f:.{digits}f}")


def fmt_p(value: Any) -> str:
    """Format a p-value: three decimals, and ``< 0.001`` below that (usual reporting)."""
    f = _number(value)
    if f is None:
        return NA
    return "< 0.001" if f < 0.001 else f"{f:.3f}"


def fmt_count(value: Any) -> str:
    """Format a count or a population with thousands separators (whole people)."""
    f = _number(value)
    return NA if f is None else f"{round(f):,}"


def fmt_distance(value: Any, unit: str) -> str:
    """Format a distance, rounded to whole units."""
    f = _number(value)
    return NA if f is None else f"{round(f):,} {unit}"


def fmt_bool(value: Any) -> str:
    """Format a flag as yes/no."""
    return NA if value is None else ("yes" if bool(value) else "no")


#: Keys of statistics, whose whole-number values still print with decimals.
_STATISTIC_PREFIXES = ("z_", "p_", "expected", "variance", "mean", "share", "ratio")
_STATISTIC_KEYS = frozenset({"I", "EI", "z", "p"})


def fmt_param(value: Any) -> str:
    """Format a spec parameter as written: numbers without padding, lists comma-joined."""
    if value is None:
        return "not set"
    if isinstance(value, (bool, np.bool_)):
        return fmt_bool(value)
    if isinstance(value, (float, np.floating)):
        return f"{float(value):.10g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(fmt_param(v) for v in value) if value else "none"
    if isinstance(value, Mapping):
        return "; ".join(f"{k}: {fmt_param(v)}" for k, v in value.items()) or "none"
    return str(value)


def fmt_auto(key: str, value: Any) -> str:
    """Format a value of a generic key/value table by its type and the shape of its key."""
    if value is None:
        return NA
    if isinstance(value, (bool, np.bool_)):
        return fmt_bool(value)
    if isinstance(value, (int, np.integer)):
        return fmt_count(value)
    if isinstance(value, (float, np.floating)):
        if key.startswith("p_") or key.endswith("_p") or key == "p":
            return fmt_p(value)
        statistic = key in _STATISTIC_KEYS or key.startswith(_STATISTIC_PREFIXES)
        if float(value).is_integer() and not statistic:
            return fmt_count(value)  # a count carried as a float (joins, areas)
        return fmt_fixed(value, 2 if key.startswith("z_") or key == "z" else 4)
    if isinstance(value, Mapping):
        return "; ".join(f"{k}: {fmt_auto(str(k), v)}" for k, v in value.items()) or NA
    if isinstance(value, (list, tuple)):
        if not value:
            return "none"
        shown = ", ".join(fmt_auto(key, v) for v in value[:10])
        return shown + (f" … ({len(value):,} in all)" if len(value) > 10 else "")
    return str(value)


def _cell_text(value: Any) -> str:
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return NA
    return str(value)


# --- tables ----------------------------------------------------------------------------


class Num(str):
    """Text of a right-aligned numeric cell."""

    __slots__ = ()


def _cell(content: Any, *, header: bool) -> Html:
    numeric = isinstance(content, Num)
    classes = " ".join(c for c, on in (("num", numeric), ("na", content == NA)) if on)
    if header:
        return tag("th", content, scope="row", class_=classes or None)
    return tag("td", content, class_=classes or None)


def table(
    headers: Sequence[Any],
    rows: Iterable[Sequence[Any]],
    *,
    caption: str,
    row_attrs: Sequence[Mapping[str, Any]] | None = None,
    table_id: str | None = None,
) -> Html:
    """Render a table whose first column holds row headers; :class:`Num` cells align right."""
    head = join(
        tag("th", h, scope="col", class_="num" if isinstance(h, Num) else None) for h in headers
    )
    body = [
        tag(
            "tr",
            *(_cell(c, header=j == 0) for j, c in enumerate(row)),
            **(row_attrs[k] if row_attrs is not None else {}),
        )
        for k, row in enumerate(rows)
    ]
    inner = tag("caption", caption) + tag("thead", tag("tr", head)) + tag("tbody", *body)
    return tag("div", tag("table", inner, id=table_id), class_="table-wrap")


#: Statistics keep their textbook names in generic tables (esda's I, EI, z_sim, p_sim).
_STAT_LABELS = {
    **{k: k for k in ("I", "EI", "z_sim", "p_sim", "z_rand", "p_rand", "z_norm", "p_norm", "n")},
    "expected": "E[I]",
    "variance_rand": "Var[I] (rand.)",
    "expected_sim": "mean of the permutation null",
    "x_variable": "x (in the area)",
    "y_variable": "y (lagged: in its neighbours)",
}


def kv_table(
    mapping: Mapping[str, Any],
    *,
    caption: str,
    labels: Mapping[str, str] | None = None,
) -> Html:
    """Render a mapping as a two-column table with labelled keys."""
    labels = {**_STAT_LABELS, **(labels or {})}
    rows = [(labels.get(k, k.replace("_", " ")), Num(fmt_auto(k, v))) for k, v in mapping.items()]
    return table(("Item", Num("Value")), rows, caption=caption)


def _mapping(value: Any) -> Mapping[str, Any]:
    """Return ``value`` if it is a mapping, else an empty one (absent or malformed data)."""
    return value if isinstance(value, Mapping) else {}


def _get(mapping: Any, *keys: str) -> Any:
    """Walk nested mappings; ``None`` once a key is missing or a value is not a mapping."""
    for key in keys:
        if not isinstance(mapping, Mapping):
            return None
        mapping = mapping.get(key)
    return mapping


def _ordered(groups: Sequence[str], present: Iterable[str]) -> list[str]:
    """Return the groups in the order given, then any other group the data have."""
    present = list(present)
    return [g for g in groups if g in present] + [g for g in present if g not in groups]


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


# --- the page's state ------------------------------------------------------------------


class _Page:
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
        if self._layers is None:
            served = self.areas["served"].astype("boolean").fillna(False).to_numpy(dtype=bool)
            self._layers = charts.RegionLayers.build(self.areas.geometry.to_numpy(), served)
        return self._layers

    @property
    def comparison_label(self) -> str:
        if self.highest:
            named = f" ({self.comparison_group})" if self.comparison_group else ""
            return f"the highest-rate group{named}"
        return f"the reference group ({self.comparison_group})"


# --- top of the page -------------------------------------------------------------------


def _header(page: _Page) -> Html:
    m = page.manifest
    run = f"Report of {m.get('tool') or 'coverage_audit'}"
    run += f" {m['version']}" if m.get("version") else ""
    if m.get("started"):
        run += f"; run started {m['started']}"
    if m.get("finished"):
        run += f", finished {m['finished']}"
    title = page.summary.get("title") or "Coverage audit"
    return tag("header", tag("h1", title), _p(run), class_="report-head")


def _cautions_box(page: _Page) -> Html:
    items = [tag("li", tag("strong", short)) for short, _, _ in STANDARD_CAUTIONS]
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


def _key_figures(page: _Page) -> Html:
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
    cov = _get(s, "coverage", "groups")
    if isinstance(cov, Mapping) and cov:
        flagged = [g for g in _ordered(page.groups, cov) if _get(cov, g, "below_four_fifths")]
        if flagged:
            parts = "; ".join(
                f"{g} {fmt_percent(_get(cov, g, 'rate'))} (ratio "
                f"{fmt_fixed(_get(cov, g, 'ratio'))})"
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
    moran = _get(s, "clustering", "moran")
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
            top = min(enclaves, key=_enclave_order)
            plural = "s" if len(enclaves) != 1 else ""
            items.append(
                tag(
                    "li",
                    f"{len(enclaves)} enclave{plural} of unserved areas enclosed "
                    f"by served ones; the most populous, {top.get('id') or NA}, has "
                    f"{fmt_count(top.get('population'))} residents.",
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


# --- what was audited ------------------------------------------------------------------


def _footprint_text(page: _Page) -> str:
    fp = page.footprint
    described = page.summary.get("footprint") or {}
    kind = fp.get("kind") or described.get("kind")
    name = fp.get("name") or described.get("name") or "an unnamed source"
    if kind == "points":
        points = fp.get("points")
        count = len(points) if points is not None else described.get("points")
        radius = fp.get("radius_m", described.get("radius_m"))
        vertices = page.manifest.get("circle_vertices") or _get(
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
    return "Footprint: not described."


def _flatten(mapping: Mapping[str, Any], prefix: str = "") -> list[tuple[str, Any]]:
    out: list[tuple[str, Any]] = []
    for key, value in mapping.items():
        if isinstance(value, Mapping) and value:
            out.extend(_flatten(value, f"{prefix}{key}."))
        elif isinstance(value, list) and value and all(isinstance(v, Mapping) for v in value):
            for k, item in enumerate(value):
                out.extend(_flatten(item, f"{prefix}{key}[{k}]."))
        else:
            out.append((f"{prefix}{key}", value))
    return out


def _to_crs(frame: Any, crs: Any) -> gpd.GeoSeries | gpd.GeoDataFrame:
    if not isinstance(frame, (gpd.GeoSeries, gpd.GeoDataFrame)):
        frame = gpd.GeoSeries(frame, crs=crs)
    if crs is not None and frame.crs is not None and frame.crs != crs:
        frame = frame.to_crs(crs)
    return frame


def _overview(page: _Page) -> Html:
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
    return _figure(
        svg,
        "The analysed region: served areas in the mid tone, the rest in light "
        "grey, the footprint outlined. The interactive map is in map.html.",
    )


def _audited_section(page: _Page) -> Html:
    m = page.manifest
    areas = page.summary.get("areas") or {}
    parts: list[Any] = [
        _p(
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
                tag("span", i.get("sha256") or NA, class_="digest"),
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
    if m.get("analysis_crs"):
        parts.append(
            _p(
                "Analysis CRS (areas and distances are measured in it): ",
                tag("code", m["analysis_crs"]),
            )
        )
    parts.append(_overview(page))
    params = _flatten(m["spec"]) if isinstance(m.get("spec"), Mapping) else []
    if m.get("seed") is not None and not any(k.endswith("seed") for k, _ in params):
        params.append(("seed", m["seed"]))
    if params:
        rows: list[tuple[Any, ...]] = [(tag("code", k), fmt_param(v)) for k, v in params]
        parts.append(table(("Parameter", "Value"), rows, caption="Parameters (resolved spec)"))
    parts.append(_exclusions_part(page))
    libraries = m.get("libraries") or {}
    if isinstance(libraries, Mapping) and libraries:
        rows = [(name, Num(_cell_text(v))) for name, v in libraries.items()]
        parts.append(table(("Library", Num("Version")), rows, caption="Software versions"))
    return _section("audited", "What was audited", *parts)


def _exclusions_part(page: _Page) -> Html:
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
        return parts[0] + _p("No input row was excluded.")
    parts.append(_p(f"{fmt_count(total)} input rows were not analysed."))
    if by_reason:
        rows: list[tuple[Any, ...]] = [
            (reason, Num(fmt_count(n))) for reason, n in by_reason.items()
        ]
        parts.append(table(("Reason", Num("Rows")), rows, caption="Excluded rows by reason"))
    if frame is not None and len(frame):
        shown = frame.loc[:, list(EXCLUSION_COLUMNS)].iloc[:MAX_LISTED_EXCLUSIONS]
        rows = [tuple(_cell_text(v) for v in r) for r in shown.itertuples(index=False)]
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
                _p(
                    "The full list is in ",
                    tag("a", "exclusions.csv", href="exclusions.csv", class_="file-link"),
                    ", beside this report.",
                )
            )
    return join(parts)


# --- coverage --------------------------------------------------------------------------


def _coverage_section(page: _Page) -> Html:
    cov = page.summary["coverage"]
    data = _mapping(cov.get("groups"))
    order = _ordered(page.groups, data)
    parts: list[Any] = [
        _p(
            "Coverage rate: the share of a group's population living inside the footprint, a "
            "partly covered area counting by its covered fraction. Served-area rate: the share "
            "living in areas counted as served (covered fraction at least "
            f"{fmt_percent(cov.get('served_threshold'))}). Ratios and differences compare each "
            f"group with {page.comparison_label}."
        )
    ]
    if cov.get("rate") is not None:
        parts.append(
            _p(
                f"Whole population: {fmt_percent(cov.get('rate'))} covered "
                f"({fmt_count(cov.get('covered_population'))} of "
                f"{fmt_count(cov.get('population'))}); {fmt_count(cov.get('served_areas'))}"
                f" of {fmt_count(cov.get('areas'))} areas served."
            )
        )
    rows: list[tuple[Any, ...]] = []
    attrs: list[dict[str, Any]] = []
    for g in order:
        item = _mapping(data.get(g))
        flagged = bool(item.get("below_four_fifths"))
        is_comparison = g == page.comparison_group
        label = g + (" (highest rate)" if page.highest else " (reference)") if is_comparison else g
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
        Num("Population"),
        Num("Covered population"),
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
    parts.append(_p(FOUR_FIFTHS_NOTE, class_="note"))
    if order:
        rates = [_number(_get(data, g, "rate")) for g in order]
        comparison_rate = _number(_get(data, page.comparison_group or "", "rate"))
        if page.highest and comparison_rate is None:
            comparison_rate = max((r for r in rates if r is not None), default=None)
        svg = charts.coverage_bar_chart(
            order,
            rates,
            comparison_rate=comparison_rate,
            salt="report-coverage-bars",
            comparison_label=(
                f"{page.comparison_group or 'highest rate'} "
                f"({'highest rate' if page.highest else 'reference'})"
            ),
            flagged=[bool(_get(data, g, "below_four_fifths")) for g in order],
        )
        parts.append(
            _figure(
                svg,
                "Coverage rate by group. Solid line: the comparison rate; "
                "dotted line: four-fifths of it. Hatched bars fall below it.",
            )
        )
    parts.append(_area_classes_part(cov.get("area_classes")))
    parts.append(_distance_part(cov.get("distance"), page))
    return _section("coverage", "Coverage by group", *parts)


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
        item = _get(classes, *keys)
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


def _distance_part(distance: Any, page: _Page) -> Html:
    data = _get(distance, "groups")
    if not isinstance(data, Mapping) or not data:
        return Html("")
    unit = str(distance.get("unit") or "m")
    rows = [
        (
            g,
            Num(fmt_distance(_get(data, g, "mean"), unit)),
            Num(fmt_distance(_get(data, g, "median"), unit)),
        )
        for g in _ordered(page.groups, data)
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
_GAP_COLUMNS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
    ("gap", "Gap", fmt_points),
    ("p_value", "p (two-sided)", fmt_p),
    ("p_value_one_sided", "p (one-sided)", fmt_p),
    ("null_mean", "Null mean", fmt_points),
    ("null_sd", "Null sd", fmt_points),
    ("permutations", "Permutations", fmt_count),
)


def _segregation_section(page: _Page) -> Html:
    seg = page.summary["segregation"]
    ref = seg.get("reference_group") or page.reference
    columns = [(k, label) for k, label in _SEGREGATION_COLUMNS if isinstance(seg.get(k), Mapping)]
    present: list[str] = []
    for key, _ in columns:
        present.extend(g for g in seg[key] if g not in present)
    parts: list[Any] = [
        _p(
            f"Indices over the analysed areas; the reference group is {ref}. "
            "Dissimilarity runs from 0 (the same spread over the areas) to 1 "
            "(no area shared)."
        )
    ]
    if columns:
        rows = [
            (g, *(Num(fmt_fixed(_get(seg, k, g))) for k, _ in columns))
            for g in _ordered(page.groups, present)
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
            (g, *(Num(f(_get(gap, g, k))) for k, _, f in _GAP_COLUMNS))
            for g in _ordered(page.groups, gap)
        ]
        parts.append(
            table(
                ("Group", *(Num(label) for _, label, _ in _GAP_COLUMNS)),
                rows,
                table_id="gap-table",
                caption="Permutation test of the served-area "
                f"rate gap, {ref} rate minus the group's, in percentage points",
            )
        )
    return _section("segregation", "Segregation", *parts)


# --- clustering ------------------------------------------------------------------------

_MORAN_COLUMNS: tuple[tuple[str, str, Callable[[Any], str]], ...] = (
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


def _clustering_section(page: _Page) -> Html:
    cl = page.summary["clustering"]
    parts: list[Any] = []
    weights = _mapping(cl.get("weights")) or _mapping(page.summary.get("weights"))
    if weights:
        parts.append(kv_table(weights, caption="Spatial weights", labels=_WEIGHT_LABELS))
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
            moran_i=_number(_get(cl, "moran", "I")),
            variable="covered_fraction",
            salt="report-moran",
        )
        parts.append(
            _figure(
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
    return _section("clustering", "Spatial clustering", *parts)


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
        parts.append(_p("Clusters at " + "; ".join(settings) + "."))
    counts = _mapping(local.get("counts"))
    raw = _mapping(local.get("crosstab"))
    # Two shapes are read: {label: {side: {...}}}, and the clustering stage's
    # {"rows": {label: {side: {...}}}, "areas_without_label": n, ...}.
    cross = _mapping(raw.get("rows")) if "rows" in raw else raw
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
                Num(fmt_count(_get(cross, k, side, what)))
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
    if _number(raw.get("areas_without_label")):
        parts.append(
            _p(
                f"{fmt_count(raw['areas_without_label'])} areas (population "
                f"{fmt_count(raw.get('population_without_label'))}) took no part in the local "
                "statistics and have no cluster label."
            )
        )
    return join(parts)


# --- enclaves --------------------------------------------------------------------------


def _enclave_order(enclave: Mapping[str, Any]) -> tuple[float, int, str]:
    """Sort key: most populous first, then most areas, then id (a total order)."""
    return (
        -(_number(enclave.get("population")) or 0.0),
        -len(enclave.get("area_ids") or ()),
        str(enclave.get("id")),
    )


def _enclaves_section(page: _Page) -> Html:
    enclaves = [e for e in page.summary["enclaves"] if isinstance(e, Mapping)]
    settings = _mapping(page.summary.get("enclave_settings"))
    contrast = _contrast_group(page)
    parts: list[Any] = []
    if not enclaves:
        parts.append(_p("No enclave of unserved areas enclosed by served areas was found."))
    else:
        parts.append(
            _p(
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
                Num(fmt_percent(_first(e, "contrast_share", "minority_share"))),
                Num(fmt_percent(_first(e, "mc_mean_contrast_share", "mc_mean_minority_share"))),
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
                page.summary["weights"], caption="Contiguity between areas", labels=_WEIGHT_LABELS
            )
        )
    if settings:
        parts.append(
            _settings_table(settings, caption="Enclave settings", labels=_ENCLAVE_SETTING_LABELS)
        )
    holes = [h for h in page.summary.get("holes") or [] if isinstance(h, Mapping)]
    if holes:
        parts.append(_holes_part(holes, page))
    return _section("enclaves", "Enclaves", *parts)


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


def _first(mapping: Mapping[str, Any], *keys: str) -> Any:
    """Return the value of the first key present (``None`` if none is)."""
    return next((mapping[k] for k in keys if k in mapping), None)


def _contrast_group(page: _Page) -> str:
    group = _get(page.summary, "enclave_settings", "contrast_group")
    return str(group) if group else "minority"


def _tiers_text(tiers: Any) -> str:
    if not isinstance(tiers, Mapping) or not tiers:
        return NA
    order = [*INCOME_TIERS, *(t for t in tiers if t not in INCOME_TIERS)]
    return ", ".join(f"{t} {fmt_count(tiers[t])}" for t in order if t in tiers)


def _settings_table(mapping: Mapping[str, Any], *, caption: str, labels: Mapping[str, str]) -> Html:
    """Render settings as written (lists shortened to their first ten entries)."""
    rows = [
        (
            labels.get(k, k.replace("_", " ")),
            Num(fmt_auto(k, v) if isinstance(v, (list, tuple)) else fmt_param(v)),
        )
        for k, v in mapping.items()
    ]
    return table(("Setting", Num("Value")), rows, caption=caption)


def _share_groups(records: Sequence[Mapping[str, Any]], page: _Page, *keys: str) -> list[str]:
    present: list[str] = []
    for r in records:
        for key in keys:
            if isinstance(r.get(key), Mapping):
                present.extend(g for g in r[key] if g not in present)
    return _ordered(page.groups, present)


def _enclave_shares_part(enclaves: Sequence[Mapping[str, Any]], page: _Page) -> Html:
    order = _share_groups(enclaves, page, "group_shares", "ring_group_shares")
    if not order:
        return Html("")
    rows = []
    for e in enclaves:
        for g in order:
            diff = _get(e, "share_difference", g)
            if diff is None:
                a, b = _number(_get(e, "group_shares", g)), _number(_get(e, "ring_group_shares", g))
                diff = None if a is None or b is None else a - b
            rows.append(
                (
                    f"{e.get('id') or NA}: {g}",
                    Num(fmt_percent(_get(e, "group_shares", g))),
                    Num(fmt_percent(_get(e, "ring_group_shares", g))),
                    Num(fmt_points(diff)),
                    Num(fmt_fixed(_get(e, "share_ratio", g))),
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


def _plural(count: int, noun: str) -> str:
    return f"{count:,} {noun}" + ("" if count == 1 else "s")


def _positions(index: pd.Index, ids: Any) -> np.ndarray:
    if not ids:
        return np.array([], dtype=np.int64)
    found = index.get_indexer([str(i) for i in ids])
    return np.sort(found[found >= 0])


def _enclave_figures(enclaves: Sequence[Mapping[str, Any]], page: _Page) -> Html:
    index = pd.Index(page.areas[page.id_column].astype(str).to_numpy())
    figures: list[Html] = []
    for e in sorted(enclaves, key=_enclave_order)[:MAX_ENCLAVE_FIGURES]:
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
            _figure(
                svg,
                f"Enclave {label}: {_plural(members.size, 'area')}, "
                f"{fmt_count(e.get('population'))} residents. Left: its place in "
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


def _holes_part(holes: Sequence[Mapping[str, Any]], page: _Page) -> Html:
    order = _share_groups(holes, page, "group_shares")
    rows = [
        (
            h.get("id") or NA,
            Num(fmt_count(len(h.get("area_ids") or ()))),
            Num(fmt_count(h.get("population"))),
            Num(
                fmt_fixed(
                    None
                    if _number(h.get("hole_area_m2")) is None
                    else float(h["hole_area_m2"]) / 1e6,
                    2,
                )
            ),
            *(Num(fmt_percent(_get(h, "group_shares", g))) for g in order),
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
        + _p(
            "Gaps inside the footprint that overlap populated areas; population is areal-weighted."
        )
        + table(headers, rows, caption="Holes in the footprint", table_id="hole-table")
    )


# --- methods and cautions --------------------------------------------------------------

_METHODS: dict[str, tuple[tuple[str, str], ...]] = {
    "coverage": (
        (
            "Coverage rates",
            "For group g with x<sub>gi</sub> people in area i, and c<sub>i</sub> the covered "
            "fraction of area i (its area inside the footprint over its whole area):"
            '<span class="formula">r<sub>g</sub> = &Sigma;<sub>i</sub> c<sub>i</sub> '
            "x<sub>gi</sub> / &Sigma;<sub>i</sub> x<sub>gi</sub></span>The served-area rate "
            "puts 1 for a served area and 0 otherwise in place of c<sub>i</sub>; an area is "
            "served when its covered fraction is at least {threshold}. Ratios divide by the "
            "rate of {comparison}; differences subtract it and are shown in percentage points.",
        ),
        (
            "Four-fifths screen (29 CFR 1607.4(D))",
            "A group is flagged when its ratio is strictly less than 0.8. {four_fifths}",
        ),
    ),
    "area_classes": (
        (
            "Classes of area (12 CFR 228.12(m))",
            "Majority-minority areas: minority share (population less non-Hispanic White "
            "alone) {majority_rule}. Income tiers follow "
            "the CRA rule, 12 CFR 228.12(m): the area's median family income as a percent of "
            "the area median is low below 50, moderate from 50 to below 80, middle from 80 to "
            "below 120 and upper from 120; an area with no income figure is unknown, not low. "
            "Areas served: share of the class's areas that are served.",
        ),
    ),
    "distance": (
        (
            "Distance",
            "Geodesic distance from a representative point inside each area to the nearest "
            "service point; each group's mean and (lower, weighted) median weight areas by "
            "the group's count.",
        ),
    ),
    "segregation": (
        (
            "Dissimilarity index (Duncan and Duncan 1955)",
            '<span class="formula">D = &frac12; &Sigma;<sub>i</sub> | x<sub>i</sub>/X '
            "&minus; y<sub>i</sub>/Y |</span>with x<sub>i</sub>, y<sub>i</sub> the counts of "
            "two groups in area i and X, Y their totals (Duncan, O. D. and Duncan, B. 1955, "
            "American Sociological Review 20(2), 210&ndash;217). D vs reference pairs a group "
            "with the reference group; D vs rest with everyone else. Coverage dissimilarity "
            "applies D to two bins, the served and the unserved areas, and so equals the gap "
            "in served-area rates; areal coverage dissimilarity does the same with the "
            "covered and uncovered parts of each area.",
        ),
        (
            "Isolation, exposure and correlation ratio (Massey and Denton 1988)",
            '<span class="formula"><sub>x</sub>P*<sub>x</sub> = &Sigma;<sub>i</sub> '
            "(x<sub>i</sub>/X)(x<sub>i</sub>/t<sub>i</sub>), &nbsp; <sub>x</sub>P*<sub>y</sub>"
            " = &Sigma;<sub>i</sub> (x<sub>i</sub>/X)(y<sub>i</sub>/t<sub>i</sub>), &nbsp; "
            "&eta;&sup2; = (<sub>x</sub>P*<sub>x</sub> &minus; P) / (1 &minus; P)</span>with "
            "t<sub>i</sub> the population of area i and P = X/T the group's overall share "
            "(Massey, D. S. and Denton, N. A. 1988, Social Forces 67(2), 281&ndash;315).",
        ),
    ),
    "gap_test": (
        (
            "Permutation test of the coverage gap",
            "The gap is the reference group's served-area rate minus the group's. The served "
            "status is dealt at random to the same number of areas, {permutations} times; "
            "two-sided p = (1 + number of |simulated gap| &ge; |gap|) / (permutations + 1), "
            "one-sided p counts simulated gaps &ge; gap (Hope, A. C. A. 1968, Journal of the "
            "Royal Statistical Society B 30(3), 582&ndash;598).",
        ),
    ),
    "clustering": (
        (
            "Moran's I (Moran 1950; Cliff and Ord 1981)",
            '<span class="formula">I = (n / S<sub>0</sub>) &Sigma;<sub>i</sub>&Sigma;<sub>j'
            "</sub> w<sub>ij</sub> z<sub>i</sub> z<sub>j</sub> / &Sigma;<sub>i</sub> z<sub>i"
            "</sub>&sup2;, &nbsp; E[I] = &minus;1/(n &minus; 1)</span>with z the deviations "
            "from the mean, w<sub>ij</sub> the row-standardised contiguity weights and "
            "S<sub>0</sub> their sum (Moran, P. A. P. 1950, Biometrika 37, 17&ndash;23). "
            "Variance and z under randomisation follow Cliff, A. D. and Ord, J. K. 1981, "
            "Spatial Processes: Models and Applications. p_sim is a pseudo p-value from "
            "random permutations of the values over the areas, (1 + number at least as "
            "extreme) / (permutations + 1).",
        ),
        (
            "Join counts and bivariate Moran's I",
            "Join counts tally neighbour pairs both served, both unserved or mixed, under "
            "binary weights (Cliff and Ord 1981); more unserved&ndash;unserved joins than "
            "expected means unserved areas cluster. The bivariate Moran's I relates one "
            "variable in an area to another in its neighbours (Wartenberg, D. 1985, "
            "Geographical Analysis 17(4), 263&ndash;283).",
        ),
        (
            "Local Moran's I, LISA (Anselin 1995)",
            '<span class="formula">I<sub>i</sub> = z<sub>i</sub> &Sigma;<sub>j</sub> '
            "w<sub>ij</sub> z<sub>j</sub> / m<sub>2</sub>, &nbsp; m<sub>2</sub> = "
            "&Sigma;<sub>i</sub> z<sub>i</sub>&sup2; / n</span>Each area's significance comes "
            "from conditional permutations, the area's value held fixed and its neighbours "
            "drawn from the rest (Anselin, L. 1995, Geographical Analysis 27(2), "
            "93&ndash;115). A significant area is high-high, low-low, high-low or low-high by "
            "its quadrant of the Moran scatterplot. With false discovery rate control the "
            "p-values pass the step-up procedure of Benjamini, Y. and Hochberg, Y. 1995, "
            "Journal of the Royal Statistical Society B 57(1), 289&ndash;300.",
        ),
    ),
    "enclaves": (
        (
            "Enclaves and their Monte Carlo test",
            "Unserved areas are grouped into connected components under the contiguity "
            "rule; a component is an enclave when the share of its outer boundary, in metres, "
            "shared with served areas reaches {min_surround} (the study area's edge "
            "counts as not served). For an enclave of k areas, random connected sets of k "
            "areas are grown, each from a seed area drawn at random, adding at every step an "
            "area drawn at random among the set's neighbours; {draws} such sets are drawn. "
            "p = (1 + number of sets whose {contrast} share is at least the enclave's) / "
            "(draws + 1) (a Monte Carlo test in the sense of Hope 1968).",
        ),
    ),
}


def _spec_percent(page: _Page, *keys: str) -> str | None:
    value = _number(_get(page.manifest, "spec", *keys))
    return None if value is None else fmt_percent(value)


def _majority_rule(page: _Page) -> str:
    share = _spec_percent(page, "population", "majority_minority_share")
    if share is None:
        return "above the cut set in the parameters (one half unless changed)"
    rule = _get(page.manifest, "spec", "population", "majority_minority_rule")
    return f"{'at or above' if rule == 'at_or_above' else 'above'} {share}"


def _methods_section(page: _Page, present: set[str]) -> Html:
    s = page.summary
    cov = s.get("coverage") or {}
    topics = set(present)
    if isinstance(cov.get("area_classes"), Mapping):
        topics.add("area_classes")
    if _get(cov, "distance", "groups"):
        topics.add("distance")
    if _get(s, "segregation", "coverage_gap_test"):
        topics.add("gap_test")
    draws = sorted(
        {
            round(d)
            for e in s.get("enclaves") or []
            if isinstance(e, Mapping)
            for d in [_number(e.get("mc_draws"))]
            if d is not None
        }
    )
    values = {
        "threshold": fmt_percent(cov.get("served_threshold")),
        "comparison": page.comparison_label,
        "four_fifths": FOUR_FIFTHS_NOTE,
        "permutations": fmt_count(_get(s, "segregation", "permutations")),
        "draws": ", ".join(f"{d:,}" for d in draws) or NA,
        "majority_rule": _majority_rule(page),
        "min_surround": (
            fmt_percent(_get(s, "enclave_settings", "min_surround"))
            if _number(_get(s, "enclave_settings", "min_surround")) is not None
            else _spec_percent(page, "analysis", "enclave_min_surround")
            or "the enclave threshold set in the parameters"
        ),
        "contrast": _contrast_group(page),
    }
    items = [
        tag("dt", title) + tag("dd", fill(text, **values))
        for topic, entries in _METHODS.items()
        if topic in topics
        for title, text in entries
    ]
    settings = _randomness_text(page, present)
    if settings:
        items.append(tag("dt", "Random draws and seed") + tag("dd", settings))
    if not items:
        return Html("")
    return _section("methods", "Methods", tag("dl", *items, class_="methods"))


def _randomness_text(page: _Page, present: set[str]) -> str:
    s = page.summary
    parts = []
    if "segregation" in present and _get(s, "segregation", "permutations") is not None:
        parts.append(f"gap tests {fmt_count(s['segregation']['permutations'])} permutations")
    if "clustering" in present:
        for key, name in (("moran", "Moran's I"), ("local_moran", "local Moran's I")):
            if _get(s, "clustering", key, "permutations") is not None:
                parts.append(
                    f"{name} {fmt_count(s['clustering'][key]['permutations'])} permutations"
                )
    if "enclaves" in present:
        draws = sorted(
            {
                round(d)
                for e in s["enclaves"]
                if isinstance(e, Mapping)
                for d in [_number(e.get("mc_draws"))]
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


def _cautions_section(page: _Page) -> Html:
    recorded = [str(c) for c in page.summary.get("cautions") or [] if c is not None]
    said = " ".join(recorded).lower()
    items = [
        tag("li", tag("strong", short), " ", long)
        for short, long, keyword in STANDARD_CAUTIONS
        if keyword not in said
    ]
    if "1607.4" not in said:
        items.append(
            tag("li", tag("strong", "The four-fifths rule is a screen."), " ", FOUR_FIFTHS_NOTE)
        )
    items.extend(tag("li", c) for c in recorded)
    return _section("cautions", "Cautions", tag("ul", *items, id="caution-list"))


# --- the page --------------------------------------------------------------------------


def _stylesheet() -> str:
    return resources.files("coverage_audit.report").joinpath("report.css").read_text("utf-8")


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
    """Return the report page as a string; the parameters are those of :func:`build_report`."""
    _check_inputs(summary, manifest, areas, exclusions, id_column, groups, reference)
    moran = moran_points(
        areas, moran_lag=moran_lag, moran_weights=moran_weights, moran_mask=moran_mask
    )
    page = _Page(
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
    sections = [
        (anchor, title, render)
        for anchor, title, render in (
            ("audited", "What was audited", _audited_section),
            ("coverage", "Coverage by group", _coverage_section),
            ("segregation", "Segregation", _segregation_section),
            ("clustering", "Spatial clustering", _clustering_section),
            ("enclaves", "Enclaves", _enclaves_section),
        )
        if anchor == "audited" or anchor in present
    ]
    methods = _methods_section(page, present)
    toc = [(a, t) for a, t, _ in sections] + ([("methods", "Methods")] if methods else [])
    body = [
        _header(page),
        _cautions_box(page),
        _key_figures(page),
        _toc([*toc, ("cautions", "Cautions")]),
    ]
    body.extend(render(page) for _, _, render in sections)
    body.extend([methods, _cautions_section(page)])
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
        The findings as written to summary.json (schema_version 1). Any section may be
        absent; the page shows what is present, and ``None`` values as "n/a".
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
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        temporary.write_text(text, encoding="utf-8")
        os.replace(temporary, target)
    finally:
        temporary.unlink(missing_ok=True)
