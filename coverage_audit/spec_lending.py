"""The ``[lending]`` table of a spec: HMDA loan/application records and the peer review.

Kept apart from :mod:`coverage_audit.spec` (which imports :class:`LendingSpec` from here)
so that neither module grows past a readable size. The parser uses the spec module's
checkers, so messages read the same everywhere.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from . import spec_values as s
from .errors import SpecError
from .io.hmda import CODES

#: Which field the ``markets`` codes refer to: the record's derived MSA/MD code, its
#: 5-digit county, or the audit's own study area (every analysed area, one market).
MARKET_KINDS = ("msa", "county", "area")
PEER_RULES = ("market", "band")
TRACT_SOURCES = ("auto", "areas", "records")
_LEI_RE = re.compile(r"^[A-Za-z0-9]{20}$")


@dataclass(frozen=True)
class LendingSpec:
    """HMDA public loan/application records and how to review one lender against peers.

    Attributes
    ----------
    path : tuple of Path
        One or more record files (pipe-delimited or CSV, as published).
    lender : str
        The LEI of the lender under review.
    lender_name : str or None
        Display name.
    years, markets : tuple or None
        Filters; ``None`` keeps every year and every market (each reviewed separately).
    market_by : str
        ``msa`` (``derived_msa-md`` codes), ``county`` (5-digit ``county_code``) or
        ``area`` (the audit's analysed areas as one market).
    purposes, liens, occupancy, total_units, loan_types : tuple of str or None
        Published codes to keep (``loan_purpose``, ``lien_status``, ``occupancy_type``,
        ``total_units``, ``loan_type``).
    peers : str or tuple of str
        ``"market"``, ``"band"`` or a list of LEIs.
    band : (float, float)
        Volume band of the ``band`` rule, multipliers of the lender's applications.
    alpha : float
    preapprovals : bool
        Also review preapproval requests (action_taken 7-8) as a separate set.
    tract_source : str
        ``auto``: the audit's demographics when they give the minority share, else the
        records' appended tract fields; or force ``areas`` / ``records``.
    high_minority_share : float
    black_hispanic_groups : tuple of str or None
        Groups of ``[population]`` whose sum makes the Black-and-Hispanic share.
    small_cell : float
        Fisher's exact test when the smallest expected cell is below this.
    gap_max_applications : int
        A tract of the footprint with at most this many applications from the lender is
        a lending gap.
    lender_names : tuple of (LEI, name)
        Display names of other lenders (the records name lenders by LEI only).
    """

    path: tuple[Path, ...]
    lender: str
    lender_name: str | None = None
    years: tuple[int, ...] | None = None
    markets: tuple[str, ...] | None = None
    market_by: str = "msa"
    purposes: tuple[str, ...] | None = None
    liens: tuple[str, ...] | None = None
    occupancy: tuple[str, ...] | None = None
    total_units: tuple[str, ...] | None = None
    loan_types: tuple[str, ...] | None = None
    peers: str | tuple[str, ...] = "market"
    band: tuple[float, float] = (0.5, 2.0)
    alpha: float = 0.05
    preapprovals: bool = False
    tract_source: str = "auto"
    high_minority_share: float = 0.8
    black_hispanic_groups: tuple[str, ...] | None = None
    small_cell: float = 5.0
    gap_max_applications: int = 0
    lender_names: tuple[tuple[str, str], ...] = ()

    @property
    def peer_rule(self) -> str:
        """``market``, ``band`` or ``list``."""
        return self.peers if isinstance(self.peers, str) else "list"

    def to_dict(self) -> dict[str, Any]:
        """Return the table as TOML-like plain data."""
        out: dict[str, Any] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "path":
                value = [str(p) for p in value]
            elif f.name == "lender_names":
                value = dict(value)
            elif isinstance(value, tuple):
                value = list(value)
            out[f.name] = value
        return out


LENDING_KEYS = tuple(f.name for f in fields(LendingSpec))


def lending_from(value: Any, base: Path, where: str) -> LendingSpec | None:
    """Validate the ``[lending]`` table (None when the spec has none)."""
    if value is None:
        return None
    d = s._table(value, where, "lending")
    s._check_keys(d, LENDING_KEYS, where, "[lending]")
    t = "lending"
    raw_path = d.get("path")
    if isinstance(raw_path, str):
        raw_paths = [raw_path]
    elif isinstance(raw_path, list) and raw_path and all(isinstance(p, str) for p in raw_path):
        raw_paths = list(raw_path)
    else:
        raise SpecError(
            f"{where}: [lending] path must be a record file or a list of them, got {raw_path!r}"
        )
    paths = tuple(s._path({"path": p}, "path", base, where, t, required=True) for p in raw_paths)
    lender = s._str(d, "lender", where, t, required=True) or ""
    _check_lei(lender, where, "lender")
    peers_raw = d.get("peers", "market")
    peers: str | tuple[str, ...]
    if isinstance(peers_raw, list):
        if not peers_raw or not all(isinstance(p, str) for p in peers_raw):
            raise SpecError(f"{where}: [lending] peers as a list must name LEIs, got {peers_raw!r}")
        for p in peers_raw:
            _check_lei(p, where, "peers")
        peers = tuple(p.upper() for p in peers_raw if p.upper() != lender.upper())
        if not peers:
            raise SpecError(f"{where}: [lending] peers names only the lender itself")
    elif peers_raw in PEER_RULES:
        peers = str(peers_raw)
    else:
        raise SpecError(
            f'{where}: [lending] peers was {peers_raw!r} but is expected to be "market", '
            '"band" or a list of LEIs'
        )
    band_raw = d.get("band", [0.5, 2.0])
    ok = (
        isinstance(band_raw, list)
        and len(band_raw) == 2
        and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in band_raw)
        and 0 <= band_raw[0] <= band_raw[1]
    )
    if not ok:
        raise SpecError(
            f"{where}: [lending] band must be [low, high] multipliers with 0 <= low <= high, "
            f"got {band_raw!r}"
        )
    years = _int_list(d, "years", where)
    if years is not None and any(y < 2018 for y in years):
        raise SpecError(
            f"{where}: [lending] years must be 2018 or later (the public layout read here), "
            f"got {list(years)}"
        )
    market_by = s._choice(d, "market_by", where, t, MARKET_KINDS, "msa")
    markets = _code_list(d, "markets", where)
    if markets is not None and market_by != "area":
        bad = [m for m in markets if not re.fullmatch(r"\d{5}", m)]
        if bad:
            raise SpecError(
                f"{where}: [lending] markets must be 5-digit codes (derived_msa-md codes, or "
                f'counties with market_by = "county"), got {bad[:3]}'
            )
    if markets is not None and market_by == "area":
        raise SpecError(f'{where}: [lending] markets does not apply with market_by = "area"')
    groups = d.get("black_hispanic_groups")
    if groups is not None and (
        not isinstance(groups, list) or not groups or not all(isinstance(g, str) for g in groups)
    ):
        raise SpecError(
            f"{where}: [lending] black_hispanic_groups must be a list of [population] group "
            f"names, got {groups!r}"
        )
    names_raw = d.get("lender_names", {})
    if not isinstance(names_raw, Mapping) or not all(
        isinstance(v, str) and v.strip() for v in names_raw.values()
    ):
        raise SpecError(
            f'{where}: [lending] lender_names must be a table of LEI = "display name", '
            f"got {names_raw!r}"
        )
    for lei in names_raw:
        _check_lei(str(lei), where, "lender_names")
    return LendingSpec(
        path=tuple(p for p in paths if p is not None),
        lender=lender.upper(),
        lender_name=s._str(d, "lender_name", where, t),
        years=years,
        markets=markets,
        market_by=market_by,
        purposes=_code_list(d, "purposes", where),
        liens=_code_list(d, "liens", where),
        occupancy=_code_list(d, "occupancy", where),
        total_units=_code_list(d, "total_units", where),
        loan_types=_code_list(d, "loan_types", where),
        peers=peers,
        band=(float(band_raw[0]), float(band_raw[1])),
        alpha=s._float(d, "alpha", where, t, 0.05, 0.0, 1.0, open_low=True),
        preapprovals=s._bool(d, "preapprovals", where, t, False),
        tract_source=s._choice(d, "tract_source", where, t, TRACT_SOURCES, "auto"),
        high_minority_share=s._float(d, "high_minority_share", where, t, 0.8, 0.0, 1.0),
        black_hispanic_groups=tuple(groups) if groups is not None else None,
        small_cell=s._float(d, "small_cell", where, t, 5.0, 0.0, None),
        gap_max_applications=s._int_default(d, "gap_max_applications", where, t, 0, minimum=0),
        lender_names=tuple((str(k).upper(), str(v)) for k, v in names_raw.items()),
    )


def _check_lei(value: str, where: str, key: str) -> None:
    if not _LEI_RE.match(value):
        raise SpecError(
            f"{where}: [lending] {key}: {value!r} is not an LEI (20 letters and digits)"
        )


def _list(d: Mapping[str, Any], key: str, where: str, kinds: tuple[type, ...], what: str) -> Any:
    """Return a non-empty list of values of ``kinds`` (booleans refused), or None if absent."""
    value = d.get(key)
    if value is None:
        return None
    if (
        not isinstance(value, list)
        or not value
        or not all(isinstance(v, kinds) and not isinstance(v, bool) for v in value)
    ):
        raise SpecError(f"{where}: [lending] {key} must be a list of {what}, got {value!r}")
    return value


def _int_list(d: Mapping[str, Any], key: str, where: str) -> tuple[int, ...] | None:
    value = _list(d, key, where, (int,), "whole numbers")
    return None if value is None else tuple(value)


def _code_list(d: Mapping[str, Any], key: str, where: str) -> tuple[str, ...] | None:
    """Codes given as numbers or text (``[1, 31]`` or ``["5-24"]``), kept as text."""
    value = _list(d, key, where, (int, str), "codes")
    if value is None:
        return None
    codes = tuple(str(v).strip() for v in value)
    field_name = _CODE_FIELDS.get(key)
    if field_name is not None:
        bad = [c for c in codes if c not in CODES[field_name]]
        if bad:
            raise SpecError(
                f"{where}: [lending] {key} holds {bad} which are not published {field_name} "
                f"codes; allowed are {list(CODES[field_name])}"
            )
    return codes


#: Spec keys of the code filters -> the record field whose published codes they take.
_CODE_FIELDS = {
    "purposes": "loan_purpose",
    "liens": "lien_status",
    "occupancy": "occupancy_type",
    "total_units": "total_units",
    "loan_types": "loan_type",
}
