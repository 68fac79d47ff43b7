"""Outputs for people: the offline interactive map (and the HTML report)."""

from .map import MapInfo, build_map  # noqa: F401
from .page import build_report, moran_points, render_report  # noqa: F401
