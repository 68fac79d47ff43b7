"""Comparing footprints: several footprints side by side, change over time, peer lenders.

Takes finished results rather than geometry: the ``coverage`` section of each footprint's
summary (with its enclave count) for :func:`compare_footprints`; two per-area tables of the
same areas, before and after, for :func:`change_between`; and an activity table (loans,
applications or branches by area and lender) with the majority-minority flag of each area
for :func:`peer_comparison`. Each gives a frozen result with ``to_dict()`` for summary.json
and ``to_frame()`` for CSV output.

The three families live in :mod:`coverage_audit.stats.compare_footprints`,
:mod:`coverage_audit.stats.change` and :mod:`coverage_audit.stats.peers`; this module
re-exports their public names so that existing imports keep working.
"""

from __future__ import annotations

from .stats.change import AreaChange, ChangeResult, GroupChange, change_between
from .stats.compare_footprints import FootprintComparison, FootprintRow, compare_footprints
from .stats.four_fifths import FOUR_FIFTHS, below_four_fifths
from .stats.peers import LenderComparison, PeerResult, peer_comparison, two_proportion_test

__all__ = [
    "FOUR_FIFTHS",
    "AreaChange",
    "ChangeResult",
    "FootprintComparison",
    "FootprintRow",
    "GroupChange",
    "LenderComparison",
    "PeerResult",
    "below_four_fifths",
    "change_between",
    "compare_footprints",
    "peer_comparison",
    "two_proportion_test",
]
