"""A region where every area has zero population: one notice, every rate not defined.

Policy (issue 9 item 16; common practice, no source): the audit runs, every rate, ratio,
four-fifths flag and index by group is None ("n/a"), and the reason is said once: one
warning, one line at the top of the console summary and of the report, and summary.json's
``population_notice``; no warning per group.
"""

from __future__ import annotations

import json

import geopandas as gpd
import shapely

from coverage_audit.cli import main
from coverage_audit.population_notice import NO_POPULATION_NOTICE

from .conftest import GRID_CRS, grid, spec_text, write_spec


def _region(tmp_path, people: bool):
    areas = grid(3, 3)
    areas["total"] = [10 * people] * 9
    areas["white"] = [5 * people] * 9
    areas["black"] = [5 * people] * 9
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    zone = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1500, 3000)], crs=GRID_CRS)
    zone.to_file(tmp_path / "zone.gpkg")
    text = spec_text('path = "zone.gpkg"') + "[output]\nmap = false\n"
    return write_spec(tmp_path / "audit.toml", text)


def test_zero_population_region_says_it_once(tmp_path, capsys):
    spec = _region(tmp_path, people=False)
    assert main(["run", str(spec), "--out", str(tmp_path / "out")]) == 0
    out, err = capsys.readouterr()
    # One warning line, none per group.
    assert err.count("NoPopulationWarning") == 1
    assert "zero total population" not in err
    assert "defined for only 0" not in err
    # One line at the top of the console summary: right after the title line.
    lines = [line for line in out.splitlines() if line.strip()]
    assert lines[1] == f"note: {NO_POPULATION_NOTICE}"
    assert out.count(NO_POPULATION_NOTICE) == 1
    summary = json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8"))
    assert summary["population_notice"] == NO_POPULATION_NOTICE
    for group in summary["coverage"]["groups"].values():
        assert group["rate"] is None and group["ratio"] is None
        assert group["below_four_fifths"] is False
    # Served areas are still counted (by hand: the zone covers column 0 whole and half of
    # column 1, threshold 0.5, so 6 of 9 cells).
    assert summary["coverage"]["served_areas"] == 6
    report = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert report.count(NO_POPULATION_NOTICE) == 1
    assert report.index(NO_POPULATION_NOTICE) < report.index('id="audited"')


def test_populated_region_has_no_notice(tmp_path, capsys):
    spec = _region(tmp_path, people=True)
    assert main(["run", str(spec), "--out", str(tmp_path / "out")]) == 0
    out, err = capsys.readouterr()
    assert "NoPopulationWarning" not in err and "note:" not in out
    summary = json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8"))
    assert summary["population_notice"] is None
