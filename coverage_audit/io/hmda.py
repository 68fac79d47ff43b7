"""Reader of HMDA public loan/application records (2018 on), streamed with column selection.

Takes one file of the public loan-level records as published (pipe-delimited, or the CSV
form, with its header line) and gives the records that pass the user's filters in chunks
of a few hundred thousand rows, holding only the selected columns (as text) and the line
each record came from. Nothing is loaded whole: a national year of tens of millions of
rows is read block by block with :func:`pyarrow.csv.open_csv`, so memory stays at one block
and the analysed columns. Every record not passed on is accounted for:

- malformed records (a wrong number of fields, an empty line, a census tract that is
  ``NA`` or not 11 digits, a code outside the published lists, a year before 2018, an LEI
  that is not 20 letters and digits) are counted by reason and listed in the exclusions
  with their line number (1-based physical line of the file: the header is line 1);
- records outside the user's filters (years, markets, loan purpose, lien, occupancy,
  total units, loan type) are counted by filter, not listed: they are not errors.

A record whose filter fields are themselves malformed is listed as malformed (it cannot
be placed in or out of scope); one that is valid in its filter fields and outside the
filters is only counted, whatever else is wrong with it.

The field names and code lists are those of the public HMDA data-field documentation
(FFIEC/CFPB, "Public HMDA - LAR Data Fields", loan-level datasets 2018 onwards; the order
of :data:`PUBLIC_FIELDS` is that of the published national files, from memory). Column
names are matched with ``-`` and ``_`` treated alike (``derived_msa-md`` or
``derived_msa_md``), as copies of the files differ on that.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from ..errors import InputError

#: Every field of the public loan-level records (2018 on), in published order. Source: the
#: public HMDA data-field documentation ("Public HMDA - LAR Data Fields"); order from memory.
PUBLIC_FIELDS: tuple[str, ...] = (
    "activity_year",
    "lei",
    "derived_msa-md",
    "state_code",
    "county_code",
    "census_tract",
    "conforming_loan_limit",
    "derived_loan_product_type",
    "derived_dwelling_category",
    "derived_ethnicity",
    "derived_race",
    "derived_sex",
    "action_taken",
    "purchaser_type",
    "preapproval",
    "loan_type",
    "loan_purpose",
    "lien_status",
    "reverse_mortgage",
    "open-end_line_of_credit",
    "business_or_commercial_purpose",
    "loan_amount",
    "loan_to_value_ratio",
    "interest_rate",
    "rate_spread",
    "hoepa_status",
    "total_loan_costs",
    "total_points_and_fees",
    "origination_charges",
    "discount_points",
    "lender_credits",
    "loan_term",
    "prepayment_penalty_term",
    "intro_rate_period",
    "negative_amortization",
    "interest_only_payment",
    "balloon_payment",
    "other_nonamortizing_features",
    "property_value",
    "construction_method",
    "occupancy_type",
    "manufactured_home_secured_property_type",
    "manufactured_home_land_property_interest",
    "total_units",
    "multifamily_affordable_units",
    "income",
    "debt_to_income_ratio",
    "applicant_credit_score_type",
    "co-applicant_credit_score_type",
    *(f"applicant_ethnicity-{k}" for k in range(1, 6)),
    *(f"co-applicant_ethnicity-{k}" for k in range(1, 6)),
    "applicant_ethnicity_observed",
    "co-applicant_ethnicity_observed",
    *(f"applicant_race-{k}" for k in range(1, 6)),
    *(f"co-applicant_race-{k}" for k in range(1, 6)),
    "applicant_race_observed",
    "co-applicant_race_observed",
    "applicant_sex",
    "co-applicant_sex",
    "applicant_sex_observed",
    "co-applicant_sex_observed",
    "applicant_age",
    "co-applicant_age",
    "applicant_age_above_62",
    "co-applicant_age_above_62",
    "submission_of_application",
    "initially_payable_to_institution",
    *(f"aus-{k}" for k in range(1, 6)),
    *(f"denial_reason-{k}" for k in range(1, 5)),
    "tract_population",
    "tract_minority_population_percent",
    "ffiec_msa_md_median_family_income",
    "tract_to_msa_income_percentage",
    "tract_owner_occupied_units",
    "tract_one_to_four_family_homes",
    "tract_median_age_of_housing_units",
)

#: Published code lists of the fields this tool uses (public data-field documentation).
CODES: dict[str, tuple[str, ...]] = {
    # 1 originated, 2 approved not accepted, 3 denied, 4 withdrawn, 5 closed for
    # incompleteness, 6 purchased, 7 preapproval denied, 8 preapproval approved not accepted
    "action_taken": ("1", "2", "3", "4", "5", "6", "7", "8"),
    # 1 conventional, 2 FHA, 3 VA, 4 USDA RHS or FSA
    "loan_type": ("1", "2", "3", "4"),
    # 1 home purchase, 2 home improvement, 31 refinancing, 32 cash-out refinancing,
    # 4 other purpose, 5 not applicable
    "loan_purpose": ("1", "2", "31", "32", "4", "5"),
    # 1 first lien, 2 subordinate lien
    "lien_status": ("1", "2"),
    # 1 principal residence, 2 second residence, 3 investment property
    "occupancy_type": ("1", "2", "3"),
    "total_units": ("1", "2", "3", "4", "5-24", "25-49", "50-99", "100-149", ">149"),
    "derived_race": (
        "American Indian or Alaska Native",
        "Asian",
        "Black or African American",
        "Native Hawaiian or Other Pacific Islander",
        "White",
        "2 or more minority races",
        "Joint",
        "Free Form Text Only",
        "Race Not Available",
    ),
    "derived_ethnicity": (
        "Hispanic or Latino",
        "Not Hispanic or Latino",
        "Joint",
        "Ethnicity Not Available",
        "Free Form Text Only",
    ),
}

#: The appended tract fields (FFIEC census data joined to each record by the publisher).
TRACT_FIELDS: tuple[str, ...] = (
    "tract_minority_population_percent",
    "tract_to_msa_income_percentage",
    "tract_population",
    "tract_owner_occupied_units",
)
#: Fields every analysis needs.
CORE_FIELDS: tuple[str, ...] = ("activity_year", "lei", "census_tract", "action_taken")
#: First year of the records in this layout (the 2015 HMDA rule's data points).
FIRST_YEAR = 2018


def normalise_name(name: str) -> str:
    """Return a field name with ``-`` as ``_``, lower case, stripped (for matching only)."""
    return name.strip().strip('"').strip().lower().replace("-", "_")


@dataclass(frozen=True)
class RecordFilters:
    """Which records are in scope; ``None`` means no restriction on that field.

    Attributes
    ----------
    years : frozenset of int or None
    market_field : str or None
        ``derived_msa-md`` or ``county_code``: the field the ``markets`` codes refer to.
    markets : frozenset of str or None
    loan_purpose, lien_status, occupancy_type, total_units, loan_type : frozenset or None
        Published codes, as text.
    """

    years: frozenset[int] | None = None
    market_field: str | None = None
    markets: frozenset[str] | None = None
    loan_purpose: frozenset[str] | None = None
    lien_status: frozenset[str] | None = None
    occupancy_type: frozenset[str] | None = None
    total_units: frozenset[str] | None = None
    loan_type: frozenset[str] | None = None

    def code_filters(self) -> dict[str, frozenset[str]]:
        """Return the code filters that restrict something, by field."""
        out = {}
        for name in ("loan_purpose", "lien_status", "occupancy_type", "total_units", "loan_type"):
            value = getattr(self, name)
            if value is not None:
                out[name] = value
        return out

    def fields(self) -> list[str]:
        """Return the fields the filters read."""
        out = ["activity_year"] if self.years is not None else []
        if self.markets is not None and self.market_field is not None:
            out.append(self.market_field)
        return out + list(self.code_filters())


@dataclass
class ScanCounts:
    """What a scan read, kept and set aside.

    Attributes
    ----------
    lines : int
        Record lines read (the header not counted).
    kept : int
        Records passed on.
    malformed : Counter
        Malformed records by reason (listed in the exclusions).
    filtered : Counter
        Records outside the filters, by the first filter they fail (counted only).
    """

    lines: int = 0
    kept: int = 0
    malformed: Counter[str] = field(default_factory=Counter)
    filtered: Counter[str] = field(default_factory=Counter)

    def to_dict(self) -> dict[str, Any]:
        """Return the counts as JSON-safe data."""
        return {
            "lines": self.lines,
            "kept": self.kept,
            "malformed": sum(self.malformed.values()),
            "malformed_by_reason": dict(sorted(self.malformed.items())),
            "filtered_out": sum(self.filtered.values()),
            "filtered_by": dict(sorted(self.filtered.items())),
        }


def read_header(path: Path) -> tuple[str, list[str]]:
    """Return the delimiter (``|`` or ``,``) and the field names of a record file's header.

    Raises
    ------
    InputError
        The file is missing, empty, or its first line is not a header of the public layout.
    """
    if not path.is_file():
        raise InputError(f"lending records file '{path}' was not found; check [lending] path")
    with open(path, encoding="utf-8-sig", errors="replace", newline="") as handle:
        first = handle.readline().rstrip("\r\n")
    if not first:
        raise InputError(f"lending records file '{path}' is empty")
    delimiter = "|" if first.count("|") >= first.count(",") and "|" in first else ","
    names = [n.strip().strip('"') for n in first.split(delimiter)]
    if not {"activity_year", "lei"} <= {normalise_name(n) for n in names}:
        raise InputError(
            f"lending records file '{path}': line 1 is not a header of the public HMDA layout "
            f"(it must name activity_year, lei, census_tract ...; found {names[:6]}); use the "
            "published file with its header line"
        )
    return delimiter, names


class RecordReader:
    """Stream one file of public HMDA records: selected columns, filters, exclusions.

    Parameters
    ----------
    path : Path
        The record file (pipe-delimited or CSV, with the header line).
    fields : sequence of str
        Published names of the fields wanted; :data:`CORE_FIELDS` and the filters'
        fields are always read. Optional fields absent from the file are skipped (see
        :attr:`missing`); a missing core or filter field is an error.
    filters : RecordFilters, optional
    optional : sequence of str, optional
        Fields read only when the file has them.
    block_size : int
        Bytes parsed per block (small blocks stay in the processor's cache: 1 MiB parses
        faster here than 16 MiB).
    chunk_rows : int
        Blocks are screened and passed on in chunks of about this many records (memory
        is about one chunk's selected columns).

    Attributes
    ----------
    counts : ScanCounts
        Filled in as the chunks are read.
    excluded : list of (line, id, reason)
        Malformed records, for :class:`~coverage_audit.inputs.Exclusions`.
    """

    def __init__(
        self,
        path: Path,
        fields: Sequence[str],
        *,
        filters: RecordFilters | None = None,
        optional: Sequence[str] = (),
        block_size: int = 1 << 20,
        chunk_rows: int = 200_000,
    ) -> None:
        self.path = Path(path)
        self.chunk_rows = int(chunk_rows)
        self.filters = filters or RecordFilters()
        self.delimiter, header = read_header(self.path)
        by_norm = {normalise_name(n): n for n in header}
        self.n_fields = len(header)
        wanted = list(dict.fromkeys([*CORE_FIELDS, *self.filters.fields(), *fields]))
        missing = [f for f in wanted if normalise_name(f) not in by_norm]
        if missing:
            raise InputError(
                f"lending records file '{self.path}' has no field {missing[0]!r} (needed); its "
                f"header names {len(header)} fields, such as {header[:8]}"
            )
        self.missing = [f for f in optional if normalise_name(f) not in by_norm]
        wanted += [f for f in optional if f not in self.missing and f not in wanted]
        #: Published name -> the file's spelling, for the selected fields.
        self.columns = {f: by_norm[normalise_name(f)] for f in wanted}
        self.block_size = int(block_size)
        self.counts = ScanCounts()
        self.excluded: list[tuple[int, str | None, str]] = []

    def __iter__(self) -> Iterator[pd.DataFrame]:
        """Yield the kept records: the selected fields (text) and ``line`` (int)."""
        rejected: list[tuple[int, int]] = []

        def on_invalid(row: Any) -> str:
            rejected.append((int(row.number), int(row.actual_columns)))
            return "skip"

        file_names = list(self.columns.values())
        reader = pacsv.open_csv(
            self.path,
            read_options=pacsv.ReadOptions(use_threads=False, block_size=self.block_size),
            parse_options=pacsv.ParseOptions(
                delimiter=self.delimiter,
                invalid_row_handler=on_invalid,
                ignore_empty_lines=False,
            ),
            convert_options=pacsv.ConvertOptions(
                include_columns=file_names,
                column_types={n: pa.string() for n in file_names},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
        cursor = 2  # the first record line; the header is line 1
        done_rejects = 0
        pending: list[tuple[pa.RecordBatch, np.ndarray]] = []
        pending_rows = 0
        try:
            for batch in reader:
                k = batch.num_rows
                rejected.sort()
                ahead = [r for r, _ in rejected[done_rejects:]]
                pool = np.arange(cursor, cursor + k + len(ahead) + 1, dtype=np.int64)
                lines = np.setdiff1d(pool, np.asarray(ahead, dtype=np.int64))[:k]
                last = int(lines[-1]) if k else cursor - 1
                # Rejected lines up to the end of this batch are now placed: record them.
                while done_rejects < len(rejected) and rejected[done_rejects][0] <= last:
                    self._reject_count(*rejected[done_rejects])
                    done_rejects += 1
                cursor = last + 1
                self.counts.lines += k
                if k == 0:
                    continue
                pending.append((batch, lines))
                pending_rows += k
                if pending_rows >= self.chunk_rows:
                    kept = self._flush(pending)
                    pending, pending_rows = [], 0
                    if len(kept):
                        yield kept
            if pending:
                kept = self._flush(pending)
                if len(kept):
                    yield kept
        except pa.ArrowInvalid as exc:
            raise InputError(
                f"lending records file '{self.path}' could not be parsed ({exc}); check that it "
                "is the published pipe-delimited or CSV layout"
            ) from None
        rejected.sort()
        for line, actual in rejected[done_rejects:]:
            self._reject_count(line, actual)

    def _flush(self, pending: list[tuple[pa.RecordBatch, np.ndarray]]) -> pd.DataFrame:
        table = pa.Table.from_batches([b for b, _ in pending]).combine_chunks()
        batch = table.to_batches()[0] if table.num_rows else pending[0][0]
        kept = self._screen(batch, np.concatenate([lines for _, lines in pending]))
        self.counts.kept += len(kept)
        return kept

    def _reject_count(self, line: int, actual: int) -> None:
        self.counts.lines += 1
        reason = f"wrong column count: {actual} fields where the header has {self.n_fields}"
        self.counts.malformed[reason.split(":")[0]] += 1
        self.excluded.append((line, None, reason))

    def _screen(self, batch: pa.RecordBatch, lines: np.ndarray) -> pd.DataFrame:
        """Return the valid in-scope rows with ``line``; record the others.

        Checks run on the Arrow arrays (pyarrow.compute), so a chunk of valid records costs
        no Python loop; only the rows set aside are looked at one by one.
        """
        n = batch.num_rows
        text = dict(zip(self.columns, batch.columns, strict=True))
        empty = np.ones(n, dtype=bool)
        for values in text.values():
            empty &= _np(pc.equal(values, ""))
        filter_reason = np.full(n, "", dtype=object)
        other_reason = np.full(n, "", dtype=object)
        _set(filter_reason, empty, "empty line")
        f = self.filters
        year_text = text["activity_year"]
        year_ok = _digits(year_text, 4)
        years = _np(pc.cast(pc.if_else(pa.array(year_ok), year_text, "0"), pa.int32()))
        _set(
            filter_reason,
            ~year_ok | (years < FIRST_YEAR),
            lambda v: f"activity_year not a year from {FIRST_YEAR} on: {v!r}",
            year_text,
        )
        market_field = f.market_field if f.markets is not None else None
        for name, values in text.items():
            if name == "activity_year":
                continue
            bad = _invalid(name, values)
            if bad is None or not bad.any():
                continue
            target = (
                filter_reason if name == market_field or name in f.code_filters() else other_reason
            )
            _set(target, bad, _reason_of(name), values)
        # Filters, on records whose filter fields are valid.
        valid = filter_reason == ""
        scope = np.full(n, "", dtype=object)
        if f.years is not None:
            _set(scope, valid & ~np.isin(years, list(f.years)), "years")
        if market_field is not None and f.markets is not None:
            _set(scope, valid & ~_isin(text[market_field], f.markets), "markets")
        for name, allowed in f.code_filters().items():
            _set(scope, valid & ~_isin(text[name], allowed), name)
        out_of_scope = scope != ""
        if out_of_scope.any():
            for key, count in Counter(scope[out_of_scope]).items():
                self.counts.filtered[key] += count
        reason = np.where(valid, np.where(out_of_scope, "", other_reason), filter_reason)
        bad_rows = np.flatnonzero(reason != "")
        if bad_rows.size:
            tracts = text["census_tract"].take(pa.array(bad_rows)).to_pylist()
            for r, tract in zip(bad_rows, tracts, strict=True):
                why = str(reason[r])
                self.counts.malformed[why.split(":")[0]] += 1
                self.excluded.append((int(lines[r]), tract if tract else None, why))
        keep = (reason == "") & ~out_of_scope
        out = batch.filter(pa.array(keep)).to_pandas()
        out.columns = list(self.columns)
        out["line"] = lines[keep]
        return out


def _np(values: Any) -> np.ndarray:
    """Return an Arrow boolean or number array as numpy."""
    return np.asarray(values.to_numpy(zero_copy_only=False))


def _digits(values: Any, width: int) -> np.ndarray:
    """Rows holding exactly ``width`` ASCII digits (faster than a regular expression)."""
    return _np(pc.equal(pc.binary_length(values), width)) & _np(pc.ascii_is_decimal(values))


def _isin(values: Any, allowed: frozenset[str]) -> np.ndarray:
    return _np(pc.is_in(values, value_set=pa.array(sorted(allowed), type=pa.string())))


def _set(
    target: np.ndarray,
    mask: np.ndarray,
    reason: str | Callable[[str], str],
    values: Any = None,
) -> None:
    """Write ``reason`` where ``mask`` holds and no earlier reason is set.

    ``reason`` is a text, or a function of the row's value (``values``, an Arrow array)
    called only on the rows written.
    """
    where = mask & (target == "")
    if not where.any():
        return
    if isinstance(reason, str):
        target[where] = reason
    else:
        rows = np.flatnonzero(where)
        picked = values.take(pa.array(rows)).to_pylist()
        target[rows] = np.asarray([reason(str(v)) for v in picked], dtype=object)


_NUMBER = r"^\d+(\.\d+)?$"


def _invalid(name: str, values: Any) -> np.ndarray | None:
    """Return the rows whose value of ``name`` is not valid, or None if it is not checked."""
    if name in CODES:
        return ~_isin(values, frozenset(CODES[name]))
    if name == "census_tract":
        return ~_digits(values, 11)
    if name == "lei":
        return ~(_np(pc.equal(pc.binary_length(values), 20)) & _np(pc.ascii_is_alnum(values)))
    if name in ("derived_msa-md", "county_code"):
        return ~_digits(values, 5)
    if name in TRACT_FIELDS:
        ok = _np(pc.match_substring_regex(values, _NUMBER)) | _isin(values, frozenset({"NA", ""}))
        return ~ok
    return None


def _reason_of(name: str) -> Callable[[str], str]:
    def reason(value: str) -> str:
        if name == "census_tract":
            return "census tract NA" if value == "NA" else f"census tract not 11 digits: {value!r}"
        if name == "lei":
            return f"lei not 20 letters and digits: {value!r}"
        if name in ("derived_msa-md", "county_code"):
            return f"{name} not 5 digits: {value!r}"
        if name in TRACT_FIELDS:
            return f"{name} not a number: {value!r}"
        return f"{name} outside the published codes: {value!r}"

    return reason


def open_records(
    paths: Sequence[Path],
    fields: Sequence[str],
    *,
    filters: RecordFilters | None = None,
    optional: Sequence[str] = (),
    block_size: int = 1 << 20,
) -> list[RecordReader]:
    """Return one :class:`RecordReader` per file (headers read and checked up front)."""
    return [
        RecordReader(p, fields, filters=filters, optional=optional, block_size=block_size)
        for p in paths
    ]


def describe_codes() -> Mapping[str, tuple[str, ...]]:
    """Return the published code lists this reader checks (for the report's methods)."""
    return dict(CODES)
