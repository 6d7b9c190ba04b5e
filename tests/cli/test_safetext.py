"""Control characters from raw files never reach an output raw (issue 13, case 6)."""

from __future__ import annotations

import logging
import sys
import xml.etree.ElementTree as ET

import pytest

from pipeline.checks.render import junit_xml
from pipeline.checks.results import CheckResult, CheckRun
from pipeline.cli import main
from pipeline.report.summary import render_summary
from pipeline.safetext import SafeFormatter, SafeStream, clean
from tests.conftest import FLUIDS_TOML, SIMPLE_BATCH, write_batch

HOSTILE = "rig\x1b[2J\x1b]0;owned\x07\r\u202eevil\x00"
RAW_CONTROLS = ("\x1b", "\x07", "\x00", "\r", "\u202e")


def _raw_controls(text: str) -> list[str]:
    return [c for c in RAW_CONTROLS if c in text]


@pytest.mark.parametrize("text,expected", [
    ("plain text, tabs\tand\nnewlines", "plain text, tabs\tand\nnewlines"),
    ("\x1b[31mred", "\\x1b[31mred"),
    ("bell\x07", "bell\\x07"),
    ("carriage\rreturn", "carriage\\x0dreturn"),
    ("right-to-left \u202eoverride", "right-to-left \\u202eoverride"),
    ("C1 \x9b control", "C1 \\x9b control"),
    ("undecodable \udcff byte", "undecodable \\udcff byte"),
    ("accents é ü and 漢字 stay", "accents é ü and 漢字 stay"),
])
def test_clean_escapes_only_unsafe_characters(text, expected):
    """clean() turns each control, bidi override or lone surrogate into a visible escape and keeps everything else."""
    assert clean(text) == expected


def test_clean_one_line_escapes_line_breaks_too():
    """A message meant for one line keeps no newline or tab."""
    assert clean("a\nb\tc", one_line=True) == "a\\x0ab\\x09c"


def test_safe_stream_and_formatter_clean_what_they_write(capsys):
    """The CLI's stream wrapper and log formatter write no raw control character."""
    SafeStream(sys.stdout).write(f"batch {HOSTILE}\n")
    record = logging.LogRecord("pipeline.x", logging.ERROR, __file__, 1, "ingest: %s",
                               (HOSTILE + "\nfake line",), None)
    line = SafeFormatter("%(levelname)s %(message)s").format(record)
    out = capsys.readouterr().out
    assert not _raw_controls(out) and "\\x1b[2J" in out
    assert not _raw_controls(line) and "\n" not in line and "fake line" in line


def _run_with(message: str) -> CheckRun:
    result = CheckResult(check_id="data.outliers", fluid_id="argon", subject="curve:lv",
                         status="waived", severity="warn", message=message,
                         evidence={"file": HOSTILE}, decision_id="D-0001")
    fail = CheckResult(check_id="data.outliers", fluid_id="water", subject="curve:lv",
                       status="fail", severity="fail", message=message,
                       evidence={"file": HOSTILE})
    return CheckRun(run_id="check-x", started_at="2026-01-01T00:00:00Z",
                    finished_at="2026-01-01T00:00:01Z", pipeline_version="0",
                    parameters={}, checks=["data.outliers"], fluids=["argon", "water"],
                    results=[result, fail])


def test_junit_xml_stays_valid_with_control_characters_in_messages():
    """Case 6: a decision's reason or a folder name holding ESC, BEL or NUL leaves junit.xml parseable, the characters escaped."""
    xml = junit_xml(_run_with(f"outlier in {HOSTILE}/vp.csv [waived by D-0001: {HOSTILE}]"))
    root = ET.fromstring(xml.encode("utf-8"))
    messages = [e.get("message") for e in root.iter() if e.get("message")]
    assert messages and all("\\x1b[2J" in m for m in messages)


def test_summary_markdown_escapes_control_characters():
    """Case 6: summary.md names a refused batch whose folder name holds control characters without writing them raw."""
    nightly = {"run_id": "nightly-x", "verdict": "input-error", "exit_code": 2, "counts": {},
               "changes": {"new_failures": [], "fixed": [], "values": []},
               "previous_run_id": None, "publish": {"status": "skipped"},
               "stages": {"ingest": {"detail": {"errors": [
                   {"batch": HOSTILE, "error": f"{HOSTILE}/batch.toml: malformed"}]}}}}
    text = render_summary(nightly, "report.html")
    assert not _raw_controls(text) and "\\x1b[2J" in text


def test_control_characters_in_a_folder_name_reach_the_terminal_escaped(tmp_path, capsys):
    """Case 6: a batch folder whose name holds ESC and BEL is named in the ingest output with visible escapes, never raw."""
    raw = tmp_path / "raw"
    raw.mkdir()
    (raw / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    name = "rig\x1b[2J\x07b"
    write_batch(raw, name, SIMPLE_BATCH.format(source="rig-b"), {"vp.csv": "T,p\n"})
    code = main(["ingest", str(raw), "--store", str(tmp_path / "s.duckdb")])
    out, err = capsys.readouterr()
    assert code == 2
    assert not _raw_controls(out + err), (out, err)
    assert "rig\\x1b[2J\\x07b/vp.csv: file has a header but no data rows" in err
