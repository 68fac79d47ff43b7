"""Write the golden summary.json and exclusions.csv of every demo scenario.

They are what tests/test_summary_stable.py compares each run with, byte for byte.

Run from the repository root, only when a change to these files is intended::

    python tests/golden/regenerate.py

then look at ``git diff tests/golden`` and commit the files with the change that caused
them, saying why they changed.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from coverage_audit.cli import DEMO_SCENARIOS  # noqa: E402
from tests.test_summary_stable import GOLDEN, demo_outputs  # noqa: E402


def main() -> None:
    """Run every scenario and write ``<scenario>.<file>`` beside this script."""
    with tempfile.TemporaryDirectory() as tmp:
        for name in DEMO_SCENARIOS:
            for file, data in demo_outputs(name, Path(tmp)).items():
                target = GOLDEN / f"{name}.{file}"
                target.write_bytes(data)
                print(f"wrote {target} ({len(data)} bytes)")


if __name__ == "__main__":
    main()
