"""Queries on the ``run`` table shared by several stages."""

from __future__ import annotations


def latest_check_run_id(con) -> str | None:
    """Run id of the newest finished check run (None before the first).

    Check runs record their start in whole seconds; two in one second are told apart by the
    order their rows were inserted (``rowid``), not by their random run-id suffix.
    """
    row = con.execute("SELECT run_id FROM run WHERE kind = 'check' AND finished_at IS NOT NULL "
                      "ORDER BY started_at DESC, rowid DESC LIMIT 1").fetchone()
    return row[0] if row else None


def end_run(con, run_id: str, err: BaseException) -> None:
    """Close the ``run`` row of a run stopped by ``err``: status ``interrupted`` for Ctrl-C,
    ``error`` otherwise; best effort (the store may be the problem), the caller re-raises.

    A transaction left open by the interruption is rolled back first.
    """
    import json
    from datetime import datetime, timezone

    import duckdb

    from pipeline.errors import is_interrupt

    status = "interrupted" if is_interrupt(err) else "error"
    now = datetime.now(timezone.utc).replace(tzinfo=None)
    summary = json.dumps({"error": f"{type(err).__name__}: {err}"[:2000]}
                         if status == "error" else {"interrupted": True})
    try:
        con.execute("ROLLBACK")
    except duckdb.Error:
        pass              # no transaction was open
    try:
        con.execute("UPDATE run SET finished_at = ?, status = ?, summary_json = ? "
                    "WHERE run_id = ? AND finished_at IS NULL", [now, status, summary, run_id])
    except duckdb.Error:
        pass
