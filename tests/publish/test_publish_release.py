"""Releases: refusal and marking, immutability, identical re-publish, exports, provenance."""

from __future__ import annotations

import json
import shutil
from importlib import resources

import duckdb
import pytest

from pipeline.cli import main
from pipeline.errors import PublishError
from pipeline.ingest.contract import schema_errors
from pipeline.publish import exports
from pipeline.publish.release import ReleaseRefused, publish
from pipeline.store import open_store
from pipeline.verify import verify_release_manifests


def _files(folder) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_a_release_with_failed_checks_is_refused_with_exit_1(demo_store, tmp_path, capsys):
    """The demo's planted flaws fail checks: publish exits 1 naming them and writes nothing."""
    out = tmp_path / "out"
    assert main(["publish", "--store", str(demo_store), "--out", str(out)]) == 1
    err = capsys.readouterr().err
    assert "failed or errored finding(s)" in err and "--allow-failures" in err
    assert not out.exists() or not any(out.iterdir())
    with open_store(demo_store) as s:
        assert s.con.execute("SELECT count(*) FROM release").fetchone()[0] == 0
        assert s.con.execute("SELECT status FROM run WHERE kind = 'publish'").fetchall() == [
            ("failed",)]
        with pytest.raises(ReleaseRefused, match="failed or errored"):
            publish(s.con, demo_store, out=out)


def test_allow_failures_publishes_a_marked_release(published_demo):
    """With --allow-failures the release is made and marked as resting on failed checks."""
    doc = json.loads((published_demo["out"] / published_demo["release"] / "release.json")
                     .read_text("utf-8"))
    row = doc["rows"][0]
    assert row["with_failed_checks"] is True and row["checks_failed"] > 0
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    assert con.execute("SELECT release_id, with_failed_checks FROM curated_release").fetchall() \
        == [(published_demo["release"], True)]
    con.close()


def test_a_store_without_a_check_run_is_refused(tmp_path):
    """Publishing needs a check run to rest on."""
    with open_store(tmp_path / "empty.duckdb") as s:
        with pytest.raises(PublishError, match="no finished check run"):
            publish(s.con, tmp_path / "empty.duckdb")


def test_identical_republish_gives_identical_files(demo_store, tmp_path):
    """Publishing the same inputs twice (into two roots) gives the same release id and
    byte-identical files; the store keeps one release and records two publications."""
    with open_store(demo_store) as s:
        a = publish(s.con, demo_store, out=tmp_path / "a", allow_failures=True)
        b = publish(s.con, demo_store, out=tmp_path / "b", allow_failures=True)
        again = publish(s.con, demo_store, out=tmp_path / "a", allow_failures=True)
        assert s.con.execute("SELECT count(*) FROM release").fetchone()[0] == 1
        assert s.con.execute("SELECT count(*) FROM release_publication").fetchone()[0] == 3
    assert a.created and not b.created and not again.exports_written
    assert a.release_id == b.release_id == f"r-{a.fingerprint[:12]}"
    fa, fb = _files(tmp_path / "a" / a.release_id), _files(tmp_path / "b" / b.release_id)
    assert fa == fb and len(fa) == 13


def test_a_release_name_cannot_be_reused_for_other_content(demo_store, tmp_path):
    """Releases are immutable: the same name with other inputs (another policy) is refused."""
    policy = tmp_path / "policy.toml"
    text = resources.files("pipeline.publish").joinpath("policy.toml").read_text("utf-8")
    policy.write_text(text.replace("triple_T_tolerance_K = 0.002", "triple_T_tolerance_K = 0.003"))
    args = ["publish", "--store", str(demo_store), "--out", str(tmp_path / "o"),
            "--allow-failures", "--release", "nightly-1", "-q"]
    assert main(args) == 0
    assert main(args + ["--policy", str(policy)]) == 2


def test_exports_validate_and_their_manifest_verifies(published_demo):
    """Every JSON export matches its schema, the Parquet and CSV files read back as the JSON
    rows, and the manifest's hashes verify."""
    folder = published_demo["out"] / published_demo["release"]
    for table, schema in exports.JSON_SCHEMAS.items():
        doc = json.loads((folder / f"{table}.json").read_text("utf-8"))
        assert schema_errors(doc, schema) == []
        assert exports.read_csv_rows(table, (folder / f"{table}.csv").read_bytes()) == doc["rows"]
        assert exports.pq.read_table(folder / f"{table}.parquet").to_pylist() == doc["rows"]
    manifest = json.loads((folder / "manifest.json").read_text("utf-8"))
    assert schema_errors(manifest, exports.MANIFEST_SCHEMA) == []
    findings, releases, hashed = verify_release_manifests(published_demo["out"])
    assert findings == [] and releases == [published_demo["release"]] and hashed == 12


def test_validation_catches_an_export_that_does_not_read_back(published_demo, tmp_path):
    """A CSV cell changed after writing makes the folder fail validation."""
    folder = tmp_path / "copy"
    shutil.copytree(published_demo["out"] / published_demo["release"], folder)
    docs = {t: json.loads((folder / f"{t}.json").read_text("utf-8"))["rows"]
            for t in exports.SCHEMAS}
    exports.validate_folder(folder, published_demo["release"], docs)
    csv_path = folder / "constants.csv"
    csv_path.write_text(csv_path.read_text("utf-8").replace("647.096", "647.097", 1), "utf-8")
    with pytest.raises(PublishError, match="constants.csv"):
        exports.validate_folder(folder, published_demo["release"], docs)


def test_provenance_resolves_to_raw_rows(published_demo):
    """Every value's provenance names observations, fixed points and constants that exist, with
    their rows and the hashes of existing raw files; every value has a record."""
    con = duckdb.connect(str(published_demo["store"]), read_only=True)
    rid = published_demo["release"]
    values = {r[0] for r in con.execute(
        "SELECT value_id FROM release_constant WHERE release_id = ? UNION ALL "
        "SELECT value_id FROM release_curve WHERE release_id = ?", [rid, rid]).fetchall()}
    records = con.execute("SELECT value_id, was_derived_from FROM release_provenance "
                          "WHERE release_id = ?", [rid]).fetchall()
    assert {v for v, _ in records} == values
    # (the sheets of one workbook share its hash, so a hash and a path identify a file together)
    files = set(con.execute("SELECT sha256, path FROM raw_file").fetchall())
    checked = 0
    for value_id, entities in records:
        for e in entities:
            if e["entity"] in ("fixed_point", "stated_constant", "observations"):
                assert (e["file_sha256"], e["file_path"]) in files, value_id
            if e["entity"] == "observations":
                rows, cells = con.execute(
                    "SELECT list(row_number ORDER BY row_number, obs_id), "
                    "list(value_cell_ref ORDER BY row_number, obs_id) FROM observation "
                    "WHERE list_contains(?, obs_id) AND file_id = ?",
                    [e["obs_ids"], int(e["entity_id"])]).fetchone()
                assert sorted(rows) == sorted(e["row_numbers"]) and rows, value_id
                assert e["cells"] == ([] if cells[0] is None else cells), value_id
                checked += 1
            elif e["entity"] == "fixed_point":
                assert con.execute("SELECT entry_number FROM fixed_point WHERE fp_id = ?",
                                   [int(e["entity_id"])]).fetchone()[0] == e["row_numbers"][0]
                checked += 1
            elif e["entity"] == "stated_constant":
                assert con.execute("SELECT entry_number FROM stated_constant WHERE const_id = ?",
                                   [int(e["entity_id"])]).fetchone()[0] == e["row_numbers"][0]
                checked += 1
            elif e["entity"] == "fit":
                assert con.execute("SELECT count(*) FROM fit WHERE fit_id = ?",
                                   [e["entity_id"]]).fetchone()[0] == 1
            elif e["entity"] == "value":
                assert e["entity_id"] in values
    con.close()
    assert checked > 100


def test_store_views_show_the_latest_publication(demo_store, tmp_path):
    """curated_constants follows the latest publication; SQL macros exist in the store."""
    assert main(["publish", "--store", str(demo_store), "--out", str(tmp_path / "o"),
                 "--allow-failures", "--release", "first", "-q"]) == 0
    assert main(["publish", "--store", str(demo_store), "--out", str(tmp_path / "o"),
                 "--allow-failures", "--release", "second", "-q"]) == 0
    con = duckdb.connect(str(demo_store), read_only=True)
    assert con.execute("SELECT DISTINCT release_id FROM curated_constants").fetchall() == [
        ("second",)]
    macros = {r[0] for r in con.execute("SELECT function_name FROM duckdb_functions() "
                                        "WHERE function_type = 'macro' AND comment IS NOT NULL "
                                        "AND function_name LIKE 'fl_%'").fetchall()}
    assert {"fl_vapour_pressure", "fl_saturation_temperature", "fl_melting_pressure"} <= macros
    con.close()
