"""coverage_audit: who a service footprint reaches, by group, and where it leaves gaps.

The public API is small: :func:`run_audit` runs an audit from a spec (a TOML path, a
mapping or an :class:`AuditSpec`) and returns an :class:`AuditResult`; :func:`load_spec`
reads and validates a spec file.
"""

from __future__ import annotations

from ._version import __version__
from .audit import AuditResult, run_audit
from .spec import AuditSpec, load_spec, spec_from_dict

__all__ = ["AuditResult", "AuditSpec", "__version__", "load_spec", "run_audit", "spec_from_dict"]
