"""Compiled step of the random connected-set growth used by the enclave contrast test.

:func:`coverage_audit.enclaves.grow_connected_sets` grows every draw in step as numpy
arrays; for an enclave of tens of thousands of areas that is tens of thousands of array
passes. :func:`grow_block` does the same work draw by draw in compiled code (numba), for a
block of steps whose uniform numbers were drawn beforehand in the same order as the array
path draws them, so both paths give identical sets for the same generator.
"""

from __future__ import annotations

from typing import Any

import numpy as np

njit: Any
try:  # numba is a declared dependency; the array path remains when it cannot load.
    from numba import njit
except ImportError:  # pragma: no cover - exercised only without numba
    njit = None


def _grow_block_py(
    table: np.ndarray,
    seen: np.ndarray,
    frontier: np.ndarray,
    fill: np.ndarray,
    added: np.ndarray,
    members: np.ndarray,
    uniforms: np.ndarray,
    first_step: int,
) -> None:  # pragma: no cover - compiled by numba; body mirrors the array path
    """Advance every draw by ``uniforms.shape[1]`` steps (see module docstring).

    ``table`` is the padded neighbour table (padding points at the sentinel column n),
    ``seen`` is draws x (n + 1) with the sentinel column set, ``frontier`` draws x
    capacity (capacity at least ``max(fill) + steps * width``), ``fill`` the live
    frontier length of each draw, ``added`` the last area added to each draw,
    ``members`` draws x size (written from column ``first_step``), ``uniforms`` draws x
    steps in [0, 1) (each draw's numbers contiguous).
    """
    # Draws are independent (each has its own rows and pre-drawn numbers), so callers may
    # run blocks of draws on several threads (nogil); the sets do not depend on it.
    width = table.shape[1]
    for r in range(seen.shape[0]):
        last = added[r]
        count = fill[r]
        for s in range(uniforms.shape[1]):
            # Append the neighbours of the last area added that no earlier step reached.
            for j in range(width):
                v = table[last, j]
                if not seen[r, v]:
                    seen[r, v] = True
                    frontier[r, count] = v
                    count += 1
            # Take a uniformly random frontier entry and fill its slot with the last one.
            pick = np.int64(uniforms[r, s] * count)
            last = frontier[r, pick]
            members[r, first_step + s] = last
            frontier[r, pick] = frontier[r, count - 1]
            count -= 1
        added[r] = last
        fill[r] = count


def _forget_py(
    seen: np.ndarray, members: np.ndarray, frontier: np.ndarray, fill: np.ndarray
) -> None:  # pragma: no cover - compiled by numba
    """Unmark in ``seen`` every draw's members and live frontier entries."""
    for r in range(seen.shape[0]):
        for s in range(members.shape[1]):
            seen[r, members[r, s]] = False
        for s in range(fill[r]):
            seen[r, frontier[r, s]] = False


def _set_sums_py(
    sets: np.ndarray, pop: np.ndarray, minority: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:  # pragma: no cover - compiled by numba
    """Return the population and minority count of each drawn set (rows of ``sets``)."""
    draws = sets.shape[0]
    draw_pop = np.empty(draws)
    draw_minority = np.empty(draws)
    for r in range(draws):
        total = 0.0
        part = 0.0
        for s in range(sets.shape[1]):
            total += pop[sets[r, s]]
            part += minority[sets[r, s]]
        draw_pop[r] = total
        draw_minority[r] = part
    return draw_pop, draw_minority


set_sums: Any = njit(cache=True, nogil=True)(_set_sums_py) if njit is not None else None
forget: Any = njit(cache=True, nogil=True)(_forget_py) if njit is not None else None
grow_block: Any = njit(cache=True, nogil=True)(_grow_block_py) if njit is not None else None
