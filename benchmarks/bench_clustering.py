"""Benchmark: contiguity, global Moran and local Moran on an 85,000-area tessellation.

Prints, for each stage, our wall time and peak traced memory beside a baseline measured in
the same run on the same data, and their ratio:

- weights: ``build_area_graph`` against libpysal's strict ``Graph.build_contiguity`` (the
  method used before the vertex path);
- global Moran (999 permutations): ``clustering.moran`` against ``esda.Moran``;
- local Moran (999 conditional permutations): ``clustering.local_moran`` against
  ``esda.Moran_Local`` with ``n_jobs=1`` (numba; its one-off compilation is timed apart,
  on a tiny input). Its parallel path compiles separately and is not measured.

Run: ``.venv/bin/python benchmarks/bench_clustering.py [--areas 85000] [--permutations 999]
[--baseline-areas N]``. ``--baseline-areas`` runs the esda baselines on the first N areas
only (ratios are then per area), for machines where the full-size baseline is too slow.
"""

from __future__ import annotations

import argparse
import os
import resource
import time
import tracemalloc
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
import scipy.sparse as sp

SEED = 20240611


def measure(fn: Callable[[], Any], *, memory: bool = True) -> tuple[Any, float, float | None]:
    """Return (result, wall seconds, peak traced MiB); memory is traced in a second run."""
    start = time.perf_counter()
    result = fn()
    seconds = time.perf_counter() - start
    peak = None
    if memory:
        tracemalloc.start()
        fn()
        peak = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
    return result, seconds, peak


def row(
    stage: str,
    ours: tuple[float, float | None],
    base: tuple[float, float | None],
    base_name: str,
    scale: float = 1.0,
) -> None:
    t_ours, m_ours = ours
    t_base, m_base = base
    t_base_full = t_base * scale
    mem = f"{m_ours:8.1f} MiB" if m_ours is not None else "       n/a"
    bmem = f"{m_base:8.1f} MiB" if m_base is not None else "       n/a"
    print(
        f"{stage:<22} ours {t_ours:7.2f} s {mem} | {base_name:<34} {t_base:7.2f} s {bmem}"
        + (f" (x{scale:.1f} -> {t_base_full:.2f} s)" if scale != 1.0 else "")
        + f" | speed-up x{t_base_full / t_ours:5.1f}"
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

        blas = [(i.get("internal_api"), i.get("num_threads")) for i in threadpool_info()]
    except ImportError:
        blas = "threadpoolctl not installed"
    print(
        f"cores: {os.cpu_count()}; BLAS: {blas}; OPENBLAS_CORETYPE="
        f"{os.environ.get('OPENBLAS_CORETYPE')}"
    )

    start = time.perf_counter()
    cells = tessellation(args.areas, seed=SEED)
    people = demographics(cells, seed=SEED + 1)
    n = len(cells)
    share = 1.0 - people["pop_white_nh"].to_numpy() / np.maximum(people["pop_total"], 1)
    noise = np.random.default_rng(SEED + 2).normal(0, 0.15, n)
    covered = np.clip(1.3 - 1.2 * share + noise, 0.0, 1.0)
    geoms = np.asarray(cells.geometry.array)
    print(
        f"fictional tessellation: {n} areas, made in {time.perf_counter() - start:.1f} s; "
        f"{args.permutations} permutations\n"
    )

    graph, t_graph, m_graph = measure(lambda: build_area_graph(geoms, cells["geoid"]))
    _, t_strict, m_strict = measure(lambda: _strict_contiguity(geoms, rook=False))
    row("weights (queen)", (t_graph, m_graph), (t_strict, m_strict), "libpysal strict contiguity")

    p = args.permutations
    ours_moran, t_moran, m_moran = measure(
        lambda: moran(covered, graph, permutations=p, rng=np.random.default_rng(SEED))
    )
    ours_local, t_local, m_local = measure(
        lambda: local_moran(covered, graph, permutations=p, rng=np.random.default_rng(SEED))
    )

    m_base = args.baseline_areas or n
    scale = n / m_base
    keep = np.arange(m_base)
    adjacency = graph.stats_adjacency[keep][:, keep].tocsr()
    lonely = np.diff(adjacency.indptr) == 0
    if lonely.any():
        raise SystemExit("the baseline subset leaves areas without neighbours; choose another")
    weights = Graph.from_sparse(adjacency)
    y_base = covered[keep]
    with warnings.catch_warnings():
        # esda's own deprecation notices are not what is measured here.
        warnings.simplefilter("ignore", DeprecationWarning)
        esda_moran, t_emoran, m_emoran = measure(
            lambda: esda.Moran(y_base, weights, permutations=p)
        )
        tiny = Graph.from_sparse(sp.csr_matrix(np.eye(5, k=1) + np.eye(5, k=-1)))
        _, t_compile, _ = measure(
            lambda: esda.Moran_Local(np.arange(5.0), tiny, permutations=9, seed=SEED),
            memory=False,
        )
        esda_local, t_elocal, m_elocal = measure(
            lambda: esda.Moran_Local(y_base, weights, permutations=p, seed=SEED, n_jobs=1)
        )
    row("global Moran", (t_moran, m_moran), (t_emoran, m_emoran), "esda.Moran", scale)
    row("local Moran", (t_local, m_local), (t_elocal, m_elocal), "esda.Moran_Local n_jobs=1", scale)
    total = t_graph + t_moran + t_local
    print(f"\nours, weights + global + local Moran: {total:.2f} s (target < 30 s)")
    print(f"esda.Moran_Local numba compilation (one-off, not in the ratios): {t_compile:.1f} s")
    print(f"process peak RSS: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10:.0f} MiB")

    # Agreement on the same data (the baseline subset only when one is used).
    if m_base == n:
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
