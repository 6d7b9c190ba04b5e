"""summary.md: the nightly result in a few lines that fit a chat message."""

from __future__ import annotations

from typing import Any, Mapping

from pipeline.checks.results import STATUS_ORDER
from pipeline.safetext import clean

#: At most this many items of each list are written (the report has them all).
MAX_ITEMS = 8


def _items(items, line) -> list[str]:
    out = [f"- {line(t)}" for t in items[:MAX_ITEMS]]
    if len(items) > MAX_ITEMS:
        out.append(f"- ... and {len(items) - MAX_ITEMS} more (see the report)")
    return out


def _transition(t: Mapping[str, Any]) -> str:
    return f"`{t['check_id']}` {t['fluid_id']}: {t['before'] or 'new'} -> {t['after']}"


def _value(v: Mapping[str, Any]) -> str:
    size = f" ({v['shift_u']:+.2g} u)" if v.get("shift_u") is not None else ""
    if v.get("before") is not None and v.get("after") is not None:
        return (f"{v['fluid_id']} {v['name']}: {v['before']:.6g} -> {v['after']:.6g} "
                f"{v.get('unit', '')}{size}")
    return f"{v['fluid_id']} {v['name']}: {v.get('note') or 'changed'}{size}"


def render_summary(nightly: Mapping[str, Any], report_html: str) -> str:
    """Markdown: verdict, counts, new failures, fixed ones, changed values, publication."""
    counts = nightly.get("counts") or {}
    count_text = ", ".join(f"{counts[s]} {s}" for s in STATUS_ORDER if counts.get(s))
    ch = nightly["changes"]
    lines = [f"**FluidLedger nightly `{nightly['run_id']}`: {nightly['verdict'].upper()}** "
             f"(exit {nightly['exit_code']})", "",
             f"Checks: {count_text or 'none'}."]
    prev = nightly.get("previous_run_id")
    if nightly.get("no_changes"):
        lines.append(f"No changes since `{prev}`: nothing ingested, nothing refitted, check "
                     "results reused.")
    elif prev is None:
        lines.append("First nightly run on this store (nothing to compare with).")
    else:
        lines.append(f"Compared with `{prev}`: {len(ch['new_failures'])} new failure(s), "
                     f"{len(ch['fixed'])} fixed, {len(ch['values'])} changed value(s).")
    errors = nightly["stages"].get("ingest", {}).get("detail", {}).get("errors", [])
    if errors:
        lines += ["", f"Batches not ingested ({len(errors)}):"]
        lines += _items(errors, lambda x: f"`{x['batch']}`: {x['error']}")
    findings = nightly["stages"].get("verify", {}).get("detail", {}).get("findings", [])
    if findings:
        lines += ["", f"Integrity findings of the verify stage ({len(findings)}):"]
        lines += _items(findings, lambda f: f"`{f['rule']}`: {f['message']} [{f['count']}]"
                        + (f" (e.g. {'; '.join(f['samples'])})" if f.get("samples") else ""))
    if ch["new_failures"]:
        lines += ["", f"New failures ({len(ch['new_failures'])}):"]
        lines += _items(ch["new_failures"], _transition)
    if ch["fixed"]:
        lines += ["", f"Fixed ({len(ch['fixed'])}):"]
        lines += _items(ch["fixed"], _transition)
    if ch["values"]:
        lines += ["", f"Changed values ({len(ch['values'])}, largest first):"]
        lines += _items(ch["values"], _value)
    pub = nightly.get("publish") or {}
    lines += ["", f"Publication: {pub.get('status', '?')}"
              + (f" ({pub.get('release_id') or pub.get('reason')})"
                 if pub.get("release_id") or pub.get("reason") else ""),
              f"Report: {report_html}"]
    return clean("\n".join(lines)) + "\n"
