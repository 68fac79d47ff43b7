"""Spatial clustering of coverage: the former home of the Moran, join count and LISA code.

The statistics now live one family per module under :mod:`coverage_audit.stats`
(:mod:`~coverage_audit.stats.moran`, :mod:`~coverage_audit.stats.join_counts`,
:mod:`~coverage_audit.stats.lisa`, and :mod:`~coverage_audit.stats.clustering` for the
summary); this module re-exports their public names so that existing imports keep working.
"""

from __future__ import annotations

from .stats.clustering import *  # noqa: F403 - re-exporting the family is this module's job
from .stats.clustering import __all__  # noqa: F401
