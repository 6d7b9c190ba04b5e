"""What changed between nightly runs: a discrepant source breaks the clean fluid, then leaves."""

from __future__ import annotations

import shutil
from pathlib import Path

import duckdb
import pytest

from nightly_fixtures import (ARGON_BATCHES, DISCREPANT_ARGON, add_batch, cli, copy_demo,
                              next_second, nightly)
from pipeline.report.history import run_history
from tests.storekit import batch_toml, source, vp_table


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    """Argon only (the clean fluid): a clean run, a run with a discrepant Tc source added, a
    run after it was removed."""
    tmp = tmp_path_factory.mktemp("nightly-argon")
    raw = copy_demo(tmp, ARGON_BATCHES)
    clean = nightly(tmp, raw)
    batch = add_batch(raw, "lit-argon-critical-discrepant", DISCREPANT_ARGON)
    next_second()
    broken = nightly(tmp, raw)
    shutil.rmtree(batch)
    next_second()
    fixed = nightly(tmp, raw)
    return {"tmp": tmp, "raw": raw, "clean": clean, "broken": broken, "fixed": fixed}


def test_clean_argon_passes_and_publishes(scenario):
    """Argon alone passes every check (exit 0) and the run publishes a release."""
    clean = scenario["clean"]
    assert (clean.verdict, clean.exit_code) == ("pass", 0)
    assert clean.counts["fail"] == 0 and clean.counts["error"] == 0
    assert clean.publish["status"] in ("published", "skipped")
    if clean.publish["status"] == "skipped":   # only while the publish stage is absent
        assert clean.publish["reason"] == "publish skipped: stage unavailable"
    else:
        assert clean.publish["release_id"]


def test_a_discrepant_source_is_a_new_failure(scenario):
    """Adding a second argon Tc 0.5 K off makes the next run exit 1 and list
    sources.agreement argon as a new failure, without publishing."""
    broken = scenario["broken"]
    assert (broken.verdict, broken.exit_code) == ("fail", 1)
    new = [(t["check_id"], t["fluid_id"], t["before"], t["after"])
           for t in broken.changes["new_failures"]]
    assert ("sources.agreement", "argon", "skip", "fail") in new or \
           ("sources.agreement", "argon", "pass", "fail") in new
    assert broken.previous_run_id == scenario["clean"].run_id
    assert broken.publish["status"] == "skipped"
    summary = Path(broken.report["summary"]).read_text()
    assert "New failures" in summary and "sources.agreement" in summary
    assert broken.stages["ingest"].detail["loaded"] == ["lit-argon-critical-discrepant"]


def test_only_the_changed_fluid_is_rechecked(scenario):
    """The added batch touches argon only: argon is re-checked, the other fluids' results are
    reused from the previous run."""
    check = scenario["broken"].stages["check"].detail
    assert check["rechecked"] == ["argon"]
    assert check["n_reused"] == 3
    assert check["reused_from"] == [scenario["clean"].check_run_id]


def test_removing_the_source_lists_the_failure_as_fixed(scenario):
    """Removing the batch again brings argon back to passing: listed as fixed, exit 0."""
    fixed = scenario["fixed"]
    assert fixed.exit_code == 0
    assert [(t["check_id"], t["fluid_id"], t["before"]) for t in fixed.changes["fixed"]] == [
        ("sources.agreement", "argon", "fail")]
    assert not fixed.changes["new_failures"]
    assert "Fixed (1)" in Path(fixed.report["summary"]).read_text()
    # the fit of the critical point is back to the clean run's: same fits as the first run
    assert fixed.stages["ingest"].detail["removed"]


def test_the_report_shows_a_citation_with_markup_as_text(scenario):
    """The discrepant source's citation holds <script>: the report escapes it."""
    html = Path(scenario["broken"].report["html"]).read_text()
    assert "&lt;script&gt;alert(&#x27;pwned&#x27;)&lt;/script&gt;" in html
    assert "<script>alert" not in html and "<script" not in html
    assert "argon &amp; its critical point" in html


def test_history_lists_the_status_movements(scenario):
    """history shows argon's sources.agreement moving to fail and back, run by run."""
    with duckdb.connect(str(scenario["tmp"] / "store.duckdb"), read_only=True) as con:
        entries = run_history(con, fluids=["argon"], limit=10)
    assert [e.run_id for e in entries] == [scenario[k].check_run_id
                                           for k in ("fixed", "broken", "clean")]
    moved = {e.run_id: [(t.check_id, t.before, t.after) for t in e.transitions]
             for e in entries}
    assert ("sources.agreement", "fail", "pass") in moved[scenario["fixed"].check_run_id] or \
           ("sources.agreement", "fail", "skip") in moved[scenario["fixed"].check_run_id]
    assert any(c == "sources.agreement" and a == "fail"
               for c, _, a in moved[scenario["broken"].check_run_id])
    assert entries[0].nightly_run_id == scenario["fixed"].run_id


def test_history_command_prints_transitions(scenario, capsys):
    """`fluidledger history --fluid argon` prints 'sources.agreement argon: fail -> ...'."""
    code = cli(["history", "--store", str(scenario["tmp"] / "store.duckdb"), "--fluid",
                 "argon", "--limit", "2"])
    out = capsys.readouterr().out
    assert code == 0
    assert "sources.agreement argon: fail -> " in out
    assert f"(run {scenario['fixed'].check_run_id})" in out
    assert scenario["clean"].check_run_id not in out   # --limit 2 leaves the oldest out


SHIFTED_ARGON = batch_toml(
    source("lab-argon-shifted",
           "Invented test campaign: argon vapour pressures 0.25 % above the reference"),
    [vp_table(p_unit="kPa", u_T_K=0.002, u_p_rel=0.001)])


def test_a_changed_fit_lists_its_reference_value_in_units_of_u(scenario):
    """New argon data 0.25 % high move the vapour-pressure curve, and the clean run lists it
    from the publish stage's release diff with its change in units of u (changes the store)."""
    from pipeline.correlations import reference_curve

    curve = reference_curve("argon", "liquid-vapour", "pressure")
    rows = "\n".join(f"{T:.3f},{1.0025 * curve.value(T) / 1e3:.6f}"
                     for T in (90.0, 100.0, 110.0, 120.0, 130.0, 140.0))
    add_batch(scenario["raw"], "lab-argon-shifted", SHIFTED_ARGON, {"vp.csv": "T,p\n" + rows})
    next_second()
    moved = nightly(scenario["tmp"], scenario["raw"])
    assert moved.publish["status"] == "published"     # a clean run: the release diff is used
    assert "publish stage's diff" in moved.changes["values_basis"]
    (v,) = [v for v in moved.changes["values"] if "liquid-vapour" in v["group"]
            and "pressure" in v["group"]]
    assert v["fluid_id"] == "argon" and v["shift_u"] is not None and v["shift_u"] != 0
    assert "Changed values" in Path(moved.report["summary"]).read_text()


def test_fit_value_changes_give_the_shift_in_units_of_u(scenario):
    """From the fits (the basis when no new release is made): the vapour-pressure fit's p at
    T_ref before and after, the change, and the change over the earlier standard
    uncertainty."""
    from pipeline.report.changes import fit_value_changes

    with duckdb.connect(str(scenario["tmp"] / "store.duckdb"), read_only=True) as con:
        ids = [r[0] for r in con.execute(
            "SELECT fit_id FROM fit WHERE fluid_id = 'argon' AND boundary = 'liquid-vapour' "
            "AND quantity = 'pressure' ORDER BY fitted_at").fetchall()]
        assert len(ids) >= 2
        group = "liquid-vapour/-/pressure"
        (v,) = fit_value_changes(con, {"argon": {group: ids[0]}}, {"argon": {group: ids[-1]}})
    assert v["delta"] != 0 and v["delta"] == pytest.approx(v["after"] - v["before"])
    assert v["u"] > 0 and v["shift_u"] == pytest.approx(v["delta"] / v["u"])
    assert (v["fit_before"], v["fit_after"]) == (ids[0], ids[-1])
