"""The engine: severities, error isolation, skips, the waiver hook, storing a run."""

import dataclasses
import json

import duckdb
import pytest

from check_fixtures import co2, water
from pipeline.checks import CheckSpec, Thresholds, registry, run_checks, store_run
from pipeline.checks.findings import Finding
from pipeline.errors import CheckError
from pipeline.store import open_store


def _add_check(monkeypatch, check_id, fn, *, vectorised=False, severity="fail"):
    registry.all_checks()
    monkeypatch.setitem(registry._REGISTRY, check_id,
                        CheckSpec(check_id, "test check", ("test",), severity, fn, vectorised))


def test_a_check_that_raises_is_an_error_and_the_other_checks_still_run(monkeypatch):
    """A raising check gives one error result per fluid; triple-point.on-curves still passes; exit 3."""
    def boom(fluid, th):
        raise RuntimeError("synthetic failure")
    _add_check(monkeypatch, "test.raises", boom)
    run = run_checks([water(), co2()], checks=["test.raises", "triple-point.on-curves"],
                     thresholds=Thresholds.load())
    errors = [r for r in run.results if r.status == "error"]
    assert {(r.check_id, r.fluid_id) for r in errors} == {("test.raises", "water"), ("test.raises", "carbon-dioxide")}
    assert "RuntimeError: synthetic failure" in errors[0].message
    assert any(r.check_id == "triple-point.on-curves" and r.status == "pass" for r in run.results)
    assert run.exit_code() == 3 and run.status == "error"


def test_a_vectorised_check_failing_on_one_fluid_is_isolated_to_that_fluid(monkeypatch):
    """A batch check raising because of CO2 is re-run per fluid: water passes, CO2 errors."""
    def picky(batch, th):
        if "carbon-dioxide" in batch.fluids:
            raise ValueError("cannot handle CO2")
        return [Finding(f.fluid_id, "", "pass", "fine") for f in batch]
    _add_check(monkeypatch, "test.picky", picky, vectorised=True)
    run = run_checks([water(), co2()], checks=["test.picky"], thresholds=Thresholds.load())
    assert {r.fluid_id: r.status for r in run.results} == {"water": "pass", "carbon-dioxide": "error"}


def test_violation_takes_the_severity_and_a_per_fluid_override_can_soften_it():
    """Ice made denser fails clapeyron.slope-sign; a [fluid.water] severity = 'warn' makes it a warning."""
    dense = [water(rho_ice=1083.0)]
    run = run_checks(dense, checks=["clapeyron.slope-sign"])
    assert run.counts()["fail"] >= 1 and run.exit_code() == 1
    base = Thresholds.load()
    softened = Thresholds({c: base.for_check(c) for c in base.check_ids()},
                          {"water": {"clapeyron.slope-sign": {"severity": "warn"}}})
    run = run_checks(dense, checks=["clapeyron.slope-sign"], thresholds=softened)
    assert run.counts()["fail"] == 0 and run.counts()["warn"] >= 1
    assert run.exit_code() == 0 and run.exit_code("warn") == 1


def test_a_fluid_the_check_says_nothing_about_gets_a_skip():
    """acentric.factor without a stated ω yields a skip result, never a silent gap."""
    (r,) = run_checks([water()], checks=["acentric.factor"]).results
    assert r.status == "skip" and "nothing to check" in r.message


def test_repeated_subjects_are_made_unique(monkeypatch):
    """Two findings with one subject are stored as 'x' and 'x#2' (the table's primary key)."""
    def twice(fluid, th):
        return [Finding(fluid.fluid_id, "x", "pass", "one"), Finding(fluid.fluid_id, "x", "pass", "two")]
    _add_check(monkeypatch, "test.twice", twice)
    run = run_checks([water()], checks=["test.twice"], thresholds=Thresholds.load())
    assert [r.subject for r in run.results] == ["x", "x#2"]


def test_postprocessors_can_waive_a_failure():
    """A post-processing step (the waiver hook) turns a failure into 'waived' with its decision id."""
    def waive_all(results, batch):
        return [r.waive("decision-7", "accepted by the curator") if r.status == "fail" else r for r in results]
    run = run_checks([water(rho_ice=1083.0)], checks=["clapeyron.slope-sign"], postprocessors=[waive_all])
    waived = [r for r in run.results if r.status == "waived"]
    assert waived and all(r.decision_id == "decision-7" for r in waived)
    assert run.exit_code() == 0


def test_unknown_selection_is_a_check_error_listing_the_valid_names():
    """An unknown check id, tag or fluid raises CheckError naming the valid choices."""
    with pytest.raises(CheckError, match="valid ids: triple-point.on-curves"):
        run_checks([water()], checks=["no.such-check"])
    with pytest.raises(CheckError, match="valid tags:"):
        run_checks([water()], tags=["nope"])
    with pytest.raises(CheckError, match="unknown fluid.*helium"):
        run_checks([water()], fluid_ids=["helium"])


def test_tags_select_the_checks_that_carry_them():
    """--tag critical runs the critical checks and not, e.g., data.duplicates."""
    run = run_checks([water()], tags=["critical"])
    assert {"critical.curve-end", "critical.no-vle-above-tc", "critical.density-convergence"} <= set(run.checks)
    assert "data.duplicates" not in run.checks


def test_the_run_and_its_results_are_stored_in_one_transaction(tmp_path):
    """store_run writes a 'check' run row and every result; a second identical write changes nothing."""
    run = run_checks([water(), co2()])
    with open_store(tmp_path / "s.duckdb") as s:
        store_run(s.con, run)
        kind, status, summary = s.con.execute("SELECT kind, status, summary_json FROM run").fetchone()
        n = s.con.execute("SELECT count(*) FROM check_result WHERE run_id = ?", [run.run_id]).fetchone()[0]
        assert (kind, status, n) == ("check", run.status, len(run.results))
        assert json.loads(summary)["counts"] == run.counts()
        with pytest.raises(duckdb.ConstraintException):
            store_run(s.con, run)
        assert s.con.execute("SELECT count(*) FROM check_result").fetchone()[0] == n
        assert s.con.execute("SELECT count(*) FROM run").fetchone()[0] == 1


def test_results_carry_thresholds_input_hash_and_timing():
    """Every result records the thresholds in force, the fluid's input hash and a duration."""
    run = run_checks([water()], checks=["triple-point.on-curves"])
    r = run.results[0]
    assert r.thresholds["z_max"] == 3.0 and r.thresholds["severity"] == "fail"
    assert r.input_hash == water().input_hash and r.duration_s >= 0
    assert dataclasses.asdict(r)["check_id"] == "triple-point.on-curves"


def test_results_stay_columns_from_the_checks_to_the_store(tmp_path):
    """A run and its store write make no result object: rows become CheckResult only when read."""
    run = run_checks([water(), co2()])
    with open_store(tmp_path / "s.duckdb") as s:
        store_run(s.con, run)
        stored = s.con.execute("SELECT check_id, fluid_id, subject, status, evidence_json FROM check_result "
                               "ORDER BY check_id, fluid_id, subject").fetchall()
    assert all(r is None for r in run.table._objects)
    expected = sorted((r.check_id, r.fluid_id, r.subject, r.status, json.dumps(r.evidence, sort_keys=True))
                      for r in run.results)
    assert stored == expected


def test_the_waiver_step_reads_only_the_violations():
    """WaiverStep turns a matching failure into 'waived' and never reads the passing rows."""
    from datetime import date

    from pipeline.decisions.apply import WaiverStep
    from pipeline.decisions.model import Decision, WaiveCheck

    run = run_checks([water(rho_ice=1083.0), co2()], checks=["clapeyron.slope-sign"])
    waiver = Decision(id="D-0001", who="tester", when=date(2026, 1, 1),
                      why="ice made dense on purpose (test)",
                      waive_check=WaiveCheck(check="clapeyron.slope-sign", fluid="water"))
    violations = {i for i, s in enumerate(run.table.columns["status"]) if s in ("fail", "warn")}
    table = WaiverStep([waiver])(run.table, None)
    statuses = table.columns["status"]
    assert "waived" in statuses and "fail" not in statuses
    read = {i for i, r in enumerate(table._objects) if r is not None}
    assert read and read <= violations
