"""SVG output of the report's figures: a matplotlib figure as inline, deterministic SVG.

The primitives every report figure shares (:mod:`coverage_audit.report.charts` and the
sections that draw their own): a new figure, a compound path of polygons, text drawn
literally, and the SVG string with salted ids and rounded path data.
"""

from __future__ import annotations

import io
import re
from collections.abc import Sequence
from html import escape

import matplotlib
import numpy as np
import shapely
from matplotlib.figure import Figure
from matplotlib.path import Path

#: Resolution of the layers rasterised inside an SVG.
RASTER_DPI = 150
#: Decimals kept in SVG path coordinates (points of 1/72 inch): a tenth of a point is
#: below what print or screen can show, and it halves the size of map figures.
PATH_DECIMALS = 1


def mpl_text(value: object) -> str:
    """Return ``value`` as text matplotlib draws literally (``$`` would start mathtext)."""
    return str(value).replace("$", r"\$")


def figure_to_svg(fig: Figure, *, salt: str, title: str) -> str:
    """Render ``fig`` to an SVG element string for inline use in HTML.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure to render.
    salt : str
        Salt of the SVG element ids; distinct per figure so that several inline SVGs in
        one page never share an id, and fixed so that output is reproducible.
    title : str
        Accessible name of the figure (placed in ``aria-label``; escaped here).

    Returns
    -------
    str
        An ``<svg>`` element without XML declaration or doctype.
    """
    buffer = io.BytesIO()
    with matplotlib.rc_context(
        {"svg.hashsalt": salt, "svg.fonttype": "none", "svg.image_inline": True}
    ):
        fig.savefig(buffer, format="svg", metadata={"Date": None}, dpi=RASTER_DPI)
    svg = buffer.getvalue().decode("utf-8")
    svg = svg[svg.index("<svg") :]
    # The metadata block only names matplotlib (with a URL); the page does not need it.
    svg = re.sub(r"<metadata>.*?</metadata>\s*", "", svg, flags=re.S)
    # Element ids (figure_1, axes_1, ...) repeat from figure to figure; prefixed, they stay
    # unique within the page, as HTML requires, and references follow them.
    prefix = re.sub(r"[^A-Za-z0-9_-]", "-", salt)
    svg = re.sub(r'\bid="([^"]+)"', rf'id="{prefix}-\1"', svg)
    svg = re.sub(r"url\(#([^)]+)\)", rf"url(#{prefix}-\1)", svg)
    svg = re.sub(r'href="#([^"]+)"', rf'href="#{prefix}-\1"', svg)
    svg = re.sub(r' d="([^"]*)"', _round_path_data, svg)
    label = escape(title, quote=True)
    return svg.replace("<svg ", f'<svg role="img" aria-label="{label}" ', 1)


#: Digits past PATH_DECIMALS after a decimal point (matplotlib writes every number with a
#: digit before the point); dropped in one pass, with no template to expand per number.
_EXTRA_DIGITS = re.compile(rf"(?<=\d\.\d{{{PATH_DECIMALS}}})\d+")


def _round_path_data(match: re.Match[str]) -> str:
    return f' d="{_EXTRA_DIGITS.sub("", match.group(1))}"'


def new_figure(width_in: float, height_in: float) -> Figure:
    """Return a new figure of that size (inches) with constrained layout, off pyplot."""
    fig = Figure(figsize=(width_in, height_in), dpi=100, layout="constrained")
    return fig


def polygon_path(geometries: np.ndarray | Sequence[object]) -> Path | None:
    """Return one compound matplotlib path of all polygons in ``geometries``.

    Multi-part geometries are split and non-polygonal parts dropped. Rings are oriented
    (exteriors counter-clockwise, holes clockwise) so that holes stay empty under either
    fill rule. Built from flat coordinate arrays, without a Python loop over geometries.

    Parameters
    ----------
    geometries : array of shapely geometries
        Polygons or multipolygons.

    Returns
    -------
    matplotlib.path.Path or None
        ``None`` when there is no polygon to draw.
    """
    geoms = np.asarray(geometries, dtype=object).ravel()
    if geoms.size == 0:
        return None
    geoms = geoms[~(shapely.is_missing(geoms) | shapely.is_empty(geoms))]
    parts = shapely.get_parts(geoms)
    polys = parts[shapely.get_type_id(parts) == shapely.GeometryType.POLYGON]
    if polys.size == 0:
        return None
    polys = shapely.orient_polygons(polys, exterior_cw=False)
    rings = shapely.get_rings(polys)
    coords, ring_index = shapely.get_coordinates(rings, return_index=True)
    if coords.shape[0] == 0:
        return None
    codes = np.full(coords.shape[0], Path.LINETO, dtype=Path.code_type)
    starts = np.concatenate([[0], np.flatnonzero(np.diff(ring_index)) + 1])
    ends = np.concatenate([starts[1:] - 1, [coords.shape[0] - 1]])
    codes[starts] = Path.MOVETO
    codes[ends] = Path.CLOSEPOLY
    return Path(coords, codes)
