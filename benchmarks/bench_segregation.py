"""Time and peak memory of the coverage gap test at national tract scale.

85,000 fictional areas (about the number of 2020 census tracts) x 999 permutations,
against a named baseline measured in the same run: "textbook loop", one full
``rng.permutation`` of the served flags per draw and two masked sums, the way the test
is usually written by hand (masked sums rather than BLAS dot products, whose threads
stall when the two cores are busy and would flatter the ratio). Also times
``segregation_summary`` over four groups. Times are the best of two runs (untraced);
peak memory is from tracemalloc on a separate run.

Run: .venv/bin/python benchmarks/bench_segregation.py
"""

from __future__ import annotations

from functools import partial

import numpy as np
from _timing import measure

from coverage_audit.segregation import coverage_gap_test, segregation_summary

SEED = 7
N_AREAS = 85_000
PERMUTATIONS = 999


def textbook_loop(x, y, served, permutations, rng):
    X, Y = x.sum(), y.sum()
    null = np.empty(permutations)
    for b in range(permutations):
        s = rng.permutation(served)
        null[b] = y[s].sum() / Y - x[s].sum() / X
    return null


def main() -> None:
    rng = np.random.default_rng(SEED)
    total = rng.integers(1_500, 7_000, N_AREAS).astype(float)
    shares = rng.dirichlet([4.0, 1.0, 1.5, 0.6], N_AREAS)
    counts = np.floor(shares * total[:, None])
    names = ["white_nh", "black_nh", "hispanic", "asian_nh"]
    groups = {g: counts[:, j] for j, g in enumerate(names)}
    print(f"{N_AREAS:,} areas x {PERMUTATIONS} permutations (2 cores, OpenBLAS as set)")
    print(f"{'case':<40}{'seconds':>9}{'ratio':>8}{'peak MiB':>10}")
    for share_served in (0.05, 0.5, 0.9):
        served = rng.random(N_AREAS) < share_served
        x, y = groups["black_nh"], groups["white_nh"]
        base, t_base, m_base = measure(
            partial(textbook_loop, x, y, served, PERMUTATIONS, np.random.default_rng(1))
        )
        res, t_ours, m_ours = measure(
            partial(
                coverage_gap_test,
                x,
                y,
                served,
                permutations=PERMUTATIONS,
                rng=np.random.default_rng(1),
            )
        )
        # Both draw from the same null: their spreads should agree to sampling error.
        sd_ratio = res.null_sd / base.std()
        label = f"served share {share_served:.2f}"
        print(f"{'textbook loop, ' + label:<40}{t_base:>9.2f}{1.0:>8.2f}{m_base:>10.1f}")
        print(
            f"{'coverage_gap_test, ' + label:<40}{t_ours:>9.2f}{t_ours / t_base:>8.2f}"
            f"{m_ours:>10.1f}   null sd ratio {sd_ratio:.3f}"
        )
    served = rng.random(N_AREAS) < 0.5
    frac = np.where(served, rng.uniform(0.5, 1.0, N_AREAS), rng.uniform(0.0, 0.5, N_AREAS))
    _, t_sum, m_sum = measure(
        lambda: segregation_summary(
            groups,
            total,
            "white_nh",
            served,
            frac,
            permutations=PERMUTATIONS,
            rng=np.random.default_rng(1),
        )
    )
    print(f"{'segregation_summary, 4 groups':<40}{t_sum:>9.2f}{'':>8}{m_sum:>10.1f}")


if __name__ == "__main__":
    main()
