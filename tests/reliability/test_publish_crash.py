"""Crash safety of the publish stage: a publish killed anywhere leaves everything recoverable.

The demo store (ingested, fitted, checked; its planted flaws make ``--allow-failures`` needed)
has release ``before`` published into ``out/``. A publish of release ``after`` then runs in a
subprocess and dies by SIGKILL at seven points: two found by watching the output folder from
outside (while the exports are written under their temporary name; while the next published
file is built) and five named crash points where the process kills itself
(:data:`pipeline.crashpoints.CRASH_POINTS`: exports written, published file built, folder
renamed into place, store committed, published file swapped in).

After each kill: the store opens and ``fluidledger verify`` passes with the release manifests;
``published.duckdb`` opens and holds one whole release (``before``, or ``after`` once swapped);
and rerunning the same publish ends exactly as an uninterrupted publish does - the same store
rows, the same manifest (hence the same file bytes), the same published content, and no
temporary file left behind.
"""

from __future__ import annotations

import json
import shutil
import signal
from pathlib import Path

import duckdb
import pytest

from pipeline.cli import main
from pipeline.crashpoints import CRASH_POINTS, KILL_ENV
from tests.reliability.crashkit import REPO, assert_store_recovers, kill_cli

RAW = REPO / "raw"
# columns that name a publication (a time, a run) rather than the release content
VOLATILE = {"created_at", "publish_run_id", "published_at", "publication_seq"}
CONTENT = ("release", "release_constant", "release_curve", "release_provenance")
PUBLISH = ["publish", "--allow-failures", "--release", "after"]


def _publish_argv(out: Path) -> list[str]:
    return [*PUBLISH, "--out", str(out)]


@pytest.fixture(scope="module")
def base(tmp_path_factory) -> Path:
    """A folder with ``store.duckdb`` (demo data, checked) and ``out/`` holding release before."""
    folder = tmp_path_factory.mktemp("publish-crash")
    store = folder / "store.duckdb"
    assert main(["ingest", str(RAW), "--store", str(store), "-q"]) == 0
    assert main(["fit", "--store", str(store), "-q"]) == 0
    assert main(["check", "--store", str(store), "-q"]) == 1      # the planted flaws fail
    assert main(["publish", "--store", str(store), "--out", str(folder / "out"),
                 "--allow-failures", "--release", "before", "-q"]) == 0
    return folder


def _copy(base: Path, target: Path) -> tuple[Path, Path]:
    shutil.copytree(base, target)
    return target / "store.duckdb", target / "out"


def _rows(con, table: str, release: str) -> list[tuple]:
    cols = [r[0] for r in con.execute(f"DESCRIBE {table}").fetchall() if r[0] not in VOLATILE]
    select = ", ".join(f'"{c}"' for c in cols)
    return con.execute(f"SELECT {select} FROM {table} WHERE release_id = ? ORDER BY ALL",
                       [release]).fetchall()


def published_release(out: Path) -> tuple[str, list[list[tuple]]]:
    """The release in ``published.duckdb`` and its content rows; asserts it is whole."""
    con = duckdb.connect(str(out / "published.duckdb"), read_only=True)
    try:
        (release_id, n_const, n_curves, n_prov), = con.execute(
            "SELECT release_id, n_constants, n_curves, n_provenance FROM release").fetchall()
        counts = [con.execute(f"SELECT count(*), count(DISTINCT release_id) FROM {t}").fetchone()
                  for t in CONTENT[1:]]
        assert counts == [(n_const, 1), (n_curves, 1), (n_prov, 1)], (release_id, counts)
        return release_id, [_rows(con, t, release_id) for t in CONTENT]
    finally:
        con.close()


def result(store: Path, out: Path) -> dict:
    """What a finished publish of ``after`` leaves: store rows, manifest, published content."""
    con = duckdb.connect(str(store), read_only=True)
    try:
        rows = {t: _rows(con, t, "after") for t in CONTENT}
        publications = con.execute("SELECT count(*) FROM release_publication WHERE release_id = "
                                   "'after'").fetchone()[0]
    finally:
        con.close()
    leftovers = sorted(p.name for p in out.iterdir() if p.name.startswith("."))
    return {"store": rows, "published_in_store": publications >= 1,
            "manifest": json.loads((out / "after" / "manifest.json").read_text("utf-8")),
            "published": published_release(out), "leftovers": leftovers,
            "releases": sorted(p.name for p in out.iterdir() if p.is_dir())}


@pytest.fixture(scope="module")
def reference(base, tmp_path_factory) -> dict:
    """An uninterrupted publish of ``after`` from a copy of the base."""
    store, out = _copy(base, tmp_path_factory.mktemp("publish-reference") / "run")
    assert main([*_publish_argv(out), "--store", str(store), "-q"]) == 0
    return result(store, out)


def _exists(pattern: str, out: Path):
    return lambda probe: any(out.glob(pattern))


PUBLISH_POINTS = [p for p in CRASH_POINTS if p.startswith("publish:")]
KILL_POINTS = ["writing-exports", "building-published-file", *PUBLISH_POINTS]


def test_reference_publish_is_whole(reference):
    """The uninterrupted publish: both releases present, the published file holds ``after``."""
    assert reference["releases"] == ["after", "before"]
    assert reference["published"][0] == "after" and reference["leftovers"] == []
    assert len(reference["store"]["release"]) == 1 and reference["published_in_store"]


@pytest.mark.parametrize("point", KILL_POINTS)
def test_killed_publish_recovers(base, reference, tmp_path, point):
    """SIGKILL at ``point``: verify passes, readers see a whole release, a rerun converges."""
    store, out = _copy(base, tmp_path / "run")
    if point in PUBLISH_POINTS:
        outcome = kill_cli(_publish_argv(out), store, lambda probe: False,
                           env={KILL_ENV: point})
    else:
        pattern = ".tmp-after-*" if point == "writing-exports" else ".published.duckdb.*.tmp"
        outcome = kill_cli(_publish_argv(out), store, _exists(pattern, out))
    assert outcome.killed and outcome.returncode == -signal.SIGKILL, outcome
    assert_store_recovers(store, releases=out)
    seen, _ = published_release(out)
    assert seen == ("after" if point == "publish:swapped" else "before"), point
    assert main([*_publish_argv(out), "--store", str(store), "-q"]) == 0
    assert_store_recovers(store, releases=out)
    assert result(store, out) == reference, point


def test_a_leftover_of_a_live_process_is_kept(base, tmp_path):
    """Temporary names carry the writer's PID; a publish removes only those of dead processes
    (another publish into the same root may be running)."""
    import os

    from pipeline.publish.exports import remove_leftovers
    from pipeline.publish.published import remove_leftovers as remove_files

    _, out = _copy(base, tmp_path / "run")
    live, dead = out / f".tmp-x-{os.getppid()}", out / ".tmp-x-999999999"
    live.mkdir()
    dead.mkdir()
    stale = out / ".published.duckdb.999999999.tmp"
    stale.write_bytes(b"")
    assert remove_leftovers(out) == [dead] and live.exists()
    assert remove_files(out / "published.duckdb") == [stale]


def test_verify_finds_a_listed_release_whose_folder_is_gone(base, tmp_path, capsys):
    """A release the store lists as published into the root must be there with its manifest
    (removed: release.listed; a manifest of other inputs: release.fingerprint)."""
    store, out = _copy(base, tmp_path / "run")
    assert main([*_publish_argv(out), "--store", str(store), "-q"]) == 0
    assert main(["verify", "--store", str(store), "--releases", str(out), "-q"]) == 0
    manifest = out / "after" / "manifest.json"
    doc = json.loads(manifest.read_text("utf-8"))
    manifest.write_text(json.dumps({**doc, "fingerprint": "0" * 64}), encoding="utf-8")
    assert main(["verify", "--store", str(store), "--releases", str(out), "-q"]) == 1
    assert "FINDING release.fingerprint" in capsys.readouterr().out
    shutil.rmtree(out / "after")
    assert main(["verify", "--store", str(store), "--releases", str(out), "-q"]) == 1
    assert "FINDING release.listed" in capsys.readouterr().out
