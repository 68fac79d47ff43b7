"""Survey error stage: margins (or replicates) of the counts into the audit's figures.

Takes the analysed areas (with the ``<group>_moe`` columns :func:`inputs.load_areas`
adds), the spec and the summary built so far, and adds to the summary each group's
intervals and four-fifths confidence (``coverage.groups.<g>``), the method
(``coverage.uncertainty``: ``"delta"``, ``"replicates"`` or ``"none"``), 90% intervals of
the segregation indices (``segregation.uncertainty``) and of each enclave's group shares
(``group_shares_ci90``). The statistics are in :mod:`coverage_audit.stats.uncertainty`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from .inputs import AreaInputs
from .spec import AuditSpec
from .stats.uncertainty import (
    CV_CUTOFFS,
    Z90,
    CountErrors,
    class_rate_intervals,
    coverage_uncertainty,
    index_intervals,
    standard_error,
)

#: How the survey-error caution of audit.CAUTIONS begins (replaced when margins are used).
SURVEY_CAUTION_START = "Counts from surveys such as the American Community Survey"


def count_errors(
    frame: pd.DataFrame, inputs: AreaInputs, spec: AuditSpec
) -> tuple[CountErrors | None, np.ndarray | None]:
    """Return the sampling error of the counts: SEs from margins, or replicates.

    Returns the errors (None when neither margins nor replicates were given) and the
    total's replicates when there are any.
    """
    pop = spec.population
    cols = inputs.margin_columns
    if not cols and pop.replicates is None:
        return None, None
    given = [g for g, _ in pop.groups]
    composition: dict[str, dict[str, float]] = {g: {g: 1.0} for g in given if g in cols}
    if "minority" in inputs.groups and "population" in cols and pop.reference in cols:
        composition["minority"] = {"population": 1.0, pop.reference: -1.0}
    se = {
        base: standard_error(frame[cols[base]].to_numpy(dtype=float))
        for base in cols
        if base != "minority"
    }
    if pop.replicates is None:
        return CountErrors(se, composition), None
    from .io.replicates import read_replicates

    named = {"population": pop.total, **dict(pop.groups)}
    reps = read_replicates(
        pop.replicates,
        named,
        frame[inputs.id_column].astype(str).tolist(),
        id_width=spec.areas.id_width,
        exclusions=inputs.exclusions,
    )
    total = reps.pop("population")
    if "minority" in inputs.groups:
        reps["minority"] = total - reps[pop.reference]
    composition = {g: {g: 1.0} for g in inputs.groups}
    return CountErrors(se, composition, reps), total


def survey_error(
    summary: dict[str, Any],
    frame: pd.DataFrame,
    inputs: AreaInputs,
    spec: AuditSpec,
    rng: np.random.Generator,
) -> None:
    """Add the survey-error figures to ``summary`` in place (``"none"`` without margins)."""
    coverage = summary["coverage"]
    errors, total_reps = count_errors(frame, inputs, spec)
    if errors is None:
        coverage["uncertainty"] = "none"
        return
    counts = {g: frame[g].to_numpy(dtype=float) for g in inputs.groups}
    fraction = frame["covered_fraction"].to_numpy(dtype=float)
    served = frame["served"].to_numpy(dtype=bool)
    result = coverage_uncertainty(counts, errors, fraction, served, coverage["comparison_group"])
    for g, figures in result.to_dict()["groups"].items():
        coverage["groups"][g].update(figures)
    _class_intervals(coverage, frame, errors, total_reps)
    _footprint_intervals(summary, frame, errors, counts)
    coverage["uncertainty"] = errors.method
    coverage["uncertainty_settings"] = {
        "confidence": 0.9,
        "z": Z90,
        "groups_with_margins": [g for g in inputs.groups if errors.known(g)],
        "margins_missing": dict(inputs.margins_missing),
        "cv_cutoffs": list(CV_CUTOFFS),
    }
    if "minority" in errors.composition and errors.replicates is None:
        coverage["uncertainty_settings"]["minority_margin"] = (
            "sqrt(MOE_total^2 + MOE_reference^2), the Census Bureau's approximation for a "
            "difference; the minority-reference covariance is carried"
        )
    enclaves = summary.get("enclaves", [])
    position = {str(i): k for k, i in enumerate(frame[inputs.id_column].astype(str))}
    members: Sequence[np.ndarray] = [
        np.array([position[str(a)] for a in e["area_ids"]], dtype=int) for e in enclaves
    ]
    intervals = index_intervals(
        counts,
        frame["population"].to_numpy(dtype=float),
        errors,
        inputs.reference,
        served,
        fraction,
        members,
        draws=spec.population.margin_draws,
        rng=rng,
        total_replicates=total_reps,
    )
    if "segregation" in summary:
        summary["segregation"]["uncertainty"] = intervals.to_dict()
    for e, shares in zip(enclaves, intervals.enclave_shares, strict=True):
        e["group_shares_ci90"] = {g: shares.get(g) for g in e["group_shares"]}


def _footprint_intervals(
    summary: dict[str, Any],
    frame: pd.DataFrame,
    errors: CountErrors,
    counts: dict[str, np.ndarray],
) -> None:
    """Add rate and ratio intervals and four-fifths confidence to each footprint compared."""
    comparison = summary.get("comparison")
    if not isinstance(comparison, dict):
        return
    reference = comparison.get("reference_group")
    threshold = summary["coverage"]["served_threshold"]
    primary = summary["footprint"].get("name")
    for entry in comparison.get("footprints") or []:
        name = entry.get("name")
        column = "covered_fraction" if name == primary else f"covered_fraction_{name}"
        if column not in frame.columns or reference not in counts:
            continue
        fraction = frame[column].to_numpy(dtype=float)
        result = coverage_uncertainty(counts, errors, fraction, fraction >= threshold, reference)
        for g, row in (entry.get("groups") or {}).items():
            if g in result.groups:
                u = result.groups[g]
                row["rate_ci90"] = u.rate_ci90
                row["ratio_ci90"] = u.ratio_ci90
                row["four_fifths_confidence"] = u.four_fifths_confidence


def _class_intervals(
    coverage: dict[str, Any],
    frame: pd.DataFrame,
    errors: CountErrors,
    total_reps: np.ndarray | None,
) -> None:
    """Add ``rate_ci90`` to each class of area (majority-minority, income tiers, all)."""
    se_total = errors.se.get("population")
    if se_total is None and total_reps is None:
        return
    classes = coverage.get("area_classes") or {}
    n = len(frame)
    masks: dict[str, np.ndarray] = {"all": np.ones(n, dtype=bool)}
    if "majority_minority" in frame.columns:
        mm = frame["majority_minority"].to_numpy(dtype=bool)
        masks |= {"majority_minority": mm, "not_majority_minority": ~mm}
    if "income_tier" in frame.columns:
        tiers = frame["income_tier"].to_numpy(dtype=object)
        masks |= {f"tier:{t}": tiers == t for t in classes.get("income_tiers", {})}
        masks["low_or_moderate"] = np.isin(tiers, ("low", "moderate"))
        masks["middle_or_upper"] = np.isin(tiers, ("middle", "upper"))
    intervals = class_rate_intervals(
        frame["covered_fraction"].to_numpy(dtype=float),
        frame["population"].to_numpy(dtype=float),
        masks,
        se_total=se_total,
        total_replicates=total_reps,
    )
    for name, ci in intervals.items():
        if name.startswith("tier:"):
            target = classes.get("income_tiers", {}).get(name[5:])
        else:
            target = classes.get(name)
        if isinstance(target, dict):
            target["rate_ci90"] = ci


def cautions(base: Sequence[str], summary: dict[str, Any]) -> list[str]:
    """Return the cautions, the survey-error one saying what was done with the margins."""
    method = summary["coverage"].get("uncertainty", "none")
    if method == "none":
        return list(base)
    how = (
        "the Census Bureau's variance replicates (successive-difference formula)"
        if method == "replicates"
        else "the delta method (first-order linearisation) from the published margins"
    )
    text = (
        "Counts from surveys such as the American Community Survey are estimates with margins "
        f"of error. This audit carries them into its figures by {how}: each rate and ratio has "
        "a 90% interval, each four-fifths flag says whether the whole interval is below 0.8 "
        "(below), at or above it (not_below) or straddles it (uncertain), and segregation "
        "indices and enclave shares have intervals from a seeded simulation of the counts. "
        "The intervals cover sampling error only, treat areas as independent and coverage "
        "as exact."
    )
    return [text if c.startswith(SURVEY_CAUTION_START) else c for c in base]
