"""Global and bivariate Moran's I: the package's one implementation of Moran's I.

Moments under normality and randomisation (Cliff and Ord 1981) and a permutation test.
The p-value convention is named in the keys: ``p_norm`` and ``p_rand`` are one-sided in the
direction of z, ``p_rand_two_sided`` is ``2 P(Z >= |z_rand|)``, ``p_sim`` is the folded
pseudo p-value of the permutations. The residual Moran of the exclusion models
(:mod:`~coverage_audit.stats.residual_moran`) calls :func:`moran_moments` here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike

from .._util import clean_number
from ._spatial import (
    WeightsLike,
    _is_constant,
    _length,
    _one_sided_normal_p,
    _permutation_blocks,
    _quadratic_forms,
    _resolve_weights,
    _sim_summary,
    _standardise,
    _values,
    two_sided_normal_p,
)
from ._validate import check_draws, warn_degenerate


@dataclass(frozen=True)
class MoranResult:
    """Global Moran's I of one variable under row-standardised weights.

    Attributes
    ----------
    variable : str or None
        Name of the variable, as the caller gave it.
    n : int
        Areas in the statistic.
    I : float
        Moran's I.
    EI : float
        Expectation under the null, ``-1 / (n - 1)``.
    VI_norm, z_norm, p_norm : float
        Variance, z-value and one-sided p-value under the normality assumption.
    VI_rand, z_rand, p_rand : float
        Variance, z-value and one-sided p-value under randomisation.
    p_norm_two_sided, p_rand_two_sided : float
        (Properties.) The two-sided normal p-values, ``2 P(Z >= |z|)``. Every ``p_norm``
        and ``p_rand`` key in summary.json is one-sided, in the direction of z; keys
        ending ``_two_sided`` are two-sided (the project's one convention).
    permutations : int
        Random permutations drawn (0: no permutation test).
    EI_sim, z_sim, p_sim : float
        Mean of the permutation null, ``(I - EI_sim) / sd(sim)``, and the folded one-sided
        pseudo p-value (see :func:`moran`).
    sim : numpy.ndarray
        The permuted statistics (empty without permutations).
    """

    variable: str | None
    n: int
    I: float  # noqa: E741 - the published symbol
    EI: float
    VI_norm: float
    z_norm: float
    p_norm: float
    VI_rand: float
    z_rand: float
    p_rand: float
    permutations: int
    EI_sim: float
    z_sim: float
    p_sim: float
    sim: np.ndarray = field(repr=False)

    @property
    def p_norm_two_sided(self) -> float:
        """Two-sided p-value under normality, ``2 P(Z >= |z_norm|)``."""
        return two_sided_normal_p(self.z_norm)

    @property
    def p_rand_two_sided(self) -> float:
        """Two-sided p-value under randomisation, ``2 P(Z >= |z_rand|)``."""
        return two_sided_normal_p(self.z_rand)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (NaN as ``None``)."""
        return {
            "variable": self.variable,
            "I": clean_number(self.I),
            "expected": clean_number(self.EI),
            "variance_norm": clean_number(self.VI_norm),
            "z_norm": clean_number(self.z_norm),
            "p_norm": clean_number(self.p_norm),
            "p_norm_two_sided": clean_number(self.p_norm_two_sided),
            "variance_rand": clean_number(self.VI_rand),
            "z_rand": clean_number(self.z_rand),
            "p_rand": clean_number(self.p_rand),
            "p_rand_two_sided": clean_number(self.p_rand_two_sided),
            "expected_sim": clean_number(self.EI_sim),
            "z_sim": clean_number(self.z_sim),
            "p_sim": clean_number(self.p_sim),
            "permutations": int(self.permutations),
            "n": int(self.n),
        }


@dataclass(frozen=True)
class BivariateMoranResult:
    """Bivariate Moran's I of ``x`` against the spatial lag of ``y``.

    Attributes
    ----------
    x_variable, y_variable : str or None
        Names of the two variables.
    n : int
        Areas in the statistic.
    I : float
        ``sum_i zx_i (W zy)_i / n`` with ``zx``, ``zy`` standardised (population sd).
    permutations : int
        Random permutations of ``y``.
    EI_sim, z_sim, p_sim : float
        Mean of the permutation null, the z-value against it and the folded pseudo p.
    sim : numpy.ndarray
        The permuted statistics.
    """

    x_variable: str | None
    y_variable: str | None
    n: int
    I: float  # noqa: E741 - the published symbol
    permutations: int
    EI_sim: float
    z_sim: float
    p_sim: float
    sim: np.ndarray = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON-safe summary (NaN as ``None``)."""
        return {
            "x_variable": self.x_variable,
            "y_variable": self.y_variable,
            "I": clean_number(self.I),
            "expected_sim": clean_number(self.EI_sim),
            "z_sim": clean_number(self.z_sim),
            "p_sim": clean_number(self.p_sim),
            "permutations": int(self.permutations),
            "n": int(self.n),
        }


def moran(
    y: ArrayLike,
    graph: WeightsLike,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    variable: str | None = None,
) -> MoranResult:
    """Global Moran's I with row-standardised weights.

    Parameters
    ----------
    y : array_like of float
        One value per area (see the module docstring for the alignment).
    graph : AreaGraph, libpysal.graph.Graph or scipy sparse matrix
        Spatial weights; row-standardised here.
    permutations : int
        Random permutations for the pseudo p-value (0 skips the test).
    rng : numpy.random.Generator
        Source of the permutations; required when ``permutations > 0``.
    variable : str, optional
        Name of ``y``, used in messages and in the result.

    Returns
    -------
    MoranResult

    Notes
    -----
    ``I = (n / S0) z'Wz / z'z`` with ``z`` the deviations from the mean; the moments under
    normality and under randomisation are those of Cliff and Ord (1981, *Spatial
    Processes*, ch. 1), with ``S0``, ``S1``, ``S2`` the usual weight sums and the
    randomisation variance using the sample kurtosis. ``p_norm`` and ``p_rand`` are
    one-sided, in the direction of the z-value, ``P(Z >= |z|)`` (esda's ``Moran`` with
    ``two_tailed=False``); ``p_norm_two_sided`` and ``p_rand_two_sided`` double them.
    This is the one convention of every Moran p-value in summary.json.

    The pseudo p-value is folded as in esda's ``Moran``: with ``P`` permutations,
    ``p_sim = (1 + min(#{I* >= I}, #{I* <= I})) / (P + 1)``, the tail on the side of the
    observed value. It is the upper tail whenever I is above the median of the null
    (in practice whenever I > EI). Simulated values within a relative ``1e-9`` of I count
    in both tails.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> ring = sp.csr_matrix(np.roll(np.eye(6), 1, axis=1) + np.roll(np.eye(6), -1, axis=1))
    >>> moran(np.array([1.0, 0, 1, 0, 1, 0]), ring, permutations=0).I
    -1.0
    """
    check_draws(permutations, rng)
    weights = _resolve_weights(graph, _length(y), what="y" if variable is None else variable)
    values = _values(y, variable or "y", weights)
    return _moran(values, weights.row, permutations, rng, variable)


def bivariate_moran(
    x: ArrayLike,
    y: ArrayLike,
    graph: WeightsLike,
    *,
    permutations: int = 999,
    rng: np.random.Generator | None = None,
    x_variable: str | None = None,
    y_variable: str | None = None,
) -> BivariateMoranResult:
    """Bivariate Moran's I of ``x`` against the spatial lag of ``y``.

    Parameters
    ----------
    x, y : array_like of float
        One value each per area; ``x`` is the focal variable (minority share) and ``y``
        the lagged one (covered fraction).
    graph : AreaGraph, libpysal.graph.Graph or scipy sparse matrix
        Spatial weights; row-standardised here.
    permutations : int
        Random permutations of ``y`` (0 skips the test).
    rng : numpy.random.Generator
        Source of the permutations; required when ``permutations > 0``.
    x_variable, y_variable : str, optional
        Names of the two variables.

    Returns
    -------
    BivariateMoranResult

    Notes
    -----
    Anselin, Syabri and Smirnov (2002), "Visualizing multivariate spatial correlation with
    dynamically linked windows": ``I_B = sum_i zx_i (W zy)_i / n`` with both variables
    standardised. The null permutes ``y`` over the areas and keeps ``x`` in place, as
    esda's ``Moran_BV`` does; the pseudo p-value is folded as in :func:`moran`. A
    negative ``I_B`` says that areas of high minority share sit among areas of low
    coverage.
    """
    check_draws(permutations, rng)
    weights = _resolve_weights(graph, _length(x), what=x_variable or "x")
    xv = _values(x, x_variable or "x", weights)
    yv = _values(y, y_variable or "y", weights)
    return _bivariate_moran(xv, yv, weights.row, permutations, rng, x_variable, y_variable)


def moran_moments(y: np.ndarray, weights: sp.spmatrix) -> MoranResult:
    """Moran's I with its analytic moments under the weights exactly as given.

    The one implementation of Moran's I behind :func:`moran` (which row-standardises and
    aligns first) and the residual Moran of :mod:`coverage_audit.explain`. No permutations;
    a constant ``y`` gives NaN figures with a :class:`DegenerateStatisticWarning`.
    """
    return _moran(np.asarray(y, dtype=float), sp.csr_matrix(weights, dtype=float), 0, None, None)


def _weight_sums(row: sp.csr_matrix) -> tuple[float, float, float]:
    """S0, S1, S2 of Cliff and Ord (1981) for a weights matrix."""
    s0 = float(row.sum())
    sym = row + row.T
    s1 = 0.5 * float(sym.multiply(sym).sum())
    s2 = float(
        ((np.asarray(row.sum(axis=1)).ravel() + np.asarray(row.sum(axis=0)).ravel()) ** 2).sum()
    )
    return s0, s1, s2


def _moran(
    y: np.ndarray,
    row: sp.csr_matrix,
    permutations: int,
    rng: np.random.Generator | None,
    variable: str | None,
) -> MoranResult:
    n = y.size
    if _is_constant(y):
        warn_degenerate(f"{variable or 'the variable'} is constant, so Moran's I is undefined")
        return _empty_moran(variable, n, permutations)
    z = y - y.mean()
    z2ss = float(z @ z)
    s0, s1, s2 = _weight_sums(row)
    scale = n / s0 / z2ss
    observed = float(scale * (z @ (row @ z)))
    ei = -1.0 / (n - 1)
    # Cliff and Ord (1981), moments of I under normality and under randomisation.
    vi_norm = (n * n * s1 - n * s2 + 3 * s0 * s0) / ((n - 1) * (n + 1) * s0 * s0) - ei * ei
    if n > 3:
        kurtosis = float((z**4).sum() / n / (z2ss / n) ** 2)
        a = n * ((n * n - 3 * n + 3) * s1 - n * s2 + 3 * s0 * s0)
        b = kurtosis * ((n * n - n) * s1 - 2 * n * s2 + 6 * s0 * s0)
        vi_rand = (a - b) / ((n - 1) * (n - 2) * (n - 3) * s0 * s0) - ei * ei
    else:
        warn_degenerate("the variance of Moran's I under randomisation needs at least 4 areas")
        vi_rand = math.nan
    z_norm = (observed - ei) / math.sqrt(vi_norm) if vi_norm > 0 else math.nan
    z_rand = (observed - ei) / math.sqrt(vi_rand) if vi_rand > 0 else math.nan
    sim = np.empty(0)
    if permutations:
        assert rng is not None
        sim = np.concatenate(
            [scale * _quadratic_forms(row, b) for b in _permutation_blocks(z, permutations, rng)]
        )
    ei_sim, z_sim, p_sim = _sim_summary(sim, observed)
    return MoranResult(
        variable=variable,
        n=n,
        I=observed,
        EI=ei,
        VI_norm=vi_norm,
        z_norm=z_norm,
        p_norm=_one_sided_normal_p(z_norm),
        VI_rand=vi_rand,
        z_rand=z_rand,
        p_rand=_one_sided_normal_p(z_rand),
        permutations=int(permutations),
        EI_sim=ei_sim,
        z_sim=z_sim,
        p_sim=p_sim,
        sim=sim,
    )


def _empty_moran(variable: str | None, n: int, permutations: int) -> MoranResult:
    nan = math.nan
    return MoranResult(
        variable=variable,
        n=n,
        I=nan,
        EI=-1.0 / (n - 1) if n > 1 else nan,
        VI_norm=nan,
        z_norm=nan,
        p_norm=nan,
        VI_rand=nan,
        z_rand=nan,
        p_rand=nan,
        permutations=int(permutations),
        EI_sim=nan,
        z_sim=nan,
        p_sim=nan,
        sim=np.empty(0),
    )


def _bivariate_moran(
    x: np.ndarray,
    y: np.ndarray,
    row: sp.csr_matrix,
    permutations: int,
    rng: np.random.Generator | None,
    x_variable: str | None,
    y_variable: str | None,
) -> BivariateMoranResult:
    n = x.size
    constant = [
        name or "a variable" for name, v in ((x_variable, x), (y_variable, y)) if _is_constant(v)
    ]
    if constant:
        verb = "is" if len(constant) == 1 else "are"
        warn_degenerate(
            f"{' and '.join(constant)} {verb} constant, so the bivariate Moran's I is undefined"
        )
        return _empty_bivariate(x_variable, y_variable, n, permutations)
    zx, zy = _standardise(x), _standardise(y)
    # Anselin, Syabri and Smirnov (2002): I_B = zx' W zy / n (S0 = n when row-standardised).
    scale = 1.0 / float(row.sum())
    observed = float(scale * (zx @ (row @ zy)))
    sim = np.empty(0)
    if permutations:
        assert rng is not None
        sim = np.concatenate(
            [scale * (zx @ (row @ block)) for block in _permutation_blocks(zy, permutations, rng)]
        )
    ei_sim, z_sim, p_sim = _sim_summary(sim, observed)
    return BivariateMoranResult(
        x_variable=x_variable,
        y_variable=y_variable,
        n=n,
        I=observed,
        permutations=int(permutations),
        EI_sim=ei_sim,
        z_sim=z_sim,
        p_sim=p_sim,
        sim=sim,
    )


def _empty_bivariate(
    x_variable: str | None, y_variable: str | None, n: int, permutations: int
) -> BivariateMoranResult:
    return BivariateMoranResult(
        x_variable=x_variable,
        y_variable=y_variable,
        n=n,
        I=math.nan,
        permutations=int(permutations),
        EI_sim=math.nan,
        z_sim=math.nan,
        p_sim=math.nan,
        sim=np.empty(0),
    )
