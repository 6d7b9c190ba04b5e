"""Batches of small CSV files load together in few statements, and exactly as they would alone."""

from __future__ import annotations

import shutil

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


# argon's triple point (Tt = 83.8058 K, ITS-90 defining fixed point; pt about 68.9 kPa) and a
# critical point near published values (test data; the constants are invented values)
TRIPLE = {"fluid": "argon", "kind": "triple", "T": {"value": 83.8058, "unit": "K", "u": 0.0002},
          "p": {"value": 68.89, "unit": "kPa", "u": 0.02}}
CRITICAL = {"fluid": "argon", "kind": "critical", "T": {"value": 150.687, "unit": "K", "u": 0.015},
            "p": {"value": 4.863, "unit": "MPa", "u": 0.003}}
OMEGA = {"fluid": "argon", "name": "acentric_factor", "value": -0.002, "unit": "1"}
BAD_T_NB = {"fluid": "argon", "name": "normal_boiling_T", "value": -87.3, "unit": "K"}
# files the Python split leaves to DuckDB: a delimiter inside quotes, a ragged row, an inline
# comment; and a file quoted whole, which it splits
QUOTED = 'T,p\n85.0,"78.9"\n87.3,"101,3"\n90.0,133.6\n'
WHOLE_QUOTED = '"T","p"\n"85.0","78.4"\n"87.3",""\n"90.0","133.6"\n'
RAGGED = "T,p\n85.0,78.9\n87.3,101.3,7\n90.0\n91.0,140.0\n"
INLINE = "# rig log\nT,p\n85.0,78.9\n87.3,101.3 # drift\n90.0,133.6\n"


def _mixed(root, version: int) -> None:
    """Five batches mixing plain files with files DuckDB must read, fixed points and
    constants (one refused to quarantine); ``version`` 2 changes a file, drops one and
    changes a manifest."""
    tables = [vp_table(), vp_table(file="vp2.csv", p_unit="bar", u_p_rel=None,
                                   temperature={"column": "T", "unit": "degC"})]
    for i in range(5):
        files = {"vp.csv": ROWS.replace("78.9", f"78.{i}"),
                 "vp2.csv": ROWS.replace("85.0", f"-18{i}.0").replace("78.9", f"0.7{i}")}
        batch_tables = list(tables)
        if i == 1:
            files["vp2.csv"] = QUOTED.replace("85.0", "-188.0").replace("78.9", "0.79")
        if i == 2:
            files["vp.csv"] = RAGGED.replace("78.9", "78.8")
        if i == 3:
            files["vp.csv"] = INLINE.replace("78.9", "78.7")
            batch_tables[0] = vp_table(comment="#")
        if i == 4:
            files["vp.csv"] = WHOLE_QUOTED
        points, constants = [], []
        if i in (0, 3):
            points, constants = [TRIPLE, CRITICAL], [OMEGA, BAD_T_NB]
        if version == 2 and i == 0:
            files["vp.csv"] = files["vp.csv"].replace("133.6", "133.5")
        if version == 2 and i == 4:
            batch_tables = batch_tables[:1]
            (root / f"m{i}" / "vp2.csv").unlink()
            del files["vp2.csv"]
        if version == 2 and i == 3:
            constants = [OMEGA]
        write_batch(root, f"m{i}", batch_toml(source(f"rig-m{i}", "Test rig, invented campaign"),
                                              batch_tables, points, constants), files)


def test_plain_and_odd_files_points_and_changes_load_as_one_batch_at_a_time(
        raw_root, tmp_path, monkeypatch):
    """A group mixing plain files (one quoted whole) with files DuckDB reads (a delimiter inside quotes, ragged rows, inline comments), fixed points and constants (one quarantined), then a second ingest that changes a file, drops one and changes a manifest, leaves every table and every batch result as loading one batch at a time does."""
    stores, calls, read_by_duckdb = {}, [], []
    original, stage_csv = grouped.load_group, grouped.stage_csv

    def counted(ing, pendings):
        calls.append(len(pendings))
        return original(ing, pendings)

    def staged(con, data, spec, label, *args):
        read_by_duckdb.append(label)
        return stage_csv(con, data, spec, label, *args)
    monkeypatch.setattr(grouped, "load_group", counted)
    monkeypatch.setattr(grouped, "stage_csv", staged)
    for mode in ("group", "alone"):
        if mode == "alone":
            monkeypatch.setattr(grouped, "GROUP_BATCHES", 1)
        _mixed(raw_root, 1)
        with open_store(tmp_path / f"{mode}.duckdb") as s:
            first = run_ingest(s.con, [raw_root])
        _mixed(raw_root, 2)
        with open_store(tmp_path / f"{mode}.duckdb") as s:
            second = run_ingest(s.con, [raw_root])
            stores[mode] = (snapshot(s.con), first.asdict()["batches"],
                            second.asdict()["batches"])
    assert calls == [5, 3]                    # m0, m3 and m4 changed: one group
    assert read_by_duckdb == ["m1/vp2.csv", "m2/vp.csv", "m3/vp.csv"]     # the odd files
    assert stores["group"] == stores["alone"]
    snap, first, second = stores["group"]
    assert [b["status"] for b in first] == ["loaded"] * 5
    assert [b["status"] for b in second] == ["loaded", "unchanged", "unchanged", "loaded",
                                             "loaded"]
    # the superseded manifest's fixed points and constant stay as history
    assert len(snap["fixed_point"]) - 1 == 6 and len(snap["stated_constant"]) - 1 == 3
    reasons = {row[snap["quarantine"][0].index("reason_code")] for row in snap["quarantine"][1:]}
    assert {"bad-row-shape", "not-a-number", "duplicate-row", "non-positive-value",
            "missing-value"} <= reasons


def test_a_file_rewritten_while_its_group_loads_keeps_the_hashed_rows(raw_root, tmp_path,
                                                                     monkeypatch):
    """Issue 13 in a group: files rewritten after their bytes were read and hashed, before the group stages them, are stored with the rows of the hashed bytes."""
    import hashlib

    _raw(raw_root, ["a", "b"])
    hashed = {p.parent.name: hashlib.sha256(p.read_bytes()).hexdigest()
              for p in raw_root.glob("*/vp.csv")}
    original = grouped._stage

    def rewrite_then_stage(con, files):
        for p in raw_root.glob("*/vp.csv"):
            p.write_text("T,p\n85.0,11.1\n", encoding="utf-8")      # the concurrent writer
        return original(con, files)
    monkeypatch.setattr(grouped, "_stage", rewrite_then_stage)
    with open_store(tmp_path / "store.duckdb") as s:
        run_ingest(s.con, [raw_root])
        rows = s.con.execute(
            "SELECT f.batch, f.sha256, count(*), min(o.value_si) FROM observation o JOIN raw_file "
            "f USING (file_id) WHERE f.path LIKE '%/vp.csv' GROUP BY ALL ORDER BY 1").fetchall()
    assert [(b, sha) for b, sha, _, _ in rows] == sorted(hashed.items())
    assert all(n == 3 and low >= 78.0e3 for _, _, n, low in rows)    # not 11.1 kPa


def test_a_failed_large_group_loads_again_in_halves(raw_root, tmp_path, monkeypatch):
    """Beside batches already in the store, a group of eight batches with one faulty batch is loaded again as halves, down to the faulty one alone: the other batches still load in groups, every id sequence starts again where it stood after each failed group (also one made again and not drawn from since), and the store is what one batch at a time leaves."""
    names = [f"h{i}" for i in range(8)]
    stores, calls, original = {}, [], grouped.load_group

    def counted(ing, pendings):
        calls.append([p.plan.batch for p in pendings])
        return original(ing, pendings)
    monkeypatch.setattr(grouped, "load_group", counted)
    for mode in ("group", "alone"):
        if mode == "alone":
            monkeypatch.setattr(grouped, "GROUP_BATCHES", 1)
        for folder in raw_root.glob("[rh]*"):
            shutil.rmtree(folder)
        _raw(raw_root, ["r0", "r1", "r2", "r3"])
        for f in raw_root.glob("r*/*.csv"):                # other contents than h0-h3's
            f.write_text(f.read_text().replace("90.0", "90.5"))
        _ingest(tmp_path / f"{mode}.duckdb", raw_root)      # the resident batches
        calls.clear()
        _raw(raw_root, names)
        # refused while its group stages files, after the group drew its ids
        (raw_root / "h5" / "vp2.csv").write_text("T,x\n85.0,1.0\n", encoding="utf-8")
        stores[mode] = _ingest(tmp_path / f"{mode}.duckdb", raw_root)
        if mode == "group":
            assert calls == [names, names[:4], names[4:], names[4:6], names[6:]]
    (result, snap), (alone, snap_alone) = stores["group"], stores["alone"]
    assert [b.status for b in result.batches] == \
        ["loaded"] * 5 + ["error"] + ["loaded"] * 2 + ["unchanged"] * 4       # h0-h7, r0-r3
    assert "h5/vp2.csv" in result.batches[5].error and "not in the header" in \
        result.batches[5].error
    assert snap == snap_alone
    assert [b.error for b in result.batches] == [b.error for b in alone.batches]


def test_a_column_named_like_the_group_tables_own_columns_loads_alone(raw_root, tmp_path,
                                                                      monkeypatch):
    """A table whose temperature column is called fl_file (a column of the group's staging tables) makes its group load in smaller groups and alone; every batch loads as one at a time loads it."""
    _raw(raw_root, ["a", "b", "c"])
    table = vp_table(temperature={"column": "FL_FILE", "unit": "K"})
    write_batch(raw_root, "b", batch_toml(source("rig-b", "Test rig, invented campaign"),
                                          [table], format_version=None),
                {"vp.csv": ROWS.replace("T,p", "FL_FILE,p").replace("78.9", "77.7")})
    (raw_root / "b" / "vp2.csv").unlink()
    result, snap = _ingest(tmp_path / "store.duckdb", raw_root)
    assert [b.status for b in result.batches] == ["loaded"] * 3
    monkeypatch.setattr(grouped, "GROUP_BATCHES", 1)
    alone, snap_alone = _ingest(tmp_path / "alone.duckdb", raw_root)
    assert snap == snap_alone
