"""What changed since the previous run: status transitions and changed recommended values.

Transitions come from :func:`pipeline.report.history.transitions` (the function behind
``fluidledger history``). Changed values come from the publish stage's release diff when this
run made a new release and an earlier one exists; otherwise from the fits: each fit's
reference value (the value the correlation takes at its reference temperature, e.g. p at Tc)
before and after, with the change in units of the earlier value's standard uncertainty.
"""

from __future__ import annotations

import math
from typing import Mapping, Sequence

from pipeline.report.content import REFERENCE_NAME, UNIT, fit_reference
from pipeline.report.history import transitions

FIT_BASIS = ("Reference values of the fits (the value each correlation takes at its reference "
             "temperature, e.g. p at Tc), previous run against this one; change / u uses the "
             "standard uncertainty of the earlier value.")
KINDS = {"new-failure": "new_failures", "fixed": "fixed", "changed": "changed"}


def status_changes(con, baseline_runs: Sequence[str], check_run_id: str,
                   fluids: Sequence[str]) -> dict[str, list[dict]]:
    """Transitions into ``check_run_id`` from each fluid's last check run in
    ``baseline_runs`` (grouped new_failures / fixed / changed)."""
    order = {r: i for i, (r,) in enumerate(con.execute(
        "SELECT run_id FROM run WHERE list_contains(?, run_id) ORDER BY started_at, rowid",
        [list(baseline_runs)]).fetchall())}
    runs = sorted(set(baseline_runs), key=lambda r: order.get(r, -1)) + [check_run_id]
    out: dict[str, list[dict]] = {k: [] for k in KINDS.values()}
    for t in transitions(con, runs, fluids=fluids):
        if t.run_id == check_run_id:
            out[KINDS[t.kind]].append(t.asdict())
    return out


def fit_value_changes(con, before: Mapping[str, Mapping[str, str]],
                      now: Mapping[str, Mapping[str, str]]) -> list[dict]:
    """Fits whose id changed between two runs, largest change (in units of u) first.

    ``before`` and ``now`` map fluid -> group -> fit id; fluids absent from ``before`` (not
    covered by the previous run) are left out.
    """
    pairs = []
    for fid, old in before.items():
        new = now.get(fid, {})
        for group in sorted(set(old) | set(new)):
            if old.get(group) != new.get(group):
                pairs.append((fid, group, old.get(group), new.get(group)))
    ids = sorted({i for p in pairs for i in p[2:] if i})
    curves = dict(con.execute("SELECT fit_id, curve_json FROM fit WHERE list_contains(?, fit_id) "
                              "AND status = 'fitted'", [ids]).fetchall()) if ids else {}
    out = []
    for fid, group, a, b in pairs:
        boundary, _, quantity = group.split("/")
        Ta, va, ua = fit_reference(curves.get(a)) if a else (None, None, None)
        Tb, vb, ub = fit_reference(curves.get(b)) if b else (None, None, None)
        if va is None and vb is None:
            continue
        delta = vb - va if va is not None and vb is not None else None
        u = ua if ua else ub
        shift = delta / u if delta is not None and u else None
        note = ("new fit" if va is None else "no longer fitted" if vb is None
                else "reference temperature moved" if Ta != Tb else "")
        out.append({"fluid_id": fid, "group": group,
                    "name": REFERENCE_NAME.get((boundary, quantity), group),
                    "unit": UNIT.get(quantity, ""), "T_ref_K": Tb if Tb is not None else Ta,
                    "before": va, "after": vb, "delta": delta, "u": u, "shift_u": shift,
                    "fit_before": a, "fit_after": b, "note": note})
    out.sort(key=lambda v: -abs(v["shift_u"]) if v["shift_u"] is not None else 0.0)
    return out


def _num(x) -> float | None:
    return float(x) if x is not None and math.isfinite(float(x)) else None


def release_value_changes(con, release_a: str, release_b: str,
                          fluids: Sequence[str] | None = None) -> list[dict]:
    """Values added, removed or changed from ``release_a`` to ``release_b`` (the publish
    stage's diff, of ``fluids`` only when given), largest change in units of the combined
    standard uncertainty first."""
    from pipeline.publish.diff import diff_releases

    out = []
    for c in diff_releases(con, release_a, release_b,
                           fluids=None if fluids is None else list(fluids)).changes:
        fluid = c.value_id.split("/", 1)[0]
        delta = c.new - c.old if c.old is not None and c.new is not None else None
        u = math.hypot(c.u_old or 0.0, c.u_new or 0.0) or None
        note = c.change + (f": {c.detail}" if c.detail else "")
        if c.causes:
            note += "; causes: " + "; ".join(c.causes[:3])
        out.append({"fluid_id": fluid, "group": c.value_id, "name": f"{c.kind} {c.value_id}",
                    "unit": c.unit or "", "T_ref_K": c.T_ref_K, "before": _num(c.old),
                    "after": _num(c.new), "delta": _num(delta), "u": _num(u),
                    "shift_u": _num(c.z), "fit_before": None, "fit_after": None,
                    "note": note})
    out.sort(key=lambda v: -abs(v["shift_u"]) if v["shift_u"] is not None else 0.0)
    return out
