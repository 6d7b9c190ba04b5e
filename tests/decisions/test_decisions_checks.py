"""Exclusions apply to the checks too: excluded data leave the check inputs, and the findings
that rested on them are listed as 'excluded' with the decision's id (demo data)."""

from __future__ import annotations

import json

import pytest

from decisions_fixtures import demo_copy
from pipeline.checks import load_fluid_data, run_checks
from pipeline.decisions import load_decisions
from pipeline.decisions.apply import latest_check_run
from pipeline.decisions.checks import check_exclusions, check_inputs, split_fluids
from pipeline.nightly import NightlyOptions, run_nightly
from pipeline.store import open_store

N2_RIG_B = "brackenridge-rig-b-nitrogen-2022-11"   # the kPa-as-Pa file's source (raw/README.md)
N2_RIG_B_FILE = f"{N2_RIG_B}/nitrogen-vapour-pressure-rig-b.csv"
N2_LIT = "lit-nitrogen-critical-point"             # the discrepant Tc = 126.55 K
CO2_MELT = "lit-co2-melting-transcribed/co2-melting-transcribed.csv"


@pytest.fixture()
def demo(tmp_path_factory, tmp_path):
    return demo_copy(tmp_path_factory, tmp_path)


def _latest(demo, where: str = "TRUE") -> list[tuple]:
    with open_store(demo.store, read_only=True) as s:
        return s.con.execute(
            "SELECT check_id, subject, status, decision_id FROM check_result WHERE run_id = ? "
            f"AND fluid_id = 'nitrogen' AND {where} ORDER BY ALL",
            [latest_check_run(s.con)]).fetchall()


def test_an_excluded_source_takes_its_file_failure_with_it(demo, capsys):
    """Excluding the rig-B nitrogen source (no waiver): its unit mix-up failure is listed as
    excluded by that decision, its points no longer count as outliers, and 'decisions' says
    the decision touches that check."""
    assert demo.cli("check", "--fluid", "nitrogen") == 1      # unit mix-up and Tc fail
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", N2_RIG_B,
                       why="kPa recorded as Pa; the lab re-issues the file") == 0
    assert demo.cli("fit", "-q") == 0
    capsys.readouterr()
    assert demo.cli("check", "--fluid", "nitrogen") == 1      # the Tc disagreement remains
    out = capsys.readouterr().out
    assert "decision D-0001: 1 finding(s) rest on data it excluded" in out
    rows = _latest(demo, "status IN ('fail', 'warn', 'excluded') AND check_id <> "
                         "'data.reduced-chi-square'")
    assert rows == [("data.unit-mixup", f"file:{N2_RIG_B_FILE}|liquid-vapour", "excluded",
                     "D-0001"),
                    ("sources.agreement", "critical:vapour,liquid|Tc", "fail", None)]
    with open_store(demo.store, read_only=True) as s:
        message = s.con.execute("SELECT message FROM check_result WHERE run_id = ? AND "
                                "status = 'excluded'", [latest_check_run(s.con)]).fetchone()[0]
    assert "kPa recorded as Pa (factor 1000)" in message   # the finding keeps its diagnosis
    assert "[excluded by D-0001: kPa recorded as Pa; the lab re-issues the file;" in message
    capsys.readouterr()
    assert demo.cli("decisions", "--json", "-") == 0
    (d,) = json.loads(capsys.readouterr().out)["decisions"]
    assert d["touches"]["observations"] == 21 and d["touches"]["checks"] == 1
    assert d["checks"][0]["status"] == "excluded"


def test_excluding_a_sources_constant_removes_the_disagreement(demo):
    """Excluding only the literature Tc takes the nitrogen Tc disagreement out: no failure is
    left for nitrogen once the rig-B file is excluded too (exit 0)."""
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", N2_LIT,
                       "--constant", "Tc", why="superseded by the 2000 evaluation") == 0
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", N2_RIG_B,
                       why="kPa recorded as Pa") == 0
    assert demo.cli("fit", "-q") == 0
    assert demo.cli("check", "--fluid", "nitrogen", "-q") == 0
    excluded = _latest(demo, "status = 'excluded'")
    assert ("sources.agreement", "critical:vapour,liquid|Tc", "excluded", "D-0001") in excluded
    assert _latest(demo, "status = 'fail'") == []
    # pc of the same source is not excluded: still compared (and in agreement)
    assert _latest(demo, "subject = 'critical:vapour,liquid|pc'")[0][2] == "pass"


def test_a_finding_that_stands_without_the_excluded_data_is_kept(demo):
    """Excluding one row of the reversed CO2 melting file leaves 12 rows whose slope is still
    negative: the clapeyron.slope-sign failure stands as a failure, not as excluded."""
    assert demo.decide("exclude-observations", "--source", "lit-co2-melting-transcribed",
                       "--file", CO2_MELT, "--row", "1", why="row 1 illegible") == 0
    with open_store(demo.store, read_only=True) as s:
        decisions = load_decisions(demo.decisions)
        data = load_fluid_data(s.con, ["carbon-dioxide"])
        kept, steps = check_inputs(s.con, decisions, data, None)
        excl = check_exclusions(s.con, decisions)
    assert len(kept["carbon-dioxide"].observations) == len(data["carbon-dioxide"].observations) - 1
    assert list(excl.observations.values()) == ["D-0001"]
    run = run_checks(kept, checks=["clapeyron.slope-sign"], postprocessors=steps)
    (bad,) = [r for r in run.results if r.status not in ("pass", "skip")]
    assert bad.status == "fail" and bad.decision_id is None and "12 melting points" in bad.message


def test_without_exclusions_the_inputs_are_untouched(demo):
    """No decisions: every fluid object is passed through as it is, nothing to re-check."""
    with open_store(demo.store, read_only=True) as s:
        data = load_fluid_data(s.con)
        kept, full = split_fluids(data, check_exclusions(s.con, load_decisions(demo.decisions)))
    assert full == {} and all(kept[f] is data[f] for f in data)


def test_the_nightly_reports_excluded_findings_with_their_decision(demo, tmp_path):
    """In the nightly run the excluded finding has status 'excluded' and its decision id in
    results.json, and counts as neither a failure nor a warning."""
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", N2_RIG_B,
                       why="kPa recorded as Pa") == 0
    result = run_nightly(NightlyOptions(store=demo.store, raw=demo.raw, quiet=True,
                                        reports=tmp_path / "reports", exit_zero=True,
                                        decisions=demo.decisions))
    doc = json.loads(open(result.report["results"], encoding="utf-8").read())
    excluded = [(r["check_id"], r["fluid_id"], r["decision_id"]) for r in doc["results"]
                if r["status"] == "excluded"]
    assert excluded == [("data.unit-mixup", "nitrogen", "D-0001")]
    assert doc["run"]["counts"]["excluded"] == 1 == result.counts["excluded"]
