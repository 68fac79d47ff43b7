"""summary.json of every demo scenario stays the same bytes (the restructuring's safety net).

A consistency check (the tool against its own earlier output), not a reference test: each
demo scenario is run through the command line (``coverage-audit demo --scenario NAME``)
and the summary.json it writes is compared byte for byte with the golden file under
``tests/golden/``. summary.json holds no times, versions or absolute paths (run-dependent
values go to manifest.json; DESIGN.md's output contract), so the whole file is compared,
no key left out. exclusions.csv (source names, rows, ids and reasons, in stage order) is
compared the same way, so that the order in which the stages' left-out rows are gathered
is kept too. When a change to these files is intended, regenerate the golden files with
``python tests/golden/regenerate.py`` and commit them with the change, saying why.

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
#: The files of each run compared with their golden copies (``<scenario>.<file>``).
COMPARED = ("summary.json", "exclusions.csv")


def demo_outputs(name: str, out: Path) -> dict[str, bytes]:
    """Run one demo scenario through the CLI into ``out``; return the compared files."""
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
    return {file: (out / name / file).read_bytes() for file in COMPARED}


@pytest.mark.parametrize("name", DEMO_SCENARIOS)
def test_summary_json_is_byte_identical_to_the_golden_file(name, tmp_path, capsys):
    outputs = demo_outputs(name, tmp_path)
    capsys.readouterr()
    for file, written in outputs.items():
        golden = (GOLDEN / f"{name}.{file}").read_bytes()
        if written == golden:
            continue
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
            f"{file} of demo scenario {name} changed (if intended, run "
            f"'{sys.executable} tests/golden/regenerate.py' and commit the files):\n{shown}"
        )
