"""Compiled graph searches of the enclave stage: masked components and reachability.

:mod:`coverage_audit.enclaves` labels the connected components of a subset of the areas
(the unserved ones, the transparent ones, the areas outside every component) and asks
which areas can reach the region's outer edge without crossing a component, once per
served set of the sensitivity sweeps. Both are breadth-first searches over a CSR
neighbour list; compiled with numba they cost one pass over the edges, without building a
sparse matrix per question. Without numba the same functions run as plain Python (slow
but identical), so results never depend on numba being present.
"""

from __future__ import annotations

from typing import Any

import numpy as np

njit: Any
try:  # numba is a declared dependency; plain Python remains when it cannot load.
    from numba import njit
except ImportError:  # pragma: no cover - exercised only without numba
    njit = None


def _label_masked(
    indptr: np.ndarray, indices: np.ndarray, mask: np.ndarray
) -> tuple[np.ndarray, int]:  # pragma: no cover - compiled by numba
    """Label the components of the areas in ``mask``; -1 elsewhere.

    Labels run 0, 1, ... in order of each component's first (smallest) position, because
    searches start from positions in increasing order.
    """
    n = mask.size
    labels = np.full(n, -1, dtype=np.int64)
    stack = np.empty(n, dtype=np.int64)
    count = 0
    for s in range(n):
        if not mask[s] or labels[s] >= 0:
            continue
        labels[s] = count
        top = 0
        stack[0] = s
        top = 1
        while top > 0:
            top -= 1
            u = stack[top]
            for p in range(indptr[u], indptr[u + 1]):
                w = indices[p]
                if mask[w] and labels[w] < 0:
                    labels[w] = count
                    stack[top] = w
                    top += 1
        count += 1
    return labels, count


def _reach(
    indptr: np.ndarray, indices: np.ndarray, allowed: np.ndarray, seeds: np.ndarray
) -> np.ndarray:  # pragma: no cover - compiled by numba
    """Areas reachable from the allowed ``seeds`` through allowed areas."""
    n = allowed.size
    reached = np.zeros(n, dtype=np.bool_)
    stack = np.empty(n, dtype=np.int64)
    top = 0
    for s in seeds:
        if allowed[s] and not reached[s]:
            reached[s] = True
            stack[top] = s
            top += 1
    while top > 0:
        top -= 1
        u = stack[top]
        for p in range(indptr[u], indptr[u + 1]):
            w = indices[p]
            if allowed[w] and not reached[w]:
                reached[w] = True
                stack[top] = w
                top += 1
    return reached


if njit is not None:
    label_masked: Any = njit(cache=True, nogil=True)(_label_masked)
    reach: Any = njit(cache=True, nogil=True)(_reach)
else:  # pragma: no cover - exercised only without numba
    label_masked = _label_masked
    reach = _reach


def csr_of_pairs(x: np.ndarray, y: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """CSR neighbour list (indptr, indices) of the oriented pairs ``x -> y`` over n nodes."""
    order = np.argsort(x, kind="stable")
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(np.bincount(x, minlength=n), out=indptr[1:])
    return indptr, np.ascontiguousarray(y[order], dtype=np.int64)
