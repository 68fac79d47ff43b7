"""Figures of the audit report, drawn with matplotlib and returned as inline SVG markup.

Takes plain numbers (rates, standardised values and their spatial lags) and shapely
geometries in the projected analysis CRS, and gives SVG strings ready to be placed inline
in report.html: a coverage bar chart, a Moran scatterplot, an overview map of the region,
a locator figure for each enclave and the sensitivity chart of ratios across a sweep. Figures are built on
:class:`matplotlib.figure.Figure` directly, never through pyplot, so no backend or global
figure state is touched; rc settings are applied only inside ``rc_context`` while a figure
is saved. Output is deterministic: the SVG ids are salted with a per-figure string and the
date metadata is left out, so the same inputs give the same bytes.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import shapely
from matplotlib.collections import PatchCollection
from matplotlib.figure import Figure
from matplotlib.patches import PathPatch, Rectangle
from matplotlib.path import Path

from .svg_figure import PATH_DECIMALS as PATH_DECIMALS
from .svg_figure import RASTER_DPI as RASTER_DPI
from .svg_figure import figure_to_svg as figure_to_svg
from .svg_figure import mpl_text as mpl_text
from .svg_figure import new_figure
from .svg_figure import polygon_path as polygon_path

#: Colours of the report figures (our own palette: greys for context, one blue for
#: coverage, one warm tone for what needs a closer look).
REGION_GREY = "#d9d9d6"
SERVED_TONE = "#7f9cb8"
BAR_TONE = "#4f7396"
FLAG_TONE = "#c0612b"
ENCLAVE_TONE = "#d1495b"
RING_EDGE = "#1f2a44"
TEXT_TONE = "#222222"
FLAG_BAND = "#fbeee6"
#: Series of the sweep chart: colour, marker and dash pattern all change from one group to
#: the next, so the lines can be told apart in grey print and by readers who do not see
#: the colours.
SERIES_STYLES: tuple[tuple[str, str, str], ...] = (
    ("#4f7396", "o", "-"),
    ("#8a5a9e", "s", "--"),
    ("#5b8c5a", "^", "-."),
    ("#a3742c", "D", ":"),
    ("#2e7f8c", "v", "-"),
    ("#7a4b3a", "P", "--"),
    ("#555555", "X", "-."),
    ("#9c4f74", "*", ":"),
)
#: Ratio of the four-fifths screen (29 CFR 1607.4(D)).
FOUR_FIFTHS = 0.8

#: Beyond this many points the Moran scatter markers are rasterised inside the SVG, which
#: keeps the report small for regions of thousands of areas.
RASTERISE_SCATTER_ABOVE = 1500
#: Beyond this many vertices a filled map layer is rasterised inside the SVG (at
#: :data:`RASTER_DPI`), so that a region of tens of thousands of tracts does not make
#: every map figure megabytes long; outlines stay vector.
RASTERISE_VERTICES_ABOVE = 20_000
#: Above this many areas the overview panels are drawn from a raster of the areas made
#: once (no union of the region's geometry, no patch per area).
RASTER_OVERVIEW_ABOVE = 5_000
#: Width in pixels of that raster.
RASTER_OVERVIEW_PIXELS = 1_000
#: A close-up whose side is at least this share of the region's is drawn from the overview
#: raster (it then has at least as many pixels across the close-up as the figure shows).
CLOSE_UP_FROM_OVERVIEW = 0.35


def coverage_bar_chart(
    labels: Sequence[str],
    rates: Sequence[float | None],
    *,
    comparison_rate: float | None,
    comparison_label: str,
    flagged: Sequence[bool],
    salt: str = "coverage-bars",
) -> str:
    """Draw coverage rates by group as horizontal bars, with the comparison rate marked.

    Parameters
    ----------
    labels : sequence of str
        Group names, drawn top to bottom in the order given.
    rates : sequence of float or None
        Coverage rates as fractions; ``None`` draws no bar and the label ``n/a``.
    comparison_rate : float or None
        Rate every group is compared with (the reference group's or the highest); drawn as
        a solid line, with four-fifths of it as a dotted line.
    comparison_label : str
        Legend text of the comparison line.
    flagged : sequence of bool
        Groups below four-fifths of the comparison rate; drawn hatched and in the warm
        tone, so the flag does not rest on colour alone.
    salt : str
        SVG id salt (see :func:`figure_to_svg`).

    Returns
    -------
    str
        Inline SVG markup.
    """
    n = len(labels)
    fig = new_figure(7.0, 0.9 + 0.42 * max(n, 1))
    ax = fig.add_subplot()
    y = np.arange(n)[::-1]
    values = np.array([np.nan if r is None else 100.0 * float(r) for r in rates], dtype=float)
    colours = [FLAG_TONE if f else BAR_TONE for f in flagged]
    hatches = ["///" if f else "" for f in flagged]
    bars = ax.barh(y, np.nan_to_num(values, nan=0.0), color=colours, height=0.62, zorder=2)
    for bar, hatch in zip(bars, hatches, strict=True):
        bar.set_hatch(hatch)
        bar.set_edgecolor("white")
    ref = (
        100.0 * comparison_rate
        if comparison_rate is not None and np.isfinite(comparison_rate)
        else np.nan
    )
    # The axis fits the data: the largest bar or comparison line, with room for the value
    # labels, on a round number of percent (never past 100% plus that room).
    top = float(np.nanmax(np.append(values, [ref, 1.0])))
    step = 5.0 if top <= 40 else 10.0
    xmax = min(np.ceil(top * 1.18 / step) * step, 118.0)
    for yi, value in zip(y, values, strict=True):
        text = "n/a" if np.isnan(value) else f"{value:.1f}%"
        # A white box under each value label: the comparison lines pass behind it, never
        # through the digits.
        ax.text(
            (0.0 if np.isnan(value) else value) + 0.01 * xmax,
            yi,
            text,
            va="center",
            fontsize=9,
            color=TEXT_TONE,
            zorder=4,
            bbox={"facecolor": "white", "edgecolor": "none", "pad": 1.0},
        )
    if np.isfinite(ref):
        # matplotlib leaves out legend entries whose label starts with "_" (a group name
        # may); a leading space keeps them.
        legend_label = mpl_text(comparison_label)
        legend_label = " " + legend_label if legend_label.startswith("_") else legend_label
        ax.axvline(ref, color=TEXT_TONE, linewidth=1.4, label=legend_label, zorder=3)
        ax.axvline(
            0.8 * ref, color=TEXT_TONE, linewidth=1.0, linestyle=":", label="four-fifths", zorder=3
        )
        ax.legend(
            loc="upper center",
            bbox_to_anchor=(0.5, -0.22 - 0.5 / max(n, 1)),
            ncol=2,
            fontsize=8,
            frameon=False,
        )
    ax.set_yticks(y, [mpl_text(label) for label in labels])
    ax.set_xlim(0, xmax)
    ax.set_xlabel("Coverage rate (% of group population)")
    ax.spines[["top", "right"]].set_visible(False)
    ax.tick_params(axis="y", length=0)
    return figure_to_svg(fig, salt=salt, title="Coverage rate by group")


def moran_scatter_chart(
    z: np.ndarray,
    lag: np.ndarray,
    *,
    moran_i: float | None,
    variable: str,
    salt: str = "moran-scatter",
) -> str:
    """Draw the Moran scatterplot: standardised values against their spatial lag.

    The slope of the least-squares line through the origin of ``lag`` on ``z`` equals
    Moran's I for row-standardised weights (Anselin 1996, "The Moran scatterplot as an ESDA
    tool", in Fischer, Scholten and Unwin, Spatial Analytical Perspectives on GIS); the
    line is drawn with the fitted slope, and the published I is quoted in the title.

    Parameters
    ----------
    z : numpy.ndarray
        Standardised variable (mean 0, population standard deviation 1).
    lag : numpy.ndarray
        Spatial lag ``W z`` under row-standardised weights.
    moran_i : float or None
        Moran's I from the summary, shown in the title.
    variable : str
        Name of the variable.
    salt : str
        SVG id salt (see :func:`figure_to_svg`).

    Returns
    -------
    str
        Inline SVG markup.
    """
    from .palette import MORAN_LINE_COLOR, MORAN_QUADRANT_COLORS

    fig = new_figure(5.2, 5.2)
    ax = fig.add_subplot()
    many = z.size > RASTERISE_SCATTER_ABOVE
    # Points take the tone of their quadrant (palette.py); the quadrants are named in a
    # legend under the plot, so no label sits on the points.
    quadrants = (
        ("high-high", (z >= 0) & (lag >= 0), "high value, high-valued neighbours"),
        ("low-low", (z < 0) & (lag < 0), "low value, low-valued neighbours"),
        ("high-low", (z >= 0) & (lag < 0), "high value, low-valued neighbours"),
        ("low-high", (z < 0) & (lag >= 0), "low value, high-valued neighbours"),
    )
    for name, mask, words in quadrants:
        ax.scatter(
            z[mask],
            lag[mask],
            s=9 if many else 16,
            color=MORAN_QUADRANT_COLORS[name],
            edgecolors="#555555" if name in ("high-low", "low-high") else "none",
            linewidths=0.3,
            alpha=0.85,
            rasterized=many,
            label=f"{name}: {words}",
        )
    ax.axhline(0, color="#9a9a9a", linewidth=0.7, linestyle=":")
    ax.axvline(0, color="#9a9a9a", linewidth=0.7, linestyle=":")
    denom = float(np.dot(z, z))
    slope = float(np.dot(z, lag) / denom) if denom > 0 else np.nan
    lim = float(max(np.max(np.abs(z), initial=1.0), np.max(np.abs(lag), initial=1.0)) * 1.08)
    if np.isfinite(slope):
        xs = np.array([-lim, lim])
        ax.plot(xs, slope * xs, color=MORAN_LINE_COLOR, linewidth=1.4, label=f"slope {slope:.3f}")
    ax.legend(
        loc="upper center",
        bbox_to_anchor=(0.5, -0.16),
        ncol=1,
        fontsize=7.5,
        frameon=False,
    )
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.set_xlabel(mpl_text(f"{variable} (z)"))
    ax.set_ylabel(mpl_text(f"spatial lag of {variable} (W z)"))
    heading = "Moran scatterplot"
    if moran_i is not None and np.isfinite(moran_i):
        heading += f" (I = {moran_i:.4f})"
    ax.set_title(heading, fontsize=10)
    return figure_to_svg(fig, salt=salt, title=heading)


@dataclass(frozen=True, eq=False)
class RegionLayers:
    """Geometry of the analysed region prepared once for all map figures.

    Attributes
    ----------
    geometries : numpy.ndarray
        Area geometries in the analysis CRS, in the order of the ``areas`` frame.
    served : numpy.ndarray
        Boolean mask of served areas.
    region : shapely.Geometry
        Union of all areas, simplified for drawing.
    served_union : shapely.Geometry
        Union of the served areas, simplified for drawing.
    region_small, served_small : shapely.Geometry
        The same, simplified further for the small overview panels of the locators.
    tree : shapely.STRtree
        Spatial index of ``geometries``.
    image : numpy.ndarray or None
        For large regions (over :data:`RASTER_OVERVIEW_ABOVE` areas), an RGBA raster of
        the areas (grey, served in the served tone) over ``bounds``, drawn once; the
        overview panels show it instead of the unions, which are then the region's box.
    bounds : tuple of float
        The region's bounds (xmin, ymin, xmax, ymax).
    """

    geometries: np.ndarray
    served: np.ndarray
    region: object
    served_union: object
    region_small: object
    served_small: object
    tree: shapely.STRtree
    image: np.ndarray | None = None
    bounds: tuple[float, float, float, float] = (0.0, 0.0, 1.0, 1.0)

    @classmethod
    def build(cls, geometries: np.ndarray, served: np.ndarray) -> RegionLayers:
        """Union and simplify the region and its served part.

        Simplification tolerance is 1/1500 of the region's larger side (1/400 for the
        locators' overview panels, about three inches wide): invisible at report size, but
        it keeps detailed boundaries (census line files) from bloating the SVG.
        """
        geoms = np.asarray(geometries, dtype=object)
        served = np.asarray(served, dtype=bool)
        xmin, ymin, xmax, ymax = shapely.total_bounds(geoms)
        bounds = (float(xmin), float(ymin), float(xmax), float(ymax))
        if geoms.size > RASTER_OVERVIEW_ABOVE:
            frame = shapely.box(*bounds)
            return cls(
                geometries=geoms,
                served=served,
                region=frame,
                served_union=frame,
                region_small=frame,
                served_small=frame,
                tree=shapely.STRtree(geoms),
                image=_raster_overview(geoms, served, bounds),
                bounds=bounds,
            )
        region = shapely.union_all(geoms)
        served_union = shapely.union_all(geoms[served])
        side = max(xmax - xmin, ymax - ymin, 1.0)
        fine, coarse = side / 1500.0, side / 400.0
        return cls(
            geometries=geoms,
            served=served,
            region=shapely.simplify(region, fine, preserve_topology=True),
            served_union=shapely.simplify(served_union, fine, preserve_topology=True),
            region_small=shapely.simplify(region, coarse, preserve_topology=True),
            served_small=shapely.simplify(served_union, coarse, preserve_topology=True),
            tree=shapely.STRtree(geoms),
            bounds=bounds,
        )

    def neighbours(self, members: np.ndarray) -> np.ndarray:
        """Return the positions of areas touching the union of ``members`` (not in it)."""
        union = shapely.union_all(self.geometries[members])
        hits = self.tree.query(union, predicate="intersects")
        mask = np.zeros(self.geometries.size, dtype=bool)
        mask[hits] = True
        mask[members] = False
        return np.flatnonzero(mask)


def _raster_overview(
    geoms: np.ndarray, served: np.ndarray, bounds: tuple[float, float, float, float]
) -> np.ndarray:
    """Draw the areas once into an RGBA array: grey, served ones in the served tone.

    Each polygon is simplified within half a pixel first; each is drawn with a thin edge
    of its own colour so that no crack shows between neighbours.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    xmin, ymin, xmax, ymax = bounds
    width, height = max(xmax - xmin, 1.0), max(ymax - ymin, 1.0)
    px = RASTER_OVERVIEW_PIXELS
    py = max(int(round(px * height / width)), 1)
    fig = Figure(figsize=(px / 100.0, py / 100.0), dpi=100)
    fig.patch.set_alpha(0.0)
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_axis_off()
    ax.patch.set_alpha(0.0)
    simple = shapely.simplify(geoms, width / px / 2.0, preserve_topology=False)
    for mask, tone in ((~served, REGION_GREY), (served, SERVED_TONE)):
        path = polygon_path(simple[mask])
        if path is not None:
            # add_artist, not add_patch: no data limits to walk through (set above).
            ax.add_artist(PathPatch(path, facecolor=tone, edgecolor=tone, linewidth=0.3))
    canvas.draw()
    return np.asarray(canvas.buffer_rgba()).copy()


def _for_display(geoms: np.ndarray, tolerance: float) -> np.ndarray:
    """Simplify polygons each on its own within ``tolerance`` (0: unchanged) for drawing."""
    if tolerance <= 0 or geoms.size == 0:
        return geoms
    simple = shapely.simplify(geoms, tolerance, preserve_topology=False)
    lost = shapely.is_empty(simple) | ~np.isin(shapely.get_type_id(simple), (3, 6))
    return np.where(lost, geoms, simple)


def _show_raster(ax, layers: RegionLayers) -> None:
    xmin, ymin, xmax, ymax = layers.bounds
    ax.imshow(
        layers.image,
        extent=(xmin, xmax, ymin, ymax),
        origin="upper",
        interpolation="nearest",
        rasterized=True,
    )


def _add_path(ax, path: Path | None, **style) -> None:
    if path is not None:
        filled = style.get("facecolor", "none") != "none"
        heavy = filled and np.shape(path.vertices)[0] > RASTERISE_VERTICES_ABOVE
        if heavy and style.get("edgecolor") == style["facecolor"]:
            # An edge in the fill's own tone only widens a rasterised layer by a hair, and
            # stroking a path of this many vertices costs more than filling it; without
            # antialiasing, neighbouring polygons leave no crack between them.
            style = {**style, "linewidth": 0.0, "antialiased": False}
        # add_artist, not add_patch: the limits are always set by _frame, and walking a
        # path of many vertices for data limits is slow.
        ax.add_artist(PathPatch(path, rasterized=heavy, **style))


def _frame(ax, bounds: Sequence[float], pad: float = 0.02) -> None:
    xmin, ymin, xmax, ymax = bounds
    dx, dy = (xmax - xmin) or 1.0, (ymax - ymin) or 1.0
    ax.set_xlim(xmin - pad * dx, xmax + pad * dx)
    ax.set_ylim(ymin - pad * dy, ymax + pad * dy)
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    for spine in ax.spines.values():
        spine.set_visible(False)


def overview_chart(
    layers: RegionLayers,
    *,
    footprint: object | None = None,
    points: np.ndarray | None = None,
    salt: str = "overview",
) -> str:
    """Draw the region (light grey), served areas (mid tone) and the footprint outline.

    Parameters
    ----------
    layers : RegionLayers
        Prepared region geometry.
    footprint : shapely.Geometry or None
        Dissolved footprint, outlined.
    points : numpy.ndarray or None
        Service points (shapely points), drawn as dots.
    salt : str
        SVG id salt (see :func:`figure_to_svg`).

    Returns
    -------
    str
        Inline SVG markup.
    """
    fig = new_figure(6.4, 4.6)
    ax = fig.add_subplot()
    if layers.image is not None:
        _show_raster(ax, layers)
    else:
        _add_path(ax, polygon_path([layers.region]), facecolor=REGION_GREY, edgecolor="none")
        _add_path(ax, polygon_path([layers.served_union]), facecolor=SERVED_TONE, edgecolor="none")
    handles = [
        Rectangle((0, 0), 1, 1, facecolor=REGION_GREY, label="not served"),
        Rectangle((0, 0), 1, 1, facecolor=SERVED_TONE, label="served"),
    ]
    if footprint is not None and not shapely.is_empty(footprint):
        bounds = shapely.bounds(layers.region)
        tolerance = max(bounds[2] - bounds[0], bounds[3] - bounds[1], 1.0) / 1500.0
        outline = shapely.simplify(footprint, tolerance, preserve_topology=True)
        _add_path(ax, polygon_path([outline]), facecolor="none", edgecolor=RING_EDGE, linewidth=0.8)
        handles.append(
            Rectangle(
                (0, 0),
                1,
                1,
                label="footprint",
                facecolor="none",
                edgecolor=RING_EDGE,
                linewidth=0.8,
            )
        )
    if points is not None and len(points):
        xy = shapely.get_coordinates(np.asarray(points, dtype=object))
        ax.scatter(xy[:, 0], xy[:, 1], s=5, color=RING_EDGE, linewidths=0, label="service point")
    _frame(ax, shapely.bounds(layers.region))
    ax.legend(
        handles=[*handles, *ax.collections],
        loc="upper left",
        bbox_to_anchor=(1.01, 1.0),
        fontsize=8,
        frameon=False,
    )
    return figure_to_svg(fig, salt=salt, title="Overview of the region and the served areas")


def enclave_locator_chart(
    layers: RegionLayers,
    members: np.ndarray,
    ring: np.ndarray,
    *,
    label: str,
    salt: str,
) -> str:
    """Draw where an enclave lies: the whole region with a box, and a close-up.

    Parameters
    ----------
    layers : RegionLayers
        Prepared region geometry.
    members : numpy.ndarray
        Positions of the enclave's areas.
    ring : numpy.ndarray
        Positions of the areas of its surrounding ring (outlined).
    label : str
        Enclave id, used in the figure title.
    salt : str
        SVG id salt (see :func:`figure_to_svg`).

    Returns
    -------
    str
        Inline SVG markup.
    """
    fig = new_figure(6.4, 2.9)
    overview, close = fig.subplots(1, 2, width_ratios=[1, 1.25])
    if layers.image is not None:
        _show_raster(overview, layers)
    else:
        _add_path(
            overview, polygon_path([layers.region_small]), facecolor=REGION_GREY, edgecolor="none"
        )
        served_path = polygon_path([layers.served_small])
        _add_path(overview, served_path, facecolor=SERVED_TONE, edgecolor="none")
    large = layers.image is not None
    rx0, ry0, rx1, ry1 = layers.bounds if large else shapely.bounds(layers.region)
    region_side = max(rx1 - rx0, ry1 - ry0, 1.0)
    enclave_path = polygon_path(
        _for_display(layers.geometries[members], region_side / 400.0 if large else 0.0)
    )
    _add_path(overview, enclave_path, facecolor=ENCLAVE_TONE, edgecolor=ENCLAVE_TONE, linewidth=0.8)
    focus = np.concatenate([members, ring])
    xmin, ymin, xmax, ymax = shapely.total_bounds(layers.geometries[focus])
    side = max(xmax - xmin, ymax - ymin, 1.0) * 1.3
    cx, cy = (xmin + xmax) / 2, (ymin + ymax) / 2
    window = (cx - side / 2, cy - side / 2, cx + side / 2, cy + side / 2)
    # The marker box never shrinks below 6% of the region's side, so that a one-tract
    # enclave in a large region can still be found on the small overview.
    rx0, ry0, rx1, ry1 = shapely.bounds(layers.region)
    marker = max(side, 0.06 * max(rx1 - rx0, ry1 - ry0))
    overview.add_patch(
        Rectangle(
            (cx - marker / 2, cy - marker / 2),
            marker,
            marker,
            facecolor="none",
            edgecolor=RING_EDGE,
            linewidth=1.2,
            clip_on=False,
        )
    )
    _frame(overview, shapely.bounds(layers.region))
    overview.set_title("in the region", fontsize=9)

    # Large regions: each polygon simplified within about a pixel of the close-up.
    close_tolerance = side / 1500.0 if large else 0.0
    if large and side >= CLOSE_UP_FROM_OVERVIEW * region_side:
        # A close-up spanning a good part of a large region: the overview raster already
        # has a pixel per pixel of the close-up, so it is drawn from that, with the
        # enclave's outline of the overview on top, instead of every area in the window.
        _show_raster(close, layers)
        _add_path(
            close, enclave_path, facecolor=ENCLAVE_TONE, edgecolor=ENCLAVE_TONE, linewidth=0.4
        )
    else:
        nearby = np.sort(layers.tree.query(shapely.box(*window)))
        colours = np.where(layers.served[nearby], SERVED_TONE, REGION_GREY).astype(object)
        colours[np.isin(nearby, members)] = ENCLAVE_TONE
        patches = []
        facecolors = []
        for tone in (REGION_GREY, SERVED_TONE, ENCLAVE_TONE):
            path = polygon_path(
                _for_display(layers.geometries[nearby[colours == tone]], close_tolerance)
            )
            if path is not None:
                patches.append(PathPatch(path))
                facecolors.append(tone)
        close.add_collection(
            PatchCollection(patches, facecolors=facecolors, edgecolors="white", linewidths=0.6)
        )
    _add_path(
        close,
        polygon_path(_for_display(layers.geometries[ring], close_tolerance)),
        facecolor="none",
        edgecolor=RING_EDGE,
        linewidth=1.3,
    )
    _frame(close, window, pad=0.0)
    close.set_title("close-up: enclave and its ring (outlined)", fontsize=9)
    handles = [
        Rectangle((0, 0), 1, 1, facecolor=ENCLAVE_TONE, label="enclave"),
        Rectangle((0, 0), 1, 1, facecolor=SERVED_TONE, label="served"),
        Rectangle((0, 0), 1, 1, facecolor=REGION_GREY, label="not served"),
        Rectangle((0, 0), 1, 1, facecolor="none", edgecolor=RING_EDGE, label="ring"),
    ]
    close.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=7)
    return figure_to_svg(fig, salt=salt, title=f"Locator of enclave {label}")


@dataclass(frozen=True)
class SweepPanel:
    """One panel of :func:`sweep_chart`: each group's ratio as one setting is varied.

    Attributes
    ----------
    x : sequence of float
        The settings tried, in order.
    ratios : mapping of str to sequence of float or None
        Each group's ratio at each setting; ``None`` leaves a gap in the line.
    tick_labels : sequence of str
        Text of the x ticks, one per setting.
    x_label, y_label, title : str
        Axis labels and panel title.
    marked : float or None
        The audit's own setting, drawn as a vertical line.
    marked_label : str
        Legend text of that line.
    """

    x: Sequence[float]
    ratios: Mapping[str, Sequence[float | None]]
    tick_labels: Sequence[str]
    x_label: str
    y_label: str
    title: str
    marked: float | None = None
    marked_label: str = "this audit"


def sweep_chart(panels: Sequence[SweepPanel], *, salt: str = "sweep") -> str:
    """Draw each group's ratio against a swept setting, with the four-fifths line at 0.8.

    Parameters
    ----------
    panels : sequence of SweepPanel
        One panel per sweep (served threshold, reach of the service points), stacked.
    salt : str
        SVG id salt (see :func:`figure_to_svg`).

    Returns
    -------
    str
        Inline SVG markup.

    Notes
    -----
    The band below 0.8 is shaded: a point there is a ratio strictly below four-fifths
    of the comparison rate, the screen of 29 CFR 1607.4(D) used as a rule of thumb.
    """
    title = "; ".join(p.title for p in panels) or "Sensitivity"
    return figure_to_svg(sweep_figure(panels), salt=salt, title=title)


def sweep_figure(panels: Sequence[SweepPanel]) -> Figure:
    """Return the figure of :func:`sweep_chart` before it is rendered (tests read its axes).

    Parameters
    ----------
    panels : sequence of SweepPanel
        One panel per sweep, stacked top to bottom.

    Returns
    -------
    matplotlib.figure.Figure
    """
    n = max(len(panels), 1)
    fig = new_figure(7.2, 0.5 + 2.9 * n)
    axes = fig.subplots(n, 1, squeeze=False)[:, 0]
    for ax, panel in zip(axes, panels, strict=False):
        x = np.asarray(panel.x, dtype=float)
        finite_max = 1.0
        for k, (group, values) in enumerate(panel.ratios.items()):
            y = np.array([np.nan if v is None else float(v) for v in values], dtype=float)
            if np.isfinite(y).any():
                finite_max = max(finite_max, float(np.nanmax(y)))
            colour, marker, dash = SERIES_STYLES[k % len(SERIES_STYLES)]
            label = mpl_text(group)
            ax.plot(
                x,
                y,
                color=colour,
                marker=marker,
                linestyle=dash,
                linewidth=1.4,
                markersize=4.5,
                # matplotlib leaves out legend entries whose label starts with "_".
                label=" " + label if label.startswith("_") else label,
            )
        top = max(1.2, finite_max * 1.08)
        ax.axhspan(0.0, FOUR_FIFTHS, color=FLAG_BAND, zorder=0, linewidth=0)
        ax.axhline(
            FOUR_FIFTHS,
            color=TEXT_TONE,
            linewidth=1.2,
            linestyle=(0, (4, 2)),
            label="four-fifths (0.8)",
        )
        ax.axhline(1.0, color="#999999", linewidth=0.7)
        if panel.marked is not None and np.isfinite(panel.marked):
            ax.axvline(
                panel.marked,
                color=RING_EDGE,
                linewidth=1.0,
                linestyle=":",
                label=mpl_text(panel.marked_label),
            )
        ax.set_ylim(0.0, top)
        if x.size:
            pad = 0.03 * ((x.max() - x.min()) or 1.0)
            ax.set_xlim(x.min() - pad, x.max() + pad)
        ax.set_xticks(x, [mpl_text(t) for t in panel.tick_labels], fontsize=8)
        ax.set_xlabel(mpl_text(panel.x_label), fontsize=9)
        ax.set_ylabel(mpl_text(panel.y_label), fontsize=9)
        ax.set_title(mpl_text(panel.title), fontsize=10)
        ax.spines[["top", "right"]].set_visible(False)
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    return fig
