"""The project's own colours for the categorical maps and the Moran scatterplot, in one place.

Chosen for this project (not copied from a desktop statistics program or a regulator's
maps) and checked for colour-vision deficiencies:

- **LISA clusters** use two hue families on the blue-yellow axis, which survives the
  common red-green deficiencies: *teal* for clusters of high values and *ochre* for
  clusters of low values. A cluster (high-high, low-low) is the dark tone of its family
  and an outlier (high-low, low-high) the pale tone of the family of its own value, so the
  pairs also differ in lightness and read in grey. Areas that are not significant are a
  warm off-white.
- **The Moran scatterplot** colours each point by its quadrant with the same four tones
  and names the quadrants in a legend under the plot, rather than in the corners, so the
  labels never cover points.
- **Income tiers** run from dark violet (low income) through pale violet (moderate) and
  sand (middle) to sage green (upper), with a neutral grey for tracts without a figure:
  the low- and moderate-income tiers, the ones the regulations single out, are the
  strongest colours, and violet against green stays apart under every common deficiency.

Tests check that the pairs differ in lightness (tests/test_map.py).
"""

from __future__ import annotations

#: LISA cluster labels, in the order of the colours below.
LISA_LABELS: tuple[str, ...] = ("high-high", "low-low", "high-low", "low-high", "not significant")
#: Dark teal, dark ochre, pale teal, pale ochre, warm off-white.
LISA_COLORS: tuple[str, ...] = ("#1f6f6b", "#9a5b00", "#93cbc4", "#f2cf8e", "#f3f1ea")

#: Income tiers (12 CFR 228.12 cut points), in the order of the colours below.
INCOME_TIERS: tuple[str, ...] = ("low", "moderate", "middle", "upper", "unknown")
#: Dark violet, pale violet, sand, sage green, neutral grey.
INCOME_COLORS: tuple[str, ...] = ("#4f2d6f", "#a78cc7", "#e6dfcc", "#7b9a62", "#c8c8c8")

#: Quadrant tones of the Moran scatterplot: the LISA tones of the matching labels.
MORAN_QUADRANT_COLORS: dict[str, str] = dict(zip(LISA_LABELS[:4], LISA_COLORS[:4], strict=True))
#: The slope line of the Moran scatterplot.
MORAN_LINE_COLOR = "#2b2b2b"
