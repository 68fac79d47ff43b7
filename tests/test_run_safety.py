"""Issue 9, items 4, 6 and 8-15: bad inputs, output folders and interruptions.

Every case goes through ``coverage_audit.cli.main`` (or a real subprocess for signals)
and must end with one ``error:`` line (exit 2) or a clean stop, never a traceback.
"""

from __future__ import annotations

import errno
import json
import os
import pathlib
import shutil
import signal
import subprocess
import sys
import textwrap
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from coverage_audit import cli
from coverage_audit.cli import main
from coverage_audit.errors import IdWarning, InputError, SpecError
from coverage_audit.inputs import ids_as_text, read_layer
from coverage_audit.io.checks import finite_coordinates
from coverage_audit.outputs import claim_output_dir, neutralise_formula
from coverage_audit.spec import MAX_DRAWS, load_spec, tomllib

from .conftest import GRID_CRS, digest, grid, spec_text, write_spec

REPO = Path(__file__).resolve().parent.parent
QUIET = ["--quiet", "--no-map", "--no-report"]


def _run(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    assert "Traceback" not in out.err and "Traceback" not in out.out
    return code, out.out, out.err


def _hidden_leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


# ----------------------------------------------------------------- item 4: spec + options


@pytest.mark.parametrize(
    ("extra", "named"),
    [
        (["--radius", "20 km"], "--radius"),
        (["--footprint", "zone.kml"], "--footprint"),
        (["--table", "t.csv", "--id", "geoid"], "--id, --table"),
        (["--write-spec", "again.toml"], "--write-spec"),
    ],
)
def test_options_that_describe_an_audit_are_refused_beside_a_spec(
    two_by_two, tmp_path, capsys, extra, named
):
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", *extra, "--out", out, *QUIET], capsys)
    assert code == 2
    assert err.startswith("error: ") and err.count("\n") == 1
    assert named in err and "audit.toml" in err
    assert not out.exists()  # refused before anything was read or written


def test_analysis_settings_still_override_a_spec(two_by_two, tmp_path, capsys):
    out = tmp_path / "out"
    code, _, err = _run(
        ["run", two_by_two / "audit.toml", "--threshold", "0.4", "--out", out, *QUIET], capsys
    )
    assert code == 0, err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["coverage"]["served_threshold"] == 0.4


def test_written_spec_uses_paths_relative_to_itself_and_moves_with_its_data(
    two_by_two, tmp_path, capsys
):
    saved = two_by_two / "specs" / "saved.toml"
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
        "--footprint",
        two_by_two / "zone.gpkg",
        "--write-spec",
        saved,
        "--out",
        tmp_path / "o1",
        *QUIET,
    ]
    code, _, err = _run(argv, capsys)
    assert code == 0, err
    data = tomllib.loads(saved.read_text())
    assert data["areas"]["path"] == "../areas.gpkg"
    assert data["footprint"]["path"] == "../zone.gpkg"
    # Move the spec with its data: it still runs and gives the same coverage.
    moved = tmp_path / "elsewhere"
    moved.mkdir()
    for name in ("areas.gpkg", "zone.gpkg"):
        shutil.copy(two_by_two / name, moved / name)
    (moved / "specs").mkdir()
    shutil.copy(saved, moved / "specs" / "saved.toml")
    code, _, err = _run(
        ["run", moved / "specs" / "saved.toml", "--out", tmp_path / "o2", *QUIET], capsys
    )
    assert code == 0, err
    s1 = json.loads((tmp_path / "o1" / "summary.json").read_text())
    s2 = json.loads((tmp_path / "o2" / "summary.json").read_text())
    assert s1["coverage"] == s2["coverage"]


# ----------------------------------------------------------------- item 6: digests


def test_manifest_digest_is_of_the_bytes_read(two_by_two, tmp_path, capsys):
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    manifest = json.loads((out / "manifest.json").read_text())
    by_role = {r["role"]: r["sha256"] for r in manifest["inputs"]}
    # hashlib over the file's bytes, computed outside the tool (tests/conftest.digest).
    assert by_role["areas"] == digest(two_by_two / "areas.gpkg")


@pytest.mark.parametrize("target", ["areas.gpkg", "zone.gpkg"])
def test_a_file_changed_while_being_read_is_refused(
    two_by_two, tmp_path, capsys, monkeypatch, target
):
    import coverage_audit.inputs as inputs_module

    original = inputs_module.read_layer

    def read_then_change(path, **kwargs):
        frame = original(path, **kwargs)
        if Path(path).name == target:
            with open(path, "ab") as handle:  # another program appends meanwhile
                handle.write(b"\0appended")
        return frame

    monkeypatch.setattr(inputs_module, "read_layer", read_then_change)
    import coverage_audit.footprint as footprint_module

    monkeypatch.setattr(footprint_module, "read_layer", read_then_change)
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", tmp_path / "o", *QUIET], capsys)
    assert code == 2
    assert "changed while it was being read" in err and target in err


def test_a_table_changed_while_being_read_is_refused(two_by_two, tmp_path, capsys, monkeypatch):
    import coverage_audit.io.tables as tables_module

    areas = gpd.read_file(two_by_two / "areas.gpkg")
    areas[["geoid", "total", "white", "black"]].to_csv(two_by_two / "table.csv", index=False)
    areas[["geoid", "geometry"]].to_file(two_by_two / "shapes.gpkg", driver="GPKG")
    text = (two_by_two / "audit.toml").read_text()
    text = text.replace('path = "areas.gpkg"', 'path = "shapes.gpkg"\ntable = "table.csv"', 1)
    spec = write_spec(two_by_two / "table.toml", text)
    original = tables_module.read_census_table

    def read_then_change(path, **kwargs):
        frame = original(path, **kwargs)
        Path(path).write_text(Path(path).read_text().replace("100", "999"))
        return frame

    monkeypatch.setattr(tables_module, "read_census_table", read_then_change)
    code, _, err = _run(["run", spec, "--out", tmp_path / "o", *QUIET], capsys)
    assert code == 2 and "table.csv" in err and "changed while it was being read" in err


# ----------------------------------------------------------------- item 8: infinite coords


def test_finite_coordinates_flags_nan_and_inf():
    geoms = np.array(
        [
            shapely.box(0, 0, 1, 1),
            shapely.Polygon([(0, 0), (np.inf, 0), (1, 1)]),
            shapely.Polygon([(0, 0), (np.nan, 0), (1, 1)]),
            None,
        ],
        dtype=object,
    )
    assert finite_coordinates(geoms).tolist() == [True, False, False, True]


def _with_bad_coordinate(frame: gpd.GeoDataFrame, row: int, value: float) -> gpd.GeoDataFrame:
    out = frame.copy()
    x0, y0, x1, y1 = out.geometry.iloc[row].bounds
    out.loc[out.index[row], "geometry"] = shapely.Polygon([(x0, y0), (value, y0), (x1, y1)])
    return out


@pytest.mark.parametrize("value", [np.inf, -np.inf, np.nan])
def test_an_area_with_a_non_finite_coordinate_is_excluded_and_listed(
    two_by_two, tmp_path, capsys, value
):
    areas = gpd.read_file(two_by_two / "areas.gpkg")
    _with_bad_coordinate(areas, 1, value).to_file(two_by_two / "areas.gpkg", driver="GPKG")
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    summary = json.loads((out / "summary.json").read_text())
    assert summary["areas"]["analysed"] == 3 and summary["areas"]["excluded"] == 1
    exclusions = pd.read_csv(out / "exclusions.csv", dtype={"id": str})
    row = exclusions[exclusions["source"] == "areas"].iloc[0]
    assert row["row"] == 2 and row["id"] == "01001000002"
    assert "not a finite number" in row["reason"]


def test_a_footprint_with_an_infinite_coordinate_is_a_clear_error(two_by_two, tmp_path, capsys):
    zone = gpd.read_file(two_by_two / "zone.gpkg")
    _with_bad_coordinate(zone, 1, np.inf).to_file(two_by_two / "zone.gpkg", driver="GPKG")
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", tmp_path / "o", *QUIET], capsys)
    assert code == 2
    assert "zone.gpkg" in err and "[2]" in err and "not a finite number" in err


# ----------------------------------------------------------------- item 9: overflowing sums


def test_counts_whose_sum_overflows_are_refused_before_any_output(two_by_two, tmp_path, capsys):
    areas = gpd.read_file(two_by_two / "areas.gpkg")
    areas["total"] = [1e308, 1e308, 300.0, 400.0]  # each finite; the sum is not
    areas.to_file(two_by_two / "areas.gpkg", driver="GPKG")
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 2
    assert "'total'" in err and "add up to more than" in err
    assert not out.exists()


# ----------------------------------------------------------------- item 10: bounded draws


@pytest.mark.parametrize("key", ["permutations", "enclave_draws"])
def test_draw_counts_are_bounded_with_the_limit_in_the_message(two_by_two, tmp_path, key):
    text = (two_by_two / "audit.toml").read_text().replace(f"{key} = 99", f"{key} = 1000000000000")
    spec = write_spec(two_by_two / "big.toml", text)
    with pytest.raises(SpecError, match=f"{key} was 1000000000000 but must be at most 99,999"):
        load_spec(spec)
    text = (two_by_two / "audit.toml").read_text().replace(f"{key} = 99", f"{key} = {MAX_DRAWS}")
    assert getattr(load_spec(write_spec(two_by_two / "ok.toml", text)).analysis, key) == MAX_DRAWS


def test_permutations_option_is_bounded_too(two_by_two, tmp_path, capsys):
    code, _, err = _run(
        ["run", two_by_two / "audit.toml", "--permutations", "1000000000000", "--out", tmp_path],
        capsys,
    )
    assert code == 2 and "at most 99,999" in err


# ----------------------------------------------------------------- item 11: unusable folders


@pytest.fixture
def no_analysis(monkeypatch):
    """Fail loudly if the analysis starts: the folder must be refused before it."""
    import coverage_audit.audit as audit_module

    def refuse(*args, **kwargs):
        raise AssertionError("the analysis started before the output folder was checked")

    monkeypatch.setattr(audit_module, "run_audit", refuse)


def test_output_folder_below_a_file_fails_before_the_analysis(
    two_by_two, tmp_path, capsys, no_analysis
):
    (tmp_path / "notes.txt").write_text("x")
    code, _, err = _run(
        ["run", two_by_two / "audit.toml", "--out", tmp_path / "notes.txt" / "out", *QUIET],
        capsys,
    )
    assert code == 2 and "below a file" in err and "notes.txt' is a file" in err


def test_output_folder_name_too_long_fails_before_the_analysis(
    two_by_two, tmp_path, capsys, no_analysis
):
    code, _, err = _run(
        ["run", two_by_two / "audit.toml", "--out", tmp_path / ("x" * 300), *QUIET], capsys
    )
    assert code == 2 and "too long" in err


def test_output_folder_not_writable_fails_before_the_analysis(
    two_by_two, tmp_path, capsys, no_analysis, monkeypatch
):
    def denied(self, *args, **kwargs):
        raise PermissionError(errno.EACCES, "Permission denied", str(self))

    monkeypatch.setattr(pathlib.Path, "mkdir", denied)
    code, _, err = _run(
        ["run", two_by_two / "audit.toml", "--out", tmp_path / "new", *QUIET], capsys
    )
    assert code == 2 and "cannot be written" in err and "Permission denied" in err


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root may write anywhere")
def test_read_only_parent_fails_before_the_analysis(two_by_two, tmp_path, capsys, no_analysis):
    parent = tmp_path / "ro"
    parent.mkdir()
    parent.chmod(0o500)
    try:
        code, _, err = _run(
            ["run", two_by_two / "audit.toml", "--out", parent / "out", *QUIET], capsys
        )
    finally:
        parent.chmod(0o700)
    assert code == 2 and "cannot be written" in err


# ----------------------------------------------------------------- item 12: Ctrl-C at start


def test_ctrl_c_during_start_up_is_one_line(monkeypatch, capsys):
    def interrupted_start(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(cli, "_build_parser", interrupted_start)
    code = main(["run", "x.toml"])
    err = capsys.readouterr().err
    assert code == 130 and "Traceback" not in err and err.startswith("interrupted")


def test_importing_the_cli_does_not_load_the_analysis_libraries():
    # The handler is installed first thing in main(); that only helps when importing the
    # entry point is quick, so the heavy libraries must load after it.
    code = (
        "import sys, coverage_audit.cli; "
        "print(sorted(m for m in ('geopandas', 'pandas', 'shapely') if m in sys.modules))"
    )
    done = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        env={**os.environ, "PYTHONPATH": str(REPO)},
        timeout=60,
    )
    assert done.stdout.strip() == "[]", done.stderr


# ----------------------------------------------------------------- item 13: the folder whole


def test_rerun_without_map_leaves_no_stale_map(two_by_two, tmp_path, capsys):
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, "--quiet"], capsys)
    assert code == 0, err
    assert (out / "map.html").is_file() and (out / "report.html").is_file()
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    assert sorted(p.name for p in out.iterdir()) == [
        "areas.csv",
        "areas.gpkg",
        "exclusions.csv",
        "manifest.json",
        "summary.json",
    ]
    assert _hidden_leftovers(tmp_path) == []  # no lock, staging or old folder left
    assert json.loads((out / "manifest.json").read_text())["outputs"] == {}


def test_a_second_run_on_a_locked_folder_is_refused(two_by_two, tmp_path, capsys):
    out = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        import socket

        lock = tmp_path / ".out.lock"
        lock.write_text(
            json.dumps({"pid": holder.pid, "host": socket.gethostname(), "started": "now"})
        )
        code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
        assert code == 2
        assert "in use by another coverage-audit run" in err and str(holder.pid) in err
        assert lock.is_file()  # someone else's lock is left alone
    finally:
        holder.kill()
        holder.wait()
    # The holder is gone: its lock is stale and the next run takes over.
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    assert not (tmp_path / ".out.lock").exists()


def test_claim_refuses_a_folder_of_other_files(tmp_path):
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "thesis.docx").write_text("precious")
    with pytest.raises(InputError, match="did not write \\(thesis.docx\\)"):
        claim_output_dir(tmp_path / "mine")
    assert (tmp_path / "mine" / "thesis.docx").read_text() == "precious"


def test_a_failed_run_leaves_the_earlier_outputs_whole(two_by_two, tmp_path, capsys, monkeypatch):
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    import coverage_audit.outputs as outputs_module

    def broken(*args, **kwargs):
        raise KeyboardInterrupt  # as Ctrl-C in the middle of writing

    monkeypatch.setattr(outputs_module, "write_gpkg", broken)
    code, _, err = _run(
        ["run", two_by_two / "audit.toml", "--threshold", "0.9", "--out", out, *QUIET], capsys
    )
    assert code == 130 and err.startswith("interrupted")
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert _hidden_leftovers(tmp_path) == []


SLOW_WRITER = textwrap.dedent(
    """
    import sys, time
    import coverage_audit.outputs as outputs
    original = outputs.write_gpkg
    def slow(*args, **kwargs):
        original(*args, **kwargs)
        print("WRITING", flush=True)
        time.sleep(60)
    outputs.write_gpkg = slow
    from coverage_audit.cli import main
    sys.exit(main(sys.argv[1:]))
    """
)


@pytest.mark.skipif(os.name != "posix", reason="POSIX signals")
def test_sigterm_while_writing_and_a_second_run_meanwhile(two_by_two, tmp_path, capsys):
    """A real process: SIGTERM while it writes over an earlier run's outputs, and a second
    run started meanwhile. SIGINT (Ctrl-C) takes the same path as SIGTERM in main(); the
    in-process test above interrupts the writing with KeyboardInterrupt."""
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    script = tmp_path / "slow.py"
    script.write_text(SLOW_WRITER)
    argv = [str(two_by_two / "audit.toml"), "--threshold", "0.9", "--out", str(out), *QUIET]
    child = subprocess.Popen(
        [sys.executable, str(script), "run", *argv],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, "PYTHONPATH": str(REPO)},
    )
    try:
        assert child.stdout is not None
        assert child.stdout.readline().strip() == "WRITING"  # the child is writing
        # A second run into the same folder meanwhile is refused, naming the first.
        code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
        assert code == 2 and "in use by another coverage-audit run" in err
        assert f"process {child.pid}" in err
        child.send_signal(signal.SIGTERM)
        _, stderr = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == 128 + int(signal.SIGTERM)
    assert "Traceback" not in stderr and "interrupted" in stderr
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    hidden = [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]
    assert hidden == []  # no 0-byte temporary, staging folder or lock left


@pytest.mark.skipif(os.name != "posix", reason="POSIX signals")
def test_a_real_ctrl_c_during_start_up_in_a_subprocess(tmp_path):
    script = tmp_path / "start.py"
    script.write_text(
        textwrap.dedent(
            """
            import os, signal, sys
            from coverage_audit import cli
            original = cli._build_parser
            def interrupted(*args, **kwargs):
                os.kill(os.getpid(), signal.SIGINT)  # Ctrl-C while the parser is built
                return original(*args, **kwargs)
            cli._build_parser = interrupted
            sys.exit(cli.main(["--version"]))
            """
        )
    )
    done = subprocess.run(
        [sys.executable, str(script)],
        capture_output=True,
        text=True,
        env={**os.environ, "PYTHONPATH": str(REPO)},
        timeout=60,
    )
    assert done.returncode == 130
    assert "Traceback" not in done.stderr and done.stderr.startswith("interrupted")


# ----------------------------------------------------------------- item 14: CSV injection


@pytest.mark.parametrize(
    ("cell", "written"),
    [
        # OWASP "CSV Injection": cells starting with = + - @ tab or carriage return are
        # prefixed with a single quote so that a spreadsheet shows them as text.
        ('=HYPERLINK("http://x","y")', '\'=HYPERLINK("http://x","y")'),
        ("+1+2", "'+1+2"),
        ("-2+3", "'-2+3"),
        ("@SUM(A1)", "'@SUM(A1)"),
        ("\tx", "'\tx"),
        ("\rx", "'\rx"),
        ("North Ward", "North Ward"),
        ("a=b", "a=b"),
        ("", ""),
    ],
)
def test_formula_cells_are_neutralised(cell, written):
    assert neutralise_formula(cell) == written


def test_free_text_columns_neutralised_and_ids_kept(two_by_two, tmp_path, capsys):
    areas = gpd.read_file(two_by_two / "areas.gpkg")
    areas["name"] = ["=1+1", "@cmd", "-minus", "Quiet Hollow"]
    areas.loc[3, "geoid"] = "=01001000004"  # an odd id: kept exactly as given
    areas.to_file(two_by_two / "areas.gpkg", driver="GPKG")
    extra = areas.iloc[[1]].copy()
    extra["geoid"] = "-dup"
    pd.concat([areas, extra, extra]).to_file(two_by_two / "areas.gpkg", driver="GPKG")
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    table = pd.read_csv(out / "areas.csv", dtype=str, keep_default_na=False)
    assert table["name"].tolist() == ["'=1+1", "'@cmd", "'-minus", "Quiet Hollow"]
    assert table["geoid"].tolist()[3] == "=01001000004"
    exclusions = pd.read_csv(out / "exclusions.csv", dtype=str, keep_default_na=False)
    assert exclusions["id"].tolist() == ["-dup", "-dup"]  # ids exactly as given
    # The GeoPackage is not a spreadsheet: values stay as they are.
    assert pyogrio.read_dataframe(out / "areas.gpkg")["name"].tolist()[0] == "=1+1"


# ----------------------------------------------------------------- item 15: clearer messages


def test_a_spec_with_a_byte_order_mark_is_read(two_by_two):
    text = (two_by_two / "audit.toml").read_text()
    (two_by_two / "bom.toml").write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    assert load_spec(two_by_two / "bom.toml").areas == load_spec(two_by_two / "audit.toml").areas


def test_a_repeated_key_is_named(two_by_two, capsys):
    text = (two_by_two / "audit.toml").read_text().replace('id = "geoid"', 'id = "geoid"\nid = "x"')
    spec = write_spec(two_by_two / "dup.toml", text)
    code, _, err = _run(["check", spec], capsys)
    assert code == 2
    assert 'the key "id" in [areas] is given twice' in err and "dup.toml" in err


def test_an_unclosed_ring_names_the_feature(two_by_two, capsys):
    features = [
        {
            "type": "Feature",
            "properties": {"geoid": "01001000001"},
            "geometry": {"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [1, 1], [0, 0]]]},
        },
        {
            "type": "Feature",
            "properties": {"geoid": "01001000002"},
            "geometry": {"type": "Polygon", "coordinates": [[[2, 0], [3, 0], [3, 1], [2, 1]]]},
        },
    ]
    path = two_by_two / "areas.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    renamed = json.loads(path.read_text().replace('"geoid"', '"tract_code"'))
    (two_by_two / "named.geojson").write_text(json.dumps(renamed))
    with pytest.raises(InputError, match="feature 2 \\(tract_code '01001000002'\\)"):
        read_layer(two_by_two / "named.geojson", layer=None, role="areas", id_column="tract_code")
    with pytest.raises(InputError, match="feature 2 \\(geoid '01001000002'\\)"):
        read_layer(path, layer=None, role="areas")
    text = (two_by_two / "audit.toml").read_text().replace("areas.gpkg", "areas.geojson")
    code, _, err = _run(["check", write_spec(two_by_two / "ring.toml", text)], capsys)
    assert code == 2 and "feature 2" in err and "ring must end at its first point" in err


def test_ids_written_as_decimals_get_a_hint():
    with pytest.warns(IdWarning, match="read as numbers.*save the column as text"):
        ids_as_text(pd.Series(["01001000000.0", "01001000001.0"]), width=None, where="table")
    with warnings.catch_warnings():
        warnings.simplefilter("error", IdWarning)
        ids_as_text(pd.Series(["01001000000", "1.5a"]), width=None, where="table")


def test_grid_fixture_ids_are_text():
    assert grid(1, 1)["geoid"].iloc[0] == "01001000001" and "laea" in GRID_CRS
    assert "permutations" in spec_text('path = "zone.gpkg"')


def test_files_put_into_the_folder_during_a_run_are_never_removed(two_by_two, tmp_path, capsys):
    from coverage_audit import run_audit

    out = tmp_path / "out"
    claim = claim_output_dir(out)
    try:
        result = run_audit(two_by_two / "audit.toml")
        (out / "notes.txt").write_text("written by hand meanwhile")
        with pytest.raises(InputError, match="now holds files .* \\(notes.txt\\)"):
            result.write(out, claim=claim)
    finally:
        claim.release()
    assert [p.name for p in out.iterdir()] == ["notes.txt"]
    assert _hidden_leftovers(tmp_path) == []


def test_demo_below_a_file_is_one_error_line(tmp_path, capsys):
    (tmp_path / "afile").write_text("x")
    code, _, err = _run(
        ["demo", "--regenerate", "--out", tmp_path / "afile" / "demo", "--quiet"], capsys
    )
    assert code == 2 and err.startswith("error: ") and "below a file" in err


def test_a_full_disk_while_writing_is_one_error_and_changes_nothing(
    two_by_two, tmp_path, capsys, monkeypatch
):
    out = tmp_path / "out"
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 0, err
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    import coverage_audit.outputs as outputs_module

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(outputs_module, "write_gpkg", full)
    code, _, err = _run(["run", two_by_two / "audit.toml", "--out", out, *QUIET], capsys)
    assert code == 2 and "no space left" in err and "nothing was changed" in err
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert _hidden_leftovers(tmp_path) == []
