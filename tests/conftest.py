"""Shared fixtures: tiny raw folders written into tmp_path, and a store opener."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

FLUIDS_TOML = """
[[fluid]]
id = "water"
name = "water"
formula = "H2O"
cas_rn = "7732-18-5"
solid_phases = ["Ih", "III"]
molar_mass = { value = 18.015268, unit = "g/mol" }   # IAPWS-95

[[fluid]]
id = "argon"
name = "argon"
formula = "Ar"
cas_rn = "7440-37-1"
molar_mass = { value = 39.948, unit = "g/mol" }      # Tegeler, Span & Wagner (1999)
"""

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


def write_batch(root: Path, name: str, manifest: str, files: dict[str, str | bytes]) -> Path:
    """Write raw/<name>/batch.toml and its files; return the batch folder."""
    folder = root / name
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "batch.toml").write_text(textwrap.dedent(manifest), encoding="utf-8")
    for fname, content in files.items():
        target = folder / fname
        if isinstance(content, bytes):
            target.write_bytes(content)
        else:
            target.write_text(content, encoding="utf-8")
    return folder


@pytest.fixture
def raw_root(tmp_path) -> Path:
    root = tmp_path / "raw"
    root.mkdir()
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    return root


@pytest.fixture
def store_path(tmp_path) -> Path:
    return tmp_path / "store.duckdb"
