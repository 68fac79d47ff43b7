"""The pipeline's seams: the output folder alone re-draws the pages; no import cycles.

Consistency checks (the tool against itself), not reference tests: the pages drawn by
``coverage-audit report FOLDER`` must be the bytes the run wrote, which shows that the map
and the report depend on the written findings alone.
"""

from __future__ import annotations

import geopandas as gpd
import shapely

from coverage_audit.cli import main

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
