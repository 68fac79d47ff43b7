"""Benchmark: contiguity, global Moran and local Moran on an 85,000-area tessellation.

Prints, for each stage, our wall and CPU time and peak traced memory beside a baseline
measured in the same run on the same data, and their ratios:

- weights: ``build_area_graph`` against libpysal's strict ``Graph.build_contiguity`` (the
  method used before the vertex path);
- global Moran (999 permutations): ``clustering.moran`` against ``esda.Moran``;
- local Moran (999 conditional permutations): ``clustering.local_moran`` against
  ``esda.Moran_Local`` with ``n_jobs=1`` (numba; its one-off compilation is timed apart,
  on a tiny input). Its parallel path compiles separately and is not measured.

CPU time counts every thread of this process; on a shared machine it is steadier than wall
time, which also counts other people's work. Peak memory is traced (tracemalloc, which
numpy reports to) in a second run of each stage.

Run: ``.venv/bin/python benchmarks/bench_clustering.py [--areas 85000] [--permutations 999]
[--baseline-areas N]``. ``--baseline-areas`` runs the esda baselines on the first N areas
only (their times are then scaled by n / N), for machines where the full-size baseline is
too slow.
"""

from __future__ import annotations

import argparse
import os
import resource
import time
import tracemalloc
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp

SEED = 20240611


@dataclass(frozen=True)
class Timing:
    wall: float
    cpu: float
    peak_mib: float | None

    def scaled(self, factor: float) -> Timing:
        return Timing(self.wall * factor, self.cpu * factor, self.peak_mib)


def measure(fn: Callable[[], Any], *, memory: bool = True) -> tuple[Any, Timing]:
    start, cpu = time.perf_counter(), time.process_time()
    result = fn()
    wall, cpu = time.perf_counter() - start, time.process_time() - cpu
    peak = None
    if memory:
        tracemalloc.start()
        fn()
        peak = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
    return result, Timing(wall, cpu, peak)


def show(stage: str, ours: Timing, base: Timing, base_name: str) -> None:
    def cell(t: Timing) -> str:
        mem = f"{t.peak_mib:7.1f} MiB" if t.peak_mib is not None else "      n/a"
        return f"wall {t.wall:7.2f} s  cpu {t.cpu:7.2f} s  peak {mem}"

    print(f"{stage:<16} ours      {cell(ours)}")
    print(f"{'':<16} {base_name:<9} {cell(base)}")
    print(
        f"{'':<16} ratio baseline/ours: wall x{base.wall / ours.wall:.1f}, "
        f"cpu x{base.cpu / ours.cpu:.1f}"
        + (
            f", memory x{base.peak_mib / ours.peak_mib:.1f}"
            if base.peak_mib and ours.peak_mib
            else ""
        )
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--permutations", type=int, default=999)
    parser.add_argument("--baseline-areas", type=int, default=None)
    args = parser.parse_args()

    import esda
    from libpysal.graph import Graph

    from coverage_audit.clustering import local_moran, moran
    from coverage_audit.synthetic import demographics, tessellation
    from coverage_audit.weights import _strict_contiguity, build_area_graph

    try:
        from threadpoolctl import threadpool_info

        blas: Any = [(i.get("internal_api"), i.get("num_threads")) for i in threadpool_info()]
    except ImportError:
        blas = "threadpoolctl not installed"
    print(
        f"cores: {os.cpu_count()}; thread pools: {blas}; OPENBLAS_CORETYPE="
        f"{os.environ.get('OPENBLAS_CORETYPE')}; load average {os.getloadavg()[0]:.1f}"
    )

    start = time.perf_counter()
    cells = tessellation(args.areas, seed=SEED)
    people = demographics(cells, seed=SEED + 1)
    n = len(cells)
    share = 1.0 - people["pop_white_nh"].to_numpy() / np.maximum(people["pop_total"], 1)
    noise = np.random.default_rng(SEED + 2).normal(0, 0.15, n)
    covered = np.clip(1.3 - 1.2 * share + noise, 0.0, 1.0)
    geoms = np.asarray(cells.geometry.array)
    p = args.permutations
    print(
        f"fictional tessellation: {n} areas, made in {time.perf_counter() - start:.1f} s; "
        f"{p} permutations\n"
    )

    graph, t_graph = measure(lambda: build_area_graph(geoms, cells["geoid"]))
    _, t_strict = measure(lambda: _strict_contiguity(geoms, rook=False))
    show("weights (queen)", t_graph, t_strict, "libpysal")

    ours_moran, t_moran = measure(
        lambda: moran(covered, graph, permutations=p, rng=np.random.default_rng(SEED))
    )
    ours_local, t_local = measure(
        lambda: local_moran(covered, graph, permutations=p, rng=np.random.default_rng(SEED))
    )

    m_base = min(args.baseline_areas or n, n)
    scale = n / m_base
    adjacency = graph.stats_adjacency[:m_base][:, :m_base].tocsr()
    if (np.diff(adjacency.indptr) == 0).any():
        raise SystemExit("the baseline subset leaves areas without neighbours; choose another")
    weights = Graph.from_sparse(adjacency)
    y_base = covered[:m_base]
    with warnings.catch_warnings():
        # esda's own deprecation notices are not what is measured here.
        warnings.simplefilter("ignore", DeprecationWarning)
        esda_moran, t_emoran = measure(lambda: esda.Moran(y_base, weights, permutations=p))
        tiny = Graph.from_sparse(sp.csr_matrix(np.eye(5, k=1) + np.eye(5, k=-1)))
        _, t_compile = measure(
            lambda: esda.Moran_Local(np.arange(5.0), tiny, permutations=9, seed=SEED),
            memory=False,
        )
        esda_local, t_elocal = measure(
            lambda: esda.Moran_Local(y_base, weights, permutations=p, seed=SEED, n_jobs=1)
        )
    if scale != 1.0:
        print(f"esda baselines ran on the first {m_base} areas; times scaled by {scale:.2f}")
    show("global Moran", t_moran, t_emoran.scaled(scale), "esda")
    show("local Moran", t_local, t_elocal.scaled(scale), "esda")
    total = t_graph.wall + t_moran.wall + t_local.wall
    print(
        f"\nours, weights + global + local Moran: wall {total:.2f} s, cpu "
        f"{t_graph.cpu + t_moran.cpu + t_local.cpu:.2f} s (target < 30 s)"
    )
    print(
        f"esda.Moran_Local numba compilation (one-off, not in the ratios): "
        f"wall {t_compile.wall:.1f} s"
    )
    print(f"process peak RSS: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10:.0f} MiB")

    if m_base == n:  # agreement on the same data
        print(
            f"\nI ours {ours_moran.I:.12f} esda {esda_moran.I:.12f}; "
            f"p_sim ours {ours_moran.p_sim:.4f} esda {esda_moran.p_sim:.4f}"
        )
        gap = np.abs(ours_local.Ii - esda_local.Is).max()
        diff = np.abs(ours_local.p_sim - esda_local.p_sim)
        print(
            f"local: max |Ii - esda| {gap:.2e}; quadrants equal: "
            f"{bool(np.array_equal(ours_local.quadrant, esda_local.q))}; |p - esda| mean "
            f"{diff.mean():.4f}, 99.9th percentile {np.quantile(diff, 0.999):.4f}"
        )
        print(f"clusters (BH, alpha 0.05): {ours_local.counts()}")


if __name__ == "__main__":
    main()
