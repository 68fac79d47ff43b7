"""Survey-error work on the 85,000-area synthetic region: its extra time, and memory.

Runs the same audit twice in one process on the synthetic region (2,000 service points
with a 3 km reach): once without margins (the baseline) and once with a margin column for
the total and every group (fictional margins as in the demo, :func:`demo.demo_margins`),
so the delta method and the parametric bootstrap of the segregation indices and enclave
shares run. Prints both times, their difference, the survey-error stage timed alone on
the same inputs, and peak RSS. No map or report (their cost does not depend on margins).
Usage: python benchmarks/bench_uncertainty.py [--areas 85000] [--draws 200]
"""

from __future__ import annotations

import argparse
import copy
import resource
import tempfile
import time
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from coverage_audit import run_audit
from coverage_audit.demo import demo_margins
from coverage_audit.margins import survey_error
from coverage_audit.synthetic import demographics, service_points, tessellation


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--draws", type=int, default=200)
    parser.add_argument("--permutations", type=int, default=99)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="ca-bench-moe-"))
    cells = tessellation(args.areas, seed=1)
    demo = demographics(cells, seed=2)
    region = gpd.GeoDataFrame(
        pd.concat([cells[["geoid"]], demo, demo_margins(demo, seed=4)], axis=1),
        geometry=cells.geometry,
        crs=cells.crs,
    )
    region.to_parquet(folder / "areas.parquet")
    share = 1 - demo["pop_white_nh"] / demo["pop_total"].clip(lower=1)
    service_points(cells, 2_000, seed=3, weight=(1 - share) ** 2).to_file(folder / "sites.gpkg")
    groups = {"white_nh": "pop_white_nh", "black_nh": "pop_black_nh", "hispanic": "pop_hispanic"}
    base = {
        "title": "Synthetic nationwide-size audit",
        "areas": {"path": str(folder / "areas.parquet"), "id": "geoid"},
        "population": {
            "total": "pop_total",
            "reference": "white_nh",
            "derive_minority": True,
            "groups": groups,
        },
        "footprint": {"name": "sites", "path": str(folder / "sites.gpkg"), "radius": "3 km"},
        "analysis": {"permutations": args.permutations, "enclave_draws": args.permutations},
        "output": {"map": False, "report": False},
    }
    margins = copy.deepcopy(base)
    margins["population"]["total_moe"] = "moe_total"
    margins["population"]["margin_draws"] = args.draws
    margins["population"]["groups"] = {
        g: {"column": c, "moe": c.replace("pop_", "moe_")} for g, c in groups.items()
    }
    # Warm-up (imports, caches) on the first 2,000 areas, so neither timed run pays it.
    small = folder / "small.parquet"
    region.iloc[:2_000].to_parquet(small)
    for spec in (base, margins):
        run_audit({**spec, "areas": {"path": str(small), "id": "geoid"}})
    t0 = time.perf_counter()
    plain = run_audit(base)
    t_plain = time.perf_counter() - t0
    t0 = time.perf_counter()
    with_moe = run_audit(margins)
    t_moe = time.perf_counter() - t0
    # The stage alone, on the same inputs (a copy of the summary without its results);
    # best of three, as the machine may be shared.
    inputs = with_moe.inputs
    assert inputs is not None
    stage_times = []
    for _ in range(3):
        summary = copy.deepcopy(plain.summary)
        t0 = time.perf_counter()
        figures = survey_error(
            summary, with_moe.areas, inputs, with_moe.spec, np.random.default_rng(0)
        )
        figures.apply(summary)
        stage_times.append(time.perf_counter() - t0)
    t_stage = min(stage_times)
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    n = len(plain.areas)
    print(f"{n:,} areas, {len(plain.summary['enclaves'])} enclaves, {args.draws} bootstrap draws")
    print(f"  audit without margins (baseline) {t_plain:8.1f} s")
    print(f"  audit with margins               {t_moe:8.1f} s")
    print(
        f"  difference {t_moe - t_plain:+.1f} s ({100 * (t_moe - t_plain) / t_plain:+.1f}%); "
        f"survey-error stage alone {t_stage:.2f} s ({100 * t_stage / t_plain:.1f}% of the baseline)"
    )
    print(f"peak RSS {rss:,.0f} MiB")


if __name__ == "__main__":
    main()
