"""The four-fifths screen, compared exactly: one rule for every place that flags a group.

29 CFR 1607.4(D) regards a selection rate "less than four-fifths (4/5) (or eighty percent)
of the rate for the group with the highest rate" as evidence of adverse impact. A ratio of
exactly 4/5 is therefore not flagged. Computing ``a / b / (c / d) < 0.8`` in floating point
gets the exact boundary wrong for many pairs (60,000 of 100,000 against 75,000 of 100,000
gives 0.7999999999999999), so the rule is applied here once, by cross-multiplying the counts
in exact rational arithmetic, with a stated relative tolerance for the rounding that the
counts themselves carry (covered populations are sums of population x covered fraction).
"""

from __future__ import annotations

import math
from fractions import Fraction

#: The four-fifths ratio of 29 CFR 1607.4(D), exactly.
FOUR_FIFTHS_EXACT = Fraction(4, 5)
#: The same ratio as a float, as summary.json's ``four_fifths_threshold`` gives it.
FOUR_FIFTHS = 0.8
#: Relative tolerance of the comparison: a group is flagged only when its rate falls short
#: of four-fifths of the comparison rate by more than this share of it. Covered populations
#: are float sums of population x covered fraction (overlay areas), exact to about 1e-15
#: relative; 1e-9 absorbs that noise and no real difference (a ratio of 0.79999999 is
#: still flagged). Stated in the report's methods text.
FOUR_FIFTHS_REL_TOL = Fraction(1, 10**9)


def _exact(value: float) -> Fraction | None:
    f = float(value)
    return Fraction(f) if math.isfinite(f) else None


def below_four_fifths(
    covered: float,
    population: float,
    comparison_covered: float,
    comparison_population: float = 1.0,
) -> bool:
    """Return True when covered/population is less than 4/5 of the comparison's rate.

    Parameters
    ----------
    covered, population : float
        The group's covered (or served) count and its population; give a rate and 1.0 to
        compare rates.
    comparison_covered, comparison_population : float
        The same for the comparison group (the reference group, or the group with the
        highest rate).

    Returns
    -------
    bool
        False where either rate is undefined (population 0, a count not finite) or the
        comparison rate is 0, as the ratio is then undefined.

    Notes
    -----
    With a = covered, b = population, c = comparison_covered, d = comparison_population
    (b, d > 0), the rule ``(a/b) / (c/d) < 4/5`` is ``5 a d < 4 b c``, evaluated on the
    exact rational values of the floats (:class:`fractions.Fraction`), so exact pairs such
    as 3/5 vs 3/4, 4/25 vs 1/5 or 2/3 vs 5/6 (to the precision of their floats) are not
    flagged. The flag is raised only when ``5 a d < 4 b c (1 - tol)`` with
    ``tol`` = :data:`FOUR_FIFTHS_REL_TOL`, so rounding noise in the counts cannot raise it.
    Source: 29 CFR 1607.4(D), "less than four-fifths".

    Examples
    --------
    >>> below_four_fifths(60_000, 100_000, 75_000, 100_000)
    False
    >>> below_four_fifths(59_999, 100_000, 75_000, 100_000)
    True
    """
    a, b, c, d = (
        _exact(v) for v in (covered, population, comparison_covered, comparison_population)
    )
    if a is None or b is None or c is None or d is None or b <= 0 or d <= 0 or c <= 0:
        return False
    return 5 * a * d < 4 * b * c * (1 - FOUR_FIFTHS_REL_TOL)


def ratio_below_four_fifths(ratio: float | None) -> bool:
    """Return the four-fifths flag of a ratio already computed (None: not flagged).

    For results that keep only the ratio (a report reading a summary); the same rule and
    tolerance as :func:`below_four_fifths`, applied to ``ratio / 1``.
    """
    if ratio is None:
        return False
    return below_four_fifths(ratio, 1.0, 1.0, 1.0)
