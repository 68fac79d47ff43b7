"""Exclusion models: whether minority share still predicts being left out once controls enter.

Takes the per-area table of the coverage stage (one row per analysed area with ``served``,
``covered_fraction``, ``minority_share`` and optional income tier, density and user-named
control columns) and gives :class:`ExclusionModels`: binary logistic models of being
unserved and fractional logit models of the uncovered share, each with and without the
controls, plus the Moran's I of their residuals (:mod:`coverage_audit.stats.residual_moran`).
The design matrix is built in :mod:`coverage_audit.stats.model_design`. The functions only
read the table; nothing here reaches back to files or earlier stages.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy import stats
from scipy.optimize import linprog

from .._util import to_jsonable
from ..errors import AnalysisError, DroppedRowsWarning, SmallSampleWarning, SpecError
from ._spatial import WeightsLike
from ._validate import area_ids, check_columns
from .model_design import MINORITY_STEP, DroppedRow, _build_design
from .residual_moran import ResidualMoran, _residual_moran, _resolve_weights

#: Two-sided 95 % normal quantile for Wald intervals.
Z_95 = float(stats.norm.ppf(0.975))
#: Events per parameter below which a logistic fit is warned about (Peduzzi et al. 1996,
#: J. Clin. Epidemiol. 49(12), 1373-1379: "ten events per variable").
MIN_EVENTS_PER_PARAMETER = 10.0

OUTCOME_NOTE = (
    "the binary models give the odds of an area NOT being served (unserved = 1 - served); "
    "the fractional models give the odds of the uncovered share (1 - covered_fraction); "
    "odds ratios above 1 mean more exclusion"
)
SCALE_NOTE = "minority share enters per 10 percentage points (odds ratio per 10-point rise)"


# --------------------------------------------------------------------------------------
# Result objects
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Term:
    """One coefficient of a fitted model, on the log-odds and the odds-ratio scale.

    Attributes
    ----------
    name : str
        Design column (``"intercept"``, ``"minority_share_per_10pp"``, a control, or a
        category indicator ``"column[level]"``).
    coefficient, std_error : float
        Log-odds coefficient and its standard error.
    odds_ratio, ci_low, ci_high : float
        ``exp(coefficient)`` and the 95 % Wald interval ``exp(b -/+ 1.96 se)``.
    z, p_value : float
        Wald statistic and its two-sided normal p-value.
    """

    name: str
    coefficient: float
    std_error: float
    odds_ratio: float
    ci_low: float
    ci_high: float
    z: float
    p_value: float

    def to_dict(self) -> dict[str, Any]:
        """Return the term as JSON-safe data."""
        return to_jsonable(
            {
                "name": self.name,
                "coefficient": self.coefficient,
                "std_error": self.std_error,
                "odds_ratio": self.odds_ratio,
                "ci_low": self.ci_low,
                "ci_high": self.ci_high,
                "z": self.z,
                "p_value": self.p_value,
            }
        )


@dataclass(frozen=True)
class ModelFit:
    """One fitted model.

    Attributes
    ----------
    name : str
        ``"unserved_minority_only"``, ``"unserved_with_controls"``,
        ``"uncovered_minority_only"`` or ``"uncovered_with_controls"``.
    kind : {"logit", "fractional_logit"}
        Logistic regression of ``unserved`` or fractional logit of ``1 - covered_fraction``.
    outcome : str
        What the odds are the odds of, in words.
    covariance : str
        ``"model"`` (inverse information) or the robust sandwich used (``"HC0"``/``"HC1"``).
    n : int
        Areas in the fit.
    terms : tuple of Term
        Intercept first, then minority share, then the controls.
    log_likelihood : float
        Log-likelihood (a quasi-log-likelihood for the fractional logit).
    pseudo_r2 : float or None
        McFadden's pseudo R-squared for the logistic models; None for fractional logit.
    residual_moran : ResidualMoran or None
        Present when weights were given.
    """

    name: str
    kind: str
    outcome: str
    covariance: str
    n: int
    terms: tuple[Term, ...]
    log_likelihood: float
    pseudo_r2: float | None
    residual_moran: ResidualMoran | None

    def term(self, name: str) -> Term:
        """Return the term called ``name``."""
        for t in self.terms:
            if t.name == name:
                return t
        raise KeyError(
            f'model {self.name} has no term "{name}"; terms: {[t.name for t in self.terms]}'
        )

    def to_dict(self) -> dict[str, Any]:
        """Return the fit as JSON-safe data."""
        return to_jsonable(
            {
                "name": self.name,
                "kind": self.kind,
                "outcome": self.outcome,
                "covariance": self.covariance,
                "n": self.n,
                "terms": [t.to_dict() for t in self.terms],
                "log_likelihood": self.log_likelihood,
                "pseudo_r2": self.pseudo_r2,
                "residual_moran": None
                if self.residual_moran is None
                else self.residual_moran.to_dict(),
            }
        )


@dataclass(frozen=True)
class MinorityChange:
    """How the minority-share odds ratio moves when the controls enter one model family.

    ``ratio = odds_ratio_with_controls / odds_ratio_alone`` and
    ``percent_change = 100 * (ratio - 1)``; a large fall means the controls account for
    much of the raw association, a small one that they do not.
    """

    kind: str
    odds_ratio_alone: float
    odds_ratio_with_controls: float
    ratio: float
    percent_change: float

    def to_dict(self) -> dict[str, Any]:
        """Return the change as JSON-safe data."""
        return to_jsonable(
            {
                "kind": self.kind,
                "odds_ratio_alone": self.odds_ratio_alone,
                "odds_ratio_with_controls": self.odds_ratio_with_controls,
                "ratio": self.ratio,
                "percent_change": self.percent_change,
            }
        )


@dataclass(frozen=True)
class ExclusionModels:
    """Controlled models of being left out of the footprint.

    Attributes
    ----------
    minority_term : str
        Name of the minority-share term (scaled per 10 percentage points).
    controls : tuple of str
        Control columns as given.
    design_columns : tuple of str
        Columns of the full design, category indicators expanded.
    category_references : dict
        Reference level of each categorical control.
    n_areas : int
        Areas used by every model (the same rows for all four).
    events_per_parameter : float
        ``min(unserved, served) / predictors`` of the model with controls.
    models : dict of str to ModelFit
        The fitted models; the ``*_with_controls`` ones only when controls were given.
    minority_change : tuple of MinorityChange
        One per model family when controls were given.
    dropped : tuple of DroppedRow
        Rows left out because a model value was missing or not a number.
    notes : tuple of str
        Outcome direction, scaling and covariance notes for the reader.
    """

    minority_term: str
    controls: tuple[str, ...]
    design_columns: tuple[str, ...]
    category_references: Mapping[str, str]
    n_areas: int
    events_per_parameter: float
    models: Mapping[str, ModelFit]
    minority_change: tuple[MinorityChange, ...]
    dropped: tuple[DroppedRow, ...]
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return the models as JSON-safe data (for summary.json)."""
        return to_jsonable(
            {
                "outcome_note": OUTCOME_NOTE,
                "scale_note": SCALE_NOTE,
                "minority_term": self.minority_term,
                "minority_step": MINORITY_STEP,
                "controls": list(self.controls),
                "design_columns": list(self.design_columns),
                "category_references": dict(self.category_references),
                "n_areas": self.n_areas,
                "events_per_parameter": self.events_per_parameter,
                "models": {k: v.to_dict() for k, v in self.models.items()},
                "minority_change": [c.to_dict() for c in self.minority_change],
                "dropped_rows": [d.to_dict() for d in self.dropped],
                "notes": list(self.notes),
            }
        )


# --------------------------------------------------------------------------------------
# Controlled models
# --------------------------------------------------------------------------------------


def exclusion_models(
    table: pd.DataFrame,
    *,
    controls: Sequence[str] = (),
    minority_column: str = "minority_share",
    id_column: str | None = None,
    categorical: Sequence[str] = (),
    category_references: Mapping[str, str] | None = None,
    weights: WeightsLike | np.ndarray | None = None,
    robust: Literal["HC0", "HC1"] = "HC0",
) -> ExclusionModels:
    """Model the odds of an area being left out, by minority share, with and without controls.

    Four models share one set of rows: a logistic regression of ``unserved = 1 - served``
    on minority share alone and with the controls, and a fractional logit of the uncovered
    share ``1 - covered_fraction`` alone and with the controls.

    Parameters
    ----------
    table : pandas.DataFrame
        Per-area table with ``served``, ``covered_fraction``, ``minority_column`` and the
        control columns.
    controls : sequence of str
        Control columns. Numeric and boolean columns enter as they are; text, categorical
        and listed ``categorical`` columns enter as indicators against a reference level.
    minority_column : str
        Minority share, a fraction in [0, 1]; it enters per 10 percentage points.
    id_column : str, optional
        Column naming each area, used to report dropped rows and to align ``weights``;
        the table index when omitted.
    categorical : sequence of str
        Controls to code as categories even when their values are numbers.
    category_references : mapping, optional
        Reference level per categorical control; the most frequent level by default
        (ties go to the first level in sorted order).
    weights : libpysal.graph.Graph, AreaGraph, scipy sparse matrix or ndarray, optional
        Spatial weights for Moran's I of the residuals. A ``Graph`` whose ids are area ids
        and an :class:`~coverage_audit.weights.AreaGraph` are aligned by id (areas not in
        the weights, such as islands, are left out of the statistic); a matrix must be
        n x n in table row order. Rows are re-standardised over the fitted areas.
    robust : {"HC0", "HC1"}
        Sandwich covariance of the fractional logit; HC1 multiplies HC0 by ``n/(n-k)``.

    Returns
    -------
    ExclusionModels

    Raises
    ------
    AnalysisError
        A named column is missing, a value is out of range, fewer than ``k + 2`` areas
        remain for ``k`` parameters, the outcome does not vary, the design is collinear
        (the columns are named), or the outcome is perfectly or quasi-perfectly separated.

    Warns
    -----
    DroppedRowsWarning
        Rows with a missing or non-numeric value in a model column were left out; they
        are listed in :attr:`ExclusionModels.dropped`.
    SmallSampleWarning
        Fewer than 10 events (the rarer of served and unserved) per predictor.

    Notes
    -----
    Missing-value policy: a row whose served flag, covered fraction, minority share or
    any control is missing, infinite or not a number is dropped from all four models, so
    that the odds ratios with and without controls describe the same areas; each dropped
    row is reported with its id and reason.

    The fractional logit is the Bernoulli quasi-likelihood estimator of Papke and
    Wooldridge (1996, *Journal of Applied Econometrics* 11(6), 619-632) with the robust
    sandwich covariance they recommend. Separation (Albert and Anderson 1984,
    *Biometrika* 71(1), 1-10) is detected before fitting with the linear programme of
    Konis (2007, DPhil thesis, Oxford; from memory): a direction ``d`` with
    ``(2y - 1) x'd >= 0`` for every area, not all zero, means the likelihood has no
    maximum.
    """
    controls = tuple(controls)
    _check_arguments(table, controls, minority_column, id_column, categorical, robust)
    ids = area_ids(table, id_column)
    design = _build_design(
        table, ids, minority_column, controls, set(categorical), category_references or {}
    )
    keep = design.keep
    if design.dropped:
        shown = ", ".join(f"{d.id} ({d.reason})" for d in design.dropped[:5])
        warnings.warn(
            f"{len(design.dropped)} row(s) left out of the exclusion models: {shown}"
            + (" ..." if len(design.dropped) > 5 else ""),
            DroppedRowsWarning,
            stacklevel=2,
        )
    x_full = design.matrix[keep]
    names = design.names
    n, k = x_full.shape
    unserved = 1.0 - design.served[keep]
    uncovered = 1.0 - design.covered[keep]
    _check_outcomes(n, k, unserved, uncovered, controls, minority_column)
    model_sets = [("minority_only", [0, 1])]
    if controls:
        model_sets.append(("with_controls", list(range(k))))
    _check_design(x_full, names, unserved, uncovered, model_sets, minority_column)
    n_unserved = int(unserved.sum())
    events = min(n_unserved, n - n_unserved)
    epp = events / max(k - 1, 1)
    if epp < MIN_EVENTS_PER_PARAMETER:
        warnings.warn(
            f"the exclusion models have {events} event(s) (the rarer of served and unserved "
            f"areas) for {k - 1} predictor(s), {epp:.1f} per predictor; fewer than "
            f"{MIN_EVENTS_PER_PARAMETER:g} per predictor makes the odds ratios unstable",
            SmallSampleWarning,
            stacklevel=2,
        )
    moran_weights = _resolve_weights(weights, ids)
    models: dict[str, ModelFit] = {}
    for suffix, cols in model_sets:
        xs = x_full[:, cols]
        col_names = [names[c] for c in cols]
        for outcome, kind, y in (
            ("unserved", "logit", unserved),
            ("uncovered", "fractional_logit", uncovered),
        ):
            name = f"{outcome}_{suffix}"
            models[name] = _fit(name, kind, y, xs, col_names, keep, moran_weights, robust)
    return ExclusionModels(
        minority_term=names[1],
        controls=controls,
        design_columns=tuple(names),
        category_references=dict(design.references),
        n_areas=n,
        events_per_parameter=float(epp),
        models=models,
        minority_change=_minority_changes(models) if controls else (),
        dropped=tuple(design.dropped),
        notes=_notes(robust, design.references, moran_weights is not None),
    )


def _check_arguments(
    table: pd.DataFrame,
    controls: tuple[str, ...],
    minority_column: str,
    id_column: str | None,
    categorical: Sequence[str],
    robust: str,
) -> None:
    """Raise on an unknown option, a missing column or a column listed twice."""
    if robust not in ("HC0", "HC1"):
        raise SpecError(f'robust was "{robust}" but is expected to be one of ["HC0", "HC1"]')
    check_columns(table, ["served", "covered_fraction", minority_column, *controls], id_column)
    if len(set(controls)) != len(controls) or minority_column in controls:
        raise AnalysisError(
            f"the control columns {list(controls)} repeat a column or the minority column "
            f'"{minority_column}"; list each column once'
        )
    unknown_cat = [c for c in categorical if c not in controls]
    if unknown_cat:
        raise AnalysisError(
            f"categorical columns {unknown_cat} are not among the controls {list(controls)}"
        )


def _check_outcomes(
    n: int,
    k: int,
    unserved: np.ndarray,
    uncovered: np.ndarray,
    controls: tuple[str, ...],
    minority_column: str,
) -> None:
    """Raise when too few areas remain or an outcome does not vary."""
    if n < k + 2:
        raise AnalysisError(
            f"only {n} area(s) have usable values but the model with controls has {k} "
            f"parameters (intercept, {minority_column}"
            + (", " + ", ".join(controls) if controls else "")
            + f"); at least {k + 2} areas are needed: use fewer controls or more areas"
        )
    n_unserved = int(unserved.sum())
    if n_unserved in (0, n):
        state = "served" if n_unserved == 0 else "unserved"
        raise AnalysisError(
            f"every one of the {n} areas is {state}, so the odds of being unserved cannot be "
            "modelled; check the served threshold"
        )
    if np.ptp(uncovered) == 0:
        raise AnalysisError(
            f"covered_fraction is {1 - uncovered[0]:g} in every area, so the fractional model "
            "has nothing to explain"
        )


def _check_design(
    x_full: np.ndarray,
    names: Sequence[str],
    unserved: np.ndarray,
    uncovered: np.ndarray,
    model_sets: Sequence[tuple[str, list[int]]],
    minority_column: str,
) -> None:
    """Raise on a collinear design or a separated outcome, before any fit."""
    _check_rank(x_full[:, :2], names[:2], minority_column)
    _check_rank(x_full, names, minority_column)
    for _, cols in model_sets:
        _check_separation(
            x_full[:, cols], unserved, [names[c] for c in cols], "unserved", minority_column
        )
        _check_separation(
            x_full[:, cols], uncovered, [names[c] for c in cols], "uncovered share", minority_column
        )


def _minority_changes(models: Mapping[str, ModelFit]) -> tuple[MinorityChange, ...]:
    """Return how the minority odds ratio moves when the controls enter, per outcome."""
    changes: list[MinorityChange] = []
    for prefix, kind in (("unserved", "logit"), ("uncovered", "fractional_logit")):
        alone = models[f"{prefix}_minority_only"].terms[1].odds_ratio
        with_c = models[f"{prefix}_with_controls"].terms[1].odds_ratio
        ratio = with_c / alone
        changes.append(MinorityChange(kind, alone, with_c, ratio, 100.0 * (ratio - 1.0)))
    return tuple(changes)


def _notes(robust: str, references: Mapping[str, str], spatial: bool) -> tuple[str, ...]:
    """Return the reading notes: outcome, scale, standard errors, references, residual Moran."""
    notes = [OUTCOME_NOTE, SCALE_NOTE]
    notes.append(
        "logit standard errors are model-based; fractional logit standard errors are the "
        f"{robust} sandwich (Papke and Wooldridge 1996)"
    )
    if references:
        notes.append(
            "categorical controls are coded against reference levels: "
            + ", ".join(f"{c} = {v}" for c, v in references.items())
        )
    if not spatial:
        notes.append("no spatial weights were given, so residual Moran's I was not computed")
    return tuple(notes)


def _check_rank(x: np.ndarray, names: Sequence[str], minority_column: str) -> None:
    """Raise naming the columns of an exact linear dependency in the design."""
    norms = np.linalg.norm(x, axis=0)
    norms[norms == 0] = 1.0
    _, s, vt = np.linalg.svd(x / norms, full_matrices=False)
    tol = 1e-9 * s.max() * max(x.shape)
    null = vt[s <= tol]
    if null.size == 0:
        return
    involved = [names[int(j)] for j in np.flatnonzero((np.abs(null) > 1e-6).any(axis=0))]
    if involved == ["intercept", names[1]] or involved == [names[1]]:
        raise AnalysisError(
            f"{minority_column} is the same in every area, so it cannot explain anything"
        )
    raise AnalysisError(
        "the controls are collinear: "
        + ", ".join(f'"{c}"' for c in involved)
        + " are linearly dependent (one is an exact combination of the others; the intercept "
        "stands for a constant column), so their effects cannot be told apart: drop one of them"
    )


def _check_separation(
    x: np.ndarray, y: np.ndarray, names: Sequence[str], outcome: str, minority_column: str
) -> None:
    found = _separation_direction(x, y)
    if found is None:
        return
    complete, n_strict, direction = found
    predictors = [names[int(j)] for j in np.flatnonzero(np.abs(direction) > 1e-6) if int(j) != 0]
    detail = ""
    if len(names) == 2:
        share = x[:, 1] * MINORITY_STEP
        hi, lo = y >= 1 - 1e-12, y <= 1e-12
        detail = (
            f" (areas with {outcome} = 1 have {minority_column} {share[hi].min():.3f} to "
            f"{share[hi].max():.3f}; areas with {outcome} = 0 have {share[lo].min():.3f} to "
            f"{share[lo].max():.3f}: {'no overlap' if complete else 'they only touch'})"
        )
    raise AnalysisError(
        f"the model of {outcome} on "
        + ", ".join(names[1:])
        + " cannot be estimated: the outcome is "
        f"{'perfectly' if complete else 'quasi-perfectly'} separated by "
        + ", ".join(predictors or list(names[1:]))
        + detail
        + f"; {n_strict} area(s) are predicted without error, so the odds ratios would be "
        "infinite. Report the raw rates instead, merge sparse categories, or drop the control "
        "that separates them"
    )


def _separation_direction(x: np.ndarray, y: np.ndarray) -> tuple[bool, int, np.ndarray] | None:
    """Find a direction that separates the outcome, by linear programming.

    For areas with ``y == 1`` the direction must give ``x'd >= 0``, for ``y == 0``
    ``x'd <= 0``, and for fractional ``0 < y < 1`` ``x'd == 0`` (otherwise the
    quasi-likelihood would fall along ``d``). Maximising the summed margins with ``d`` in
    a box is Konis's (2007) test; a positive optimum means the estimate does not exist.
    A second programme maximises the smallest margin: positive means complete separation
    (Albert and Anderson 1984), zero quasi-complete.

    Returns
    -------
    tuple or None
        ``(complete, areas strictly on their side, d)``, or None without separation.
    """
    scale = np.abs(x).max(axis=0)
    scale[scale == 0] = 1.0
    xs = x / scale
    one, zero = y >= 1 - 1e-12, y <= 1e-12
    mid = ~(one | zero)
    if mid.any() and np.linalg.matrix_rank(xs[mid]) == xs.shape[1]:
        return None
    edge = one | zero
    if not edge.any():
        return None
    signed = np.where(one[edge], 1.0, -1.0)[:, None] * xs[edge]
    box = [(-1.0, 1.0)] * xs.shape[1]
    result = linprog(
        -signed.sum(axis=0),
        A_ub=-signed,
        b_ub=np.zeros(signed.shape[0]),
        A_eq=xs[mid] if mid.any() else None,
        b_eq=np.zeros(int(mid.sum())) if mid.any() else None,
        bounds=box,
        method="highs",
    )
    if result.status != 0:
        return None
    d = result.x
    margins = signed @ d
    if margins.min() < -1e-7 or (mid.any() and np.abs(xs[mid] @ d).max() > 1e-7):
        return None
    strict = int((margins > 1e-6).sum())
    if strict == 0:
        return None
    complete = False
    if not mid.any():
        # Variables (d, t): maximise t subject to signed @ d >= t.
        m, k = signed.shape
        widest = linprog(
            np.r_[np.zeros(k), -1.0],
            A_ub=np.column_stack([-signed, np.ones(m)]),
            b_ub=np.zeros(m),
            bounds=[*box, (0.0, 1.0)],
            method="highs",
        )
        if widest.status == 0 and widest.x[-1] > 1e-7:
            complete, strict, d = True, m, widest.x[:k]
    return complete, strict, d


def _fit(
    name: str,
    kind: str,
    y: np.ndarray,
    x: np.ndarray,
    names: list[str],
    keep: np.ndarray,
    moran_weights: tuple[np.ndarray, sp.csr_matrix] | None,
    robust: str,
) -> ModelFit:
    import statsmodels.api as sm
    from statsmodels.tools.sm_exceptions import ConvergenceWarning, PerfectSeparationWarning

    n, k = x.shape
    with warnings.catch_warnings(record=True) as caught:
        # Recorded locally so separation and convergence problems become AnalysisErrors;
        # anything else is re-issued below.
        warnings.simplefilter("always")
        if kind == "logit":
            fitted = sm.Logit(y, x).fit(method="newton", maxiter=200, disp=0)
            converged = bool(fitted.mle_retvals.get("converged", False))
            cov = np.asarray(fitted.cov_params())
            # McFadden's 1 - llf / llnull with the closed-form intercept-only likelihood
            # (statsmodels refits the null model numerically, slowly on large tables).
            share = float(y.mean())
            llnull = n * (share * math.log(share) + (1.0 - share) * math.log(1.0 - share))
            pseudo = 1.0 - float(fitted.llf) / llnull
            covariance = "model"
        else:
            fitted = sm.GLM(y, x, family=sm.families.Binomial()).fit(cov_type="HC0", maxiter=200)
            converged = bool(fitted.converged)
            cov = np.asarray(fitted.cov_params())
            if robust == "HC1":
                cov = cov * n / (n - k)
            pseudo = None
            covariance = robust
    for w in caught:
        if issubclass(w.category, PerfectSeparationWarning):
            converged = False
        elif not issubclass(w.category, (ConvergenceWarning, RuntimeWarning)):
            warnings.warn(w.message, w.category, stacklevel=3)
    if not converged:
        raise AnalysisError(
            f"the {kind.replace('_', ' ')} model {name} on {', '.join(names[1:])} did not "
            "converge; "
            "the outcome is probably nearly separated by these columns: drop or merge controls"
        )
    beta = np.asarray(fitted.params, dtype=float)
    se = np.sqrt(np.diag(cov))
    z = beta / se
    p = 2.0 * stats.norm.sf(np.abs(z))
    terms = tuple(
        Term(
            name=names[j],
            coefficient=float(beta[j]),
            std_error=float(se[j]),
            odds_ratio=float(np.exp(beta[j])),
            ci_low=float(np.exp(beta[j] - Z_95 * se[j])),
            ci_high=float(np.exp(beta[j] + Z_95 * se[j])),
            z=float(z[j]),
            p_value=float(p[j]),
        )
        for j in range(k)
    )
    mu = 1.0 / (1.0 + np.exp(-(x @ beta)))
    pearson = (y - mu) / np.sqrt(mu * (1.0 - mu))
    moran = None
    if moran_weights is not None:
        full = np.full(keep.size, np.nan)
        full[keep] = pearson
        moran = _residual_moran(full, keep, moran_weights)
    outcome = (
        "odds of an area being unserved (1 - served)"
        if kind == "logit"
        else "odds of the uncovered share of an area (1 - covered_fraction)"
    )
    return ModelFit(
        name=name,
        kind=kind,
        outcome=outcome,
        covariance=covariance,
        n=n,
        terms=terms,
        log_likelihood=_bernoulli_log_likelihood(y, x @ beta),
        pseudo_r2=pseudo,
        residual_moran=moran,
    )


def _bernoulli_log_likelihood(y: np.ndarray, eta: np.ndarray) -> float:
    """Return sum(y log mu + (1 - y) log(1 - mu)) at the linear predictor ``eta``.

    For a fractional ``y`` this is the Bernoulli quasi-log-likelihood that Papke and
    Wooldridge maximise; statsmodels' binomial ``llf`` adds a binomial-coefficient term
    that is not zero for fractional outcomes, so it is computed here.
    """
    return float(-np.sum(y * np.logaddexp(0.0, -eta) + (1.0 - y) * np.logaddexp(0.0, eta)))


# --------------------------------------------------------------------------------------
# Threshold sensitivity
# --------------------------------------------------------------------------------------
