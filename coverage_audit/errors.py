"""Errors and warnings of coverage_audit.

Every problem a user can fix (a bad spec, a missing column, a file without a CRS) is raised
as a subclass of :class:`CoverageAuditError` whose message names the file, row or column
and says what to do. The CLI prints that message and exits non-zero without a traceback.

Warnings are named classes so that users can filter them precisely
(``warnings.simplefilter("ignore", IslandWarning)``); nothing in the package silences
warnings globally.
"""

from __future__ import annotations


class CoverageAuditError(Exception):
    """Base class of every user-facing error; the message is meant to be read as is."""


class SpecError(CoverageAuditError):
    """The audit spec (TOML or options) is invalid: unknown key, wrong type, bad value."""


class InputError(CoverageAuditError):
    """An input file cannot be used: missing, unreadable, no CRS, missing column."""


class AnalysisError(CoverageAuditError):
    """A statistic cannot be computed for these data (for example too few areas)."""


class CoverageAuditWarning(UserWarning):
    """Base class of the package's warnings."""


class RepairWarning(CoverageAuditWarning):
    """Invalid geometries were repaired with ``make_valid``."""


class IslandWarning(CoverageAuditWarning):
    """Some areas have no contiguity neighbour, or the region has several components."""


class DegenerateStatisticWarning(CoverageAuditWarning):
    """A statistic is undefined for these data (constant variable, no served area, ...)."""


class IdWarning(CoverageAuditWarning):
    """Ids were stored as numbers, so leading zeros (GEOIDs of states 01-09) may be lost."""


class MarginWarning(CoverageAuditWarning):
    """Some margin-of-error cells held no number (annotations or blanks) and were read as 0."""


class NoPopulationWarning(DegenerateStatisticWarning):
    """Every analysed area has zero population: no rate, ratio or index by group is defined."""


class SmallSampleWarning(CoverageAuditWarning):
    """A model has fewer events per parameter than the usual rule of thumb asks for."""


class DroppedRowsWarning(CoverageAuditWarning):
    """Rows with missing or non-numeric model values were left out of the models."""


class MissingExtraError(InputError, ImportError):
    """The optional packages of the ``distributed`` extra (dask, dask-geopandas) are missing.

    An :class:`~coverage_audit.errors.InputError`, so the CLI prints it without a
    traceback, and an :class:`ImportError`, so ``except ImportError`` also catches it.
    """
