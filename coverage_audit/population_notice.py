"""A region without people: one notice instead of one warning per group and statistic.

When every analysed area has zero population, no coverage rate, ratio, four-fifths flag,
segregation index or minority share is defined. The audit still runs (covered fractions,
served areas, the map and the footprint's holes do not need people): every undefined figure
is ``None`` in summary.json and "n/a" on screen and in the report, and the reason is said
once, in :data:`NO_POPULATION_NOTICE`, at the top of the console output and the report
(summary.json key ``population_notice``) and as one :class:`NoPopulationWarning`. The
per-group warnings that would repeat it are held back.
"""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Callable, Iterator

import numpy as np
import pandas as pd

from .errors import DegenerateStatisticWarning, NoPopulationWarning

#: The one line said when every analysed area has zero population.
NO_POPULATION_NOTICE = (
    "every analysed area has zero population, so no rate, ratio, four-fifths flag or "
    "segregation index is defined (n/a throughout); covered fractions, served areas and "
    "the map are still given"
)
#: Per-group and per-statistic warnings that only repeat the notice.
_REPEATS = r".*(zero total population|minority share is defined for only 0 )"


def population_notice(frame: pd.DataFrame) -> str | None:
    """Return :data:`NO_POPULATION_NOTICE` when the areas hold no people, else None."""
    population = frame["population"].to_numpy(dtype=float)
    if population.size and np.nansum(population) == 0:
        return NO_POPULATION_NOTICE
    return None


@contextlib.contextmanager
def population_scope() -> Iterator[Callable[[pd.DataFrame], str | None]]:
    """Give, for one audit, a function that says the notice once when it applies.

    Call the function with the analysed areas (after any study-area restriction): when
    they hold no people it warns :data:`NO_POPULATION_NOTICE` once as a
    :class:`NoPopulationWarning`, holds back, until the block ends, the warnings that
    would repeat it, and returns the notice; otherwise it returns None and changes nothing.
    """
    with warnings.catch_warnings():

        def announce(frame: pd.DataFrame) -> str | None:
            notice = population_notice(frame)
            if notice is not None:
                warnings.warn(notice, NoPopulationWarning, stacklevel=3)
                warnings.filterwarnings(
                    "ignore", message=_REPEATS, category=DegenerateStatisticWarning
                )
            return notice

        yield announce
