"""The findings tree and the stages' seams, on real audits of the demo scenarios.

Consistency checks (the tool against itself), not reference tests: the typed tree holds
the stages' result objects, its ``to_dict()`` is what summary.json holds and cannot be
changed from outside, and no stage after the input stage changes the input objects.
"""

from __future__ import annotations

import json

from coverage_audit.clustering import ClusteringResult
from coverage_audit.coverage import CoverageResult
from coverage_audit.enclaves import EnclaveResult
from coverage_audit.results import AuditFindings, ExplainFindings, WithDetails
from coverage_audit.segregation import SegregationResult
from coverage_audit.weights import AreaGraph


def test_the_tree_holds_each_stages_result_object(demo_audit):
    findings = demo_audit("branches").findings
    assert isinstance(findings, AuditFindings)
    assert isinstance(findings.coverage, CoverageResult)
    stats = findings.statistics
    assert isinstance(stats.segregation, SegregationResult)
    assert isinstance(stats.weights, AreaGraph)
    assert isinstance(stats.clustering, ClusteringResult)
    assert isinstance(stats.enclaves, EnclaveResult)
    assert isinstance(stats.further["explain"], ExplainFindings)
    assert isinstance(stats.further["change"], WithDetails)
    assert isinstance(stats.further["peers"], WithDetails)


def test_to_dict_is_the_summary_and_a_fresh_copy_each_time(demo_audit, tmp_path):
    result = demo_audit("outreach")  # margins: the survey figures are set into the dict
    first = result.findings.to_dict()
    assert first == result.summary
    first["coverage"]["area_classes"]["all"]["rate"] = -1.0
    first["coverage"]["groups"].clear()
    second = result.findings.to_dict()
    assert second == result.summary and second["coverage"]["groups"]
    assert second["coverage"]["uncertainty"] in ("delta", "replicates")
    result.write(tmp_path / "out")
    written = json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8"))
    assert written == second


def test_later_stages_leave_the_input_objects_as_read(demo_audit):
    # The lending records and the islands are left out by later stages: they reach the
    # audit's exclusions and manifest, but the input stage's objects stay as read.
    result = demo_audit("lending")
    assert result.inputs is not None
    assert all(r["source"] in ("areas", "table") for r in result.inputs.exclusions.records)
    assert [r.role for r in result.inputs.inputs] == ["areas", "table"]
    assert (result.exclusions["source"] == "lending hmda_records.txt").sum() > 0
    assert "lending records" in [r["role"] for r in result.manifest["inputs"]]
