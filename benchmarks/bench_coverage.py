"""Benchmark of the coverage step against a geopandas.overlay baseline, same run.

Builds the synthetic tessellation of about 85,000 areas (the nationwide tract count) and a
footprint of 2,000 buffered points, then times:

- ours: dissolve the circles, cut the footprint into bounded pieces, covered fractions
  via STRtree candidate pairs (coverage_audit.footprint / coverage_audit.coverage);
- baseline A: geopandas.overlay(areas, footprint.dissolve(), how="intersection") with the
  footprint dissolved to one row (the usual recipe), then intersection area summed per
  area over its area;
- baseline B: the same overlay with the dissolved footprint exploded into its parts (a
  tuned recipe that does the same candidate-pair work as ours).

Prints each time, peak memory (tracemalloc peak of Python allocations and the process
peak RSS), the ratios baseline/ours and the largest difference in fractions (must be
<= 1e-9). Usage: python benchmarks/bench_coverage.py [--areas 85000] [--points 2000]
"""

from __future__ import annotations

import argparse
import resource
import time

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from _timing import measure

from coverage_audit.coverage import covered_fraction
from coverage_audit.footprint import cut_pieces, geodesic_circles
from coverage_audit.synthetic import FICTIONAL_CRS, service_points, tessellation


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--points", type=int, default=2_000)
    parser.add_argument("--radius", type=float, default=3_000.0)
    parser.add_argument("--skip-baseline", action="store_true")
    parser.add_argument("--sample-a", type=int, default=1_000, help="areas timed for baseline A")
    args = parser.parse_args()

    t0 = time.perf_counter()
    cells = tessellation(args.areas, seed=1, cell_size_m=2_000.0)
    sites = service_points(cells, args.points, seed=2)
    lonlat = sites.to_crs("EPSG:4326")
    print(
        f"setup: {len(cells):,} areas, {len(sites):,} points, radius {args.radius:,.0f} m ({time.perf_counter() - t0:.1f} s)"
    )
    circles, err = geodesic_circles(
        lonlat.geometry.x.to_numpy(),
        lonlat.geometry.y.to_numpy(),
        np.full(len(sites), args.radius),
        FICTIONAL_CRS,
        128,
    )
    areas = np.asarray(cells.geometry.array, dtype=object)

    t0 = time.perf_counter()
    dissolved = shapely.union_all(circles)
    pieces = cut_pieces(dissolved)
    print(
        f"footprint dissolve + pieces (shared by both, not in the ratio): {time.perf_counter() - t0:.2f} s"
    )

    def ours():
        return covered_fraction(areas, pieces)

    fractions, t_ours, mem_ours = measure(ours, repeat=3)
    print(
        f"ours:     {t_ours:7.2f} s   peak traced {mem_ours:8.1f} MiB   (covered fractions, best of 3)"
    )

    if args.skip_baseline:
        return
    frame = gpd.GeoDataFrame({"k": np.arange(len(cells))}, geometry=areas, crs=FICTIONAL_CRS)

    def overlay_fractions(right: gpd.GeoDataFrame) -> np.ndarray:
        pieces = gpd.overlay(frame, right, how="intersection", keep_geom_type=True)
        covered = pieces.assign(a=pieces.area).groupby("k")["a"].sum()
        out = pd.Series(0.0, index=frame["k"])
        out.loc[covered.index] = covered.to_numpy()
        return (out.to_numpy() / frame.area.to_numpy()).clip(0, 1)

    # Baseline A, the usual recipe: overlay the areas with footprint.dissolve() (one row).
    # Every area's envelope meets the single row's, so each area is intersected with the
    # whole footprint: over 20 minutes at full size here. It is timed on a random sample of
    # areas and scaled linearly to all areas (its cost is one intersection per area).
    one_row = gpd.GeoDataFrame(geometry=[dissolved], crs=FICTIONAL_CRS)
    sample = np.sort(
        np.random.default_rng(3).choice(
            len(frame), size=min(args.sample_a, len(frame)), replace=False
        )
    )
    sub = frame.iloc[sample]

    def overlay_sample():
        pieces = gpd.overlay(sub, one_row, how="intersection", keep_geom_type=True)
        covered = pieces.assign(a=pieces.area).groupby("k")["a"].sum()
        out = pd.Series(0.0, index=sub["k"])
        out.loc[covered.index] = covered.to_numpy()
        return (out.to_numpy() / sub.area.to_numpy()).clip(0, 1)

    fractions_a, t_sample, mem_a = measure(overlay_sample, repeat=1)
    t_a = t_sample * len(frame) / len(sub)
    print(
        f"baseline A: {t_a:7.1f} s   (geopandas.overlay with footprint.dissolve(), one row; "
        f"{t_sample:.1f} s on {len(sub):,} sampled areas, scaled to all)"
    )
    # Baseline B, a tuned recipe: overlay with the dissolved footprint exploded into parts.
    parts = gpd.GeoDataFrame(geometry=list(shapely.get_parts(dissolved)), crs=FICTIONAL_CRS)
    fractions_b, t_b, mem_b = measure(lambda: overlay_fractions(parts), repeat=1)
    print(
        f"baseline B: {t_b:7.2f} s   peak traced {mem_b:8.1f} MiB   (geopandas.overlay with the dissolved parts exploded)"
    )
    diff = max(
        float(np.max(np.abs(fractions_a - fractions[sample]))),
        float(np.max(np.abs(fractions_b - fractions))),
    )
    print(
        f"ratio A / ours: {t_a / t_ours:.1f}x   ratio B / ours: {t_b / t_ours:.1f}x   "
        f"max |difference| of fractions: {diff:.2e}"
    )
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"process peak RSS: {rss:,.0f} MiB; circle area error max {err:.1e}")
    assert diff <= 1e-9, "fractions differ from the baseline by more than 1e-9"


if __name__ == "__main__":
    main()
