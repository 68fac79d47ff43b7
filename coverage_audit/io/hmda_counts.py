"""HMDA public records streamed into counts by cell, in the input stage of an audit.

:func:`read_lending_records` streams every record file of ``[lending]``
(:mod:`coverage_audit.io.hmda`), keeps the records in scope and reduces them chunk by
chunk to counts by year, market, lender, tract, action, race and ethnicity (so memory
follows the number of such cells, not of records), with, when the tract categories come
from the records, each tract's appended figures. Each file is hashed before and after the
streamed read, so the manifest's digest is that of the bytes the figures come from. The
lending review (:mod:`coverage_audit.lending`) works on these counts and reads no file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..inputs import Exclusions, InputRecord, sha256_file
from ..spec_lending import LendingSpec
from .hmda import RecordFilters, RecordReader, open_records

_KEYS = ["year", "market", "lei", "tract", "action", "race", "ethnicity"]
#: Chunk counts are folded together when they hold more rows than this.
_COMPACT_ROWS = 2_000_000


@dataclass(frozen=True, eq=False)
class LendingRecords:
    """The lending records as read: counts by cell and what the read saw.

    Attributes
    ----------
    counts : pandas.DataFrame
        Records by year, market, lei, tract, action, race and ethnicity (column ``n``).
    tract_figures : pandas.DataFrame or None
        Tract minority and income percentages by year (when the records are the source).
    readers : tuple of RecordReader
        The exhausted readers, with their counts of lines, malformed and filtered records.
    outside : int
        Records in scope but outside the analysed areas.
    records : tuple of InputRecord
        The files read, with their digests, for the manifest.
    exclusions : Exclusions
        The malformed records left out.
    """

    counts: pd.DataFrame
    tract_figures: pd.DataFrame | None
    readers: tuple[RecordReader, ...]
    outside: int
    records: tuple[InputRecord, ...]
    exclusions: Exclusions = field(default_factory=Exclusions)


def tract_source_kind(ls: LendingSpec, has_minority: bool) -> str:
    """Return where tract categories come from: ``"areas"`` or ``"records"``.

    Raises
    ------
    InputError
        ``tract_source = "areas"`` without the areas' minority share.
    """
    source = ls.tract_source
    if source == "auto":
        source = "areas" if has_minority else "records"
    if source == "areas" and not has_minority:
        raise InputError(
            '[lending] tract_source = "areas" needs the minority share of the areas: set '
            "derive_minority = true or name a group minority in [population]"
        )
    return source


def read_lending_records(
    ls: LendingSpec, area_ids: list[str], has_minority: bool
) -> LendingRecords:
    """Stream the ``[lending]`` record files into counts by cell.

    Parameters
    ----------
    ls : LendingSpec
    area_ids : list of str
        The analysed areas' ids (records elsewhere are counted as outside when the
        categories come from the areas or the market is the study area).
    has_minority : bool
        Whether the areas carry a minority share (chooses the tract source).

    Raises
    ------
    InputError
        A file changed while being read, or no record is in scope.
    """
    source = tract_source_kind(ls, has_minority)
    exclusions = Exclusions()
    # Each file is hashed before and after the streamed read, so the manifest's digest is
    # that of the bytes the figures come from (a file that changed meanwhile is refused).
    before = {Path(p): sha256_file(Path(p)) for p in ls.path}
    agg, tract_figures, scans, outside = _read(ls, source, set(area_ids), exclusions)
    for path, digest in before.items():
        if sha256_file(path) != digest:
            raise InputError(
                f"[lending] records file '{path}' changed while it was being read (its "
                "SHA-256 before and after reading differ); wait until it is no longer being "
                "written, then rerun"
            )
    records = tuple(
        InputRecord("lending records", str(r.path), before[Path(r.path)], r.counts.lines)
        for r in scans
    )
    return LendingRecords(agg, tract_figures, tuple(scans), outside, records, exclusions)


def _filters(ls: LendingSpec) -> RecordFilters:
    market_field = {"msa": "derived_msa-md", "county": "county_code"}.get(ls.market_by)

    def fs(values: tuple[str, ...] | None) -> frozenset[str] | None:
        return None if values is None else frozenset(values)

    return RecordFilters(
        years=None if ls.years is None else frozenset(ls.years),
        market_field=market_field,
        markets=fs(ls.markets),
        loan_purpose=fs(ls.purposes),
        lien_status=fs(ls.liens),
        occupancy_type=fs(ls.occupancy),
        total_units=fs(ls.total_units),
        loan_type=fs(ls.loan_types),
    )


def _read(
    ls: LendingSpec, source: str, area_ids: set[str], exclusions: Exclusions
) -> tuple[pd.DataFrame, pd.DataFrame | None, list[RecordReader], int]:
    """Stream every file: counts by cell, tract figures (records source), readers, outside."""
    filters = _filters(ls)
    market_field = {"msa": "derived_msa-md", "county": "county_code"}.get(ls.market_by)
    fields = [market_field] if market_field else []
    if source == "records":
        fields += ["tract_minority_population_percent", "tract_to_msa_income_percentage"]
    readers = open_records(
        list(ls.path), fields, filters=filters, optional=["derived_race", "derived_ethnicity"]
    )
    parts: list[pd.DataFrame] = []
    figures: list[pd.DataFrame] = []
    outside = 0
    restrict = source == "areas" or ls.market_by == "area"
    for reader in readers:
        for chunk in reader:
            if restrict:
                inside = chunk["census_tract"].isin(area_ids).to_numpy()
                outside += int((~inside).sum())
                chunk = chunk.loc[inside]
                if chunk.empty:
                    continue
            keyed = pd.DataFrame(
                {
                    "year": chunk["activity_year"].astype(int).to_numpy(),
                    "market": (
                        chunk[market_field].to_numpy(dtype=object)
                        if market_field
                        else np.full(len(chunk), "study area", dtype=object)
                    ),
                    "lei": chunk["lei"].str.upper().to_numpy(dtype=object),
                    "tract": chunk["census_tract"].to_numpy(dtype=object),
                    "action": chunk["action_taken"].to_numpy(dtype=object),
                    "race": chunk.get("derived_race", pd.Series("", index=chunk.index)).to_numpy(
                        dtype=object
                    ),
                    "ethnicity": chunk.get(
                        "derived_ethnicity", pd.Series("", index=chunk.index)
                    ).to_numpy(dtype=object),
                }
            )
            parts.append(keyed.groupby(_KEYS, sort=False).size().rename("n").reset_index())
            if sum(len(p) for p in parts) > _COMPACT_ROWS:
                # Fold the chunks' counts together so memory follows the distinct cells.
                parts = [_sum_counts(parts)]
            if source == "records":
                fig = pd.DataFrame(
                    {
                        "year": keyed["year"].to_numpy(),
                        "tract": keyed["tract"].to_numpy(),
                        "minority_pct": pd.to_numeric(
                            chunk["tract_minority_population_percent"], errors="coerce"
                        ).to_numpy(dtype=float),
                        "income_pct": pd.to_numeric(
                            chunk["tract_to_msa_income_percentage"], errors="coerce"
                        ).to_numpy(dtype=float),
                    }
                )
                figures.append(fig.groupby(["year", "tract"], sort=False).first().reset_index())
        excluded = sorted(reader.excluded, key=lambda e: e[0])
        exclusions.add(
            f"lending {reader.path.name}",
            [e[0] for e in excluded],
            [e[1] for e in excluded],
            [e[2] for e in excluded],
        )
    if not parts:
        names = ", ".join(f"'{r.path.name}'" for r in readers)
        raise InputError(
            f"[lending] no record of {names} is in scope ({_counts_text(readers, outside)}); "
            "check years, markets and the other filters"
        )
    agg = _sum_counts(parts)
    tract_figures = None
    if figures:
        tract_figures = (
            pd.concat(figures, ignore_index=True).groupby(["year", "tract"]).first().reset_index()
        )
    return agg, tract_figures, readers, outside


def _sum_counts(parts: list[pd.DataFrame]) -> pd.DataFrame:
    """Return the counts of several chunks summed by cell, sorted by the keys."""
    combined = pd.concat(parts, ignore_index=True)
    return combined.groupby(_KEYS, sort=True)["n"].sum().reset_index()


def _counts_text(readers: list[RecordReader], outside: int) -> str:
    lines = sum(r.counts.lines for r in readers)
    malformed = sum(sum(r.counts.malformed.values()) for r in readers)
    filtered = sum(sum(r.counts.filtered.values()) for r in readers)
    return (
        f"{lines} records read, {malformed} malformed, {filtered} outside the filters, "
        f"{outside} outside the analysed areas"
    )
