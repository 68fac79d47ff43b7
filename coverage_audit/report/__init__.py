"""Outputs for people: the offline interactive map (and the HTML report)."""

from .map import MapInfo, build_map  # noqa: F401
