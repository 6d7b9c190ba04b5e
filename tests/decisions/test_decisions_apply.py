"""Decisions applied to the stages: fit exclusions, waivers and their lapse, dangling references."""

from __future__ import annotations

from datetime import date

import numpy as np
import pytest

from decisions_fixtures import CO2_RIG_A, CO2_RIG_A_SOURCE, CURATOR, demo_copy
from pipeline.checks import Thresholds, load_fluid_data, run_checks
from pipeline.cli import main
from pipeline.correlations.reference import reference_curve
from pipeline.decisions import (
    WaiverStep,
    exclusions_for_fit,
    load_decisions,
    resolve_all,
    with_threshold_overrides,
)
from pipeline.decisions.apply import latest_check_run
from pipeline.decisions.edit import add_decision
from pipeline.store import open_store
from tests.conftest import write_batch
from tests.storekit import ARGON_CRITICAL, batch_toml, build_store, source, vp_table


@pytest.fixture()
def demo(tmp_path_factory, tmp_path):
    return demo_copy(tmp_path_factory, tmp_path)


def resolve_all_demo(demo, **kw):
    """What the demo's decisions touch now."""
    with open_store(demo.store, read_only=True) as s:
        return resolve_all(s.con, load_decisions(demo.decisions), **kw)



def _exclude_row_16(demo) -> None:
    assert demo.decide("exclude-observations", "--source", CO2_RIG_A_SOURCE, "--file", CO2_RIG_A,
                       "--row", "16", "--quantity", "pressure",
                       why="8 % above its neighbours") == 0


def test_decide_records_the_file_hash_and_the_fit_names_the_decision(demo):
    """Excluding CO2 rig-A row 16 records the file's SHA-256; the refit leaves the point out and names D-0001."""
    _exclude_row_16(demo)
    (ref,) = [d.exclude_observations for d in load_decisions(demo.decisions)]
    (sha,) = demo.query("SELECT sha256 FROM raw_file_current WHERE path = ?", [CO2_RIG_A])[0]
    assert ref.file_sha256 == sha and ref.rows == (16,)
    (obs,) = demo.query("SELECT obs_id FROM observation_current WHERE file_path = ? AND "
                        "row_number = 16 AND quantity = 'pressure'", [CO2_RIG_A])[0]
    assert demo.cli("fit", "-q") == 0
    rows = demo.query("SELECT r.obs_id, r.excluded_by, f.n_excluded FROM fit_residual r JOIN fit f "
                      "USING (fit_id) WHERE f.is_current AND r.excluded_by IS NOT NULL")
    assert rows == [(obs, "D-0001", 1)]
    assert demo.query("SELECT count(*) FROM fit WHERE is_current AND n_excluded > 0")[0][0] == 1


ARGON_LAB = batch_toml(source("lab-ar", "Invented argon campaign for the test suite"),
                       [vp_table(p_unit="Pa", u_p_rel=0.0005)], [ARGON_CRITICAL],
                       format_version=None)


def _release(store_path, decisions, out) -> dict:
    """fit, check and publish through the CLI; the curve and T_nb of argon with provenance."""
    common = ["--store", str(store_path), "--decisions", str(decisions)]
    assert main(["fit", "-q", *common]) == 0
    main(["check", "-q", "--fluid", "argon", *common])
    assert main(["publish", "-q", "--allow-failures", "--out", str(out), *common]) == 0
    with open_store(store_path, read_only=True) as s:
        (T_nb,) = s.con.execute("SELECT value_si FROM curated_constants WHERE value_id = "
                                "'argon/constant/normal_boiling_T'").fetchone()
        prov = dict(s.con.execute("SELECT value_id, decision_ids FROM curated_provenance "
                                  "WHERE fluid_id = 'argon'").fetchall())
        fit = s.con.execute("SELECT n_excluded, fit_id FROM fit WHERE is_current").fetchone()
    return {"T_nb": T_nb, "prov": prov, "fit": fit}


def test_an_excluded_outlier_changes_the_fit_and_the_recommended_value(raw_root, store_path,
                                                                       tmp_path, capsys):
    """A +0.15 % point the fit keeps (|z| < 4) shifts the argon curve and its derived normal boiling point; excluding it restores T_nb = 87.302 K (Tegeler et al. 1999), and the fit and the values name the decision."""
    curve = reference_curve("argon", "liquid-vapour", "pressure")   # Tegeler et al. (1999)
    T = np.linspace(84.0, 148.0, 12)
    p = curve.value(T)
    p[1] *= 1.0015
    write_batch(raw_root, "lab-ar", ARGON_LAB,
                {"vp.csv": "T,p\n" + "".join(f"{t:.4f},{v:.9g}\n" for t, v in zip(T, p))})
    decisions = tmp_path / "decisions.toml"
    decisions.write_text("format_version = 1\n", encoding="utf-8")
    build_store(store_path, [raw_root])
    before = _release(store_path, decisions, tmp_path / "out")
    add_decision(decisions, who=CURATOR, why="pressure spike", action="exclude_observations",
                 spec={"source": "lab-ar", "file": "lab-ar/vp.csv", "rows": [2]})
    after = _release(store_path, decisions, tmp_path / "out")
    assert before["fit"][0] == 0 and after["fit"][0] == 1 and before["fit"][1] != after["fit"][1]
    assert abs(before["T_nb"] - after["T_nb"]) > 3e-3
    assert abs(after["T_nb"] - 87.302) < 0.2 * abs(before["T_nb"] - 87.302)
    assert before["prov"]["argon/constant/normal_boiling_T"] == []
    assert after["prov"]["argon/constant/normal_boiling_T"] == ["D-0001"]
    assert after["prov"]["argon/curve:liquid-vapour/pressure"] == ["D-0001"]
    assert after["prov"]["argon/constant/acentric_factor"] == ["D-0001"]
    assert after["prov"]["argon/critical:vapour,liquid/Tc"] == []


def _waive(demo, *extra: str) -> None:
    assert demo.decide("waive-check", "--check", "sources.agreement", "--fluid", "nitrogen",
                       *extra, why="literature Tc under review with its authors") == 0


def test_a_waived_failure_reports_waived_and_the_check_command_exits_0(demo, capsys):
    """The nitrogen Tc disagreement fails (exit 1); once waived it is 'waived' with its decision id and exit 0."""
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 1
    _waive(demo)
    capsys.readouterr()
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 0
    out = capsys.readouterr().out
    assert "WAIVED" in out and "decision D-0001: waived 1 finding" in out
    with open_store(demo.store, read_only=True) as s:
        rows = s.con.execute("SELECT subject, status, decision_id FROM check_result WHERE run_id = ?"
                             " AND status NOT IN ('pass', 'skip')", [latest_check_run(s.con)]).fetchall()
    assert rows == [("critical:vapour,liquid|Tc", "waived", "D-0001")]


def test_changing_the_waived_checks_inputs_makes_it_fail_again(demo, capsys):
    """A new nitrogen value in raw/ changes the check's input hash: the waiver lapses and the run fails."""
    _waive(demo)
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 0
    demo.edit_csv("brackenridge-rig-a-nitrogen-2023-09/nitrogen-gauge-rig-a.csv",
                  lambda lines: lines[:-2] + [lines[-2].replace(".", ".1", 1), lines[-1]])
    demo.reingest()
    assert demo.cli("fit", "-q") == 0
    capsys.readouterr()
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 1
    out = capsys.readouterr().out
    assert "waiver LAPSED (the check's inputs changed" in out
    (state,) = [t.state for t in resolve_all_demo(demo)]
    assert state == "lapsed"


def test_an_expired_waiver_lapses(demo, capsys):
    """A waiver whose date has passed leaves the failure standing and is listed as lapsed."""
    _waive(demo, "--until", "2020-01-31")
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 1
    assert "waiver LAPSED (expired on 2020-01-31)" in capsys.readouterr().out
    touches = resolve_all_demo(demo, today=date(2020, 2, 1))
    assert [(t.state, t.reason) for t in touches] == [("lapsed", "expired on 2020-01-31")]
    # the same waiver read on its last day still holds
    step = WaiverStep(load_decisions(demo.decisions), today=date(2020, 1, 31))
    with open_store(demo.store, read_only=True) as s:
        run = run_checks(load_fluid_data(s.con, ["nitrogen"]), checks=["sources.agreement"],
                         postprocessors=[step])
    assert run.counts()["waived"] == 1 and run.counts()["fail"] == 0


def test_a_decision_on_a_row_of_a_changed_file_is_dangling(demo, capsys):
    """When the rig-A file loses its last rows, the exclusion of row 16 (file changed) and of row 29 (row gone) dangle and exclude nothing."""
    _exclude_row_16(demo)
    # a hand-written decision without file_sha256, on the last row
    with open(demo.decisions, "a", encoding="utf-8") as fh:
        fh.write(f'\n[[decision]]\nid = "hand-1"\nwho = "{CURATOR}"\nwhen = 2026-12-01\n'
                 f'why = "last row looks off"\n[decision.exclude_observations]\n'
                 f'source = "{CO2_RIG_A_SOURCE}"\nfile = "{CO2_RIG_A}"\nrows = [29]\n')
    with open_store(demo.store, read_only=True) as s:
        assert len(exclusions_for_fit(s.con, load_decisions(demo.decisions))) == 3
    demo.edit_csv(CO2_RIG_A, lambda lines: lines[:-3] + [""])   # drop rows 28 and 29
    demo.reingest()
    touches = {t.decision.id: t for t in resolve_all_demo(demo)}
    assert touches["D-0001"].state == "dangling" and "changed" in touches["D-0001"].reason
    assert touches["hand-1"].state == "dangling"
    assert "row(s) 29" in touches["hand-1"].reason
    with open_store(demo.store, read_only=True) as s:
        assert exclusions_for_fit(s.con, load_decisions(demo.decisions)) == {}
    capsys.readouterr()
    assert demo.cli("decisions") == 0
    out = capsys.readouterr().out
    assert out.index("DANGLING") < out.index("D-0001")


def test_references_survive_a_reingest_of_unchanged_files(demo):
    """Re-ingesting the unchanged demo resolves the same observation."""
    _exclude_row_16(demo)
    with open_store(demo.store, read_only=True) as s:
        before = exclusions_for_fit(s.con, load_decisions(demo.decisions))
    demo.reingest()
    with open_store(demo.store, read_only=True) as s:
        assert exclusions_for_fit(s.con, load_decisions(demo.decisions)) == before
    assert list(before.values()) == ["D-0001"]


def test_threshold_override_applies_to_its_fluid_only(demo):
    """An override of data.outliers z_max for CO2 changes CO2's threshold in force, not water's."""
    assert demo.decide("override-threshold", "--check", "data.outliers", "--fluid",
                       "carbon-dioxide", "--threshold", "z_max", "--value", "500",
                       why="demo: accept the melting file's scatter while it is re-transcribed") == 0
    decisions = load_decisions(demo.decisions)
    assert decisions.decisions[0].override_threshold.value == 500
    merged = with_threshold_overrides(Thresholds.load(), decisions)
    assert merged.for_check("data.outliers", "carbon-dioxide")["z_max"] == 500
    assert merged.for_check("data.outliers", "water")["z_max"] == 3.0
    assert str(demo.decisions) in merged.files
