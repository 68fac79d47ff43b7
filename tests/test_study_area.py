"""The study area: rates computed over the areas inside only, checked by hand on a grid."""

from __future__ import annotations

import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely

from coverage_audit.audit import run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.spec import load_spec
from coverage_audit.study_area import inside_by_polygons, inside_within

from .conftest import GRID_CRS, grid, spec_text, write_spec

# A 3 x 2 grid of 1 km cells, numbered row by row from the lower left:
#   4 5 6
#   1 2 3
# The footprint covers x in [0, 1500]: cells 1 and 4 whole, cells 2 and 5 half.
# The first two columns carry county code 01001, the third 01003.
TOTAL = [100, 200, 300, 400, 500, 600]
WHITE = [60, 150, 100, 300, 100, 300]
BLACK = [40, 50, 200, 100, 400, 300]
INSIDE = ["01001000001", "01001000002", "01001000004", "01001000005"]


@pytest.fixture
def region(tmp_path: Path) -> Path:
    areas = grid(3, 2)
    areas["geoid"] = [
        f"{'01003' if col == 2 else '01001'}{k + 1:06d}" for k, col in enumerate(areas["col"])
    ]
    areas["total"], areas["white"], areas["black"] = TOTAL, WHITE, BLACK
    areas.to_file(tmp_path / "areas.gpkg", layer="areas", driver="GPKG")
    zone = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1500, 2000)], crs=GRID_CRS)
    zone.to_file(tmp_path / "zone.gpkg", driver="GPKG")
    city = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 2000, 2000)], crs=GRID_CRS)
    city.to_file(tmp_path / "city.gpkg", driver="GPKG")
    wide = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 2500, 2000)], crs=GRID_CRS)
    wide.to_file(tmp_path / "wide.gpkg", driver="GPKG")
    (tmp_path / "inside.csv").write_text("tract\n" + "\n".join(INSIDE) + "\n", encoding="utf-8")
    return tmp_path


def _run(folder: Path, study_area: str) -> dict:
    text = spec_text('path = "zone.gpkg"') + study_area
    spec = load_spec(write_spec(folder / "audit.toml", text))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_audit(spec).summary


STUDY_AREAS = {
    "ids": f"[study_area]\nids = {INSIDE!r}\n".replace("'", '"'),
    "file": '[study_area]\npath = "inside.csv"\nids_column = "tract"\n',
    "prefixes": '[study_area]\nprefixes = ["01001"]\n',
    "polygons": '[study_area]\npath = "city.gpkg"\n',
    "share": '[study_area]\npath = "wide.gpkg"\ninside = "share"\nmin_share = 0.6\n',
    "within": '[study_area]\nwithin = "0.8 km"\n',
}


@pytest.mark.parametrize("variant", sorted(STUDY_AREAS))
def test_rates_are_those_of_the_areas_inside(region: Path, variant: str) -> None:
    summary = _run(region, STUDY_AREAS[variant])
    groups = summary["coverage"]["groups"]
    # Hand computation over cells 1, 2, 4, 5 (covered fractions 1, 0.5, 1, 0.5):
    # white (60*1 + 150*0.5 + 300*1 + 100*0.5) / (60 + 150 + 300 + 100) = 485 / 610
    # black (40*1 + 50*0.5 + 100*1 + 400*0.5) / (40 + 50 + 100 + 400) = 365 / 590
    assert groups["white"]["rate"] == pytest.approx(485 / 610, rel=1e-9)
    assert groups["black"]["rate"] == pytest.approx(365 / 590, rel=1e-9)
    assert groups["black"]["ratio"] == pytest.approx((365 / 590) / (485 / 610), rel=1e-9)
    assert groups["black"]["population"] == 590
    assert groups["black"]["below_four_fifths"] is True  # 0.778 < 0.8
    assert summary["areas"]["analysed"] == 4
    assert summary["areas"]["outside_study_area"] == 2
    section = summary["study_area"]
    expected_kind = {"file": "ids", "share": "polygons"}.get(variant, variant)
    assert section["kind"] == expected_kind
    assert (section["areas_inside"], section["areas_outside"]) == (4, 2)
    assert section["population_outside"] == 300 + 600
    assert summary["exclusions"]["by_reason"]["study_area: outside the study area"] == 2


def test_without_a_study_area_every_area_counts(region: Path) -> None:
    summary = _run(region, "")
    groups = summary["coverage"]["groups"]
    # Cells 3 and 6 are uncovered: white 485 / 1010, black 365 / 1090.
    assert groups["white"]["rate"] == pytest.approx(485 / 1010, rel=1e-9)
    assert groups["black"]["rate"] == pytest.approx(365 / 1090, rel=1e-9)
    assert "study_area" not in summary
    assert "outside_study_area" not in summary["areas"]


def test_covered_share_rule_boundary() -> None:
    # A cell covered exactly half is inside at min_share 0.5 (an exact boundary), not at 0.6.
    cells = np.asarray(grid(3, 1).geometry.array)
    half = shapely.box(0, 0, 2500, 1000)
    assert inside_by_polygons(cells, half, rule="share", min_share=0.5).tolist() == [
        True,
        True,
        True,
    ]
    assert inside_by_polygons(cells, half, rule="share", min_share=0.6).tolist() == [
        True,
        True,
        False,
    ]


def test_within_distance_of_the_footprint() -> None:
    # Representative points of unit squares lie 500 m, 1500 m and 2500 m from x = 0.
    cells = np.asarray(grid(3, 1).geometry.array)
    line = shapely.LineString([(0, -5000), (0, 5000)])
    assert inside_within(cells, line, 1600.0).tolist() == [True, True, False]


def test_nothing_inside_is_an_error(region: Path) -> None:
    with pytest.raises(InputError, match="no analysed area lies inside"):
        _run(region, '[study_area]\nprefixes = ["02"]\n')


def test_one_kind_only(region: Path) -> None:
    with pytest.raises(SpecError, match="exactly one of"):
        _run(region, '[study_area]\nprefixes = ["01001"]\nwithin = "1 km"\n')


def test_listed_ids_that_match_nothing_are_exclusions(region: Path) -> None:
    ids = [*INSIDE, "01001999999"]
    study = f"[study_area]\nids = {ids!r}\n".replace("'", '"')
    summary = _run(region, study)
    assert summary["study_area"]["unmatched_ids"] == 1
    reasons = summary["exclusions"]["by_reason"]
    assert reasons["study_area: listed id is not an analysed area of the areas file"] == 1
    assert summary["coverage"]["groups"]["black"]["population"] == 590


def test_console_prints_the_findings_after_its_table(region: Path, tmp_path: Path, capsys) -> None:
    from coverage_audit.cli import main

    spec = write_spec(
        region / "audit.toml", spec_text('path = "zone.gpkg"') + STUDY_AREAS["prefixes"]
    )
    code = main(["run", str(spec), "--out", str(tmp_path / "out"), "--no-map", "--no-report"])
    out = capsys.readouterr().out
    assert code == 0
    table_end = out.index("<4/5")
    findings = out.index("Findings")
    assert findings > table_end
    assert "- Of 590 black people, 61.9% are covered" in out  # 365 / 590 = 0.6186...


def test_check_reports_the_study_area(region: Path, capsys) -> None:
    from coverage_audit.cli import main

    spec = write_spec(
        region / "audit.toml", spec_text('path = "zone.gpkg"') + STUDY_AREAS["within"]
    )
    assert main(["check", str(spec)]) == 0
    out = capsys.readouterr().out
    assert "study area 'study area' (within): 4 areas inside, 2 outside" in out
    assert "4 would be analysed" in out
