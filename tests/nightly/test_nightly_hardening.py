"""The nightly job under hostile input: bad batches refused one by one, a tampered published file
found and rebuilt (issue 13, cases 2 and 5)."""

from __future__ import annotations

import stat
from pathlib import Path

import duckdb
import pytest

from tests.storekit import batch_toml, source, vp_table
from nightly_fixtures import ARGON_BATCHES, add_batch, cli, copy_demo, nightly, next_second

def good(source_id: str, relative: float) -> str:
    """An argon vapour-pressure batch stating u(p) = relative * p."""
    return batch_toml(source(source_id, "Invented rig for the nightly hardening tests"),
                      [vp_table(p_unit="kPa", u_p_rel=relative)])


CSV = {"vp.csv": "T,p\n85.0,78.9\n87.3,101.3\n90.0,133.6\n"}


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    """Argon's two demo batches beside three batches that each once aborted the whole run."""
    tmp = tmp_path_factory.mktemp("nightly-hostile")
    raw = copy_demo(tmp, ARGON_BATCHES)
    add_batch(raw, "x-nan-relative", good("x-nan", float("nan")), CSV)
    add_batch(raw, "x-deep", "x = " + "[" * 4000 + "]" * 4000 + "\n")
    (raw / "x-dir" / "batch.toml").mkdir(parents=True)
    return tmp, raw, nightly(tmp, raw)


def test_each_bad_batch_is_refused_and_the_others_go_on(hostile):
    """Case 2: nan in a relative uncertainty, a value nested 4000 deep and a directory named batch.toml each refuse only their batch: the run fits and checks argon and ends as an input error (exit 2), not an abort (exit 3)."""
    _, _, result = hostile
    assert (result.verdict, result.exit_code) == ("input-error", 2)
    errors = {e["batch"]: e["error"] for e in result.stages["ingest"].detail["errors"]}
    assert sorted(errors) == ["x-deep", "x-dir", "x-nan-relative"]
    assert "key 'table[0].uncertainty.pressure.relative'" in errors["x-nan-relative"]
    assert "nested 4000 levels deep" in errors["x-deep"]
    assert "x-dir/batch.toml: is a directory" in errors["x-dir"]
    assert not any(e["internal"] for e in result.stages["ingest"].detail["errors"])
    assert sorted(result.stages["ingest"].detail["loaded"]) == sorted(ARGON_BATCHES)
    assert result.stages["check"].detail["n_rechecked"] >= 1


def test_the_verdict_names_the_refused_batches(hostile):
    """Case 2: the printed verdict, summary.md and report.html name every refused batch."""
    _, _, result = hostile
    assert ("refused batch(es), not ingested (3; the others were): x-deep, x-dir, "
            "x-nan-relative") in result.asstr()
    html = Path(result.report["html"]).read_text("utf-8")
    assert "Refused batches, not ingested (3" in html and "<code>x-dir</code>" in html
    assert "x-nan-relative" in Path(result.report["summary"]).read_text("utf-8")


def test_a_second_run_still_refuses_them_and_reuses_the_rest(hostile):
    """The refused batches are looked at again on every run (the pre-scan never hangs on them or skips them)."""
    tmp, raw, _ = hostile
    next_second()
    again = nightly(tmp, raw)
    assert sorted(e["batch"] for e in again.stages["ingest"].detail["errors"]) == \
        ["x-deep", "x-dir", "x-nan-relative"]
    assert again.exit_code == 2


@pytest.fixture(scope="module")
def published(tmp_path_factory):
    """A clean argon nightly run, which publishes a release."""
    tmp = tmp_path_factory.mktemp("nightly-published")
    raw = copy_demo(tmp, ARGON_BATCHES)
    first = nightly(tmp, raw)
    assert first.publish["status"] == "published", first.asstr()
    return tmp, raw, first


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def test_the_published_file_and_the_release_files_are_read_only(published):
    """Case 5: published.duckdb and every file of the release folder are written read-only (0444)."""
    tmp, _, first = published
    assert _mode(tmp / "published.duckdb") == 0o444
    files = list((tmp / first.publish["release_id"]).iterdir())
    assert len(files) >= 13 and {_mode(f) for f in files} == {0o444}


def _argon_pc(path: Path) -> float:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return con.execute("SELECT value_si FROM curated_constants WHERE value_id = "
                           "'argon/critical:vapour,liquid/pc'").fetchone()[0]
    finally:
        con.close()


def test_a_tampered_published_file_is_found_by_verify_and_rebuilt_by_the_nightly(published,
                                                                                  capsys):
    """Case 5: an UPDATE of a curated constant and a replaced macro in published.duckdb: verify reports them (exit 1, it said OK) and the next nightly rebuilds the file from the store (it kept them)."""
    tmp, raw, _ = published
    target = tmp / "published.duckdb"
    pc = _argon_pc(target)
    target.chmod(0o644)             # what a careless user or a stock client as root can do
    con = duckdb.connect(str(target))
    con.execute("UPDATE release_constant SET value_si = value_si * 1.01 WHERE value_id = "
                "'argon/critical:vapour,liquid/pc'")
    con.execute("CREATE OR REPLACE MACRO fl_vapour_pressure(fluid, T) AS 1.0")
    con.close()
    capsys.readouterr()
    assert cli(["verify", "--store", str(tmp / "store.duckdb")]) == 1
    out = capsys.readouterr().out
    assert "FINDING release.published" in out
    assert "macro fl_vapour_pressure: differs" in out and "rows release_constant: differs" in out
    next_second()
    again = nightly(tmp, raw)
    stage = again.stages["verify"]
    assert stage.status == "repaired" and stage.detail["findings"] == []
    assert "published.duckdb differed from the store's release" in stage.text
    assert "rebuilt from the store" in again.asstr()
    assert again.exit_code == 0
    assert _argon_pc(target) == pc and _mode(target) == 0o444
    assert cli(["verify", "--store", str(tmp / "store.duckdb"), "-q"]) == 0
