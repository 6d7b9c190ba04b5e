"""The nightly job on the demo data: exit code, the four report files, and a no-change rerun."""

from __future__ import annotations

import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

from pipeline.cli import main
from pipeline.report.files import validate_results

ROOT = Path(__file__).resolve().parents[2]


def test_nightly_on_demo_data_writes_report_and_second_run_changes_nothing(tmp_path, capsys):
    """The demo's planted flaws fail the run (exit 1); report.html, results.json (valid),
    junit.xml (parses) and summary.md are written; a rerun says 'no changes'."""
    raw = tmp_path / "raw"
    shutil.copytree(ROOT / "raw", raw)
    argv = ["nightly", "--raw", str(raw), "--store", str(tmp_path / "s.duckdb"),
            "--reports", str(tmp_path / "reports"), "-q"]
    assert main(argv) == 1
    run_dirs = [p for p in (tmp_path / "reports").iterdir() if p.name.startswith("nightly-")]
    assert len(run_dirs) == 1
    folder = run_dirs[0]
    for name in ("report.html", "results.json", "junit.xml", "summary.md"):
        assert (folder / name).stat().st_size > 0, name
    results = json.loads((folder / "results.json").read_text())
    validate_results(results)  # schemas/nightly-results.schema.json with its $ref to check-results
    suites = ET.parse(folder / "junit.xml").getroot()
    assert suites.iter("testcase") and any(True for _ in suites.iter("failure"))
    html = (folder / "report.html").read_text()
    # 2 figures x 3 fluids with findings; argon passed everything: an index row and its page
    assert "engineering judgement" in html and html.count("<svg") == 6
    assert (folder / "fluids" / "fluid-argon.html").read_text().count("<svg") == 2
    capsys.readouterr()
    assert main(argv[:-1]) == 1
    assert "no changes" in capsys.readouterr().out
