"""results.json and junit.xml assembled from per-fluid fragments: the same bytes as the writers
without a cache, from fresh results or their stored copies, and a nightly report built
incrementally equal to one built from a cold cache."""

from __future__ import annotations

import gzip
import json
import math
import sys
import xml.etree.ElementTree as ET
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "nightly"))
from nightly_fixtures import DISCREPANT_ARGON, add_batch, copy_demo, nightly  # noqa: E402

from pipeline.checks.render import junit_xml as reference_junit  # noqa: E402
from pipeline.checks.results import CheckResult, CheckRun, evidence_json, jsonable  # noqa: E402
from pipeline.report import fragments as frag  # noqa: E402
from pipeline.report.files import (ReportSchemaError, results_bytes, results_document,  # noqa: E402
                                   validated_json, write_report)
from pipeline.report.html import ReportPage  # noqa: E402

REGRESSION = Path(__file__).resolve().parents[1] / "checks" / "regression"
CHECKS = ["triple-point.on-curves", "data.ranges", "data.unit-mixup", "data.no-results"]


def _nightly_block(run_id: str = "nightly-x") -> dict:
    return {"run_id": run_id, "kind": "nightly", "started_at": "t", "finished_at": "t",
            "duration_s": 1.0, "pipeline_version": "0", "parameters": {}, "verdict": "pass",
            "exit_code": 0, "no_changes": False, "previous_run_id": None,
            "check_run_id": "check-x", "counts": {},
            "stages": {s: {"status": "ok", "duration_s": 0.0, "text": "", "detail": {}}
                       for s in ("ingest", "fit", "check")},
            "changes": {"new_failures": [], "fixed": [], "changed": [], "values": [],
                        "values_basis": ""},
            "publish": {"status": "skipped", "release_id": None, "reason": None},
            "report": {}}


def _run(results: list[CheckResult], checks: list[str] | None = None) -> CheckRun:
    fluids = list(dict.fromkeys(r.fluid_id for r in results))
    checks = checks or list(dict.fromkeys(r.check_id for r in results)) + ["data.never-ran"]
    return CheckRun("check-20260101T000000-abcdef", "2026-01-01T00:00:00Z",
                    "2026-01-01T00:00:01Z", "0", {"why": "test"}, checks, fluids, results, 1.0)


def _snapshot(name: str) -> list[CheckResult]:
    """The frozen check results of tests/checks/regression, with made-up seconds."""
    with gzip.open(REGRESSION / f"expected-{name}.jsonl.gz", "rt") as fh:
        items = [json.loads(line) for line in fh]
    fields = [f for f in CheckResult.__dataclass_fields__ if f != "duration_s"]
    return [CheckResult(**{f: d[f] for f in fields}, duration_s=1e-4 * (i % 13) + 1e-7 * i)
            for i, d in enumerate(items)]


def _both(run: CheckRun, frags) -> tuple[bytes, bytes, bytes, bytes]:
    """(results.json, junit.xml) written whole, then from the fragments."""
    nightly = _nightly_block()
    whole = validated_json(results_document(nightly, run)).encode()
    head = {"nightly": nightly, "run": run.asdict(results=False)["run"]}
    return (whole, reference_junit(run).encode(), frag.results_json(head, frags),
            frag.junit_xml(run, frags))


@pytest.mark.parametrize("name", ["demo", "realdata", "synthetic"])
def test_files_from_fragments_are_the_bytes_of_the_writers_without_a_cache(name):
    """On every frozen check result of the regression snapshots, results.json and junit.xml
    assembled from fragments (built, and read back from their bytes) equal the whole-run
    writers byte for byte."""
    run = _run(_snapshot(name))
    built, detail = frag.fragments(run)
    assert detail["fragments_built"] == len(run.fluids) and detail["fragments_cached"] == 0
    whole_json, whole_junit, json_bytes, junit_bytes = _both(run, built)
    assert json_bytes == whole_json
    assert junit_bytes == whole_junit
    read = [frag.Fragment.from_bytes(f.to_bytes()) for f in built]
    assert _both(run, read)[2:] == (whole_json, whole_junit)


def _hostile() -> list[CheckResult]:
    text = "outlier in \x1b[2Jdata\u202e/vp.csv <b>&amp;</b> \"quoted\" caf\u00e9 \u2264 3"
    th = {"severity": "fail", "z_max": 3.0}
    return [CheckResult("data.ranges", "water", "file:a.csv|1", "fail", "fail", text, 4,
                        np.float64(3.0), "|z|", {"obs_ids": [np.int64(7), 8], "t": (1.5, 2)},
                        th, "h1", None, 0.25),
            CheckResult("data.ranges", "water", "file:a.csv|2", "warn", "warn", text,
                        float("nan"), None, None, {"x": float("nan"), "k": {"b": 1, "a": 2}},
                        th, "h1", None, 0.125),
            CheckResult("data.ranges", "argon", "", "waived", "fail", text, None, None, None,
                        {}, th, "h2", "D-0001", None),
            CheckResult("data.unit-mixup", "argon", "", "error", "fail", "raised", None, None,
                        None, {"traceback": "line\x00one\nline two"}, th, "h2", None, 1e-9)]


def _stored_copy(r: CheckResult) -> CheckResult:
    """``r`` as the check stage reads it back from the store (numbers as DOUBLE, evidence and
    thresholds through their JSON text)."""
    def num(x):
        return None if x is None or (isinstance(x, float) and math.isnan(x)) else float(x)

    return CheckResult(r.check_id, r.fluid_id, r.subject, r.status, r.severity, r.message,
                       num(r.measured), num(r.limit), r.statistic,
                       json.loads(evidence_json(r.evidence)),
                       json.loads(json.dumps(r.thresholds, sort_keys=True)), r.input_hash,
                       r.decision_id, num(r.duration_s))


def test_a_fragment_of_fresh_results_equals_one_of_their_stored_copy():
    """Integer and numpy numbers, NaN, tuples and control characters: the fragment built from
    the results a check returned has the bytes of the one built from the store's copy."""
    fresh = [replace(r, evidence=jsonable(r.evidence)) for r in _hostile()]   # as read
    stored = [_stored_copy(r) for r in fresh]
    for fluid in ("water", "argon"):
        a = frag.Fragment.build(fluid, [r for r in fresh if r.fluid_id == fluid])
        b = frag.Fragment.build(fluid, [r for r in stored if r.fluid_id == fluid])
        assert a.to_bytes() == b.to_bytes()
    run = _run(stored, CHECKS)
    whole_json, whole_junit, json_bytes, junit_bytes = _both(run, frag.fragments(run)[0])
    assert (json_bytes, junit_bytes) == (whole_json, whole_junit)
    root = ET.fromstring(junit_bytes)       # control characters escaped: still XML
    assert root.get("tests") == "4" and root.get("skipped") == "1"
    assert "\\x1b" in junit_bytes.decode() and "\x1b" not in junit_bytes.decode()


def test_cached_fragments_are_reused_and_a_damaged_one_is_built_again(tmp_path):
    """A fluid whose origin has a fragment in the cache is read, not built; a damaged cache
    file is built again; pruning keeps the keys in use."""
    run = _run(_snapshot("demo"))
    cache = frag.FragmentCache(tmp_path / "results")
    origins = dict.fromkeys(run.fluids, run.run_id)
    built, detail = frag.fragments(run, origins, cache)
    for f in built:
        cache.put(detail["keys"][f.fluid_id], f)
    again, detail2 = frag.fragments(run, origins, cache)
    assert detail2["fragments_built"] == 0 and all(f.fresh is None for f in again)
    first = cache.path(detail["keys"][run.fluids[0]])
    first.write_bytes(first.read_bytes()[:-5])
    _, detail3 = frag.fragments(run, origins, cache)
    assert detail3["fragments_built"] == 1
    cache.put("stale", built[0])
    assert cache.prune(set(detail["keys"].values())) == 1


def test_an_invalid_fresh_item_is_refused_naming_its_place():
    """An item built now that breaks the schema is refused with its index in results.json."""
    results = _snapshot("demo")[:5]
    results[3] = CheckResult(**{**results[3].__dict__, "status": "pass", "severity": "maybe"})
    run = _run(results)
    fragments, _ = frag.fragments(run)
    key = (results[3].check_id, results[3].fluid_id, results[3].subject)
    position = [(r.check_id, r.fluid_id, r.subject) for r in run.by_status()].index(key)
    with pytest.raises(ReportSchemaError, match=f"results/{position}/severity"):
        results_bytes(_nightly_block(), run, fragments)


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    """The demo, then a second nightly after a new argon batch: argon is checked again, the
    other fluids' results are reused."""
    tmp = tmp_path_factory.mktemp("fragments-demo")
    raw = copy_demo(tmp)
    first = nightly(tmp, raw)
    add_batch(raw, "argon-critical-discrepant", DISCREPANT_ARGON)
    second = nightly(tmp, raw)
    return {"tmp": tmp, "first": first, "second": second}


def test_an_incremental_report_has_the_bytes_of_one_built_from_a_cold_cache(two_runs, tmp_path):
    """The second run builds only argon's fragment (the others come from the first run's
    cache, built from fresh results); its results.json and junit.xml equal the files written
    from the stored check run with no cache at all."""
    import duckdb

    from pipeline.nightly.stages import reused_results

    second = two_runs["second"]
    detail = second.stages["report"].detail
    assert detail["fragments_built"] == second.stages["check"].detail["n_rechecked"] == 1
    assert detail["fragments_cached"] == second.stages["check"].detail["n_reused"] > 0
    folder = Path(second.report["dir"])
    doc = json.loads((folder / "results.json").read_text())
    block = doc["run"]
    con = duckdb.connect(str(two_runs["tmp"] / "store.duckdb"), read_only=True)
    results = list(reused_results(con, block["run_id"], block["fluids"]))
    con.close()
    run = CheckRun(block["run_id"], block["started_at"], block["finished_at"],
                   block["pipeline_version"], block["parameters"], block["checks"],
                   block["fluids"], results, block["duration_s"])
    cold = tmp_path / "cold"
    write_report(cold, doc["nightly"], ReportPage(doc["nightly"], run, {}, {}))
    for name in ("results.json", "junit.xml"):
        assert (cold / name).read_bytes() == (folder / name).read_bytes(), name
