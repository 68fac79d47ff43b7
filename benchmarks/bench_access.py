"""Time and peak memory of 2SFCA / E2SFCA at national tract scale.

85,000 fictional areas (the synthetic tessellation, 2 km cells, then 700 m cells) and 2,000 sites with
capacities, a 10 km catchment, against a named baseline measured in the same run:
"plain cKDTree query", ``scipy.spatial.cKDTree.sparse_distance_matrix`` between the area
centroids and the sites at the same radius, which finds the same pairs and nothing more
(the floor of any straight-line 2SFCA). Our rows time the whole computation: the pairs
(tree query, exact distances, the inclusive boundary), both steps as sparse
matrix-vector products, and the figures by group. Times are the best of two runs
(untraced); peak memory is from tracemalloc on a separate run.

Run: .venv/bin/python benchmarks/bench_access.py
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import shapely
from _timing import measure
from scipy.spatial import cKDTree

from coverage_audit.inputs import Exclusions
from coverage_audit.io.costs import read_costs
from coverage_audit.stats.access import (
    Decay,
    access_by_group,
    concentration_index,
    pairs_from_costs,
    pairs_within,
    two_step_fca,
)
from coverage_audit.synthetic import tessellation

SEED = 7
N_AREAS = 85_000
N_SITES = 2_000
CATCHMENT = 10_000.0


def main() -> None:
    # Tract-sized cells (2 km, a rural-suburban mix) and city-sized cells (700 m: many
    # more sites in reach of each area).
    for cell_size in (2_000.0, 700.0):
        run_case(cell_size)
        print()


def run_case(cell_size: float) -> None:
    """Print the rows of one region size."""
    rng = np.random.default_rng(SEED)
    cells = tessellation(N_AREAS, seed=SEED, cell_size_m=cell_size)
    start = time.perf_counter()
    origins = shapely.get_coordinates(shapely.centroid(cells.geometry.values))
    t_centroids = time.perf_counter() - start
    n = len(origins)
    lo, hi = origins.min(axis=0), origins.max(axis=0)
    sites = lo + rng.random((N_SITES, 2)) * (hi - lo)
    capacity = rng.integers(1, 40, N_SITES).astype(float)
    population = rng.integers(1_500, 7_000, n).astype(float)
    shares = rng.dirichlet([4.0, 1.0, 1.5, 0.6], n)
    counts = {
        g: np.floor(shares[:, j] * population)
        for j, g in enumerate(["white_nh", "black_nh", "hispanic", "asian_nh"])
    }
    minority_share = 1 - counts["white_nh"] / population

    def baseline():
        return cKDTree(origins).sparse_distance_matrix(
            cKDTree(sites), CATCHMENT, output_type="ndarray"
        )

    def ours(decay):
        def run():
            pairs = pairs_within(origins, sites, CATCHMENT)
            scores = two_step_fca(population, capacity, pairs, decay)
            groups = access_by_group(scores.access, population, counts, "white_nh", 0.5)
            ci = concentration_index(scores.access, minority_share, population)
            return pairs, scores, groups, ci

        return run

    base, t_base, m_base = measure(baseline)
    width = (max(cells.total_bounds[2] - cells.total_bounds[0], 0), cells.total_bounds[3])
    print(
        f"{n:,} areas ({width[0] / 1000:.0f} x {width[1] / 1000:.0f} km), {N_SITES:,} sites, "
        f"catchment {CATCHMENT / 1000:g} km; centroids took {t_centroids:.2f} s (not counted)"
    )
    print(f"{'case':<44}{'seconds':>9}{'ratio':>8}{'peak MiB':>10}{'pairs':>10}")
    print(
        f"{'plain cKDTree query (baseline)':<44}{t_base:>9.3f}{1.0:>8.2f}{m_base:>10.1f}{base.size:>10,}"
    )
    steps = ((CATCHMENT / 3, 1.0), (2 * CATCHMENT / 3, 0.68), (CATCHMENT, 0.22))
    for label, decay in (
        ("2SFCA + groups + concentration index", Decay("none", CATCHMENT)),
        ("E2SFCA (3 zones) + groups + CI", Decay("steps", CATCHMENT, steps)),
        ("Gaussian 2SFCA + groups + CI", Decay("gaussian", CATCHMENT)),
    ):
        (pairs, scores, _, _), t, m = measure(ours(decay))
        if decay.kind == "none":
            scores_none = scores
        assert pairs.origin.size == base.size, "the same pairs as the baseline"
        print(f"{label:<44}{t:>9.3f}{t / t_base:>8.2f}{m:>10.1f}{pairs.origin.size:>10,}")
    # The same pairs given as a travel-cost table (already matched to positions).
    pairs = pairs_within(origins, sites, CATCHMENT)
    _, t_tab, m_tab = measure(
        lambda: two_step_fca(
            population,
            capacity,
            pairs_from_costs(pairs.origin, pairs.site, pairs.cost, n, N_SITES),
            Decay("none", CATCHMENT),
        )
    )
    print(
        f"{'2SFCA from a cost table (matched pairs)':<44}{t_tab:>9.3f}{t_tab / t_base:>8.2f}{m_tab:>10.1f}"
    )
    # Reading and matching a travel-cost table of those pairs (CSV), then 2SFCA.
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "costs.csv"
        area_ids = cells["geoid"].to_numpy(dtype=object)
        site_ids = np.array([f"S{k:04d}" for k in range(N_SITES)], dtype=object)
        pd.DataFrame(
            {"origin": area_ids[pairs.origin], "site": site_ids[pairs.site], "cost": pairs.cost}
        ).to_csv(path, index=False)

        def from_table():
            table = read_costs(
                path,
                origin_column="origin",
                site_column="site",
                cost_column="cost",
                factor=1.0,
                area_ids=area_ids,
                site_ids=site_ids,
                id_width=None,
                exclusions=Exclusions(),
            )
            return two_step_fca(
                population,
                capacity,
                pairs_from_costs(table.origin, table.site, table.cost, n, N_SITES),
                Decay("none", CATCHMENT),
            )

        got, t_read, m_read = measure(from_table)
        assert np.allclose(got.access, scores_none.access, rtol=1e-9)
    print(
        f"{'2SFCA from the same pairs as a CSV table':<44}{t_read:>9.3f}{t_read / t_base:>8.2f}{m_read:>10.1f}"
    )
    print(
        f"areas without a site in reach: {scores.areas_without_site:,}; "
        f"sites without demand: {scores.sites_without_demand:,}"
    )


if __name__ == "__main__":
    main()
