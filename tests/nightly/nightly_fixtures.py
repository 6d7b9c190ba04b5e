"""Helpers for the nightly tests: raw folders copied into tmp_path and a runner."""

from __future__ import annotations

import shutil
import time
import textwrap
from pathlib import Path

from pipeline.nightly import NightlyOptions, run_nightly

REPO = Path(__file__).resolve().parents[2]
DEMO_RAW = REPO / "raw"
ARGON_BATCHES = ("tegeler-1999-argon-ancillaries", "brackenridge-rig-b-argon-1988")

# A second argon source whose critical temperature is 0.5 K above the evaluated one
# (u = 0.02 K): sources.agreement must name it. Its citation carries markup that the report
# must show as text.
DISCREPANT_ARGON = """
format_version = 1

[source]
id = "lit-argon-critical-discrepant"
kind = "literature"
citation = "<script>alert('pwned')</script> Invented test paper on argon & its critical point"
license = "test data"

[[fixed_point]]
fluid = "argon"
kind = "critical"
T = { value = 151.2, unit = "K", u = 0.02 }
p = { value = 4.863, unit = "MPa", u = 0.005 }
"""


def copy_demo(tmp: Path, batches: tuple[str, ...] | None = None) -> Path:
    """raw/ copied to ``tmp/raw`` (only ``batches`` when given; fluids.toml always)."""
    target = tmp / "raw"
    if batches is None:
        shutil.copytree(DEMO_RAW, target, ignore=shutil.ignore_patterns("__pycache__"))
        return target
    target.mkdir(parents=True)
    shutil.copy2(DEMO_RAW / "fluids.toml", target / "fluids.toml")
    for b in batches:
        shutil.copytree(DEMO_RAW / b, target / b)
    return target


def add_batch(raw: Path, name: str, manifest: str, files: dict[str, str] | None = None) -> Path:
    folder = raw / name
    folder.mkdir()
    (folder / "batch.toml").write_text(textwrap.dedent(manifest), encoding="utf-8")
    for fname, text in (files or {}).items():
        (folder / fname).write_text(text, encoding="utf-8")
    return folder


def cli(argv: list[str]) -> int:
    """``fluidledger ARGV`` in this process, leaving the logging set-up as it was (the CLI
    points the root logger at the current, soon closed, captured stderr)."""
    import logging

    from pipeline.cli import main

    root = logging.getLogger()
    handlers, level = list(root.handlers), root.level
    try:
        return main(argv)
    finally:
        for h in root.handlers:
            if h not in handlers:
                root.removeHandler(h)
        for h in handlers:
            if h not in root.handlers:
                root.addHandler(h)
        root.setLevel(level)


def next_second() -> None:
    """Wait for the UTC clock to enter a new second.

    The publish stage rests a release on the latest check run ordered by its start time in
    whole seconds; two nightly runs within one second would tie there.
    """
    time.sleep(1.0 - (time.time() % 1.0) + 0.01)


def nightly(tmp: Path, raw: Path, **kw):
    """One quiet nightly run with the store and reports under ``tmp``."""
    opts = NightlyOptions(store=tmp / "store.duckdb", raw=raw, reports=tmp / "reports",
                          quiet=True, **kw)
    return run_nightly(opts)
