"""The pipeline's seams: the output folder alone re-draws the pages; no import cycles.

Consistency checks (the tool against itself), not reference tests: the pages drawn by
``coverage-audit report FOLDER`` must be the bytes the run wrote, which shows that the map
and the report depend on the written findings alone.
"""

from __future__ import annotations

import ast
import importlib
from pathlib import Path

import geopandas as gpd
import shapely

import coverage_audit
from coverage_audit.cli import main
from coverage_audit.report import assets

from .conftest import GRID_CRS, grid, spec_text, write_spec


def _rerender_matches(folder, tmp_path, capsys) -> None:
    out = tmp_path / "out"
    assert main(["run", str(folder / "audit.toml"), "--out", str(out), "--quiet"]) == 0
    written = {name: (out / name).read_bytes() for name in ("map.html", "report.html")}
    for name in written:
        (out / name).unlink()
    capsys.readouterr()
    assert main(["report", str(out)]) == 0
    assert "wrote" in capsys.readouterr().out
    for name, data in written.items():
        assert (out / name).read_bytes() == data, name


def test_report_command_redraws_the_pages_byte_for_byte(two_by_two, tmp_path, capsys):
    _rerender_matches(two_by_two, tmp_path, capsys)


def test_report_command_redraws_a_points_footprint_and_study_area(tmp_path, capsys):
    folder = tmp_path / "in"
    folder.mkdir()
    areas = grid(4, 3)
    areas["total"] = [100 + 10 * k for k in range(12)]
    areas["white"] = [60 - 4 * k for k in range(12)]
    areas["black"] = areas["total"] - areas["white"]
    areas.to_file(folder / "areas.gpkg", layer="areas", driver="GPKG")
    sites = gpd.GeoDataFrame(
        {"name": ["north", "south"]},
        geometry=[shapely.Point(500, 2500), shapely.Point(1500, 500)],
        crs=GRID_CRS,
    )
    sites.to_file(folder / "sites.gpkg", driver="GPKG")
    text = spec_text('path = "sites.gpkg"\nradius = 900')
    text += '\n[study_area]\nids = ["01001000001", "01001000002", "01001000003", '
    text += '"01001000005", "01001000006", "01001000007", "01001000009", "01001000010"]\n'
    write_spec(folder / "audit.toml", text)
    _rerender_matches(folder, tmp_path, capsys)


def test_report_command_names_a_folder_without_outputs(tmp_path, capsys):
    assert main(["report", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and "summary.json" in err


def _imports(tree: ast.AST) -> list[ast.Import | ast.ImportFrom]:
    """Every import statement, also inside functions, but not under ``if TYPE_CHECKING:``.

    A cycle through a function-local import is still a cycle (it only fails later, at
    call time); imports for type checkers alone never run.
    """
    out: list[ast.Import | ast.ImportFrom] = []
    for node in ast.iter_child_nodes(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            continue
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            out.append(node)
        out.extend(_imports(node))
    return out


def _import_graph() -> dict[str, set[str]]:
    """Return ``module -> package modules it imports``, from the source text."""
    root = Path(coverage_audit.__file__).parent
    graph: dict[str, set[str]] = {}
    for path in sorted(root.rglob("*.py")):
        parts = path.relative_to(root.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        package = name if path.name == "__init__.py" else name.rpartition(".")[0]
        edges: set[str] = set()
        for node in _imports(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                edges.update(a.name for a in node.names if a.name.startswith("coverage_audit"))
                continue
            if not node.level:
                if (node.module or "").startswith("coverage_audit"):
                    edges.add(str(node.module))
                continue
            base = package.rsplit(".", node.level - 1)[0] if node.level > 1 else package
            target = f"{base}.{node.module}" if node.module else base
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                is_module = (root.parent / Path(*sub.split("."))).with_suffix(".py").exists()
                edges.add(sub if is_module else target)
        graph[name] = edges - {name}
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Return one cycle through each strongly connected part of more than one module."""
    out: list[list[str]] = []
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                out.append([*stack[stack.index(nxt) :], nxt])
            elif nxt not in state:
                visit(nxt)
        stack.pop()
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node)
    return out


def test_every_module_imports_and_the_package_has_no_import_cycle():
    graph = _import_graph()
    for name in graph:
        importlib.import_module(name)
    # The graph is read at all (the contiguity is imported by the statistics stage, which
    # audit.py's orchestrator calls since the stages moved into modules of their own).
    assert "coverage_audit.statistics" in graph["coverage_audit.audit"]
    assert "coverage_audit.weights" in graph["coverage_audit.statistics"]
    assert _cycles(graph) == []


def test_map_script_is_package_data_inlined_verbatim(two_by_two, tmp_path, capsys):
    # Consistency check: the drawing script ships as report/map.js (pyproject's
    # package-data lists report/*.js) and reaches map.html unchanged, once.
    script = (Path(assets.__file__).parent / "map.js").read_text(encoding="utf-8")
    assert assets.MAP_JS == script and "coverageAuditDraw" in script
    out = tmp_path / "out"
    code = main(["run", str(two_by_two / "audit.toml"), "--out", str(out), "--no-report"])
    assert code == 0, capsys.readouterr().err
    page = (out / "map.html").read_text(encoding="utf-8")
    assert page.count(script) == 1
    assert page.count("<script>\n" + script + "\n</script>") == 1
