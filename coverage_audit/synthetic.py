"""Synthetic tessellations and demographics for the demo region, tests and benchmarks.

Everything here is fictional and deterministic: the same arguments and seed give the same
geometry and counts, bit for bit. Cells are Voronoi polygons of jittered grid points,
clipped to a rectangle, so they tile the region without gaps or overlaps and have the
irregular shapes of real census tracts.
"""

from __future__ import annotations

import math

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

#: A Lambert azimuthal equal-area projection centred in the open South Pacific, far from
#: any land, used for fictional regions so that no real place is depicted.
FICTIONAL_CRS = "+proj=laea +lat_0=-32 +lon_0=-135 +x_0=0 +y_0=0 +datum=WGS84 +units=m +no_defs"


def tessellation(
    n_areas: int,
    *,
    seed: int,
    cell_size_m: float = 2_000.0,
    jitter: float = 0.35,
    crs: str = FICTIONAL_CRS,
    id_prefix: str = "99001",
) -> gpd.GeoDataFrame:
    """Return about ``n_areas`` Voronoi cells tiling a rectangle.

    Parameters
    ----------
    n_areas : int
        Target number of cells; the grid is the nearest rectangle with that many cells.
    seed : int
        Seed of the jitter.
    cell_size_m : float
        Grid spacing in metres (the typical cell diameter).
    jitter : float
        Jitter of the seed points as a fraction of the spacing (0 gives a square grid).
    crs : str
        CRS of the output (metres); the default is a fictional equal-area projection.
    id_prefix : str
        Prefix of the string ids; ids are ``prefix`` + a zero-padded 6-digit number, so
        with a 5-digit prefix they look like 11-digit tract GEOIDs.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``geoid``, ``row``, ``col``, ``x``, ``y`` (cell seed in metres from the
        lower-left corner) and ``geometry``.
    """
    rng = np.random.default_rng(seed)
    cols = max(1, int(round(math.sqrt(n_areas * 1.25))))
    rows = max(1, int(round(n_areas / cols)))
    grid_j, grid_i = np.meshgrid(np.arange(cols), np.arange(rows))
    jj = grid_j.ravel()
    ii = grid_i.ravel()
    x = (jj + 0.5 + rng.uniform(-jitter, jitter, jj.size)) * cell_size_m
    y = (ii + 0.5 + rng.uniform(-jitter, jitter, ii.size)) * cell_size_m
    width, height = cols * cell_size_m, rows * cell_size_m
    frame = shapely.box(0.0, 0.0, width, height)
    points = shapely.points(x, y)
    cells = shapely.get_parts(
        shapely.voronoi_polygons(shapely.multipoints(points), extend_to=frame)
    )
    cells = shapely.intersection(cells, frame)
    # Voronoi output order is not the input order: match each cell to the seed inside it.
    tree = shapely.STRtree(cells)
    point_idx, cell_idx = tree.query(points, predicate="within")
    order = np.empty(points.size, dtype=np.int64)
    order[point_idx] = cell_idx
    geoms = cells[order]
    n = geoms.size
    width_digits = max(6, len(str(n)))
    ids = [f"{id_prefix}{k:0{width_digits}d}" for k in range(1, n + 1)]
    return gpd.GeoDataFrame(
        {"geoid": ids, "row": ii, "col": jj, "x": x, "y": y},
        geometry=geoms,
        crs=crs,
    )


def smooth_field(
    x: np.ndarray,
    y: np.ndarray,
    centres: np.ndarray,
    scales: np.ndarray,
    weights: np.ndarray,
) -> np.ndarray:
    """Sum of Gaussian bumps at ``centres`` (k x 2) with ``scales`` and ``weights``."""
    dx = x[:, None] - centres[None, :, 0]
    dy = y[:, None] - centres[None, :, 1]
    return (weights[None, :] * np.exp(-(dx**2 + dy**2) / (2 * scales[None, :] ** 2))).sum(axis=1)


def demographics(cells: gpd.GeoDataFrame, *, seed: int) -> pd.DataFrame:
    """Return spatially patterned, fictional population counts and incomes for ``cells``.

    Group shares follow smooth fields (a few concentrations of each group) with noise, so
    that the region is segregated to a plausible degree; the income ratio (tract median
    family income as a percent of the area median) is lower where the fields that drive
    the non-reference groups are high. Columns: ``pop_total``, ``pop_white_nh``,
    ``pop_black_nh``, ``pop_hispanic``, ``pop_asian_nh``, ``pop_other_nh``,
    ``income_ratio`` and ``households``.
    """
    rng = np.random.default_rng(seed)
    x = cells["x"].to_numpy()
    y = cells["y"].to_numpy()
    span = max(np.ptp(x), np.ptp(y), 1.0)
    x0, y0 = x.min(), y.min()

    def field(k: int) -> np.ndarray:
        centres = np.column_stack(
            [x0 + rng.uniform(0.1, 0.9, k) * np.ptp(x), y0 + rng.uniform(0.1, 0.9, k) * np.ptp(y)]
        )
        scales = rng.uniform(0.06, 0.16, k) * span
        weights = rng.uniform(0.6, 1.4, k)
        return smooth_field(x, y, centres, scales, weights)

    black = 0.15 + 3.0 * field(3)
    hispanic = 0.25 + 2.5 * field(3)
    asian = 0.10 + 1.5 * field(2)
    other = np.full(x.size, 0.12)
    white = np.full(x.size, 2.2)
    raw = np.column_stack([white, black, hispanic, asian, other])
    raw *= rng.lognormal(0.0, 0.25, raw.shape)
    shares = raw / raw.sum(axis=1, keepdims=True)
    total = rng.poisson(rng.uniform(1_800, 6_500, x.size)).astype(np.int64)
    counts = np.zeros((x.size, 5), dtype=np.int64)
    for i in range(x.size):
        counts[i] = rng.multinomial(total[i], shares[i])
    minority_share = 1.0 - shares[:, 0]
    income_ratio = 150.0 * np.exp(-1.3 * (minority_share - 0.2)) * rng.lognormal(0.0, 0.18, x.size)
    income_ratio = np.clip(np.round(income_ratio, 1), 18.0, 320.0)
    households = np.round(total / rng.uniform(2.2, 3.1, x.size)).astype(np.int64)
    return pd.DataFrame(
        {
            "pop_total": total,
            "pop_white_nh": counts[:, 0],
            "pop_black_nh": counts[:, 1],
            "pop_hispanic": counts[:, 2],
            "pop_asian_nh": counts[:, 3],
            "pop_other_nh": counts[:, 4],
            "income_ratio": income_ratio,
            "households": households,
        },
        index=cells.index,
    )


def service_points(
    cells: gpd.GeoDataFrame, n_points: int, *, seed: int, weight: np.ndarray | None = None
) -> gpd.GeoDataFrame:
    """Return ``n_points`` service points placed at random inside cells.

    Cells are drawn with probability proportional to ``weight`` (uniform when omitted),
    so a footprint can favour some neighbourhoods over others.
    """
    rng = np.random.default_rng(seed)
    p = None if weight is None else np.asarray(weight, dtype=float) / np.sum(weight)
    chosen = rng.choice(len(cells), size=n_points, replace=True, p=p)
    x = cells["x"].to_numpy()[chosen] + rng.normal(0, 150.0, n_points)
    y = cells["y"].to_numpy()[chosen] + rng.normal(0, 150.0, n_points)
    return gpd.GeoDataFrame(
        {"site_id": [f"S{k:05d}" for k in range(1, n_points + 1)]},
        geometry=shapely.points(x, y),
        crs=cells.crs,
    )


def densify_independently(geometries: np.ndarray, *, vertices: int = 100, seed: int) -> np.ndarray:
    """Add vertices to every polygon on its own, so that neighbours' vertices differ.

    Each edge of each polygon gets the same number of extra vertices at random positions
    drawn for that polygon alone, until the polygon has about ``vertices`` vertices. Two
    neighbours keep the same shared line but no longer share the vertices along it, as in
    generalised, reprojected or re-cut boundary files (a coverage that is not clean).

    Parameters
    ----------
    geometries : numpy.ndarray of shapely Polygons
        Polygons without holes (the cells of :func:`tessellation`).
    vertices : int
        Target number of vertices per polygon.
    seed : int
        Seed of the vertex positions.

    Returns
    -------
    numpy.ndarray of shapely Polygons
        Same shapes (up to floating-point rounding), more vertices.
    """
    rng = np.random.default_rng(seed)
    geoms = np.asarray(geometries, dtype=object)
    rings = shapely.get_exterior_ring(geoms)
    coords, owner = shapely.get_coordinates(rings, return_index=True)
    last = np.r_[owner[1:] != owner[:-1], True]
    start = ~last  # a segment starts at every vertex but the closing one
    p0 = coords[:-1][start[:-1]]
    p1 = coords[1:][start[:-1]]
    seg_owner = owner[:-1][start[:-1]]
    n_seg = np.bincount(seg_owner, minlength=geoms.size)
    extra = np.maximum(vertices // np.maximum(n_seg, 1) - 1, 0)[seg_owner]
    width = int(extra.max()) if extra.size else 0
    t = np.sort(rng.uniform(0.02, 0.98, (p0.shape[0], width)), axis=1)
    use = np.arange(width)[None, :] < extra[:, None]
    # Each segment contributes its start vertex, then its extra vertices in order.
    t_full = np.concatenate([np.zeros((p0.shape[0], 1)), t], axis=1)
    use_full = np.concatenate([np.ones((p0.shape[0], 1), dtype=bool), use], axis=1)
    d = p1 - p0
    xs = p0[:, 0:1] + t_full * d[:, 0:1]
    ys = p0[:, 1:2] + t_full * d[:, 1:2]
    pts = np.column_stack([xs[use_full], ys[use_full]])
    pts_owner = np.repeat(seg_owner, use_full.sum(axis=1))
    # Close each ring on its first vertex.
    first = np.r_[0, np.flatnonzero(pts_owner[1:] != pts_owner[:-1]) + 1]
    ends = np.r_[first[1:], pts_owner.size]
    closed = np.insert(pts, ends, pts[first], axis=0)
    closed_owner = np.insert(pts_owner, ends, pts_owner[first])
    return shapely.polygons(shapely.linearrings(closed, indices=closed_owner))
