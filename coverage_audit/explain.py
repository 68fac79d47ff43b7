"""Explaining coverage gaps: controlled models, rule discovery and threshold sensitivity.

Takes the per-area table of the coverage stage (one row per analysed area with ``served``,
``covered_fraction``, ``minority_share`` and optional income tier, density and
user-named control columns) and gives three plain-data results:
:class:`ExclusionModels` (does minority share still predict being left out once the
controls enter, and is space left in the residuals), :class:`RuleResult` (the
conjunctions of area traits under which majority-minority areas are most over-represented
among unserved areas, ranked by extended lift) and a list of :class:`SensitivityRow`
(group served-area rates and four-fifths flags as the served threshold moves). The
functions only read the table; nothing here reaches back to files or earlier stages.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
import warnings
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy import stats
from scipy.optimize import linprog

from ._util import clean_number, safe_ratio, to_jsonable
from .clustering import moran_moments
from .errors import AnalysisError, CoverageAuditWarning, SpecError
from .stats.four_fifths import below_four_fifths

#: Minority share enters the models per 10 percentage points (0.10 as a fraction), so an
#: odds ratio reads "per 10-point rise in minority share" instead of "from 0 % to 100 %".
MINORITY_STEP = 0.10
#: Two-sided 95 % normal quantile for Wald intervals.
Z_95 = float(stats.norm.ppf(0.975))
#: Events per parameter below which a logistic fit is warned about (Peduzzi et al. 1996,
#: J. Clin. Epidemiol. 49(12), 1373-1379: "ten events per variable").
MIN_EVENTS_PER_PARAMETER = 10.0
#: |z| of residual Moran's I above which the residuals are called spatially clustered.
MORAN_Z_FLAG = 1.96
#: Served thresholds of the sensitivity sweep: 0.25 to 0.75 in steps of 0.05.
DEFAULT_THRESHOLDS: tuple[float, ...] = tuple(np.round(np.linspace(0.25, 0.75, 11), 10).tolist())
#: A text column with more distinct values than this is not coded as categories.
MAX_LEVELS = 20

OUTCOME_NOTE = (
    "the binary models give the odds of an area NOT being served (unserved = 1 - served); "
    "the fractional models give the odds of the uncovered share (1 - covered_fraction); "
    "odds ratios above 1 mean more exclusion"
)
SCALE_NOTE = "minority share enters per 10 percentage points (odds ratio per 10-point rise)"


class SmallSampleWarning(CoverageAuditWarning):
    """A model has fewer events per parameter than the usual rule of thumb asks for."""


class DroppedRowsWarning(CoverageAuditWarning):
    """Rows with missing or non-numeric model values were left out of the models."""


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
class ResidualMoran:
    """Moran's I of a model's Pearson residuals, with its randomisation z-score.

    Attributes
    ----------
    I, EI, VI_rand, z_rand : float
        Moran's I, its expectation ``-1/(n-1)``, variance under randomisation and z-score
        (Cliff and Ord 1981, *Spatial Processes*, ch. 2).
    p_rand : float
        One-sided normal p-value in the direction of z, ``P(Z >= |z_rand|)``: the same
        meaning as the global Moran's ``p_rand`` (:class:`~coverage_audit.clustering.MoranResult`).
        Until this convention was fixed the key held the two-sided value.
    p_rand_two_sided : float
        ``2 P(Z >= |z_rand|)``, the p-value that matches the ``|z_rand| > 1.96`` screen.
    n : int
        Areas in the statistic (fitted areas that appear in the weights).
    space_not_accounted_for : bool
        ``|z_rand| > 1.96``: the residuals are spatially clustered, so the model leaves
        a spatial pattern unexplained and its standard errors are likely too small.
    """

    I: float  # noqa: E741 - the textbook symbol
    EI: float
    VI_rand: float
    z_rand: float
    p_rand: float
    n: int
    space_not_accounted_for: bool
    p_rand_two_sided: float = math.nan

    def to_dict(self) -> dict[str, Any]:
        """Return the statistic as JSON-safe data."""
        return to_jsonable(
            {
                "residuals": "pearson",
                "I": self.I,
                "EI": self.EI,
                "VI_rand": self.VI_rand,
                "z_rand": self.z_rand,
                "p_rand": self.p_rand,
                "p_rand_two_sided": self.p_rand_two_sided,
                "n": self.n,
                "space_not_accounted_for": self.space_not_accounted_for,
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
class DroppedRow:
    """A table row left out of the models, with the columns and reasons."""

    id: str
    row: int
    reason: str

    def to_dict(self) -> dict[str, Any]:
        """Return the row as JSON-safe data."""
        return {"id": self.id, "row": int(self.row), "reason": self.reason}


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
    weights: Any = None,
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
    if robust not in ("HC0", "HC1"):
        raise SpecError(f'robust was "{robust}" but is expected to be one of ["HC0", "HC1"]')
    controls = tuple(controls)
    _check_columns(table, ["served", "covered_fraction", minority_column, *controls], id_column)
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
    ids = _ids(table, id_column)
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
    if n < k + 2:
        raise AnalysisError(
            f"only {n} area(s) have usable values but the model with controls has {k} "
            f"parameters (intercept, {minority_column}"
            + (", " + ", ".join(controls) if controls else "")
            + f"); at least {k + 2} areas are needed: use fewer controls or more areas"
        )
    unserved = 1.0 - design.served[keep]
    uncovered = 1.0 - design.covered[keep]
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
    _check_rank(x_full[:, :2], names[:2], minority_column)
    _check_rank(x_full, names, minority_column)
    model_sets = [("minority_only", [0, 1])]
    if controls:
        model_sets.append(("with_controls", list(range(k))))
    for _, cols in model_sets:
        _check_separation(
            x_full[:, cols], unserved, [names[c] for c in cols], "unserved", minority_column
        )
        _check_separation(
            x_full[:, cols], uncovered, [names[c] for c in cols], "uncovered share", minority_column
        )
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
        models[f"unserved_{suffix}"] = _fit(
            f"unserved_{suffix}", "logit", unserved, xs, col_names, keep, moran_weights, robust
        )
        models[f"uncovered_{suffix}"] = _fit(
            f"uncovered_{suffix}",
            "fractional_logit",
            uncovered,
            xs,
            col_names,
            keep,
            moran_weights,
            robust,
        )
    changes: list[MinorityChange] = []
    if controls:
        for prefix, kind in (("unserved", "logit"), ("uncovered", "fractional_logit")):
            alone = models[f"{prefix}_minority_only"].terms[1].odds_ratio
            with_c = models[f"{prefix}_with_controls"].terms[1].odds_ratio
            ratio = with_c / alone
            changes.append(MinorityChange(kind, alone, with_c, ratio, 100.0 * (ratio - 1.0)))
    notes = [OUTCOME_NOTE, SCALE_NOTE]
    notes.append(
        "logit standard errors are model-based; fractional logit standard errors are the "
        f"{robust} sandwich (Papke and Wooldridge 1996)"
    )
    if design.references:
        notes.append(
            "categorical controls are coded against reference levels: "
            + ", ".join(f"{c} = {v}" for c, v in design.references.items())
        )
    if moran_weights is None:
        notes.append("no spatial weights were given, so residual Moran's I was not computed")
    return ExclusionModels(
        minority_term=names[1],
        controls=controls,
        design_columns=tuple(names),
        category_references=dict(design.references),
        n_areas=n,
        events_per_parameter=float(epp),
        models=models,
        minority_change=tuple(changes),
        dropped=tuple(design.dropped),
        notes=tuple(notes),
    )


@dataclass(frozen=True)
class _Design:
    matrix: np.ndarray
    names: list[str]
    served: np.ndarray
    covered: np.ndarray
    keep: np.ndarray
    dropped: list[DroppedRow]
    references: dict[str, str]


def _check_columns(table: pd.DataFrame, columns: Iterable[str], id_column: str | None) -> None:
    wanted = list(columns) + ([id_column] if id_column is not None else [])
    missing = [c for c in wanted if c not in table.columns]
    if missing:
        raise AnalysisError(
            f"column(s) {missing} are not in the area table; available columns: {_available(table)}"
        )


def _available(table: pd.DataFrame) -> list[str]:
    return [str(c) for c in table.columns]


def _ids(table: pd.DataFrame, id_column: str | None) -> np.ndarray:
    source = table.index if id_column is None else table[id_column]
    return np.asarray(source.astype(str), dtype=object)


def _numeric(series: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Return float values and a per-row problem text ('' where the value is usable)."""
    if pd.api.types.is_bool_dtype(series.dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
    else:
        values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    missing = series.isna().to_numpy()
    reasons = np.full(values.size, "", dtype=object)
    reasons[~np.isfinite(values)] = "not a number"
    reasons[np.isinf(values)] = "not finite"
    reasons[missing] = "missing"
    return values, reasons


def _text_values(series: pd.Series) -> np.ndarray:
    """Return the values as text, with '' where missing."""
    text = series.astype(str).to_numpy(dtype=object)
    text[series.isna().to_numpy()] = ""
    return text


def _is_categorical(series: pd.Series, forced: bool) -> bool:
    if forced or isinstance(series.dtype, pd.CategoricalDtype):
        return True
    if pd.api.types.is_bool_dtype(series.dtype) or pd.api.types.is_numeric_dtype(series.dtype):
        return False
    present = series.dropna()
    # A text column where nothing parses as a number is a category; one where most values
    # parse is a numeric column with a few bad entries, reported row by row.
    return bool(present.size) and pd.to_numeric(present, errors="coerce").isna().all()


def _build_design(
    table: pd.DataFrame,
    ids: np.ndarray,
    minority_column: str,
    controls: tuple[str, ...],
    categorical: set[str],
    references: Mapping[str, str],
) -> _Design:
    n = len(table)
    problems: dict[str, np.ndarray] = {}
    served, problems["served"] = _numeric(table["served"])
    bad = np.isfinite(served) & ~np.isin(served, (0.0, 1.0))
    if bad.any():
        raise AnalysisError(
            f"served must be true/false (or 1/0); {int(bad.sum())} row(s) hold other values, "
            f"for example area {ids[np.flatnonzero(bad)[0]]}"
        )
    covered, problems["covered_fraction"] = _numeric(table["covered_fraction"])
    _check_unit_interval(covered, "covered_fraction", ids, hint="")
    minority, problems[minority_column] = _numeric(table[minority_column])
    _check_unit_interval(
        minority, minority_column, ids, hint=" (if it is a percent, divide it by 100)"
    )
    columns = [np.ones(n), minority / MINORITY_STEP]
    names = ["intercept", f"{minority_column}_per_10pp"]
    used_refs: dict[str, str] = {}
    for col in controls:
        series = table[col]
        if _is_categorical(series, col in categorical):
            text = _text_values(series)
            present = text[text != ""]
            uniq, counts = np.unique(present.astype(str), return_counts=True)
            if uniq.size > MAX_LEVELS:
                raise AnalysisError(
                    f'control "{col}" has {uniq.size} distinct non-numeric values; a categorical '
                    f"control may have at most {MAX_LEVELS}: group the levels or give numbers"
                )
            ref = references.get(col)
            if ref is None:
                ref = str(uniq[int(np.argmax(counts))]) if uniq.size else ""
            elif ref not in uniq:
                raise AnalysisError(
                    f'reference level "{ref}" of control "{col}" does not occur; '
                    f"levels: {list(uniq)}"
                )
            used_refs[col] = ref
            problems[col] = np.where(text == "", "missing", "").astype(object)
            for level in uniq:
                if level != ref:
                    columns.append((text == level).astype(float))
                    names.append(f"{col}[{level}]")
        else:
            values, problems[col] = _numeric(series)
            columns.append(values)
            names.append(col)
    matrix = np.column_stack(columns)
    problem_table = np.column_stack([problems[c] for c in problems])
    bad_rows = (problem_table != "").any(axis=1)
    dropped = []
    labels = list(problems)
    for r in np.flatnonzero(bad_rows):
        reason = "; ".join(
            f"{labels[j]}: {problem_table[r, j]}" for j in np.flatnonzero(problem_table[r] != "")
        )
        dropped.append(DroppedRow(id=str(ids[r]), row=int(r), reason=reason))
    return _Design(matrix, names, served, covered, ~bad_rows, dropped, used_refs)


def _check_unit_interval(values: np.ndarray, column: str, ids: np.ndarray, hint: str) -> None:
    out = np.isfinite(values) & ((values < -1e-9) | (values > 1 + 1e-9))
    if out.any():
        first = int(np.flatnonzero(out)[0])
        raise AnalysisError(
            f"{column} must be a fraction between 0 and 1; {int(out.sum())} row(s) are outside, "
            f"for example {values[first]:g} in area {ids[first]}{hint}"
        )


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


def _resolve_weights(weights: Any, ids: np.ndarray) -> tuple[np.ndarray, sp.csr_matrix] | None:
    """Return (table positions of the weight nodes, sparse weights over those nodes)."""
    if weights is None:
        return None
    n = ids.size
    node_ids: np.ndarray | None = None
    if hasattr(weights, "stats_adjacency") and hasattr(weights, "stats_mask"):
        node_ids = np.asarray(weights.ids, dtype=object)[np.asarray(weights.stats_mask)]
        matrix = sp.csr_matrix(weights.stats_adjacency, dtype=float)
    elif hasattr(weights, "sparse") and hasattr(weights, "unique_ids"):
        matrix = sp.csr_matrix(weights.sparse, dtype=float)
        graph_ids = np.asarray(pd.Index(weights.unique_ids).astype(str), dtype=object)
        if set(graph_ids) <= set(ids):
            node_ids = graph_ids
        elif graph_ids.size != n:
            raise AnalysisError(
                f"the weights graph has {graph_ids.size} nodes whose ids are not area ids, and the "
                f"table has {n} rows: give a graph indexed by area id or one node per row"
            )
    else:
        matrix = sp.csr_matrix(weights, dtype=float)
    if node_ids is None:
        if matrix.shape != (n, n):
            raise AnalysisError(
                f"the weights matrix is {matrix.shape[0]} x {matrix.shape[1]} but the table has "
                f"{n} "
                "rows; give one row and column per area, in table order"
            )
        return np.arange(n), matrix
    if len(set(ids)) != n:
        raise AnalysisError("area ids repeat, so the weights cannot be aligned by id")
    position = pd.Index(ids).get_indexer(node_ids)
    if (position < 0).any():
        missing = node_ids[position < 0][:5]
        raise AnalysisError(
            f"weights name areas that are not in the table, for example {list(missing)}"
        )
    return position, matrix


def _residual_moran(
    residuals: np.ndarray, keep: np.ndarray, resolved: tuple[np.ndarray, sp.csr_matrix]
) -> ResidualMoran | None:
    position, matrix = resolved
    inside = keep[position]
    sub = matrix[inside][:, inside]
    values = residuals[position[inside]]
    if values.size < 4 or sub.nnz == 0:
        return None
    row_sums = np.asarray(sub.sum(axis=1)).ravel()
    scale = np.divide(1.0, row_sums, out=np.zeros_like(row_sums), where=row_sums > 0)
    sub = sp.diags(scale) @ sub
    i, ei, vi, z, p_two_sided = moran_randomisation(values, sub)
    return ResidualMoran(
        I=i,
        EI=ei,
        VI_rand=vi,
        z_rand=z,
        p_rand=p_two_sided / 2.0,
        n=int(values.size),
        space_not_accounted_for=bool(math.isfinite(z) and abs(z) > MORAN_Z_FLAG),
        p_rand_two_sided=p_two_sided,
    )


def moran_randomisation(
    values: np.ndarray, weights: sp.spmatrix
) -> tuple[float, float, float, float, float]:
    """Return Moran's I with its moments and z-score under the randomisation hypothesis.

    Parameters
    ----------
    values : numpy.ndarray
        One value per area.
    weights : scipy sparse matrix
        Spatial weights (row-standardised for the usual reading of I), n x n.

    Returns
    -------
    tuple of float
        ``(I, EI, VI_rand, z_rand, p)`` with ``p`` two-sided, ``2 P(Z >= |z_rand|)`` (as
        esda's ``Moran`` gives ``p_rand`` by default). In summary.json the residual Moran
        keeps the project's convention: ``p_rand`` one-sided, ``p_rand_two_sided`` this.

    Notes
    -----
    ``I = (n / S0) z'Wz / z'z``, ``E[I] = -1/(n-1)`` and the randomisation variance with
    the kurtosis ``b2`` of Cliff and Ord (1981, *Spatial Processes*, eq. 1.38; equation
    number from memory), as esda's ``Moran.VI_rand`` computes it. For regression
    residuals this is a screen, not an exact test: it ignores that the residuals are
    estimated. Computed by :func:`coverage_audit.clustering.moran_moments`, the one
    implementation of Moran's I.
    """
    y = np.asarray(values, dtype=float)
    if y.size and float(np.ptp(y)) == 0.0:
        nan = float("nan")
        return nan, -1.0 / (y.size - 1) if y.size > 1 else nan, nan, nan, nan
    result = moran_moments(y, weights)
    return (
        float(result.I),
        float(result.EI),
        float(result.VI_rand),
        float(result.z_rand),
        result.p_rand_two_sided,
    )


# --------------------------------------------------------------------------------------
# Rule discovery
# --------------------------------------------------------------------------------------

_TIER_PHRASES = {
    "low": ("are", "low-income"),
    "moderate": ("are", "moderate-income"),
    "middle": ("are", "middle-income"),
    "upper": ("are", "upper-income"),
    "unknown": ("have", "no income figure"),
}
_QUARTER_WORDS = ("lowest", "second", "third", "highest")


@dataclass(frozen=True)
class Condition:
    """One binned trait of an area, e.g. ``income_tier = moderate``.

    ``verb`` and ``phrase`` make the plain-words predicate "areas that <verb> <phrase>".
    """

    attribute: str
    value: str
    verb: str
    phrase: str

    @property
    def label(self) -> str:
        """Short label ``attribute = value``."""
        return f"{self.attribute} = {self.value}"


@dataclass(frozen=True)
class Rule:
    """A rule ``A, B -> C``: protected condition A, context B, outcome C.

    Attributes
    ----------
    context : tuple of str
        Labels of the context conditions B (empty for the rule ``A -> C``).
    premise_areas, premise_outcome_areas : int
        Areas with A and B, and those among them with C.
    context_areas, context_outcome_areas : int
        Areas with B, and those among them with C.
    support : float
        ``premise_areas / N``; the minimum support applies to it.
    rule_support : float
        Areas with A, B and C over N.
    confidence : float
        ``conf(A,B -> C)``, weighted as the result says.
    context_confidence : float
        ``conf(B -> C)``.
    others_confidence : float or None
        ``conf(not A, B -> C)``; None when no context area lacks A.
    elift : float
        Extended lift ``conf(A,B -> C) / conf(B -> C)``.
    slift : float or None
        Selection lift ``conf(A,B -> C) / conf(not A,B -> C)``.
    risk_difference : float or None
        ``conf(A,B -> C) - conf(not A,B -> C)``.
    sentence : str
        The rule in plain words.
    """

    context: tuple[str, ...]
    premise_areas: int
    premise_outcome_areas: int
    context_areas: int
    context_outcome_areas: int
    support: float
    rule_support: float
    confidence: float
    context_confidence: float
    others_confidence: float | None
    elift: float
    slift: float | None
    risk_difference: float | None
    sentence: str

    def to_dict(self) -> dict[str, Any]:
        """Return the rule as JSON-safe data."""
        return to_jsonable({f: getattr(self, f) for f in self.__dataclass_fields__})


@dataclass(frozen=True)
class RuleResult:
    """Rules under which the protected condition goes with the outcome, ranked by elift.

    Attributes
    ----------
    rules : tuple of Rule
        Top rules, highest extended lift first (ties: larger premise, shorter rule,
        labels in order).
    reason : str or None
        Why there are no rules, when there are none.
    protected, outcome : str
        Labels of A and C.
    weight : {"areas", "population"}
        What confidences count: areas, or residents of the areas.
    n_areas, n_outcome, n_protected : int
        Areas used, those with the outcome and those with the protected condition.
    excluded_areas : int
        Areas left out because the protected condition or outcome was missing.
    min_support_areas : int
        Minimum number of areas with A and B for a rule to be considered.
    max_length : int
        Most conditions in a premise, A included.
    conditions : dict
        The conditions built from each attribute, by attribute.
    notes : tuple of str
    """

    rules: tuple[Rule, ...]
    reason: str | None
    protected: str
    outcome: str
    weight: str
    n_areas: int
    n_outcome: int
    n_protected: int
    excluded_areas: int
    min_support_areas: int
    max_length: int
    conditions: Mapping[str, tuple[str, ...]]
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Return the rules as JSON-safe data (for summary.json)."""
        return to_jsonable(
            {
                "method": "extended lift (Pedreschi, Ruggieri and Turini 2008)",
                "rules": [r.to_dict() for r in self.rules],
                "reason": self.reason,
                "protected": self.protected,
                "outcome": self.outcome,
                "weight": self.weight,
                "n_areas": self.n_areas,
                "n_outcome": self.n_outcome,
                "n_protected": self.n_protected,
                "excluded_areas": self.excluded_areas,
                "min_support_areas": self.min_support_areas,
                "max_length": self.max_length,
                "conditions": {k: list(v) for k, v in self.conditions.items()},
                "notes": list(self.notes),
            }
        )


def discover_rules(
    table: pd.DataFrame,
    *,
    conditions: Sequence[str] = (),
    max_length: int = 2,
    min_support: int | float = 0.05,
    protected: str = "majority_minority",
    outcome: str = "unserved",
    top: int | None = 10,
    weight: Literal["areas", "population"] = "areas",
    majority_cut: float = 0.5,
) -> RuleResult:
    """Find the contexts in which protected areas are most over-represented among the outcome.

    Parameters
    ----------
    table : pandas.DataFrame
        Per-area table.
    conditions : sequence of str
        Extra columns to bin: booleans as yes/no, text and numbers with at most four
        distinct values as they are, other numbers by quartile.
    max_length : int
        Most conditions in a rule's premise, the protected one included (1 to 4); 2 gives
        rules "A, B -> C" with one context condition.
    min_support : int or float
        Minimum number of areas with A and B (an int of at least 1), or that share of all
        areas (a float in (0, 1)).
    protected : str
        Boolean column of the protected condition A. ``"majority_minority"`` is derived
        as ``minority_share > majority_cut`` when the column is absent.
    outcome : str
        ``"unserved"`` (``not served``) or a boolean column.
    top : int or None
        Rules kept, by rank; None keeps all.
    weight : {"areas", "population"}
        Count areas, or residents (``population``) of areas, in the confidences.
    majority_cut : float
        Cut used only when the protected column is derived.

    Returns
    -------
    RuleResult
        With no rules and a ``reason`` when no area has the outcome, every area has it,
        or no area (or every area) is protected.

    Notes
    -----
    Conditions are income tier (``income_tier``, when present), population-density
    quartile (``population / area_km2``, when both are present) and the ``conditions``
    columns. For a context B (a conjunction of conditions on distinct attributes, possibly
    empty) the rule ``A, B -> C`` gets extended lift ``elift = conf(A,B -> C) /
    conf(B -> C)`` (Pedreschi, Ruggieri and Turini 2008, KDD, "Discrimination-aware data
    mining"), selection lift ``conf(A,B -> C) / conf(not A,B -> C)`` and risk difference
    ``conf(A,B -> C) - conf(not A,B -> C)`` (both as in Ruggieri, Pedreschi and Turini
    2010, ACM TKDD 4(2); from memory). Contexts where no area has the outcome say nothing
    about exclusion and are skipped.
    """
    if weight not in ("areas", "population"):
        raise SpecError(
            f'weight was "{weight}" but is expected to be one of ["areas", "population"]'
        )
    if not 1 <= int(max_length) <= 4:
        raise SpecError(f"max_length was {max_length} but must be 1, 2, 3 or 4")
    if top is not None and int(top) < 1:
        raise SpecError(f"top was {top} but must be at least 1 (or None for all rules)")
    notes: list[str] = []
    a_values, a_label = _protected_flag(table, protected, majority_cut, notes)
    c_values, c_label = _outcome_flag(table, outcome)
    usable = np.isfinite(a_values) & np.isfinite(c_values)
    w_all = np.ones(len(table))
    if weight == "population":
        if "population" not in table.columns:
            raise AnalysisError(
                "weight population needs a population column; available columns: "
                f"{_available(table)}"
            )
        w_all, reasons = _numeric(table["population"])
        usable &= reasons == ""
        notes.append("confidences count residents of the areas, not areas")
    n_areas = int(usable.sum())
    min_count = _support_count(min_support, n_areas)
    attributes = _conditions(table, conditions, protected)
    a = a_values[usable] == 1
    c = c_values[usable] == 1
    w = w_all[usable]
    masks = {attr: [(cond, m[usable]) for cond, m in items] for attr, items in attributes.items()}
    reason = _degenerate_reason(a, c, a_label, c_label)
    base = RuleResult(
        rules=(),
        reason=reason,
        protected=a_label,
        outcome=c_label,
        weight=weight,
        n_areas=n_areas,
        n_outcome=int(c.sum()),
        n_protected=int(a.sum()),
        excluded_areas=int((~usable).sum()),
        min_support_areas=min_count,
        max_length=int(max_length),
        conditions={
            attr: tuple(cond.value for cond, _ in items) for attr, items in attributes.items()
        },
        notes=tuple(notes),
    )
    if reason is not None:
        return base
    rules = []
    protected_cond = _protected_condition(protected, a_label)
    attr_names = list(masks)
    for size in range(0, int(max_length)):
        for attrs in itertools.combinations(attr_names, size):
            for combo in itertools.product(*(masks[x] for x in attrs)):
                rule = _rule(combo, a, c, w, n_areas, min_count, protected_cond, c_label, weight)
                if rule is not None:
                    rules.append(rule)
    if not rules:
        return dataclasses.replace(
            base,
            reason=f"no context has at least {min_count} {a_label} area(s) and an {c_label} area",
        )
    rules.sort(key=lambda r: (-r.elift, -r.premise_areas, len(r.context), r.context))
    kept = tuple(rules if top is None else rules[: int(top)])
    return dataclasses.replace(base, rules=kept)


def _protected_flag(
    table: pd.DataFrame, protected: str, majority_cut: float, notes: list[str]
) -> tuple[np.ndarray, str]:
    if protected in table.columns:
        return _flag(table[protected], protected), protected.replace("_", "-")
    if protected == "majority_minority" and "minority_share" in table.columns:
        share, reasons = _numeric(table["minority_share"])
        flag = np.where(reasons == "", (share > majority_cut).astype(float), np.nan)
        notes.append(f"majority-minority derived as minority_share > {majority_cut:g}")
        return flag, "majority-minority"
    raise AnalysisError(
        f'protected column "{protected}" is not in the area table'
        + (" (nor minority_share to derive it from)" if protected == "majority_minority" else "")
        + f"; available columns: {_available(table)}"
    )


def _outcome_flag(table: pd.DataFrame, outcome: str) -> tuple[np.ndarray, str]:
    if outcome == "unserved" and "unserved" not in table.columns:
        if "served" not in table.columns:
            raise AnalysisError(
                f"outcome unserved needs a served column; available columns: {_available(table)}"
            )
        return 1.0 - _flag(table["served"], "served"), "unserved"
    if outcome not in table.columns:
        raise AnalysisError(
            f'outcome column "{outcome}" is not in the area table; available columns: '
            f"{_available(table)}"
        )
    return _flag(table[outcome], outcome), outcome


def _flag(series: pd.Series, column: str) -> np.ndarray:
    values, _ = _numeric(series)
    bad = np.isfinite(values) & ~np.isin(values, (0.0, 1.0))
    if bad.any():
        raise AnalysisError(
            f"{column} must be true/false (or 1/0); {int(bad.sum())} row(s) hold other values"
        )
    return values


def _support_count(min_support: int | float, n_areas: int) -> int:
    if isinstance(min_support, (bool, np.bool_)):
        raise SpecError(f"min_support was {min_support} but must be a count or a share")
    if isinstance(min_support, (float, np.floating)) and 0 < min_support < 1:
        return max(1, math.ceil(min_support * n_areas))
    if float(min_support) == int(min_support) and int(min_support) >= 1:
        return int(min_support)
    raise SpecError(
        f"min_support was {min_support} but must be a whole count of at least 1 or a share "
        "strictly between 0 and 1"
    )


def _degenerate_reason(a: np.ndarray, c: np.ndarray, a_label: str, c_label: str) -> str | None:
    if a.size == 0:
        return "no area has both the protected condition and the outcome recorded"
    if not c.any():
        return f"no area is {c_label}, so there is nothing to explain"
    if c.all():
        return f"every area is {c_label}, so no condition can make it more likely"
    if not a.any():
        return f"no area is {a_label}, so there is no protected group to compare"
    if a.all():
        return f"every area is {a_label}, so there is no comparison group"
    return None


def _protected_condition(protected: str, label: str) -> Condition:
    return Condition(attribute=protected, value="yes", verb="are", phrase=label)


def _conditions(
    table: pd.DataFrame, columns: Sequence[str], protected: str
) -> dict[str, list[tuple[Condition, np.ndarray]]]:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise AnalysisError(
            f"condition column(s) {missing} are not in the area table; available columns: "
            f"{_available(table)}"
        )
    found: dict[str, list[tuple[Condition, np.ndarray]]] = {}
    if "income_tier" in table.columns and "income_tier" not in columns:
        found["income_tier"] = _categories(table["income_tier"], "income_tier")
    if {"population", "area_km2"} <= set(table.columns):
        pop, _ = _numeric(table["population"])
        area, _ = _numeric(table["area_km2"])
        density = np.divide(pop, area, out=np.full(pop.size, np.nan), where=area > 0)
        found["density"] = _quartiles(density, "density", "population density", " per km²")
    for col in columns:
        if col == protected:
            continue
        series = table[col]
        if pd.api.types.is_bool_dtype(series.dtype):
            found[col] = _categories(series.map({True: "yes", False: "no"}), col)
        elif pd.api.types.is_numeric_dtype(series.dtype) and series.nunique(dropna=True) > 4:
            values, _ = _numeric(series)
            found[col] = _quartiles(values, col, col, "")
        else:
            found[col] = _categories(series, col)
    return found


def _categories(series: pd.Series, column: str) -> list[tuple[Condition, np.ndarray]]:
    labels = _text_values(series)
    out = []
    for level in sorted(set(labels) - {""}):
        if column == "income_tier" and level in _TIER_PHRASES:
            verb, phrase = _TIER_PHRASES[level]
        else:
            verb, phrase = "have", f"{column} = {level}"
        out.append((Condition(column, level, verb, phrase), labels == level))
    return out


def _quartiles(
    values: np.ndarray, column: str, what: str, unit: str
) -> list[tuple[Condition, np.ndarray]]:
    finite = np.isfinite(values)
    if finite.sum() < 2 or np.ptp(values[finite]) == 0:
        return []
    edges = np.unique(np.quantile(values[finite], [0.0, 0.25, 0.5, 0.75, 1.0]))
    # Bins are closed on the right as in pandas.qcut, the first one also on the left.
    codes = np.clip(np.searchsorted(edges, values, side="left"), 1, edges.size - 1) - 1
    m = edges.size - 1
    out = []
    for q in range(m):
        lo, hi = edges[q], edges[q + 1]
        word = _QUARTER_WORDS[q] if m == 4 else f"band {q + 1} of {m}"
        value = f"Q{q + 1}" if m == 4 else f"B{q + 1}"
        phrase = f"in the {word} quarter by {what} ({lo:,.4g} to {hi:,.4g}{unit})"
        if m != 4:
            phrase = f"in {word} by {what} ({lo:,.4g} to {hi:,.4g}{unit})"
        out.append((Condition(column, value, "are", phrase), finite & (codes == q)))
    return out


def _predicate(conds: Sequence[Condition]) -> str:
    """Join predicates, saying a shared verb once: 'are majority-minority and low-income'."""
    parts: list[str] = []
    last_verb = None
    for cond in conds:
        parts.append(cond.phrase if cond.verb == last_verb else f"{cond.verb} {cond.phrase}")
        last_verb = cond.verb
    if len(parts) == 1:
        return parts[0]
    return ", ".join(parts[:-1]) + " and " + parts[-1]


def _rule(
    combo: Sequence[tuple[Condition, np.ndarray]],
    a: np.ndarray,
    c: np.ndarray,
    w: np.ndarray,
    n_areas: int,
    min_count: int,
    protected_cond: Condition,
    c_label: str,
    weight: str,
) -> Rule | None:
    b = np.ones(a.size, dtype=bool)
    for _, mask in combo:
        b &= mask
    ab = a & b
    premise_areas = int(ab.sum())
    if premise_areas < min_count or not (c & b).any():
        return None
    w_b, w_bc = w[b].sum(), w[b & c].sum()
    w_ab, w_abc = w[ab].sum(), w[ab & c].sum()
    nab = b & ~a
    w_nab, w_nabc = w[nab].sum(), w[nab & c].sum()
    if w_ab <= 0 or w_bc <= 0:
        return None
    conf = w_abc / w_ab
    context_conf = w_bc / w_b
    others = safe_ratio(w_nabc, w_nab)
    elift = conf / context_conf
    slift = None if others is None else safe_ratio(conf, others)
    risk_difference = None if others is None else conf - others
    conds = [cond for cond, _ in combo]
    premise = _predicate([protected_cond, *conds])
    if weight == "population":
        who, verb = "residents of areas that", f"live in {c_label} areas"
        base_who = (
            "residents of areas that " + _predicate(conds) if conds else "residents of all areas"
        )
    else:
        who, verb = "areas that", f"are {c_label}"
        base_who = "areas that " + _predicate(conds) if conds else "areas overall"
    sentence = f"{who} {premise} {verb} {elift:.1f} times as often as {base_who}"
    return Rule(
        context=tuple(cond.label for cond in conds),
        premise_areas=premise_areas,
        premise_outcome_areas=int((ab & c).sum()),
        context_areas=int(b.sum()),
        context_outcome_areas=int((b & c).sum()),
        support=premise_areas / n_areas,
        rule_support=int((ab & c).sum()) / n_areas,
        confidence=float(conf),
        context_confidence=float(context_conf),
        others_confidence=others,
        elift=float(elift),
        slift=slift,
        risk_difference=None if risk_difference is None else float(risk_difference),
        sentence=sentence[0].upper() + sentence[1:],
    )


# --------------------------------------------------------------------------------------
# Threshold sensitivity
# --------------------------------------------------------------------------------------


def served_from_fraction(covered_fraction: np.ndarray, threshold: float) -> np.ndarray:
    """Return the served flag: served means a covered fraction of at least ``threshold``."""
    return np.asarray(covered_fraction, dtype=float) >= threshold


@dataclass(frozen=True)
class GroupAtThreshold:
    """One group's served-area rate at one threshold, against the comparison rate."""

    served_area_rate: float | None
    ratio: float | None
    below_four_fifths: bool

    def to_dict(self) -> dict[str, Any]:
        """Return the figures as JSON-safe data."""
        return to_jsonable(
            {
                "served_area_rate": self.served_area_rate,
                "ratio": self.ratio,
                "below_four_fifths": self.below_four_fifths,
            }
        )


@dataclass(frozen=True)
class SensitivityRow:
    """Served shares at one served threshold.

    Attributes
    ----------
    threshold : float
        Served means ``covered_fraction >= threshold``.
    served_area_share : float
        Share of areas served.
    comparison_group : str
        Group whose rate the ratios divide by (the reference, or the highest-rate group).
    groups : dict of str to GroupAtThreshold
    """

    threshold: float
    served_area_share: float
    comparison_group: str
    groups: Mapping[str, GroupAtThreshold]

    def to_dict(self) -> dict[str, Any]:
        """Return the row as JSON-safe data."""
        return to_jsonable(
            {
                "threshold": self.threshold,
                "served_area_share": self.served_area_share,
                "comparison_group": self.comparison_group,
                "groups": {g: v.to_dict() for g, v in self.groups.items()},
            }
        )


def sensitivity_thresholds(
    covered_fraction: np.ndarray,
    counts: Mapping[str, np.ndarray],
    reference: str,
    thresholds: Sequence[float] | np.ndarray = DEFAULT_THRESHOLDS,
    *,
    against: Literal["reference", "highest"] = "reference",
) -> list[SensitivityRow]:
    """Recompute served-area rates and four-fifths flags over a range of served thresholds.

    Parameters
    ----------
    covered_fraction : numpy.ndarray
        Covered fraction of each area, in [0, 1].
    counts : mapping of str to numpy.ndarray
        Population of each group in each area.
    reference : str
        Reference group (one of ``counts``).
    thresholds : sequence of float
        Served thresholds in (0, 1].
    against : {"reference", "highest"}
        Compare each group with the reference group, or, as 29 CFR 1607.4(D) does, with
        the group that has the highest rate at that threshold.

    Returns
    -------
    list of SensitivityRow
        One per threshold, in the order given.

    Notes
    -----
    A group's served-area rate is the share of its population living in served areas.
    The four-fifths flag is ``ratio < 4/5``, strictly (29 CFR 1607.4(D)), compared
    exactly on the served and total counts by
    :func:`~coverage_audit.stats.four_fifths.below_four_fifths`; an undefined ratio
    (comparison rate 0) does not raise the flag. Raising the threshold can only
    remove areas from the served set, so every served share is non-increasing in it.
    """
    if against not in ("reference", "highest"):
        raise SpecError(
            f'against was "{against}" but is expected to be one of ["reference", "highest"]'
        )
    if reference not in counts:
        raise SpecError(f'reference group "{reference}" is not among the groups {list(counts)}')
    cf = np.asarray(covered_fraction, dtype=float)
    if not np.isfinite(cf).all():
        raise AnalysisError(
            f"{int((~np.isfinite(cf)).sum())} covered fraction(s) are missing or not finite"
        )
    names = list(counts)
    matrix = np.column_stack([np.asarray(counts[g], dtype=float) for g in names])
    if matrix.shape[0] != cf.size:
        raise AnalysisError(
            f"counts have {matrix.shape[0]} areas but covered_fraction has {cf.size}; "
            "give one value per area"
        )
    t = np.asarray(thresholds, dtype=float)
    if t.size == 0 or not np.isfinite(t).all() or (t <= 0).any() or (t > 1).any():
        raise SpecError(f"thresholds must be numbers in (0, 1]; got {t.tolist()}")
    served = cf[None, :] >= t[:, None]
    totals = matrix.sum(axis=0)
    served_counts = served.astype(float) @ matrix
    with np.errstate(invalid="ignore", divide="ignore"):
        rates = served_counts / totals
    ref_index = names.index(reference)
    rows = []
    for k, threshold in enumerate(t):
        if against == "highest" and np.isfinite(rates[k]).any():
            comp = int(np.nanargmax(rates[k]))
        else:
            comp = ref_index
        groups = {}
        for j, g in enumerate(names):
            rate = clean_number(rates[k, j])
            ratio = None if rate is None else safe_ratio(rates[k, j], rates[k, comp])
            flag = ratio is not None and below_four_fifths(
                served_counts[k, j], totals[j], served_counts[k, comp], totals[comp]
            )
            groups[g] = GroupAtThreshold(rate, ratio, flag)
        rows.append(
            SensitivityRow(
                threshold=float(threshold),
                served_area_share=float(served[k].mean()) if cf.size else float("nan"),
                comparison_group=names[comp],
                groups=groups,
            )
        )
    return rows
