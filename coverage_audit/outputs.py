"""Outputs: summary.json, areas.csv, areas.gpkg, exclusions.csv, manifest.json; atomic.

Takes an :class:`~coverage_audit.audit.AuditResult` and writes the output contract of
DESIGN.md into a folder. The folder is consistent as a whole:

* :func:`claim_output_dir` checks, before any analysis, that the folder can be created and
  written, and takes a lock (a file ``.NAME.lock`` beside the folder) so that a second run
  into the same folder is refused while the first is running;
* every output is written into a fresh sibling folder (``.NAME.new-PID``), and
  :meth:`OutputClaim.commit` swaps that folder in at the end, with Ctrl-C and SIGTERM held
  back for the moment of the swap. An interrupted run leaves the earlier outputs exactly
  as they were; a finished run leaves only its own outputs (no map.html of an earlier run
  beside a summary written with ``map = false``).

Single files are written with :func:`atomic_path` (a temporary name in the same folder,
moved into place with :func:`os.replace`); the map and the report use it too.
``summary.json`` holds no times or absolute paths, so the same spec gives the same bytes.
"""

from __future__ import annotations

import contextlib
import datetime
import errno
import hashlib
import json
import os
import shutil
import signal
import socket
import tempfile
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio

from ._util import to_jsonable
from .errors import InputError


@contextlib.contextmanager
def atomic_path(target: Path, suffix: str = "") -> Iterator[Path]:
    """Yield a temporary path beside ``target``; move it over ``target`` on success.

    On any failure or interruption (Ctrl-C, SIGTERM) the temporary file is removed and
    ``target`` is left as it was.
    """
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp_path: Path | None = None
    try:
        fd, tmp = tempfile.mkstemp(
            prefix=f".{target.name}.", suffix=suffix or target.suffix, dir=target.parent
        )
        tmp_path = Path(tmp)
        os.close(fd)
        # mkstemp makes the file private (0600); give outputs the usual permissions.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp_path, 0o666 & ~umask)
        yield tmp_path
        os.replace(tmp_path, target)
    finally:
        if tmp_path is not None and tmp_path.exists():
            tmp_path.unlink()


def write_text(target: Path, text: str) -> None:
    """Write text (UTF-8, Unix newlines) atomically."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")


def write_bytes(target: Path, payload: bytes) -> int:
    """Write bytes atomically; return how many were written."""
    with atomic_path(target) as tmp:
        tmp.write_bytes(payload)
    return len(payload)


def json_text(data: Any) -> str:
    """Deterministic JSON: insertion order kept, NaN refused, two-space indent."""
    return json.dumps(to_jsonable(data), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_json(target: Path, data: Any) -> None:
    """Write JSON atomically."""
    write_text(target, json_text(data))


#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV
#: Injection": equals, plus, minus, at, tab and carriage return).
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def neutralise_formula(value: Any) -> Any:
    """Prefix a text cell a spreadsheet would execute with a single quote (OWASP).

    Only strings change: ``"=HYPERLINK(...)"`` becomes ``"'=HYPERLINK(...)"``; numbers,
    missing values and other text are returned unchanged.
    """
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def neutralise_text_columns(frame: pd.DataFrame, keep: tuple[str, ...] = ()) -> pd.DataFrame:
    """Return ``frame`` with formula-like text neutralised in every text column but ``keep``.

    ``keep`` names the id columns, which are written exactly as given so that they still
    join with the inputs.
    """
    out = frame.copy()
    for column in out.columns:
        if column in keep:
            continue
        series = out[column]
        if series.dtype == object or pd.api.types.is_string_dtype(series.dtype):
            out[column] = series.map(neutralise_formula).astype(series.dtype)
    return out


def write_csv(
    target: Path, frame: pd.DataFrame, *, keep_raw: tuple[str, ...] | None = None
) -> None:
    """Write a CSV atomically (float columns with full precision, no index).

    With ``keep_raw`` (the id columns), text cells of every other column that a
    spreadsheet would execute as a formula are neutralised (see
    :func:`neutralise_formula`).
    """
    if keep_raw is not None:
        frame = neutralise_text_columns(frame, keep_raw)
    with atomic_path(target) as tmp:
        frame.to_csv(tmp, index=False, lineterminator="\n")


def write_gpkg(target: Path, frame: gpd.GeoDataFrame, layer: str) -> None:
    """Write a one-layer GeoPackage atomically."""
    with atomic_path(target, suffix=".gpkg") as tmp:
        tmp.unlink()  # GDAL wants to create the file itself
        pyogrio.write_dataframe(frame, tmp, layer=layer, driver="GPKG")


def areas_for_output(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Per-area table for CSV/GPKG: booleans and missing values in portable form."""
    out = frame.copy()
    for column in out.columns:
        if column == out.geometry.name:
            continue
        series = out[column]
        if pd.api.types.is_bool_dtype(series.dtype):
            out[column] = series.astype(bool)
        elif series.dtype == object:
            out[column] = series.map(
                lambda v: None if v is None or (isinstance(v, float) and np.isnan(v)) else v
            )
    return out


def prepare_output_dir(out_dir: Path) -> Path:
    """Create ``out_dir`` (and parents); refuse a path that is a file."""
    out_dir = Path(out_dir)
    try:
        if out_dir.exists() and not out_dir.is_dir():
            raise InputError(f"output path '{out_dir}' is a file; name a folder")
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(folder_problem(out_dir, exc)) from None
    return out_dir


def write_all(
    out_dir: Path,
    *,
    summary: dict[str, Any],
    areas: gpd.GeoDataFrame,
    exclusions: pd.DataFrame,
    manifest_fn: Callable[[], dict[str, Any]] | None = None,
    id_columns: tuple[str, ...] = (),
) -> dict[str, Path]:
    """Write the data outputs; the manifest last, so it can list what was written.

    With ``manifest_fn=None`` the manifest is left to the caller, who writes it once
    everything else (map, report) is written. Text cells of areas.csv and exclusions.csv
    that a spreadsheet would run as formulas are neutralised, except in ``id_columns``
    (and the ``id`` column of exclusions.csv), which are written exactly as given.
    """
    out_dir = prepare_output_dir(out_dir)
    paths = {
        "summary": out_dir / "summary.json",
        "areas_csv": out_dir / "areas.csv",
        "areas_gpkg": out_dir / "areas.gpkg",
        "exclusions": out_dir / "exclusions.csv",
        "manifest": out_dir / "manifest.json",
    }
    write_json(paths["summary"], summary)
    table = areas_for_output(areas)
    write_csv(
        paths["areas_csv"],
        pd.DataFrame(table.drop(columns=table.geometry.name)),
        keep_raw=tuple(id_columns),
    )
    write_gpkg(paths["areas_gpkg"], table, layer="areas")
    write_csv(paths["exclusions"], exclusions, keep_raw=("id",))
    if manifest_fn is not None:
        write_json(paths["manifest"], manifest_fn())
    return paths


# --------------------------------------------------------------------------- the folder

#: Files the tool writes into an output folder; a folder holding only these (and hidden
#: temporary files) is one an earlier run wrote, and may be replaced.
OUTPUT_NAMES = frozenset(
    {
        "summary.json",
        "areas.csv",
        "areas.gpkg",
        "exclusions.csv",
        "manifest.json",
        "map.html",
        "report.html",
        "footprint.gpkg",
        "moran_lag.csv",
    }
)
#: Longest folder name used as is in the names of the lock and staging folders.
_LONG_NAME = 200


def _sibling(out_dir: Path, tag: str) -> Path:
    """Return a hidden path beside ``out_dir`` that belongs to it (``.NAME.TAG``)."""
    name = out_dir.name
    if len(name.encode("utf-8")) > _LONG_NAME:
        name = hashlib.sha256(name.encode("utf-8")).hexdigest()[:16]
    return out_dir.parent / f".{name}.{tag}"


def folder_problem(
    path: Path, exc: OSError, what: str = "output folder", option: str = "--out"
) -> str:
    """Return one sentence on why a folder cannot be used, and what to do."""
    code = exc.errno
    if code == errno.ENAMETOOLONG:
        return (
            f"{what} '{path}': a name is too long for the file system "
            f"({len(path.name.encode('utf-8'))} bytes in '{path.name[:40]}...'); choose a "
            f"shorter {option}"
        )
    if code in (errno.EACCES, errno.EPERM, errno.EROFS):
        return (
            f"{what} '{path}' cannot be written ({exc.strerror}); choose a folder you may "
            f"write to with {option}"
        )
    if code in (errno.ENOTDIR, errno.EEXIST):
        blocker = next((p for p in [path, *path.parents] if p.exists() and not p.is_dir()), None)
        at = f": '{blocker}' is a file" if blocker is not None else ""
        return f"{what} '{path}' cannot be created below a file{at}; choose another {option}"
    if code == errno.ENOSPC:
        return f"{what} '{path}': no space left on the device; free some or choose another"
    return f"{what} '{path}' cannot be used ({exc.strerror or exc}); choose another {option}"


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


@dataclass
class OutputClaim:
    """An output folder held by this run: checked, locked, written beside, swapped in.

    Made by :func:`claim_output_dir`; :meth:`staging` gives the fresh folder to write
    into, :meth:`commit` swaps it in, :meth:`release` removes what is left and unlocks.
    """

    target: Path
    lock: Path
    created: bool = False
    _staging: Path | None = None
    committed: bool = False

    def staging(self) -> Path:
        """Return the fresh sibling folder that the outputs are written into."""
        if self._staging is None:
            path = _sibling(self.target, f"new-{os.getpid()}")
            if path.exists():
                shutil.rmtree(path)
            try:
                path.mkdir()
            except OSError as exc:
                raise InputError(
                    f"output folder '{self.target}': the outputs are written beside it and "
                    "swapped in at the end, but "
                    + folder_problem(self.target.parent, exc, what="its parent folder")
                ) from None
            self._staging = path
        return self._staging

    def commit(self) -> None:
        """Swap the written folder in place of the target, signals held back meanwhile."""
        staging = self.staging()
        if self.target.is_dir():
            foreign = _foreign_entries(self.target)
            if foreign:  # put there while this run was working: never moved or removed
                raise InputError(
                    f"output folder '{self.target}' now holds files that coverage-audit did "
                    f"not write ({', '.join(foreign[:3])}); nothing was written. Move them "
                    "away or choose another --out, and rerun"
                )
        with deferred_signals():
            old: Path | None = None
            if self.target.exists() and any(self.target.iterdir()):
                old = _sibling(self.target, f"old-{os.getpid()}")
                if old.exists():
                    shutil.rmtree(old)
                os.replace(self.target, old)
            # An empty target folder (made by the claim) is replaced in one step.
            try:
                os.replace(staging, self.target)
            except OSError:
                if old is not None:  # put the earlier outputs back
                    os.replace(old, self.target)
                raise
            self._staging = None
            self.committed = True
            if old is not None:
                shutil.rmtree(old, ignore_errors=True)

    def release(self) -> None:
        """Remove the staging folder (when not committed) and the lock; idempotent."""
        with deferred_signals():
            if self._staging is not None:
                shutil.rmtree(self._staging, ignore_errors=True)
                self._staging = None
            if self.created and not self.committed:
                with contextlib.suppress(OSError):
                    self.target.rmdir()  # only when still empty
            with contextlib.suppress(FileNotFoundError):
                if _lock_owner(self.lock).get("pid") == os.getpid():
                    self.lock.unlink()

    def __enter__(self) -> OutputClaim:
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()


def _lock_owner(lock: Path) -> dict[str, Any]:
    try:
        data = json.loads(lock.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) else {}


def _take_lock(lock: Path, target: Path) -> None:
    info = {
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "started": datetime.datetime.now().isoformat(timespec="seconds"),
    }
    for _ in range(3):
        try:
            fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            owner = _lock_owner(lock)
            pid = owner.get("pid")
            same_host = owner.get("host") == info["host"]
            if isinstance(pid, int) and same_host and pid != os.getpid() and not _pid_alive(pid):
                lock.unlink(missing_ok=True)  # left by a run that was killed
                continue
            if not owner:
                # Being written by its owner this very moment, or unreadable: look again.
                time.sleep(0.05)
                owner = _lock_owner(lock)
                if not owner:
                    lock.unlink(missing_ok=True)
                    continue
            raise InputError(
                f"output folder '{target}' is in use by another coverage-audit run (process "
                f"{owner.get('pid')} on {owner.get('host')}, started {owner.get('started')}); "
                f"wait for it to finish or choose another --out. If no run is active, delete "
                f"the lock file '{lock}'"
            ) from None
        except OSError as exc:
            raise InputError(folder_problem(target, exc)) from None
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(json.dumps(info) + "\n")
        return
    raise InputError(f"output folder '{target}': could not take the lock '{lock}'; try again")


def _foreign_entries(folder: Path) -> list[str]:
    """Names in ``folder`` that no run of this tool wrote (empty when it holds outputs)."""
    manifest = folder / "manifest.json"
    if manifest.is_file():
        with contextlib.suppress(OSError, ValueError):
            if json.loads(manifest.read_text(encoding="utf-8")).get("tool") == "coverage_audit":
                return []
    return sorted(
        p.name
        for p in folder.iterdir()
        if p.name not in OUTPUT_NAMES
        and not any(p.name.startswith(f".{n}.") for n in OUTPUT_NAMES)
        and not p.name.startswith((".map-", ".report.html."))
    )


def claim_output_dir(out_dir: str | Path) -> OutputClaim:
    """Check that ``out_dir`` can be created and written, and lock it for this run.

    Called before any analysis, so that a folder below a file, one that may not be
    written, or a name too long for the file system fails at once, not after the whole
    computation.

    Raises
    ------
    InputError
        When the folder cannot be used, holds files this tool did not write (the whole
        folder is replaced at the end), or another run is writing into it.
    """
    # Absolute, so that "." or "out/.." still have a name and a parent to write beside.
    target = Path(os.path.abspath(out_dir))
    created = False
    try:
        if target.exists() and not target.is_dir():
            raise InputError(f"output path '{target}' is a file; name a folder")
        if not target.exists():
            target.mkdir(parents=True)
            created = True
        foreign = _foreign_entries(target)
    except OSError as exc:
        raise InputError(folder_problem(target, exc)) from None
    if foreign:
        if created:
            target.rmdir()
        raise InputError(
            f"output folder '{target}' holds files that coverage-audit did not write "
            f"({', '.join(foreign[:3])}{', ...' if len(foreign) > 3 else ''}); the outputs "
            "replace the whole folder, so choose a new or empty folder with --out"
        )
    lock = _sibling(target, "lock")
    try:
        _take_lock(lock, target)
    except InputError:
        if created:
            with contextlib.suppress(OSError):
                target.rmdir()
        raise
    claim = OutputClaim(target=target, lock=lock, created=created)
    try:
        # Leftovers of runs that were killed outright (no lock is held for them now).
        _remove_leftovers(target)
        probe = claim.staging() / ".write-check"
        probe.write_bytes(b"")
        probe.unlink()
    except OSError as exc:
        claim.release()
        raise InputError(folder_problem(target, exc)) from None
    except BaseException:
        claim.release()
        raise
    return claim


def _remove_leftovers(target: Path) -> None:
    stem = _sibling(target, "").name
    for entry in target.parent.iterdir():
        name = entry.name
        if name.startswith(stem) and (name[len(stem) :].startswith(("new-", "old-"))):
            shutil.rmtree(entry, ignore_errors=True)


@contextlib.contextmanager
def deferred_signals() -> Iterator[None]:
    """Hold back SIGINT and SIGTERM for the enclosed steps; deliver them afterwards.

    Used around the few renames that swap an output folder in, so that an interruption
    lands before or after the swap, never in the middle. Outside the main thread (where
    handlers cannot be set) the steps simply run.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    received: list[int] = []

    def hold(signum: int, frame: Any) -> None:
        received.append(signum)

    kinds = [signal.SIGINT] + ([signal.SIGTERM] if hasattr(signal, "SIGTERM") else [])
    previous = {kind: signal.signal(kind, hold) for kind in kinds}
    try:
        yield
    finally:
        for kind, handler in previous.items():
            signal.signal(kind, handler if handler is not None else signal.SIG_DFL)
        if received:
            signal.raise_signal(received[0])
