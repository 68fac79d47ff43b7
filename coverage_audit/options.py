"""Settings several stages read from the spec the same way, written once.

Both the pipeline (:mod:`coverage_audit.audit`) and the further analyses
(:mod:`coverage_audit.analyses`) import from here, so neither imports the other for them.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .spec import AnalysisSpec


def enclave_options(an: AnalysisSpec, population: np.ndarray) -> dict[str, Any]:
    """Return the enclave settings of the spec, as :func:`~coverage_audit.enclaves.find_enclaves` takes them."""
    return {
        "min_surround": an.enclave_min_surround,
        "min_population": an.enclave_min_population,
        "transparent": (population <= 0) if an.transparent_zero_population else None,
    }
