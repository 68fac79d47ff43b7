"""Benchmark of enclave detection and its Monte Carlo test against baselines, same run.

Builds the synthetic tessellation of about 85,000 areas (the nationwide tract count) with
fictional demographics and a footprint of buffered random service points (an area is
served when its representative point lies in the footprint), then times:

- ours, detection + characterisation (``find_enclaves`` with ``mc_draws=0``): masked
  components on the csr contiguity, exact shared-edge lengths, vectorised budgets;
- baseline: networkx connected components of the unserved areas, then for each component
  a GEOS union of its polygons, whose boundary is intersected with the union of the
  served polygons (the usual recipe). Both must flag the same enclaves with surround
  shares equal to 1e-6;
- ours, Monte Carlo (``mc_draws=999``): all draws of an enclave grown in step as arrays;
- baseline: the textbook pure-Python frontier growth (a set and a list per draw), timed
  on a sample of draws and extrapolated to 999 draws per enclave (printed as an estimate);
- ``footprint_holes`` on the dissolved footprint.

Prints each time with peak memory (tracemalloc peak of Python/numpy allocations; GEOS
memory is not traced, so the process peak RSS is printed too), and baseline/ours ratios.
Targets: detection under 15 s, detection + 999 draws per enclave under 60 s.
Usage: python benchmarks/bench_enclaves.py [--areas 85000] [--points 1500] [--radius 9000]
"""

from __future__ import annotations

import argparse
import random
import resource
import time
import tracemalloc

import networkx as nx
import numpy as np
import shapely

from coverage_audit.enclaves import find_enclaves, footprint_holes
from coverage_audit.synthetic import demographics, service_points, tessellation
from coverage_audit.weights import build_area_graph

SEED = 4_2024
GROUPS = ("pop_white_nh", "pop_black_nh", "pop_hispanic", "pop_asian_nh", "pop_other_nh")


def measure(fn):
    tracemalloc.start()
    t0 = time.perf_counter()
    value = fn()
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return value, seconds, peak / 2**20


def rss_peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def baseline_detection(geoms, served, adjacency, min_surround):
    """networkx components + per-component union; exterior rings intersected with served union.

    Only the exterior of each component's union counts (holes are what it surrounds), as in
    coverage_audit.enclaves; the baseline measures it with plain geometry operations.
    """
    unserved = np.flatnonzero(~served)
    rows, cols = adjacency.nonzero()
    graph = nx.Graph()
    graph.add_nodes_from(unserved.tolist())
    keep = ~served[rows] & ~served[cols]
    graph.add_edges_from(zip(rows[keep].tolist(), cols[keep].tolist(), strict=True))
    served_union = shapely.union_all(geoms[served])
    found = {}
    for component in nx.connected_components(graph):
        members = np.fromiter(component, dtype=np.int64)
        parts = shapely.get_parts(shapely.union_all(geoms[members]))
        outline = shapely.union_all(shapely.get_exterior_ring(parts))
        share = shapely.intersection(outline, served_union).length / outline.length
        if share >= min_surround:
            found[frozenset(members.tolist())] = share
    return found


def textbook_growth(neighbours, pool, size, draws, seed):
    """One draw at a time: a Python set of reached areas and a list as the frontier."""
    rand = random.Random(seed)
    out = []
    for _ in range(draws):
        start = pool[rand.randrange(len(pool))]
        members, reached, frontier = [start], {start}, []
        for nb in neighbours[start]:
            if nb not in reached:
                reached.add(nb)
                frontier.append(nb)
        while len(members) < size:
            k = rand.randrange(len(frontier))
            frontier[k], frontier[-1] = frontier[-1], frontier[k]
            area = frontier.pop()
            members.append(area)
            for nb in neighbours[area]:
                if nb not in reached:
                    reached.add(nb)
                    frontier.append(nb)
        out.append(members)
    return out


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--points", type=int, default=1_500)
    parser.add_argument("--radius", type=float, default=9_000.0)
    parser.add_argument("--draws", type=int, default=999)
    parser.add_argument("--baseline-draws", type=int, default=20)
    parser.add_argument("--skip-baseline", action="store_true")
    args = parser.parse_args()

    t0 = time.perf_counter()
    cells = tessellation(args.areas, seed=SEED)
    demo = demographics(cells, seed=SEED)
    sites = service_points(cells, args.points, seed=SEED + 1)
    geoms = np.asarray(cells.geometry.array, dtype=object)
    ids = cells["geoid"].to_numpy()
    footprint = shapely.union_all(shapely.buffer(sites.geometry.to_numpy(), args.radius))
    shapely.prepare(footprint)
    served = shapely.contains(footprint, shapely.point_on_surface(geoms))
    population = demo["pop_total"].to_numpy(dtype=float)
    counts = {g: demo[g].to_numpy(dtype=float) for g in GROUPS}
    setup = time.perf_counter() - t0
    t1 = time.perf_counter()
    graph = build_area_graph(geoms, ids)
    t_graph = time.perf_counter() - t1
    print(
        f"setup: {len(cells):,} areas, {served.mean():.1%} served by {args.points:,} points "
        f"of radius {args.radius:,.0f} m ({setup:.1f} s); contiguity (weights.py, not timed "
        f"below) {t_graph:.1f} s"
    )

    def run(draws):
        return find_enclaves(
            geoms, ids, served, population, counts, graph,
            reference_group="pop_white_nh", mc_draws=draws, rng=np.random.default_rng(SEED),
        )  # fmt: skip

    result, t_detect, mem_detect = measure(lambda: run(0))
    sizes = np.array([len(e.area_ids) for e in result.enclaves])
    print(
        f"ours, detection + characterisation: {t_detect:7.2f} s  peak traced {mem_detect:7.1f} MiB"
        f"  ({result.unserved_components} unserved components, {sizes.size} enclaves, "
        f"{sizes.sum():,} areas in enclaves, largest {sizes.max() if sizes.size else 0:,})"
    )

    if not args.skip_baseline:
        found, t_base, mem_base = measure(
            lambda: baseline_detection(geoms, served, graph.adjacency, 0.75)
        )
        ours = {
            frozenset(np.flatnonzero(result.enclave_id == e.id).tolist()): e.surround_share
            for e in result.enclaves
        }
        common = set(ours) & set(found)
        worst = max((abs(ours[k] - found[k]) for k in common), default=0.0)
        print(
            f"baseline, networkx + per-component union: {t_base:7.2f} s  peak traced "
            f"{mem_base:7.1f} MiB  ratio baseline/ours {t_base / t_detect:6.1f}x; "
            f"same enclaves: {set(ours) == set(found)}, "
            f"largest surround-share difference {worst:.2e}"
        )

    result_mc, t_mc_total, mem_mc = measure(lambda: run(args.draws))
    t_mc = t_mc_total - t_detect
    same = [e.area_ids for e in result_mc.enclaves] == [e.area_ids for e in result.enclaves]
    area_steps = int(sizes.sum()) * args.draws
    print(
        f"ours, detection + {args.draws} draws per enclave: {t_mc_total:7.2f} s  peak traced "
        f"{mem_mc:7.1f} MiB  (Monte Carlo alone about {t_mc:.1f} s, "
        f"{area_steps / max(t_mc, 1e-9) / 1e6:.2f} M area-steps/s; same enclaves: {same})"
    )

    if not args.skip_baseline and sizes.size:
        table = graph.adjacency
        neighbours = [
            table.indices[table.indptr[i] : table.indptr[i + 1]].tolist()
            for i in range(table.shape[0])
        ]
        pool = list(range(len(neighbours)))
        sample = sorted(set(np.linspace(0, sizes.size - 1, 8).astype(int).tolist()))
        t2 = time.perf_counter()
        steps = 0
        for k in sample:
            textbook_growth(neighbours, pool, int(sizes[k]), args.baseline_draws, SEED + k)
            steps += int(sizes[k]) * args.baseline_draws
        rate = steps / (time.perf_counter() - t2)
        estimate = area_steps / rate
        print(
            f"baseline, textbook per-draw growth: {rate / 1e6:.2f} M area-steps/s measured on "
            f"{len(sample)} enclaves x {args.baseline_draws} draws; estimated {estimate:7.1f} s "
            f"for {args.draws} draws per enclave; "
            f"ratio baseline/ours {estimate / max(t_mc, 1e-9):6.1f}x"
        )

    holes, t_holes, mem_holes = measure(
        lambda: footprint_holes(footprint, geoms, ids, population, counts)
    )
    print(
        f"ours, footprint_holes: {t_holes:7.2f} s  peak traced {mem_holes:7.1f} MiB  "
        f"({len(holes)} populated holes)"
    )
    print(f"process peak RSS {rss_peak_mib():,.0f} MiB")
    print(
        f"targets: detection < 15 s: {'met' if t_detect < 15 else 'MISSED'}; "
        f"detection + {args.draws} draws < 60 s: {'met' if t_mc_total < 60 else 'MISSED'}"
    )


if __name__ == "__main__":
    main()
