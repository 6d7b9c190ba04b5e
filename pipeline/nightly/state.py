"""What a run compares with: per-fluid fingerprints of data, fits and code, and the state
earlier nightly runs recorded."""

from __future__ import annotations

import hashlib
import importlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pipeline import __version__

STATE_LOOKBACK = 50


def digest(*parts: Any) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()[:32]


_DATA_FP_SQL = """
WITH parts AS (
    SELECT fluid_id, 'file:' || file_id AS part FROM raw_file_current
        WHERE role = 'table' AND fluid_id IS NOT NULL
    UNION ALL SELECT fluid_id, 'fp:' || fp_id FROM fixed_point_current
    UNION ALL SELECT fluid_id, 'const:' || const_id FROM stated_constant_current
    UNION ALL SELECT fluid_id, 'mm:' || molar_mass_kg_mol FROM fluid
)
SELECT fluid_id, sha256(string_agg(part, '|' ORDER BY part)) FROM parts
WHERE fluid_id IN (SELECT fluid_id FROM fluid) GROUP BY fluid_id
"""


def data_fingerprints(con) -> dict[str, str]:
    """Per fluid, a hash of the ids of everything it holds (file versions and fixed-point
    rows are immutable, so equal ids mean equal data)."""
    return {fid: h[:32] for fid, h in con.execute(_DATA_FP_SQL).fetchall()}


def current_fits(con) -> dict[str, dict[str, str]]:
    """Per fluid, group ('boundary/phase/quantity') -> current fit id."""
    out: dict[str, dict[str, str]] = {}
    for fid, b, ph, q, fit_id in con.execute(
            "SELECT fluid_id, boundary, solid_phase, quantity, fit_id FROM fit WHERE is_current"
    ).fetchall():
        out.setdefault(fid, {})[f"{b}/{ph or '-'}/{q}"] = fit_id
    return out


def code_hash(package: str) -> str:
    pkg = importlib.import_module(package)
    folder = Path(pkg.__file__).parent
    h = hashlib.sha256(__version__.encode())
    for p in sorted(folder.glob("*.py")) + sorted(folder.glob("*.toml")):
        h.update(p.name.encode() + p.read_bytes())
    return h.hexdigest()[:32]


@dataclass
class PreviousState:
    """What earlier nightly runs recorded: per fluid its fingerprints, fits and check run."""
    run_id: str | None = None
    fluids: dict[str, dict] = field(default_factory=dict)
    contexts: dict = field(default_factory=dict)
    publish: dict = field(default_factory=dict)

    def of(self, fluid_id: str) -> dict:
        return self.fluids.get(fluid_id, {})


def previous_state(con, current_run_id: str) -> PreviousState:
    """The latest finished nightly run's record, with each fluid's state taken from the most
    recent run that covered it (runs restricted with ``--fluid`` cover some fluids only)."""
    rows = con.execute(
        "SELECT run_id, summary_json FROM run WHERE kind = 'nightly' AND run_id <> ? AND "
        "summary_json IS NOT NULL AND status <> 'running' ORDER BY started_at DESC, rowid DESC "
        "LIMIT ?", [current_run_id, STATE_LOOKBACK]).fetchall()
    state = PreviousState()
    for run_id, text in rows:
        summary = json.loads(text)
        if "state" not in summary:
            continue
        if state.run_id is None:
            state.run_id = run_id
            state.contexts = summary.get("contexts", {})
            state.publish = summary.get("publish", {})
        for fid, s in summary["state"].items():
            state.fluids.setdefault(fid, s)
    return state
