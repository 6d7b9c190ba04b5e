"""The nightly job on the demo data: the report folder, its files, a run with no changes."""

from __future__ import annotations

import json
import os
import xml.etree.ElementTree as ET
from pathlib import Path

import duckdb
import jsonschema
import pytest

from nightly_fixtures import add_batch, cli, copy_demo, nightly
from pipeline.errors import CheckError
from pipeline.ingest.contract import load_schema
from pipeline.report.files import ReportSchemaError, validate_results


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """Two nightly runs on a copy of the demo data: the first loads everything, the second
    finds nothing changed."""
    tmp = tmp_path_factory.mktemp("nightly-demo")
    raw = copy_demo(tmp)
    first = nightly(tmp, raw)
    con = duckdb.connect(str(tmp / "store.duckdb"), read_only=True)
    fits_after_first = con.execute("SELECT count(*) FROM fit").fetchone()[0]
    runs_after_first = con.execute("SELECT kind, count(*) FROM run GROUP BY kind").fetchall()
    con.close()
    second = nightly(tmp, raw)
    return {"tmp": tmp, "raw": raw, "first": first, "second": second,
            "fits_after_first": fits_after_first, "runs_after_first": dict(runs_after_first)}


def _store(demo):
    return duckdb.connect(str(demo["tmp"] / "store.duckdb"), read_only=True)


def test_demo_run_writes_every_report_file(demo):
    """reports/<run-id>/ holds report.html, results.json, junit.xml, summary.md and nightly.log."""
    first = demo["first"]
    folder = demo["tmp"] / "reports" / first.run_id
    for name in ("report.html", "results.json", "junit.xml", "summary.md", "nightly.log"):
        assert (folder / name).is_file() and (folder / name).stat().st_size > 0, name
    assert first.report["html"] == str(folder / "report.html")
    assert "ingest:" in (folder / "nightly.log").read_text()


def test_demo_run_fails_on_the_planted_flaws_and_does_not_publish(demo):
    """The demo's planted flaws fail checks: exit 1, a new failure each, no release."""
    first = demo["first"]
    assert (first.verdict, first.exit_code) == ("fail", 1)
    assert first.previous_run_id is None
    new = {(t["check_id"], t["fluid_id"]) for t in first.changes["new_failures"]}
    assert {("data.unit-mixup", "nitrogen"), ("data.unit-mixup", "water"),
            ("sources.agreement", "nitrogen"), ("critical.no-vle-above-tc", "carbon-dioxide"),
            ("clapeyron.slope-sign", "carbon-dioxide")} <= new
    assert not any(f == "argon" for _, f in new)
    assert first.publish["status"] == "skipped"
    assert "failed" in first.publish["reason"]


def test_results_json_validates_and_matches_the_store(demo):
    """results.json validates against its schema and holds the stored check run's results."""
    first = demo["first"]
    doc = json.loads(Path(first.report["results"]).read_text())
    validate_results(doc)
    check_schema = load_schema("check-results.schema.json")
    jsonschema.Draft202012Validator(check_schema).validate(
        {"run": doc["run"], "results": doc["results"]})
    assert doc["nightly"]["run_id"] == first.run_id
    assert doc["run"]["run_id"] == first.check_run_id
    with _store(demo) as con:
        n = con.execute("SELECT count(*) FROM check_result WHERE run_id = ?",
                        [first.check_run_id]).fetchone()[0]
    assert len(doc["results"]) == n > 100
    assert doc["run"]["counts"]["fail"] == sum(r["status"] == "fail" for r in doc["results"])


def test_a_broken_results_document_is_refused():
    """A results document that breaks the schema raises ReportSchemaError naming the place."""
    with pytest.raises(ReportSchemaError, match="nightly"):
        validate_results({"nightly": {"run_id": "x"}, "run": {}, "results": []})


def test_junit_counts_match_the_results(demo):
    """junit.xml parses and its tests/failures/errors/skipped equal the results' counts."""
    first = demo["first"]
    root = ET.parse(first.report["junit"]).getroot()
    doc = json.loads(Path(first.report["results"]).read_text())
    statuses = [r["status"] for r in doc["results"]]
    assert int(root.get("tests")) == len(statuses)
    assert int(root.get("failures")) == statuses.count("fail")
    assert int(root.get("errors")) == statuses.count("error")
    assert int(root.get("skipped")) == statuses.count("skip") + statuses.count("waived")
    cases = root.findall(".//testcase")
    assert len(cases) == len(statuses)
    assert sum(len(c.findall("failure")) for c in cases) == statuses.count("fail")


def test_second_run_with_no_changes_refits_nothing_and_says_so(demo):
    """A run with nothing new ingests nothing, fits nothing, reuses every check result and
    reports 'no changes' in its record, summary and report."""
    second, first = demo["second"], demo["first"]
    assert second.no_changes and second.previous_run_id == first.run_id
    assert second.stages["ingest"].status == "no-changes"
    assert second.stages["fit"].status == "no-changes"
    assert second.stages["check"].detail["n_rechecked"] == 0
    assert second.counts == first.counts and second.exit_code == 1
    assert not second.changes["new_failures"] and not second.changes["fixed"]
    with _store(demo) as con:
        assert con.execute("SELECT count(*) FROM fit").fetchone()[0] == demo["fits_after_first"]
        runs = dict(con.execute("SELECT kind, count(*) FROM run GROUP BY kind").fetchall())
    before = demo["runs_after_first"]
    assert runs.get("fit") == before.get("fit") and runs.get("ingest") == before.get("ingest")
    assert runs["nightly"] == before["nightly"] + 1 and runs["check"] == before["check"] + 1
    summary = Path(second.report["summary"]).read_text()
    assert "No changes since" in summary and len(summary.splitlines()) < 20
    assert "<strong>No changes</strong>" in Path(second.report["html"]).read_text()
    assert second.stages["report"].detail["plots_drawn"] == 0   # plots came from the cache


def test_reused_check_results_are_stored_again_unchanged(demo):
    """The second run's check run holds every result of the first one, column for column
    (evidence and thresholds as the same JSON text), although it never parsed most of them."""
    cols = ("check_id, fluid_id, subject, status, severity, message, measured, limit_value, "
            "statistic, evidence_json, thresholds_json, input_hash, decision_id")
    with _store(demo) as con:
        runs = [demo["first"].check_run_id, demo["second"].check_run_id]
        a, b = (con.execute(f"SELECT {cols} FROM check_result WHERE run_id = ? ORDER BY ALL",
                            [r]).fetchall() for r in runs)
    assert len(a) > 200 and a == b


def test_latest_points_to_the_newest_run(demo):
    """reports/latest is a symlink to the newest run's folder."""
    latest = demo["tmp"] / "reports" / "latest"
    assert latest.is_symlink() and os.readlink(latest) == demo["second"].run_id
    assert (latest / "report.html").is_file()


def test_the_nightly_run_row_keeps_the_summary(demo):
    """The run table holds a 'nightly' row per run with the result record as JSON."""
    with _store(demo) as con:
        status, summary = con.execute("SELECT status, summary_json FROM run WHERE run_id = ?",
                                      [demo["second"].run_id]).fetchone()
    summary = json.loads(summary)
    assert status == "failed"
    assert summary["verdict"] == "fail" and summary["no_changes"] is True
    assert summary["check_run_id"] == demo["second"].check_run_id
    assert set(summary["state"]) == {"argon", "carbon-dioxide", "nitrogen", "water"}


def test_exit_zero_reports_failures_but_exits_0(demo, capsys):
    """With --exit-zero the CLI exits 0 although checks fail and prints the report path."""
    tmp = demo["tmp"]
    code = cli(["nightly", "--store", str(tmp / "store.duckdb"), "--raw", str(demo["raw"]),
                 "--reports", str(tmp / "reports"), "--exit-zero"])
    out = capsys.readouterr().out
    assert code == 0
    assert "FAIL (exit 0)" in out and "report: " in out
    path = out.strip().splitlines()[-1].split("report: ", 1)[1]
    assert path.endswith("report.html") and Path(path).is_file()


def test_an_unknown_fluid_is_a_usage_error(demo):
    """--fluid naming a fluid the store does not hold raises a one-line user error."""
    with pytest.raises(CheckError, match="unknown fluid.*no-such-fluid"):
        nightly(demo["tmp"], demo["raw"], fluids=("no-such-fluid",))


def test_a_batch_that_cannot_be_ingested_exits_2(tmp_path):
    """A malformed batch.toml makes the run an input error (exit 2), named in the summary,
    while the other batches are still loaded, fitted and checked."""
    raw = copy_demo(tmp_path, ("tegeler-1999-argon-ancillaries",))
    add_batch(raw, "broken-batch", "[source\nid = 'x'\n")
    result = nightly(tmp_path, raw)
    assert (result.verdict, result.exit_code) == ("input-error", 2)
    errors = result.stages["ingest"].detail["errors"]
    assert [e["batch"] for e in errors] == ["broken-batch"]
    assert result.stages["check"].detail["n_rechecked"] >= 1
    assert result.publish["status"] == "skipped" and "ingested" in result.publish["reason"]
    assert "broken-batch" in Path(result.report["summary"]).read_text()
    assert "broken-batch" in Path(result.report["html"]).read_text()
