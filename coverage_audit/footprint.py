"""Footprint: service polygons, points with a reach, listed ids or ZIP codes -> one footprint.

Takes a ``[footprint]`` spec and the analysed areas (already in the analysis CRS) and gives
a :class:`Footprint`: the dissolved service geometry in the analysis CRS, cut into disjoint
pieces small enough for fast exact intersection, plus what the later stages and the
manifest need (service points, radii, circle resolution, served ids). Overlapping service
polygons are dissolved once, so no place is counted twice.

Reach circles are geodesic: each vertex lies at the reach distance from its point on the
ellipsoid (pyproj.Geod), whatever the analysis projection, and the polygon's radius is
scaled so that its area equals the circle's (an inscribed polygon would fall short by
about (2*pi/N)**2/6 of the area).
"""

from __future__ import annotations

import hashlib
import warnings
from dataclasses import dataclass, field
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS, Geod, Transformer

from .errors import InputError, RepairWarning
from .geographic import unwrap_longitudes
from .inputs import (
    AreaInputs,
    Exclusions,
    InputRecord,
    crs_text,
    finite_coordinates,
    ids_as_text,
    kept_geometries,
    read_hashed,
    read_layer,
    read_table,
    repair,
    resolve_crs,
)
from .io.joins import MatchReport, match_ids
from .io.zcta import crosswalk_fractions, read_zip_list, relationship_fractions
from .spec import LENGTH_UNITS, FootprintSpec

#: Largest number of vertices of a footprint piece; bigger pieces are cut in quarters so
#: that each exact intersection with an area stays cheap. Measured on 85,000 areas: one
#: 200,000-vertex zone took 73 s uncut, 2.3 s in pieces of 5,000 and 1.0 s in pieces of
#: 1,000; smaller pieces add cut lines that cross more areas and gain nothing.
MAX_PIECE_VERTICES = 1_000
#: Densify footprint polygons given in degrees so their edges keep their course when
#: projected (0.005 degree is about 500 m).
DENSIFY_DEGREES = 0.005

_TRUE = {"1", "true", "t", "yes", "y", "served", "x"}
_FALSE = {"0", "false", "f", "no", "n", "", "nan", "none"}


@dataclass
class Footprint:
    """A dissolved service footprint in the analysis CRS.

    Attributes
    ----------
    name, kind : str
        From the spec; kind is "polygons", "points", "ids" or "zips".
    geometry : shapely geometry
        The dissolved footprint (may be empty).
    pieces : numpy.ndarray
        Disjoint polygons whose union is ``geometry``, each with at most
        :data:`MAX_PIECE_VERTICES` vertices where possible.
    points : geopandas.GeoDataFrame or None
        Service points (kind "points"), with a ``radius_m`` column.
    served_ids : frozenset of str or None
        Served area ids (kind "ids").
    """

    name: str
    kind: str
    geometry: Any
    pieces: np.ndarray
    crs: CRS
    points: gpd.GeoDataFrame | None = None
    served_ids: frozenset[str] | None = None
    radius_m: float | None = None
    circle_vertices: int | None = None
    circle_area_error_max: float | None = None
    features: int = 0
    records: list[InputRecord] = field(default_factory=list)
    unread_flags: int = 0
    #: Covered fraction by area id (kind "zips": ZIP-code zones through ZCTAs or a crosswalk).
    fractions: dict[str, float] | None = None
    #: Match report of the ids the footprint was given by (listed ids, ZIPs, chosen polygons).
    match: MatchReport | None = None

    def to_dict(self) -> dict[str, Any]:
        """Describe the footprint for summary.json."""
        out: dict[str, Any] = {
            "name": self.name,
            "kind": self.kind,
            "features": self.features,
            "area_km2": float(shapely.area(self.geometry)) / 1e6
            if self.geometry is not None
            else 0.0,
        }
        if self.kind == "points":
            radii = self.points["radius_m"].to_numpy() if self.points is not None else np.array([])
            out["points"] = int(len(radii))
            out["radius_m"] = self.radius_m
            out["radius_m_range"] = [float(radii.min()), float(radii.max())] if radii.size else None
        if self.kind == "ids":
            out["served_ids"] = len(self.served_ids or ())
        if self.match is not None:
            out["match"] = self.match.to_dict()
        return out

    def manifest(self) -> dict[str, Any]:
        """Return construction details for manifest.json."""
        return {
            "name": self.name,
            "kind": self.kind,
            "pieces": int(self.pieces.size),
            "circle_vertices": self.circle_vertices,
            "circle_construction": (
                "geodesic circle, vertices scaled so the polygon's area equals the circle's"
                if self.kind == "points"
                else None
            ),
            "circle_area_error_max": self.circle_area_error_max,
        }


def build_footprint(
    spec: FootprintSpec,
    areas: AreaInputs,
    exclusions: Exclusions,
    *,
    circle_vertices: int = 128,
    id_width: int | None = None,
) -> Footprint:
    """Build the footprint of ``spec`` over ``areas``.

    Parameters
    ----------
    spec : FootprintSpec
    areas : AreaInputs
        The analysed areas (their CRS is the analysis CRS).
    exclusions : Exclusions
        Footprint rows that cannot be used are added here (source ``footprint:<name>``).
    circle_vertices : int
        Vertices of each reach circle.
    id_width : int, optional
        Zero-pad listed ids to this width (as for the areas).

    Returns
    -------
    Footprint
    """
    crs = areas.analysis_crs
    if spec.kind == "ids":
        return _ids_footprint(spec, areas, exclusions, id_width=id_width)
    if spec.kind == "zips":
        return _zips_footprint(spec, areas, exclusions)
    assert spec.path is not None
    source = f"footprint:{spec.name}"
    path = spec.path
    role = f"footprint '{spec.name}'"
    layer, digest = read_hashed(
        path, lambda: read_layer(path, layer=spec.layer, role=role), role=role
    )
    layer = resolve_crs(layer, spec.crs, role=role, path=path, key="[footprint] crs")
    record = InputRecord(
        f"footprint:{spec.name}",
        str(spec.path),
        digest,
        len(layer),
        crs_text(layer.crs),
        spec.layer,
    )
    match = None
    if spec.id is not None:
        layer, match = _chosen_polygons(spec, layer, exclusions, id_width)
    geoms = np.asarray(layer.geometry.array, dtype=object)
    rows = np.asarray(layer["_row"]) if "_row" in layer.columns else np.arange(1, len(layer) + 1)
    missing = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    exclusions.add(source, rows[missing], [None] * int(missing.sum()), "null or empty geometry")
    not_finite = ~finite_coordinates(geoms)
    if not_finite.any():
        bad = [int(r) for r in rows[not_finite][:5]]
        raise InputError(
            f"{role} file '{path}': feature(s) {bad} have a coordinate that is not a finite "
            "number (NaN or infinite); the footprint would be wrong without them, so fix or "
            "remove those features"
        )
    keep = ~missing
    type_ids = shapely.get_type_id(geoms)
    if spec.kind == "points":
        wrong = keep & ~np.isin(type_ids, (0, 4))
        exclusions.add(
            source, rows[wrong], [None] * int(wrong.sum()), "not a point (points footprint)"
        )
        keep &= ~wrong
        return _points_footprint(
            spec, layer, geoms, rows, keep, exclusions, crs, circle_vertices, record
        )
    wrong = keep & ~np.isin(type_ids, (3, 6, 7))
    exclusions.add(
        source, rows[wrong], [None] * int(wrong.sum()), "not a polygon (polygons footprint)"
    )
    keep &= ~wrong
    fixed, repaired = repair(kept_geometries(geoms, keep))
    if (repaired & keep).any():
        warnings.warn(
            f"repaired {int((repaired & keep).sum())} invalid geometries of footprint '{spec.name}'",
            RepairWarning,
            stacklevel=2,
        )
    empty = keep & (shapely.is_missing(fixed) | shapely.is_empty(fixed))
    exclusions.add(source, rows[empty], [None] * int(empty.sum()), "no polygonal part after repair")
    keep &= ~empty
    if not keep.any():
        raise InputError(f"footprint '{spec.name}' ('{spec.path}') has no usable polygon")
    polys = fixed[keep]
    if CRS(layer.crs).is_geographic:
        # Pieces cut at the antimeridian (RFC 7946) are rejoined before projection.
        polys, _ = unwrap_longitudes(polys)
        polys = shapely.segmentize(polys, DENSIFY_DEGREES)
    projected = gpd.GeoSeries(polys, crs=layer.crs).to_crs(crs).to_numpy()
    projected, _ = repair(projected)
    dissolved = shapely.union_all(projected)
    return Footprint(
        name=spec.name,
        kind="polygons",
        geometry=dissolved,
        pieces=cut_pieces(dissolved),
        crs=crs,
        features=int(keep.sum()),
        records=[record],
        match=match,
    )


def _chosen_polygons(
    spec: FootprintSpec, layer: gpd.GeoDataFrame, exclusions: Exclusions, id_width: int | None
) -> tuple[gpd.GeoDataFrame, MatchReport]:
    """Keep the polygons of ``layer`` whose ``spec.id`` is listed in ``ids`` or ``ids_path``."""
    assert spec.id is not None
    role = f"footprint '{spec.name}'"
    if spec.id not in layer.columns:
        raise InputError(
            f"{role} file '{spec.path}' has no id column {spec.id!r}; its columns are "
            f"{[c for c in layer.columns if c != 'geometry']}"
        )
    if spec.ids_path is not None:
        listed = _read_ids_file(spec.ids_path, role, id_width)
        where = str(spec.ids_path)
    else:
        listed = ids_as_text(
            pd.Series(list(spec.ids or ()), dtype=object), width=id_width, where=f"{role} ids"
        )
        where = "[footprint] ids"
    layer_ids = ids_as_text(layer[spec.id], width=id_width, where=f"{role} column {spec.id}")
    values = [None if v is None else str(v) for v in listed]
    match = match_ids(f"{role} ids", where, values, list(layer_ids.dropna()))
    known = set(layer_ids.dropna())
    unknown = [k for k, v in enumerate(values, start=1) if v is not None and v not in known]
    exclusions.add(
        f"footprint:{spec.name}",
        unknown,
        [values[k - 1] for k in unknown],
        f"listed id is not in column {spec.id} of the footprint layer",
    )
    chosen = layer_ids.isin(set(values)).to_numpy()
    out = layer.loc[chosen].copy()
    out["_row"] = np.flatnonzero(chosen) + 1
    return out, match


def _read_ids_file(path: Any, role: str, id_width: int | None) -> pd.Series:
    if not path.exists():
        raise InputError(f"{role} ids file '{path}' was not found; check the path in the spec")
    if path.suffix.lower() in (".csv", ".tsv"):
        table = read_table(path, id_column="__none__", role=f"{role} ids")
        column = str(table.columns[0])
        table = read_table(path, id_column=column, role=f"{role} ids")
        values = table[column]
    else:
        lines = path.read_text(encoding="utf-8").splitlines()
        values = pd.Series([ln.strip() or None for ln in lines], dtype=object)
    return ids_as_text(values, width=id_width, where=f"{role} ids file '{path}'")


def _zips_footprint(spec: FootprintSpec, areas: AreaInputs, exclusions: Exclusions) -> Footprint:
    """ZIP-code zones: covered fractions from the ZCTA relationship file or a crosswalk."""
    assert spec.zips is not None
    role = f"footprint '{spec.name}'"
    zip_path = spec.zips
    zips, zips_digest = read_hashed(
        zip_path, lambda: read_zip_list(zip_path, role=f"{role} zips"), role=f"{role} zips"
    )
    records = [InputRecord(f"zips:{spec.name}", str(spec.zips), zips_digest, len(zips))]
    if spec.zcta_relationship is not None:
        source_path = spec.zcta_relationship
        result, source_digest = read_hashed(
            source_path,
            lambda: relationship_fractions(zips, source_path, role=f"{role} zcta_relationship"),
            role=f"{role} zcta_relationship",
        )
    else:
        assert spec.crosswalk is not None and spec.crosswalk_ratio is not None
        source_path, ratio = spec.crosswalk, spec.crosswalk_ratio
        result, source_digest = read_hashed(
            source_path,
            lambda: crosswalk_fractions(
                zips,
                source_path,
                ratio,
                role=f"{role} crosswalk",
                id_candidates=(areas.id_column, "tract", "geoid", "GEOID", "GEOID20"),
            ),
            role=f"{role} crosswalk",
        )
    records.append(InputRecord(f"zcta:{spec.name}", str(source_path), source_digest, 0))
    exclusions.add(
        f"zips:{spec.name}",
        [k for k, _ in result.unknown],
        [z for _, z in result.unknown],
        f"ZIP code has no ZCTA or row in '{source_path.name}' (PO-box or single-address ZIP "
        "codes have none); it adds no coverage",
    )
    frame = areas.frame
    ids = frame[areas.id_column].tolist()
    touched = [a for a, f in result.fractions.items() if f > 0]
    match = match_ids(
        f"{role} areas of the listed ZIP codes",
        str(source_path),
        touched,
        ids,
        layout=result.layout,
        min_share=0.0,
    )
    fractions = {i: float(result.fractions.get(i, 0.0)) for i in ids}
    dissolved = _dissolve_areas(frame, np.array([fractions[i] > 0 for i in ids], dtype=bool))
    return Footprint(
        name=spec.name,
        kind="zips",
        geometry=dissolved,
        pieces=np.array([], dtype=object),
        crs=areas.analysis_crs,
        features=len(zips) - len(result.unknown),
        records=records,
        fractions=fractions,
        match=match,
    )


def _points_footprint(
    spec: FootprintSpec,
    layer: gpd.GeoDataFrame,
    geoms: np.ndarray,
    rows: np.ndarray,
    keep: np.ndarray,
    exclusions: Exclusions,
    crs: CRS,
    circle_vertices: int,
    record: InputRecord,
) -> Footprint:
    source = f"footprint:{spec.name}"
    if spec.radius_column is not None:
        if spec.radius_column not in layer.columns:
            raise InputError(
                f"footprint '{spec.name}' file '{spec.path}' has no radius column "
                f"{spec.radius_column!r}; its columns are {[c for c in layer.columns if c != 'geometry']}"
            )
        raw = pd.to_numeric(layer[spec.radius_column], errors="coerce").to_numpy(dtype=float)
        radii = raw * LENGTH_UNITS[spec.radius_unit]
        bad = keep & ~(np.isfinite(radii) & (radii > 0))
        exclusions.add(
            source,
            rows[bad],
            [None] * int(bad.sum()),
            f"radius in column {spec.radius_column} missing, not a number or not positive",
        )
        keep &= ~bad
    else:
        radii = np.full(len(layer), float(spec.radius_m or 0.0))
    if not keep.any():
        raise InputError(f"footprint '{spec.name}' ('{spec.path}') has no usable point")
    # Multipoints count as one site per point.
    pts = layer.loc[keep].copy()
    pts["radius_m"] = radii[keep]
    pts["source_row"] = rows[keep]
    pts = pts.set_geometry(gpd.GeoSeries(geoms[keep], crs=layer.crs).values).explode(
        index_parts=False
    )
    pts = pts.reset_index(drop=True)
    lonlat = pts.to_crs("EPSG:4326")
    lon = lonlat.geometry.x.to_numpy()
    lat = lonlat.geometry.y.to_numpy()
    circles, error = geodesic_circles(lon, lat, pts["radius_m"].to_numpy(), crs, circle_vertices)
    dissolved = shapely.union_all(circles)
    pts = pts.to_crs(crs)
    return Footprint(
        name=spec.name,
        kind="points",
        geometry=dissolved,
        pieces=cut_pieces(dissolved),
        crs=crs,
        points=pts,
        radius_m=spec.radius_m,
        circle_vertices=circle_vertices,
        circle_area_error_max=error,
        features=int(len(pts)),
        records=[record],
    )


def geodesic_circles(
    lon: np.ndarray, lat: np.ndarray, radius_m: np.ndarray, crs: CRS, vertices: int
) -> tuple[np.ndarray, float]:
    """Return reach circles around lon/lat points as polygons in ``crs``.

    Parameters
    ----------
    lon, lat : numpy.ndarray
        Centres in degrees (WGS 84).
    radius_m : numpy.ndarray
        Geodesic radius of each circle in metres.
    crs : pyproj.CRS
        Equal-area CRS the polygons are returned in.
    vertices : int
        Vertices per circle.

    Returns
    -------
    polygons : numpy.ndarray of shapely.Polygon
    area_error_max : float
        Largest relative difference between a polygon's projected area and pi r^2.

    Notes
    -----
    A regular N-gon with vertices on a circle of radius r has area
    (N/2) r^2 sin(2 pi / N); the vertices are placed at
    r * sqrt(2 pi / (N sin(2 pi / N))) so that the N-gon's area is pi r^2. On the
    ellipsoid the geodesic circle's area differs from pi r^2 by a relative
    O(r^2 / (12 R^2)), negligible at service reaches (2e-5 at 100 km).
    """
    n = np.asarray(lon).size
    radius_m = np.broadcast_to(np.asarray(radius_m, dtype=float), (n,))
    ring = circle_rings(lon, lat, radius_m, crs, vertices)
    closed = np.concatenate([ring, ring[:, :1, :]], axis=1)
    polygons = shapely.polygons(closed)
    expected = np.pi * radius_m**2
    error = float(np.max(np.abs(shapely.area(polygons) / expected - 1.0))) if n else 0.0
    return polygons, error


def circle_rings(
    lon: np.ndarray, lat: np.ndarray, radius_m: np.ndarray, crs: CRS, vertices: int
) -> np.ndarray:
    """Vertices of the reach circles of :func:`geodesic_circles`, as an array.

    Returns
    -------
    numpy.ndarray, shape (n, vertices, 2)
        Each circle's vertices in ``crs``, in the order of the polygon's exterior
        (counter-clockwise where ``crs`` keeps the orientation), not closed.
    """
    n = np.asarray(lon).size
    radius_m = np.broadcast_to(np.asarray(radius_m, dtype=float), (n,))
    theta = 2 * np.pi / vertices
    scale = np.sqrt(theta / np.sin(theta))
    azimuths = np.linspace(0.0, 360.0, vertices, endpoint=False)
    geod = Geod(ellps="WGS84")
    lons = np.repeat(np.asarray(lon, dtype=float), vertices)
    lats = np.repeat(np.asarray(lat, dtype=float), vertices)
    az = np.tile(azimuths, n)
    dist = np.repeat(radius_m * scale, vertices)
    vx, vy, _ = geod.fwd(lons, lats, az, dist)
    to_crs = Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    px, py = to_crs.transform(vx, vy)
    ring = np.stack(
        [np.asarray(px).reshape(n, vertices), np.asarray(py).reshape(n, vertices)], axis=-1
    )
    # Azimuths run clockwise; reverse for the counter-clockwise exterior of a valid ring.
    return np.ascontiguousarray(ring[:, ::-1, :])


def cut_pieces(geometry: Any, max_vertices: int = MAX_PIECE_VERTICES) -> np.ndarray:
    """Split a dissolved geometry into disjoint polygons of bounded size.

    Each polygon with more than ``max_vertices`` vertices is cut into quarters along its
    bounding box, repeatedly. The pieces share only their cut lines, so their areas sum to
    the footprint's and an area's covered part is the sum over the pieces it meets.
    """
    if geometry is None or shapely.is_empty(geometry):
        return np.array([], dtype=object)
    pending = list(shapely.get_parts(geometry))
    done: list[Any] = []
    while pending:
        current = np.array(pending, dtype=object)
        pending = []
        counts = shapely.get_num_coordinates(current)
        small = counts <= max_vertices
        done.extend(current[small])
        for big in current[~small]:
            xmin, ymin, xmax, ymax = big.bounds
            xm, ym = (xmin + xmax) / 2, (ymin + ymax) / 2
            boxes = shapely.box(
                [xmin, xm, xmin, xm],
                [ymin, ymin, ym, ym],
                [xm, xmax, xm, xmax],
                [ym, ym, ymax, ymax],
            )
            quarters = shapely.intersection(big, boxes)
            for q in quarters:
                for part in shapely.get_parts(q):
                    if shapely.get_type_id(part) == 3 and part.area > 0:
                        if shapely.get_num_coordinates(part) >= shapely.get_num_coordinates(big):
                            done.append(part)  # cannot shrink further (degenerate); keep whole
                        else:
                            pending.append(part)
    return np.array(done, dtype=object)


def _dissolve_areas(frame: gpd.GeoDataFrame, mask: np.ndarray) -> Any:
    """Union of the areas where ``mask`` (fast coverage union, exact union as fallback)."""
    geoms = np.asarray(frame.geometry.array, dtype=object)[mask]
    if not geoms.size:
        return shapely.Polygon()
    try:
        return shapely.coverage_union_all(geoms)
    except shapely.errors.GEOSException:
        return shapely.union_all(geoms)


def _ids_footprint(
    spec: FootprintSpec, areas: AreaInputs, exclusions: Exclusions, *, id_width: int | None
) -> Footprint:
    frame = areas.frame
    id_col = areas.id_column
    analysed = set(frame[id_col])
    excluded_ids = {r["id"] for r in exclusions.records if r["source"] == "areas"}
    records: list[InputRecord] = []
    source = f"served_ids:{spec.name}"
    unread = 0
    match = None
    if spec.served_column is not None:
        column = spec.served_column
        if column not in frame.columns:
            raise InputError(
                f"served_column {column!r} is not a column of the areas or their table; columns are "
                f"{[c for c in frame.columns if c != 'geometry']}"
            )
        flags, unread = _parse_flags(frame[column], column)
        served = frozenset(frame.loc[flags, id_col])
    else:
        if spec.ids is not None:
            listed = pd.Series(list(spec.ids), dtype=object)
            rows = np.arange(1, len(listed) + 1)
            listed = ids_as_text(listed, width=id_width, where="[footprint] ids")
        else:
            assert spec.served_ids is not None
            listed, rows, record = _read_id_list(spec, id_width)
            records.append(record)
        missing = listed.isna().to_numpy()
        exclusions.add(source, rows[missing], [None] * int(missing.sum()), "missing id")
        match = match_ids(
            f"served ids of footprint '{spec.name}'",
            str(spec.served_ids or "[footprint] ids"),
            [None if v is None else str(v) for v in listed],
            analysed | {i for i in excluded_ids if i is not None},
        )
        known = listed.isin(analysed).to_numpy()
        unknown = ~known & ~missing
        exclusions.add(
            source,
            rows[unknown],
            listed[unknown],
            [
                "listed id is an excluded area (see the areas rows)"
                if v in excluded_ids
                else "listed id is not an area of the areas file"
                for v in listed[unknown]
            ],
        )
        served = frozenset(listed[known])
    dissolved = _dissolve_areas(frame, frame[id_col].isin(served).to_numpy())
    return Footprint(
        name=spec.name,
        kind="ids",
        geometry=dissolved,
        pieces=np.array([], dtype=object),
        crs=areas.analysis_crs,
        served_ids=served,
        features=len(served),
        records=records,
        unread_flags=unread,
        match=match,
    )


def _read_id_list(
    spec: FootprintSpec, id_width: int | None
) -> tuple[pd.Series, np.ndarray, InputRecord]:
    path = spec.served_ids
    assert path is not None
    role = f"served ids of footprint '{spec.name}'"
    if path.suffix.lower() in (".csv", ".tsv", ".parquet", ".pq"):
        probe = read_table(path, id_column=spec.served_ids_column or "__none__", role=role)
        column = spec.served_ids_column or str(probe.columns[0])
        if column not in probe.columns:
            raise InputError(
                f"{role} file '{path}' has no column {column!r}; its columns are {list(probe.columns)}"
            )
        table, digest = read_hashed(
            path, lambda: read_table(path, id_column=column, role=role), role=role
        )
        values = table[column]
    else:
        if not path.exists():
            raise InputError(f"{role} file '{path}' was not found; check the path in the spec")
        payload = path.read_bytes()  # read once: the digest is of these very bytes
        digest = hashlib.sha256(payload).hexdigest()
        try:
            lines = payload.decode("utf-8-sig").splitlines()
        except UnicodeDecodeError:
            raise InputError(f"{role} file '{path}' is not a UTF-8 text file") from None
        values = pd.Series([ln.strip() or None for ln in lines], dtype=object)
    listed = ids_as_text(values, width=id_width, where=f"{role} file '{path}'")
    rows = np.arange(1, len(listed) + 1)
    record = InputRecord(f"served_ids:{spec.name}", str(path), digest, len(listed))
    return listed.reset_index(drop=True), rows, record


def _parse_flags(values: pd.Series, column: str) -> tuple[np.ndarray, int]:
    """Read a yes/no column; blanks count as not served and are counted."""
    if pd.api.types.is_bool_dtype(values.dtype):
        return values.fillna(False).to_numpy(dtype=bool), int(values.isna().sum())
    text = values.map(
        lambda v: (
            "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip().lower()
        )
    )
    text = text.map(lambda v: v[:-2] if v.endswith(".0") else v)
    unknown = ~text.isin(_TRUE | _FALSE)
    if unknown.any():
        first = values[unknown].iloc[0]
        raise InputError(
            f"served_column {column!r} has {int(unknown.sum())} value(s) that are not yes/no, "
            f"e.g. {first!r}; use 1/0, true/false or yes/no"
        )
    blanks = int((text == "").sum())
    return text.isin(_TRUE).to_numpy(), blanks
