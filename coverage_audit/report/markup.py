"""Markup, number formats and tables of the report page.

Takes plain values (numbers, text, mappings read from summary.json) and gives escaped
HTML fragments: :class:`Html` marks markup that is already safe, :func:`tag` builds
elements escaping every piece of content and every attribute, the ``fmt_*`` functions
give the page's one way of writing percentages, percentage points, ratios, p-values and
counts (``None`` and non-finite values as "n/a"), and :func:`table` renders the
report's tables with right-aligned numeric cells; the last part holds the pieces the
further sections share (odds ratios, intervals, flagged cells, skipped stages). Every
section module builds its markup from these pieces only, so nothing from the inputs
reaches the page unescaped.
"""

from __future__ import annotations

import html
import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any, Protocol

import numpy as np
import pandas as pd

from .formats import FormatKind, field_format

NA = "n/a"


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


def para(*content: Any, **attrs: Any) -> Html:
    """Return a paragraph of escaped content."""
    return tag("p", *content, **attrs)


def section(section_id: str, title: str, *content: Any) -> Html:
    """Return a major section (its own page in print) with its heading."""
    return tag("section", tag("h2", title), *content, id=section_id, class_="major")


def figure(svg: str, caption: str) -> Html:
    """Return a figure of inline SVG markup (drawn by :mod:`.charts`) with its caption."""
    return tag("figure", Html(svg), tag("figcaption", caption))


# --- numbers ---------------------------------------------------------------------------


def as_number(value: Any) -> float | None:
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
    f = as_number(value)
    return NA if f is None else _minus(f"{100.0 * f:.{digits}f}") + "%"


def fmt_points(value: Any, digits: int = 1) -> str:
    """Format a difference of fractions in percentage points: ``-0.123 -> "−12.3 pp"``."""
    f = as_number(value)
    if f is None:
        return NA
    text = _minus(f"{100.0 * f:.{digits}f}")
    return ("+" if f > 0 and float(text) != 0 else "") + text + " pp"


def fmt_fixed(value: Any, digits: int = 3) -> str:
    """Format a statistic with a fixed number of decimals (ratios, indices, I, z)."""
    f = as_number(value)
    return NA if f is None else _minus(f"{f:.{digits}f}")


def fmt_p(value: Any) -> str:
    """Format a p-value: three decimals, and ``< 0.001`` below that (usual reporting)."""
    f = as_number(value)
    if f is None:
        return NA
    return "< 0.001" if f < 0.001 else f"{f:.3f}"


def fmt_count(value: Any) -> str:
    """Format a count or a population with thousands separators (whole people)."""
    f = as_number(value)
    return NA if f is None else f"{round(f):,}"


def fmt_distance(value: Any, unit: str) -> str:
    """Format a distance, rounded to whole units."""
    f = as_number(value)
    return NA if f is None else f"{round(f):,} {unit}"


def fmt_bool(value: Any) -> str:
    """Format a flag as yes/no."""
    return NA if value is None else ("yes" if bool(value) else "no")


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
    """Format a value of a generic key/value table by its type and, for floats, its field.

    A float prints as the kind of number its field holds (:mod:`.formats`).
    """
    if value is None:
        return NA
    if isinstance(value, (bool, np.bool_)):
        return fmt_bool(value)
    if isinstance(value, (int, np.integer)):
        return fmt_count(value)
    if isinstance(value, (float, np.floating)):
        return fmt_kind(field_format(key), value)
    if isinstance(value, Mapping):
        return "; ".join(f"{k}: {fmt_auto(str(k), v)}" for k, v in value.items()) or NA
    if isinstance(value, (list, tuple)):
        if not value:
            return "none"
        shown = ", ".join(fmt_auto(key, v) for v in value[:10])
        return shown + (f" … ({len(value):,} in all)" if len(value) > 10 else "")
    return str(value)


def fmt_kind(kind: FormatKind, value: Any) -> str:
    """Format a number as the kind of number it is (:data:`.formats.FormatKind`)."""
    if kind == "p_value":
        return fmt_p(value)
    if kind == "z":
        return fmt_fixed(value, 2)
    f = as_number(value)
    if kind in ("count", "measure") and f is not None and f.is_integer():
        return fmt_count(f)  # a count carried as a float (joins, areas)
    return fmt_fixed(value, 4)


def cell_text(value: Any) -> str:
    """Return a table cell's text, "n/a" for missing values of any kind."""
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return NA
    return str(value)


# --- tables ----------------------------------------------------------------------------


class Num(str):
    """Text of a right-aligned numeric cell."""

    __slots__ = ()


class NumHtml(Html):
    """Markup of a right-aligned numeric cell (a number with a flag's emphasis)."""

    __slots__ = ()


def _cell(content: Any, *, header: bool) -> Html:
    numeric = isinstance(content, (Num, NumHtml))
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


def as_mapping(value: Any) -> Mapping[str, Any]:
    """Return ``value`` if it is a mapping, else an empty one (absent or malformed data)."""
    return value if isinstance(value, Mapping) else {}


def get_in(mapping: Any, *keys: str) -> Any:
    """Walk nested mappings; ``None`` once a key is missing or a value is not a mapping."""
    for key in keys:
        if not isinstance(mapping, Mapping):
            return None
        mapping = mapping.get(key)
    return mapping


def ordered(groups: Sequence[str], present: Iterable[str]) -> list[str]:
    """Return the groups in the order given, then any other group the data have."""
    present = list(present)
    return [g for g in groups if g in present] + [g for g in present if g not in groups]


def first_of(mapping: Mapping[str, Any], *keys: str) -> Any:
    """Return the value of the first key present (``None`` if none is)."""
    return next((mapping[k] for k in keys if k in mapping), None)


def plural(count: int, noun: str) -> str:
    """Return ``"1 area"``, ``"2 areas"``: the count with thousands separators and noun."""
    return f"{count:,} {noun}" + ("" if count == 1 else "s")


# --- the further sections' shared pieces --------------------------------------------------

#: Ratio of the four-fifths screen (29 CFR 1607.4(D)): a ratio strictly below it is flagged.
FOUR_FIFTHS = 0.8
#: Caption note of the tables that mark flagged cells with an asterisk.
STAR_NOTE = "* below four-fifths"
#: Most decimals an odds ratio is given (see :func:`fmt_odds`).
MAX_ODDS_DECIMALS = 6


def skipped_reason(value: Any) -> str | None:
    """Return the reason a stage recorded for not computing a section, if it did."""
    if isinstance(value, Mapping) and "skipped" in value:
        return str(value.get("skipped") or "no reason recorded")
    return None


def not_computed(reason: str) -> Html:
    """Return the note of a section a stage did not compute, with its reason."""
    return para(f"Not computed: {reason}.", class_="note")


def fmt_pp_value(value: Any) -> str:
    """Format a value already in percentage points (``-6.04 -> "−6.0 pp"``)."""
    f = as_number(value)
    return fmt_points(None if f is None else f / 100.0)


def fmt_interval(low: Any, high: Any, formatter: Callable[[Any], str]) -> str:
    """Format an interval as "low to high"; "n/a" when either end is missing.

    A unit the formatter appends ("−20.6 pp") is written once, after the upper end.
    """
    if as_number(low) is None or as_number(high) is None:
        return NA
    first, second = formatter(low), formatter(high)
    unit = second.rpartition(" ")[2] if " " in second else ""
    if unit and first.endswith(" " + unit):
        first = first[: -len(unit) - 1]
    return f"{first} to {second}"


def fmt_odds(value: Any, low: Any = None, high: Any = None) -> tuple[str, str]:
    """Format an odds ratio and its interval with enough decimals to tell the ends apart.

    Three decimals, as the report's ratios; more (up to :data:`MAX_ODDS_DECIMALS`) when
    the interval's ends would otherwise print alike, as they do for a control measured
    in small units (an odds ratio per person per km² of 1.0000066 is not "1.000").

    Returns
    -------
    tuple of str
        The odds ratio and the interval ("n/a" where missing).
    """
    digits = 3
    lo, hi = as_number(low), as_number(high)
    if lo is not None and hi is not None:
        while digits < MAX_ODDS_DECIMALS and fmt_fixed(lo, digits) == fmt_fixed(hi, digits):
            digits += 1
    return fmt_fixed(value, digits), fmt_interval(low, high, lambda v: fmt_fixed(v, digits))


def flagged_number(text: str, flagged: bool) -> Num | NumHtml:
    """Return a numeric cell, marked with an asterisk and the flag's tone when flagged.

    The asterisk carries the flag in print and for readers who do not see the colour.
    """
    return NumHtml(tag("span", text + "*", class_="flag")) if flagged else Num(text)


def records(value: Any) -> list[Mapping[str, Any]]:
    """Return the mappings of a list (absent or malformed entries dropped)."""
    return [r for r in value if isinstance(r, Mapping)] if isinstance(value, list) else []


def series(items: Sequence[str]) -> str:
    """Return items as an English list: "a", "a and b", "a, b and c"."""
    items = list(items)
    if len(items) <= 2:
        return " and ".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def are(items: Sequence[str]) -> str:
    """Return the verb that agrees with the count of ``items``."""
    return "is" if len(items) == 1 else "are"


class Findings(Protocol):
    """The typed findings of an audit (:class:`coverage_audit.results.AuditFindings`)."""

    def to_dict(self) -> dict[str, Any]:
        """Return summary.json's content."""
        ...


def summary_data(summary: Mapping[str, Any] | Findings) -> Mapping[str, Any]:
    """Return the findings as summary.json holds them.

    The pages take either the typed findings tree of an audit (its ``to_dict()`` is used)
    or the mapping read from a written summary.json; anything else is passed on for the
    caller's checks to name.
    """
    if isinstance(summary, Mapping):
        return summary
    to_dict = getattr(summary, "to_dict", None)
    return to_dict() if callable(to_dict) else summary  # type: ignore[return-value]
