"""Segregation indices and the coverage gap test: the former home of that code.

The statistics now live in :mod:`coverage_audit.stats.segregation` and its sibling modules;
this module re-exports their public names so that existing imports keep working.
"""

from __future__ import annotations

from .stats._validate import FRACTION_TOLERANCE  # noqa: F401 - kept importable
from .stats.segregation import *  # noqa: F403 - re-exporting the family is this module's job
from .stats.segregation import __all__  # noqa: F401
