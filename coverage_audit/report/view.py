"""One way of colouring the map's areas (a view in the layer control).

Kept apart from :mod:`coverage_audit.report.map` so that the modules adding views of
their own (:mod:`coverage_audit.report.access_sections`) need not import the map back.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

#: Fill of areas with no value in the view shown.
MISSING_COLOR = "#bdbdbd"


@dataclass(frozen=True)
class View:
    """One way of colouring the areas, chosen in the layer control.

    Attributes
    ----------
    key : str
        Stable identifier (``covered``, ``share:<group>``, ``served`` ...).
    label : str
        Name in the layer control.
    title : str
        Legend heading.
    field : str
        Name of the per-area value array on the page that drives the colour.
    type : {"bins", "codes"}
        ``bins``: the class is the first ``k`` with ``value < thresholds[k]`` (else the
        last class); ``codes``: the value is the class index.
    colors, labels : tuple of str
        One colour and one legend label per class.
    thresholds : tuple of int
        Class limits on the page's integer scale (``bins`` only).
    has_missing : bool
        Whether some area has no value (drawn in ``missing_color``).
    missing_label : str
        Legend label of areas with no value.
    note : str or None
        One line under the legend heading.
    """

    key: str
    label: str
    title: str
    field: str
    type: str
    colors: tuple[str, ...]
    labels: tuple[str, ...]
    thresholds: tuple[int, ...] = ()
    has_missing: bool = False
    missing_label: str = "no data"
    missing_color: str = MISSING_COLOR
    note: str | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return the view as JSON-safe data, as the page reads it."""
        return {
            "key": self.key,
            "label": self.label,
            "title": self.title,
            "field": self.field,
            "type": self.type,
            "colors": list(self.colors),
            "labels": list(self.labels),
            "thresholds": list(self.thresholds),
            "has_missing": self.has_missing,
            "missing_label": self.missing_label,
            "missing_color": self.missing_color,
            "note": self.note,
        }
