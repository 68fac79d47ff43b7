"""The lending review from HMDA-layout records: reader, sets, filters, categories, tests.

Fixtures are small made-up files in the published public layout (every field of the
public data-field documentation, in order); expected figures are counted by hand from the
rows written below, and every test statistic is checked against statsmodels
(``proportions_ztest``) and scipy (``fisher_exact``) used as oracles.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import fisher_exact
from statsmodels.stats.proportion import proportions_ztest

from coverage_audit import load_spec, run_audit
from coverage_audit.errors import InputError, SpecError
from coverage_audit.io.hmda import PUBLIC_FIELDS, RecordFilters, RecordReader
from coverage_audit.stats.lending import (
    band_peers,
    compare_shares,
    lmi_flags,
    share_flags,
    smallest_expected,
)

from .conftest import GRID_CRS, write_two_by_two

pytest_plugins = ["tests.browser"]

A = "9999TESTLENDERA00001"
B = "9999TESTLENDERB00002"
C = "9999TESTLENDERC00003"
T = [f"01001{k:06d}" for k in range(1, 5)]  # the four cells of a 2 x 2 grid
#: Appended tract fields written into the records: minority % and income % by tract.
#: Tract 2 sits at exactly 50% minority and exactly 80% income (boundaries).
TRACT_PCT = {
    T[0]: ("20.00", "120.00"),
    T[1]: ("50.00", "80.00"),
    T[2]: ("90.00", "79.99"),
    T[3]: ("75.00", "50.00"),
}


def record(lei: str, tract: str, action: str, **fields: str) -> dict[str, str]:
    row = {name: "NA" for name in PUBLIC_FIELDS}
    minority, income = TRACT_PCT.get(tract, ("NA", "NA"))
    row.update(
        {
            "activity_year": "2022",
            "lei": lei,
            "derived_msa-md": "90010",
            "county_code": tract[:5] if tract != "NA" else "NA",
            "census_tract": tract,
            "action_taken": action,
            "loan_type": "1",
            "loan_purpose": "1",
            "lien_status": "1",
            "occupancy_type": "1",
            "total_units": "1",
            "derived_race": "White",
            "derived_ethnicity": "Not Hispanic or Latino",
            "tract_minority_population_percent": minority,
            "tract_to_msa_income_percentage": income,
        }
    )
    row.update({k.replace("__", "-"): v for k, v in fields.items()})
    return row


def rows_of(lei: str, tract: str, action: str, n: int, **fields: str) -> list[dict[str, str]]:
    return [record(lei, tract, action, **fields) for _ in range(n)]


def hand_records() -> list[dict[str, str] | str]:
    """The made-up file. Entries that are strings are written as raw lines (malformed)."""
    rows: list[dict[str, str] | str] = []
    # Lender A (the subject): tract 1: 6 originated, 2 denied; tract 2: 1 originated,
    # 1 purchased, 1 preapproval denied; tract 4: 1 withdrawn.
    rows += rows_of(A, T[0], "1", 6) + rows_of(
        A, T[0], "3", 2, derived_race="Black or African American"
    )
    rows += rows_of(A, T[1], "1", 1) + rows_of(A, T[1], "6", 1) + rows_of(A, T[1], "7", 1)
    rows += rows_of(A, T[3], "4", 1)
    # Lender B: tract 1: 2 originated; tract 2: 4 originated, 2 denied; tract 3:
    # 3 originated; tract 4: 1 closed for incompleteness.
    rows += rows_of(B, T[0], "1", 2) + rows_of(B, T[1], "1", 4) + rows_of(B, T[1], "3", 2)
    rows += rows_of(B, T[2], "1", 3) + rows_of(B, T[3], "5", 1)
    # Lender C: tract 3: 2 originated, 1 denied.
    rows += rows_of(C, T[2], "1", 2) + rows_of(C, T[2], "3", 1)
    # Outside the filters (counted, not listed): a 2019 record, another market, a
    # home-improvement loan (purpose 2).
    rows += [record(A, T[0], "1", activity_year="2019")]
    rows += [record(B, T[0], "1", derived_msa__md="90020")]
    rows += [record(C, T[0], "1", loan_purpose="2")]
    # Malformed (listed with their line): NA tract, a 10-digit tract, an unpublished
    # action code, a wrong column count.
    rows += [record(A, "NA", "1")]
    rows += [record(A, "0100100000", "1")]
    rows += [record(B, T[0], "9")]
    rows += ["2022|" + A + "|90010|too|few"]
    return rows


#: Line numbers (header = line 1) of the malformed rows above, by reason.
MALFORMED_LINES = {
    32: "census tract NA",
    33: "census tract not 11 digits",
    34: "action_taken outside the published codes",
    35: "wrong column count",
}


def write_records(path: Path, rows: list, delimiter: str = "|", quote: bool = False) -> Path:
    def fmt(v: str) -> str:
        return f'"{v}"' if quote else v

    lines = [delimiter.join(fmt(f) for f in PUBLIC_FIELDS)]
    for row in rows:
        if isinstance(row, str):
            lines.append(row.replace("|", delimiter))
        else:
            lines.append(delimiter.join(fmt(row[f]) for f in PUBLIC_FIELDS))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


LENDING_SPEC = """
title = "lending test"
[areas]
path = "areas.gpkg"
id = "geoid"
[population]
total = "total"
reference = "white"
derive_minority = true
income_ratio = "income"
{population_extra}
[population.groups]
white = "white"
black = "black"
[footprint]
path = "zone.gpkg"
[analysis]
analysis_crs = "{crs}"
permutations = 19
enclave_draws = 19
sensitivity = false
[output]
map = false
report = false
[lending]
path = "{records}"
lender = "{lender}"
lender_name = "Test Lender A"
years = [2022]
markets = ["90010"]
purposes = [1, 31, 32]
black_hispanic_groups = ["black"]
{lending_extra}
"""


@pytest.fixture
def region(tmp_path: Path) -> Path:
    return build_region(tmp_path)


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """The default review of the hand-built region, run once for the tests that read it."""
    return review(build_region(tmp_path_factory.mktemp("base")))


def build_region(tmp_path: Path) -> Path:
    """A 2 x 2 grid: minority shares 0.2, 0.75, 0.9, 0.75; income 120, 80, 79.9, 50; the
    footprint covers the left half of tract 1 and all of tract 3 (both served)."""
    write_two_by_two(tmp_path, income=[120.0, 80.0, 79.9, 50.0])
    write_records(tmp_path / "records.txt", hand_records())
    return tmp_path


def review(
    folder: Path,
    lending_extra: str = "",
    population_extra: str = "",
    records: str = "records.txt",
    lender: str = A,
):
    (folder / "audit.toml").write_text(
        LENDING_SPEC.format(
            crs=GRID_CRS,
            records=records,
            lender=lender,
            lending_extra=lending_extra,
            population_extra=population_extra,
        ),
        encoding="utf-8",
    )
    return run_audit(load_spec(folder / "audit.toml"))


def counts(entry: dict) -> tuple[int, int, int, int]:
    return entry["lender_count"], entry["lender_total"], entry["peer_count"], entry["peer_total"]


# ------------------------------------------------------------------ statistics vs oracles


@pytest.mark.parametrize(
    ("x1", "n1", "x2", "n2"),
    [(10, 100, 300, 1000), (2, 10, 13, 15), (45, 60, 30, 60), (0, 12, 5, 40)],
)
def test_z_test_matches_statsmodels_and_fisher_matches_scipy(x1, n1, x2, n2):
    cmp = compare_shares(x1, n1, x2, n2, small_cell=1e9)  # always compute Fisher
    # Oracle: statsmodels proportions_ztest (pooled standard error, two-sided).
    z, p = proportions_ztest([x1, x2], [n1, n2])
    assert cmp.z == pytest.approx(z, rel=1e-12)
    assert cmp.p_two_sided == pytest.approx(p, rel=1e-12)
    # Oracle: scipy fisher_exact, two-sided.
    assert cmp.fisher_p == pytest.approx(
        fisher_exact([[x1, n1 - x1], [x2, n2 - x2]]).pvalue, rel=1e-12
    )
    assert cmp.lender_share == pytest.approx(x1 / n1, rel=1e-15)
    assert cmp.ratio == pytest.approx((x1 / n1) / (x2 / n2), rel=1e-12)


def test_mantel_haenszel_matches_statsmodels():
    from statsmodels.stats.contingency_tables import StratifiedTable

    from coverage_audit.stats.lending import mantel_haenszel

    tables = [(1, 2, 4, 4), (2, 3, 0, 11), (5, 40, 30, 60), (0, 1, 0, 0)]
    result = mantel_haenszel(tables)
    # Oracle: statsmodels StratifiedTable (strata with fewer than 2 records left out).
    oracle = StratifiedTable([np.array([[a, n - a], [c, m - c]]) for a, n, c, m in tables[:3]])
    test = oracle.test_null_odds(correction=False)
    assert result.strata == 3
    assert result.odds_ratio_mh == pytest.approx(oracle.oddsratio_pooled, rel=1e-12)
    assert result.statistic == pytest.approx(test.statistic, rel=1e-12)
    assert result.p_value == pytest.approx(test.pvalue, rel=1e-9)
    assert result.below_peers  # OR 0.275, p 0.001


def test_z_statistic_by_hand():
    # By hand: p = 310/1100; se = sqrt(p(1-p)(1/100 + 1/1000)) = 0.0471843...;
    # z = (0.1 - 0.3) / se = -4.2386928 (two-proportion z-test, pooled standard error).
    cmp = compare_shares(10, 100, 300, 1000)
    assert cmp.z == pytest.approx(-4.2386928, abs=5e-7)
    assert cmp.difference == pytest.approx(-0.2, abs=1e-15)
    assert cmp.fisher_p is None and cmp.test == "z"  # smallest expected cell 28.2 >= 5
    assert cmp.below_peers and not cmp.above_peers


def test_fisher_by_hand():
    # Table [[6, 2], [1, 4]]: hypergeometric probabilities over 1716 = C(13, 7) tables
    # with the same margins: 28, 280, 700, 560, 140, 8; the two-sided p sums those not
    # above the observed 140: (28 + 140 + 8) / 1716 (Fisher's exact test, by hand).
    cmp = compare_shares(6, 8, 1, 5)
    assert cmp.test == "fisher"  # smallest expected cell 5 * 6 / 13 = 2.31 < 5
    assert smallest_expected(6, 8, 1, 5) == pytest.approx(30 / 13, rel=1e-12)
    assert cmp.fisher_p == pytest.approx(176 / 1716, rel=1e-12)
    assert cmp.p_value == cmp.fisher_p and not cmp.below_peers and not cmp.above_peers


def test_flag_needs_significance_and_direction():
    assert compare_shares(1, 100, 50, 100).below_peers
    assert compare_shares(50, 100, 1, 100).above_peers
    assert not compare_shares(50, 100, 50, 100, alpha=0.05).below_peers
    with pytest.raises(SpecError, match="alpha"):
        compare_shares(1, 2, 1, 2, alpha=1.0)
    with pytest.raises(ValueError, match="exceeds"):
        compare_shares(3, 2, 1, 2)


def test_band_is_inclusive_at_both_ends():
    # A band of [0.5, 2.0] around 100 applications (common practice, no single source):
    # exactly 50 and exactly 200 are peers, 49 and 201 are not.
    vol = {"S": 100, "a": 50, "b": 49, "c": 200, "d": 201, "e": 120}
    assert band_peers(vol, "S", (0.5, 2.0)) == ("a", "c", "e")
    assert band_peers({"S": 0, "a": 3}, "S") == ()


def test_category_boundaries():
    # Majority-minority: above 50% (exactly 50% is not) or, configurably, at or above.
    assert share_flags(np.array([0.5, 0.5000001, np.nan]), 0.5).tolist()[:2] == [0.0, 1.0]
    assert share_flags(np.array([0.5]), 0.5, "at_or_above").tolist() == [1.0]
    assert np.isnan(share_flags(np.array([np.nan]), 0.5)[0])
    # LMI: below 80% of the area median; exactly 80 is middle-income (12 CFR 228.12(m)).
    assert lmi_flags(np.array([80.0, 79.99, 49.9, 120.0])).tolist() == [0.0, 1.0, 1.0, 0.0]


# ------------------------------------------------------------------ the reader


def test_reader_counts_and_lists_malformed_records(tmp_path):
    path = write_records(tmp_path / "r.txt", hand_records())
    reader = RecordReader(
        path,
        ["derived_msa-md", "loan_purpose"],
        filters=RecordFilters(
            years=frozenset({2022}),
            market_field="derived_msa-md",
            markets=frozenset({"90010"}),
            loan_purpose=frozenset({"1", "31", "32"}),
        ),
    )
    kept = list(reader)
    lines = [int(x) for chunk in kept for x in chunk["line"]]
    # 27 good rows on lines 2-28 (A 12, B 12, C 3), then 3 filtered rows, 4 malformed.
    assert lines == list(range(2, 29))
    c = reader.counts
    assert c.lines == 34 and c.kept == 27
    assert dict(c.filtered) == {"years": 1, "markets": 1, "loan_purpose": 1}
    listed = {line: reason.split(":")[0] for line, _, reason in reader.excluded}
    assert listed == MALFORMED_LINES


def test_csv_form_reads_like_the_pipe_form(tmp_path):
    pipe = RecordReader(write_records(tmp_path / "a.txt", hand_records()), [])
    csv = RecordReader(write_records(tmp_path / "a.csv", hand_records(), ",", quote=True), [])
    a = [c.drop(columns="line") for c in pipe]
    b = [c.drop(columns="line") for c in csv]
    assert len(a) == len(b) == 1 and a[0].equals(b[0])
    assert sorted(pipe.excluded) == sorted(csv.excluded)
    # A byte-order mark and Windows line ends (as some copies of the files have).
    raw = (tmp_path / "a.csv").read_bytes().replace(b"\n", b"\r\n")
    (tmp_path / "b.csv").write_bytes(b"\xef\xbb\xbf" + raw)
    bom = RecordReader(tmp_path / "b.csv", [])
    assert [c.drop(columns="line") for c in bom][0].equals(a[0])
    assert sorted(bom.excluded) == sorted(csv.excluded)


def test_reader_errors_name_the_file(tmp_path):
    with pytest.raises(InputError, match="not found"):
        RecordReader(tmp_path / "missing.txt", [])
    (tmp_path / "noheader.txt").write_text("2022|X|1\n", encoding="utf-8")
    with pytest.raises(InputError, match="noheader.txt.*header"):
        RecordReader(tmp_path / "noheader.txt", [])
    (tmp_path / "short.txt").write_text("activity_year|lei|census_tract\n", encoding="utf-8")
    with pytest.raises(InputError, match="no field 'action_taken'"):
        RecordReader(tmp_path / "short.txt", [])


# ------------------------------------------------------------------ the review, by hand


def test_sets_categories_and_peers_by_hand(base):
    s = base.summary["lending"]
    assert s["lender"] == {"lei": A, "name": "Test Lender A"}
    assert s["peer_rule"] == "market" and s["peer_lenders"] == 2
    assert s["tract_source"] == "areas"
    apps, orig = s["by_set"]["applications"], s["by_set"]["originations"]
    # Applications (action 1-5): A has 8 in tract 1, 1 in tract 2, 1 in tract 4 = 10,
    # 2 of them in majority-minority tracts (2, 3, 4); peers B (12) and C (3): 13 of 15.
    assert counts(apps["majority_minority"]) == (2, 10, 13, 15)
    # Black share above 50% in tracts 2, 3, 4 as well (the only group named).
    assert counts(apps["majority_black_hispanic"]) == (2, 10, 13, 15)
    # High-minority (above 80%): tract 3 only.
    assert counts(apps["high_minority"]) == (0, 10, 6, 15)
    # LMI: income below 80: tracts 3 (79.9) and 4 (50); tract 2 at exactly 80 is not.
    assert counts(apps["lmi"]) == (1, 10, 7, 15)
    # Originations (action 1): A 7 (1 in tract 2); peers 11 (B 4 + 3, C 2 in tract 3).
    assert counts(orig["majority_minority"]) == (1, 7, 9, 11)
    # Purchased loans (6) kept apart: A's one, in tract 2.
    assert counts(s["by_set"]["purchased"]["majority_minority"]) == (1, 1, 0, 0)
    assert "preapprovals" not in s["by_set"]
    # Denial rates over decided applications (1-3), in majority-minority tracts:
    # A 0 of 1; peers B 2 of 9 (tracts 2, 3) and C 1 of 3.
    assert counts(s["denials"]["majority_minority"]) == (0, 1, 3, 12)
    assert counts(s["denials"]["all_tracts"]) == (2, 9, 3, 14)
    assert counts(s["denials_by_applicant"]["race"]["Black or African American"]) == (2, 2, 0, 0)
    # Every statistic equals the oracles' on the hand counts.
    entry = apps["majority_minority"]
    z, p = proportions_ztest([2, 13], [10, 15])
    assert entry["z"] == pytest.approx(z, rel=1e-12)
    assert entry["p_two_sided"] == pytest.approx(p, rel=1e-12)
    assert entry["fisher_p"] == pytest.approx(fisher_exact([[2, 8], [13, 2]]).pvalue, rel=1e-12)
    assert entry["below_peers"] and entry["ratio"] == pytest.approx(0.2 / (13 / 15), rel=1e-12)
    cell = s["by_year_market"]
    assert len(cell) == 1 and cell[0]["year"] == 2022 and cell[0]["market"] == "90010"
    assert cell[0]["by_set"]["applications"]["majority_minority"] == entry  # one cell = pooled


def test_records_counted_filtered_and_listed(base):
    result = base
    rec = result.summary["lending"]["records"]
    assert rec["lines"] == 34 and rec["analysed"] == 27 and rec["outside_areas"] == 0
    assert rec["filtered_by"] == {"years": 1, "markets": 1, "loan_purpose": 1}
    ex = result.exclusions
    ex = ex[ex["source"] == "lending records.txt"]
    listed = {int(r): why.split(":")[0] for r, why in zip(ex["row"], ex["reason"], strict=True)}
    assert listed == MALFORMED_LINES
    assert result.summary["exclusions"]["by_reason"]["lending records.txt: census tract NA"] == 1


def test_band_and_list_peers(region):
    # A has 10 applications: B (12, ratio 1.2) is within [0.5, 2.0], C (3, ratio 0.3) not.
    band = review(region, 'peers = "band"').summary["lending"]
    assert band["peer_rule"] == "band" and band["peer_lenders"] == 1
    assert counts(band["by_set"]["applications"]["majority_minority"]) == (2, 10, 10, 12)
    listed = review(region, f'peers = ["{C}"]').summary["lending"]
    assert listed["peer_rule"] == "list" and listed["peer_lenders"] == 1
    assert counts(listed["by_set"]["applications"]["majority_minority"]) == (2, 10, 3, 3)


def test_preapprovals_counted_separately_when_asked(region):
    s = review(region, "preapprovals = true").summary["lending"]
    assert counts(s["by_set"]["preapprovals"]["majority_minority"]) == (1, 1, 0, 0)
    assert counts(s["by_set"]["applications"]["majority_minority"]) == (2, 10, 13, 15)


def test_categories_from_the_records_appended_fields(region):
    # Records' minority %: 20, exactly 50, 90, 75; income %: 120, exactly 80, 79.99, 50.
    s = review(region, 'tract_source = "records"').summary["lending"]
    assert s["tract_source"] == "records" and "appended" in s["tract_source_note"]
    apps = s["by_set"]["applications"]
    assert counts(apps["majority_minority"]) == (1, 10, 7, 15)  # tract 2 (50%) not MM
    assert counts(apps["lmi"]) == (1, 10, 7, 15)  # tract 2 (80) not LMI
    assert apps["majority_black_hispanic"] is None
    assert not s["categories"]["majority_black_hispanic"]["available"]
    # Counted, not dropped silently: all 27 records of the three lenders lack that share.
    assert s["categories"]["majority_black_hispanic"]["unknown_records"] == 27
    assert s["categories"]["majority_minority"]["unknown_records"] == 0
    # With "at or above 50%", tract 2 is majority-minority too.
    s2 = review(
        region, 'tract_source = "records"', 'majority_minority_rule = "at_or_above"'
    ).summary["lending"]
    assert counts(s2["by_set"]["applications"]["majority_minority"]) == (2, 10, 13, 15)


def test_lending_gap_and_map_columns(base):
    result = base
    gaps = result.summary["lending"]["gaps"]
    # Served: tracts 1 and 3; A has 8 applications in tract 1 and none in tract 3.
    assert gaps["gap_ids"] == [T[2]]
    assert gaps["majority_minority"] == {"tracts": 1, "gaps": 1}
    assert gaps["other"] == {"tracts": 1, "gaps": 0}
    areas = result.areas.set_index("geoid")
    # Lender share by tract = A's applications / all applications: 8/10, 1/7, 0/6, 1/2.
    assert areas["lender_share"].tolist() == pytest.approx([0.8, 1 / 7, 0.0, 0.5], rel=1e-12)
    assert areas["lending_gap"].tolist() == [False, False, True, False]


def test_summary_keys_are_spelled_as_the_issue_asks(base):
    s = json.loads(json.dumps(base.summary))["lending"]
    assert {"lender", "peer_rule", "peer_lenders", "by_set", "denials"} <= set(s)
    keys = {
        "lender_count",
        "lender_total",
        "lender_share",
        "peer_count",
        "peer_total",
        "peer_share",
        "ratio",
        "difference",
        "z",
        "p_two_sided",
        "fisher_p",
        "below_peers",
    }
    for set_name in ("applications", "originations"):
        for cat in ("majority_minority", "majority_black_hispanic", "high_minority", "lmi"):
            assert keys <= set(s["by_set"][set_name][cat])
    for cat in ("majority_minority", "majority_black_hispanic", "high_minority", "lmi"):
        assert keys <= set(s["denials"][cat])


def test_a_lender_with_no_records_in_scope_is_an_error(region):
    with pytest.raises(InputError, match="no applications in scope"):
        review(region, lender="9999NOSUCHLENDER0009")
    with pytest.raises(InputError, match="no record of 'records.txt' is in scope"):
        review(region, 'loan_types = ["4"]')


def test_spec_errors(region):
    for extra, match in [
        ('peers = "nearby"', "peers was"),
        ("band = [2.0, 0.5]", "band must be"),
        ("loan_types = [7]", "not published loan_type codes"),
        ('market_by = "area"', "markets does not apply"),
        ("unknown_key = 1", 'unknown key "unknown_key"'),
    ]:
        with pytest.raises(SpecError, match=match):
            review(region, extra)
    with pytest.raises(SpecError, match="not an LEI"):
        review(region, lender="SHORT")


# ------------------------------------------------------------------ demo, report and map

BUNDLED = Path(__file__).resolve().parent.parent / "demo_regions" / "ostmere"


def test_demo_record_file_regenerates_identically(tmp_path):
    # Generated by code with a fixed seed (demo.write_lending_records): the bundled record
    # file and scenario spec are what the code makes.
    from coverage_audit.demo import write_demo_region

    out = write_demo_region(tmp_path / "ostmere")
    for name in ("hmda_records.txt", "lending.toml", "applications.csv", "demographics.csv"):
        assert (out / name).read_bytes() == (BUNDLED / name).read_bytes(), name


def test_demo_review_shows_one_lender_below_its_peers_and_others_not(tmp_path):
    spec = load_spec(BUNDLED / "lending.toml")
    result = run_audit(spec.with_analysis(permutations=19, enclave_draws=19, sensitivity=False))
    s = result.summary["lending"]
    mm = s["by_set"]["applications"]["majority_minority"]
    assert s["lender"]["name"] == "Ostmere Savings" and mm["below_peers"]
    screen = s["screen"]
    assert screen["below_peers"] == ["9999OSTMERESAVINGS01"]
    assert "9999HARBORMUTUAL0001" in screen["not_below_peers"]
    assert s["records"]["malformed_by_reason"] == {"census tract NA": 36}  # 2 per lender-year
    paths = result.write(tmp_path / "out")
    page = paths["report"].read_text(encoding="utf-8")
    assert 'id="lending-table"' in page and "significantly below its peers" in page
    assert "below their peers: Ostmere Savings; not below: Harbor Mutual" in page
    map_page = paths["map"].read_text(encoding="utf-8")
    assert '"lender_share"' in map_page and '"lending_gap"' in map_page


def two_cells() -> list[dict[str, str]]:
    """Two years in two markets (hand counts in the test below)."""
    rows = [record(A, T[0], "1"), record(A, T[1], "1")]
    rows += [record(B, t, "1") for t in (T[1], T[1], T[2], T[3])]
    y = {"activity_year": "2023", "derived_msa__md": "90020"}
    rows += [record(A, t, "1", **y) for t in (T[1], T[2], T[0])]
    rows += [record(C, T[0], "1", **y)] + rows_of(B, T[0], "1", 10, **y)
    return rows


def test_cells_by_year_and_market_and_pooled(region):
    write_records(region / "cells.txt", two_cells())
    loose = 'years = [2022, 2023]\nmarkets = ["90010", "90020"]'
    spec = LENDING_SPEC.replace('years = [2022]\nmarkets = ["90010"]\n', "")
    assert spec != LENDING_SPEC

    def run(extra: str):
        (region / "audit.toml").write_text(
            spec.format(
                crs=GRID_CRS,
                records="cells.txt",
                lender=A,
                population_extra="",
                lending_extra=extra,
            ),
            encoding="utf-8",
        )
        return run_audit(load_spec(region / "audit.toml")).summary["lending"]

    s = run(loose)
    cells = {(c["year"], c["market"]): c for c in s["by_year_market"]}
    mm = "majority_minority"
    # 2022, 90010: A 1 of 2 in majority-minority tracts; its peer B 4 of 4.
    assert counts(cells[(2022, "90010")]["by_set"]["applications"][mm]) == (1, 2, 4, 4)
    # 2023, 90020: A 2 of 3; peers B (10 in tract 1) and C (1 in tract 1): 0 of 11.
    assert counts(cells[(2023, "90020")]["by_set"]["applications"][mm]) == (2, 3, 0, 11)
    # Pooled: the sums of the cells.
    assert counts(s["by_set"]["applications"][mm]) == (3, 5, 4, 15)
    assert s["scope"]["years"] == [2022, 2023] and s["peer_lenders"] == 2
    # Mantel-Haenszel over the two cells, by hand: tables [[1, 1], [4, 0]] (n = 6) and
    # [[2, 1], [0, 11]] (n = 14): OR = (2 * 11 / 14) / (1 * 4 / 6) = 33/14; sum(a - E a)
    # = (1 - 10/6) + (2 - 6/14) = 19/21; sum Var a = 2/9 + 198/637 = 3056/5733; CMH =
    # (19/21)^2 / (3056/5733) = 2069613/1347696.
    mh = s["stratified"]["applications"][mm]
    assert mh["strata"] == 2 and mh["odds_ratio_mh"] == pytest.approx(33 / 14, rel=1e-12)
    assert mh["statistic"] == pytest.approx(2069613 / 1347696, rel=1e-12)
    # Band [0.5, 2.0] per cell: B's 4 is exactly 2 x A's 2 (a peer); in 2023 B's 10 and
    # C's 1 lie outside 1.5-6, so that cell has no peers.
    band = run(loose + '\npeers = "band"')
    assert counts(band["by_set"]["applications"][mm]) == (3, 5, 4, 4)
    assert band["peer_lenders"] == 1
    # Counties as markets: every record is in county 01001.
    county = run('market_by = "county"')
    assert county["scope"]["markets"] == ["01001"]
    assert counts(county["by_set"]["applications"][mm]) == (3, 5, 4, 15)
    area = run('market_by = "area"')
    assert area["scope"]["markets"] == ["study area"]
    # A year filter keeps one cell.
    one = run("years = [2023]")
    assert counts(one["by_set"]["applications"][mm]) == (2, 3, 0, 11)
    assert one["records"]["filtered_by"] == {"years": 6}


@pytest.mark.browser
def test_map_draws_the_lender_share_and_gap_layers(base, browser_page, tmp_path):
    from dataclasses import replace

    from coverage_audit.report import map as cmap
    from coverage_audit.spec import replace_output

    result = replace(base, spec=replace_output(base.spec, map=True, report=False))
    paths = result.write(tmp_path / "out")
    browser_page.open(
        paths["map"], ready="window.coverageAuditMap && window.coverageAuditMap.painted"
    )
    assert browser_page.console_errors() == [] and browser_page.network_requests() == []
    ids = browser_page.js("return coverageAuditMap.drawn")
    assert ids == 4
    colours = browser_page.js(
        "var out = []; for (var i = 0; i < 4; i++) "
        "out.push(coverageAuditMap.colourOf('lender_share', i)); return out;"
    )
    # Shares 0.8, 1/7, 0 and 0.5 fall in the classes >= 75%, 10-25%, < 10% and 50-75%.
    order = result.areas["geoid"].tolist()
    assert order == T
    assert colours == [cmap.SHARE_COLORS[k] for k in (4, 1, 0, 3)]
    gaps = browser_page.js(
        "var out = []; for (var i = 0; i < 4; i++) "
        "out.push(coverageAuditMap.colourOf('lending_gap', i)); return out;"
    )
    assert gaps == ["#e4e1d8", "#e4e1d8", "#c2423b", "#e4e1d8"]


def test_a_record_file_changed_while_being_read_is_refused(region, monkeypatch):
    # Issue 9 item 6: the manifest's digest is that of the bytes read; a file that changes
    # during the streamed read is refused (common practice, no source).
    import coverage_audit.io.hmda_counts as lending_module  # the read is in the input stage

    original = lending_module._read

    def read_then_change(ls, *args, **kwargs):
        out = original(ls, *args, **kwargs)
        with open(ls.path[0], "ab") as handle:  # another program appends meanwhile
            handle.write(b"\n")
        return out

    monkeypatch.setattr(lending_module, "_read", read_then_change)
    with pytest.raises(InputError, match="changed while it was being read"):
        review(region)
