"""Report files: the reports/latest pointer and the plot cache."""

from __future__ import annotations

import os

from pipeline.report.files import PlotCache, update_latest
from tests.report.test_report_fragments import _nightly_block


def test_latest_is_a_relative_symlink_replaced_by_newer_runs(tmp_path):
    """reports/latest points at the newest run folder, relative, replaced atomically."""
    for run in ("nightly-1", "nightly-2"):
        (tmp_path / run).mkdir()
        assert update_latest(tmp_path, run) == "symlink"
    assert os.readlink(tmp_path / "latest") == "nightly-2"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".latest")] == []


def test_latest_falls_back_to_a_text_file_without_symlinks(tmp_path, monkeypatch):
    """Where symlinks cannot be made, reports/latest is a text file holding the run id."""
    (tmp_path / "nightly-1").mkdir()
    update_latest(tmp_path, "nightly-1")

    def refuse(*args, **kwargs):
        raise OSError("symlinks not supported here")

    monkeypatch.setattr(os, "symlink", refuse)
    assert update_latest(tmp_path, "nightly-2") == "file"
    latest = tmp_path / "latest"
    assert not latest.is_symlink() and latest.read_text() == "nightly-2\n"


def test_plot_cache_round_trip_disable_and_prune(tmp_path):
    """Cached PNGs come back by key, are ignored when disabled, and unused keys are pruned."""
    cache = PlotCache(tmp_path / "plots")
    cache.put("a", b"png-a")
    cache.put("b", b"png-b")
    assert cache.get("a") == b"png-a" and cache.get("zzz") is None
    assert PlotCache(tmp_path / "plots", enabled=False).get("a") is None
    assert cache.prune({"b"}) == 1
    assert cache.get("a") is None and cache.get("b") == b"png-b"


def _document(results):
    import json

    nightly = _nightly_block()
    run = {"run_id": "check-x", "kind": "check", "started_at": "2026-01-01T00:00:00Z",
           "finished_at": "2026-01-01T00:00:00Z", "duration_s": 0.0, "pipeline_version": "0",
           "parameters": {}, "status": "ok", "checks": ["data.ranges"], "fluids": ["argon"],
           "counts": dict.fromkeys(("pass", "warn", "fail", "skip", "error", "waived",
                                    "excluded"), 0)}
    return json.loads(json.dumps({"nightly": nightly, "run": run, "results": results}))


def _result(i, status="pass"):
    return {"check_id": "data.ranges", "fluid_id": "argon", "subject": f"s{i}",
            "status": status, "severity": "fail", "message": "m", "measured": None,
            "limit": None, "statistic": None, "evidence": {}, "thresholds": {},
            "input_hash": None, "decision_id": None, "duration_s": 0.0}


def test_validated_json_round_trips_and_refuses_an_invalid_item():
    """The text parses back to the document, and an invalid item is refused by its place."""
    import json

    import pytest

    from pipeline.report.files import ReportSchemaError, validated_json

    doc = _document([_result(i) for i in range(3)])
    assert json.loads(validated_json(doc)) == doc
    bad = _document([_result(i) for i in range(3)] + [_result(9, status="maybe")])
    with pytest.raises(ReportSchemaError, match="results/3/status"):
        validated_json(bad)
