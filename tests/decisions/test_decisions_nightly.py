"""The nightly job honours the demo curator's two decisions and says so in the report and the provenance."""

from __future__ import annotations

import json

from decisions_fixtures import CO2_RIG_A, CO2_RIG_A_SOURCE, demo_copy
from pipeline.cli import main


def test_nightly_honours_an_exclusion_and_a_waiver(tmp_path_factory, tmp_path, capsys):
    """After excluding CO2 rig-A row 16 and waiving water's outlier warning, the nightly fit, checks, report and a release all name D-0001 and D-0002."""
    demo = demo_copy(tmp_path_factory, tmp_path)
    assert demo.decide("exclude-observations", "--source", CO2_RIG_A_SOURCE, "--file", CO2_RIG_A,
                       "--row", "16", "--quantity", "pressure", why="transducer spike") == 0
    assert demo.decide("waive-check", "--check", "data.outliers", "--fluid", "water",
                       "--subject", "curve:liquid-vapour", why="the degC-as-K file") == 0
    reports = tmp_path / "reports"
    assert main(["nightly", "-q", "--exit-zero", "--raw", str(demo.raw), "--reports",
                 str(reports), "--store", str(demo.store)]) == 0
    html = (reports / "latest" / "report.html").read_text("utf-8")
    section = html[html.index('<h2 id="decisions">'):]
    section = section[:section.index("</table>")]
    assert section.count("<td>applied</td>") == 2
    assert "D-0001" in section and "D-0002" in section and "1 observation, 1 fit" in section
    results = json.loads((reports / "latest" / "results.json").read_text("utf-8"))
    waived = [r for r in results["results"] if r["status"] == "waived"]
    assert [(r["check_id"], r["fluid_id"], r["decision_id"]) for r in waived] == \
        [("data.outliers", "water", "D-0002")]
    assert not [r for r in results["results"] if r["check_id"] == "data.outliers"
                and r["fluid_id"] == "carbon-dioxide" and r["subject"] == "curve:liquid-vapour"
                and r["status"] == "warn"]
    assert demo.query("SELECT excluded_by FROM fit_residual r JOIN fit f USING (fit_id) "
                      "WHERE f.is_current AND r.excluded_by IS NOT NULL") == [("D-0001",)]
    assert demo.cli("publish", "-q", "--allow-failures", "--out", str(tmp_path / "out")) == 0
    assert demo.query("SELECT value_id FROM curated_provenance WHERE "
                      "list_contains(decision_ids, 'D-0001') ORDER BY 1") == [
        ("carbon-dioxide/constant/acentric_factor",),
        ("carbon-dioxide/curve:liquid-vapour/pressure",)]
