"""Shared fixtures: tiny raw folders written into tmp_path, and a store opener; SIMPLE_BATCH is
the canonical small batch whose text the bad-input tests alter (tests/storekit.py builds others)."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.storekit import FLUIDS_TOML, write_batch  # noqa: F401 (the tests import them from here)

SIMPLE_BATCH = """
[source]
id = "{source}"
kind = "measurement"
citation = "Test rig, invented campaign for the test suite"

[[table]]
file = "vp.csv"
fluid = "argon"
boundary = "liquid-vapour"
temperature = {{ column = "T", unit = "K" }}
pressure = {{ column = "p", unit = "kPa" }}
[table.uncertainty]
temperature = {{ value = 0.01, unit = "K" }}
pressure = {{ relative = 0.001 }}
"""

# argon vapour pressures near the normal boiling point (approximate values, test data only)
SIMPLE_CSV = "T,p\n85.0,78.9\n87.3,101.3\n90.0,133.6\n"


@pytest.fixture
def raw_root(tmp_path) -> Path:
    root = tmp_path / "raw"
    root.mkdir()
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    return root


@pytest.fixture
def store_path(tmp_path) -> Path:
    return tmp_path / "store.duckdb"
