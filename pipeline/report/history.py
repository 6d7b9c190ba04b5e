"""Run history: how each check's status moved between check runs, computed from the store.

Every check run keeps all its findings in ``check_result``. For each (check, fluid) pair a run
has one *status*: the worst over the pair's subjects (fail, error, warn, waived, excluded, pass,
skip, in that order), plus the set of subjects that fail. :func:`transitions` walks the runs in order and
reports every pair whose status or failing subjects differ from the last run that checked the
pair (a run that did not check a fluid leaves its last known status untouched). One SQL query
with a window over the runs does the walk, so it stays fast for thousands of fluids.

The nightly report's "changed since the previous run" section is :func:`transitions` over the
two runs (previous, current); ``fluidledger history`` is :func:`run_history` over all of them.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Iterable, Sequence

#: Status order, worst first; a (check, fluid) pair has the worst status of its subjects.
STATUS_RANK = ("fail", "error", "warn", "waived", "excluded", "pass", "skip")
FAILING = frozenset({"fail", "error"})

_RANK_SQL = "CASE c.status " + " ".join(
    f"WHEN '{s}' THEN {i}" for i, s in enumerate(STATUS_RANK)) + f" ELSE {len(STATUS_RANK)} END"

_TRANSITIONS_SQL = f"""
WITH runs AS (
    SELECT run_id, started_at, rowid AS seq FROM run
    WHERE kind = 'check' AND ($runs IS NULL OR list_contains($runs, run_id))
), agg AS (
    SELECT c.run_id, r.started_at, r.seq, c.check_id, c.fluid_id,
           min({_RANK_SQL}) AS rank,
           coalesce(list(c.subject ORDER BY c.subject)
                    FILTER (WHERE c.status IN ('fail', 'error')), []) AS failing
    FROM check_result c JOIN runs r ON r.run_id = c.run_id
    WHERE $fluids IS NULL OR list_contains($fluids, c.fluid_id)
    GROUP BY ALL
), lagged AS (
    SELECT *, lag(rank) OVER w AS prev_rank, lag(failing) OVER w AS prev_failing,
           lag(run_id) OVER w AS prev_run
    FROM agg
    WINDOW w AS (PARTITION BY check_id, fluid_id ORDER BY {{order}})
)
SELECT run_id, prev_run, check_id, fluid_id, prev_rank, rank, prev_failing, failing
FROM lagged
WHERE prev_rank IS DISTINCT FROM rank OR prev_failing IS DISTINCT FROM failing
ORDER BY {{order}}, check_id, fluid_id
"""


@dataclass(frozen=True)
class Transition:
    """A (check, fluid) pair whose status moved between two check runs."""

    run_id: str
    previous_run_id: str | None
    check_id: str
    fluid_id: str
    before: str | None          # None: the pair was not checked before
    after: str
    new_failing: tuple[str, ...] = ()   # subjects failing now that did not fail before
    fixed: tuple[str, ...] = ()         # subjects that failed before and no longer fail

    @property
    def kind(self) -> str:
        """``new-failure``, ``fixed`` or ``changed``."""
        if self.after in FAILING and (self.before not in FAILING or self.new_failing):
            return "new-failure"
        if self.before in FAILING and self.after not in FAILING:
            return "fixed"
        return "changed"

    def __str__(self) -> str:
        return (f"{self.check_id} {self.fluid_id}: {self.before or 'new'} -> {self.after} "
                f"(run {self.run_id})")

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "previous_run_id": self.previous_run_id,
                "check_id": self.check_id, "fluid_id": self.fluid_id, "before": self.before,
                "after": self.after, "kind": self.kind, "new_failing": list(self.new_failing),
                "fixed": list(self.fixed)}


def _status(rank) -> str | None:
    if rank is None:
        return None
    return STATUS_RANK[int(rank)] if int(rank) < len(STATUS_RANK) else "unknown"


def transitions(con, run_ids: Sequence[str] | None = None, *,
                fluids: Iterable[str] | None = None, first_appearances: bool = True
                ) -> list[Transition]:
    """Status transitions of (check, fluid) pairs over check runs, oldest first.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        An open store.
    run_ids : sequence of str, optional
        Check runs to walk, in this order (e.g. ``[previous, current]``); every check run of
        the store in the order they were recorded when None.
    fluids : iterable of str, optional
        Restrict to these fluids.
    first_appearances : bool
        Also report pairs seen for the first time when they fail, error or warn (a pair that
        first appears passing or skipped is not a movement worth listing).
    """
    order = "list_position($runs, run_id)" if run_ids is not None else "started_at, seq"
    params = {"runs": list(run_ids) if run_ids is not None else None,
              "fluids": sorted(set(fluids)) if fluids is not None else None}
    rows = con.execute(_TRANSITIONS_SQL.format(order=order), params).fetchall()
    out = []
    for run_id, prev_run, check_id, fluid_id, prev_rank, rank, prev_failing, failing in rows:
        before, after = _status(prev_rank), _status(rank)
        if before is None and (not first_appearances or after not in FAILING | {"warn"}):
            continue
        now, was = set(failing or []), set(prev_failing or [])
        out.append(Transition(run_id, prev_run, check_id, fluid_id, before, after,
                              tuple(sorted(now - was)), tuple(sorted(was - now))))
    return out


@dataclass
class RunEntry:
    """One check run in the history, with the transitions it brought."""

    run_id: str
    started_at: str
    status: str
    nightly_run_id: str | None
    nightly_verdict: str | None
    counts: dict[str, int]
    transitions: list[Transition] = field(default_factory=list)
    partial: str | None = None    # what the run was restricted to (None: every check, fluid)

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "started_at": self.started_at, "status": self.status,
                "nightly_run_id": self.nightly_run_id, "nightly_verdict": self.nightly_verdict,
                "partial": self.partial, "counts": self.counts,
                "transitions": [t.asdict() for t in self.transitions]}

    def asstr(self) -> str:
        counts = ", ".join(f"{n} {s}" for s, n in self.counts.items() if n)
        via = f" (nightly {self.nightly_run_id})" if self.nightly_run_id else ""
        part = f" [PARTIAL: {self.partial}]" if self.partial else ""
        lines = [f"{self.started_at}  {self.run_id}{via}{part}: {self.status}; "
                 f"{counts or 'no results'}"]
        if not self.transitions:
            lines.append("    no status changes")
        for t in self.transitions:
            lines.append(f"    {t.kind:<11} {t}")
            for s in t.new_failing:
                lines.append(f"                  now failing: {s or '(whole fluid)'}")
            for s in t.fixed:
                lines.append(f"                  fixed: {s or '(whole fluid)'}")
        return "\n".join(lines)


def partial_text(parameters: dict) -> str | None:
    """What a check run was restricted to, from its recorded parameters: a selection of checks
    (``--check``, ``--tag``) or of fluids (``--fluid``); None for a run of everything."""
    def names(key: str) -> list[str]:
        value = parameters.get(key)
        return [str(v) for v in value] if isinstance(value, list) else []

    def listing(items: list[str]) -> str:
        return ", ".join(items[:4]) + (f" and {len(items) - 4} more" if len(items) > 4 else "")

    parts = []
    if names("checks_requested") or names("tags"):
        ran = names("checks")
        how = " and ".join(x for x in (
            f"--check {listing(names('checks_requested'))}" if names("checks_requested") else "",
            f"--tag {listing(names('tags'))}" if names("tags") else "") if x)
        parts.append(f"{len(ran)} check{'s' if len(ran) != 1 else ''} ({how})")
    if names("fluids"):
        parts.append(f"fluid{'s' if len(names('fluids')) != 1 else ''} "
                     f"{listing(names('fluids'))}")
    return "; ".join(parts) or None


_RUNS_SQL = """
SELECT r.run_id, strftime(r.started_at, '%Y-%m-%d %H:%M:%S') AS started, r.status,
       json_extract_string(r.parameters_json, '$.nightly_run_id') AS nightly,
       json_extract_string(n.summary_json, '$.verdict') AS verdict, r.parameters_json
FROM run r LEFT JOIN run n ON n.run_id = json_extract_string(r.parameters_json, '$.nightly_run_id')
WHERE r.kind = 'check'
  AND ($fluids IS NULL OR EXISTS (SELECT 1 FROM check_result c WHERE c.run_id = r.run_id
                                  AND list_contains($fluids, c.fluid_id)))
ORDER BY r.started_at DESC, r.rowid DESC
LIMIT $limit
"""
_COUNTS_SQL = """
SELECT run_id, status, count(*) FROM check_result
WHERE list_contains($runs, run_id) AND ($fluids IS NULL OR list_contains($fluids, fluid_id))
GROUP BY ALL
"""


def run_history(con, *, fluids: Iterable[str] | None = None, limit: int = 20) -> list[RunEntry]:
    """The latest ``limit`` check runs (newest first), each with its counts and transitions.

    Transitions are computed over the whole history (so the first listed run is compared with
    the run before it even when that one is not listed).
    """
    fl = sorted(set(fluids)) if fluids is not None else None
    rows = con.execute(_RUNS_SQL, {"fluids": fl, "limit": int(limit)}).fetchall()
    if not rows:
        return []
    ids = [r[0] for r in rows]
    counts: dict[str, dict[str, int]] = {i: dict.fromkeys(STATUS_RANK, 0) for i in ids}
    for run_id, status, n in con.execute(_COUNTS_SQL, {"runs": ids, "fluids": fl}).fetchall():
        counts[run_id][status] = int(n)
    by_run: dict[str, list[Transition]] = {i: [] for i in ids}
    for t in transitions(con, fluids=fl):
        if t.run_id in by_run:
            by_run[t.run_id].append(t)
    def status(c: dict[str, int]) -> str:   # of the fluids shown (as CheckRun.status)
        return "error" if c["error"] else "failed" if c["fail"] else "ok"

    return [RunEntry(run_id, started, status(counts[run_id]), nightly, verdict, counts[run_id],
                     by_run[run_id], partial_text(json.loads(params or "{}")))
            for run_id, started, _, nightly, verdict, params in rows]


def history_json(entries: list[RunEntry]) -> str:
    """The history as JSON (newest run first)."""
    return json.dumps([e.asdict() for e in entries], indent=2)
