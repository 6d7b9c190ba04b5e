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
