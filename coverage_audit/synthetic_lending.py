"""Fictional HMDA-layout loan/application records, for the demo region, tests and benchmarks.

:func:`lending_records` draws records in the published public layout (every field of
:data:`~coverage_audit.io.hmda.PUBLIC_FIELDS`, in order) for made-up lenders over given
tracts, from a seeded generator. Each lender takes applications in proportion to a tract
weight (households), tilted by a factor in majority-minority tracts, so a demo can show a
lender that draws fewer applications from those tracts than its peers. Lenders, LEI-like
codes, MSA/MD codes and tracts are invented (state code 99 is unassigned).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .io.hmda import PUBLIC_FIELDS, TRACT_FIELDS


@dataclass(frozen=True)
class FictionalLender:
    """A made-up lender: LEI-like code, display name, yearly volume, tilt in minority tracts."""

    lei: str
    name: str
    applications_per_year: int
    minority_tilt: float = 1.0
    purchased_per_year: int = 0


def fictional_lei(tag: str, number: int) -> str:
    """Return a made-up 20-character LEI-like code (``9999`` + tag + number, zero-padded)."""
    body = "".join(ch for ch in tag.upper() if ch.isalnum())[:14].ljust(14, "0")
    return f"9999{body}{number:02d}"


def lending_records(
    tracts: pd.DataFrame,
    lenders: Sequence[FictionalLender],
    years: Sequence[int],
    rng: np.random.Generator,
    *,
    msa: str = "90010",
    na_tracts: int = 0,
) -> pd.DataFrame:
    """Draw fictional records in the public layout.

    Parameters
    ----------
    tracts : pandas.DataFrame
        One row per tract: ``geoid`` (11 digits), ``minority_pct`` (0-100),
        ``income_pct`` (tract income, % of the area median), ``population``,
        ``households``.
    lenders : sequence of FictionalLender
    years : sequence of int
    rng : numpy.random.Generator
    msa : str
        The fictional MSA/MD code of every record.
    na_tracts : int
        Records per lender and year whose census tract is ``NA`` (as in the published
        files, where a property's tract is not known).

    Returns
    -------
    pandas.DataFrame
        Text columns named and ordered as :data:`PUBLIC_FIELDS`.
    """
    geoid = tracts["geoid"].astype(str).to_numpy()
    minority = tracts["minority_pct"].to_numpy(dtype=float)
    weight = np.maximum(tracts["households"].to_numpy(dtype=float), 0.0)
    parts = []
    for year in years:
        for lender in lenders:
            tilt = np.where(minority > 50.0, lender.minority_tilt, 1.0)
            p = weight * tilt
            p = p / p.sum()
            n_apps = int(rng.poisson(lender.applications_per_year))
            n_buy = int(rng.poisson(lender.purchased_per_year)) if lender.purchased_per_year else 0
            idx = rng.choice(geoid.size, size=n_apps + n_buy, p=p)
            share = minority[idx] / 100.0
            # Decisions: denials somewhat more frequent where the minority share is high.
            deny = 0.10 + 0.10 * share
            u = rng.uniform(size=idx.size)
            action = np.select(
                [u < 0.04, u < 0.10, u < 0.10 + deny, u < 0.22 + deny],
                ["5", "4", "3", "2"],
                "1",
            ).astype(object)
            action[n_apps:] = "6"
            parts.append(
                _fill(
                    rng,
                    year=year,
                    lei=lender.lei,
                    msa=msa,
                    tracts=tracts.iloc[idx],
                    action=action,
                    share=share,
                )
            )
            if na_tracts:
                na = _fill(
                    rng,
                    year=year,
                    lei=lender.lei,
                    msa=msa,
                    tracts=tracts.iloc[rng.integers(0, geoid.size, na_tracts)],
                    action=np.full(na_tracts, "1", dtype=object),
                    share=np.full(na_tracts, 0.3),
                )
                na["census_tract"] = "NA"
                for name in TRACT_FIELDS:
                    na[name] = "NA"
                parts.append(na)
    return pd.concat(parts, ignore_index=True)[list(PUBLIC_FIELDS)]


_RACES = np.array(
    [
        "White",
        "Black or African American",
        "Asian",
        "Race Not Available",
        "Joint",
        "2 or more minority races",
    ],
    dtype=object,
)


def _fill(
    rng: np.random.Generator,
    *,
    year: int,
    lei: str,
    msa: str,
    tracts: pd.DataFrame,
    action: np.ndarray,
    share: np.ndarray,
) -> pd.DataFrame:
    """Every public field for ``len(action)`` records."""
    n = len(action)
    geoid = tracts["geoid"].astype(str).to_numpy()
    u = rng.uniform(size=n)
    white = 1.0 - share
    race = np.where(
        u < white * 0.85,
        _RACES[0],
        np.where(u < white * 0.85 + share * 0.55, _RACES[1], _RACES[rng.integers(2, 6, n)]),
    )
    hispanic = rng.uniform(size=n) < share * 0.35
    ethnicity = np.where(
        hispanic,
        "Hispanic or Latino",
        np.where(rng.uniform(size=n) < 0.9, "Not Hispanic or Latino", "Ethnicity Not Available"),
    )
    purpose = rng.choice(
        np.array(["1", "31", "32", "2", "4"], dtype=object), n, p=[0.5, 0.22, 0.18, 0.05, 0.05]
    )
    amount = (rng.lognormal(12.4, 0.45, n) // 10_000 * 10_000 + 5_000).astype(np.int64)
    originated = action == "1"
    cols: dict[str, object] = {name: "NA" for name in PUBLIC_FIELDS}
    cols.update(
        {
            "activity_year": str(year),
            "lei": lei,
            "derived_msa-md": msa,
            "state_code": "NA",
            "county_code": np.array([g[:5] for g in geoid], dtype=object),
            "census_tract": geoid,
            "conforming_loan_limit": "C",
            "derived_loan_product_type": "Conventional:First Lien",
            "derived_dwelling_category": "Single Family (1-4 Units):Site-Built",
            "derived_ethnicity": ethnicity,
            "derived_race": race,
            "derived_sex": rng.choice(np.array(["Male", "Female", "Joint"], dtype=object), n),
            "action_taken": action,
            "purchaser_type": "0",
            "preapproval": "2",
            "loan_type": rng.choice(
                np.array(["1", "2", "3"], dtype=object), n, p=[0.8, 0.14, 0.06]
            ),
            "loan_purpose": purpose,
            "lien_status": np.where(rng.uniform(size=n) < 0.95, "1", "2"),
            "reverse_mortgage": "2",
            "open-end_line_of_credit": "2",
            "business_or_commercial_purpose": "2",
            "loan_amount": amount.astype(str),
            "interest_rate": np.where(originated, "6.125", "NA"),
            "hoepa_status": np.where(originated, "2", "3"),
            "loan_term": "360",
            "negative_amortization": "2",
            "interest_only_payment": "2",
            "balloon_payment": "2",
            "other_nonamortizing_features": "2",
            "property_value": (amount * 5 // 4).astype(str),
            "construction_method": "1",
            "occupancy_type": np.where(rng.uniform(size=n) < 0.9, "1", "3"),
            "manufactured_home_secured_property_type": "3",
            "manufactured_home_land_property_interest": "5",
            "total_units": "1",
            "income": (amount // 3_000).astype(str),
            "applicant_credit_score_type": "1",
            "co-applicant_credit_score_type": "10",
            "applicant_ethnicity-1": np.where(hispanic, "1", "2"),
            "applicant_ethnicity_observed": "2",
            "co-applicant_ethnicity_observed": "4",
            "applicant_race-1": "5",
            "applicant_race_observed": "2",
            "co-applicant_race_observed": "4",
            "applicant_sex": "1",
            "co-applicant_sex": "5",
            "applicant_sex_observed": "2",
            "co-applicant_sex_observed": "4",
            "applicant_age": "35-44",
            "co-applicant_age": "9999",
            "applicant_age_above_62": "No",
            "submission_of_application": "1",
            "initially_payable_to_institution": "1",
            "aus-1": "1",
            "denial_reason-1": np.where(action == "3", "1", "10"),
            "tract_population": tracts["population"].astype(int).astype(str).to_numpy(),
            "tract_minority_population_percent": np.char.mod(
                "%.2f", tracts["minority_pct"].to_numpy(dtype=float)
            ).astype(object),
            "ffiec_msa_md_median_family_income": "71200",
            "tract_to_msa_income_percentage": np.char.mod(
                "%.2f", tracts["income_pct"].to_numpy(dtype=float)
            ).astype(object),
            "tract_owner_occupied_units": (tracts["households"].to_numpy() * 3 // 5)
            .astype(int)
            .astype(str),
            "tract_one_to_four_family_homes": (tracts["households"].to_numpy() * 7 // 10)
            .astype(int)
            .astype(str),
            "tract_median_age_of_housing_units": "41",
        }
    )
    return pd.DataFrame({k: (v if isinstance(v, np.ndarray) else [v] * n) for k, v in cols.items()})
