"""Whole default audit on a realistic boundary layer: stage times, peak memory, read ratio.

Builds, with fixed seeds, a region of Voronoi-like areas of about 100 vertices each,
every polygon densified on its own so that neighbours' vertices do not coincide (as in
generalised, reprojected or re-cut boundary files), writes it as a GeoPackage with
fictional demographics, places 2,000 service points with a 6 km reach, and runs the
default audit with every analysis on (segregation, contiguity, clustering, enclaves,
exclusion models and rules, sensitivity sweeps, map and report) and 999 permutations.

Prints each stage's time and the peak resident memory seen during it (sampled), the total,
and the baseline measured in the same run: a plain ``pyogrio.read_dataframe`` of the same
areas file. Usage::

    python benchmarks/bench_realistic.py [--areas 85000] [--points 2000] [--no-report]
"""

from __future__ import annotations

import argparse
import contextlib
import tempfile
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import geopandas as gpd
import pandas as pd
import pyogrio

from coverage_audit import run_audit
from coverage_audit.progress import SilentProgress
from coverage_audit.synthetic import (
    FICTIONAL_CRS,
    demographics,
    densify_independently,
    service_points,
    tessellation,
)

_PAGE = 4096


def _rss_mib() -> float:
    with open("/proc/self/statm") as handle:
        return int(handle.read().split()[1]) * _PAGE / 2**20


class _Sampler:
    """Samples resident memory every 20 ms; ``peak`` is the largest since ``reset``."""

    def __init__(self) -> None:
        self.peak = _rss_mib()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.wait(0.02):
            self.peak = max(self.peak, _rss_mib())

    def reset(self) -> None:
        self.peak = _rss_mib()

    def stop(self) -> None:
        self._stop.set()


class Timings(SilentProgress):
    def __init__(self, sampler: _Sampler) -> None:
        self.rows: list[tuple[str, float, float, float]] = []
        self.sampler = sampler

    @contextlib.contextmanager
    def stage(self, name: str) -> Iterator[None]:
        self.sampler.reset()
        t0, c0 = time.perf_counter(), time.process_time()
        yield
        seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
        self.sampler.peak = max(self.sampler.peak, _rss_mib())
        self.rows.append((name, seconds, cpu, self.sampler.peak))
        # Printed as it ends, so that a run stopped early still shows its stages.
        print(f"    ... {name}: {seconds:.1f} s, peak {self.sampler.peak:,.0f} MiB", flush=True)


def build_workload(folder: Path, n_areas: int, n_points: int) -> dict:
    """Write the region and the service points to ``folder``; return the audit spec."""
    cells = tessellation(n_areas, seed=1)
    geoms = densify_independently(cells.geometry.to_numpy(), vertices=100, seed=4)
    demo = demographics(cells, seed=2)
    region = gpd.GeoDataFrame(
        pd.concat([cells[["geoid"]], demo], axis=1), geometry=geoms, crs=cells.crs
    )
    pyogrio.write_dataframe(region, folder / "areas.gpkg")
    share = 1 - demo["pop_white_nh"] / demo["pop_total"].clip(lower=1)
    pyogrio.write_dataframe(
        service_points(cells, n_points, seed=3, weight=(1 - share) ** 2), folder / "sites.gpkg"
    )
    return {
        "title": "Synthetic region with non-coincident boundaries",
        "areas": {"path": str(folder / "areas.gpkg"), "id": "geoid"},
        "population": {
            "total": "pop_total",
            "reference": "white_nh",
            "derive_minority": True,
            "income_ratio": "income_ratio",
            "groups": {
                "white_nh": "pop_white_nh",
                "black_nh": "pop_black_nh",
                "hispanic": "pop_hispanic",
            },
        },
        "footprint": {"name": "sites", "path": str(folder / "sites.gpkg"), "radius": "6 km"},
        "analysis": {"permutations": 999, "enclave_draws": 999, "sensitivity": True},
        "explain": {"controls": ["income_ratio"]},
        "output": {"map": True, "report": True},
    }


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--points", type=int, default=2_000)
    parser.add_argument("--no-map", action="store_true")
    parser.add_argument("--no-report", action="store_true")
    parser.add_argument(
        "--file-crs",
        action="store_true",
        help="analyse in the file's own equal-area CRS (analysis_crs): no projection on reading",
    )
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="ca-bench-real-"))
    t0 = time.perf_counter()
    spec = build_workload(folder, args.areas, args.points)
    spec["output"] = {"map": not args.no_map, "report": not args.no_report}
    if args.file_crs:
        spec["analysis"]["analysis_crs"] = FICTIONAL_CRS
    print(f"workload built in {time.perf_counter() - t0:.1f} s in {folder}", flush=True)

    sampler = _Sampler()
    # Baseline, same run: a plain read of the same areas file.
    t0, c0 = time.perf_counter(), time.process_time()
    pyogrio.read_dataframe(folder / "areas.gpkg")
    plain, plain_cpu = time.perf_counter() - t0, time.process_time() - c0
    print(f"    ... plain pyogrio read: {plain:.2f} s ({plain_cpu:.2f} s CPU)", flush=True)

    timings = Timings(sampler)
    t0, c0 = time.perf_counter(), time.process_time()
    result = run_audit(spec, progress=timings)
    result.write(folder / "out", progress=timings)
    total, total_cpu = time.perf_counter() - t0, time.process_time() - c0
    sampler.stop()
    print(
        f"{len(result.areas):,} areas, {len(result.summary['enclaves'])} enclaves, "
        f"{result.summary['weights']['links']:,} links"
    )
    # CPU seconds (all threads of the process) beside wall time: on a shared machine the
    # wall time of a stage depends on the other load, its CPU time much less.
    print(f"  {'stage':<34} {'time':>8} {'x read':>7} {'CPU':>8} {'x read':>7} {'peak RSS':>10}")
    for name, seconds, cpu, peak in timings.rows:
        print(
            f"  {name:<34} {seconds:7.1f}s {seconds / plain:6.1f}x {cpu:7.1f}s "
            f"{cpu / plain_cpu:6.1f}x {peak:8,.0f} MiB"
        )
    print(
        f"total {total:.1f} s ({total_cpu:.1f} s CPU); plain pyogrio read (baseline) "
        f"{plain:.2f} s ({plain_cpu:.2f} s CPU); ratio total / read {total / plain:.1f}x "
        f"(CPU {total_cpu / plain_cpu:.1f}x); peak RSS {max(r[3] for r in timings.rows):,.0f} MiB"
    )


if __name__ == "__main__":
    main()
