"""Readers of the published file are never blocked by, nor see half of, a nightly run.

Four reader processes query ``published.duckdb`` in a loop the way SQL users do (read-only
connections from :func:`pipeline.publish.published.open_read_only`, the curated views and the
``fl_*`` macros) while nightly runs work on the store in other processes:

1. a first nightly on the clean argon batches publishes release A (before the readers start);
2. a consistent argon critical point is added; the next nightly passes and publishes release B;
3. a discrepant argon critical point is added; that nightly fails and publishes nothing.

Every read must succeed (no lock error, no missing table), every read must see one whole
release (row counts equal the release row's counts, one release id in every table), each reader
must see A then B in that order and nothing else, and each must have completed reads while each
nightly ran - a nightly run never makes a reader wait.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.nightly.nightly_fixtures import ARGON_BATCHES, DISCREPANT_ARGON, add_batch, copy_demo
from tests.reliability.crashkit import REPO

READERS = 4

READER = r"""
import json, os, sys, time
from pipeline.publish.published import open_read_only, read_only_query

path, stop = sys.argv[1], sys.argv[2]
SQL = '''
SELECT r.release_id, r.n_constants, r.n_curves, r.n_provenance,
       (SELECT count(*) FROM curated_constants), (SELECT count(*) FROM curated_curves),
       (SELECT count(*) FROM curated_provenance),
       (SELECT count(DISTINCT release_id) FROM release_constant),
       (SELECT count(DISTINCT release_id) FROM release_curve),
       (SELECT count(DISTINCT release_id) FROM release_provenance),
       fl_curve_value('argon', 'liquid-vapour', '', 'pressure', 120.0)
FROM curated_release r
'''
reads, seen, bad, errors, times = 0, [], [], [], []
while not os.path.exists(stop):
    try:
        con = open_read_only(path)
        try:
            _, rows = read_only_query(con, SQL)
        finally:
            con.close()
        (rid, n_c, n_k, n_p, c, k, p, d1, d2, d3, p120), = rows
        reads += 1
        times.append(time.time())
        if (c, k, p, d1, d2, d3) != (n_c, n_k, n_p, 1, 1, 1) or not (p120 and p120 > 0):
            bad.append([rid, n_c, n_k, n_p, c, k, p, d1, d2, d3, p120])
        if not seen or seen[-1] != rid:
            seen.append(rid)
        if reads == 1:
            print("ready", flush=True)
    except Exception as err:
        errors.append(f"{type(err).__name__}: {err}")
        if len(errors) > 50:
            break
print(json.dumps({"reads": reads, "seen": seen, "bad": bad[:5], "errors": errors[:5],
                  "times": times}), flush=True)
"""

# A second evaluation of argon's critical point within the stated uncertainties of the first
# (Tegeler, Span & Wagner 1999: Tc = 150.687 K, pc = 4.863 MPa): sources.agreement passes.
CONSISTENT_ARGON = """
format_version = 1

[source]
id = "lit-argon-critical-consistent"
kind = "literature"
citation = "Invented test paper repeating argon's critical point"
license = "test data"

[[fixed_point]]
fluid = "argon"
kind = "critical"
T = { value = 150.69, unit = "K", u = 0.02 }
p = { value = 4.863, unit = "MPa", u = 0.005 }
"""


def _nightly(tmp: Path, raw: Path) -> dict:
    """One nightly run in its own process; its exit code, published release and time span."""
    start = time.time()
    proc = subprocess.run([sys.executable, "-m", "pipeline.cli", "nightly", "--raw", str(raw),
                           "--reports", str(tmp / "reports"), "--store", str(tmp / "store.duckdb"),
                           "-q"], cwd=REPO, env={**os.environ, "PYTHONPATH": str(REPO)},
                          capture_output=True, text=True, timeout=300)
    end = time.time()
    latest = json.loads((tmp / "reports" / "latest" / "results.json").read_text("utf-8"))
    return {"code": proc.returncode, "stderr": proc.stderr, "start": start, "end": end,
            "publish": latest["nightly"]["publish"]}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("readers")
    raw = copy_demo(tmp, ARGON_BATCHES)
    first = _nightly(tmp, raw)
    assert first["code"] == 0, first["stderr"]
    published = tmp / "published.duckdb"
    stop = tmp / "stop"
    readers = [subprocess.Popen([sys.executable, "-c", READER, str(published), str(stop)],
                                stdout=subprocess.PIPE, text=True, cwd=REPO,
                                env={**os.environ, "PYTHONPATH": str(REPO)})
               for _ in range(READERS)]
    try:
        for r in readers:
            assert r.stdout.readline().strip() == "ready"
        add_batch(raw, "lit-argon-critical-consistent", CONSISTENT_ARGON)
        second = _nightly(tmp, raw)
        add_batch(raw, "lit-argon-critical-discrepant", DISCREPANT_ARGON)
        third = _nightly(tmp, raw)
        time.sleep(0.3)
    finally:
        stop.touch()
    results = [json.loads(r.communicate(timeout=120)[0].strip().splitlines()[-1])
               for r in readers]
    return {"nightly": [first, second, third], "readers": results}


def test_the_nightly_runs_publish_then_refuse(runs):
    """The consistent source passes and publishes a new release; the discrepant one fails
    (exit 1) and publishes nothing."""
    first, second, third = runs["nightly"]
    assert first["publish"]["status"] == "published"
    assert (second["code"], second["publish"]["status"]) == (0, "published"), second["stderr"]
    assert second["publish"]["release_id"] != first["publish"]["release_id"]
    assert third["code"] == 1 and third["publish"]["status"] == "skipped"


def test_no_reader_fails_or_sees_part_of_a_release(runs):
    """Four readers: no error, every read a whole release, releases A then B in order."""
    first, second, _ = runs["nightly"]
    a, b = first["publish"]["release_id"], second["publish"]["release_id"]
    assert len(runs["readers"]) == READERS
    for res in runs["readers"]:
        assert res["errors"] == [] and res["bad"] == []
        assert res["seen"] == [a, b], res["seen"]
        assert res["reads"] > 50


def test_readers_kept_reading_while_each_nightly_ran(runs):
    """Each reader completed reads inside the time span of both later nightly runs."""
    for run in runs["nightly"][1:]:
        for res in runs["readers"]:
            during = sum(run["start"] <= t <= run["end"] for t in res["times"])
            assert during >= 5, (during, run["end"] - run["start"])
