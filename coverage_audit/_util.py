"""Small helpers shared by the stages: JSON-safe numbers and result serialisation."""

from __future__ import annotations

import dataclasses
import math
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np


def clean_number(value: Any) -> Any:
    """Return a JSON-safe Python number: numpy scalars unwrapped, NaN and inf as ``None``."""
    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return f if math.isfinite(f) else None
    return value


def to_jsonable(value: Any) -> Any:
    """Convert results (dataclasses, mappings, sequences, numpy values) to plain JSON data.

    Dataclasses with a ``to_dict`` method are converted through it, so each result type
    keeps control of its own schema.
    """
    if hasattr(value, "to_dict") and callable(value.to_dict):
        return to_jsonable(value.to_dict())
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, Mapping):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, np.ndarray):
        return [to_jsonable(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [to_jsonable(v) for v in value]
    return clean_number(value)


def safe_ratio(numerator: float, denominator: float) -> float | None:
    """Return ``numerator / denominator``, or ``None`` when the denominator is zero or NaN."""
    if denominator is None or not math.isfinite(denominator) or denominator == 0:
        return None
    result = numerator / denominator
    return float(result) if math.isfinite(result) else None


def relative_paths(data: Any, base: Path) -> Any:
    """Return ``data`` with every absolute path under a ``path`` key made relative to ``base``.

    summary.json must not depend on where the inputs sit on disk (reruns from another
    checkout are byte-identical), so input paths are written as seen from the spec's folder,
    with forward slashes.
    """
    if isinstance(data, dict):
        out = {}
        for key, value in data.items():
            if key == "path" and isinstance(value, str) and os.path.isabs(value):
                out[key] = Path(os.path.relpath(value, base)).as_posix()
            else:
                out[key] = relative_paths(value, base)
        return out
    if isinstance(data, list):
        return [relative_paths(item, base) for item in data]
    return data
