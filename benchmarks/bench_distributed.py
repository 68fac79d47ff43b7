"""Benchmark of distributed coverage (dask) against single-machine covered_fraction, same run.

Builds the synthetic tessellation (about 85,000 areas by default, the nationwide tract count;
--areas 340000 for about four times that) and a footprint of 2,000 buffered points, writes
the areas to a GeoParquet file, then times, best of --repeat runs each:

- baseline (named): coverage.covered_fraction on the areas in memory;
- baseline from file: geopandas.read_parquet of the file, then covered_fraction;
- dask on local threads: covered_fraction_distributed on the in-memory GeoDataFrame and on
  the GeoParquet path, Hilbert partitions and row chunks;
- dask on a LocalCluster of 2 worker processes x 1 thread (loopback only): the same inputs.

For each it prints the time, its ratio to the baseline (above 1 = slower), the peak resident
memory above the start during its first run (this process, sampled every 5 ms, after
handing freed memory back with malloc_trim; for the cluster also the worker processes'
summed peak), the largest share of the footprint one
partition was sent, and the largest difference from the baseline's fractions (must be
<= 1e-12). Cluster start-up is timed apart and not in the ratios.
Usage: python benchmarks/bench_distributed.py [--areas 85000] [--points 2000] [--repeat 3]
       [--skip-cluster]
"""

from __future__ import annotations

import argparse
import ctypes
import gc
import logging
import tempfile
import threading
import time
from pathlib import Path

# Imported before any measurement, so that no variant's memory includes loading them.
import dask_geopandas  # noqa: F401
import distributed  # noqa: F401
import geopandas as gpd
import numpy as np
import psutil
import shapely

from coverage_audit.coverage import covered_fraction
from coverage_audit.distributed import PARTITIONINGS, distributed_coverage
from coverage_audit.footprint import cut_pieces, geodesic_circles
from coverage_audit.synthetic import FICTIONAL_CRS, service_points, tessellation

MIB = 2**20
BASELINE = "baseline: covered_fraction"
FILE_BASELINE = "file baseline: read_parquet + covered_fr."


class PeakMemory:
    """Sample the RSS of this process and, separately, of its child processes (workers)."""

    def __init__(self, interval: float = 0.005) -> None:
        self.interval = interval
        self.process = psutil.Process()

    def _children_rss(self) -> int:
        total = 0
        for child in self.process.children(recursive=True):
            try:
                total += child.memory_info().rss
            except psutil.Error:
                pass
        return total

    def __enter__(self) -> PeakMemory:
        self.start_main = self.process.memory_info().rss
        self.start_children = self._children_rss()
        self.peak_main = self.start_main
        self.peak_children = self.start_children
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)
        self._thread.start()
        return self

    def _sample(self) -> None:
        while not self._stop.is_set():
            self.peak_main = max(self.peak_main, self.process.memory_info().rss)
            self.peak_children = max(self.peak_children, self._children_rss())
            time.sleep(self.interval)

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()


def trim_memory() -> None:
    """Hand freed memory back to the system, so that RSS above start measures one run."""
    gc.collect()
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except OSError:  # not glibc: RSS then includes memory kept by the allocator
        pass


def measure(fn, repeat: int, memory: PeakMemory, client=None):
    """Peak memory during a first run, then the best time of ``repeat`` more runs.

    The first run also pays one-off costs (thread pools, code loaded on the workers), so
    it is left out of the time.
    """
    trim_memory()
    if client is not None:
        client.run(trim_memory)
    with memory:
        value = fn()
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        value = fn()
        best = min(best, time.perf_counter() - t0)
    return value, best


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--points", type=int, default=2_000)
    parser.add_argument("--radius", type=float, default=3_000.0)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--skip-cluster", action="store_true")
    args = parser.parse_args()
    # The peak-to-peak shuffle logs each shuffle's start and end at WARNING level; they
    # are progress notes, not problems, and would bury the table.
    logging.getLogger("distributed.shuffle").setLevel(logging.ERROR)

    t0 = time.perf_counter()
    cells = tessellation(args.areas, seed=1, cell_size_m=2_000.0)
    sites = service_points(cells, args.points, seed=2).to_crs("EPSG:4326")
    circles, _ = geodesic_circles(
        sites.geometry.x.to_numpy(),
        sites.geometry.y.to_numpy(),
        np.full(len(sites), args.radius),
        FICTIONAL_CRS,
        128,
    )
    pieces = cut_pieces(shapely.union_all(circles))
    areas = np.asarray(cells.geometry.array, dtype=object)
    frame = gpd.GeoDataFrame(geometry=cells.geometry.values)
    folder = Path(tempfile.mkdtemp(prefix="bench_distributed_"))
    path = folder / "areas.parquet"
    frame.to_parquet(path, row_group_size=20_000)
    print(
        f"setup: {len(cells):,} areas, {args.points:,} points of radius {args.radius:,.0f} m, "
        f"{pieces.size:,} footprint pieces, GeoParquet {path.stat().st_size / MIB:.0f} MiB "
        f"in row groups of 20,000 ({time.perf_counter() - t0:.1f} s, not timed below)"
    )
    memory = PeakMemory()
    expected = covered_fraction(areas, pieces)
    times: dict[str, float] = {}

    def run(label: str, fn, *, client=None, from_file: bool = False) -> None:
        value, seconds = measure(fn, args.repeat, memory, client)
        times[label] = seconds
        fraction = getattr(value, "fraction", value)
        diff = float(np.max(np.abs(fraction - expected))) if fraction.size else 0.0
        share = value.to_dict()["max_share_of_footprint"] if hasattr(value, "to_dict") else None
        main_mib = (memory.peak_main - memory.start_main) / MIB
        text = f"{label:40s} {seconds:7.2f} s  x{seconds / times[BASELINE]:5.2f}"
        text += f"  x{seconds / times[FILE_BASELINE]:5.2f}" if from_file else " " * 8
        text += f"  main +{main_mib:6.0f} MiB"
        if client is not None:
            text += f"  workers +{(memory.peak_children - memory.start_children) / MIB:5.0f} MiB"
        else:
            text += " " * 20
        text += f"  share {share:4.2f}" if share is not None else " " * 12
        print(f"{text}  |diff| {diff:.0e}", flush=True)
        assert diff <= 1e-12, f"{label}: fractions differ from the baseline by {diff}"

    print(
        f"{'':40s} {'time':>9s}  {'ratio':>6s}  {'/file':>6s}  peak RSS above start"
        f"{'':23s}  share = most of the footprint one partition got"
    )
    run(BASELINE, lambda: covered_fraction(areas, pieces))
    run(
        FILE_BASELINE,
        lambda: covered_fraction(
            np.asarray(gpd.read_parquet(path).geometry.array, dtype=object), pieces
        ),
        from_file=True,
    )
    for part in PARTITIONINGS:
        run(
            f"dask threads, GeoDataFrame, {part}",
            lambda p=part: distributed_coverage(frame, pieces, partitioning=p),
        )
    for part in PARTITIONINGS:
        run(
            f"dask threads, GeoParquet path, {part}",
            lambda p=part: distributed_coverage(path, pieces, partitioning=p),
            from_file=True,
        )
    if not args.skip_cluster:
        from distributed import Client, LocalCluster

        t0 = time.perf_counter()
        cluster = LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            processes=True,
            dashboard_address=None,
            host="127.0.0.1",
            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
        )
        client = Client(cluster, set_as_default=False)
        print(
            f"LocalCluster start, 2 processes x 1 thread (not in the ratios): "
            f"{time.perf_counter() - t0:.1f} s",
            flush=True,
        )
        try:
            for part in PARTITIONINGS:
                run(
                    f"cluster, GeoDataFrame scattered, {part}",
                    lambda p=part: distributed_coverage(
                        frame, pieces, partitioning=p, client=client
                    ),
                    client=client,
                )
            for part in PARTITIONINGS:
                run(
                    f"cluster, GeoParquet path, {part}",
                    lambda p=part: distributed_coverage(
                        path, pieces, partitioning=p, client=client
                    ),
                    client=client,
                    from_file=True,
                )
        finally:
            client.close()
            cluster.close()
    print(
        f"ratio = time / baseline ({times[BASELINE]:.2f} s); /file = time / file baseline "
        f"({times[FILE_BASELINE]:.2f} s); above 1 is slower"
    )
    for file in folder.iterdir():
        file.unlink()
    folder.rmdir()


if __name__ == "__main__":
    main()
