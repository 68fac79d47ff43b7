"""Survey error stage: margins (or replicates) of the counts into the audit's figures.

Takes the analysed areas (with the ``<group>_moe`` columns :func:`inputs.load_areas`
adds), the replicate counts the input stage read (:mod:`coverage_audit.io.further`), the
spec and the summary built so far (only read), and returns :class:`SurveyFigures`: each
group's intervals and four-fifths confidence (``coverage.groups.<g>``), the method
(``coverage.uncertainty``: ``"delta"``, ``"replicates"`` or ``"none"``), 90% intervals of
the segregation indices (``segregation.uncertainty``) and of each enclave's group shares
(``group_shares_ci90``), which the findings tree sets into summary.json. The statistics
are in :mod:`coverage_audit.stats.uncertainty`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
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


#: One change :meth:`SurveyFigures.apply` makes: the path of a dict in the summary (keys,
#: or list positions) and the items set there, in the order the stage computed them.
Patch = tuple[tuple[str | int, ...], dict[str, Any]]


@dataclass(frozen=True)
class SurveyFigures:
    """What the survey-error stage adds to the summary.

    Attributes
    ----------
    method : str
        ``"none"``, ``"delta"`` or ``"replicates"``.
    patches : tuple of Patch
        Where each figure goes in the summary (group intervals, class intervals, the
        footprints compared, settings, segregation intervals, enclave shares).
    """

    method: str = "none"
    patches: tuple[Patch, ...] = ()

    def apply(self, summary: dict[str, Any]) -> None:
        """Set the figures into ``summary`` (a fresh dict built by the findings)."""
        if self.method == "none":
            summary["coverage"]["uncertainty"] = "none"
            return
        for path, items in self.patches:
            target: Any = summary
            for key in path:
                target = target[key]
            target.update(items)


def count_errors(
    frame: pd.DataFrame,
    inputs: AreaInputs,
    spec: AuditSpec,
    replicates: Mapping[str, np.ndarray] | None = None,
) -> tuple[CountErrors | None, np.ndarray | None]:
    """Return the sampling error of the counts: SEs from margins, or replicates.

    ``replicates`` are the replicate counts read in the input stage
    (:func:`coverage_audit.io.replicates.read_replicates`, key -> 80 x areas, in the order
    of ``frame``). Returns the errors (None when neither margins nor replicates were
    given) and the total's replicates when there are any.
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
    if replicates is None:
        raise ValueError("the replicate table is read in the input stage; pass replicates")
    reps = dict(replicates)
    total = reps.pop("population")
    if "minority" in inputs.groups:
        reps["minority"] = total - reps[pop.reference]
    composition = {g: {g: 1.0} for g in inputs.groups}
    return CountErrors(se, composition, reps), total


def survey_error(
    summary: Mapping[str, Any],
    frame: pd.DataFrame,
    inputs: AreaInputs,
    spec: AuditSpec,
    rng: np.random.Generator,
    replicates: Mapping[str, np.ndarray] | None = None,
) -> SurveyFigures:
    """Return the survey-error figures of the audit (method ``"none"`` without margins).

    ``summary`` is the summary built so far, only read (the comparison group, the area
    classes, the footprints compared and the enclaves say where figures go).
    """
    coverage = summary["coverage"]
    errors, total_reps = count_errors(frame, inputs, spec, replicates)
    if errors is None:
        return SurveyFigures()
    patches: list[Patch] = []
    counts = {g: frame[g].to_numpy(dtype=float) for g in inputs.groups}
    fraction = frame["covered_fraction"].to_numpy(dtype=float)
    served = frame["served"].to_numpy(dtype=bool)
    result = coverage_uncertainty(counts, errors, fraction, served, coverage["comparison_group"])
    for g, figures in result.to_dict()["groups"].items():
        patches.append((("coverage", "groups", g), dict(figures)))
    patches += _class_intervals(coverage, frame, errors, total_reps)
    patches += _footprint_intervals(summary, frame, errors, counts)
    settings: dict[str, Any] = {
        "confidence": 0.9,
        "z": Z90,
        "groups_with_margins": [g for g in inputs.groups if errors.known(g)],
        "margins_missing": dict(inputs.margins_missing),
        "cv_cutoffs": list(CV_CUTOFFS),
    }
    if "minority" in errors.composition and errors.replicates is None:
        settings["minority_margin"] = (
            "sqrt(MOE_total^2 + MOE_reference^2), the Census Bureau's approximation for a "
            "difference; the minority-reference covariance is carried"
        )
    patches.append(
        (("coverage",), {"uncertainty": errors.method, "uncertainty_settings": settings})
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
        patches.append((("segregation",), {"uncertainty": intervals.to_dict()}))
    for k, (e, shares) in enumerate(zip(enclaves, intervals.enclave_shares, strict=True)):
        ci = {g: shares.get(g) for g in e["group_shares"]}
        patches.append((("enclaves", k), {"group_shares_ci90": ci}))
    return SurveyFigures(errors.method, tuple(patches))


def _footprint_intervals(
    summary: Mapping[str, Any],
    frame: pd.DataFrame,
    errors: CountErrors,
    counts: dict[str, np.ndarray],
) -> list[Patch]:
    """Rate and ratio intervals and four-fifths confidence of each footprint compared."""
    comparison = summary.get("comparison")
    if not isinstance(comparison, dict):
        return []
    out: list[Patch] = []
    reference = comparison.get("reference_group")
    threshold = summary["coverage"]["served_threshold"]
    primary = summary["footprint"].get("name")
    for k, entry in enumerate(comparison.get("footprints") or []):
        name = entry.get("name")
        column = "covered_fraction" if name == primary else f"covered_fraction_{name}"
        if column not in frame.columns or reference not in counts:
            continue
        fraction = frame[column].to_numpy(dtype=float)
        result = coverage_uncertainty(counts, errors, fraction, fraction >= threshold, reference)
        for g in entry.get("groups") or {}:
            if g in result.groups:
                u = result.groups[g]
                out.append(
                    (
                        ("comparison", "footprints", k, "groups", g),
                        {
                            "rate_ci90": u.rate_ci90,
                            "ratio_ci90": u.ratio_ci90,
                            "four_fifths_confidence": u.four_fifths_confidence,
                        },
                    )
                )
    return out


def _class_intervals(
    coverage: Mapping[str, Any],
    frame: pd.DataFrame,
    errors: CountErrors,
    total_reps: np.ndarray | None,
) -> list[Patch]:
    """``rate_ci90`` of each class of area (majority-minority, income tiers, all)."""
    se_total = errors.se.get("population")
    if se_total is None and total_reps is None:
        return []
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
    out: list[Patch] = []
    for name, ci in intervals.items():
        if name.startswith("tier:"):
            path: tuple[str | int, ...] = ("coverage", "area_classes", "income_tiers", name[5:])
            target = classes.get("income_tiers", {}).get(name[5:])
        else:
            path = ("coverage", "area_classes", name)
            target = classes.get(name)
        if isinstance(target, dict):
            out.append((path, {"rate_ci90": ci}))
    return out


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
