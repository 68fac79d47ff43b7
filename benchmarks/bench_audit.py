"""End-to-end audit on the 85,000-area synthetic region: time of each stage, and memory.

Writes a GeoParquet region (tessellation + demographics) and 2,000 service points to a
temporary folder, runs ``coverage-audit run`` through the Python API with progress on, and
prints each stage's time, the total and peak RSS. The named baseline, measured in the same
run, is the time to read the inputs and write the data outputs alone (the I/O floor), so
the ratio says how many times the I/O floor the whole audit costs.
Usage: python benchmarks/bench_audit.py [--areas 85000] [--points 2000] [--no-map]
"""

from __future__ import annotations

import argparse
import contextlib
import resource
import tempfile
import time
from pathlib import Path

import geopandas as gpd
import pandas as pd

from coverage_audit import run_audit
from coverage_audit.outputs import write_all
from coverage_audit.progress import SilentProgress
from coverage_audit.synthetic import demographics, service_points, tessellation


class Timings(SilentProgress):
    def __init__(self) -> None:
        self.rows: list[tuple[str, float]] = []

    @contextlib.contextmanager
    def stage(self, name):
        t0 = time.perf_counter()
        yield
        self.rows.append((name, time.perf_counter() - t0))


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--points", type=int, default=2_000)
    parser.add_argument("--no-map", action="store_true")
    parser.add_argument("--no-report", action="store_true")
    parser.add_argument("--draws", type=int, default=999)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="ca-bench-"))
    cells = tessellation(args.areas, seed=1)
    demo = demographics(cells, seed=2)
    region = gpd.GeoDataFrame(
        pd.concat([cells[["geoid"]], demo], axis=1), geometry=cells.geometry, crs=cells.crs
    )
    region.to_parquet(folder / "areas.parquet")
    share = 1 - demo["pop_white_nh"] / demo["pop_total"].clip(lower=1)
    service_points(cells, args.points, seed=3, weight=(1 - share) ** 2).to_file(
        folder / "sites.gpkg"
    )
    spec = {
        "title": "Synthetic nationwide-size audit",
        "areas": {"path": str(folder / "areas.parquet"), "id": "geoid"},
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
        "footprint": {"name": "sites", "path": str(folder / "sites.gpkg"), "radius": "3 km"},
        "analysis": {"permutations": 999, "enclave_draws": args.draws},
        "output": {"map": not args.no_map, "report": not args.no_report},
    }
    timings = Timings()
    t0 = time.perf_counter()
    result = run_audit(spec, progress=timings)
    paths = result.write(folder / "out", progress=timings)
    total = time.perf_counter() - t0
    print(
        f"{len(result.areas):,} areas, {len(result.summary['enclaves'])} enclaves, outputs in {folder / 'out'}"
    )
    for name, seconds in timings.rows:
        print(f"  {name:<32} {seconds:8.1f} s")
    # Baseline: the I/O floor (read the inputs, write the data outputs), same run.
    t1 = time.perf_counter()
    gpd.read_parquet(folder / "areas.parquet")
    gpd.read_file(folder / "sites.gpkg")
    write_all(
        folder / "floor",
        summary=result.summary,
        areas=result.areas,
        exclusions=result.exclusions,
        manifest_fn=lambda: result.manifest,
    )
    floor = time.perf_counter() - t1
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    sizes = {p.name: p.stat().st_size / 2**20 for p in paths.values()}
    print(
        f"total {total:.1f} s; I/O floor (baseline) {floor:.1f} s; ratio total / floor {total / floor:.1f}x"
    )
    print("sizes (MiB): " + ", ".join(f"{k} {v:.1f}" for k, v in sizes.items()))
    print(f"peak RSS {rss:,.0f} MiB")


if __name__ == "__main__":
    main()
