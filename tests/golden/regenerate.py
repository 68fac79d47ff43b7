"""Write the golden summary.json of every demo scenario (tests/test_summary_stable.py).

Run from the repository root, only when a change to summary.json is intended::

    python tests/golden/regenerate.py

then look at ``git diff tests/golden`` and commit the files with the change that caused
them, saying why the summary changed.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from coverage_audit.cli import DEMO_SCENARIOS  # noqa: E402
from tests.test_summary_stable import GOLDEN, demo_summary  # noqa: E402


def main() -> None:
    """Run every scenario and write ``<scenario>.summary.json`` beside this script."""
    with tempfile.TemporaryDirectory() as tmp:
        for name in DEMO_SCENARIOS:
            data = demo_summary(name, Path(tmp))
            (GOLDEN / f"{name}.summary.json").write_bytes(data)
            print(f"wrote {GOLDEN / f'{name}.summary.json'} ({len(data)} bytes)")


if __name__ == "__main__":
    main()
