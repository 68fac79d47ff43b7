"""Rule discovery: conjunctions of area traits under which coverage gaps concentrate.

:func:`discover_rules` ranks conjunctions of area traits (income tier, quartiles of numeric
columns, categories) by how much more often majority-minority areas are unserved under them
(extended lift), and gives a :class:`RuleResult`. Pure functions on the per-area table.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd

from .._util import safe_ratio, to_jsonable
from ..errors import AnalysisError, SpecError
from ._validate import column_names, numeric_values, text_values

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
                f"{column_names(table)}"
            )
        w_all, reasons = numeric_values(table["population"])
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
        share, reasons = numeric_values(table["minority_share"])
        flag = np.where(reasons == "", (share > majority_cut).astype(float), np.nan)
        notes.append(f"majority-minority derived as minority_share > {majority_cut:g}")
        return flag, "majority-minority"
    raise AnalysisError(
        f'protected column "{protected}" is not in the area table'
        + (" (nor minority_share to derive it from)" if protected == "majority_minority" else "")
        + f"; available columns: {column_names(table)}"
    )


def _outcome_flag(table: pd.DataFrame, outcome: str) -> tuple[np.ndarray, str]:
    if outcome == "unserved" and "unserved" not in table.columns:
        if "served" not in table.columns:
            raise AnalysisError(
                f"outcome unserved needs a served column; available columns: {column_names(table)}"
            )
        return 1.0 - _flag(table["served"], "served"), "unserved"
    if outcome not in table.columns:
        raise AnalysisError(
            f'outcome column "{outcome}" is not in the area table; available columns: '
            f"{column_names(table)}"
        )
    return _flag(table[outcome], outcome), outcome


def _flag(series: pd.Series, column: str) -> np.ndarray:
    values, _ = numeric_values(series)
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
            f"{column_names(table)}"
        )
    found: dict[str, list[tuple[Condition, np.ndarray]]] = {}
    if "income_tier" in table.columns and "income_tier" not in columns:
        found["income_tier"] = _categories(table["income_tier"], "income_tier")
    if {"population", "area_km2"} <= set(table.columns):
        pop, _ = numeric_values(table["population"])
        area, _ = numeric_values(table["area_km2"])
        density = np.divide(pop, area, out=np.full(pop.size, np.nan), where=area > 0)
        found["density"] = _quartiles(density, "density", "population density", " per km²")
    for col in columns:
        if col == protected:
            continue
        series = table[col]
        if pd.api.types.is_bool_dtype(series.dtype):
            found[col] = _categories(series.map({True: "yes", False: "no"}), col)
        elif pd.api.types.is_numeric_dtype(series.dtype) and series.nunique(dropna=True) > 4:
            values, _ = numeric_values(series)
            found[col] = _quartiles(values, col, col, "")
        else:
            found[col] = _categories(series, col)
    return found


def _categories(series: pd.Series, column: str) -> list[tuple[Condition, np.ndarray]]:
    labels = text_values(series)
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
