"""Checks that inputs are what the figures come from, and that they can be computed.

Small, format-independent helpers used by the readers (:mod:`coverage_audit.inputs`,
:mod:`coverage_audit.footprint`): the SHA-256 of the bytes actually read, geometries with
coordinates that are not finite numbers, counts whose sums overflow, features whose
geometry cannot be built, and ids that went through a spreadsheet as numbers.
"""

from __future__ import annotations

import hashlib
import re
import warnings
from collections.abc import Callable, Mapping
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import TypeVar

import numpy as np
import pandas as pd
import pyogrio
import shapely

from ..errors import IdWarning, InputError

#: Files of a shapefile set read with the .shp (their bytes are part of its digest).
SHAPEFILE_PARTS = (".shx", ".dbf", ".prj", ".cpg")
_T = TypeVar("_T")


def _digest_files(path: Path) -> list[Path]:
    files = [path]
    if path.suffix.lower() == ".shp":
        for part in SHAPEFILE_PARTS:
            for candidate in (path.with_suffix(part), path.with_suffix(part.upper())):
                if candidate.is_file():
                    files.append(candidate)
                    break
    return files


def sha256_file(path: Path) -> str:
    """Return the SHA-256 hex digest of a file (of every file of a shapefile set)."""
    digest = hashlib.sha256()
    for file in _digest_files(Path(path)):
        with open(file, "rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
    return digest.hexdigest()


def read_hashed(path: Path, read: Callable[[], _T], *, role: str) -> tuple[_T, str]:
    """Read a file with ``read`` and return the result with the SHA-256 of the bytes read.

    The file is hashed before and after it is read: the same digest both times means the
    bytes read are the bytes hashed, so the manifest's digest is that of the data the
    figures come from. A file that changed meanwhile (still being written or copied) is
    refused.

    Raises
    ------
    InputError
        When the file changed while it was being read.
    """
    before = sha256_file(path) if Path(path).is_file() else None
    value = read()
    after = sha256_file(path) if before is not None else None
    if before != after:
        raise InputError(
            f"{role} file '{path}' changed while it was being read (its SHA-256 before and "
            "after reading differ); wait until it is no longer being written, then rerun"
        )
    return value, after or ""


def read_hashed_later(
    path: Path, read: Callable[[], _T], *, role: str
) -> tuple[_T, Callable[[], str]]:
    """:func:`read_hashed`, the second digest taken on another thread while the caller goes on.

    Returns the value read and a function that waits for the second digest, compares it
    with the first and returns it (raising :class:`InputError` as :func:`read_hashed`
    does when they differ). The second hash still starts after the read has finished, so
    the guarantee is the same; the caller only does not wait for it.
    """
    if not Path(path).is_file():
        value = read()
        return value, lambda: ""
    before = sha256_file(path)
    value = read()
    pool = ThreadPoolExecutor(max_workers=1)
    after = pool.submit(sha256_file, path)
    pool.shutdown(wait=False)

    def finish() -> str:
        digest = after.result()
        if digest != before:
            raise InputError(
                f"{role} file '{path}' changed while it was being read (its SHA-256 before "
                "and after reading differ); wait until it is no longer being written, then rerun"
            )
        return digest

    return value, finish


def bad_feature(path: Path, layer: str | None, id_column: str | None = None) -> str | None:
    """Name the first feature whose geometry cannot be built (e.g. an unclosed ring).

    The feature is named by its 1-based number and, when the layer has it, its value in
    ``id_column`` (else a field called ``id`` or ``geoid``, else its feature id).
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            meta, fids, wkb, names = pyogrio.raw.read(
                path, layer=layer, read_geometry=True, return_fids=True
            )
            field_names = [str(name) for name in meta["fields"]]
    except Exception:
        return None
    if id_column in field_names:
        ident: int | None = field_names.index(str(id_column))
    else:
        ident = next((k for k, n in enumerate(field_names) if n.lower() in ("id", "geoid")), None)
    for k, blob in enumerate(wkb):
        if blob is None:
            continue
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                shapely.from_wkb(blob)
        except Exception:
            label = f"feature {k + 1}"
            if ident is not None:
                label += f" ({field_names[ident]} {names[ident][k]!r})"
            elif fids is not None and len(fids) > k:
                label += f" (fid {fids[k]})"
            return label
    return None


_FLOAT_ID_RE = re.compile(r"^\d+\.0+$")


def hint_float_ids(series: pd.Series, where: str) -> None:
    """Warn when text ids look like numbers written out as decimals ("01001000000.0")."""
    present = series.dropna()
    if len(present) == 0:
        return
    if not np.char.find(present.to_numpy().astype(str), ".").max() >= 0:
        return  # no id has a decimal point (looked at in one vectorised pass)
    looks = present.map(lambda v: bool(_FLOAT_ID_RE.match(str(v))))
    if looks.mean() >= 0.5:
        example = present[looks].iloc[0]
        warnings.warn(
            f"{where}: ids such as {example!r} end in a decimal part: the column was read as "
            "numbers somewhere (a spreadsheet or a script) and written back as decimals, so "
            "they will not match text ids; save the column as text (and set id_width, 11 for "
            "tracts or 12 for block groups, if leading zeros were lost)",
            IdWarning,
            stacklevel=3,
        )


def finite_coordinates(geoms: np.ndarray) -> np.ndarray:
    """Return True where every coordinate of a geometry is a finite number (missing: True).

    ``make_valid`` and the overlay fail on NaN or infinite coordinates, so such rows are
    left out (and listed) before any repair.
    """
    return finite_coordinates_with(geoms)[0]


def finite_coordinates_with(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`finite_coordinates`, with the coordinates read and the geometry of each.

    Returns the mask, the (x, y) coordinates of every geometry in order and each
    coordinate's geometry position, so that a caller can reuse them (the projection).
    """
    geoms = np.asarray(geoms, dtype=object)
    ok = np.ones(geoms.size, dtype=bool)
    coords, index = shapely.get_coordinates(geoms, include_z=False, return_index=True)
    if coords.size:
        bad = ~np.isfinite(coords).all(axis=1)
        ok[np.unique(index[bad])] = False
    return ok, coords, index


def check_sums(frame: pd.DataFrame, sources: Mapping[str, str], where: str) -> None:
    """Refuse counts whose sum is not a finite number (each row finite, the sum overflowed).

    Parameters
    ----------
    frame : DataFrame
        The analysed counts.
    sources : mapping
        Column of ``frame`` -> the input column it comes from (named in the message);
        columns absent from ``frame`` are skipped.
    where : str
        The file, for the message.

    Raises
    ------
    InputError
        Naming the input column, before anything is computed or written.
    """
    for column, source in sources.items():
        if column not in frame.columns:
            continue
        values = frame[column].to_numpy(dtype=float)
        with np.errstate(over="ignore", invalid="ignore"):
            total = float(np.sum(values))
        if not np.isfinite(total):
            raise InputError(
                f"{where} column {source!r}: the counts add up to more than the largest "
                f"number a computer can hold (the largest value is {np.max(values):g}); "
                "counts of people, households or loans cannot be this large: check the "
                "column and its units"
            )
