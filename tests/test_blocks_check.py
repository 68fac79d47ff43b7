"""``coverage-audit check`` reads [blocks] as ``run`` would and says what it found.

The expected counts are hand-computed from the hand-built blocks of
``people_in_uncovered_half`` (six blocks, one of them in a tract that is not analysed).
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import pytest

from coverage_audit.cli import main

from .test_apportion import _spec, write_uncovered_half


@pytest.fixture
def blocks_region(two_by_two: Path) -> Path:
    """The 2 x 2 grid with six hand-built blocks (see test_apportion)."""
    return write_uncovered_half(two_by_two)


def _check(folder, blocks: str, capsys) -> tuple[int, str, str]:
    spec = _spec(folder, blocks)
    path = folder / "audit.toml"
    assert spec.blocks is not None and path.exists()
    code = main(["check", str(path)])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_check_reads_the_blocks(blocks_region, capsys):
    folder = blocks_region
    code, out, err = _check(folder, "blocks.gpkg", capsys)
    assert code == 0, err
    # Hand-counted: 6 rows; block 010010000091001 names tract 01001000009, not analysed.
    assert "blocks.gpkg (GeoPackage), id column GEOID20: 6 rows, 5 would be used, 1 excluded" in out
    assert "prefixes (11 digits) matched 5 of 6 valid blocks to analysed areas (83.3%)" in out
    assert "areas with blocks: 4 of 4\n" in out
    # Blocks 0 + 100 + 200 + 300 + 400; the areas' own totals 100 + 200 + 300 + 400.
    assert "people (P2_001N): 1,000 in the blocks of those areas; the areas' own total 1,000" in out
    assert "exclusions: 1 rows would be left out" in out
    assert "no analysed area has GEOID 01001000009" in out


def test_check_lists_areas_without_blocks_and_bad_blocks(blocks_region, capsys):
    folder = blocks_region
    blocks = gpd.read_file(folder / "blocks.gpkg")
    blocks = blocks[~blocks["GEOID20"].str.startswith("01001000002")].reset_index(drop=True)
    blocks.loc[0, "GEOID20"] = "0100100000110"  # 13 digits
    blocks.to_file(folder / "blocks.gpkg", driver="GPKG")
    code, out, err = _check(folder, "blocks.gpkg", capsys)
    assert code == 0, err
    assert "5 rows, 3 would be used, 2 excluded" in out
    assert "areas with blocks: 3 of 4; 1 would be excluded (no block)" in out
    assert "block id is not a 15-digit GEOID" in out
    assert "no census block of the blocks file has this area's GEOID" in out


def test_check_gives_run_errors(blocks_region, capsys):
    folder = blocks_region
    code, _, err = _check(folder, "nope.gpkg", capsys)
    assert code == 2 and "blocks file" in err and "was not found" in err
    blocks = gpd.read_file(folder / "blocks.gpkg")
    blocks["GEOID20"] = "02" + blocks["GEOID20"].str[2:]  # another state
    blocks.to_file(folder / "other.gpkg", driver="GPKG")
    code, _, err = _check(folder, "other.gpkg", capsys)
    assert code == 2 and "no block of" in err and "falls in an analysed area" in err
    assert err.startswith("error:") and "Traceback" not in err


def test_check_reads_a_prepared_dataset(blocks_region, capsys):
    folder = blocks_region
    assert main(["prepare-blocks", str(folder / "blocks.gpkg"), "--out", str(folder / "p")]) == 0
    capsys.readouterr()
    code, out, err = _check(folder, "p", capsys)
    assert code == 0, err
    assert "(prepared dataset, 1 files), id column GEOID20: 6 rows, 5 would be used" in out
