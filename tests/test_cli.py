"""CLI and outputs: clear errors without tracebacks, the output contract, determinism."""

from __future__ import annotations

import json

import geopandas as gpd
import pandas as pd
import pytest
import shapely

from coverage_audit.cli import main
from coverage_audit.outputs import atomic_path, write_text

from .conftest import GRID_CRS, digest, grid, write_spec

CONTRACT_SUMMARY_KEYS = {"schema_version", "areas", "coverage"}
CONTRACT_GROUP_KEYS = {
    "population",
    "covered_population",
    "rate",
    "served_area_rate",
    "ratio",
    "difference",
    "below_four_fifths",
}


def _run(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_run_writes_the_output_contract(two_by_two, tmp_path, capsys):
    out = tmp_path / "out"
    code, stdout, err = _run(
        ["run", two_by_two / "audit.toml", "--out", out, "--no-map", "--no-report"], capsys
    )
    assert code == 0, err
    for name in ("summary.json", "areas.csv", "areas.gpkg", "exclusions.csv", "manifest.json"):
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    assert CONTRACT_SUMMARY_KEYS <= set(summary)
    assert summary["schema_version"] == 1
    assert summary["areas"] == {**summary["areas"], "input": 4, "analysed": 4, "excluded": 0}
    cov = summary["coverage"]
    assert {"served_threshold", "reference_group", "groups"} <= set(cov)
    for g in ("white", "black", "minority"):
        assert CONTRACT_GROUP_KEYS <= set(cov["groups"][g])
    areas = pd.read_csv(out / "areas.csv", dtype={"geoid": str})
    assert {
        "geoid",
        "covered_fraction",
        "served",
        "white",
        "black",
        "minority",
        "minority_share",
    } <= set(areas.columns)
    assert areas["geoid"].iloc[0] == "01001000001"
    gpkg = gpd.read_file(out / "areas.gpkg")
    assert len(gpkg) == 4 and gpkg.crs is not None
    exclusions = pd.read_csv(out / "exclusions.csv")
    assert list(exclusions.columns) == ["source", "row", "id", "reason"]
    manifest = json.loads((out / "manifest.json").read_text())
    for key in (
        "version",
        "spec",
        "inputs",
        "analysis_crs",
        "seed",
        "libraries",
        "started",
        "finished",
    ):
        assert key in manifest
    assert all(len(r["sha256"]) == 64 for r in manifest["inputs"])
    assert "white" in stdout and "wrote" in stdout


def test_summary_is_byte_identical_on_rerun(two_by_two, tmp_path, capsys):
    a, b = tmp_path / "a", tmp_path / "b"
    for out in (a, b):
        code, _, err = _run(
            ["run", two_by_two / "audit.toml", "--out", out, "--quiet", "--no-map", "--no-report"],
            capsys,
        )
        assert code == 0, err
    assert (a / "summary.json").read_bytes() == (b / "summary.json").read_bytes()
    assert (a / "areas.csv").read_bytes() == (b / "areas.csv").read_bytes()


@pytest.mark.parametrize(
    ("setup", "expected"),
    [
        ("missing_spec", "spec file .* was not found"),
        ("unknown_key", 'unknown key "colour"'),
        ("missing_areas", "areas file .* was not found; check the path"),
        ("no_crs_footprint", "footprint 'footprint' file .* has no coordinate reference system"),
        ("bad_column", "has no column 'blk' named in \\[population\\]"),
    ],
)
def test_bad_input_gives_one_clear_message_and_nonzero_exit(
    two_by_two, tmp_path, capsys, setup, expected
):
    import re

    spec = two_by_two / "audit.toml"
    text = spec.read_text()
    if setup == "missing_spec":
        spec = tmp_path / "nope.toml"
    elif setup == "unknown_key":
        spec = write_spec(tmp_path / "s.toml", 'colour = "red"\n' + text)
    elif setup == "missing_areas":
        spec = write_spec(
            two_by_two / "s.toml", text.replace('path = "areas.gpkg"', 'path = "gone.gpkg"')
        )
    elif setup == "no_crs_footprint":
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1, 1)]).to_file(two_by_two / "nocrs.shp")
        spec = write_spec(
            two_by_two / "s.toml", text.replace('path = "zone.gpkg"', 'path = "nocrs.shp"')
        )
    elif setup == "bad_column":
        spec = write_spec(two_by_two / "s.toml", text.replace('black = "black"', 'black = "blk"'))
    before = {p.name: digest(p) for p in two_by_two.iterdir() if p.is_file() and p.name != "s.toml"}
    code, stdout, err = _run(["run", spec, "--out", tmp_path / "out", "--quiet"], capsys)
    assert code == 2
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if ln.startswith("error:")]
    assert len(lines) == 1 and re.search(expected, lines[0]), err
    after = {p.name: digest(p) for p in two_by_two.iterdir() if p.is_file() and p.name in before}
    assert before == after  # inputs untouched
    assert not (tmp_path / "out" / "summary.json").exists()


def test_help_explains_every_option(capsys):
    for command in ("run", "demo", "check"):
        with pytest.raises(SystemExit) as exc:
            main([command, "--help"])
        assert exc.value.code == 0
        text = capsys.readouterr().out
        assert "usage: coverage-audit" in text
        # Every option line has words after it (argparse prints help text beside each).
        assert "--quiet" in text or command == "check"
    with pytest.raises(SystemExit):
        main(["--help"])
    assert "run" in capsys.readouterr().out


def test_options_instead_of_spec_and_write_spec_roundtrip(two_by_two, tmp_path, capsys):
    out = tmp_path / "o1"
    saved = tmp_path / "saved.toml"
    argv = [
        "run",
        "--areas",
        two_by_two / "areas.gpkg",
        "--id",
        "geoid",
        "--total",
        "total",
        "--group",
        "white=white",
        "--group",
        "black=black",
        "--reference",
        "white",
        "--derive-minority",
        "--footprint",
        two_by_two / "zone.gpkg",
        "--out",
        out,
        "--write-spec",
        saved,
        "--quiet",
        "--no-map",
        "--no-report",
    ]
    code, _, err = _run(argv, capsys)
    assert code == 0, err
    code, _, err = _run(
        ["run", saved, "--out", tmp_path / "o2", "--quiet", "--no-map", "--no-report"], capsys
    )
    assert code == 0, err
    s1 = json.loads((out / "summary.json").read_text())
    s2 = json.loads((tmp_path / "o2" / "summary.json").read_text())
    assert s1["coverage"] == s2["coverage"]


def test_missing_inline_options_are_listed(capsys, tmp_path):
    code, _, err = _run(["run", "--areas", tmp_path / "a.gpkg", "--out", tmp_path / "o"], capsys)
    assert code == 2 and "give --id, --total, --group, --reference" in err


def test_atomic_write_keeps_previous_file_on_failure(tmp_path):
    target = tmp_path / "summary.json"
    write_text(target, "old\n")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half", encoding="utf-8")
            raise RuntimeError("interrupted")
    assert target.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["summary.json"]  # no temporary left


def test_check_command_reports_without_writing(two_by_two, capsys):
    code, out, err = _run(["check", two_by_two / "audit.toml"], capsys)
    assert code == 0, err
    assert "4 would be analysed" in out


def test_grid_crs_constant_is_projected():
    assert "laea" in GRID_CRS and len(grid(1, 1)) == 1


def test_demo_scenario_choices_are_the_demo_scenarios() -> None:
    # Consistency check: every scenario the demo writes can be chosen on the command line.
    from coverage_audit.cli import DEMO_SCENARIOS
    from coverage_audit.demo import BLOCK_SCENARIO, MARGIN_SCENARIO, SCENARIOS

    assert sorted(DEMO_SCENARIOS) == sorted([*SCENARIOS, MARGIN_SCENARIO, BLOCK_SCENARIO])
