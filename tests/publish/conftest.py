"""Stores for the publish tests: the demo data ingested, fitted and checked (built once)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from pipeline.cli import main

REPO = Path(__file__).resolve().parents[2]
RAW = REPO / "raw"


def build(store: Path, raw: Path) -> Path:
    """ingest + fit + check into ``store``; the check may fail (planted flaws)."""
    assert main(["ingest", str(raw), "--store", str(store), "-q"]) == 0
    assert main(["fit", "--store", str(store), "-q"]) == 0
    assert main(["check", "--store", str(store), "-q"]) in (0, 1)
    return store


@pytest.fixture(scope="session")
def demo_store_master(tmp_path_factory) -> Path:
    """The whole demo data set (with its planted flaws)."""
    return build(tmp_path_factory.mktemp("demo") / "store.duckdb", RAW)


def _copy(master: Path, tmp_path: Path) -> Path:
    target = tmp_path / "store" / "store.duckdb"
    target.parent.mkdir(parents=True)
    shutil.copyfile(master, target)
    return target


@pytest.fixture
def demo_store(demo_store_master, tmp_path) -> Path:
    """A private copy of the demo store (tests may publish into it)."""
    return _copy(demo_store_master, tmp_path)


@pytest.fixture(scope="session")
def published_demo(tmp_path_factory, demo_store_master) -> dict:
    """The demo store published once (--allow-failures): store, output root, release id."""
    root = tmp_path_factory.mktemp("published")
    store = _copy(demo_store_master, root)
    out = root / "out"
    assert main(["publish", "--store", str(store), "--out", str(out), "--allow-failures",
                 "-q"]) == 0
    release = next(p.name for p in out.iterdir() if p.is_dir() and not p.name.startswith("."))
    return {"store": store, "out": out, "release": release,
            "file": out / "published.duckdb"}
