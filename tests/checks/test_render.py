"""JSON (schema-validated) and JUnit XML forms of a check run, and the human table."""

import io
import json
import xml.etree.ElementTree as ET
from pathlib import Path

import jsonschema
import pytest

from check_fixtures import co2, stack, water, water_observations
from pipeline.checks import run_checks
from pipeline.checks.render import ResultsSchemaError, junit_xml, print_run, validate, write_json
from pipeline.checks.results import CheckResult, CheckRun

SCHEMA = Path(__file__).resolve().parents[2] / "schemas" / "check-results.schema.json"


@pytest.fixture(scope="module")
def run():
    """A run with passes, skips, a failure (denser ice) and a warning (a duplicated file)."""
    obs = water_observations(rho_ice=1083.0)
    copy = obs[obs["file_path"] == "memory/lab-a.csv"].copy()
    copy["file_path"] = "memory/lab-a-copy.csv"
    return run_checks([water(rho_ice=1083.0, observations=stack(obs, copy)), co2()])


def _error_run(run):
    err = CheckResult("data.ranges", "water", "", "error", "fail", "the check raised KeyError: 'x'",
                      evidence={"exception": "KeyError"})
    return CheckRun(run.run_id, run.started_at, run.finished_at, run.pipeline_version, run.parameters,
                    run.checks, run.fluids, run.results + [err], run.duration_s)


def test_json_output_validates_against_the_schema(run, tmp_path):
    """write_json produces a document valid under schemas/check-results.schema.json (2020-12)."""
    doc = write_json(run, tmp_path / "r.json")
    on_disk = json.loads((tmp_path / "r.json").read_text())
    assert on_disk == doc
    jsonschema.Draft202012Validator(json.loads(SCHEMA.read_text())).validate(on_disk)
    assert on_disk["run"]["counts"] == run.counts()
    assert on_disk["results"][0]["status"] == "fail"


def test_schema_rejects_a_malformed_document(run):
    """A result with an unknown status is refused before anything is written."""
    doc = run.asdict()
    doc["results"][0]["status"] = "maybe"
    with pytest.raises(ResultsSchemaError, match="status"):
        validate(doc)


def test_junit_xml_parses_with_the_right_counts(run):
    """One suite per check; failures, errors and skips counted per suite and in total."""
    r = _error_run(run)
    root = ET.fromstring(junit_xml(r))
    suites = root.findall("testsuite")
    assert [s.get("name") for s in suites] == r.checks
    counts = r.counts()
    assert int(root.get("tests")) == len(r.results)
    assert int(root.get("failures")) == counts["fail"] == len(root.findall(".//failure"))
    assert int(root.get("errors")) == counts["error"] == len(root.findall(".//error")) == 1
    assert int(root.get("skipped")) == counts["skip"] == len(root.findall(".//skipped"))
    warned = [c for c in root.iter("testcase") if c.find("system-out") is not None]
    assert len(warned) == counts["warn"] >= 1
    assert warned[0].find("failure") is None


def test_junit_failure_carries_message_and_evidence(run):
    """A failed case has the finding's message as attribute and its evidence as JSON text."""
    root = ET.fromstring(junit_xml(run))
    failure = root.find(".//testcase/failure")
    assert failure.get("message")
    assert isinstance(json.loads(failure.text), dict)


def test_plain_table_lists_failures_first_and_ends_with_the_verdict(run):
    """Plain text (not a terminal): FAIL rows before WARN rows, counts per check, then the verdict."""
    out = io.StringIO()
    print_run(run, out)
    text = out.getvalue()
    assert text.index("FAIL") < text.index("WARN")
    assert "results per check" in text and text.rstrip().splitlines()[-1].startswith("check run ")
    assert "PASS" not in text
    out = io.StringIO()
    print_run(run, out, show_all=True)
    assert "PASS" in out.getvalue()


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_terminal_findings_never_split_a_check_id(run, monkeypatch):
    """On a narrow terminal every check id and fluid id of a listed finding stays on one line
    (the message wraps instead)."""
    monkeypatch.setenv("COLUMNS", "60")
    out = _Terminal()
    print_run(run, out)
    text = out.getvalue()
    for r in run.by_status(("fail", "warn")):
        assert any(r.check_id in line and r.fluid_id in line for line in text.splitlines()), r
