"""``fluidledger verify``: a clean store passes; every broken rule is found and named; exit codes."""

from __future__ import annotations

import hashlib
import json
import shutil

import duckdb
import pytest

from pipeline.cli import main
from pipeline.store import SCHEMA_VERSION
from pipeline.verify import STORE_RULES, verify, verify_release_manifests
from tests.conftest import FLUIDS_TOML, SIMPLE_BATCH, SIMPLE_CSV, write_batch

MANIFEST = SIMPLE_BATCH.format(source="rig-v") + """
[[fixed_point]]
fluid = "argon"
kind = "triple"
T = { value = 83.8058, unit = "K", u = 0.0002 }
p = { value = 68.89, unit = "kPa", u = 0.02 }

[[fixed_point]]
fluid = "argon"
kind = "critical"
T = { value = -150.687, unit = "K" }

[[constant]]
fluid = "argon"
name = "normal_boiling_T"
value = 87.302
unit = "K"
"""


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    """A store with observations, quarantine, fixed points, a constant and a superseded file."""
    base = tmp_path_factory.mktemp("verify")
    root = base / "raw"
    root.mkdir()
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    folder = write_batch(root, "b1", MANIFEST, {"vp.csv": SIMPLE_CSV + "91.0,abc\n"})
    store = base / "store.duckdb"
    assert main(["ingest", str(root), "--store", str(store), "-q"]) == 0
    (folder / "vp.csv").write_text(SIMPLE_CSV + "91.0,abc\n95.0,213.0\n", encoding="utf-8")
    assert main(["ingest", str(root), "--store", str(store), "-q"]) == 0
    return store


@pytest.fixture
def store(template, tmp_path):
    path = tmp_path / "store.duckdb"
    shutil.copyfile(template, path)
    return path


def run_verify(capsys, *argv) -> tuple[int, str, str]:
    code = main(["verify", *argv])
    out, err = capsys.readouterr()
    assert "Traceback" not in out + err
    return code, out, err


def test_clean_store_passes(store, capsys):
    """A store written by the ingest passes every rule and exits 0."""
    code, out, _ = run_verify(capsys, "--store", str(store))
    assert code == 0, out
    assert out.rstrip().endswith("verify: OK")
    result = verify(store)
    assert result.ok and result.schema_version == SCHEMA_VERSION
    assert {"accounting.sum", "accounting.loaded", "accounting.quarantined", "accounting.disjoint",
            "fk.observation.file_id", "fk.quarantine.file_id", "fk.raw_file.source_id",
            "fk.fit_residual.fit_id", "fk.check_result.run_id", "versions.superseded_by",
            "versions.one_current", "schema.version"} <= set(result.rules_run)
    assert set(result.rules_run) <= {r.id for r in STORE_RULES}
    assert result.counts["observation"] == 7 and result.counts["quarantine"] == 3


def test_verify_does_not_write(store, capsys):
    """verify opens the store read-only: the file is byte-identical afterwards."""
    before = hashlib.sha256(store.read_bytes()).hexdigest()
    assert run_verify(capsys, "--store", str(store))[0] == 0
    assert hashlib.sha256(store.read_bytes()).hexdigest() == before


# (rule expected to fire, SQL that breaks it) -- each run on a fresh copy of the template
CORRUPTIONS = [
    ("fk.observation.file_id", "UPDATE observation SET file_id = 999 WHERE row_number = 1"),
    ("fk.quarantine.file_id", "UPDATE quarantine SET file_id = 998 WHERE q_id = (SELECT min(q_id) FROM quarantine)"),
    ("fk.fixed_point.file_id", "UPDATE fixed_point SET file_id = 997"),
    ("fk.stated_constant.file_id", "UPDATE stated_constant SET file_id = 996"),
    ("fk.raw_file.source_id", "UPDATE raw_file SET source_id = 'ghost-source' WHERE role = 'table'"),
    ("fk.raw_file.fluid_id", "UPDATE raw_file SET fluid_id = 'ghost-fluid' WHERE role = 'table'"),
    ("fk.raw_file.ingest_run_id", "UPDATE raw_file SET ingest_run_id = 'ghost-run'"),
    ("fk.fixed_point.fluid_id", "UPDATE fixed_point SET fluid_id = 'ghost-fluid'"),
    ("fk.fit_residual.fit_id", "INSERT INTO fit_residual (fit_id, obs_id, is_outlier) "
                               "SELECT 'ghost-fit', min(obs_id), false FROM observation"),
    ("fk.fit_residual.obs_id", "INSERT INTO fit_residual (fit_id, obs_id, is_outlier) VALUES ('f', 123456, false)"),
    ("fk.check_result.run_id", "INSERT INTO check_result (run_id, check_id, fluid_id, subject, status, "
                               "severity, message, evidence_json, thresholds_json) VALUES ('ghost-run', "
                               "'data.ranges', 'argon', '', 'pass', 'warn', 'm', '{}', '{}')"),
    ("accounting.sum", "UPDATE raw_file SET rows_read = rows_read + 1 WHERE role = 'table'"),
    ("accounting.loaded", "DELETE FROM observation WHERE row_number = 2"),
    ("accounting.quarantined", "DELETE FROM quarantine WHERE row_number = 4"),
    ("accounting.disjoint", "UPDATE quarantine SET row_number = 1 WHERE row_number = 4"),
    ("versions.superseded_by", "UPDATE raw_file SET superseded_by = 4242 WHERE superseded_by IS NOT NULL"),
    ("versions.one_current", "UPDATE raw_file SET superseded_by = NULL"),
    ("versions.successor_path", "UPDATE raw_file SET superseded_by = (SELECT min(file_id) FROM raw_file "
                                "WHERE role = 'manifest') WHERE superseded_by IS NOT NULL"),
    ("schema.version", "DELETE FROM schema_version WHERE version = (SELECT max(version) FROM schema_version)"),
    ("schema.version", "INSERT INTO schema_version VALUES (999, now(), 'from the future')"),
    ("unique.observation.obs_id", "INSERT INTO observation SELECT * FROM observation WHERE row_number = 3"),
    ("provenance.quarantine", "UPDATE quarantine SET file_sha256 = 'f00d'"),
    ("provenance.raw_column", "DELETE FROM raw_column WHERE quantity = 'temperature'"),
    ("schema.objects", "DROP TABLE check_result"),
]


@pytest.mark.parametrize("rule,sql", CORRUPTIONS, ids=[f"{r}-{i}" for i, (r, _) in enumerate(CORRUPTIONS)])
def test_each_broken_rule_is_found(store, capsys, rule, sql):
    """A store broken in one way exits 1 and names the broken rule with a sample."""
    con = duckdb.connect(str(store))
    try:
        have = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
        table = next(w for w in sql.replace("(", " ").split() if w in have or w == "raw_column")
        if table not in have:
            pytest.skip(f"the store schema has no table {table}")
        con.execute(sql)
    finally:
        con.close()
    code, out, _ = run_verify(capsys, "--store", str(store))
    assert code == 1, out
    assert f"FINDING {rule}: " in out
    found = {f.rule: f for f in verify(store).findings}
    assert rule in found and found[rule].count >= 1


def test_interrupted_run_is_a_note_not_a_finding(store, capsys):
    """A run that never finished (a killed process) is reported as a note; the store still passes."""
    con = duckdb.connect(str(store))
    con.execute("INSERT INTO run (run_id, kind, started_at, pipeline_version, parameters_json, "
                "status) VALUES ('ingest-killed', 'ingest', now(), '0', '{}', 'running')")
    con.close()
    code, out, _ = run_verify(capsys, "--store", str(store))
    assert code == 0
    assert "note: ingest run ingest-killed never finished" in out


def test_json_output_lists_findings(store, capsys):
    """--json prints a machine-readable result with ok and every finding."""
    con = duckdb.connect(str(store))
    con.execute("UPDATE raw_file SET rows_read = rows_read + 2 WHERE role = 'table'")
    con.close()
    code, out, _ = run_verify(capsys, "--store", str(store), "--json")
    doc = json.loads(out)
    assert code == 1 and doc["ok"] is False
    assert [f["rule"] for f in doc["findings"]] == ["accounting.sum"]
    assert doc["findings"][0]["count"] == 2      # the current and the superseded version


def test_missing_store_is_a_usage_error(tmp_path, capsys):
    """A store that does not exist exits 2 with one line, no traceback."""
    code, _, err = run_verify(capsys, "--store", str(tmp_path / "none.duckdb"))
    assert code == 2 and "does not exist" in err and err.count("\n") == 1


def test_bad_option_is_a_usage_error(capsys):
    """An unknown option exits 2 (argparse)."""
    with pytest.raises(SystemExit) as exc:
        main(["verify", "--no-such-option"])
    assert exc.value.code == 2


def test_releases_folder_that_does_not_exist_is_a_usage_error(store, tmp_path, capsys):
    """--releases naming a missing folder exits 2."""
    code, _, err = run_verify(capsys, "--store", str(store), "--releases", str(tmp_path / "nope"))
    assert code == 2 and "releases folder does not exist" in err


def test_unreadable_store_file_is_a_finding(tmp_path, capsys):
    """A file that is not a DuckDB database is reported as a storage.open finding (exit 1)."""
    bad = tmp_path / "garbage.duckdb"
    bad.write_bytes(b"\x00not a database\xff" * 500)
    code, out, _ = run_verify(capsys, "--store", str(bad), "--no-releases")
    assert code == 1 and "FINDING storage.open" in out


def write_release(root, name: str, files: dict[str, bytes]) -> None:
    folder = root / name
    folder.mkdir(parents=True)
    entries = []
    for rel, data in files.items():
        (folder / rel).parent.mkdir(parents=True, exist_ok=True)
        (folder / rel).write_bytes(data)
        entries.append({"path": rel, "sha256": hashlib.sha256(data).hexdigest()})
    (folder / "manifest.json").write_text(json.dumps({"files": entries}), encoding="utf-8")


def test_release_manifests_that_match_pass(store, tmp_path, capsys):
    """Releases whose files hash as listed pass; the files hashed are counted."""
    releases = tmp_path / "curated"
    write_release(releases, "2026.1", {"constants.csv": b"fluid,Tc_K\nargon,150.687\n",
                                       "parquet/curves.parquet": b"PAR1 invented bytes"})
    write_release(releases, "2026.2", {"constants.json": b"{}"})
    code, out, _ = run_verify(capsys, "--store", str(store), "--releases", str(releases))
    assert code == 0, out
    assert "2 release(s) with 3 files hashed" in out


@pytest.mark.parametrize("damage,rule", [
    (lambda d: (d / "constants.csv").write_bytes(b"fluid,Tc_K\nargon,150.7\n"), "release.hash"),
    (lambda d: (d / "constants.csv").unlink(), "release.missing"),
    (lambda d: (d / "manifest.json").write_text('{"files": [{"path": "../../etc/passwd", '
                                                '"sha256": "00"}]}'), "release.path"),
    (lambda d: (d / "manifest.json").write_text("{not json"), "release.manifest"),
    (lambda d: (d / "manifest.json").write_text('{"files": [{"path": "constants.csv"}]}'),
     "release.manifest"),
], ids=["changed-file", "missing-file", "path-escape", "bad-json", "entry-without-hash"])
def test_damaged_release_is_found(store, tmp_path, capsys, damage, rule):
    """A release file changed, missing, outside the release or badly listed is a finding."""
    releases = tmp_path / "curated"
    write_release(releases, "2026.1", {"constants.csv": b"fluid,Tc_K\nargon,150.687\n"})
    damage(releases / "2026.1")
    code, out, _ = run_verify(capsys, "--store", str(store), "--releases", str(releases))
    assert code == 1 and f"FINDING {rule}: " in out and "2026.1" in out
    findings, releases_found, _ = verify_release_manifests(releases)
    assert releases_found == ["2026.1"] and [f.rule for f in findings] == [rule]


def test_default_releases_folder_is_the_store_folder(store, capsys):
    """Without --releases, manifests beside the store (curated/<release>/) are checked."""
    write_release(store.parent, "2026.3", {"a.csv": b"x\n"})
    (store.parent / "2026.3" / "a.csv").write_bytes(b"y\n")
    code, out, _ = run_verify(capsys, "--store", str(store))
    assert code == 1 and "FINDING release.hash: 2026.3/a.csv" in out
    assert run_verify(capsys, "--store", str(store), "--no-releases")[0] == 0
