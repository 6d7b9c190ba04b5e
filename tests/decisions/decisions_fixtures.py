"""The demo data in a store, built once per test session and copied for each test.

``demo_copy(tmp_path)`` gives a private raw/ folder (a copy of the committed demo data with an
empty decisions file) and a store that has been ingested, fitted and checked from it, so a test
can change a raw file, re-ingest, and see what its decisions do.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

from pipeline.checks import load_fluid_data, run_checks
from pipeline.cli import main
from pipeline.fitting.stage import run_fit
from pipeline.ingest.stage import run_ingest
from pipeline.store import open_store

REPO_RAW = Path(__file__).resolve().parents[2] / "raw"
CO2_RIG_A = "brackenridge-rig-a-co2-2024-05/co2-vle-rig-a.csv"
CO2_RIG_A_SOURCE = "brackenridge-rig-a-co2-2024-05"
CURATOR = "Imre Castellan"   # invented
EMPTY_FILE = "# decisions of the test suite\nformat_version = 1\n"
_BUILT: dict[str, Path] = {}


@dataclass
class Demo:
    root: Path
    raw: Path
    store: Path
    decisions: Path

    def cli(self, *argv: str) -> int:
        """``fluidledger ARGV --store S`` (and ``--decisions D`` where the command takes it)."""
        args = [*argv, "--store", str(self.store)]
        if argv[0] in ("fit", "check", "decisions", "decide", "nightly", "publish"):
            args += ["--decisions", str(self.decisions)]
        return main(args)

    def decide(self, kind: str, *options: str, why: str = "test decision") -> int:
        return self.cli("decide", kind, *options, "--why", why, "--who", CURATOR)

    def reingest(self) -> None:
        with open_store(self.store) as s:
            run_ingest(s.con, [self.raw])

    def query(self, sql: str, params=None) -> list[tuple]:
        with open_store(self.store, read_only=True) as s:
            return s.con.execute(sql, params or []).fetchall()

    def edit_csv(self, relpath: str, edit) -> None:
        """Rewrite a raw CSV through ``edit(lines) -> lines`` (header is line 0)."""
        path = self.raw / relpath
        lines = path.read_text("utf-8").split("\n")
        path.write_text("\n".join(edit(lines)), encoding="utf-8")


def _build(cache_dir: Path) -> Path:
    raw = cache_dir / "raw"
    shutil.copytree(REPO_RAW, raw, ignore=shutil.ignore_patterns("decisions.toml", "*.py", "*.md"))
    store = cache_dir / "store.duckdb"
    with open_store(store) as s:
        run_ingest(s.con, [raw])
        run_fit(s.con)
        run_checks(load_fluid_data(s.con), con=s.con)
    return cache_dir


def demo_copy(tmp_path_factory, tmp_path: Path) -> Demo:
    if "demo" not in _BUILT:
        _BUILT["demo"] = _build(tmp_path_factory.mktemp("demo-store"))
    built = _BUILT["demo"]
    shutil.copytree(built / "raw", tmp_path / "raw")
    shutil.copy(built / "store.duckdb", tmp_path / "store.duckdb")
    decisions = tmp_path / "raw" / "decisions.toml"
    decisions.write_text(EMPTY_FILE, encoding="utf-8")
    return Demo(tmp_path, tmp_path / "raw", tmp_path / "store.duckdb", decisions)
