"""Incremental releases: after one changed batch, a release that copies the unchanged fluids
equals a release computed from scratch, file for file and row for row."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import duckdb
import pytest

from pipeline.cli import main
from pipeline.publish import Decisions, Policy, exports, incremental
from pipeline.publish.inputs import load_inputs
from pipeline.publish.release import publish
from pipeline.store import open_store

REPO = Path(__file__).resolve().parents[2]
ARGON = Path("brackenridge-rig-b-argon-1988") / "argon-vapour-pressure-1988.csv"
CONTENT = ("release_constant", "release_curve", "release_provenance")


def _files(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def _rows(store: Path, release: str) -> dict[str, list]:
    con = duckdb.connect(str(store), read_only=True)
    try:
        return {t: con.execute(f"SELECT * FROM {t} WHERE release_id = ? ORDER BY value_id",
                               [release]).fetchall() for t in CONTENT}
    finally:
        con.close()


def _published(folder: Path) -> dict[str, list]:
    con = duckdb.connect(str(folder / "published.duckdb"), read_only=True)
    try:
        return {v: con.execute(f"SELECT * FROM {v} ORDER BY value_id").fetchall()
                for v in ("curated_constants", "curated_curves", "curated_provenance")}
    finally:
        con.close()


@pytest.fixture(scope="module")
def changed(demo_store_master, tmp_path_factory) -> dict:
    """The demo published as release ``before``; then one batch changes (a pressure of argon's
    1988 file), is ingested, fitted and checked. Copies of that store, taken before the next
    publish: ``a`` (to publish incrementally over ``before``), ``b`` (from scratch), ``c``."""
    root = tmp_path_factory.mktemp("incremental")
    raw = root / "raw"
    shutil.copytree(REPO / "raw", raw)
    store = root / "a" / "store.duckdb"
    store.parent.mkdir()
    shutil.copyfile(demo_store_master, store)
    out = root / "a" / "out"
    with open_store(store) as s:
        first = publish(s.con, store, name="before", out=out, allow_failures=True)
    assert first.fluids_copied == 0 and first.fluids_computed == 4
    csv = raw / ARGON
    text = csv.read_text("utf-8")
    assert "88.471,859.07" in text
    csv.write_text(text.replace("88.471,859.07", "88.471,859.12"), "utf-8")
    assert main(["ingest", str(raw), "--store", str(store), "-q"]) == 0
    assert main(["fit", "--store", str(store), "-q"]) == 0
    assert main(["check", "--store", str(store), "-q"]) in (0, 1)
    copies = {}
    for name in ("b", "c"):
        copies[name] = root / name / "store.duckdb"
        copies[name].parent.mkdir()
        shutil.copyfile(store, copies[name])
    return {"root": root, "a": store, "out": out, **copies}


def test_after_one_changed_batch_only_that_fluid_is_computed(changed):
    """The release after the change copies argon's three neighbours and computes argon; the
    same store published from scratch gives the same release, byte for byte and row for row."""
    with open_store(changed["a"]) as s:
        assert set(incremental.previous_release(s.con).texts) == {
            f"{t}.{x}" for t in incremental.TEXT_TABLES for x in ("json", "csv")}
        inc = publish(s.con, changed["a"], name="after", out=changed["out"],
                      allow_failures=True)
    with open_store(changed["b"]) as s:
        full = publish(s.con, changed["b"], name="after", out=changed["b"].parent / "out",
                       allow_failures=True, full=True)
    assert (inc.fluids_copied, inc.fluids_computed) == (3, 1)
    assert (full.fluids_copied, full.fluids_computed) == (0, 4)
    assert inc.fingerprint == full.fingerprint and inc.unresolved == full.unresolved
    a, b = _files(changed["out"] / "after"), _files(changed["b"].parent / "out" / "after")
    assert a == b and len(a) == 13
    assert _rows(changed["a"], "after") == _rows(changed["b"], "after")
    assert _published(changed["out"]) == _published(changed["b"].parent / "out")
    before = _files(changed["out"] / "before")
    assert before["provenance.json"] != a["provenance.json"]     # argon's rows did change


def test_a_previous_folder_that_does_not_match_its_manifest_is_not_copied_from(changed):
    """When the previous release's text files are altered, the unchanged fluids' rows are
    still copied from the store but their text is rendered again: the same release results."""
    out = changed["c"].parent / "out"
    shutil.copytree(changed["out"] / "before", out / "before")
    path = out / "before" / "provenance.json"
    path.chmod(0o644)
    path.write_bytes(path.read_bytes().replace(b'"used by the fit"', b'"used by the fitX"', 1))
    with open_store(changed["c"]) as s:
        s.con.execute("UPDATE release_publication SET export_dir = ?", [str(out / "before")])
        previous = incremental.previous_release(s.con)
        assert previous.release_id == "before" and previous.texts == {}
        inc = publish(s.con, changed["c"], name="after", out=out, allow_failures=True)
    assert (inc.fluids_copied, inc.fluids_computed) == (3, 1)
    assert _files(out / "after") == _files(changed["b"].parent / "out" / "after")


def test_a_republish_copies_every_fluid(changed):
    """Publishing the same inputs again under another name copies all fluids and writes the
    same content with the new release id."""
    with open_store(changed["b"]) as s:
        again = publish(s.con, changed["b"], name="again", out=changed["b"].parent / "out",
                        allow_failures=True)
    assert (again.fluids_copied, again.fluids_computed) == (4, 0)
    old = _rows(changed["b"], "after")
    new = _rows(changed["b"], "again")
    assert {t: [r[1:] for r in rows] for t, rows in old.items()} == \
        {t: [r[1:] for r in rows] for t, rows in new.items()}
    text = _files(changed["b"].parent / "out" / "again")
    for name, data in _files(changed["b"].parent / "out" / "after").items():
        if name.endswith(".json") and name not in ("manifest.json", "release.json"):
            assert text[name] == data.replace(b'"release_id": "after"',
                                              b'"release_id": "again"'), name
        elif name.endswith(".csv") and name != "release.csv":
            assert text[name] == data.replace(b"\nafter,", b"\nagain,"), name


def test_a_fluid_digest_changes_with_that_fluids_inputs_only(demo_store):
    """A curation decision about water changes water's digest, and no other fluid's; the
    release fingerprint is the digest of all inputs, as before."""
    with open_store(demo_store) as s:
        inputs = load_inputs(s.con)
    policy = Policy.load().asdict()
    fingerprint, plain = inputs.fingerprints(policy, Decisions())
    decided = Decisions(exclude={("water", "*"): {"iapws-sr1-86-water-saturation": "D-9"}})
    _, with_decision = inputs.fingerprints(policy, decided)
    assert fingerprint == inputs.fingerprint(policy, Decisions().asdict())
    assert sorted(plain) == ["argon", "carbon-dioxide", "nitrogen", "water"]
    assert [f for f in plain if plain[f] != with_decision[f]] == ["water"]


def test_digests_joined_from_row_texts_are_those_of_the_whole_documents(demo_store):
    """The release fingerprint and every fluid's digest, joined from rows encoded once, equal
    the SHA-256 of ``json.dumps`` of each whole document (the definition), with and without
    a decision."""
    with open_store(demo_store) as s:
        inputs = load_inputs(s.con)
    policy = Policy.load().asdict()
    decided = Decisions(exclude={("water", "*"): {"iapws-sr1-86-water-saturation": "D-9"}})
    for decisions in (Decisions(), decided):
        fingerprint, digests = inputs.fingerprints(policy, decisions)
        assert fingerprint == inputs.fingerprint(policy, decisions.asdict())
        parts = inputs.partition()
        assert len(parts) == 4 and parts["water"].checks and parts["argon"].fit_rows
        for fluid, part in parts.items():
            assert digests[fluid] == part.fingerprint(
                policy, decisions.restricted({fluid}).asdict()), fluid


def test_a_block_whose_rows_are_not_where_the_state_says_is_rendered(published_demo):
    """A span off by one byte, or naming other rows, is not spliced."""
    folder = published_demo["out"] / published_demo["release"]
    texts = {p.name: p.read_bytes() for p in folder.iterdir() if p.suffix in (".json", ".csv")}
    con = duckdb.connect(str(published_demo["store"]), read_only=True)
    state = con.execute("SELECT spans_json, (SELECT list(value_id ORDER BY value_id) FROM "
                        "release_constant c WHERE c.release_id = f.release_id AND "
                        "c.fluid_id = f.fluid_id) FROM release_fluid f WHERE fluid_id = "
                        "'argon' AND release_id = ?", [published_demo["release"]]).fetchone()
    con.close()
    spans, ids = json.loads(state[0]), state[1]
    previous = incremental.Previous(published_demo["release"], {}, {}, {"argon": spans}, texts)
    plan = incremental.Plan({}, previous, ["argon"], [])
    block = incremental.spliced_block(plan, "constants", "argon", ids, "r-next")
    assert block is not None and block.n_rows == len(ids) and b'"r-next"' in block.json
    shifted = {**spans, "constants": {**spans["constants"],
                                      "json": [spans["constants"]["json"][0] + 1,
                                               spans["constants"]["json"][1]]}}
    previous.spans = {"argon": shifted}
    assert incremental.spliced_block(plan, "constants", "argon", ids, "r-next") is None
    previous.spans = {"argon": spans}
    assert incremental.spliced_block(plan, "constants", "argon", ids[::-1], "r-next") is None
    assert exports.codec("constants").JSON_SEPARATOR == ",\n  "
