"""The report and the map drawn from real findings objects of small demo audits.

Each test takes the typed findings of a real audit (the ``demo_audit`` fixture runs each
demo scenario once per session) rather than a summary written by hand, so the pages are
exercised on exactly what the stages produce. Most checks are consistency checks (the
page against the findings it was drawn from); the Moran scatterplot is checked against
esda as an oracle and against Anselin (1996): with row-standardised weights the
least-squares slope of ``W z`` on ``z`` is Moran's I.
"""

from __future__ import annotations

import html
import re
from pathlib import Path

import esda
import numpy as np
import pytest

from coverage_audit.report import build_map
from coverage_audit.report.folder import read_folder
from coverage_audit.report.further import FURTHER_SECTIONS
from coverage_audit.report.markup import fmt_fixed, fmt_percent
from coverage_audit.report.page import render_report

#: Scenarios whose findings cover every section kind between them (points, polygons,
#: listed areas, ZIP codes, margins, lending records, access, blocks).
SCENARIOS = ("delivery", "branches", "assessment_area", "outreach", "lending", "clinics")


def _report(result) -> str:
    findings = result.findings
    return render_report(
        findings,  # the typed tree itself
        result.manifest,
        result.areas,
        exclusions=result.exclusions,
        id_column=result.id_column,
        groups=result.groups,
        reference=result.spec.population.reference,
        footprint=result.footprint_for_display(),
        moran_lag=findings.moran_lag,
    )


def _cells(page: str, table_id: str, group: str) -> list[str]:
    table = re.search(rf'<table\b[^>]*\bid="{table_id}"[^>]*>.*?</table>', page, re.S)
    assert table, table_id
    row = re.search(rf'<tr\b[^>]*data-group="{group}"[^>]*>(.*?)</tr>', table.group(0), re.S)
    assert row, group
    return [
        html.unescape(re.sub(r"<[^>]+>", "", c)).strip()
        for c in re.findall(r"<t[hd]\b[^>]*>(.*?)</t[hd]>", row.group(1), re.S)
    ]


@pytest.mark.parametrize("name", SCENARIOS)
def test_report_has_a_section_for_each_section_of_the_findings(demo_audit, name):
    # Consistency check: a further section is drawn exactly when the findings hold it.
    result = demo_audit(name)
    summary = result.findings.to_dict()
    page = _report(result)
    for anchor, _, _ in FURTHER_SECTIONS:
        drawn = f'<section id="{anchor}" class="major"' in page
        assert drawn == isinstance(summary.get(anchor), dict), anchor
    for anchor in ("coverage", "segregation", "clustering", "enclaves"):
        assert f'<section id="{anchor}" class="major"' in page, anchor
    assert ('id="assessment_area"' in page) == ("assessment_area" in summary)
    assert ('id="survey_error"' in page) == (summary["coverage"]["uncertainty"] != "none")


@pytest.mark.parametrize("name", SCENARIOS)
def test_coverage_table_shows_each_group_as_the_findings_hold_it(demo_audit, name):
    # Consistency check: every group's rate and ratio in the table are the findings'
    # CoverageResult, formatted (percent with one decimal, ratio with three).
    result = demo_audit(name)
    page = _report(result)
    for group, figures in result.findings.coverage.groups.items():
        row = _cells(page, "coverage-table", group)
        assert row[3] == fmt_percent(figures.rate), group
        assert row[5] == fmt_fixed(figures.ratio), group


def test_moran_scatter_lag_has_morans_i_as_its_slope(demo_audit):
    # Anselin (1996), "The Moran scatterplot as an ESDA tool": with row-standardised
    # weights, the least-squares slope of W z on z is Moran's I; esda (oracle) gives I.
    result = demo_audit("delivery")
    findings = result.findings
    lag = findings.moran_lag
    graph = findings.statistics.weights
    mask = graph.stats_mask
    assert lag is not None and np.isfinite(lag[mask]).all() and np.isnan(lag[~mask]).all()
    y = result.areas["covered_fraction"].to_numpy(dtype=float)[mask]
    z = (y - y.mean()) / y.std()
    slope = float(np.dot(z, lag[mask]) / np.dot(z, z))
    oracle = esda.Moran(y, graph.stats_graph("r"), permutations=0).I
    assert slope == pytest.approx(oracle, rel=1e-10, abs=1e-12)
    assert slope == pytest.approx(findings.statistics.clustering.to_dict()["moran"]["I"], rel=1e-10)


def test_written_folder_gives_back_the_findings_and_the_lag(demo_audit, tmp_path):
    # Consistency check: what the pages are re-drawn from (the output folder) is the
    # findings' summary and Moran lag, to the last bit.
    result = demo_audit("branches")
    result.write(tmp_path / "out")
    summary, _, areas, _, display = read_folder(tmp_path / "out")
    assert summary == result.findings.to_dict()
    expected = result.findings.moran_lag
    assert expected is not None and display.moran_lag is not None
    np.testing.assert_array_equal(display.moran_lag, expected)
    assert list(areas[result.id_column]) == list(result.areas[result.id_column])


@pytest.mark.parametrize("name", ("delivery", "branches", "assessment_area"))
def test_map_draws_every_area_and_the_enclaves_of_the_findings(demo_audit, tmp_path, name):
    # Consistency check: the map drawn from the findings shows every analysed area and
    # offers the enclave overlay when the findings hold enclaves.
    result = demo_audit(name)
    summary = result.findings.to_dict()
    display = result.display()
    info = build_map(
        result.areas,
        id_column=result.id_column,
        groups=list(result.groups),
        reference=result.spec.population.reference,
        footprint=display.footprint,
        summary=result.findings,  # the typed tree itself
        title=summary["title"],
        path=tmp_path / "map.html",
        outside=display.outside,
    )
    assert info.n_features == len(result.areas) - info.n_without_geometry
    assert ("enclaves" in info.overlays) == bool(summary["enclaves"])
    page = Path(info.path).read_text(encoding="utf-8")
    for enclave in summary["enclaves"]:
        assert enclave["id"] in page
