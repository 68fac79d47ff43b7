"""Benchmark of block apportionment: local, dask local processes and a LocalCluster, same run.

Generates a fictional block layer nested in tracts (--blocks, default 200,000; 10 blocks a
tract; edges segmentized so blocks have about 30-80 vertices; tracts grouped into county
bands of growing size; fixed seed) county by county, so that memory stays bounded by one
county, with a footprint of buffered service points (as many per km2 at any size), and
prepares the blocks as GeoParquet partitioned by county (io.blocks.prepare_blocks). With
--cache DIR the generated layer is kept and reused (generation of 2 million blocks takes
about 5 minutes). Then it times, each once:

- baseline (named): engine "local" on the prepared dataset (county files in turn);
- dask on local processes (the engine's default without dask_scheduler);
- dask on a LocalCluster of 1 and of 2 worker processes x 1 thread (loopback only);
- unless --skip-one-file: engine "local" on one GeoParquet file read whole.

For each it prints the time, its ratio to the baseline, the peak resident memory above the
start (this process, and the worker processes' summed peak) and whether the per-area sums
equal the baseline's exactly. It then times each county partition alone and fits
time = a + b x blocks, to show the cost grows linearly, and projects the national
8,180,866 blocks (2020) on 1, 2, 8 and 32 workers from the fit. --blocks-crs EPSG:4269
stores the blocks in NAD83 longitude/latitude, as TIGER/Line does, so that every run
also projects them. Results: benchmarks/RESULTS_issue16.md.
Usage: python benchmarks/bench_blocks.py [--blocks 200000] [--counties 8] [--cache DIR]
       [--skip-cluster] [--skip-dask] [--skip-one-file] [--skip-partitions] [--blocks-crs CRS]
"""

from __future__ import annotations

import argparse
import logging
import tempfile
import time
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import shapely
from bench_distributed import MIB, PeakMemory, trim_memory
from pyproj import CRS

from coverage_audit.apportion import Task, combine, run_partitions
from coverage_audit.footprint import cut_pieces
from coverage_audit.io.blocks import BlockColumns, dataset_files, prepare_blocks
from coverage_audit.synthetic import FICTIONAL_CRS, demographics, nested_blocks, tessellation

NATIONAL_BLOCKS = 8_180_866  # 2020 census, all areas (REFERENCES.md)
PER_TRACT = 10


def build(n_blocks: int, counties: int, folder: Path, one_file: bool) -> tuple[Task, np.ndarray]:
    """Write the layer (cached in ``folder``); return the task settings and footprint pieces.

    The blocks are generated and written county by county (``sources/``), so that memory
    stays bounded by one county, then prepared (``prepared/``); with ``one_file`` the county
    files are also streamed into one ``blocks.parquet``. A finished folder is reused.
    """
    tracts = tessellation(n_blocks // PER_TRACT, seed=11, cell_size_m=1_500.0)
    # County bands of growing height (1, 2, ..., k shares), so partition sizes differ.
    rows = tracts["row"].to_numpy()
    shares = np.cumsum(np.arange(1, counties + 1)) / (counties * (counties + 1) / 2)
    cuts = np.rint(shares[:-1] * (rows.max() + 1))
    county = np.searchsorted(cuts, rows, side="right") * 2 + 1
    tracts["geoid"] = [f"99{c:03d}{g[5:]}" for c, g in zip(county, tracts["geoid"], strict=True)]
    demo = demographics(tracts, seed=12)
    counts = demo[["pop_total", "pop_white_nh", "pop_black_nh"]]
    x0, y0, x1, y1 = tracts.total_bounds
    sources = folder / "sources"
    done = folder / "DONE"
    if not done.exists():
        sources.mkdir(parents=True, exist_ok=True)
        for k, code in enumerate(np.unique(county)):
            mask = county == code
            part = nested_blocks(
                tracts[mask],
                counts[mask],
                seed=13 + k,
                per_tract=PER_TRACT,
                centre=((x0 + x1) / 2, (y0 + y1) / 2),
                decay_m=(x1 - x0) / 4,
                segment_m=40.0,
            )
            part.to_parquet(sources / f"county-{code:03d}.parquet", index=False)
            del part
        prepare_blocks(sorted(sources.glob("*.parquet")), folder / "prepared")
        done.touch()
    if one_file and not (folder / "blocks.parquet").exists():
        _concat(sorted(sources.glob("*.parquet")), folder / "blocks.parquet")
    # Footprint: buffered sites, as many per square km as at 200,000 blocks.
    rng = np.random.default_rng(14)
    n_sites = max(600, round(600 * n_blocks / 200_000))
    sites = shapely.points(rng.uniform(x0, x1, n_sites), rng.uniform(y0, y1, n_sites))
    pieces = cut_pieces(shapely.union_all(shapely.buffer(sites, 2_500.0, quad_segs=16)))
    task = Task(
        columns=BlockColumns(
            "GEOID20", "pop_total", (("white", "pop_white_nh"), ("black", "pop_black_nh"))
        ),
        area_ids=np.array(sorted(tracts["geoid"]), dtype=str),
        width=11,
        crs_wkt=CRS(FICTIONAL_CRS).to_wkt(),
        minority_of=1,
        served=None,
    )
    files = dataset_files(folder / "prepared")
    n = sum(pq.ParquetFile(f).metadata.num_rows for f in files)
    sample = gpd.read_parquet(files[0], columns=["geometry"])
    vertices = shapely.get_num_coordinates(np.asarray(sample.geometry.array))
    print(
        f"{n:,} blocks in {len(tracts):,} tracts and {len(files)} counties; vertices per "
        f"block (first county) median {int(np.median(vertices))}, 5-95% "
        f"{int(np.percentile(vertices, 5))}-{int(np.percentile(vertices, 95))}; "
        f"footprint {n_sites} sites, {pieces.size} pieces"
    )
    return task, pieces


def reproject(prepared: Path, crs: str) -> Path:
    """Return a copy of the prepared dataset stored in ``crs`` (made once, kept beside it)."""
    out = prepared.parent / f"prepared-{crs.replace(':', '')}"
    done = out / "DONE"
    if not done.exists():
        for f in dataset_files(prepared):
            target = out / f.relative_to(prepared)
            target.parent.mkdir(parents=True, exist_ok=True)
            frame = gpd.read_parquet(f).drop(columns=["bbox"], errors="ignore").to_crs(crs)
            frame.to_parquet(target, index=False, write_covering_bbox=True)
            del frame
        done.touch()
    return out


def _concat(files: list[Path], out: Path) -> None:
    """Stream GeoParquet files with one schema into one file (row groups appended)."""
    schema = pq.read_schema(files[0])
    with pq.ParquetWriter(out, schema) as writer:
        for f in files:
            writer.write_table(pq.read_table(f).cast(schema))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--blocks", type=int, default=200_000)
    parser.add_argument("--counties", type=int, default=8)
    parser.add_argument("--skip-cluster", action="store_true")
    parser.add_argument("--skip-dask", action="store_true", help="local engine only")
    parser.add_argument(
        "--skip-one-file", action="store_true", help="skip the run on one whole file"
    )
    parser.add_argument(
        "--blocks-crs",
        default=None,
        help="store the prepared blocks in this CRS (e.g. EPSG:4269, as TIGER/Line), so "
        "every run projects them to the analysis CRS",
    )
    parser.add_argument(
        "--skip-partitions", action="store_true", help="skip the per-partition timings"
    )
    parser.add_argument(
        "--cache", type=Path, default=None, help="folder kept between runs (default: temporary)"
    )
    args = parser.parse_args()
    logging.getLogger("distributed").setLevel(logging.ERROR)
    with tempfile.TemporaryDirectory() as tmp:
        folder = args.cache or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        t0 = time.perf_counter()
        with PeakMemory() as gen_mem:
            task, pieces = build(args.blocks, args.counties, folder, not args.skip_one_file)
        print(
            f"generated and prepared (or read from cache) in {time.perf_counter() - t0:.1f} s, "
            f"peak {(gen_mem.peak_main - gen_mem.start_main) / MIB:.0f} MiB\n",
            flush=True,
        )
        local = SimpleNamespace(engine="local", partitions=None, dask_scheduler=None)
        dask = SimpleNamespace(engine="dask", partitions=None, dask_scheduler=None)
        results: dict[str, tuple[float, float, float, bool]] = {}
        baseline: pd.DataFrame | None = None

        def run(label: str, path: Path, analysis: SimpleNamespace) -> None:
            nonlocal baseline
            trim_memory()
            with PeakMemory() as mem:
                start = time.perf_counter()
                parts, _ = run_partitions(path, task, pieces, analysis)
                elapsed = time.perf_counter() - start
            sums = combine(parts, 4)
            baseline = sums if baseline is None else baseline
            same = sums.equals(baseline)
            results[label] = (
                elapsed,
                (mem.peak_main - mem.start_main) / MIB,
                (mem.peak_children - mem.start_children) / MIB,
                same,
            )
            print(
                f"{label}: {elapsed:.1f} s, peak {results[label][1]:.0f} MiB here, "
                f"{results[label][2]:.0f} MiB workers, same sums {same}",
                flush=True,
            )

        # The baseline (named) is the path meant for large layers: the prepared dataset.
        prepared = folder / "prepared"
        if args.blocks_crs:
            prepared = reproject(prepared, args.blocks_crs)
        run("baseline: local, prepared dataset", prepared, local)
        if not args.skip_dask:
            run("dask, local processes", prepared, dask)
        if not (args.skip_cluster or args.skip_dask):
            from distributed import LocalCluster

            for workers in (1, 2):
                with LocalCluster(
                    n_workers=workers,
                    threads_per_worker=1,
                    processes=True,
                    dashboard_address=None,
                    host="127.0.0.1",
                    scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                ) as cluster:
                    on_cluster = SimpleNamespace(
                        engine="dask", partitions=None, dask_scheduler=cluster.scheduler_address
                    )
                    run(f"LocalCluster, {workers} worker(s)", prepared, on_cluster)
        if not args.skip_one_file:
            run("local, one file read whole", folder / "blocks.parquet", local)
        base = results["baseline: local, prepared dataset"][0]
        print(
            f"\n{'variant':34s} {'time s':>8s} {'ratio':>6s} {'peak MiB':>9s} {'workers MiB':>11s} same"
        )
        for label, (elapsed, peak, children, same) in results.items():
            print(
                f"{label:34s} {elapsed:8.2f} {elapsed / base:6.2f} {peak:9.0f} "
                f"{children:11.0f} {same}",
                flush=True,
            )
        if args.skip_partitions:
            return
        # Per-partition time against partition size (county files, one at a time, here).
        sizes, times = [], []
        for f in dataset_files(prepared):
            start = time.perf_counter()
            part = run_partitions(f.parent, task, pieces, local)[0][0]
            times.append(time.perf_counter() - start)
            sizes.append(part.rows)
        slope, intercept = np.polyfit(sizes, times, 1)
        fit = np.polyval([slope, intercept], sizes)
        r2 = 1 - np.sum((np.array(times) - fit) ** 2) / max(
            np.sum((np.array(times) - np.mean(times)) ** 2), 1e-12
        )
        print(
            "\npartition blocks, seconds:",
            ", ".join(f"{s}: {t:.2f}" for s, t in zip(sizes, times, strict=True)),
        )
        print(
            f"fit: time = {intercept:.3f} s + {slope * 1e6:.2f} s per million blocks (R^2 {r2:.3f})"
        )
        national = slope * NATIONAL_BLOCKS
        for workers in (1, 2, 8, 32):
            print(
                f"projection, {NATIONAL_BLOCKS:,} blocks on {workers} worker(s): "
                f"{national / workers / 60:.1f} min (partition time only, perfect spread)"
            )


if __name__ == "__main__":
    main()
