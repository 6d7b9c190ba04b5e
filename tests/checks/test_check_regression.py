"""Check results do not change when the check code changes: frozen inputs, frozen results.

The expected results were computed by the per-fluid check code before the checks were
vectorised (issue 14) and are compared field by field: every string (status, subject,
statistic, message, the strings in the evidence) exactly, every number to 1e-9 relative (the
numbers agree to the last bit on the machine that made the snapshot; a tolerance keeps the
test meaningful on a CPU whose vector maths rounds differently). How the snapshot is made:
``tests/checks/regression/snapshot_results.py``.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent / "regression"))

import snapshot_results as snapshot  # noqa: E402
from pipeline.checks import run_checks  # noqa: E402
from pipeline.checks.results import evidence_json, jsonable  # noqa: E402

REL_TOL = 1e-9


def differences(expected, actual, where: str = "") -> list[str]:
    """Where ``actual`` differs from ``expected`` (JSON values): paths and both values."""
    if isinstance(expected, bool) or isinstance(actual, bool) or expected is None or actual is None \
            or isinstance(expected, str):
        return [] if expected == actual and type(expected) is type(actual) else \
            [f"{where}: expected {expected!r}, got {actual!r}"]
    if isinstance(expected, (int, float)):
        same_kind = type(expected) is type(actual)
        close = isinstance(actual, (int, float)) and math.isclose(expected, actual, rel_tol=REL_TOL,
                                                                 abs_tol=1e-300)
        return [] if same_kind and close else [f"{where}: expected {expected!r}, got {actual!r}"]
    if isinstance(expected, list):
        if not isinstance(actual, list) or len(actual) != len(expected):
            return [f"{where}: expected a list of {len(expected)}, got {actual!r:.200}"]
        return [d for i, (e, a) in enumerate(zip(expected, actual))
                for d in differences(e, a, f"{where}[{i}]")]
    if isinstance(expected, dict):
        if not isinstance(actual, dict) or set(actual) != set(expected):
            return [f"{where}: keys {sorted(expected)} expected, got {sorted(actual or {})}"]
        return [d for k in expected for d in differences(expected[k], actual[k], f"{where}.{k}")]
    raise TypeError(f"{where}: unexpected JSON value {expected!r}")


def _compare(name: str, fluids) -> None:
    expected = snapshot.read_expected(name)
    actual = [json.loads(json.dumps(r, sort_keys=True)) for r in snapshot.records(run_checks(fluids))]
    key = [(r["check_id"], r["fluid_id"], r["subject"]) for r in expected]
    assert [(r["check_id"], r["fluid_id"], r["subject"]) for r in actual] == key
    found = [f"{k}: {d}" for k, e, a in zip(key, expected, actual) for d in differences(e, a)]
    assert not found, f"{len(found)} differences, e.g.\n" + "\n".join(found[:20])


@pytest.mark.parametrize("name", ["demo", "realdata"])
def test_results_of_a_snapshotted_store_are_unchanged(name):
    """Every check result of the demo and of the real-data corpus is what the per-fluid code gave."""
    _compare(name, snapshot.read_inputs(snapshot.HERE / name))


def test_results_of_the_benchmark_fluids_are_unchanged():
    """Every check result of the benchmark's first 40 synthetic fluids is what the per-fluid code gave."""
    _compare("synthetic", snapshot.synthetic_fluids())


def test_the_comparison_sees_a_changed_number_and_a_changed_message():
    """A relative change of 1e-6 in an evidence number and one changed character are both found."""
    row = snapshot.read_expected("demo")[0]
    moved = json.loads(json.dumps(row))
    moved["message"] += "."
    assert differences(row, moved) and not differences(row, json.loads(json.dumps(row)))
    numbers = [k for k, v in row["evidence"].items() if isinstance(v, float) and v]
    if numbers:
        moved = json.loads(json.dumps(row))
        moved["evidence"][numbers[0]] *= 1 + 1e-6
        assert differences(row, moved)


@pytest.mark.parametrize("name", ["demo", "realdata"])
def test_stored_evidence_text_is_the_text_of_the_full_conversion(name):
    """Every result's evidence is stored as the very JSON text of converting it to plain values
    first (the C encoder's fast path and its fallback for NaN agree byte for byte)."""
    import numpy as np

    run = run_checks(snapshot.read_inputs(snapshot.HERE / name))
    odd = {"nan": float("nan"), "inf": [1.0, float("-inf")], "np": (np.float64(0.1), np.int64(3)),
           "flag": np.bool_(True), "f32": np.float32(0.5), "nested": {"b": 2, "a": [None, "x"]}}
    raw = run.table.columns["evidence"] + [odd, {k: v for k, v in odd.items() if k not in ("nan", "inf")}]
    assert [evidence_json(e) for e in raw] == [json.dumps(jsonable(e), sort_keys=True) for e in raw]
