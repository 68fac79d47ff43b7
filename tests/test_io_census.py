"""Census Bureau downloads, API JSON, boundary zips and several tables, read as they come.

Every fixture is made here, in the published layout named beside it (REFERENCES.md,
"Public data layouts"), with made-up values. The main check of each format: a region built
from the file gives exactly the coverage rates of the same data in tidy form.
"""

from __future__ import annotations

import csv
import json
import warnings
import zipfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from coverage_audit import run_audit
from coverage_audit.errors import InputError, IslandWarning, SpecError
from coverage_audit.io.census import annotation_reason, parse_margins, read_census_table
from coverage_audit.spec import spec_from_dict

#: A 3 x 3 grid of 0.01-degree cells in NAD83 (the CRS of TIGER/Line files), ids state 01.
CELL = 0.01
LON0, LAT0 = -100.0, 40.0
CODES = ("001", "003", "004", "005", "006", "007", "008", "009", "012")
GROUP_OF = {
    "003": "white_nh",
    "004": "black_nh",
    "005": "aian_nh",
    "006": "asian_nh",
    "007": "nhpi_nh",
    "008": "other_nh",
    "009": "multi_nh",
    "012": "hispanic",
}
FAST = {"permutations": 9, "enclave_draws": 0, "sensitivity": False}


def _cells() -> gpd.GeoDataFrame:
    boxes, ids = [], []
    for j in range(3):
        for i in range(3):
            x, y = LON0 + i * CELL, LAT0 + j * CELL
            boxes.append(shapely.box(x, y, x + CELL, y + CELL))
            ids.append(f"0100102{len(ids) + 1:02d}00")
    land = [1_000_000] * 9
    land[8] = 0  # a water-only tract, as coastal TIGER/Line tracts have
    return gpd.GeoDataFrame(
        {"GEOID": ids, "ALAND": land, "AWATER": [0] * 8 + [1_000_000]},
        geometry=boxes,
        crs="EPSG:4269",
    )


def _counts() -> pd.DataFrame:
    """Made-up B03002 estimates and margins; group counts add up within the total."""
    rng = np.random.default_rng(7)
    rows = []
    for k, geoid in enumerate(_cells()["GEOID"]):
        groups = rng.integers(0, 400, size=8)
        row = {"GEOID": geoid, "B03002_001E": int(groups.sum()) + 10 * k}
        for code, value in zip(CODES[1:], groups, strict=True):
            row[f"B03002_{code}E"] = int(value)
        for code in CODES:
            row[f"B03002_{code}M"] = int(rng.integers(5, 90))
        rows.append(row)
    return pd.DataFrame(rows)


def _write_areas(tmp: Path) -> None:
    _cells().to_file(tmp / "areas.gpkg", layer="tracts", driver="GPKG")
    zone = shapely.box(LON0 - 0.001, LAT0 - 0.001, LON0 + 1.5 * CELL, LAT0 + 2.2 * CELL)
    gpd.GeoDataFrame(geometry=[zone], crs="EPSG:4269").to_file(tmp / "zone.gpkg", driver="GPKG")


def _write_tidy(tmp: Path, counts: pd.DataFrame) -> Path:
    counts.to_csv(tmp / "tidy.csv", index=False)
    return tmp / "tidy.csv"


def _write_download(path: Path, counts: pd.DataFrame, *, prefix: str = "1400000US") -> None:
    """data.census.gov CSV: codes row, labels row, every value quoted, trailing comma.

    Layout: data.census.gov table downloads (REFERENCES.md, public data layouts).
    """
    codes = ["GEO_ID", "NAME"] + [c for c in counts.columns if c != "GEOID"]
    labels = ["Geography", "Geographic Area Name"] + [
        ("Estimate!!Total:" if c.endswith("E") else "Margin of Error!!Total:") for c in codes[2:]
    ]
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, quoting=csv.QUOTE_ALL, lineterminator=",\n")
        writer.writerow(codes)
        writer.writerow(labels)
        for _, row in counts.iterrows():
            name = f"Census Tract {row['GEOID'][5:9]}; Fictional County; Nowhere"
            writer.writerow([prefix + row["GEOID"], name] + [str(row[c]) for c in codes[2:]])


def _write_api_json(path: Path, counts: pd.DataFrame) -> None:
    """Census API JSON: header row, all strings, geography columns last.

    Layout: Census API responses (REFERENCES.md, public data layouts).
    """
    variables = [c for c in counts.columns if c != "GEOID"]
    data = [["NAME", *variables, "state", "county", "tract"]]
    for _, row in counts.iterrows():
        g = row["GEOID"]
        data.append(["Tract", *[str(row[v]) for v in variables], g[:2], g[2:5], g[5:]])
    path.write_text(json.dumps(data), encoding="utf-8")


def _spec(tmp: Path, population: dict, **extra) -> dict:
    data = {
        "title": "downloads",
        "areas": {"path": str(tmp / "areas.gpkg"), "layer": "tracts", "id": "GEOID"},
        "population": population,
        "footprint": {"path": str(tmp / "zone.gpkg")},
        "analysis": FAST,
    }
    data.update(extra)
    return data


def _tidy_population() -> dict:
    return {
        "total": "B03002_001E",
        "reference": "white_nh",
        "derive_minority": True,
        "groups": {GROUP_OF[c]: f"B03002_{c}E" for c in CODES[1:]},
    }


def _rates(result) -> dict:
    return {
        g: (v["population"], v["covered_population"], v["rate"], v["ratio"])
        for g, v in result.summary["coverage"]["groups"].items()
    }


@pytest.fixture
def region(tmp_path):
    _write_areas(tmp_path)
    counts = _counts()
    tidy = _write_tidy(tmp_path, counts)
    spec = _spec(tmp_path, _tidy_population())
    spec["areas"]["table"] = str(tidy)
    expected = _rates(run_audit(spec_from_dict(spec)))
    return tmp_path, counts, expected


def _run(spec: dict):
    return run_audit(spec_from_dict(spec))


def test_census_download_csv_with_preset_gives_the_tidy_rates(region):
    tmp, counts, expected = region
    _write_download(tmp / "download.csv", counts)
    spec = _spec(tmp, {"preset": "acs_b03002"}, table=[{"path": str(tmp / "download.csv")}])
    result = _run(spec)
    assert _rates(result) == expected  # exactly: same numbers, another layout
    entry = result.summary["inputs"]["tables"][0]
    assert (entry["rows"], entry["matched"], entry["unmatched"], entry["match_rate"]) == (
        9,
        9,
        0,
        1.0,
    )
    assert "data.census.gov" in entry["layout"] and "tract" in entry["layout"]
    # The preset pairs each estimate with its margin, for the survey-error work.
    pop = result.inputs.population
    assert pop.group_moes["black_nh"] == "B03002_004M"
    assert pop.total_moe == "B03002_001M"
    assert result.inputs.margins["B03002_008E"] == "B03002_008M"
    assert result.summary["group_labels"]["black_nh"] == "Black alone, not Hispanic"


def test_zipped_download_found_by_content_not_name(region):
    tmp, counts, expected = region
    _write_download(tmp / "inner.csv", counts)
    with zipfile.ZipFile(tmp / "download.zip", "w") as archive:
        # Member names as downloads have used them; the data file is found by its first row.
        archive.writestr(
            "ACSDT5Y2099.B03002-Column-Metadata.csv", "Column Name,Label\nGEO_ID,Geography\n"
        )
        archive.writestr("ACSDT5Y2099.B03002-Table-Notes.txt", "Notes about the table\n")
        archive.write(tmp / "inner.csv", "ACSDT5Y2099.B03002-Data.csv")
    spec = _spec(tmp, {"preset": "acs_b03002"}, table=[{"path": str(tmp / "download.zip")}])
    assert _rates(_run(spec)) == expected


def test_census_api_json_gives_the_tidy_rates(region):
    tmp, counts, expected = region
    _write_api_json(tmp / "api.json", counts)
    read = read_census_table(tmp / "api.json", id_column=None, role="t")
    assert read.layout == "Census API JSON" and read.level == "tract"
    assert list(read.frame["GEOID"])[:2] == ["01001020100", "01001020200"]
    spec = _spec(tmp, {"preset": "acs_b03002"}, table=[{"path": str(tmp / "api.json")}])
    assert _rates(_run(spec)) == expected


def test_tiger_zip_with_geoid_found_and_water_only_listed(region):
    tmp, counts, expected = region
    shp = tmp / "shp"
    shp.mkdir()
    # TIGER/Line layout: zipped shapefile tl_YYYY_SS_tract, fields GEOID, ALAND, AWATER,
    # NAD83 geographic (REFERENCES.md, public data layouts).
    _cells().to_file(shp / "tl_2099_01_tract.shp")
    with zipfile.ZipFile(tmp / "tl_2099_01_tract.zip", "w") as archive:
        for f in shp.iterdir():
            archive.write(f, f.name)
    spec = _spec(tmp, _tidy_population())
    spec["areas"] = {"path": str(tmp / "tl_2099_01_tract.zip"), "table": str(tmp / "tidy.csv")}
    result = _run(spec)
    # A shapefile stores outer rings clockwise (the GeoPackage kept them as written), so
    # intersections run over the vertices in another order: equal to the last bits only.
    got = _rates(result)
    assert got.keys() == expected.keys()
    for g, values in expected.items():
        assert got[g] == pytest.approx(values, rel=1e-12, abs=0), g
    assert result.summary["areas"]["water_only"] == ["01001020900"]
    assert result.manifest["inputs"][0]["crs"] == "EPSG:4269"


def test_two_tables_joined_and_a_shared_column_is_an_error(region):
    tmp, counts, expected = region
    first = counts[["GEOID"] + [c for c in counts.columns if c[-4:-1] in ("001", "003", "004")]]
    second = counts.drop(columns=[c for c in first.columns if c != "GEOID"])
    _write_download(tmp / "part1.csv", first)
    _write_api_json(tmp / "part2.json", second)
    spec = _spec(
        tmp,
        {"preset": "acs_b03002"},
        table=[{"path": str(tmp / "part1.csv")}, {"path": str(tmp / "part2.json")}],
    )
    result = _run(spec)
    assert _rates(result) == expected
    assert [t["match_rate"] for t in result.summary["inputs"]["tables"]] == [1.0, 1.0]
    _write_api_json(tmp / "again.json", first)
    spec["table"] = [{"path": str(tmp / "part1.csv")}, {"path": str(tmp / "again.json")}]
    with pytest.raises(
        InputError, match=r"'B03002_001E' is in two demographics tables.*part1.*again"
    ):
        _run(spec)


def test_annotation_makes_the_count_missing_and_is_listed(region):
    tmp, counts, _ = region
    text = counts.astype(object)
    text.loc[4, "B03002_004E"] = "-"  # no estimate
    text.loc[2, "B03002_004M"] = "*****"  # controlled estimate: margin 0
    text.loc[3, "B03002_004M"] = "**"
    _write_download(tmp / "download.csv", text)
    spec = _spec(tmp, {"preset": "acs_b03002"}, table=[{"path": str(tmp / "download.csv")}])
    result = _run(spec)
    ex = result.exclusions
    row = ex[ex["id"] == "01001020500"]
    assert list(row["source"]) == ["areas"]
    assert "annotation '-'" in row["reason"].iloc[0] and "B03002_004E" in row["reason"].iloc[0]
    # Same as the tidy table without that area.
    tidy = counts.drop(index=4)
    tidy.to_csv(tmp / "tidy4.csv", index=False)
    spec2 = _spec(tmp, _tidy_population())
    spec2["areas"]["table"] = str(tmp / "tidy4.csv")
    # No warning is due here: the ring of eight boxes around the missing centre is one
    # connected region. (Their shared edges differ by rounding after x + CELL; contiguity
    # that matched vertices exactly used to split them and warn about an island.)
    with warnings.catch_warnings():
        warnings.simplefilter("error", IslandWarning)
        expected = _rates(_run(spec2))
    assert _rates(result) == expected
    # The margins reach the survey-error work as the group's margin column: ***** is 0,
    # ** is no margin (counted as missing).
    margins = result.areas.set_index("GEOID")["black_nh_moe"]
    assert margins["01001020300"] == 0.0
    assert result.inputs.margins_missing == {"B03002_004M": 1}


@pytest.mark.parametrize(
    ("value", "meaning"),
    [
        ("-", "no estimate"),
        ("N", "not available"),
        ("(X)", "not applicable"),
        ("**", "no margin"),
        ("***", "open-ended"),
        ("*****", "controlled"),
        ("250,000+", "top-coded"),
        ("2,500-", "bottom-coded"),
        ("-666666666", "sentinel"),
        ("12", None),
        ("-3", None),
    ],
)
def test_annotation_symbols(value, meaning):
    # Symbols per the Census Bureau's ACS data notes (REFERENCES.md, from memory).
    reason = annotation_reason(value)
    assert (reason is None) == (meaning is None)
    if meaning:
        assert meaning in reason


def test_controlled_margin_is_zero():
    # ***** and the API's -555555555: controlled estimate, margin 0 (ACS data notes, from
    # memory); ** and other sentinels: no margin.
    out = parse_margins(pd.Series(["*****", "12", "**", "-555555555", "-222222222"]))
    assert out.iloc[0] == 0.0 and out.iloc[1] == 12.0 and out.iloc[3] == 0.0
    assert np.isnan(out.iloc[2]) and np.isnan(out.iloc[4])


def test_served_ids_without_zeros_fail_with_a_hint(region):
    tmp, _, _ = region
    (tmp / "served.txt").write_text("1001020100\n1001020200\n", encoding="utf-8")
    spec = _spec(tmp, _tidy_population(), footprint={"served_ids": str(tmp / "served.txt")})
    spec["areas"]["table"] = str(tmp / "tidy.csv")
    with pytest.raises(InputError, match=r"none matched.*leading zeros.*id_width = 11"):
        _run(spec)


@pytest.mark.parametrize(
    ("ids", "cause"),
    [
        (["1400000US01001020100", "1400000US01001020200"], "summary-level prefix"),
        (["010010201001", "010010202001", "010010203002"], "another geography level"),
        (["01001990100", "01001990200"], "another vintage"),
        (["99901", "99902"], "ZIP codes"),
    ],
)
def test_unmatched_ids_name_the_likely_cause(region, ids, cause):
    tmp, _, _ = region
    spec = _spec(tmp, _tidy_population(), footprint={"ids": ids})
    spec["areas"]["table"] = str(tmp / "tidy.csv")
    with pytest.raises(InputError, match=cause):
        _run(spec)


def test_table_matching_few_areas_is_an_error_showing_ids(region):
    tmp, counts, _ = region
    wrong = counts.copy()
    wrong.loc[:6, "GEOID"] = [f"0100188{k:02d}00" for k in range(7)]
    wrong.to_csv(tmp / "wrong.csv", index=False)
    spec = _spec(tmp, _tidy_population())
    spec["areas"]["table"] = str(tmp / "wrong.csv")
    # 2 of 9 areas (22%) find a row: below the stated 50%.
    with pytest.raises(InputError, match=r"only 22\.2% of the areas.*'0100188"):
        _run(spec)


def test_preset_rejects_unknown_name_and_groups_choose(tmp_path):
    base = {"areas": {"path": "a.gpkg", "id": "g"}, "footprint": {"path": "f.gpkg"}}
    with pytest.raises(SpecError, match="preset"):
        spec_from_dict(base | {"population": {"preset": "acs_nope"}})
    spec = spec_from_dict(base | {"population": {"preset": "acs_b03002", "groups": ["black_nh"]}})
    # The reference stays in: minority = total - not Hispanic White alone (B03002_003E).
    assert spec.population.group_columns == {"white_nh": "B03002_003E", "black_nh": "B03002_004E"}
    assert spec.population.derive_minority and spec.population.reference == "white_nh"


# --- ZIP-code zones ------------------------------------------------------------------

#: 2020 ZCTA-to-tract relationship file header, pipe-delimited (REFERENCES.md; field names
#: from memory of the published record layout).
REL_HEADER = (
    "OID_ZCTA5_20|GEOID_ZCTA5_20|NAMELSAD_ZCTA5_20|AREALAND_ZCTA5_20|AREAWATER_ZCTA5_20|"
    "MTFCC_ZCTA5_20|CLASSFP_ZCTA5_20|FUNCSTAT_ZCTA5_20|OID_TRACT_20|GEOID_TRACT_20|"
    "NAMELSAD_TRACT_20|AREALAND_TRACT_20|AREAWATER_TRACT_20|MTFCC_TRACT_20|CLASSFP_TRACT_20|"
    "FUNCSTAT_TRACT_20|AREALAND_PART|AREAWATER_PART"
)


def _rel_row(zcta: str, tract: str, tract_land: int, part: int) -> str:
    return (
        f"1|{zcta}|ZCTA5 {zcta}|5000000|0|G6350|B5|S|2|{tract}|Census Tract|{tract_land}|0|"
        f"G5020|S1|S|{part}|0"
    )


def test_zips_through_the_relationship_file(region):
    tmp, _, _ = region
    lines = [
        REL_HEADER,
        _rel_row("99901", "01001020100", 1_000_000, 400_000),
        _rel_row("99902", "01001020100", 1_000_000, 600_000),
        _rel_row("99901", "01001020200", 1_000_000, 1_000_000),
        _rel_row("99903", "01001020300", 800_000, 200_000),
        _rel_row("99901", "01001020300", 800_000, 600_000),
    ]
    (tmp / "rel.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (tmp / "zips.csv").write_text("zip,name\n99901,a\n99903,b\n99999,po box\n", encoding="utf-8")
    spec = _spec(
        tmp,
        _tidy_population(),
        footprint={"zips": str(tmp / "zips.csv"), "zcta_relationship": str(tmp / "rel.txt")},
    )
    spec["areas"]["table"] = str(tmp / "tidy.csv")
    result = _run(spec)
    cf = result.areas.set_index("GEOID")["covered_fraction"]
    # By hand: land of the parts in listed ZCTAs over the tract's land.
    assert cf["01001020100"] == 0.4  # 400,000 / 1,000,000 (99902 not listed)
    assert cf["01001020200"] == 1.0
    assert cf["01001020300"] == 1.0  # (200,000 + 600,000) / 800,000
    assert cf["01001020400"] == 0.0
    ex = result.exclusions
    po = ex[ex["source"] == "zips:footprint"]
    assert list(po["id"]) == ["99999"] and "no ZCTA" in po["reason"].iloc[0]
    assert result.summary["footprint"]["kind"] == "zips"


def test_zips_through_a_crosswalk_ratio(region):
    tmp, _, _ = region
    (tmp / "zips.txt").write_text("99901\n", encoding="utf-8")
    (tmp / "xwalk.csv").write_text(
        "zip,tract,res_ratio\n99901,01001020100,0.25\n99902,01001020100,0.75\n"
        "99901,01001020500,1.0\n",
        encoding="utf-8",
    )
    spec = _spec(
        tmp,
        _tidy_population(),
        footprint={
            "zips": str(tmp / "zips.txt"),
            "crosswalk": str(tmp / "xwalk.csv"),
            "crosswalk_ratio": "res_ratio",
        },
    )
    spec["areas"]["table"] = str(tmp / "tidy.csv")
    cf = _run(spec).areas.set_index("GEOID")["covered_fraction"]
    assert (cf["01001020100"], cf["01001020500"], cf["01001020200"]) == (0.25, 1.0, 0.0)


def test_footprint_polygons_chosen_by_ids_equal_the_chosen_file(region):
    tmp, _, _ = region
    zones = gpd.GeoDataFrame(
        {"ZCTA5CE20": ["99901", "99902", "99903"]},
        geometry=[
            shapely.box(LON0, LAT0, LON0 + 1.5 * CELL, LAT0 + CELL),
            shapely.box(LON0 + 2 * CELL, LAT0, LON0 + 3 * CELL, LAT0 + 3 * CELL),
            shapely.box(LON0, LAT0 + 2 * CELL, LON0 + CELL, LAT0 + 3 * CELL),
        ],
        crs="EPSG:4269",
    )
    zones.to_file(tmp / "zcta.gpkg", driver="GPKG")
    zones.iloc[[0, 2]].to_file(tmp / "chosen.gpkg", driver="GPKG")
    spec = _spec(
        tmp,
        _tidy_population(),
        footprint={"path": str(tmp / "zcta.gpkg"), "id": "ZCTA5CE20", "ids": ["99901", "99903"]},
    )
    spec["areas"]["table"] = str(tmp / "tidy.csv")
    got = _rates(_run(spec))
    spec["footprint"] = {"path": str(tmp / "chosen.gpkg")}
    assert got == _rates(_run(spec))
    (tmp / "ids.txt").write_text("99901\n99903\n", encoding="utf-8")
    spec["footprint"] = {
        "path": str(tmp / "zcta.gpkg"),
        "id": "ZCTA5CE20",
        "ids": str(tmp / "ids.txt"),
    }
    assert _rates(_run(spec)) == got


# --- check ---------------------------------------------------------------------------


def _toml(tmp: Path, body: str) -> Path:
    path = tmp / "audit.toml"
    path.write_text(body, encoding="utf-8")
    return path


def test_check_lists_layouts_match_rates_and_fails_where_run_would(region, capsys):
    from coverage_audit.cli import main

    tmp, counts, _ = region
    _write_download(tmp / "download.csv", counts)
    body = (
        'title = "t"\n[areas]\npath = "areas.gpkg"\nlayer = "tracts"\n'
        '[[table]]\npath = "download.csv"\n[population]\npreset = "acs_b03002"\nunit = "people"\n'
        '[footprint]\npath = "zone.gpkg"\n'
    )
    spec = _toml(tmp, body)
    assert main(["check", str(spec)]) == 0
    out = capsys.readouterr().out
    assert "id column GEOID" in out
    assert "Census table download (data.census.gov CSV), tract level): 9 rows, 9 matched" in out
    assert (
        "(100.0%)" in out and "Black alone, not Hispanic = B03002_004E (margin B03002_004M)" in out
    )
    assert "water-only areas (ALAND = 0), kept: 01001020900" in out
    (tmp / "served.txt").write_text("1001020100\n", encoding="utf-8")
    spec = _toml(tmp, body.replace('path = "zone.gpkg"', 'served_ids = "served.txt"'))
    assert main(["check", str(spec)]) == 2
    captured = capsys.readouterr()
    assert "9 matched" in captured.out  # the inputs read before the failing one are listed
    assert "id_width = 11" in captured.err


def test_console_uses_labels_and_unit(region):
    import io

    from coverage_audit.console import print_summary

    tmp, counts, _ = region
    _write_download(tmp / "download.csv", counts)
    spec = _spec(
        tmp,
        {"preset": "acs_b03002", "unit": "households"},
        table=[{"path": str(tmp / "download.csv")}],
    )
    result = _run(spec)
    stream = io.StringIO()
    print_summary(result, {"summary": tmp / "summary.json"}, seconds=1.0, stream=stream)
    text = stream.getvalue()
    assert "Hispanic or Latino" in text and "households" in text
    assert "table download.csv (Census table download" in text and "9 of 9 rows matched" in text


# --- bad input: one message naming the file, row or column, and what to do ------------


@pytest.mark.parametrize(
    ("name", "content", "message"),
    [
        ("bad.json", '[["NAME", "B01001_001E"], ["x"', r"bad\.json.*not valid JSON"),
        (
            "ragged.json",
            '[["NAME","B1","state"],["a","1"]]',
            r"ragged\.json.*row 1 has a different",
        ),
        ("noid.csv", "name,total\na,1\n", r"noid\.csv.*has no id column.*id = "),
    ],
)
def test_bad_tables_are_named(tmp_path, name, content, message):
    (tmp_path / name).write_text(content, encoding="utf-8")
    with pytest.raises(InputError, match=message):
        read_census_table(tmp_path / name, id_column=None, role="demographics table")


def test_zip_without_a_download_lists_its_files(tmp_path):
    with zipfile.ZipFile(tmp_path / "t.zip", "w") as archive:
        archive.writestr("notes.txt", "nothing here\n")
    with pytest.raises(InputError, match=r"t\.zip' holds no Census table download.*notes\.txt"):
        read_census_table(tmp_path / "t.zip", id_column=None, role="demographics table")


def test_bad_zip_list_and_relationship_file_are_named(tmp_path):
    from coverage_audit.io.zcta import read_zip_list, relationship_fractions

    (tmp_path / "zips.txt").write_text("00101\nABCDE\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"zips\.txt' row 2: 'ABCDE' is not a ZIP code"):
        read_zip_list(tmp_path / "zips.txt", role="zips")
    (tmp_path / "rel.txt").write_text("A|B\n1|2\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"rel\.txt' has no GEOID_ZCTA5"):
        relationship_fractions(["00101"], tmp_path / "rel.txt", role="relationship")


def test_groups_naming_download_estimates_get_their_margins(region):
    tmp, counts, _ = region
    _write_download(tmp / "download.csv", counts)
    population = {
        "total": "B03002_001E",
        "reference": "white",
        "groups": {
            "white": "B03002_003E",
            "black": {"column": "B03002_004E", "label": "Black, not Hispanic"},
        },
    }
    spec = _spec(tmp, population, table=[{"path": str(tmp / "download.csv")}])
    result = _run(spec)
    pop = result.inputs.population
    assert pop.group_moes == {"white": "B03002_003M", "black": "B03002_004M"}
    assert pop.total_moe == "B03002_001M"
    assert result.summary["group_labels"] == {"white": "white", "black": "Black, not Hispanic"}
    assert result.inputs.margin_columns["black"] == "black_moe"


def test_report_lists_joins_with_layout_and_rate(region):
    from coverage_audit.report.inputs_sections import joins_part

    tmp, counts, _ = region
    _write_download(tmp / "download.csv", counts)
    spec = _spec(tmp, {"preset": "acs_b03002"}, table=[{"path": str(tmp / "download.csv")}])
    html = joins_part(_run(spec).summary)
    assert "download.csv" in html and "data.census.gov" in html and "100.0%" in html
    assert joins_part({"areas": {}}) == ""


def test_id_column_candidates_and_prefix_levels(tmp_path):
    # GEO_ID prefixes per the data.census.gov layout (REFERENCES.md): 1500000US block group.
    (tmp_path / "bg.csv").write_text(
        '"GEO_ID","NAME","B01003_001E",\n"Geography","Geographic Area Name","Estimate!!Total",\n'
        '"1500000US010010201001","Block Group 1","12",\n',
        encoding="utf-8",
    )
    read = read_census_table(tmp_path / "bg.csv", id_column=None, role="t")
    assert read.level == "block group" and read.prefix == "1500000US"
    assert list(read.frame["GEO_ID"]) == ["010010201001"]
    assert list(read.frame.columns) == ["GEO_ID", "NAME", "B01003_001E"]  # phantom column gone
    (tmp_path / "ff.csv").write_text(
        "GEO.id,GEO.id2,GEO.display-label,HD01_VD01\nId,Id2,Geography,Estimate; Total\n"
        "1400000US01001020100,01001020100,Tract 201,5\n",
        encoding="utf-8",
    )
    read = read_census_table(tmp_path / "ff.csv", id_column=None, role="t")
    assert read.id_column == "GEO.id2" and list(read.frame["GEO.id2"]) == ["01001020100"]


def test_api_json_zcta_geography(tmp_path):
    # Census API responses for ZCTAs end with a "zip code tabulation area" column
    # (REFERENCES.md layout; column name from memory).
    (tmp_path / "z.json").write_text(
        '[["NAME","B01003_001E","zip code tabulation area"],["ZCTA5 00101","12","00101"]]',
        encoding="utf-8",
    )
    read = read_census_table(tmp_path / "z.json", id_column=None, role="t")
    assert read.level == "ZCTA" and list(read.frame["GEOID"]) == ["00101"]
