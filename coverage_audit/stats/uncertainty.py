"""Survey uncertainty: margins of error carried into coverage rates, ratios and flags.

Takes, over the analysed areas, each group's counts, the standard errors of the
independent survey estimates they are made of (or their variance replicates), the
covered fraction and served flag of each area, and gives each group's standard errors,
90% intervals, z of the difference to the comparison group, coefficient of variation and
a three-state four-fifths flag (:func:`coverage_uncertainty`), and 90% intervals for the
segregation indices and enclave group shares (:func:`index_intervals`).

Method
------
- ACS margins are published at the 90% level: SE = MOE / 1.645 (ACS General Handbook,
  chapter "Calculating Measures of Error for Derived Estimates").
- Per-area estimates are treated as independent and covered fractions as fixed (they come
  from geometry). Rates are ratio estimators p = sum f_i x_i / sum x_i, whose first-order
  Taylor (delta-method) variance is sum_i ((f_i - p) / X)^2 SE_i^2.
- Every figure is a function of a few *base* estimates per area (each group given, the
  total); a derived group is a linear combination of them (minority = total - reference).
  Variances are taken over the base estimates, so a ratio or difference between the
  minority and the reference carries their covariance (Cov(m_i, r_i) = -SE_r,i^2, under
  the handbook's independence of total and reference; that independence is itself the
  Census Bureau's approximation, the one behind its difference rule
  MOE = sqrt(MOE_total^2 + MOE_ref^2)).
- With variance replicate tables (80 replicate estimates per count), every figure is
  recomputed on each replicate and Var = 4/80 * sum_r (X_r - X)^2 (successive difference
  replication, ACS Design and Methodology, chapter on variance estimation) replaces the
  delta method.
- Segregation indices and enclave group shares are not smooth enough for a short
  linearisation: without replicates they get a seeded parametric bootstrap (counts drawn
  from normal distributions with the published standard errors, clipped at 0; the 5th and
  95th percentiles of the indices form the interval).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._util import clean_number, to_jsonable
from .four_fifths import ratio_below_four_fifths

__all__ = [
    "CV_CUTOFFS",
    "REPLICATE_COUNT",
    "Z90",
    "CountErrors",
    "CoverageUncertainty",
    "GroupUncertainty",
    "IndexIntervals",
    "class_rate_intervals",
    "coefficient_of_variation",
    "coverage_uncertainty",
    "distinguishable",
    "four_fifths_confidence",
    "index_intervals",
    "interval90",
    "moe_product",
    "moe_proportion",
    "moe_ratio",
    "moe_sum",
    "rate_variance",
    "replicate_variance",
    "standard_error",
    "z_difference",
]

#: The normal quantile of ACS margins: published margins are at the 90% level.
Z90 = 1.645
#: Replicate estimates in an ACS variance replicate table.
REPLICATE_COUNT = 80
#: Successive-difference replication factor: Var = 4/80 * sum_r (X_r - X)^2.
SDR_FACTOR = 4.0 / REPLICATE_COUNT
#: CVs above these are commonly flagged as unreliable (common practice, no single source).
CV_CUTOFFS = (0.30, 0.40)
#: Bootstrap draws held in memory at once (rows of a draws x areas block).
_CHUNK_CELLS = 1 << 20


# --------------------------------------------------------------------- handbook formulas


def standard_error(moe: Any) -> np.ndarray:
    """Return the standard error of a 90% margin of error: SE = MOE / 1.645."""
    return np.asarray(moe, dtype=float) / Z90


def moe_sum(moes: Sequence[float], estimates: Sequence[float] | None = None) -> float:
    """Margin of error of a sum of estimates, MOE = sqrt(sum_i MOE_i^2).

    With ``estimates`` given, the handbook's rule for several zero estimates applies:
    of the zero estimates, only the largest margin enters the sum.

    Notes
    -----
    ACS General Handbook, chapter on calculating measures of error for derived estimates
    (sums and differences); the zero-estimate rule is quoted from memory.
    """
    m = np.asarray(moes, dtype=float)
    if estimates is not None:
        e = np.asarray(estimates, dtype=float)
        zero = e == 0
        if zero.sum() > 1:
            m = np.concatenate([m[~zero], [m[zero].max()]])
    return float(np.sqrt(np.sum(m**2)))


def moe_proportion(x: float, y: float, moe_x: float, moe_y: float) -> float:
    """Margin of error of a proportion p = X / Y where X is a subset of Y.

    MOE = (1/Y) sqrt(MOE_X^2 - p^2 MOE_Y^2); when the radicand is negative the ratio form
    (1/Y) sqrt(MOE_X^2 + p^2 MOE_Y^2) is used (ACS General Handbook, chapter on
    calculating measures of error).
    """
    p = x / y
    radicand = moe_x**2 - p**2 * moe_y**2
    if radicand < 0:
        return moe_ratio(x, y, moe_x, moe_y)
    return float(math.sqrt(radicand) / y)


def moe_ratio(x: float, y: float, moe_x: float, moe_y: float) -> float:
    """Margin of error of a ratio R = X / Y: (1/Y) sqrt(MOE_X^2 + R^2 MOE_Y^2) (handbook)."""
    r = x / y
    return float(math.sqrt(moe_x**2 + r**2 * moe_y**2) / y)


def moe_product(x: float, y: float, moe_x: float, moe_y: float) -> float:
    """Margin of error of a product X * Y: sqrt(X^2 MOE_Y^2 + Y^2 MOE_X^2) (handbook)."""
    return float(math.sqrt(x**2 * moe_y**2 + y**2 * moe_x**2))


def z_difference(x1: float, se1: float, x2: float, se2: float) -> float | None:
    """Return z = (X1 - X2) / sqrt(SE1^2 + SE2^2) for independent estimates (None if SE 0)."""
    se = math.hypot(se1, se2)
    return None if se == 0 or not math.isfinite(se) else float((x1 - x2) / se)


def distinguishable(z: float | None) -> bool | None:
    """Apply the Census Bureau's test: estimates differ at 90% when |z| > 1.645."""
    return None if z is None else bool(abs(z) > Z90)


def coefficient_of_variation(estimate: float, se: float) -> float | None:
    """CV = SE / estimate (None for a zero estimate)."""
    if estimate == 0 or not math.isfinite(estimate):
        return None
    return float(se / abs(estimate))


def replicate_variance(estimate: Any, replicates: Any) -> np.ndarray:
    """Successive-difference replicate variance, Var = 4/80 * sum_r (X_r - X)^2.

    Parameters
    ----------
    estimate : array_like
        The full-sample estimate(s).
    replicates : array_like
        Replicate estimates along the first axis (80 for ACS tables).
    """
    r = np.asarray(replicates, dtype=float)
    diff = r - np.asarray(estimate, dtype=float)
    return 4.0 / r.shape[0] * np.sum(diff**2, axis=0)


def rate_variance(fraction: Any, counts: Any, se: Any) -> float:
    """Delta-method variance of p = sum f_i x_i / sum x_i with fixed f_i.

    Var(p) = sum_i ((f_i - p) / X)^2 SE_i^2, X = sum_i x_i (first-order Taylor
    linearisation of a ratio estimator with independent area estimates).
    """
    f = np.asarray(fraction, dtype=float)
    x = np.asarray(counts, dtype=float)
    total = x.sum()
    if total <= 0:
        return math.nan
    p = float(np.dot(f, x) / total)
    grad = (f - p) / total
    return float(np.sum(grad**2 * np.asarray(se, dtype=float) ** 2))


def interval90(
    estimate: float | None, se: float | None, low: float | None = None, high: float | None = None
) -> list[float] | None:
    """Return [estimate - 1.645 SE, estimate + 1.645 SE], clipped to [low, high]."""
    if estimate is None or se is None or not math.isfinite(se):
        return None
    lo, hi = estimate - Z90 * se, estimate + Z90 * se
    if low is not None:
        lo = max(lo, low)
    if high is not None:
        hi = min(hi, high)
    return [float(lo), float(hi)]


def four_fifths_confidence(ratio_ci: Sequence[float] | None) -> str | None:
    """Return "below", "not_below" or "uncertain" for a ratio's 90% interval.

    "below": the whole interval is under 0.8; "not_below": the whole interval is at or
    above 0.8; "uncertain": it straddles 0.8; None when the ratio is undefined.

    The screen is strict (29 CFR 1607.4(D): "less than four-fifths"), so an upper end of
    exactly 0.8 is not "below", and a lower end of exactly 0.8 is "not_below".
    """
    if ratio_ci is None:
        return None
    low, high = ratio_ci
    # The one rule of the package (stats/four_fifths.py), applied to each end.
    if ratio_below_four_fifths(high):
        return "below"
    if not ratio_below_four_fifths(low):
        return "not_below"
    return "uncertain"


# ---------------------------------------------------------------------- coverage figures


@dataclass(frozen=True)
class CountErrors:
    """The sampling error behind the group counts.

    Attributes
    ----------
    se : Mapping[str, numpy.ndarray]
        Base estimate name -> per-area standard error. Base estimates are independent.
    composition : Mapping[str, Mapping[str, float]]
        Group -> {base estimate: coefficient}; a given group is {its name: 1}, the derived
        minority {total: 1, reference: -1}. A group left out has no known error.
    replicates : Mapping[str, numpy.ndarray], optional
        Group (and ``"population"``) -> replicate counts, shape (replicates, areas). When
        given, every figure uses the replicate variance instead of the delta method.
    """

    se: Mapping[str, np.ndarray]
    composition: Mapping[str, Mapping[str, float]]
    replicates: Mapping[str, np.ndarray] | None = None

    @property
    def method(self) -> str:
        """``"replicates"`` or ``"delta"``."""
        return "replicates" if self.replicates is not None else "delta"

    def known(self, *groups: str) -> bool:
        """Whether the error of every group named is known."""
        source = self.replicates if self.replicates is not None else self.composition
        return all(g in source for g in groups)


@dataclass(frozen=True)
class GroupUncertainty:
    """Survey error of one group's coverage figures (None where undefined)."""

    population_se: float | None
    population_moe90: float | None
    cv: float | None
    rate_se: float | None
    rate_moe90: float | None
    rate_ci90: list[float] | None
    served_area_rate_se: float | None
    served_area_rate_ci90: list[float] | None
    served_area_ratio_ci90: list[float] | None
    ratio_se: float | None
    ratio_ci90: list[float] | None
    difference_se: float | None
    difference_z: float | None
    difference_distinguishable: bool | None
    four_fifths_confidence: str | None

    @classmethod
    def unknown(cls) -> GroupUncertainty:
        """Return figures for a group whose sampling error is not known (all None)."""
        return cls(**dict.fromkeys(cls.__dataclass_fields__))

    def to_dict(self) -> dict[str, Any]:
        """Plain data; the keys are added to ``coverage.groups.<g>`` of summary.json."""
        return {k: to_jsonable(v) for k, v in self.__dict__.items()}


@dataclass(frozen=True)
class CoverageUncertainty:
    """Survey error of every group's coverage figures."""

    method: str
    comparison_group: str
    groups: Mapping[str, GroupUncertainty]

    def to_dict(self) -> dict[str, Any]:
        """Plain data: the method and the figures by group."""
        return {
            "method": self.method,
            "groups": {g: u.to_dict() for g, u in self.groups.items()},
        }


def _gradient_variance(errors: CountErrors, grads: Mapping[str, np.ndarray]) -> float:
    """Var of a figure with gradient ``grads[g]`` with respect to group g's counts."""
    per_base: dict[str, np.ndarray] = {}
    for g, grad in grads.items():
        for base, coef in errors.composition[g].items():
            per_base[base] = per_base.get(base, 0.0) + coef * grad
    return float(sum(np.sum(v**2 * errors.se[b] ** 2) for b, v in per_base.items()))


def _rate_and_gradient(weight: np.ndarray, x: np.ndarray) -> tuple[float | None, np.ndarray]:
    total = float(x.sum())
    if total <= 0:
        return None, np.zeros_like(x)
    p = float(np.dot(weight, x) / total)
    return p, (weight - p) / total


def _sd(var: float | None) -> float | None:
    return None if var is None or not math.isfinite(var) else float(math.sqrt(max(var, 0.0)))


def coverage_uncertainty(
    counts: Mapping[str, np.ndarray],
    errors: CountErrors,
    fraction: np.ndarray,
    served: np.ndarray,
    comparison_group: str,
) -> CoverageUncertainty:
    """Compute SEs, 90% intervals, z and four-fifths confidence of every group.

    Parameters
    ----------
    counts : Mapping[str, numpy.ndarray]
        Group -> per-area count estimates (the full sample).
    errors : CountErrors
        Their sampling error (standard errors of base estimates, or replicates).
    fraction : numpy.ndarray
        Covered fraction of each area (fixed).
    served : numpy.ndarray of bool
        Served flag of each area (fixed).
    comparison_group : str
        The group ratios and differences are taken against.

    Returns
    -------
    CoverageUncertainty
        Groups whose error is unknown get None in every figure.
    """
    f = np.asarray(fraction, dtype=float)
    s = np.asarray(served, dtype=float)
    c = comparison_group
    rates = {g: _rate_and_gradient(f, x) for g, x in counts.items()}
    srates = {g: _rate_and_gradient(s, x) for g, x in counts.items()}
    rep = _replicate_rates(counts, errors, f, s) if errors.replicates is not None else None
    out: dict[str, GroupUncertainty] = {}
    for g, x in counts.items():
        if not errors.known(g):
            out[g] = GroupUncertainty.unknown()
            continue
        population = float(x.sum())
        p, grad = rates[g]
        sp, sgrad = srates[g]
        pc, cgrad = rates[c]
        spc, scgrad = srates[c]
        pair = errors.known(c) and p is not None and pc is not None
        ratio = p / pc if pair and pc else None  # type: ignore[operator]
        sratio = sp / spc if errors.known(c) and sp is not None and spc else None
        if rep is not None:
            var_pop = float(replicate_variance(population, rep["population", g]))
            var_rate = _rep_var(p, rep["rate", g])
            var_srate = _rep_var(sp, rep["served", g])
            with np.errstate(divide="ignore", invalid="ignore"):
                rep_ratio = rep["rate", g] / rep["rate", c] if ratio else None
                rep_sratio = rep["served", g] / rep["served", c] if sratio else None
            var_ratio = _rep_var(ratio, rep_ratio) if rep_ratio is not None else None
            var_diff = _rep_var(p - pc, rep["rate", g] - rep["rate", c]) if pair else None  # type: ignore[operator]
            var_sratio = _rep_var(sratio, rep_sratio) if rep_sratio is not None else None
        else:
            var_pop = _gradient_variance(errors, {g: np.ones_like(x)})
            var_rate = _gradient_variance(errors, {g: grad}) if p is not None else None
            var_srate = _gradient_variance(errors, {g: sgrad}) if sp is not None else None
            var_ratio = var_diff = var_sratio = None
            if sratio is not None and g == c:
                var_sratio = 0.0
            elif sratio is not None:
                var_sratio = _gradient_variance(
                    errors,
                    {g: sgrad / spc, c: -scgrad * sp / spc**2},  # type: ignore[operator]
                )
            if pair and g == c:
                var_ratio = var_diff = 0.0
            elif pair:
                var_diff = _gradient_variance(errors, {g: grad, c: -cgrad})
                if ratio is not None:
                    var_ratio = _gradient_variance(
                        errors,
                        {g: grad / pc, c: -cgrad * p / pc**2},  # type: ignore[operator]
                    )
        pop_se = _sd(var_pop)
        rate_se = _sd(var_rate)
        ratio_se = _sd(var_ratio)
        diff_se = _sd(var_diff)
        difference = p - pc if pair else None  # type: ignore[operator]
        z = None if difference is None or not diff_se else float(difference / diff_se)
        ratio_ci = interval90(ratio, ratio_se, low=0.0)
        out[g] = GroupUncertainty(
            population_se=pop_se,
            population_moe90=None if pop_se is None else Z90 * pop_se,
            cv=None if pop_se is None else coefficient_of_variation(population, pop_se),
            rate_se=rate_se,
            rate_moe90=None if rate_se is None else Z90 * rate_se,
            rate_ci90=interval90(p, rate_se, 0.0, 1.0),
            served_area_rate_se=_sd(var_srate),
            served_area_rate_ci90=interval90(sp, _sd(var_srate), 0.0, 1.0),
            served_area_ratio_ci90=interval90(sratio, _sd(var_sratio), low=0.0),
            ratio_se=ratio_se,
            ratio_ci90=ratio_ci,
            difference_se=diff_se,
            difference_z=z,
            difference_distinguishable=distinguishable(z) if g != c else None,
            four_fifths_confidence=four_fifths_confidence(ratio_ci),
        )
    return CoverageUncertainty(errors.method, c, out)


def class_rate_intervals(
    fraction: np.ndarray,
    total: np.ndarray,
    masks: Mapping[str, np.ndarray],
    *,
    se_total: np.ndarray | None = None,
    total_replicates: np.ndarray | None = None,
) -> dict[str, list[float] | None]:
    """90% intervals of the coverage rate of the whole population in classes of area.

    The rate of class m is sum_{i in m} f_i t_i / sum_{i in m} t_i, a ratio estimator in
    the total counts: its delta-method variance is sum_{i in m} ((f_i - p_m)/T_m)^2 SE_i^2,
    or the replicate variance when replicates are given. Class membership (for example
    majority-minority) is taken as fixed, although it rests on estimates too.
    """
    f = np.asarray(fraction, dtype=float)
    out: dict[str, list[float] | None] = {}
    for name, mask in masks.items():
        m = np.asarray(mask, dtype=bool)
        t = np.where(m, total, 0.0)
        p, grad = _rate_and_gradient(f, t)
        if p is None:
            out[name] = None
        elif total_replicates is not None:
            reps = np.where(m, total_replicates, 0.0)
            rates = reps @ f / reps.sum(axis=1)
            out[name] = interval90(p, _sd(_rep_var(p, rates)), 0.0, 1.0)
        elif se_total is not None:
            # Areas outside the class do not enter its rate: no gradient there.
            inside = grad * m
            out[name] = interval90(p, _sd(float(np.sum(inside**2 * se_total**2))), 0.0, 1.0)
        else:
            out[name] = None
    return out


def _rep_var(estimate: float | None, replicates: np.ndarray) -> float | None:
    if estimate is None or not np.all(np.isfinite(replicates)):
        return None
    return float(replicate_variance(estimate, replicates))


def _replicate_rates(
    counts: Mapping[str, np.ndarray], errors: CountErrors, f: np.ndarray, s: np.ndarray
) -> dict[tuple[str, str], np.ndarray]:
    """Compute population, rate and served-area rate of each group on each replicate."""
    assert errors.replicates is not None
    out: dict[tuple[str, str], np.ndarray] = {}
    for g in counts:
        reps = errors.replicates.get(g)
        if reps is None:
            continue
        totals = reps.sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            out["population", g] = totals
            out["rate", g] = np.where(totals > 0, reps @ f / totals, np.nan)
            out["served", g] = np.where(totals > 0, reps @ s / totals, np.nan)
    return out


# ------------------------------------------------------- indices: bootstrap or replicates


@dataclass(frozen=True)
class IndexIntervals:
    """90% intervals of the segregation indices and of the enclave group shares.

    Attributes
    ----------
    method : str
        ``"parametric bootstrap"`` or ``"replicates"``.
    draws : int
        Bootstrap draws, or replicates used.
    indices : Mapping[str, Mapping[str, list[float] | None]]
        Index name (``dissimilarity``, ``isolation``, ``coverage_dissimilarity``,
        ``areal_coverage_dissimilarity``) -> group -> [low, high].
    enclave_shares : tuple of Mapping[str, list[float] | None]
        For each enclave given, group -> [low, high] of its share of the population.
    """

    method: str
    draws: int
    indices: Mapping[str, Mapping[str, list[float] | None]]
    enclave_shares: tuple[Mapping[str, list[float] | None], ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain data for ``segregation.uncertainty`` of summary.json."""
        return {
            "method": self.method,
            "draws": int(self.draws),
            **{f"{k}_ci90": to_jsonable(v) for k, v in self.indices.items()},
        }


def _block_indices(
    groups: Mapping[str, np.ndarray],
    total: np.ndarray,
    reference: str,
    served: np.ndarray,
    fraction: np.ndarray,
    enclaves: Sequence[np.ndarray],
) -> dict[tuple[str, str], np.ndarray]:
    """Every index for a block of draws: arrays of shape (draws, areas) in, (draws,) out."""
    out: dict[tuple[str, str], np.ndarray] = {}
    y = groups[reference]
    Y = y.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        # 0/0 taken as 0 in the isolation terms, as in segregation.py.
        inv_t = np.divide(1.0, total, out=np.zeros(total.shape), where=total > 0)
        y_share = y / Y[:, None]
        y_in = {name: y @ w / Y for name, w in _BINS(served, fraction)}
        enclave_pop = [total[:, idx].sum(axis=1) for idx in enclaves]
        for g, x in groups.items():
            X = x.sum(axis=1)
            # Isolation xPx* = sum_i (x_i/X)(x_i/t_i) (Massey and Denton 1988).
            out["isolation", g] = np.where(X > 0, np.einsum("ij,ij->i", x * inv_t, x) / X, np.nan)
            for k, idx in enumerate(enclaves):
                pop = enclave_pop[k]
                out[f"enclave{k}", g] = np.where(pop > 0, x[:, idx].sum(axis=1) / pop, np.nan)
            if g == reference:
                continue
            ok = (X > 0) & (Y > 0)
            # Duncan and Duncan (1955): D = 1/2 sum |x_i/X - y_i/Y|.
            diff = x / X[:, None]
            diff -= y_share
            np.abs(diff, out=diff)
            out["dissimilarity", g] = np.where(ok, 0.5 * diff.sum(axis=1), np.nan)
            # Two bins (in, out): D = |a - b|, a and b the groups' shares in the first bin.
            for name, w in _BINS(served, fraction):
                out[name, g] = np.where(ok, np.abs(x @ w / X - y_in[name]), np.nan)
    return out


def _BINS(served: np.ndarray, fraction: np.ndarray) -> tuple[tuple[str, np.ndarray], ...]:
    return (("coverage_dissimilarity", served), ("areal_coverage_dissimilarity", fraction))


def _draw_block(
    estimates: Mapping[str, np.ndarray],
    errors: CountErrors,
    groups: Sequence[str],
    total: np.ndarray,
    rows: int,
    rng: np.random.Generator,
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """``rows`` draws of every group's counts and of the total from normal distributions.

    Base estimates are drawn independently with their standard errors and clipped at 0;
    groups are composed from them (clipped at 0), and the drawn total is raised to the
    largest group of the area where a draw put a group above it.
    """
    bases: dict[str, np.ndarray] = {}
    for base, se in errors.se.items():
        est = total if base == "population" else estimates[base]
        draw = rng.standard_normal((rows, est.size))
        draw *= se
        draw += est
        bases[base] = np.maximum(draw, 0.0, out=draw)
    drawn: dict[str, np.ndarray] = {}
    for g in groups:
        comp = errors.composition.get(g)
        if comp is None:
            drawn[g] = np.broadcast_to(estimates[g], (rows, total.size))
        elif dict(comp) == {g: 1.0}:
            drawn[g] = bases[g]
        else:
            acc = np.zeros((rows, total.size))
            for base, coef in comp.items():
                acc += coef * bases[base]
            drawn[g] = np.maximum(acc, 0.0, out=acc)
    t = bases["population"] if "population" in bases else np.tile(total, (rows, 1))
    for x in drawn.values():
        np.maximum(t, x, out=t)
    return drawn, t


def index_intervals(
    estimates: Mapping[str, np.ndarray],
    total: np.ndarray,
    errors: CountErrors,
    reference: str,
    served: np.ndarray,
    fraction: np.ndarray,
    enclaves: Sequence[np.ndarray] = (),
    *,
    draws: int,
    rng: np.random.Generator,
    total_replicates: np.ndarray | None = None,
) -> IndexIntervals:
    """90% intervals of the segregation indices and enclave group shares.

    Parameters
    ----------
    estimates : Mapping[str, numpy.ndarray]
        Group -> per-area counts (full sample); the reference group among them.
    total : numpy.ndarray
        Total population per area.
    errors : CountErrors
        Sampling error; with replicates, the replicate variance is used (and
        ``total_replicates`` when the total has replicates) and ``rng`` is not touched.
    reference : str
        Reference group of the two-group indices.
    served, fraction : numpy.ndarray
        Served flag and covered fraction of each area.
    enclaves : sequence of numpy.ndarray
        Positions of the member areas of each enclave.
    draws : int
        Bootstrap draws.
    rng : numpy.random.Generator
        The seeded stream of the bootstrap.

    Returns
    -------
    IndexIntervals
        Percentile intervals (5th, 95th) of the bootstrap, or estimate +- 1.645 SE with the
        replicate SE; clipped to [0, 1].
    """
    served_w = np.asarray(served, dtype=float)
    frac = np.asarray(fraction, dtype=float)
    names = list(estimates)
    full = _block_indices(
        {g: v[None, :] for g, v in estimates.items()},
        total[None, :],
        reference,
        served_w,
        frac,
        enclaves,
    )
    samples: dict[tuple[str, str], list[np.ndarray]] = {k: [] for k in full}
    if errors.replicates is not None:
        reps = errors.replicates
        n_rep = next(iter(reps.values())).shape[0]
        groups = {g: reps.get(g, np.broadcast_to(estimates[g], (n_rep, total.size))) for g in names}
        t = (
            total_replicates
            if total_replicates is not None
            else np.broadcast_to(total, (n_rep, total.size))
        )
        for k, v in _block_indices(groups, t, reference, served_w, frac, enclaves).items():
            samples[k].append(v)
        method, count = "replicates", n_rep
    else:
        rows = max(1, min(draws, _CHUNK_CELLS // max(total.size, 1)))
        done = 0
        while done < draws:
            k_rows = min(rows, draws - done)
            groups, t = _draw_block(estimates, errors, names, total, k_rows, rng)
            for k, v in _block_indices(groups, t, reference, served_w, frac, enclaves).items():
                samples[k].append(v)
            done += k_rows
        method, count = "parametric bootstrap", draws
    intervals: dict[tuple[str, str], list[float] | None] = {}
    for key, parts in samples.items():
        values = np.concatenate(parts)
        estimate = float(full[key][0])
        known = errors.known(key[1]) and (key[0] == "isolation" or errors.known(reference))
        if not known or not math.isfinite(estimate) or not np.all(np.isfinite(values)):
            intervals[key] = None
        elif method == "replicates":
            se = math.sqrt(float(replicate_variance(estimate, values)))
            intervals[key] = interval90(estimate, se, 0.0, 1.0)
        else:
            lo, hi = np.quantile(values, [0.05, 0.95])
            intervals[key] = [float(lo), float(hi)]
    indices: dict[str, dict[str, list[float] | None]] = {}
    shares: list[dict[str, list[float] | None]] = [{} for _ in enclaves]
    for (name, g), ci in intervals.items():
        if name.startswith("enclave"):
            shares[int(name[len("enclave") :])][g] = ci
        else:
            indices.setdefault(name, {})[g] = ci
    return IndexIntervals(method, count, indices, tuple(shares))


def clean_interval(ci: Sequence[float] | None) -> list[Any] | None:
    """Return an interval as JSON-safe numbers."""
    return None if ci is None else [clean_number(v) for v in ci]
