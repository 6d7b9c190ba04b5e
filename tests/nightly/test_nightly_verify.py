"""The nightly job runs verify: a damaged release or store makes the run an error (exit 3)."""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import pytest

from nightly_fixtures import ARGON_BATCHES, copy_demo, nightly


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """A clean argon run (it publishes), then a run after a release file was changed."""
    tmp = tmp_path_factory.mktemp("nightly-verify")
    raw = copy_demo(tmp, ARGON_BATCHES)
    clean = nightly(tmp, raw)
    release = tmp / clean.publish["release_id"]
    csv = release / "constants.csv"
    csv.chmod(0o644)                 # release files are written read-only
    csv.write_bytes(csv.read_bytes().replace(b"150.687", b"150.786"))   # a quiet wrong digit
    damaged = nightly(tmp, raw)
    return {"tmp": tmp, "clean": clean, "damaged": damaged}


def test_a_clean_run_verifies_its_new_release(runs):
    """The verify stage ran every store rule and checked the files of the release just made:
    the publish read each one back against its hash, so their stamps prove them unchanged."""
    stage = runs["clean"].stages["verify"]
    assert stage.status == "ok" and stage.detail["findings"] == []
    assert stage.detail["releases"] == 1
    assert stage.detail["files_hashed"] + stage.detail["files_unchanged"] >= 12
    assert stage.detail["files_unchanged"] >= 12
    con = duckdb.connect(str(runs["tmp"] / "store.duckdb"), read_only=True)
    summary = json.loads(con.execute("SELECT summary_json FROM run WHERE run_id = ?",
                                     [runs["clean"].run_id]).fetchone()[0])
    con.close()
    stamped = {Path(p).name for p in summary["contexts"]["verified_files"]}
    assert "published.duckdb" in stamped and "manifest.json" not in stamped
    assert {"constants.csv", "provenance.json", "curves.parquet"} <= stamped
    assert stage.detail["rules"] > 20
    assert runs["clean"].exit_code == 0


def test_a_changed_release_file_is_an_integrity_error(runs):
    """The next run finds the changed file by its SHA-256: verdict error, exit 3, and the
    finding is in results, summary and report."""
    damaged = runs["damaged"]
    stage = damaged.stages["verify"]
    assert stage.status == "failed" and stage.detail["files_hashed"] == 1   # the others: stamps
    assert [f["rule"] for f in stage.detail["findings"]] == ["release.hash"]
    assert (damaged.verdict, damaged.exit_code) == ("error", 3)
    summary = (runs["tmp"] / "reports" / damaged.run_id / "summary.md").read_text()
    assert "Integrity findings of the verify stage (1)" in summary and "release.hash" in summary
    html = (runs["tmp"] / "reports" / damaged.run_id / "report.html").read_text()
    assert "Integrity findings (verify)" in html
