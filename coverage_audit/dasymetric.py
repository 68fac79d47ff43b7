"""Dasymetric apportionment: people placed on each area's settled land, when blocks are not at hand.

Takes the analysed areas, the footprint and the spec's ``[dasymetric]`` (a polygon layer
of settled land, or a land-cover raster with the cell values that count as settled) and
gives each area's ``covered_population_share`` = area(area ∩ mask ∩ footprint) /
area(area ∩ mask): its people are assumed to live only on its settled part, spread
evenly over it. This is the masked areal interpolation of Mennis (2003) and of PySAL's
tobler package (``masked_area_interpolate``), against which it is tested; without a mask
it reduces to areal weighting (tobler's ``area_interpolate``). Areas with no settled land
keep their areal covered fraction and are counted in the summary.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pyogrio
import shapely
from pyproj import CRS

from ._util import safe_ratio
from .coverage import covered_fraction
from .errors import InputError
from .inputs import PARQUET_SUFFIXES, InputRecord, sha256_file


@dataclass(frozen=True, eq=False)
class Apportioned:
    """Areas with counts summed from blocks and their block-based covered counts."""

    frame: gpd.GeoDataFrame
    covered: dict[str, np.ndarray]
    share: np.ndarray
    section: dict[str, Any]
    partitions: str = ""
    method: str = "blocks"


#: Raster suffixes read with rasterio; anything else is read as a polygon layer.
RASTER_SUFFIXES = (".tif", ".tiff", ".img", ".vrt")


def read_mask(path: Path, values: tuple[int, ...], crs: CRS, bounds: np.ndarray) -> Any:
    """Return the settled land as one (multi)polygon in ``crs``, clipped to ``bounds``.

    A raster is read in the window covering ``bounds`` (given in ``crs``); its cells
    whose value is one of ``values`` are turned into polygons (rasterio.features.shapes).
    """
    if not path.exists():
        raise InputError(f"mask file '{path}' was not found; check [dasymetric] mask")
    if path.suffix.lower() in RASTER_SUFFIXES:
        if not values:
            raise InputError(
                f"mask '{path}' is a raster: give [dasymetric] values, the cell values of "
                "settled land (for example [21, 22, 23, 24])"
            )
        return _raster_mask(path, values, crs, bounds)
    try:
        layer = (
            gpd.read_parquet(path)
            if path.suffix.lower() in PARQUET_SUFFIXES
            else pyogrio.read_dataframe(path)
        )
    except Exception as exc:
        raise InputError(f"mask file '{path}' could not be read ({exc})") from None
    if layer.crs is None:
        raise InputError(f"mask file '{path}' has no CRS; save it with its CRS")
    geoms = shapely.make_valid(np.asarray(layer.to_crs(crs).geometry.array, dtype=object))
    return shapely.union_all(geoms[~shapely.is_missing(geoms)])


def _raster_mask(path: Path, values: tuple[int, ...], crs: CRS, bounds: np.ndarray) -> Any:
    try:
        import rasterio
        import rasterio.features
        import rasterio.windows
    except ImportError:
        raise InputError(
            'a raster mask needs the package rasterio; install it with pip install -e ".[dasymetric]"'
        ) from None
    from pyproj import Transformer

    try:
        with rasterio.open(path) as src:
            if src.crs is None:
                raise InputError(f"mask raster '{path}' has no CRS")
            source_crs = CRS(src.crs.to_wkt())
            to_src = Transformer.from_crs(crs, source_crs, always_xy=True)
            box = to_src.transform_bounds(
                bounds[0], bounds[1], bounds[2], bounds[3], densify_pts=21
            )
            window = rasterio.windows.from_bounds(*box, transform=src.transform)
            window = window.round_offsets().round_lengths()
            window = window.intersection(rasterio.windows.Window(0, 0, src.width, src.height))
            band = src.read(1, window=window)
            transform = src.window_transform(window)
    except InputError:
        raise
    except Exception as exc:
        raise InputError(f"mask raster '{path}' could not be read ({exc})") from None
    settled = np.isin(band, values)
    shapes = [
        shapely.geometry.shape(geom)
        for geom, _ in rasterio.features.shapes(
            settled.astype(np.uint8), mask=settled, transform=transform
        )
    ]
    if not shapes:
        return shapely.Polygon()
    series = gpd.GeoSeries(shapes, crs=source_crs).to_crs(crs)
    return shapely.union_all(np.asarray(series.array, dtype=object))


def settled_fractions(
    areas: np.ndarray, mask: Any, pieces: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Return each area's covered share of its settled land, and its settled share of area.

    Where an area has no settled land the covered share is NaN (the caller decides).
    """
    shapely.prepare(mask)
    settled = shapely.intersection(areas, mask)
    size = shapely.area(areas)
    settled_size = shapely.area(settled)
    share = covered_fraction(settled, pieces)
    share = np.where(settled_size > 0, share, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        settled_share = np.where(size > 0, settled_size / np.where(size > 0, size, 1.0), 0.0)
    return share, settled_share


def apportion_dasymetric(
    spec: Any, inputs: Any, footprint: Any, frame: gpd.GeoDataFrame, *, record: bool = True
) -> Apportioned:
    """Covered people of each area on its settled land (see the module docstring).

    Returns an :class:`~coverage_audit.apportion.Apportioned` with ``method =
    "dasymetric"``: ``frame`` with ``covered_population_share``, ``settled_share`` and
    ``served`` (share at or above the threshold), and each group's covered counts. With
    ``record=False`` the mask is not added to the inputs again.
    """
    dspec = spec.dasymetric
    geoms = np.asarray(frame.geometry.array, dtype=object)
    areal = frame["covered_fraction"].to_numpy(dtype=float)
    bounds = np.asarray(frame.total_bounds, dtype=float)
    mask = read_mask(dspec.mask, dspec.values, CRS(inputs.analysis_crs), bounds)
    if shapely.is_empty(mask):
        raise InputError(
            f"mask '{dspec.mask}' has no settled land over the areas; check the file and "
            "[dasymetric] values"
        )
    if footprint.kind == "ids":
        share, settled_share = settled_fractions(geoms, mask, np.array([], dtype=object))
        share = np.where(np.isnan(share), np.nan, areal)
    else:
        share, settled_share = settled_fractions(geoms, mask, np.asarray(footprint.pieces))
    unsettled = np.isnan(share)
    if unsettled.all():
        raise InputError(
            f"mask '{dspec.mask}' has no settled land over the areas; check the file, its CRS "
            "and [dasymetric] values"
        )
    share = np.clip(np.where(unsettled, areal, share), 0.0, 1.0)
    out = frame.copy()
    out["settled_share"] = settled_share
    out["covered_population_share"] = share
    out["served"] = share >= spec.analysis.served_threshold
    covered = {g: out[g].to_numpy(dtype=float) * share for g in inputs.groups}
    if record:
        inputs.inputs.append(InputRecord("mask", str(dspec.mask), sha256_file(dspec.mask), 0))
    section = {
        "mask": dspec.mask.name,
        "mask_kind": "raster" if dspec.mask.suffix.lower() in RASTER_SUFFIXES else "polygons",
        "values": list(dspec.values),
        "areas_without_settled_land": int(unsettled.sum()),
        "settled_share_of_area": safe_ratio(
            float(shapely.area(shapely.intersection(shapely.union_all(geoms), mask))),
            float(shapely.area(geoms).sum()),
        ),
        "areal_rates": {
            g: safe_ratio(
                float((out[g].to_numpy(dtype=float) * areal).sum()),
                float(out[g].to_numpy(dtype=float).sum()),
            )
            for g in inputs.groups
        },
    }
    return Apportioned(
        frame=out, covered=covered, share=share, section=section, method="dasymetric"
    )
