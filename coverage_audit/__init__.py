"""coverage_audit: who a service footprint reaches, by group, and where it leaves gaps.

The public API is small: :func:`run_audit` runs an audit from a spec (a TOML path, a
mapping or an :class:`AuditSpec`) and returns an :class:`AuditResult`; :func:`load_spec`
reads and validates a spec file.

The names are imported on first use, so that ``coverage-audit`` starts (and installs its
Ctrl-C handler) before the heavy libraries load.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from ._version import __version__

if TYPE_CHECKING:  # pragma: no cover
    from .audit import AuditResult, run_audit
    from .spec import AuditSpec, load_spec, spec_from_dict

_LAZY = {
    "AuditResult": "audit",
    "run_audit": "audit",
    "AuditSpec": "spec",
    "load_spec": "spec",
    "spec_from_dict": "spec",
}

__all__ = ["AuditResult", "AuditSpec", "__version__", "load_spec", "run_audit", "spec_from_dict"]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        from importlib import import_module

        value = getattr(import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
