"""Run history: status transitions of (check, fluid) pairs computed from stored check runs."""

from __future__ import annotations

import pytest

from pipeline.checks.engine import store_run
from pipeline.checks.results import CheckResult, CheckRun
from pipeline.report.history import Transition, run_history, transitions
from pipeline.store import open_store


def _run(con, run_id: str, second: int, results: list[tuple[str, str, str, str]]):
    """Store a check run of (check, fluid, subject, status) results."""
    rows = [CheckResult(c, f, s, st, "fail", f"{c} {f} {st}") for c, f, s, st in results]
    checks = sorted({r.check_id for r in rows})
    fluids = sorted({r.fluid_id for r in rows})
    stamp = f"2026-01-01T00:00:{second:02d}Z"
    store_run(con, CheckRun(run_id, stamp, stamp, "0.1.0", {}, checks, fluids, rows))


@pytest.fixture
def con(tmp_path):
    with open_store(tmp_path / "h.duckdb") as store:
        c = store.con
        _run(c, "r1", 1, [("sources.agreement", "argon", "Tc", "pass"),
                          ("data.ranges", "argon", "", "pass"),
                          ("data.ranges", "water", "", "fail")])
        _run(c, "r2", 2, [("sources.agreement", "argon", "Tc", "fail"),
                          ("data.ranges", "argon", "", "pass"),
                          ("data.ranges", "water", "", "fail")])
        _run(c, "r3", 3, [("data.ranges", "water", "", "pass")])   # water only
        _run(c, "r4", 4, [("sources.agreement", "argon", "Tc", "pass"),
                          ("sources.agreement", "argon", "pc", "skip"),
                          ("data.ranges", "argon", "", "pass"),
                          ("data.ranges", "water", "", "pass")])
        yield c


def _moves(ts):
    return [(t.run_id, t.check_id, t.fluid_id, t.before, t.after, t.kind) for t in ts]


def test_transitions_walk_every_run_in_order(con):
    """Each movement is reported in the run where it happened, against the last run that
    checked the pair; runs that did not check a fluid leave its status alone."""
    assert _moves(transitions(con)) == [
        ("r1", "data.ranges", "water", None, "fail", "new-failure"),
        ("r2", "sources.agreement", "argon", "pass", "fail", "new-failure"),
        ("r3", "data.ranges", "water", "fail", "pass", "fixed"),
        ("r4", "sources.agreement", "argon", "fail", "pass", "fixed"),
    ]


def test_transitions_between_two_chosen_runs(con):
    """Given two runs, the later is compared with the earlier only."""
    assert _moves(transitions(con, ["r1", "r4"])) == [
        ("r1", "data.ranges", "water", None, "fail", "new-failure"),
        ("r4", "data.ranges", "water", "fail", "pass", "fixed"),
    ]
    assert _moves(transitions(con, ["r2", "r4"], first_appearances=False)) == [
        ("r4", "data.ranges", "water", "fail", "pass", "fixed"),
        ("r4", "sources.agreement", "argon", "fail", "pass", "fixed"),
    ]


def test_a_new_failing_subject_in_a_failing_pair_is_a_new_failure(con):
    """A pair still failing but with another subject failing is listed as a new failure."""
    _run(con, "r5", 5, [("data.ranges", "water", "", "fail")])
    _run(con, "r6", 6, [("data.ranges", "water", "", "fail"),
                        ("data.ranges", "water", "file:b.csv", "fail")])
    (t,) = [t for t in transitions(con, ["r5", "r6"]) if t.run_id == "r6"]
    assert (t.before, t.after, t.kind, t.new_failing) == ("fail", "fail", "new-failure",
                                                          ("file:b.csv",))


def test_fluid_filter_and_str(con):
    """Transitions restricted to a fluid read like 'check fluid: before -> after (run X)'."""
    ts = transitions(con, fluids=["argon"])
    assert [str(t) for t in ts] == ["sources.agreement argon: pass -> fail (run r2)",
                                    "sources.agreement argon: fail -> pass (run r4)"]
    assert Transition("r", None, "c.x", "f", None, "fail").kind == "new-failure"


def test_run_history_lists_newest_first_with_counts(con):
    """run_history gives the latest runs first, counts per status and their transitions."""
    entries = run_history(con, limit=2)
    assert [e.run_id for e in entries] == ["r4", "r3"]
    assert entries[0].counts["pass"] == 3 and entries[0].counts["skip"] == 1
    assert [str(t) for t in entries[0].transitions] == [
        "sources.agreement argon: fail -> pass (run r4)"]
    assert "fixed" in entries[0].asstr()
    water = run_history(con, fluids=["water"], limit=10)
    assert [e.run_id for e in water] == ["r4", "r3", "r2", "r1"]
    assert water[1].status == "ok" and water[2].status == "failed"


def test_partial_runs_are_marked_with_what_they_were_restricted_to(con):
    """A run of a selection of checks or fluids is marked PARTIAL with that selection; a run
    of everything is not."""
    rows = [CheckResult("data.ranges", "water", "", "pass", "fail", "ok")]
    store_run(con, CheckRun("r7", "2026-01-01T00:00:07Z", "2026-01-01T00:00:07Z", "0.1.0",
                            {"checks_requested": ["data.ranges"], "tags": None,
                             "fluids": ["water"], "checks": ["data.ranges"]},
                            ["data.ranges"], ["water"], rows))
    entries = run_history(con, limit=2)
    assert entries[0].partial == "1 check (--check data.ranges); fluid water"
    assert "r7 [PARTIAL: 1 check (--check data.ranges); fluid water]: ok" in entries[0].asstr()
    assert entries[1].partial is None and "PARTIAL" not in entries[1].asstr()
    assert entries[0].asdict()["partial"] == entries[0].partial
