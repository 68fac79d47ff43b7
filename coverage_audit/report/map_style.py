"""The map's colours, class edges and labels (our own palettes; see palette.py).

Sequential ramps run light to dark with strictly falling luminance, so they read in grey
and under the common colour-vision deficiencies; categorical pairs differ in lightness
as well as hue.
"""

from __future__ import annotations

from . import palette

#: Scale of the integer fractions on the page: covered fraction in 1/10000, shares in 1/1000.
CF_SCALE = 10_000
SHARE_SCALE = 1_000

# Our own palettes. Sequential ramps run light to dark with strictly falling luminance,
# so they read in grey and under the common colour-vision deficiencies; categorical pairs
# differ in lightness as well as hue (blue against amber, not red against green).
COVERED_COLORS: tuple[str, ...] = (
    "#f7f4d9",
    "#d3e7b6",
    "#93cda4",
    "#4fa79b",
    "#2b7186",
    "#233f6b",
)
COVERED_LABELS: tuple[str, ...] = ("0%", "> 0-25%", "25-50%", "50-75%", "75% to < 100%", "100%")
COVERED_THRESHOLDS: tuple[int, ...] = (1, 2_500, 5_000, 7_500, CF_SCALE)

SHARE_COLORS: tuple[str, ...] = ("#f6eff4", "#e3c3db", "#c98bbd", "#9c4f98", "#5c1f66")
SHARE_LABELS: tuple[str, ...] = ("< 10%", "10-25%", "25-50%", "50-75%", ">= 75%")
SHARE_THRESHOLDS: tuple[int, ...] = (100, 250, 500, 750)

SERVED_COLORS: tuple[str, ...] = ("#e6a03b", "#2b7186")  # unserved, served
MAJORITY_MINORITY_COLORS: tuple[str, ...] = ("#e4e1d8", "#7a3f8f")  # no, yes

# Income tiers and LISA clusters: the project's palette, documented in palette.py.
INCOME_TIERS: tuple[str, ...] = palette.INCOME_TIERS
INCOME_COLORS: tuple[str, ...] = palette.INCOME_COLORS

LISA_LABELS: tuple[str, ...] = palette.LISA_LABELS
LISA_COLORS: tuple[str, ...] = palette.LISA_COLORS

FOOTPRINT_KINDS: tuple[str, ...] = ("polygons", "points", "ids", "zips")
