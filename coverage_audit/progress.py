"""Progress reporting for long steps: a tiny protocol the pipeline calls, silent by default.

The pipeline calls ``progress.stage(name)`` around each step; the CLI passes a reporter
that shows the steps on a terminal (and nothing when quiet or not a terminal); notebooks
get :class:`SilentProgress`.
"""

from __future__ import annotations

import contextlib
import sys
import time
from collections.abc import Iterator
from typing import IO


class SilentProgress:
    """Reports nothing."""

    @contextlib.contextmanager
    def stage(self, name: str) -> Iterator[None]:
        """Run one step."""
        yield


class TerminalProgress(SilentProgress):
    """Shows each step with a spinner and its duration on a terminal (rich)."""

    def __init__(self, stream: IO[str] | None = None) -> None:
        from rich.console import Console

        self.console = Console(file=stream or sys.stderr)
        self.started = time.perf_counter()

    @contextlib.contextmanager
    def stage(self, name: str) -> Iterator[None]:
        """Show a spinner while the step runs, then its duration."""
        t0 = time.perf_counter()
        with self.console.status(f"{name} ..."):
            yield
        self.console.print(f"[dim]  {name}: {time.perf_counter() - t0:.1f} s[/dim]")


def progress_for(stream: IO[str], quiet: bool) -> SilentProgress:
    """Terminal progress when ``stream`` is a terminal and not quiet, else silent."""
    if quiet or not getattr(stream, "isatty", lambda: False)():
        return SilentProgress()
    return TerminalProgress(stream)
