"""Block apportionment: covered people counted by census block, summed to tracts by GEOID.

Reference checks are hand-computed on hand-built blocks (areas of boxes and triangles);
the partition checks are consistency checks (the same audit, partitioned differently).
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from coverage_audit import run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.io.blocks import prepare_blocks
from coverage_audit.spec import load_spec

from .conftest import GRID_CRS, grid, spec_text, write_spec

BLOCKS_TABLE = """
[blocks]
path = "{path}"
total = "P2_001N"
groups = {{ white = "P2_005N", black = "P2_006N" }}
"""
QUICK = "sensitivity = false\n"


def _blocks(rows: list[tuple[str, shapely.Geometry, float, float, float]]) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {
            "GEOID20": [r[0] for r in rows],
            "P2_001N": [r[2] for r in rows],
            "P2_005N": [r[3] for r in rows],
            "P2_006N": [r[4] for r in rows],
        },
        geometry=[r[1] for r in rows],
        crs=GRID_CRS,
    )


def _spec(folder: Path, blocks: str | None, extra: str = QUICK, footprint: str = "zone.gpkg"):
    text = spec_text(f'path = "{footprint}"', analysis_extra=extra)
    text = text.replace('id = "geoid"', 'id = "geoid"\nlayer = "areas"')
    if blocks is not None:
        text += BLOCKS_TABLE.format(path=blocks)
    return load_spec(write_spec(folder / "audit.toml", text.replace("[output]", "")))


@pytest.fixture
def people_in_uncovered_half(two_by_two: Path) -> Path:
    """Cell 1's people all live in its right half; the footprint covers its left half."""
    return write_uncovered_half(two_by_two)


def write_uncovered_half(two_by_two: Path) -> Path:
    """Write the six hand-built blocks of :func:`people_in_uncovered_half`."""
    box = shapely.box
    _blocks(
        [
            ("010010000011001", box(0, 0, 500, 1000), 0, 0, 0),
            ("010010000011002", box(500, 0, 1000, 1000), 100, 80, 10),
            ("010010000021001", box(1000, 0, 2000, 1000), 200, 50, 150),
            ("010010000031001", box(0, 1000, 1000, 2000), 300, 30, 250),
            ("010010000041001", box(1000, 1000, 2000, 2000), 400, 100, 300),
            ("010010000091001", box(5000, 5000, 5100, 5100), 7, 7, 0),  # no such tract
        ]
    ).to_file(two_by_two / "blocks.gpkg", driver="GPKG")
    return two_by_two


def test_people_in_the_uncovered_half_are_not_covered(people_in_uncovered_half):
    folder = people_in_uncovered_half
    result = run_audit(_spec(folder, "blocks.gpkg"))
    areas = result.areas.set_index("geoid")
    # Hand-built: cell 1 is half covered by area but its 100 people live in the other half.
    assert areas.loc["01001000001", "covered_fraction"] == pytest.approx(0.5, abs=1e-12)
    assert areas.loc["01001000001", "covered_population_share"] == 0.0
    assert not areas.loc["01001000001", "served"]
    assert areas.loc["01001000003", "covered_population_share"] == 1.0
    assert areas.loc["01001000001", "block_count"] == 2
    cov = result.summary["coverage"]
    assert cov["apportionment"] == "blocks"
    groups = cov["groups"]
    # Hand-computed: white 30 covered of 260; black 250 of 710; minority 270 of 740.
    assert groups["white"]["covered_population"] == 30.0
    assert groups["white"]["rate"] == pytest.approx(30 / 260, abs=1e-12)
    assert groups["black"]["rate"] == pytest.approx(250 / 710, abs=1e-12)
    assert groups["minority"]["rate"] == pytest.approx(270 / 740, abs=1e-12)
    # Areal weighting beside it, hand-computed: white (40 + 30) / 260, black 255 / 710.
    areal = cov["blocks"]["areal_rates"]
    assert areal["white"] == pytest.approx(70 / 260, abs=1e-12)
    assert areal["black"] == pytest.approx(255 / 710, abs=1e-12)
    assert cov["blocks"]["blocks_read"] == 6
    roles = {r["role"]: r for r in result.manifest["inputs"]}
    assert roles["blocks"]["rows"] == 6 and len(roles["blocks"]["sha256"]) == 64
    assert any("counted where they live, by census block" in c for c in result.summary["cautions"])
    assert not any("areal-weighted" in c for c in result.summary["cautions"])
    assert cov["blocks"]["blocks_used"] == 5
    ex = result.exclusions
    row = ex[ex["source"] == "blocks"]
    assert row["id"].tolist() == ["010010000091001"]
    assert row["row"].tolist() == [6]
    assert "01001000009" in row["reason"].iloc[0]


def test_areal_audit_says_so(two_by_two):
    result = run_audit(_spec(two_by_two, None))
    assert result.summary["coverage"]["apportionment"] == "areal"
    assert "blocks" not in result.summary["coverage"]


def test_uniform_density_blocks_reproduce_areal_weighting(tmp_path):
    """Blocks of one density: f_b x_b summed equals the tract's areal-weighted count."""
    areas = grid(2, 1)
    areas["total"] = [160, 90]
    areas["white"] = [96, 90]
    areas["black"] = [64, 0]
    areas.to_file(tmp_path / "areas.gpkg", layer="areas", driver="GPKG")
    # A triangle over exactly half of cell 1 (its diagonal), cutting the diagonal blocks.
    tri = shapely.Polygon([(0, 0), (1000, 0), (0, 1000)])
    gpd.GeoDataFrame({"z": [1]}, geometry=[tri], crs=GRID_CRS).to_file(tmp_path / "zone.gpkg")
    rows = []
    for j in range(4):
        for i in range(4):
            cell = shapely.box(i * 250, j * 250, (i + 1) * 250, (j + 1) * 250)
            rows.append((f"01001000001{1000 + 4 * j + i}", cell, 10, 6, 4))
    rows.append(("010010000021000", shapely.box(1000, 0, 2000, 1000), 90, 90, 0))
    _blocks(rows).to_file(tmp_path / "blocks.gpkg", driver="GPKG")
    blocks = run_audit(_spec(tmp_path, "blocks.gpkg")).summary["coverage"]["groups"]
    areal = run_audit(_spec(tmp_path, None)).summary["coverage"]["groups"]
    # Hand-computed: the triangle is half of cell 1, so 80 of its 160 people (48 white,
    # 32 black) are covered both ways; cell 2 is untouched.
    for g, covered in (("white", 48.0), ("black", 32.0)):
        assert blocks[g]["covered_population"] == pytest.approx(covered, abs=1e-6)
        assert areal[g]["covered_population"] == pytest.approx(covered, abs=1e-6)
        assert blocks[g]["rate"] == pytest.approx(areal[g]["rate"], rel=1e-9)


def test_tract_statistics_use_the_block_sums(people_in_uncovered_half):
    """The tract counts are the blocks' sums, so both levels agree exactly."""
    folder = people_in_uncovered_half
    areas = gpd.read_file(folder / "areas.gpkg")
    areas["total"] = [1, 2, 3, 4]  # the table says otherwise; the blocks win
    areas["white"] = [1, 1, 1, 1]
    areas["black"] = [0, 1, 1, 1]
    areas.to_file(folder / "areas.gpkg", layer="areas", driver="GPKG")
    result = run_audit(_spec(folder, "blocks.gpkg"))
    blocks = gpd.read_file(folder / "blocks.gpkg")
    blocks["tract"] = blocks["GEOID20"].str[:11]
    sums = blocks.groupby("tract")[["P2_001N", "P2_005N", "P2_006N"]].sum()
    frame = result.areas.set_index("geoid")
    for column, block_column in (("population", "P2_001N"), ("white", "P2_005N")):
        expect = sums.loc[frame.index, block_column].to_numpy(dtype=float)
        assert np.array_equal(frame[column].to_numpy(dtype=float), expect)
    # Dissimilarity of black against the reference group white (Duncan and Duncan 1955),
    # by hand from the block sums: black (10, 150, 250, 300) of 710, white (80, 50, 30,
    # 100) of 260.
    x = np.array([10, 150, 250, 300]) / 710
    y = np.array([80, 50, 30, 100]) / 260
    d = 0.5 * np.abs(x - y).sum()
    assert d == pytest.approx(0.2936078, abs=1e-7)  # written out by hand
    assert result.summary["segregation"]["dissimilarity"]["black"] == pytest.approx(d, abs=1e-12)


def test_area_without_blocks_is_excluded(people_in_uncovered_half):
    folder = people_in_uncovered_half
    blocks = gpd.read_file(folder / "blocks.gpkg")
    blocks = blocks[~blocks["GEOID20"].str.startswith("01001000002")]
    blocks.to_file(folder / "blocks.gpkg", driver="GPKG")
    result = run_audit(_spec(folder, "blocks.gpkg"))
    assert "01001000002" not in set(result.areas["geoid"])
    ex = result.exclusions
    hit = ex[(ex["source"] == "areas") & (ex["id"] == "01001000002")]
    assert len(hit) == 1 and "no census block" in hit["reason"].iloc[0]
    assert result.summary["areas"]["excluded"] == 1
    assert result.summary["coverage"]["blocks"]["areas_without_blocks"] == 1


def test_bad_blocks_are_listed(people_in_uncovered_half):
    folder = people_in_uncovered_half
    blocks = gpd.read_file(folder / "blocks.gpkg")
    blocks.loc[0, "GEOID20"] = "0100100000110"  # 13 digits
    blocks.loc[2, "P2_006N"] = 999  # above the total
    blocks.to_file(folder / "blocks.gpkg", driver="GPKG")
    result = run_audit(_spec(folder, "blocks.gpkg"))
    ex = result.exclusions[result.exclusions["source"] == "blocks"]
    reasons = dict(zip(ex["row"].tolist(), ex["reason"].tolist(), strict=True))
    assert "15-digit" in reasons[1]
    assert "exceeds the total" in reasons[3]


def test_spec_errors(people_in_uncovered_half):
    folder = people_in_uncovered_half
    with pytest.raises(SpecError, match='unknown key "table"'):
        _spec(folder, 'blocks.gpkg"\ntable = "x')
    text = spec_text('path = "zone.gpkg"') + '[blocks]\npath = "blocks.gpkg"\npreset = "pl_p2"\n'
    with pytest.raises(SpecError, match='no column for the group "white"'):
        load_spec(write_spec(folder / "a.toml", text))
    with pytest.raises(SpecError, match="preset was"):
        load_spec(write_spec(folder / "a.toml", text.replace("pl_p2", "pl_p9")))
    spec = _spec(folder, "blocks.gpkg").blocks
    assert spec is not None and spec.id == "GEOID20"


def test_pl_p2_preset_codes(people_in_uncovered_half):
    """The preset fills P2 codes (2020 redistricting data table P2; from memory)."""
    folder = people_in_uncovered_half
    text = spec_text('path = "zone.gpkg"').replace('white = "white"', 'white_nh = "white"')
    text = text.replace('reference = "white"', 'reference = "white_nh"')
    text = text.replace('black = "black"', 'black_nh = "black"')
    text += '[blocks]\npath = "blocks.gpkg"\npreset = "pl_p2"\n'
    spec = load_spec(write_spec(folder / "p2.toml", text))
    assert spec.blocks is not None
    assert spec.blocks.total == "P2_001N"
    assert spec.blocks.group_columns == {"white_nh": "P2_005N", "black_nh": "P2_006N"}


def test_missing_column_and_file(people_in_uncovered_half):
    folder = people_in_uncovered_half
    with pytest.raises(InputError, match="was not found"):
        run_audit(_spec(folder, "nope.gpkg"))
    blocks = gpd.read_file(folder / "blocks.gpkg").drop(columns=["P2_006N"])
    blocks.to_file(folder / "b2.gpkg", driver="GPKG")
    with pytest.raises(InputError, match='no column "P2_006N"'):
        run_audit(_spec(folder, "b2.gpkg"))


# --- partitions and dask ----------------------------------------------------------------------


@pytest.fixture(scope="module")
def random_region(tmp_path_factory) -> Path:
    """A 4 x 4 tract grid in two counties, 5 x 5 blocks each with random counts."""
    folder = tmp_path_factory.mktemp("region")
    rng = np.random.default_rng(7)
    areas = grid(4, 4)
    areas["geoid"] = [("01001" if k < 8 else "01003") + g[5:] for k, g in enumerate(areas["geoid"])]
    rows = []
    for geoid, cell in zip(areas["geoid"], areas.geometry, strict=True):
        x0, y0 = cell.bounds[:2]
        for j in range(5):
            for i in range(5):
                box = shapely.box(
                    x0 + i * 200, y0 + j * 200, x0 + (i + 1) * 200, y0 + (j + 1) * 200
                )
                white, black = (int(v) for v in rng.integers(0, 40, 2))
                rows.append((f"{geoid}{1000 + 5 * j + i}", box, white + black + 3, white, black))
    blocks = _blocks(rows)
    sums = blocks.assign(t=blocks["GEOID20"].str[:11]).groupby("t")[
        ["P2_001N", "P2_005N", "P2_006N"]
    ]
    table = sums.sum().loc[areas["geoid"]]
    areas["total"], areas["white"], areas["black"] = (table[c].to_numpy() for c in table.columns)
    areas.to_file(folder / "areas.gpkg", layer="areas", driver="GPKG")
    blocks.to_file(folder / "blocks.gpkg", driver="GPKG")
    zone = shapely.Point(1700, 1900).buffer(1300).union(shapely.box(3100, 0, 3900, 4000))
    gpd.GeoDataFrame({"z": [1]}, geometry=[zone], crs=GRID_CRS).to_file(folder / "zone.gpkg")
    prepare_blocks([folder / "blocks.gpkg"], folder / "prepared")
    return folder


def _coverage(folder: Path, blocks: str, extra: str = "") -> dict:
    result = run_audit(_spec(folder, blocks, QUICK + extra))
    frame = pd.DataFrame(result.areas.drop(columns="geometry"))
    return {"coverage": result.summary["coverage"], "frame": frame.to_dict("list")}


def test_prepared_dataset_has_county_partitions(random_region):
    files = sorted(
        p.relative_to(random_region / "prepared")
        for p in (random_region / "prepared").rglob("*.parquet")
    )
    assert [str(f) for f in files] == [
        "state=01/county=001/part-0001-0000.parquet",
        "state=01/county=003/part-0001-0000.parquet",
    ]
    import pyarrow.parquet as pq

    assert "bbox" in pq.read_schema(random_region / "prepared" / files[0]).names


def _sums(folder: Path, blocks: str, **analysis: object) -> pd.DataFrame:
    """Per-tract sums of the partitions, as the audit adds them up."""
    from types import SimpleNamespace

    from pyproj import CRS

    from coverage_audit.apportion import Task, combine, run_partitions
    from coverage_audit.footprint import cut_pieces
    from coverage_audit.io.blocks import BlockColumns

    areas = gpd.read_file(folder / "areas.gpkg")
    task = Task(
        columns=BlockColumns("GEOID20", "P2_001N", (("white", "P2_005N"), ("black", "P2_006N"))),
        area_ids=np.array(sorted(areas["geoid"]), dtype=str),
        width=11,
        crs_wkt=CRS(GRID_CRS).to_wkt(),
        minority_of=1,
        served=None,
    )
    zone = gpd.read_file(folder / "zone.gpkg").geometry.union_all()
    options = {"engine": "local", "partitions": None, "dask_scheduler": None, **analysis}
    parts, _ = run_partitions(
        folder / blocks, task, cut_pieces(zone, 16), SimpleNamespace(**options)
    )
    return combine(parts, 4)


def test_same_sums_whatever_the_partitioning(random_region, monkeypatch):
    """Consistency check: 1, 4 and 16 partitions give the same sums (16 on processes)."""
    import coverage_audit.apportion as apportion

    local = _sums(random_region, "blocks.gpkg")
    assert len(local) == 16 and local["blocks"].sum() == 400
    assert local["c0"].sum() > 0
    pd.testing.assert_frame_equal(
        _sums(random_region, "blocks.gpkg", engine="dask", partitions=16), local
    )
    monkeypatch.setattr(apportion, "LOCAL_SCHEDULER", "threads")  # spawning processes is slow
    for k in (1, 4):
        pd.testing.assert_frame_equal(
            _sums(random_region, "blocks.gpkg", engine="dask", partitions=k), local
        )
    pd.testing.assert_frame_equal(_sums(random_region, "prepared", engine="dask"), local)


def test_dask_audit_equals_local(random_region):
    local = _coverage(random_region, "blocks.gpkg")
    assert local["coverage"]["apportionment"] == "blocks"
    assert _coverage(random_region, "prepared", 'engine = "dask"\n') == local


def test_local_cluster_equals_local(random_region):
    pytest.importorskip("distributed")
    from distributed import LocalCluster

    local = _coverage(random_region, "prepared")
    with LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        host="127.0.0.1",
        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
    ) as cluster:
        extra = f'engine = "dask"\ndask_scheduler = "{cluster.scheduler_address}"\n'
        assert _coverage(random_region, "prepared", extra) == local
        # One block file cut into chunks: the chunks and pieces are scattered to workers.
        assert _coverage(random_region, "blocks.gpkg", extra) == local


def test_prepare_blocks_command(people_in_uncovered_half, capsys):
    from coverage_audit.cli import main

    folder = people_in_uncovered_half
    out = folder / "prepared"
    assert main(["prepare-blocks", str(folder / "blocks.gpkg"), "--out", str(out)]) == 0
    assert "wrote 6 blocks in 1 county files" in capsys.readouterr().out
    assert main(["prepare-blocks", str(folder / "blocks.gpkg"), "--out", str(out)]) == 2
    assert "is not empty" in capsys.readouterr().err
    frame = gpd.read_parquet(out / "state=01" / "county=001" / "part-0001-0000.parquet")
    assert frame["block_row"].tolist() == [1, 2, 3, 4, 5, 6]
    # Read two features at a time: three files for the county, rows kept.
    done = prepare_blocks([folder / "blocks.gpkg"], folder / "chunked", chunk=2)
    assert done == {"blocks": 6, "files": 3, "folder": str(folder / "chunked")}
    rows = gpd.read_parquet(
        folder / "chunked" / "state=01" / "county=001" / "part-0001-0002.parquet"
    )
    assert rows["block_row"].tolist() == [5, 6]
    chunked = run_audit(_spec(folder, "chunked")).summary["coverage"]
    assert chunked["groups"]["white"]["covered_population"] == 30.0
    result = run_audit(_spec(folder, "prepared"))
    assert result.summary["coverage"]["groups"]["white"]["covered_population"] == 30.0
    ex = result.exclusions
    assert ex[ex["source"] == "blocks"]["row"].tolist() == [6]


# --- the demo region's blocks and the report ------------------------------------------------

BUNDLED = Path(__file__).resolve().parent.parent / "demo_regions" / "ostmere"


def test_demo_blocks_regenerate_and_nest(tmp_path):
    from coverage_audit.demo import write_demo_region

    out = write_demo_region(tmp_path / "ostmere")
    made = out / "delivery_blocks.toml"
    assert made.read_bytes() == (BUNDLED / "delivery_blocks.toml").read_bytes()
    blocks = gpd.read_parquet(out / "blocks.parquet")
    bundled = gpd.read_parquet(BUNDLED / "blocks.parquet")
    pd.testing.assert_frame_equal(pd.DataFrame(blocks), pd.DataFrame(bundled))
    tracts = pd.read_csv(BUNDLED / "demographics.csv", dtype={"geoid": str})
    sums = blocks.groupby(blocks["GEOID20"].str[:11])["P2_001N"].sum()
    assert np.array_equal(sums.loc[tracts["geoid"]].to_numpy(), tracts["pop_total"].to_numpy())


def test_demo_delivery_reports_both_ways(tmp_path):
    spec = load_spec(BUNDLED / "delivery_blocks.toml")
    result = run_audit(spec.with_analysis(permutations=19, enclave_draws=19, sensitivity=False))
    cov = result.summary["coverage"]
    assert cov["apportionment"] == "blocks"
    assert set(cov["blocks"]["areal_rates"]) == set(cov["groups"])
    assert cov["blocks"]["blocks_used"] == cov["blocks"]["blocks_read"] > 3000
    result.write(tmp_path / "out")
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "Where people live" in page
    assert "Counting people where they live, by census block" in page
    assert "assumed to be spread evenly within the block" in page
    areal = pd.read_csv(tmp_path / "out" / "areas.csv", dtype={"geoid": str})
    assert "covered_population_share" in areal.columns


TWO_FOOTPRINTS = """
[[footprint]]
name = "zone"
path = "zone.gpkg"

[[footprint]]
name = "right"
path = "right.gpkg"
"""


def test_comparison_change_and_sweep_count_people_by_block(people_in_uncovered_half):
    """Further footprints, the change and the threshold sweep use block-based shares."""
    folder = people_in_uncovered_half
    # "right" covers the right half of cell 1, where all of cell 1's 100 people live.
    gpd.GeoDataFrame(geometry=[shapely.box(500, 0, 1000, 1000)], crs=GRID_CRS).to_file(
        folder / "right.gpkg"
    )
    text = spec_text("", analysis_extra="sensitivity = true\n")
    text = text.replace('id = "geoid"', 'id = "geoid"\nlayer = "areas"')
    text = text.replace("[footprint]\n\n", TWO_FOOTPRINTS + "\n")
    text += BLOCKS_TABLE.format(path="blocks.gpkg")
    text += '\n[change]\nbefore = "zone"\nafter = "right"\n'
    result = run_audit(load_spec(write_spec(folder / "audit.toml", text)))
    s = result.summary
    assert s["comparison"]["apportionment"] == "blocks"
    right = next(f for f in s["comparison"]["footprints"] if f["name"] == "right")
    # Hand-computed from the blocks: "right" covers cell 1's 80 white and 10 black people
    # of 260 white and 710 black (areal weighting would give half: 40/260 and 5/710).
    assert right["groups"]["white"]["rate"] == pytest.approx(80 / 260, abs=1e-12)
    assert right["groups"]["black"]["rate"] == pytest.approx(10 / 710, abs=1e-12)
    assert result.areas.set_index("geoid").loc["01001000001", "covered_fraction_right"] == 1.0
    # Change at the 0.5 threshold, by covered population share: "zone" serves cell 3 only
    # (cell 1's people are outside it), "right" serves cell 1 only. Areal fractions would
    # have served cell 1 on both sides (0.5 each) and gained nothing.
    change = s["change"]
    assert change["apportionment"] == "blocks" and "apportionment_note" in change
    assert change["lost_service"]["ids"] == ["01001000003"]
    assert change["gained_service"]["ids"] == ["01001000001"]
    # Threshold sweep at 0.25: only cell 3 (share 1) is served by blocks; cell 1 (areal
    # fraction 0.5, share 0) is not, so 1 of 4 areas is served, not 2.
    sens = s["sensitivity"]
    assert sens["apportionment"] == "blocks"
    assert "radius_apportionment" not in sens  # a polygon footprint: no reach sweep
    first = sens["thresholds"][0]
    assert first["threshold"] == 0.25
    assert first["served_area_share"] == 0.25


def test_reach_sweep_says_it_stays_areal():
    """A points footprint's reach sweep is areal when people are placed; the key says so."""
    from types import SimpleNamespace

    from coverage_audit.apportion import change_apportionment, sweep_apportionment

    blocks = SimpleNamespace(blocks=object(), dasymetric=None)
    areal = SimpleNamespace(blocks=None, dasymetric=None)
    points = SimpleNamespace(kind="points")
    out = sweep_apportionment(blocks, points)
    assert out["apportionment"] == "blocks" and out["radius_apportionment"] == "areal"
    assert "placed again for every reach" in out["radius_note"]
    # An areal audit mixes nothing: its sections stay as they were (no key added).
    assert sweep_apportionment(areal, points) == {}
    assert change_apportionment(areal) == {}


def test_report_says_which_further_analyses_count_by_block():
    from coverage_audit.report.blocks_section import further_sentence

    summary = {
        "comparison": {"apportionment": "blocks"},
        "sensitivity": {"apportionment": "blocks", "radius_apportionment": "areal"},
    }
    text = further_sentence(summary)
    assert text.startswith(
        "The footprint comparison and the served-threshold sweep also counted people by census"
    )
    assert "The reach sweep did not" in text
    assert further_sentence({"sensitivity": {"apportionment": "areal"}}) == ""


def test_partition_crs_is_read_from_metadata(tmp_path):
    """The GeoParquet metadata names the CRS (PROJJSON); no geometry is read for it."""
    from pyproj import CRS

    from coverage_audit.apportion import _file_crs

    frame = _blocks([("010010000011001", shapely.box(0, 0, 1, 1), 1, 1, 0)])
    frame.to_crs("EPSG:4269").to_parquet(tmp_path / "b.parquet")
    assert _file_crs(tmp_path / "b.parquet").equals(CRS("EPSG:4269"))
    pd.DataFrame({"a": [1]}).to_parquet(tmp_path / "plain.parquet")
    assert _file_crs(tmp_path / "plain.parquet") is None


def test_repeated_block_ids_are_all_left_out():
    from coverage_audit.io.blocks import BlockColumns, clean_blocks

    box = shapely.box
    frame = _blocks(
        [
            ("010010000011001", box(0, 0, 1, 1), 5, 1, 1),
            ("010010000011002", box(1, 0, 2, 1), 5, 1, 1),
            ("010010000011001", box(2, 0, 3, 1), 5, 1, 1),
            ("0100100000110", box(3, 0, 4, 1), 5, 1, 1),
        ]
    )
    columns = BlockColumns("GEOID20", "P2_001N", (("white", "P2_005N"), ("black", "P2_006N")))
    clean = clean_blocks(frame, columns)
    assert clean.ids.tolist() == ["010010000011002"]
    reasons = {row: why for row, _, why in clean.excluded}
    assert reasons[1] == reasons[3] == "duplicate block id"
    assert "15-digit" in reasons[4]


def test_blocks_in_another_crs_projected_only_near_the_footprint():
    """Consistency check: projecting only the blocks whose box meets a piece gives the
    fractions of projecting every block (far blocks are exactly 0 either way)."""
    from pyproj import CRS

    from coverage_audit.apportion import Task, _measure, _project
    from coverage_audit.coverage import covered_fraction
    from coverage_audit.io.blocks import BlockColumns, clean_blocks

    rng = np.random.default_rng(20261202)
    cells = grid(20, 20, size=250.0)
    rows = [
        (f"01001000001{1000 + k:04d}", g, 10, 5, 5)
        for k, g in enumerate(cells.geometry.rotate(7, origin=(0, 0)))
    ]
    frame = _blocks(rows).to_crs("EPSG:4269")  # stored as TIGER/Line stores them
    columns = BlockColumns("GEOID20", "P2_001N", (("white", "P2_005N"), ("black", "P2_006N")))
    clean = clean_blocks(frame, columns)
    sites = shapely.points(rng.uniform(0, 5000, 6), rng.uniform(0, 5000, 6))
    pieces = np.asarray(shapely.get_parts(shapely.union_all(shapely.buffer(sites, 600.0))))
    task = Task(
        columns=columns,
        area_ids=np.array(["01001000001"]),
        width=11,
        crs_wkt=CRS(GRID_CRS).to_wkt(),
        minority_of=None,
        served=None,
    )
    envelope = np.array([-1e6, -1e6, 1e6, 1e6])
    got = _measure(clean, frame.crs, shapely.to_wkb(pieces), envelope, task, "x")
    every = covered_fraction(_project(clean.geometry, frame.crs, task.crs_wkt, "x"), pieces)
    np.testing.assert_allclose(got, every, rtol=0, atol=1e-12)
    assert (every == 0).any() and (every > 0).any()
    assert np.array_equal(got == 0, every == 0)
