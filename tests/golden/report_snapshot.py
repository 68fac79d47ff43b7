"""Write or compare masked report.html, manifest inputs and exclusions of every demo scenario.

A consistency check for restructurings that must not change the pages (the tool against
its own earlier output)::

    python tests/golden/report_snapshot.py write  DIR   # before the change
    python tests/golden/report_snapshot.py check  DIR   # after: prints the differences

Run-dependent parts are masked before the comparison: the output folder's absolute path,
ISO times, durations and the package version. The manifest is compared by its list of
inputs (role, file name, rows, digest), exclusions.csv whole.
"""

from __future__ import annotations

import difflib
import json
import re
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from coverage_audit._version import __version__  # noqa: E402
from coverage_audit.cli import DEMO_SCENARIOS, main  # noqa: E402

#: Permutations of every run (as the golden summaries).
PERMUTATIONS = 99


def _mask(text: str, out: Path) -> str:
    text = text.replace(str(out.resolve()), "<OUT>").replace(str(out), "<OUT>")
    text = re.sub(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?(\+00:00|Z)?", "<TIME>", text)
    text = re.sub(r"\d{4}-\d\d-\d\d \d\d:\d\d(:\d\d)?( UTC)?", "<TIME>", text)
    text = re.sub(r"\d+(\.\d+)? ?s\b", "<SECONDS>", text)
    return text.replace(__version__, "<VERSION>")


def snapshot(name: str, out: Path) -> dict[str, str]:
    """Run one scenario with its report; return the masked files."""
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
            "--quiet",
        ]
    )
    assert code == 0, name
    folder = out / name
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    inputs = [
        {k: (Path(v).name if k == "path" else v) for k, v in row.items()}
        for row in manifest.get("inputs", [])
    ]
    return {
        "report.html": _mask((folder / "report.html").read_text(encoding="utf-8"), folder),
        "exclusions.csv": (folder / "exclusions.csv").read_text(encoding="utf-8"),
        "inputs.json": json.dumps(inputs, indent=1, sort_keys=True),
    }


def main_(argv: list[str]) -> int:
    mode, target = argv[0], Path(argv[1])
    target.mkdir(parents=True, exist_ok=True)
    changed = 0
    with tempfile.TemporaryDirectory() as tmp:
        for name in DEMO_SCENARIOS:
            for file, text in snapshot(name, Path(tmp)).items():
                path = target / f"{name}.{file}"
                if mode == "write":
                    path.write_text(text, encoding="utf-8")
                    continue
                before = path.read_text(encoding="utf-8")
                if before != text:
                    changed += 1
                    diff = difflib.unified_diff(
                        before.splitlines(), text.splitlines(), "before", "after", lineterm="", n=1
                    )
                    print(f"--- {name}.{file} differs:\n" + "\n".join(list(diff)[:40]))
                else:
                    print(f"same: {name}.{file}")
    return 1 if changed else 0


if __name__ == "__main__":
    raise SystemExit(main_(sys.argv[1:]))
