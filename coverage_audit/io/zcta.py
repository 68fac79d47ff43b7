"""ZIP-code zones -> covered fractions of areas, through ZCTAs or a crosswalk.

Takes a list of served ZIP codes and either the Census ZCTA-to-tract relationship file or a
user's ZIP-to-area crosswalk, and gives each area's covered fraction:

- relationship file (pipe-delimited, one row per ZCTA x tract part, with the land area of
  the part ``AREALAND_PART`` beside the tract's ``AREALAND_TRACT_20``): an area's covered
  fraction is the land area of its parts in listed ZCTAs over its land area;
- crosswalk (CSV with a ZIP column, an area id column and a ratio column giving the share
  of the area held by each ZIP, for example a residential-address ratio): the sum of the
  ratios of the listed ZIPs, capped at 1.

ZCTAs are built from census blocks and are not ZIP codes: a ZIP with no ZCTA (PO-box or
single-building ZIPs) is listed in the exclusions, never dropped silently. The
relationship file's field names are matched by their stems (``GEOID_ZCTA5``,
``GEOID_TRACT``, ``AREALAND_PART``, ``AREALAND_TRACT``), from memory of the 2020 layout.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError


@dataclass(frozen=True)
class ZipFractions:
    """Covered fraction by area id, and the listed ZIPs that reached no area."""

    fractions: dict[str, float]
    zips: list[str]
    #: Listed ZIPs (row, zip) with no ZCTA or crosswalk row.
    unknown: list[tuple[int, str]]
    layout: str


def read_zip_list(path: Path, *, role: str) -> list[str]:
    """Read served ZIP codes: one a line, or a CSV with a ``zip`` column; 5 digits kept."""
    if not path.exists():
        raise InputError(f"{role} file '{path}' was not found; check the path in the spec")
    lines = path.read_text(encoding="utf-8-sig").splitlines()
    first = lines[0].split(",") if lines else []
    cols = [c.strip().strip('"').lower() for c in first]
    if len(cols) > 1 or (
        cols and not cols[0].isdigit() and cols[0] in ("zip", "zipcode", "zip_code", "zcta")
    ):
        table = pd.read_csv(path, dtype=str, keep_default_na=False)
        lower = {str(c).lower(): c for c in table.columns}
        column = next(
            (lower[k] for k in ("zip", "zipcode", "zip_code", "zcta") if k in lower), None
        )
        if column is None:
            raise InputError(
                f"{role} file '{path}' is a table without a zip column; its columns are "
                f"{list(table.columns)}; name the column zip or give one ZIP code a line"
            )
        values = list(table[column])
    else:
        values = lines
    out = []
    for k, value in enumerate(values, start=1):
        text = str(value).strip()
        if not text:
            continue
        if not text.isdigit() or len(text) > 5:
            raise InputError(
                f"{role} file '{path}' row {k}: {text!r} is not a ZIP code (five digits); "
                "give one ZIP code a line"
            )
        out.append(text.zfill(5))
    if not out:
        raise InputError(f"{role} file '{path}' lists no ZIP code")
    return out


def _find(columns: list[str], stem: str, path: Path, role: str) -> str:
    for c in columns:
        if c.upper().startswith(stem):
            return c
    raise InputError(
        f"{role} file '{path}' has no {stem}... field; is it the Census ZCTA-to-tract "
        f"relationship file (pipe-delimited)? Its fields are {columns[:12]}"
    )


def relationship_fractions(zips: list[str], path: Path, *, role: str) -> ZipFractions:
    """Covered fraction of each tract from the ZCTA-to-tract relationship file."""
    if not path.exists():
        raise InputError(f"{role} file '{path}' was not found; check the path in the spec")
    try:
        rel = pd.read_csv(path, sep="|", dtype=str, keep_default_na=False, encoding="utf-8-sig")
    except Exception as exc:
        raise InputError(f"{role} file '{path}' could not be read ({exc})") from None
    cols = [str(c) for c in rel.columns]
    zcol = _find(cols, "GEOID_ZCTA5", path, role)
    tcol = _find(cols, "GEOID_TRACT", path, role)
    part = _find(cols, "AREALAND_PART", path, role)
    whole = _find(cols, "AREALAND_TRACT", path, role)
    land_part = pd.to_numeric(rel[part], errors="coerce")
    land_whole = pd.to_numeric(rel[whole], errors="coerce")
    bad = land_part.isna() | land_whole.isna()
    bad &= rel[zcol] != ""  # tract rows with no ZCTA have blank ZCTA fields
    if bad.any():
        k = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(
            f"{role} file '{path}' row {k + 1}: {part} or {whole} is not a number "
            f"({rel[part].iloc[k]!r}, {rel[whole].iloc[k]!r})"
        )
    known = set(rel[zcol])
    listed = set(zips)
    sel = rel[zcol].isin(listed).to_numpy()
    tract_land = land_whole.groupby(rel[tcol]).max()
    covered = land_part[sel].groupby(rel[tcol][sel]).sum()
    fractions = {}
    for tract, land in tract_land.items():
        got = float(covered.get(tract, 0.0))
        fractions[str(tract)] = min(1.0, got / land) if land > 0 else 0.0
    unknown = [(k, z) for k, z in enumerate(zips, start=1) if z not in known]
    return ZipFractions(fractions, zips, unknown, "Census ZCTA-to-tract relationship file")


def crosswalk_fractions(
    zips: list[str], path: Path, ratio: str, *, role: str, id_candidates: tuple[str, ...]
) -> ZipFractions:
    """Covered fraction of each area from a ZIP-to-area crosswalk's ratio column."""
    if not path.exists():
        raise InputError(f"{role} file '{path}' was not found; check the path in the spec")
    table = pd.read_csv(path, dtype=str, keep_default_na=False)
    lower = {str(c).lower(): str(c) for c in table.columns}
    zcol = next((lower[k] for k in ("zip", "zipcode", "zip_code", "zcta") if k in lower), None)
    idcol = next((lower[k.lower()] for k in id_candidates if k.lower() in lower), None)
    if zcol is None or idcol is None:
        raise InputError(
            f"{role} file '{path}' needs a zip column and an area id column (one of "
            f"{list(id_candidates)}); its columns are {list(table.columns)}"
        )
    if ratio not in table.columns:
        raise InputError(
            f"{role} file '{path}' has no ratio column {ratio!r}; its columns are "
            f"{list(table.columns)}"
        )
    share = pd.to_numeric(table[ratio], errors="coerce")
    bad = share.isna() | (share < 0) | (share > 1)
    if bad.any():
        k = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(
            f"{role} file '{path}' row {k + 1}: {ratio} = {table[ratio].iloc[k]!r} is not a "
            "share between 0 and 1"
        )
    zipcodes = table[zcol].str.strip().str.zfill(5)
    sel = zipcodes.isin(set(zips)).to_numpy()
    areas = table[idcol].str.strip()
    sums = share[sel].groupby(areas[sel]).sum()
    fractions = {str(a): 0.0 for a in areas.unique()}
    fractions.update({str(a): float(min(1.0, v)) for a, v in sums.items()})
    known = set(zipcodes)
    unknown = [(k, z) for k, z in enumerate(zips, start=1) if z not in known]
    return ZipFractions(fractions, zips, unknown, "ZIP-to-area crosswalk")
