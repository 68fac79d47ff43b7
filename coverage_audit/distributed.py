"""Distributed coverage: covered fractions for more areas than one machine holds, with dask.

Takes the areas (a GeoDataFrame or GeoSeries, a dask-geopandas GeoDataFrame, or the path of
a GeoParquet file or dataset folder or of a GeoPackage, read in partitions) in a projected
CRS, and the disjoint pieces of a footprint (:func:`~coverage_audit.footprint.cut_pieces`),
and gives each area's covered fraction in the areas' own row order, equal to
:func:`~coverage_audit.coverage.covered_fraction` on the same data. The areas are cut into
spatially compact partitions (along a Hilbert curve, or in row chunks); each partition is
sent only the footprint pieces that meet its envelope, so a worker receives the part of
the footprint near its areas rather than the whole, and computes its fractions with ``covered_fraction`` on dask's local threaded
scheduler or on the cluster of a ``dask.distributed.Client``. dask and dask-geopandas are
the optional extra ``distributed`` and are imported only when a function here runs.
"""

from __future__ import annotations

import contextlib
import math
import os
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import ModuleType
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from ._util import clean_number
from .coverage import covered_fraction
from .errors import AnalysisError, InputError, MissingExtraError, SpecError
from .footprint import Footprint
from .inputs import PARQUET_SUFFIXES

if TYPE_CHECKING:  # pragma: no cover - names for annotations only
    import dask_geopandas

#: Ways of cutting the areas into partitions: along a Hilbert curve through the areas'
#: bounding-box centres (compact partitions whatever the file order), or in row chunks of
#: the input order (no sort; compact only when the file is already spatially ordered, as
#: tracts sorted by GEOID are, county by county).
PARTITIONINGS = ("hilbert", "rows")
#: Areas per partition when ``npartitions`` is not given: large enough that scheduling
#: overhead stays small next to the intersections, small enough that a partition's
#: envelope, and so the footprint it is sent, stays local.
AREAS_PER_PARTITION = 25_000
#: Order of the Hilbert curve (2**16 cells a side), as dask-geopandas' spatial_shuffle.
HILBERT_LEVEL = 16
#: Sort key of null or empty areas: after every point of a level-16 curve (< 2**32).
_NULL_KEY = np.uint64(2**32)
#: Suffixes read as OGR layers in ranges of features (formats with random access to
#: features); GeoParquet is read by row groups (inputs.PARQUET_SUFFIXES, or a folder).
OGR_SUFFIXES = (".gpkg", ".fgb", ".shp")
INSTALL_HINT = 'pip install -e ".[distributed]"'

# Bookkeeping columns carried through the shuffle: the input partition and row of each
# area (its place in the input order) and, for dask input, its index value.
_PART, _ROW, _INDEX, _KEY, _WKB = "__part", "__row", "__index", "__hilbert", "__wkb"


@dataclass(frozen=True, eq=False)
class DistributedCoverage:
    """Covered fractions computed partition by partition, with how the work was split.

    Attributes
    ----------
    fraction : numpy.ndarray
        Covered fraction of each area, in the input's row order.
    index : pandas.Index
        The input's index (row positions 0..n-1 for a file).
    partitioning : str
        One of :data:`PARTITIONINGS`.
    scheduler : str
        ``"local"`` (dask's default scheduler in this process) or ``"distributed"``
        (a ``dask.distributed.Client``).
    pieces : int
        Footprint pieces in all.
    areas_per_partition, pieces_per_partition : numpy.ndarray
        Areas in each partition and footprint pieces sent to it.
    """

    fraction: np.ndarray
    index: pd.Index
    partitioning: str
    scheduler: str
    pieces: int
    areas_per_partition: np.ndarray
    pieces_per_partition: np.ndarray

    def to_series(self) -> pd.Series:
        """Return the fractions as a Series named ``covered_fraction`` on the input's index."""
        return pd.Series(self.fraction, index=self.index, name="covered_fraction")

    def to_dict(self) -> dict[str, Any]:
        """Describe the run for manifest.json (the fractions themselves go to areas.csv).

        ``pieces_shipped`` counts a piece once for every partition it was sent to, so it
        exceeds ``pieces`` where pieces straddle partition envelopes;
        ``max_share_of_footprint`` is the largest share of all pieces one partition got.
        """
        areas = self.areas_per_partition
        sent = self.pieces_per_partition
        return {
            "areas": int(self.fraction.size),
            "partitions": int(areas.size),
            "partitioning": self.partitioning,
            "scheduler": self.scheduler,
            "pieces": int(self.pieces),
            "pieces_shipped": int(sent.sum()),
            "pieces_per_partition_max": int(sent.max()) if sent.size else 0,
            "max_share_of_footprint": clean_number(
                float(sent.max()) / self.pieces if sent.size and self.pieces else None
            ),
            "areas_per_partition_min": int(areas.min()) if areas.size else 0,
            "areas_per_partition_max": int(areas.max()) if areas.size else 0,
        }


def covered_fraction_distributed(
    areas: gpd.GeoDataFrame | gpd.GeoSeries | dask_geopandas.GeoDataFrame | str | os.PathLike,
    pieces: np.ndarray | Sequence[Any] | Footprint,
    *,
    npartitions: int | None = None,
    client: Any = None,
    partitioning: str = "hilbert",
    layer: str | None = None,
) -> np.ndarray:
    """Return area(area ∩ footprint) / area(area) for each area, computed with dask.

    The same numbers as :func:`~coverage_audit.coverage.covered_fraction` (to rounding of
    the last bits), for areas that need not fit in one process. See
    :func:`distributed_coverage` for the parameters; this returns its ``fraction``.

    Returns
    -------
    numpy.ndarray
        Fractions in [0, 1] in the areas' row order; 0 for null, empty or zero-size areas.
    """
    return distributed_coverage(
        areas,
        pieces,
        npartitions=npartitions,
        client=client,
        partitioning=partitioning,
        layer=layer,
    ).fraction


def distributed_coverage(
    areas: gpd.GeoDataFrame | gpd.GeoSeries | dask_geopandas.GeoDataFrame | str | os.PathLike,
    pieces: np.ndarray | Sequence[Any] | Footprint,
    *,
    npartitions: int | None = None,
    client: Any = None,
    partitioning: str = "hilbert",
    layer: str | None = None,
) -> DistributedCoverage:
    """Compute covered fractions partition by partition and report how the work was split.

    Parameters
    ----------
    areas : GeoDataFrame, GeoSeries, dask_geopandas.GeoDataFrame, str or path
        Areas in a projected CRS (the analysis CRS). A path is read in partitions:
        GeoParquet (``.parquet``, ``.geoparquet``, ``.pq``, or a folder of Parquet files)
        by row groups, GeoPackage, FlatGeobuf or Shapefile by ranges of features.
    pieces : numpy.ndarray of shapely polygons, or Footprint
        Disjoint pieces of the dissolved footprint in the areas' CRS, as made by
        :func:`~coverage_audit.footprint.cut_pieces`; a polygons or points
        :class:`~coverage_audit.footprint.Footprint` gives its own pieces and CRS.
    npartitions : int, optional
        Partitions to cut the areas into. By default one per
        :data:`AREAS_PER_PARTITION` areas and at least one per worker thread; a dask
        GeoDataFrame cut by ``"rows"`` keeps its own partitions.
    client : dask.distributed.Client, optional
        Run on this client's cluster; by default on dask's default scheduler (threads in
        this process, or the current client if one is set as default).
    partitioning : {"hilbert", "rows"}
        ``"hilbert"`` sorts the areas along a Hilbert curve through their bounding-box
        centres (a dask shuffle for dask and file input) so that each partition is
        compact; ``"rows"`` keeps the input order in chunks.
    layer : str, optional
        Layer of a GeoPackage (default: its first layer).

    Returns
    -------
    DistributedCoverage

    Raises
    ------
    MissingExtraError
        When dask or dask-geopandas is not installed.
    InputError
        When the areas have no CRS or a geographic one, a file is missing, of an unknown
        kind or unreadable, the footprint's CRS differs from the areas', or the pieces are
        not polygons.
    SpecError
        When ``npartitions``, ``partitioning``, ``layer`` or ``client`` is not usable.

    Notes
    -----
    An area meets a footprint piece only if the piece meets the envelope of the area's
    partition, so each partition gets every piece its areas meet and
    ``covered_fraction`` finds the same area-piece pairs as on the whole; because the
    pieces are disjoint each area's covered part is still their sum. Pieces keep their
    relative order, so the sums run in the same order as on one machine. Each area's
    place in the input is carried through the shuffle as (input partition, row within
    it) and the results are put back in that order.
    """
    dask, dask_geopandas = _import_dask()
    _check_options(npartitions, partitioning)
    backend = _backend(client, dask)
    pieces_array, footprint_crs = _check_pieces(pieces)
    with backend.active():
        frame, kind, total, source = _open_areas(areas, layer, dask_geopandas)
        crs = _check_crs(frame.crs, source)
        if footprint_crs is not None and not CRS(footprint_crs).equals(crs, ignore_axis_order=True):
            raise InputError(
                f"the footprint is in {CRS(footprint_crs).to_string()} and {source} in "
                f"{crs.to_string()}; reproject one to the other's CRS (GeoDataFrame.to_crs)"
            )
        if kind == "memory":
            k = npartitions or _default_partitions(len(frame), backend.threads())
            chunks, bounds, positions = _memory_partitions(frame, k, partitioning)
            selected = _pieces_per_partition(pieces_array, bounds)
            own = backend.put(_pack_pieces(pieces_array, selected))
            values = backend.map(_chunk_task, backend.put(backend.pack_areas(chunks)), own)
            fraction = np.zeros(len(frame), dtype=float)
            for rows, part_values in zip(positions, values, strict=True):
                fraction[rows] = part_values
            index, sizes = frame.index, [rows.size for rows in positions]
        else:
            parts = _dask_partitions(frame, kind, npartitions, total, partitioning, backend)
            bounds = np.array(backend.map(_frame_bounds, parts, None), dtype=float).reshape(-1, 4)
            selected = _pieces_per_partition(pieces_array, bounds)
            own = backend.put(_pack_pieces(pieces_array, selected))
            results = backend.map(_frame_task, parts, own)
            fraction, index = _assemble(results, frame.index if kind == "dask" else None)
            sizes = [r[0].size for r in results]
    return DistributedCoverage(
        fraction=fraction,
        index=index,
        partitioning=partitioning,
        scheduler=backend.name,
        pieces=int(pieces_array.size),
        areas_per_partition=np.asarray(sizes, dtype=np.int64),
        pieces_per_partition=np.array([s.size for s in selected], dtype=np.int64),
    )


def _open_areas(
    areas: Any, layer: str | None, dask_geopandas: ModuleType
) -> tuple[Any, str, int | None, str]:
    """Return the areas' frame, kind ("memory", "dask", "file"), rows if known, message name."""
    if isinstance(areas, (str, os.PathLike)):
        frame, total = _read_partitions(Path(areas), layer, dask_geopandas)
        return frame, "file", total, f"the areas file '{areas}'"
    if isinstance(areas, (dask_geopandas.GeoDataFrame, gpd.GeoDataFrame, gpd.GeoSeries)):
        if layer is not None:
            raise SpecError("layer applies only when the areas are a file path; drop it")
        if isinstance(areas, dask_geopandas.GeoDataFrame):
            return areas, "dask", None, "the areas"
        return areas, "memory", len(areas), "the areas"
    raise InputError(
        f"areas must be a GeoDataFrame, a dask_geopandas.GeoDataFrame or the path of "
        f"a GeoParquet or GeoPackage file, not {type(areas).__name__}"
    )


# --- optional imports, checks ---------------------------------------------------------------


def _import_dask() -> tuple[ModuleType, ModuleType]:
    """Import dask and dask-geopandas, or say how to install them (geopandas' explore.py)."""
    try:
        import dask
        import dask.dataframe  # noqa: F401  (fails without the dataframe extra's packages)
        import dask_geopandas
    except ImportError as exc:
        raise MissingExtraError(
            "distributed coverage needs the optional packages dask and dask-geopandas, which "
            f"could not be imported ({exc}); install them with {INSTALL_HINT} in the project "
            'folder, or pip install "coverage_audit[distributed]"'
        ) from None
    return dask, dask_geopandas


def _check_options(npartitions: int | None, partitioning: str) -> None:
    if partitioning not in PARTITIONINGS:
        raise SpecError(
            f'partitioning was "{partitioning}" but is expected to be one of {list(PARTITIONINGS)}'
        )
    if npartitions is not None and (
        isinstance(npartitions, bool) or not isinstance(npartitions, (int, np.integer))
    ):
        raise SpecError(f"npartitions must be a whole number of partitions, not {npartitions!r}")
    if npartitions is not None and npartitions < 1:
        raise SpecError(f"npartitions must be at least 1, not {npartitions}")


def _check_crs(crs: Any, source: str) -> CRS:
    if crs is None:
        raise InputError(
            f"{source}: no coordinate reference system; set it (GeoDataFrame.set_crs, or "
            "save the file with its CRS) and project to an equal-area CRS"
        )
    crs = CRS(crs)
    if not crs.is_projected:
        raise InputError(
            f"{source}: CRS {crs.to_string()} is not projected (degrees); covered "
            "fractions need areas in metres: reproject to an equal-area CRS first, e.g. "
            "GeoDataFrame.to_crs('EPSG:5070') for the conterminous United States"
        )
    return crs


def _check_pieces(pieces: Any) -> tuple[np.ndarray, Any]:
    """Return the footprint pieces as an object array of polygons, and their CRS if known."""
    crs = None
    if isinstance(pieces, Footprint):
        if pieces.kind == "ids":
            raise InputError(
                f"footprint '{pieces.name}' is a list of served ids, which has no geometry to "
                "intersect; use coverage.footprint_fractions for it"
            )
        crs = pieces.crs
        pieces = pieces.pieces
    array = np.asarray(pieces, dtype=object).ravel()
    if array.size and not all(isinstance(p, shapely.Geometry) or p is None for p in array):
        bad = next(p for p in array if not (isinstance(p, shapely.Geometry) or p is None))
        raise InputError(
            f"footprint pieces must be shapely polygons, found {type(bad).__name__}; build them "
            "with footprint.cut_pieces"
        )
    array = array[~(shapely.is_missing(array) | shapely.is_empty(array))]
    types = shapely.get_type_id(array)
    wrong = ~np.isin(types, (3, 6))
    if wrong.any():
        raise InputError(
            f"footprint pieces must be polygons, found {int(wrong.sum())} other piece(s), the "
            f"first a {array[wrong][0].geom_type}; "
            "buffer points into reach circles and cut the dissolved footprint with "
            "footprint.cut_pieces"
        )
    return array, crs


def _default_partitions(n_areas: int, threads: int) -> int:
    return max(1, min(max(n_areas, 1), max(threads, math.ceil(n_areas / AREAS_PER_PARTITION))))


# --- schedulers -----------------------------------------------------------------------------


class _Local:
    """dask's default scheduler in this process: task arguments are passed by reference."""

    name = "local"

    def __init__(self, dask: ModuleType) -> None:
        self._dask = dask

    def active(self) -> contextlib.AbstractContextManager[None]:
        return contextlib.nullcontext()

    def threads(self) -> int:
        return os.cpu_count() or 1

    def put(self, values: list[Any]) -> list[Any]:
        return values

    def pack_areas(self, chunks: list[np.ndarray]) -> list[Any]:
        # Chunks are disjoint and only read: the threads can share them as they are.
        return chunks

    def persist(self, collection: Any) -> Any:
        return collection.persist()

    def compute(self, value: Any) -> Any:
        return self._dask.compute(value)[0]

    def materialise(self, delayed: list[Any]) -> list[Any]:
        return list(self._dask.persist(*delayed))

    def map(
        self, func: Callable[..., Any], first: list[Any], second: list[Any] | None
    ) -> list[Any]:
        task = self._dask.delayed(func, pure=False)
        if second is None:
            tasks = [task(a) for a in first]
        else:
            tasks = [task(a, b) for a, b in zip(first, second, strict=True)]
        return list(self._dask.compute(*tasks))


class _Cluster:
    """A dask.distributed Client: data scattered to workers, tasks mapped over futures."""

    name = "distributed"

    def __init__(self, client: Any) -> None:
        self._client = client

    @contextlib.contextmanager
    def active(self) -> Iterator[None]:
        # Collection methods that compute eagerly (set_index's divisions) use the current
        # client; make it this one even when another is the process default.
        with self._client.as_current():
            yield

    def threads(self) -> int:
        return max(1, sum(self._client.nthreads().values()))

    def put(self, values: list[Any]) -> list[Any]:
        # hash=False: equal pieces lists of two partitions stay separate objects, and no
        # time goes into hashing geometry.
        return list(self._client.scatter(values, hash=False)) if values else []

    def pack_areas(self, chunks: list[np.ndarray]) -> list[Any]:
        # Pickling shapely geometries one by one is slow (1.3 s for 85,000 areas here);
        # a WKB array pickles in 0.02 s and decodes on the worker in 0.14 s.
        return [_Packed(shapely.to_wkb(chunk)) for chunk in chunks]

    def persist(self, collection: Any) -> Any:
        return self._client.persist(collection)

    def compute(self, value: Any) -> Any:
        return self._client.compute(value).result()

    def materialise(self, delayed: list[Any]) -> list[Any]:
        return list(self._client.compute(delayed))

    def map(
        self, func: Callable[..., Any], first: list[Any], second: list[Any] | None
    ) -> list[Any]:
        if not first:
            return []
        futures = (
            self._client.map(func, first, pure=False)
            if second is None
            else self._client.map(func, first, second, pure=False)
        )
        return list(self._client.gather(futures))


@dataclass(frozen=True, eq=False)
class _Packed:
    """Geometries as WKB: cheap to pickle, and decoded into objects of the task's own."""

    wkb: np.ndarray

    def geometries(self) -> np.ndarray:
        return shapely.from_wkb(self.wkb)


def _unpack(value: Any) -> np.ndarray:
    return value.geometries() if isinstance(value, _Packed) else value


def _pack_pieces(pieces: np.ndarray, selected: list[np.ndarray]) -> list[_Packed]:
    """Each partition's pieces as WKB, decoded by its task into geometries of its own.

    covered_fraction prepares its pieces in place, and GEOS prepared geometries build their
    indexes lazily and not thread-safely: two threads preparing or using one shared piece
    at once can crash the process. WKB keeps every coordinate bit for bit.
    """
    return [_Packed(shapely.to_wkb(pieces[s])) for s in selected]


def _backend(client: Any, dask: ModuleType) -> _Local | _Cluster:
    if client is None:
        return _Local(dask)
    try:
        from distributed import Client
    except ImportError:
        raise MissingExtraError(
            f"a client needs the package distributed; install it with {INSTALL_HINT}"
        ) from None
    if not isinstance(client, Client):
        raise SpecError(
            f"client must be a dask.distributed.Client, not {type(client).__name__}; leave it "
            "out to run on dask's local scheduler"
        )
    return _Cluster(client)


# --- partitions -----------------------------------------------------------------------------


def _hilbert_keys(geoms: np.ndarray, total_bounds: np.ndarray) -> np.ndarray:
    """Return the Hilbert-curve distance of each area's bounding-box centre; nulls sort last."""
    ok = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    keys = np.full(geoms.size, _NULL_KEY, dtype=np.uint64)
    if ok.any() and np.all(np.isfinite(total_bounds)):
        # geopandas' curve (the one dask-geopandas' spatial_shuffle sorts by); it refuses
        # null geometries, which have no place on the curve.
        keys[ok] = (
            gpd.GeoSeries(geoms[ok])
            .hilbert_distance(total_bounds=total_bounds, level=HILBERT_LEVEL)
            .to_numpy()
            .astype(np.uint64)
        )
    return keys


def _total_bounds(bounds: np.ndarray) -> np.ndarray:
    """Return the envelope of many (xmin, ymin, xmax, ymax) rows; NaN rows (null areas) are ignored."""
    if bounds.size == 0:
        return np.full(4, np.nan)
    # fmin/fmax skip NaN without the all-NaN warnings of nanmin.
    low = np.fmin.reduce(bounds[:, :2], axis=0)
    high = np.fmax.reduce(bounds[:, 2:], axis=0)
    return np.concatenate([low, high])


def _memory_partitions(
    frame: gpd.GeoDataFrame | gpd.GeoSeries, k: int, partitioning: str
) -> tuple[list[np.ndarray], np.ndarray, list[np.ndarray]]:
    """Cut in-memory areas into ``k`` chunks: geometry chunks, envelopes, input rows of each."""
    geoms = np.asarray(frame.geometry.array, dtype=object)
    bounds = shapely.bounds(geoms)
    if partitioning == "hilbert":
        order = np.argsort(_hilbert_keys(geoms, _total_bounds(bounds)), kind="stable")
    else:
        order = np.arange(geoms.size)
    positions = [p for p in np.array_split(order, min(k, max(geoms.size, 1))) if p.size]
    envelopes = np.array([_total_bounds(bounds[p]) for p in positions]).reshape(-1, 4)
    return [geoms[p] for p in positions], envelopes, positions


def _pieces_per_partition(pieces: np.ndarray, bounds: np.ndarray) -> list[np.ndarray]:
    """Return the indices (ascending) of the pieces that meet each partition's envelope."""
    k = bounds.shape[0]
    if pieces.size == 0 or k == 0:
        return [np.array([], dtype=np.int64) for _ in range(k)]
    finite = np.flatnonzero(np.all(np.isfinite(bounds), axis=1))
    boxes = shapely.box(*bounds[finite].T)
    tree = shapely.STRtree(pieces)
    box_idx, piece_idx = tree.query(boxes, predicate="intersects")
    order = np.lexsort((piece_idx, box_idx))
    box_idx, piece_idx = box_idx[order], piece_idx[order]
    groups = np.split(piece_idx, np.searchsorted(box_idx, np.arange(1, finite.size)))
    selected = [np.array([], dtype=np.int64) for _ in range(k)]
    for slot, group in zip(finite, groups, strict=True):
        selected[slot] = group
    return selected


def _read_partitions(path: Path, layer: str | None, dask_geopandas: ModuleType) -> tuple[Any, int]:
    """Open a GeoParquet or OGR file as a dask GeoDataFrame of its geometry; count its rows."""
    if not path.exists():
        raise InputError(f"areas file '{path}' was not found; check the path")
    suffix = path.suffix.lower()
    parquet = suffix in PARQUET_SUFFIXES or (
        path.is_dir() and any(p.suffix.lower() in PARQUET_SUFFIXES for p in path.iterdir())
    )
    if not parquet and (path.is_dir() or suffix not in OGR_SUFFIXES):
        raise InputError(
            f"areas file '{path}' is of a kind that cannot be read in partitions; use "
            f"GeoParquet ({', '.join(PARQUET_SUFFIXES)}, or a folder of them) or "
            f"{', '.join(OGR_SUFFIXES)}"
        )
    try:
        if parquet:
            if layer is not None:
                raise SpecError(f"layer applies to GeoPackage files, not to '{path}'; drop it")
            import pyarrow.dataset

            rows = int(pyarrow.dataset.dataset(path, format="parquet").count_rows())
            frame = dask_geopandas.read_parquet(path)
            frame = frame[[frame.geometry.name]]
        else:
            import pyogrio

            if layer is not None:
                available = [str(name) for name in pyogrio.list_layers(path)[:, 0]]
                if layer not in available:
                    raise InputError(
                        f"areas file '{path}' has no layer \"{layer}\"; its layers are {available}"
                    )
            rows = int(pyogrio.read_info(path, layer=layer)["features"])
            if rows < 0:  # the driver cannot count without reading; read once to count
                rows = len(
                    pyogrio.read_dataframe(path, layer=layer, columns=[], read_geometry=False)
                )
            # Feature ranges of the default size; the shuffle or repartition fixes the count.
            chunks = max(1, math.ceil(max(rows, 1) / AREAS_PER_PARTITION))
            frame = dask_geopandas.read_file(
                path, npartitions=chunks, layer=layer, columns=["geometry"]
            )
    except (InputError, SpecError):
        raise
    except Exception as exc:  # pyarrow, GDAL and dask raise many kinds; all mean "unreadable"
        reason = " ".join(str(exc).split())
        raise InputError(
            f"areas file '{path}' could not be read as a spatial layer in partitions ({reason}); "
            "use GeoParquet with geo metadata, or GeoPackage"
        ) from None
    return frame, rows


def _with_positions(
    frame: gpd.GeoDataFrame, keep_index: bool, partition_info: Any = None
) -> gpd.GeoDataFrame:
    """Keep only the geometry and add each row's input partition and row within it."""
    number = 0 if partition_info is None else int(partition_info["number"])
    n = len(frame)
    columns: dict[str, Any] = {
        _PART: np.full(n, number, dtype=np.int64),
        _ROW: np.arange(n, dtype=np.int64),
    }
    if keep_index:
        columns[_INDEX] = frame.index.to_numpy()
    return gpd.GeoDataFrame(
        columns, geometry=frame.geometry.values, crs=frame.crs, index=frame.index
    )


def _with_hilbert(frame: gpd.GeoDataFrame, total_bounds: np.ndarray) -> pd.DataFrame:
    """Add each area's Hilbert key and carry its geometry as WKB through the shuffle.

    distributed's peer-to-peer shuffle moves partitions as Arrow tables, which turns a
    geometry column into bare WKB bytes that dask-geopandas then fails to restore (seen
    with dask 2026.8, dask-geopandas 0.5); a WKB column of our own travels either way and
    decodes to the same coordinates, bit for bit.
    """
    geoms = np.asarray(frame.geometry.array, dtype=object)
    out = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    out[_WKB] = shapely.to_wkb(geoms)
    out[_KEY] = _hilbert_keys(geoms, np.asarray(total_bounds, dtype=float))
    return out


def _dask_partitions(
    frame: Any,
    kind: str,
    npartitions: int | None,
    total: int | None,
    partitioning: str,
    backend: _Local | _Cluster,
) -> list[Any]:
    """Return handles (delayed objects or futures) of the partitions to compute, in memory."""
    keep_index = kind == "dask"
    positioned = frame.map_partitions(_with_positions, keep_index)
    if partitioning == "rows":
        if npartitions is None and kind == "file":
            npartitions = _default_partitions(int(total or 0), backend.threads())
        if npartitions is not None and npartitions != positioned.npartitions:
            positioned = positioned.repartition(npartitions=npartitions)
        return backend.materialise(positioned.to_delayed())
    # Persist once so that the bounds, the quantiles of the sort keys and the shuffle do
    # not each read the file again.
    positioned = backend.persist(positioned)
    k = npartitions or (
        _default_partitions(total, backend.threads())
        if total is not None
        else positioned.npartitions
    )
    total_bounds = np.asarray(backend.compute(positioned.total_bounds), dtype=float)
    keyed = positioned.map_partitions(_with_hilbert, total_bounds)
    shuffled = keyed.set_index(_KEY, npartitions=k, sorted=False)
    handles = backend.materialise(shuffled.to_delayed())
    del positioned
    return handles


def _assemble(results: list[Any], dask_index: Any) -> tuple[np.ndarray, pd.Index]:
    """Put partition results back in input order, from (input partition, row) of each area."""
    part = np.concatenate([r[1] for r in results]) if results else np.array([], np.int64)
    row = np.concatenate([r[2] for r in results]) if results else np.array([], np.int64)
    values = np.concatenate([r[0] for r in results]) if results else np.array([], float)
    n = part.size
    if n == 0:
        return values, pd.RangeIndex(0)
    counts = np.zeros(int(part.max()) + 1, dtype=np.int64)
    np.maximum.at(counts, part, row + 1)
    offsets = np.concatenate([[0], np.cumsum(counts)[:-1]])
    where = offsets[part] + row
    if where.max() >= n or np.bincount(where, minlength=n).max() != 1:
        # Every area must come back exactly once; anything else is a fault of the
        # partitioning (a partition lost or read twice), never a property of the data.
        raise AnalysisError(
            f"the partitions returned {n} results that do not cover each of the areas once; "
            "rerun with partitioning='rows', and report this with the input's partitions"
        )
    fraction = np.empty(n, dtype=float)
    fraction[where] = values
    if results[0][3] is None:
        return fraction, pd.RangeIndex(n)
    labels = np.empty(n, dtype=object)
    labels[where] = np.concatenate([r[3] for r in results])
    return fraction, pd.Index(labels, name=dask_index.name).astype(dask_index.dtype)


# --- tasks (run on workers; module-level so that they pickle by reference) ----------------


def _chunk_task(geoms: np.ndarray | _Packed, pieces: _Packed) -> np.ndarray:
    return covered_fraction(_unpack(geoms), _unpack(pieces))


def _frame_geometries(frame: pd.DataFrame) -> np.ndarray:
    if _WKB in frame.columns:
        return shapely.from_wkb(frame[_WKB].to_numpy(dtype=object))
    return np.asarray(frame.geometry.array, dtype=object)


def _frame_bounds(frame: pd.DataFrame) -> np.ndarray:
    return _total_bounds(shapely.bounds(_frame_geometries(frame)))


def _frame_task(
    frame: pd.DataFrame, pieces: _Packed
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
    geoms = _frame_geometries(frame)
    labels = frame[_INDEX].to_numpy() if _INDEX in frame.columns else None
    return (
        covered_fraction(geoms, _unpack(pieces)),
        frame[_PART].to_numpy(dtype=np.int64),
        frame[_ROW].to_numpy(dtype=np.int64),
        labels,
    )
