"""coverage_audit: who a service footprint reaches, by group, and where it leaves gaps."""

from __future__ import annotations

__version__ = "0.1.0"
