"""The Moran scatterplot's spatial lag: ``W z`` of the standardised covered fraction.

``z`` uses the population standard deviation, as Moran's I does, so that with the
row-standardised weights of the Moran statistics the least-squares slope of ``W z`` on
``z`` is I (Anselin 1996, "The Moran scatterplot as an ESDA tool"). The statistics stage
computes it once; the report draws it and moran_lag.csv keeps it, so the pages never need
the weights.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp


def spatial_lag(values: np.ndarray, weights: sp.spmatrix, mask: np.ndarray) -> np.ndarray | None:
    """Return ``W z`` per area, NaN outside ``mask``; None when ``values`` are constant.

    Parameters
    ----------
    values : numpy.ndarray
        One finite value per area (the covered fraction).
    weights : scipy.sparse matrix
        Row-standardised weights, m x m over the areas marked in ``mask``.
    mask : numpy.ndarray of bool
        The areas in the spatial statistics (m of them).

    Returns
    -------
    numpy.ndarray or None
        One value per area; None when no area takes part or the values inside ``mask``
        do not vary (no scatterplot).
    """
    mask = np.asarray(mask, dtype=bool)
    y = np.asarray(values, dtype=float)[mask]
    if y.size == 0 or float(y.std()) == 0.0:
        return None
    z = (y - y.mean()) / y.std()
    lag = np.asarray(sp.csr_matrix(weights, dtype=float) @ z).ravel()
    full = np.full(mask.size, np.nan)
    full[mask] = lag
    return full
