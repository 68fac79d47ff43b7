"""Segregation indices and the coverage gap test: the former home of that code.

The statistics now live in :mod:`coverage_audit.stats.segregation` and its sibling modules;
this module re-exports their public names so that existing imports keep working.
"""

from __future__ import annotations

from .stats._validate import FRACTION_TOLERANCE
from .stats.segregation import (
    GapTest,
    SegregationResult,
    areal_coverage_dissimilarity,
    correlation_ratio,
    coverage_dissimilarity,
    coverage_gap_test,
    dissimilarity,
    dissimilarity_vs_rest,
    exposure,
    isolation,
    segregation_summary,
)

__all__ = [
    "FRACTION_TOLERANCE",
    "GapTest",
    "SegregationResult",
    "areal_coverage_dissimilarity",
    "correlation_ratio",
    "coverage_dissimilarity",
    "coverage_gap_test",
    "dissimilarity",
    "dissimilarity_vs_rest",
    "exposure",
    "isolation",
    "segregation_summary",
]
