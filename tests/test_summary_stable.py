"""summary.json of every demo scenario stays the same bytes (the restructuring's safety net).

A consistency check (the tool against its own earlier output), not a reference test: each
demo scenario is run through the command line (``coverage-audit demo --scenario NAME``)
and the summary.json it writes is compared byte for byte with the golden file under
``tests/golden/``. summary.json holds no times, versions or absolute paths (run-dependent
values go to manifest.json; DESIGN.md's output contract), so the whole file is compared,
no key left out. When a change to summary.json is intended, regenerate the golden files
with ``python tests/golden/regenerate.py`` and commit them with the change, saying why.

The scenarios run with 99 permutations (``--permutations 99``) rather than the demo's 999:
the smallest count whose p-values can still fall under 0.05 (1/100), so the significant
clusters and gaps still reach the summary while the eight audits take a few seconds.
"""

from __future__ import annotations

import difflib
import sys
from pathlib import Path

import pytest

from coverage_audit.cli import DEMO_SCENARIOS, main

GOLDEN = Path(__file__).resolve().parent / "golden"
#: Permutations of every golden run (see the module docstring).
PERMUTATIONS = 99


def demo_summary(name: str, out: Path) -> bytes:
    """Run one demo scenario through the CLI into ``out``; return its summary.json bytes."""
    code = main(
        [
            "demo",
            "--scenario",
            name,
            "--out",
            str(out),
            "--permutations",
            str(PERMUTATIONS),
            "--no-map",
            "--no-report",
            "--quiet",
        ]
    )
    assert code == 0, f"demo scenario {name} failed"
    return (out / name / "summary.json").read_bytes()


@pytest.mark.parametrize("name", DEMO_SCENARIOS)
def test_summary_json_is_byte_identical_to_the_golden_file(name, tmp_path, capsys):
    written = demo_summary(name, tmp_path)
    capsys.readouterr()
    golden = (GOLDEN / f"{name}.summary.json").read_bytes()
    if written != golden:
        diff = difflib.unified_diff(
            golden.decode("utf-8").splitlines(),
            written.decode("utf-8").splitlines(),
            "golden",
            "written",
            lineterm="",
            n=2,
        )
        shown = "\n".join(list(diff)[:80])
        pytest.fail(
            f"summary.json of demo scenario {name} changed (if intended, run "
            f"'{sys.executable} tests/golden/regenerate.py' and commit the files):\n{shown}"
        )
