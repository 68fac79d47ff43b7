"""The study area: the region within which coverage is compared.

A same-day zone drawn around a city is compared within that city, a lender's footprint
within its market. ``[study_area]`` names that region as a polygon layer (an area is inside
when its representative point lies in the polygons, or when the polygons cover at least
``min_share`` of its land), a list of area ids, GEOID prefixes (state + county codes,
say), or a distance from the footprint (an area is inside when its representative point
lies within that distance of the footprint). :func:`apply_study_area` keeps the areas
inside for every later stage, lists the others in the exclusions (source ``study_area``)
and returns their geometry, so the map can draw them greyed; without ``[study_area]`` the
audit runs over every analysed area, as before.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, replace
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .errors import InputError
from .footprint import Footprint
from .inputs import AreaInputs, InputRecord, ids_as_text, read_hashed, read_layer, read_table
from .spec import StudyAreaSpec

#: Exclusion reason of areas outside the study area.
OUTSIDE_REASON = "outside the study area"


@dataclass(frozen=True)
class StudyArea:
    """Which analysed areas lie inside the study area.

    Attributes
    ----------
    kind : str
        "polygons", "ids", "prefixes" or "within".
    name : str
    inside : numpy.ndarray of bool
        One flag per area of the frame it was computed on.
    population_inside, population_outside : float
    rule : str or None
        For polygons: "point" (representative point) or "share" (covered share of land).
    min_share : float or None
        For the "share" rule: the share of an area's land that must be covered.
    within_m : float or None
        For "within": the distance from the footprint, in metres.
    prefixes : tuple of str or None
    listed_ids : int or None
        For "ids": how many ids were listed; ``unmatched_ids`` of them match no area.
    unmatched_ids : int or None
    """

    kind: str
    name: str
    inside: np.ndarray
    population_inside: float
    population_outside: float
    rule: str | None = None
    min_share: float | None = None
    within_m: float | None = None
    prefixes: tuple[str, ...] | None = None
    listed_ids: int | None = None
    unmatched_ids: int | None = None

    @property
    def areas_inside(self) -> int:
        """Number of areas inside."""
        return int(self.inside.sum())

    @property
    def areas_outside(self) -> int:
        """Number of areas outside."""
        return int((~self.inside).sum())

    def to_dict(self) -> dict[str, Any]:
        """Plain data for summary.json's ``study_area`` section."""
        out: dict[str, Any] = {
            "kind": self.kind,
            "name": self.name,
            "areas_inside": self.areas_inside,
            "areas_outside": self.areas_outside,
            "population_inside": float(self.population_inside),
            "population_outside": float(self.population_outside),
        }
        if self.kind == "polygons":
            out["rule"] = (
                "representative point inside"
                if self.rule == "point"
                else "covered share of land at least min_share"
            )
            if self.rule == "share":
                out["min_share"] = self.min_share
        if self.within_m is not None:
            out["within_m"] = float(self.within_m)
        if self.prefixes is not None:
            out["prefixes"] = list(self.prefixes)
        if self.listed_ids is not None:
            out["listed_ids"] = self.listed_ids
            out["unmatched_ids"] = self.unmatched_ids
        return out


def inside_by_polygons(
    geoms: np.ndarray, polygons: Any, *, rule: str, min_share: float = 0.5
) -> np.ndarray:
    """Flag the areas inside ``polygons`` by representative point or by covered share.

    Parameters
    ----------
    geoms : numpy.ndarray of shapely geometries
        The areas, in the same CRS as ``polygons``.
    polygons : shapely geometry
        The dissolved study-area polygons.
    rule : {"point", "share"}
        "point": inside when the representative point lies in (or on) the polygons;
        "share": inside when the polygons cover at least ``min_share`` of the area's land.
    min_share : float
        The share for the "share" rule (an area covered exactly ``min_share`` is inside).
    """
    shapely.prepare(polygons)
    if rule == "point":
        points = shapely.point_on_surface(geoms)
        return np.asarray(shapely.intersects(polygons, points), dtype=bool)
    land = shapely.area(geoms)
    covered = shapely.area(shapely.intersection(geoms, polygons))
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(land > 0, covered / land, 0.0)
    # A relative tolerance so that an area covered exactly min_share is not lost to rounding.
    return np.asarray(share >= min_share * (1 - 1e-9), dtype=bool)


def inside_within(geoms: np.ndarray, footprint_geometry: Any, distance_m: float) -> np.ndarray:
    """Flag the areas whose representative point lies within ``distance_m`` of the footprint."""
    points = shapely.point_on_surface(geoms)
    if footprint_geometry is None or shapely.is_empty(footprint_geometry):
        return np.zeros(len(geoms), dtype=bool)
    return np.asarray(shapely.dwithin(footprint_geometry, points, distance_m), dtype=bool)


def _polygon_layer(spec: StudyAreaSpec, crs: Any) -> tuple[Any, InputRecord]:
    assert spec.path is not None
    role = "study area"
    path = spec.path
    layer, digest = read_hashed(
        path, lambda: read_layer(path, layer=spec.layer, role=role), role=role
    )
    if layer.crs is None:
        if spec.crs is None:
            raise InputError(
                f"study area file '{spec.path}' has no CRS; set crs in [study_area] "
                '(e.g. crs = "EPSG:4269")'
            )
        layer = layer.set_crs(spec.crs)
    geoms = np.asarray(layer.to_crs(crs).geometry.array, dtype=object)
    geoms = geoms[~(shapely.is_missing(geoms) | shapely.is_empty(geoms))]
    geoms = shapely.make_valid(geoms)
    polys = geoms[np.isin(shapely.get_type_id(geoms), (3, 6, 7))]
    if polys.size == 0:
        raise InputError(
            f"study area file '{spec.path}' holds no polygons; give the region's boundary "
            "(a polygon layer), a list of ids, prefixes or within"
        )
    record = InputRecord(
        "study_area",
        str(spec.path),
        digest,
        len(layer),
        layer.crs.to_string(),
        spec.layer,
    )
    return shapely.union_all(polys), record


def _listed_ids(
    spec: StudyAreaSpec, id_width: int | None
) -> tuple[pd.Series, list[InputRecord], str]:
    if spec.ids is not None:
        values = pd.Series(list(spec.ids), dtype=object)
        return ids_as_text(values, width=id_width, where="[study_area] ids"), [], "[study_area] ids"
    assert spec.path is not None
    path = spec.path
    where = f"study area file '{path}'"
    if path.suffix.lower() == ".txt":
        if not path.exists():
            raise InputError(f"{where} was not found; check the path in the spec")
        payload = path.read_bytes()  # read once: the digest is of these very bytes
        digest = hashlib.sha256(payload).hexdigest()
        lines = payload.decode("utf-8-sig").splitlines()
        values = pd.Series([ln.strip() or None for ln in lines], dtype=object)
    else:
        probe = read_table(path, id_column=spec.ids_column or "__none__", role="study area")
        column = spec.ids_column or str(probe.columns[0])
        if column not in probe.columns:
            raise InputError(
                f"{where} has no column {column!r}; its columns are {list(probe.columns)}; "
                "set ids_column in [study_area]"
            )
        table, digest = read_hashed(
            path,
            lambda: read_table(path, id_column=column, role="study area"),
            role="study area",
        )
        values = table[column]
    listed = ids_as_text(values, width=id_width, where=where).reset_index(drop=True)
    record = InputRecord("study_area", str(path), digest, len(listed))
    return listed, [record], where


def apply_study_area(
    spec: StudyAreaSpec,
    inputs: AreaInputs,
    footprint: Footprint,
    *,
    id_width: int | None = None,
) -> tuple[AreaInputs, StudyArea, gpd.GeoSeries]:
    """Keep the areas inside the study area.

    Parameters
    ----------
    spec : StudyAreaSpec
    inputs : AreaInputs
        The analysed areas (analysis CRS); not modified.
    footprint : Footprint
        The audited footprint (for ``within``).
    id_width : int, optional
        Zero-pad listed ids to this width (as for the areas).

    Returns
    -------
    inputs : AreaInputs
        A copy holding only the areas inside; the areas outside are added to its
        exclusions (source ``study_area``) and listed ids that match no area too.
    study_area : StudyArea
    outside : geopandas.GeoSeries
        Geometry of the areas outside, for the map.

    Raises
    ------
    InputError
        When the study area holds no analysed area, or its file cannot be used.
    """
    frame = inputs.frame
    geoms = np.asarray(frame.geometry.array, dtype=object)
    ids = frame[inputs.id_column].astype(str)
    extra: dict[str, Any] = {}
    where = "[study_area]"
    if spec.kind == "polygons":
        polygons, record = _polygon_layer(spec, inputs.analysis_crs)
        inputs.inputs.append(record)
        inside = inside_by_polygons(geoms, polygons, rule=spec.rule, min_share=spec.min_share)
        extra = {"rule": spec.rule, "min_share": spec.min_share if spec.rule == "share" else None}
        where = f"study area file '{spec.path}'"
    elif spec.kind == "within":
        assert spec.within_m is not None
        inside = inside_within(geoms, footprint.geometry, spec.within_m)
        extra = {"within_m": spec.within_m}
        where = f"[study_area] within = {spec.within_m:g} m of the footprint"
    elif spec.kind == "prefixes":
        assert spec.prefixes is not None
        inside = ids.str.startswith(tuple(spec.prefixes)).to_numpy()
        extra = {"prefixes": spec.prefixes}
        where = f"[study_area] prefixes {list(spec.prefixes)}"
    else:
        listed, records, where = _listed_ids(spec, id_width)
        inputs.inputs.extend(records)
        missing = listed.isna().to_numpy()
        known = listed.isin(set(ids)).to_numpy()
        rows = np.arange(1, len(listed) + 1)
        inputs.exclusions.add(
            "study_area", rows[missing], [None] * int(missing.sum()), "missing id"
        )
        unknown = ~known & ~missing
        inputs.exclusions.add(
            "study_area",
            rows[unknown],
            listed[unknown],
            "listed id is not an analysed area of the areas file",
        )
        inside = ids.isin(set(listed[known])).to_numpy()
        extra = {"listed_ids": int(len(listed)), "unmatched_ids": int(unknown.sum())}
    inside = np.asarray(inside, dtype=bool)
    if not inside.any():
        raise InputError(
            f"{where}: no analysed area lies inside the study area; check its CRS, ids or "
            "distance against the areas file"
        )
    outside_rows = frame.loc[~inside]
    inputs.exclusions.add(
        "study_area",
        outside_rows["source_row"] if "source_row" in outside_rows else [None] * len(outside_rows),
        outside_rows[inputs.id_column],
        OUTSIDE_REASON,
    )
    population = frame["population"].to_numpy(dtype=float)
    result = StudyArea(
        kind=spec.kind,
        name=spec.name,
        inside=inside,
        population_inside=float(np.nansum(population[inside])),
        population_outside=float(np.nansum(population[~inside])),
        **extra,
    )
    kept = replace(inputs, frame=frame.loc[inside].reset_index(drop=True))
    outside = gpd.GeoSeries(geoms[~inside], crs=frame.crs)
    return kept, result, outside
