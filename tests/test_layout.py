"""The statistics layout: one family per module, old import paths kept, classes in errors.py.

Consistency checks of the package's structure (the code against itself), not reference
tests: common practice, no source.
"""

from __future__ import annotations

import ast
import importlib
from pathlib import Path

import pytest

import coverage_audit
from coverage_audit import errors

PACKAGE = Path(coverage_audit.__file__).parent

#: Longest module, in lines, of the statistics and spec modules (DEVELOPERS.md: "No module
#: over about 800 lines").
MAX_LINES = 800

#: Former homes of the statistics and the families that now hold their names.
MOVED = {
    "explain": (
        "stats.models",
        "stats.model_design",
        "stats.residual_moran",
        "stats.rules",
        "stats.sweeps",
        "errors",
    ),
    "clustering": ("stats.clustering", "stats.moran", "stats.join_counts", "stats.lisa"),
    "segregation": (
        "stats.segregation",
        "stats.segregation_indices",
        "stats.coverage_gap",
        "stats._validate",
    ),
    "compare": ("stats.compare_footprints", "stats.change", "stats.peers", "stats.four_fifths"),
}


def _layout_modules() -> list[Path]:
    return sorted([*PACKAGE.glob("stats/*.py"), *PACKAGE.glob("spec*.py")])


@pytest.mark.parametrize("path", _layout_modules(), ids=lambda p: p.name)
def test_statistics_and_spec_modules_stay_short(path):
    assert len(path.read_text(encoding="utf-8").splitlines()) <= MAX_LINES


@pytest.mark.parametrize("old", sorted(MOVED))
def test_old_module_names_are_the_new_objects(old):
    module = importlib.import_module(f"coverage_audit.{old}")
    homes = [importlib.import_module(f"coverage_audit.{m}") for m in MOVED[old]]
    names = getattr(module, "__all__", None)
    assert names, f"coverage_audit.{old} names what it re-exports"
    for name in names:
        obj = getattr(module, name)
        assert any(getattr(home, name, None) is obj for home in homes), name


def test_one_weights_reader_and_one_moran():
    # The residual Moran of the models and the spatial statistics read weights with the
    # same function, and Moran's I has one implementation.
    from coverage_audit.stats import _spatial, moran, residual_moran

    assert residual_moran.weights_parts is _spatial.weights_parts
    assert residual_moran.moran_moments is moran.moran_moments


def test_warning_and_error_classes_live_in_errors():
    declared = {
        name
        for name, obj in vars(errors).items()
        if isinstance(obj, type) and obj.__module__ == errors.__name__
    }
    elsewhere = []
    for path in PACKAGE.rglob("*.py"):
        if path.name == "errors.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ClassDef) and node.name.endswith(("Warning", "Error")):
                elsewhere.append(f"{path.relative_to(PACKAGE)}:{node.name}")
    assert elsewhere == []
    assert {"SmallSampleWarning", "DroppedRowsWarning"} <= declared
