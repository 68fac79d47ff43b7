"""Census Bureau tables as downloaded: data.census.gov CSV (plain or zipped), API JSON.

Takes a table file and gives a :class:`TableRead`: the rows as text (nothing parsed as a
number yet), the id column made into plain GEOIDs, the layout that was detected by content
(never by file name), the labels of the download's second row, and each estimate column
``..._E`` paired with its margin ``..._M``. Tidy CSV and Parquet tables pass through the same
function, so every table gets one reader.

Layouts, as published (REFERENCES.md, "Public data layouts"):

- data.census.gov downloads: row 1 variable codes (``GEO_ID``, ``NAME``, ``B03002_001E``,
  ``B03002_001M`` ...), row 2 labels (``Geography``, ``Estimate!!Total:`` ...), values quoted,
  lines possibly ending with a comma (a phantom empty column); ``GEO_ID`` carries a summary
  level prefix (``1400000US`` tract, ``1500000US`` block group, ``0500000US`` county,
  ``8600000US`` ZCTA). Zip archives of downloads: the data file is found by its first row.
- Census API JSON: a 2-D array, header row first, all values strings, geography columns
  (``state``, ``county``, ``tract``, ``block group``) at the end.

Row numbers given for a table's rows count data rows (1 is the first row after the header
rows, the labels row of a download included).

Annotation values (``-``, ``N``, ``(X)``, ``**``, ``***``, ``*****``, coded values such as
``250,000+`` and ``2,500-``, and the API's negative sentinels) are never read as numbers:
:func:`parse_counts` gives each a reason. In a margin column ``*****`` means a controlled
estimate, margin 0 (:func:`parse_margins`).
"""

from __future__ import annotations

import csv
import io
import json
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError

#: Summary-level prefixes of ``GEO_ID`` -> (level, digits of the GEOID that follows).
SUMMARY_LEVELS: dict[str, tuple[str, int | None]] = {
    "0100000US": ("nation", 0),
    "0400000US": ("state", 2),
    "0500000US": ("county", 5),
    "1400000US": ("tract", 11),
    "1500000US": ("block group", 12),
    "1000000US": ("block", 15),
    "8600000US": ("ZCTA", 5),
    "8710000US": ("ZCTA", 5),
}
_PREFIX_RE = re.compile(r"^(\d{7})US(\w*)$")
#: API geography columns in GEOID order, with their widths.
GEOGRAPHY_COLUMNS = (("state", 2), ("county", 3), ("tract", 6), ("block group", 1))
#: Id columns found without being named; ``GEO.id2`` is the plain GEOID of the older
#: American FactFinder downloads (from memory).
ID_CANDIDATES = ("GEO_ID", "GEOID", "GEOID20", "GEOID10", "geoid", "geo_id", "GEO.id2")
#: Meaning of each annotation symbol (Census Bureau ACS data notes).
ANNOTATIONS = {
    "-": "no estimate (too few sample observations, or not applicable)",
    "N": "not available (too few sample cases to publish)",
    "(X)": "not applicable",
    "**": "no margin (too few sample observations)",
    "***": "median in an open-ended interval, no margin",
    "*****": "controlled estimate, margin 0",
    "null": "not available",
}
#: Census API sentinels for "not available" (negative numbers used as annotations).
API_SENTINELS = frozenset(
    {
        "-111111111",
        "-222222222",
        "-333333333",
        "-555555555",
        "-666666666",
        "-888888888",
        "-999999999",
    }
)
SENTINEL_VALUES = [float(v) for v in API_SENTINELS]
_CODED_RE = re.compile(r"^[0-9][0-9,.]*[+-]$")


@dataclass
class TableRead:
    """One table as read: text values, a plain GEOID column and what was detected."""

    frame: pd.DataFrame
    id_column: str
    layout: str
    labels: dict[str, str] = field(default_factory=dict)
    #: Estimate column -> margin column, for every ``_E`` with its ``_M`` present.
    margins: dict[str, str] = field(default_factory=dict)
    #: Geography level from the ``GEO_ID`` prefix or the API columns (None when unknown).
    level: str | None = None
    prefix: str | None = None


def _is_download_labels(row: list[str]) -> bool:
    """Whether a second row is the labels row of a data.census.gov download."""
    if not row:
        return False
    first = row[0].strip().strip('"')
    return first in ("Geography", "id", "Id") or any("!!" in c for c in row)


def _sniff(data: bytes) -> str:
    head = data[:4096].lstrip(b"\xef\xbb\xbf").lstrip()
    if head.startswith(b"["):
        return "json"
    return "csv"


def _zip_member(path: Path) -> tuple[str, bytes]:
    """Find the data file of a zipped download by its first row (``GEO_ID`` column)."""
    try:
        archive = zipfile.ZipFile(path)
    except zipfile.BadZipFile:
        raise InputError(f"table file '{path}' is not a readable zip archive") from None
    seen = []
    with archive:
        for info in archive.infolist():
            if info.is_dir():
                continue
            seen.append(info.filename)
            with archive.open(info) as handle:
                head = handle.read(2048).decode("utf-8-sig", errors="replace")
            first = head.splitlines()[0] if head else ""
            codes = [c.strip().strip('"') for c in first.split(",")]
            if "GEO_ID" in codes and any(re.search(r"_\d{3}[EM]A?$", c) for c in codes):
                return info.filename, archive.read(info)
    raise InputError(
        f"table archive '{path}' holds no Census table download (no file whose first row has "
        f"GEO_ID and variable codes such as B03002_001E); its files are {seen}"
    )


def read_census_table(
    path: Path, *, id_column: str | None, role: str, prefer: str | None = None
) -> TableRead:
    """Read a demographics table in any accepted layout, detected by content.

    Parameters
    ----------
    path : Path
        A data.census.gov CSV (or a zip of one), Census API JSON, a tidy CSV/TSV or Parquet.
    id_column : str, optional
        The id column; None to detect ``GEO_ID``, ``GEOID``, ``GEOID20`` or the API's
        geography columns.
    role : str
        How the file is named in messages.
    prefer : str, optional
        A column to use as the id when ``id_column`` is None and the table has it (the
        areas' own id column).

    Returns
    -------
    TableRead

    Raises
    ------
    InputError
        When the file is missing, unreadable or has no id column.
    """
    if not path.exists():
        raise InputError(f"{role} file '{path}' was not found; check the path in the spec")
    suffix = path.suffix.lower()
    if suffix in (".parquet", ".pq"):
        try:
            frame = pd.read_parquet(path)
        except Exception as exc:
            raise InputError(f"{role} file '{path}' could not be read as Parquet ({exc})") from None
        return _finish(frame, id_column, "Parquet table", {}, path, role, prefer)
    member = None
    data = path.read_bytes()
    if data[:4] == b"PK\x03\x04":
        member, data = _zip_member(path)
    if _sniff(data) == "json":
        text = data.decode("utf-8-sig", errors="replace")
        return _read_api_json(text, id_column, path, role, prefer)
    sep = "\t" if suffix == ".tsv" else ","
    head = data[:65536].decode("utf-8-sig", errors="replace")
    rows = list(csv.reader(io.StringIO(head), delimiter=sep))
    download = len(rows) > 1 and _is_download_labels(rows[1])
    # Ids stay text so that leading zeros survive. Counts are left to pandas' fast parser: a
    # column holding an annotation ("-", "N", "250,000+") stays text and is looked at cell
    # by cell later; only empty cells count as missing (no "NA"/"null" guessing).
    text_ids = {c: str for c in (*ID_CANDIDATES, "NAME", id_column or prefer or "GEOID")}
    try:
        frame = pd.read_csv(
            io.BytesIO(data),
            sep=sep,
            encoding="utf-8-sig",
            dtype=text_ids,
            keep_default_na=not download,
            na_values=[""] if download else None,
            skiprows=[1] if download else None,
        )
    except Exception as exc:
        raise InputError(f"{role} file '{path}' could not be read as a table ({exc})") from None
    phantom = [
        c
        for c in frame.columns
        if str(c).startswith("Unnamed:") and (frame[c].isna() | (frame[c] == "")).all()
    ]
    for column in phantom:
        del frame[column]
    labels: dict[str, str] = {}
    if download:
        header = [c for c in rows[0]]
        labels = {c: lab for c, lab in zip(header, rows[1], strict=False) if c}
        layout = "Census table download (data.census.gov CSV)"
    else:
        layout = "tidy CSV table"
    if member is not None:
        layout += f", in zip member '{member}'"
    return _finish(frame, id_column, layout, labels, path, role, prefer)


def _read_api_json(
    text: str, id_column: str | None, path: Path, role: str, prefer: str | None
) -> TableRead:
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"{role} file '{path}' starts like Census API JSON but is not valid JSON "
            f"(line {exc.lineno}: {exc.msg})"
        ) from None
    if not (isinstance(data, list) and data and all(isinstance(r, list) for r in data)):
        raise InputError(
            f"{role} file '{path}' is JSON but not the Census API's 2-D array "
            "(a header row, then one row per area)"
        )
    header = [str(h) for h in data[0]]
    bad = [k + 2 for k, r in enumerate(data[1:]) if len(r) != len(header)]
    if bad:
        raise InputError(
            f"{role} file '{path}': row {bad[0] - 1} has a different number of values from the "
            f"header ({len(header)}); download the table again"
        )
    frame = pd.DataFrame(
        [[None if v is None else str(v) for v in r] for r in data[1:]], columns=header
    )
    return _finish(frame, id_column, "Census API JSON", {}, path, role, prefer)


def _geography_id(frame: pd.DataFrame) -> tuple[pd.Series, str] | None:
    """GEOID from the API's geography columns (state, county, tract, block group)."""
    if "zip code tabulation area" in frame.columns:  # the API's ZCTA geography
        zcta = frame["zip code tabulation area"].fillna("").astype(str).str.strip().str.zfill(5)
        return zcta, "ZCTA"
    present = [(c, w) for c, w in GEOGRAPHY_COLUMNS if c in frame.columns]
    if not present or present[0][0] != "state":
        return None
    names = [c for c, _ in GEOGRAPHY_COLUMNS]
    if [c for c, _ in present] != names[: len(present)]:
        return None
    parts = [frame[c].fillna("").astype(str).str.strip().str.zfill(w) for c, w in present]
    geoid = parts[0]
    for part in parts[1:]:
        geoid = geoid + part
    return geoid, present[-1][0]


def _finish(
    frame: pd.DataFrame,
    id_column: str | None,
    layout: str,
    labels: dict[str, str],
    path: Path,
    role: str,
    prefer: str | None = None,
) -> TableRead:
    level = prefix = None
    if id_column is None and prefer is not None and prefer in frame.columns:
        id_column = prefer
    if id_column is None:
        found = [c for c in ID_CANDIDATES if c in frame.columns]
        if found:
            id_column = found[0]
        else:
            built = _geography_id(frame)
            if built is None:
                raise InputError(
                    f"{role} file '{path}' ({layout}) has no id column: none of "
                    f"{list(ID_CANDIDATES)} nor the geography columns state, county, tract; "
                    f'name it with id = "COLUMN" (its columns are {list(frame.columns)[:12]})'
                )
            frame["GEOID"], level = built
            id_column = "GEOID"
    elif id_column not in frame.columns:
        raise InputError(
            f"{role} file '{path}' has no id column \"{id_column}\"; its columns are "
            f"{list(frame.columns)[:20]}"
        )
    values = frame[id_column]
    if values.dtype == object or pd.api.types.is_string_dtype(values.dtype):
        # Vectorised string kernels (pyarrow-backed "str" where available): 85,000 ids.
        text = values.astype(str).str.strip() if values.dtype == object else values.str.strip()
        head = text.str.slice(0, 9)
        prefixed = head.str.fullmatch(r"\d{7}US").fillna(False).astype(bool)
        if prefixed.any() and prefixed[values.notna()].all():
            prefix = str(head[prefixed].mode().iloc[0])
            level = SUMMARY_LEVELS.get(prefix, (None, None))[0] or level
            frame[id_column] = text.str.slice(9).astype(object).where(prefixed, None)
    margins = {
        c: c[:-1] + "M"
        for c in frame.columns
        if isinstance(c, str)
        and c.endswith("E")
        and re.search(r"_\d{3}E$", c)
        and c[:-1] + "M" in frame.columns
    }
    if level is None and "Census API" in layout:
        built = _geography_id(frame)
        level = built[1] if built else None
    return TableRead(frame, id_column, layout, labels, margins, level, prefix)


def annotation_reason(value: object) -> str | None:
    """Return why a cell is an annotation rather than a number, or None for other cells."""
    if not isinstance(value, str):
        return None
    text = value.strip()
    if text in ANNOTATIONS:
        return f"annotation {text!r} ({ANNOTATIONS[text]})"
    if text in API_SENTINELS:
        return f"annotation {text!r} (Census API sentinel: not available)"
    if _CODED_RE.match(text):
        side = "top" if text.endswith("+") else "bottom"
        return f"annotation {text!r} ({side}-coded value, not an exact number)"
    return None


def parse_margins(values: pd.Series) -> pd.Series:
    """Margins of error as numbers: ``*****`` (controlled estimate) is 0, other notes NaN."""
    if pd.api.types.is_numeric_dtype(values.dtype):
        out = values.astype(float)
    else:
        text = values.astype("string").str.strip()
        out = pd.to_numeric(text.mask(text == "*****", "0"), errors="coerce").astype(float)
    # -555555555: the API's "controlled estimate, margin not appropriate", as ***** is.
    out[out == -555555555.0] = 0.0
    out[out.isin(SENTINEL_VALUES)] = np.nan
    return out


def annotation_reasons(raw: pd.Series, numbers: pd.Series) -> pd.Series:
    """Reason of each annotation cell of ``raw`` (None elsewhere); ``numbers`` is its parse.

    Only cells that are not numbers, and the API's negative sentinels, are looked at, so
    that a column of plain counts costs one vectorised comparison.
    """
    suspect = (numbers.isna() & raw.notna()) | numbers.isin(SENTINEL_VALUES)
    out = pd.Series(None, index=raw.index, dtype=object)
    if suspect.any():
        out[suspect] = raw[suspect].map(
            lambda v: annotation_reason(v if isinstance(v, str) else f"{v:.0f}")
        )
    return out
