"""The HTML report: escaping, reading order, self-containment, the decisions hook."""

from __future__ import annotations

import base64
import re

from pipeline.checks.results import CheckResult, CheckRun
from pipeline.report.content import FitRow, FluidSection
from pipeline.report.html import CAUTION, ReportPage, decisions_html, render_html
from pipeline.report.plots import FixedPointMark
from pipeline.report.summary import render_summary

EVIL = "<script>alert('x')</script><img src=x onerror=alert(1)>"
PNG = base64.b64decode(  # a 1x1 transparent PNG
    "iVBORw0KGgoAAAANSUhEUgAAAAEAAAABCAYAAAAfFcSJAAAADUlEQVR42mNkYPhfDwAChwGA60e6kgAAAABJRU5ErkJggg==")


def _nightly(**over):
    n = {"run_id": "nightly-20260101T000000-abcdef", "started_at": "2026-01-01T00:00:00Z",
         "finished_at": "2026-01-01T00:00:09Z", "duration_s": 9.0, "pipeline_version": "0.1.0",
         "check_run_id": "check-1", "verdict": "fail", "exit_code": 1, "no_changes": False,
         "previous_run_id": "nightly-20251231T000000-000000",
         "counts": {"fail": 1, "pass": 1, "error": 0, "warn": 0, "waived": 0, "skip": 0},
         "stages": {"ingest": {"status": "loaded", "duration_s": 1.0, "text": "1 batch",
                               "detail": {"errors": []}}},
         "changes": {"new_failures": [{"check_id": "sources.agreement", "fluid_id": "argon",
                                       "before": "pass", "after": "fail",
                                       "new_failing": [EVIL], "fixed": []}],
                     "fixed": [], "changed": [],
                     "values": [{"fluid_id": "argon", "name": EVIL, "unit": "Pa",
                                 "before": 1.0, "after": 2.0, "delta": 1.0, "u": 0.5,
                                 "shift_u": 2.0, "note": EVIL}],
                     "values_basis": "fits"},
         "publish": {"status": "skipped", "release_id": None, "reason": "not published"},
         "report": {}}
    n.update(over)
    return n


def _page(**over):
    results = [CheckResult("sources.agreement", "argon", EVIL, "fail", "fail", EVIL,
                           measured=16.0, limit=3.0, statistic="Birge ratio",
                           evidence={"note": EVIL}),
               CheckResult("data.ranges", "argon", "", "pass", "fail", "ok")]
    run = CheckRun("check-1", "2026-01-01T00:00:00Z", "2026-01-01T00:00:01Z", "0.1.0", {},
                   ["sources.agreement", "data.ranges"], ["argon"], results)
    section = FluidSection("argon", "argon", "Ar",
                           fits=[FitRow("f1", "liquid-vapour", "", "pressure", "fitted",
                                        "wagner-2.5-5", 10, 10, 0, 84.0, 150.0, 1.1, None,
                                        150.687, 4.863e6, 1e3)],
                           fixed_points=[FixedPointMark("critical", "vapour,liquid", 150.687,
                                                        4.863e6, 0.015, 3e3, EVIL)],
                           sources=[("lab-x", "measurement", EVIL)], n_observations=10)
    kw = dict(nightly=_nightly(), check_run=run, sections={"argon": section},
              images={"argon": PNG})
    kw.update(over)
    return ReportPage(**kw)


def test_user_strings_are_escaped():
    """Citations, messages, subjects, evidence and value names holding markup show as text."""
    html = render_html(_page())
    assert EVIL not in html and "<script" not in html and "<img src=x" not in html
    escaped = "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;"
    assert html.count(escaped) >= 6   # citation, message, subject, evidence, value, note...


def test_the_page_opens_with_the_verdict_and_the_changes_then_failures_then_fluids():
    """Reading order: verdict, changes since the previous run, failures, decisions, fluids."""
    html = render_html(_page())
    order = [html.index(s) for s in ('class="verdict v-fail"', 'id="changes"', 'id="failures"',
                                     'id="decisions"', 'id="fluid-argon"')]
    assert order == sorted(order)
    assert "New failures (1)" in html and "Changed recommended values (1)" in html


def test_the_page_is_self_contained_with_the_caution():
    """No external resource is referenced; plots are inline PNG; the caution is shown."""
    html = render_html(_page())
    assert re.findall(r'(?:src|href)="(?!data:|#)', html) == []
    assert "<link" not in html and "<script" not in html
    assert html.count('src="data:image/png;base64,') == 1
    assert html.count(CAUTION) == 2   # top and bottom


def test_the_decisions_section_is_a_placeholder_without_the_feature():
    """Without decisions (None) a placeholder heading is shown; rows are listed otherwise."""
    assert "Curation decisions" in decisions_html(None)
    assert "not available" in decisions_html(None)
    rows = decisions_html([{"id": "D-0001", "kind": "waive_check", "state": "active",
                            "why": EVIL, "touches": {"checks": 1}}])
    assert "D-0001" in rows and "&lt;script&gt;" in rows and "not available" not in rows
    assert "no decisions in force" in decisions_html([])


def test_a_fluid_without_pressure_data_has_no_image():
    """A fluid with no plot says so instead of showing an empty image."""
    html = render_html(_page(images={"argon": None}))
    assert "data:image/png" not in html and "no plot" in html


def test_summary_is_short_and_names_verdict_counts_and_new_failures():
    """summary.md: verdict, counts, new failures and the report path, a few lines."""
    text = render_summary(_nightly(), "reports/x/report.html")
    lines = text.splitlines()
    assert lines[0].startswith("**FluidLedger nightly") and "FAIL" in lines[0]
    assert "1 fail, 1 pass" in text
    assert "`sources.agreement` argon: pass -> fail" in text
    assert lines[-1] == "Report: reports/x/report.html"
    assert len(lines) < 20


def test_summary_lists_a_changed_curve_without_before_and_after_values():
    """A release-diff curve change (no single before/after value) is listed by its note and
    its change in units of u."""
    curve = {"fluid_id": "argon", "name": "curve argon/curve:liquid-vapour/pressure",
             "unit": "Pa", "before": None, "after": None, "delta": None, "u": None,
             "shift_u": 2.5, "note": "changed: coefficients"}
    text = render_summary(_nightly(changes={**_nightly()["changes"], "values": [curve]}), "r")
    assert "argon curve argon/curve:liquid-vapour/pressure: changed: coefficients (+2.5 u)" in text
