"""The HTML report: escaping, reading order, self-containment, evidence tables, decide
commands, waived and excluded findings, relative uncertainties, the decisions hook."""

from __future__ import annotations

import re
import shlex

from pipeline.checks.results import CheckResult, CheckRun
from pipeline.report.actions import DecideContext
from pipeline.report.content import FitRow, FluidSection
from pipeline.report.figures import FluidFigures
from pipeline.report.html import CAUTION, ReportPage, decisions_html, render_html
from pipeline.report.plots import FixedPointMark
from pipeline.report.summary import render_summary

EVIL = "<script>alert('x')</script><img src=x onerror=alert(1)>"
SVG = ('<svg xmlns="http://www.w3.org/2000/svg" class="plot" data-figure="{0}" '
       'viewBox="0 0 10 10"><circle cx="5" cy="5" r="2"><title>lab-x row 3</title></circle></svg>')
FIGS = FluidFigures(SVG.format("phase"), SVG.format("deviation"), [
    {"number": 1, "file": "lab-x/vp.csv", "source": "lab-x", "reasons": ["fit outlier"],
     "obs_ids": [3], "rows": [3], "T_min_K": 100.0, "T_max_K": 100.0, "n_outliers": 1,
     "correction": ""}])


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
              figures={"argon": FIGS})
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
    """No external resource is referenced; the figures are inline SVG; the caution is shown."""
    html = render_html(_page())
    assert re.findall(r'(?:src|href)="(?!data:|#)', html) == []
    assert "<link" not in html and "<script" not in html
    assert html.count('data-figure="phase"') == 1 and html.count('data-figure="deviation"') == 1
    assert html.count(CAUTION) == 2   # top and bottom


def test_flagged_points_are_explained_beside_the_figure():
    """The table beside the phase diagram explains flag 1: file, rows, T and why."""
    html = render_html(_page())
    row = html[html.index('class="flags"'):]
    row = row[:row.index("</table>")]
    assert '<span class="flagno">1</span>' in row and "lab-x/<wbr>vp.csv" in row
    assert "fit outlier" in row and ">3<" in row


def test_the_decisions_section_is_a_placeholder_without_the_feature():
    """Without decisions (None) a placeholder heading is shown; rows are listed otherwise."""
    assert "Curation decisions" in decisions_html(None)
    assert "not available" in decisions_html(None)
    rows = decisions_html([{"id": "D-0001", "kind": "waive_check", "state": "active",
                            "why": EVIL, "touches": {"checks": 1}}])
    assert "D-0001" in rows and "&lt;script&gt;" in rows and "not available" not in rows
    assert "no decisions in force" in decisions_html([])


def test_a_fluid_without_pressure_data_has_no_figure():
    """A fluid with no figures says so instead of showing an empty one."""
    html = render_html(_page(figures={"argon": None}))
    assert "data-figure" not in html and "no figures" in html


def _run(*results):
    return CheckRun("check-1", "2026-01-01T00:00:00Z", "2026-01-01T00:00:01Z", "0.1.0", {},
                    sorted({r.check_id for r in results}), ["argon"], list(results))


def test_evidence_is_a_table_with_sensible_digits():
    """Evidence reads as tables (records as rows) with at most six significant digits."""
    r = CheckResult("critical.no-vle-above-tc", "argon", "", "fail", "fail", "above Tc",
                    evidence={"max_T_minus_Tc_K": 3.8847999999999843,
                              "above": [{"obs_id": 151, "file": "lab/vp.csv", "row": 20,
                                         "T_K": 308.0129999999}]})
    html = render_html(_page(check_run=_run(r)))
    card = html[html.index('id="f-critical.no-vle-above-tc-argon-"'):]
    card = card[:card.index('<h2 id="warnings">')]
    assert "3.8848" in card and "3.8847999" not in card and "308.013" in card
    assert "<th>obs_id</th>" in card and '<td class="num">151</td>' in card
    assert "{" not in card   # no raw JSON


def test_each_finding_offers_the_exact_decide_commands():
    """A failing file finding offers a waiver and the exclusion of the file's rows, with the
    run's store; a source disagreement offers the exclusion of that source's constant."""
    ctx = DecideContext("st/store.duckdb", "raw/decisions.toml",
                        {"lab b/vp.csv": "lab-b"}, {"lab b/vp.csv": [1, 2, 3, 5]})
    mix = CheckResult("data.unit-mixup", "argon", "file:lab b/vp.csv|liquid-vapour", "fail",
                      "fail", "kPa as Pa", evidence={"diagnosis": "kPa recorded as Pa"})
    tc = CheckResult("sources.agreement", "argon", "critical:vapour,liquid|Tc", "fail", "fail",
                     "Tc disagrees", evidence={"discrepant": ["lit-y"]})
    html = render_html(_page(check_run=_run(mix, tc), decide=ctx))
    commands = [shlex.split(c.replace("&#x27;", "'").replace("&lt;", "<").replace("&gt;", ">"))
                for c in re.findall(r"<code>(fluidledger decide [^<]*)</code>", html)]
    assert ["fluidledger", "decide", "waive-check", "--check", "data.unit-mixup", "--fluid",
            "argon", "--subject", "file:lab b/vp.csv|liquid-vapour", "--store",
            "st/store.duckdb", "--why", "<your reason>"] in commands
    assert ["fluidledger", "decide", "exclude-observations", "--source", "lab-b", "--file",
            "lab b/vp.csv", "--row", "1-3,5", "--store", "st/store.duckdb", "--why",
            "<your reason>"] in commands
    assert ["fluidledger", "decide", "exclude-source", "--fluid", "argon", "--source", "lit-y",
            "--constant", "Tc", "--store", "st/store.duckdb", "--why", "<your reason>"] \
        in commands


def test_waived_and_excluded_findings_are_listed_with_their_decision():
    """Waived and excluded findings are listed (not only counted) with the decision's id,
    what it does and why."""
    waived = CheckResult("data.outliers", "argon", "curve:liquid-vapour", "waived", "warn",
                         "1 off the fit [waived by D-0002]", decision_id="D-0002")
    gone = CheckResult("data.unit-mixup", "argon", "file:b.csv|liquid-vapour", "excluded",
                       "fail", "kPa as Pa [excluded by D-0003]", decision_id="D-0003")
    decisions = [{"state": "applied", "id": "D-0002", "action": "waive_check",
                  "what": "waive data.outliers for argon", "why": "known spike",
                  "who": "A. Curator", "when": "2026-12-01"}]
    html = render_html(_page(check_run=_run(waived, gone), decisions=decisions))
    part = html[html.index('id="waived"'):html.index('<h3>Results per check')]
    assert "Waived and excluded findings (2)" in part
    assert "D-0002" in part and "known spike" in part and "A. Curator" in part
    assert "D-0003" in part and '<span class="s-excluded">excluded</span>' in part


def test_uncertainties_are_shown_relative_too():
    """A fit's value at T_ref carries its relative uncertainty; a melting fit also the
    equivalent temperature uncertainty u/|dp/dT|; fixed points show u(p)/p."""
    melt = FitRow("f2", "solid-liquid", "Ih", "pressure", "fitted", "iapws-melting", 46, 46, 0,
                  251.165, 273.16, 2.5e-12, None, 273.16, 611.653, 1.83e4, -1.35e7)
    section = FluidSection("water", "water", "H2O", fits=[melt], fixed_points=[
        FixedPointMark("triple", "vapour,liquid,Ih", 273.16, 611.657, 1e-4, 0.01, "iapws")])
    html = render_html(_page(sections={"water": section}, figures={"water": None}))
    assert "611.653 Pa &plusmn; 1.83e+04 Pa (2992 %); &#8793; 1.4 mK in T at 273.16 K" in html
    assert "16 ppm" in html   # 0.01 Pa / 611.657 Pa


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
