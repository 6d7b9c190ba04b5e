"""The real-data benchmark's analysis: rates, skips, faults by family, targets."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

_SPEC = importlib.util.spec_from_file_location(
    "realdata_benchmark", Path(__file__).resolve().parents[2] / "benchmarks" / "realdata.py")
realdata = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(realdata)


def result(check, fluid, status, subject="", message=""):
    return {"check_id": check, "fluid_id": fluid, "status": status, "subject": subject,
            "message": message, "decision_id": "D-0001" if status == "waived" else None}


FAULTS = [
    {"fluid": "fault-kpa", "planted": "kPa declared Pa", "families": ["data.unit-mixup"],
     "diagnosis": "kPa recorded as Pa"},
    {"fluid": "fault-tc", "planted": "Tc 3 % high", "families": ["critical", "sources"]},
]


@pytest.fixture
def figures():
    results = [
        result("sources.agreement", "a", "fail", "critical|pc"),
        result("critical.curve-end", "a", "fail", "reach"),
        result("data.outliers", "b", "warn", "curve:liquid-vapour", "2 of 46 off the fit"),
        result("acentric.factor", "c", "waived"),
        result("acentric.factor", "d", "pass"),
        result("triple-point.on-curves", "d", "skip", "x", "no solid density within 5 K of 83.8058 K"),
        result("triple-point.on-curves", "c", "skip", "x", "no solid density within 5 K of 63.151 K"),
        result("critical.curve-end", "fault-kpa", "fail", "p(Tc)"),
        result("data.unit-mixup", "fault-kpa", "warn", "file:x",
               "values look like kPa recorded as Pa (factor 1000)"),
        result("critical.curve-end", "fault-tc", "fail", "p(Tc)"),
    ]
    fluids = ["a", "b", "c", "d", "fault-kpa", "fault-tc"]
    return realdata.analyse(results, fluids, FAULTS, {"missing-pressure": 3})


def test_false_alarm_rate_counts_clean_fluids_with_an_unwaived_failure(figures):
    """One of four clean fluids fails (a waived finding does not count): 25 %, target not met."""
    assert figures["n_clean"] == 4
    assert sorted(figures["clean_failing"]) == ["a"]
    assert figures["clean_failing"]["a"] == ["sources.agreement [critical|pc]", "critical.curve-end [reach]"]
    assert figures["targets"]["false_alarm_rate"] == {"measured": 0.25, "target": 0.02, "met": False}
    assert figures["waived"] == ["c: acentric.factor [-] (D-0001)"]


def test_warning_rate_and_failures_per_check(figures):
    """Warnings are counted per clean fluid; failures per check only over clean fluids."""
    assert list(figures["clean_warning"]) == ["b"]
    assert figures["targets"]["warning_rate"]["measured"] == 0.25
    assert figures["failures_per_check"] == {"critical.curve-end": 1, "sources.agreement": 1}


def test_skip_reasons_aggregate_across_numbers(figures):
    """Skip messages differing only in their numbers count as one reason."""
    assert figures["skips"] == [{"check_id": "triple-point.on-curves",
                                 "reason": "no solid density within # K of # K", "count": 2}]


def test_faults_are_caught_only_by_their_own_family_and_failing_status(figures):
    """A unit mix-up caught only by critical.curve-end is not caught by its family; a warning
    that names the mix-up counts as named; a family given as a prefix matches its checks."""
    by = {r["fluid"]: r for r in figures["faults"]}
    assert by["fault-kpa"]["caught_by_family"] is False and by["fault-kpa"]["named"] is True
    assert by["fault-tc"]["caught_by_family"] is True
    assert by["fault-tc"]["family_checks"] == ["critical.curve-end"] and by["fault-tc"]["named"] is None
    assert figures["targets"]["faults_caught_by_family"]["measured"] == 0.5
    assert figures["targets"]["unit_mixups_named"] == {"measured": 1.0, "target": 1.0, "met": True}
    assert figures["all_met"] is False and figures["quarantine"] == {"missing-pressure": 3}


def test_report_prints_a_verdict_line_per_target(figures):
    """The printed report ends with one MET / NOT MET line per target."""
    lines = realdata.report(figures).splitlines()
    assert lines[-4:] == [
        "  false_alarm_rate: measured 25.0 % <= target 2.0 %: NOT MET",
        "  warning_rate: measured 25.0 % <= target 10.0 %: NOT MET",
        "  faults_caught_by_family: measured 50.0 % >= target 100.0 %: NOT MET",
        "  unit_mixups_named: measured 100.0 % >= target 100.0 %: MET",
    ]
