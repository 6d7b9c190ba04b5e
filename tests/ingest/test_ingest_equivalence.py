"""Today's ingest leaves in the store exactly what the ingest before issue 14's changes left.

The expected snapshots were written by main's ingest at commit 4012623 (see
``tests/ingest/store_snapshot.py``); a faster ingest must give the same rows, ids, row
numbers, SI values bit for bit, original cell texts, quarantine reasons and messages and
per-batch outcomes on the demo, the real-data corpus and the bad-input corpus.
"""

from __future__ import annotations

import gzip
import json

import pytest

from tests.ingest.store_snapshot import EXPECTED, TABLES, ingest_snapshot, raw_folders


def _differences(got: dict, want: dict) -> list[str]:
    """The first few rows that differ, per table, for a readable failure."""
    out = []
    for key in (*TABLES, "batches"):
        g, w = got[key], want[key]
        if g == w:
            continue
        gs, ws = {json.dumps(r): r for r in g}, {json.dumps(r): r for r in w}
        missing = [r for k, r in ws.items() if k not in gs][:3]
        extra = [r for k, r in gs.items() if k not in ws][:3]
        out.append(f"{key}: {len(g)} rows vs {len(w)} expected; expected but missing "
                   f"{missing}; not expected {extra}")
    return out


@pytest.mark.parametrize("name", ["demo", "realdata", "bad_inputs"])
def test_the_store_after_ingest_equals_the_previous_implementations(name, tmp_path):
    """Ingesting the demo, the real-data corpus or the bad-input corpus gives every data table row for row (floats bit for bit) and every batch outcome as main's ingest before issue 14 did."""
    raw = raw_folders(tmp_path)[name]
    got = json.loads(json.dumps(ingest_snapshot(raw, tmp_path / "store.duckdb"), default=str))
    with gzip.open(EXPECTED / f"{name}.json.gz", "rt", encoding="utf-8") as f:
        want = json.load(f)
    assert _differences(got, want) == []
