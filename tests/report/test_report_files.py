"""Report files: the reports/latest pointer and the plot cache."""

from __future__ import annotations

import os

from pipeline.report.files import PlotCache, update_latest


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
