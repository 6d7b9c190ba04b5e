"""Batches of small CSV files load together in few statements, and exactly as they would alone."""

from __future__ import annotations

import pytest

import pipeline.ingest.grouped as grouped
from pipeline.ingest.stage import run_ingest
from pipeline.store import open_store
from tests.conftest import write_batch
from tests.ingest.store_snapshot import snapshot
from tests.storekit import batch_toml, source, vp_table

# argon vapour pressures near the normal boiling point (approximate values, test data only);
# one row not a number and one repeated row, so that quarantine ids are exercised too
ROWS = "T,p\n85.0,78.9\n87.3,101.3\n90.0,133.6\n91.0,n.m.\n87.3,101.3\n"


def two_tables(source_id: str) -> str:
    """An argon batch of two tables: kPa in kelvin with u stated, bar in degC without."""
    return batch_toml(
        source(source_id, "Test rig, invented campaign for the test suite"),
        [vp_table(p_unit="kPa", u_T_K=0.01, u_p_rel=0.001),
         vp_table(file="vp2.csv", p_unit="bar", u_p_rel=None,
                  temperature={"column": "T", "unit": "degC"})], format_version=None)


def _raw(root, names, *, clash: str | None = None):
    for i, name in enumerate(names):
        src = "rig-shared" if name == clash or (clash and i == 0) else f"rig-{name}"
        write_batch(root, name, two_tables(src), {
            "vp.csv": ROWS.replace("78.9", f"78.{i}"),
            "vp2.csv": ROWS.replace("85.0", f"-18{i}.0").replace("78.9", f"0.7{i}")})
    return root


def _ingest(path, raw):
    with open_store(path) as s:
        result = run_ingest(s.con, [raw])
        return result, snapshot(s.con)


def test_a_group_gives_the_store_what_one_batch_at_a_time_gives(raw_root, tmp_path,
                                                                 monkeypatch):
    """Six batches of two layouts loaded as one group leave every table (ids, row numbers, values, quarantine ids and messages) equal to loading them one at a time."""
    _raw(raw_root, [f"b{i}" for i in range(6)])
    calls = []
    original = grouped.load_group

    def counted(ing, pendings):
        calls.append(len(pendings))
        return original(ing, pendings)
    monkeypatch.setattr(grouped, "load_group", counted)
    together, snap_together = _ingest(tmp_path / "together.duckdb", raw_root)
    assert calls == [6]
    monkeypatch.setattr(grouped, "GROUP_BATCHES", 1)
    alone, snap_alone = _ingest(tmp_path / "alone.duckdb", raw_root)
    assert calls == [6]                         # one batch per group: no group loads at all
    assert snap_together == snap_alone
    assert [b.rows for b in together.batches] == [b.rows for b in alone.batches] == \
        [(10, 6, 4)] * 6
    assert len(snap_together["quarantine"]) - 1 == 24


@pytest.mark.parametrize("fault", ["source-clash", "duplicate-file", "exception"])
def test_a_failing_batch_in_a_group_refuses_only_itself(raw_root, tmp_path, monkeypatch, fault):
    """A batch that fails while its group loads (a source another batch of the group declares, a file with the content of another, a fault of the code) is refused alone and named; the group's transaction is rolled back and its other batches load with the ids they would have had without it."""
    names = ["a", "b", "c"]
    _raw(raw_root, names, clash="b" if fault == "source-clash" else None)
    if fault == "duplicate-file":
        (raw_root / "b" / "vp2.csv").write_bytes((raw_root / "a" / "vp.csv").read_bytes())
    if fault == "exception":
        original = grouped.layout

        def faulty(spec, molar_mass):
            if spec.temperature.unit == "degC":
                raise ZeroDivisionError("a bug")
            return original(spec, molar_mass)
        monkeypatch.setattr(grouped, "layout", faulty)
    result, snap = _ingest(tmp_path / "store.duckdb", raw_root)
    statuses = {b.batch: b.status for b in result.batches}
    if fault == "exception":        # not a batch's fault: one at a time, every batch loads
        assert statuses == {"a": "loaded", "b": "loaded", "c": "loaded"}
    else:
        assert statuses == {"a": "loaded", "b": "error", "c": "loaded"}
        assert result.batches[1].error.startswith("b")
    # the same store as one batch at a time: the failed group gave no ids away
    monkeypatch.setattr(grouped, "GROUP_BATCHES", 1)
    alone, snap_alone = _ingest(tmp_path / "alone.duckdb", raw_root)
    assert snap == snap_alone
    assert [b.error for b in result.batches] == [b.error for b in alone.batches]


def test_the_same_batch_named_twice_loads_once(raw_root, tmp_path):
    """A batch reached through two paths of one ingest loads once; the second time it is unchanged."""
    _raw(raw_root, ["a", "b"])
    with open_store(tmp_path / "store.duckdb") as s:
        result = run_ingest(s.con, [raw_root, raw_root / "a"])
    assert [(b.batch, b.status) for b in result.batches] == [
        ("a", "loaded"), ("b", "loaded"), ("a", "unchanged")]
