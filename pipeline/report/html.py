"""The nightly report as one self-contained HTML file (no script, no network, figures inline).

Reading order: the verdict and what changed since the previous run; failures and warnings,
each a card with its evidence as tables and the exact ``fluidledger decide ...`` commands that
would waive it or exclude the data it names; waived and excluded findings with their decision;
curation decisions; then one section per fluid needing attention (a failure, error or
warning) with its phase diagram (flagged points numbered, the numbers explained beside it),
deviation plots, fits, fixed points and sources; then a compact index of the fluids that
passed everything, one row each, linking to their own pages (:mod:`pipeline.report.pages`). Every
string that comes from data (citations, messages, ids, evidence) goes through :func:`e`
(``html.escape`` with quotes), so a citation holding markup shows as text; the figures are SVG
text (:mod:`pipeline.report.svgkit`) whose hover titles and labels are escaped the same way.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from html import escape
from typing import Any, Callable, Mapping, Sequence

from pipeline.checks.results import STATUS_ORDER, CheckResult, CheckRun
from pipeline.report.actions import DecideContext, decide_commands
from pipeline.report.content import FluidSection
from pipeline.report.evidence import evidence_table, relative
from pipeline.report.fluid_html import fluid_section
from pipeline.safetext import clean

CAUTION = ("Curated values support engineering judgement. They do not replace the applicable "
           "codes, standards and licensed professional practice for pressure equipment, relief "
           "sizing or any safety decision.")

VERDICT_TEXT = {
    "pass": "PASS: every check passed (warnings allowed)",
    "fail": "FAIL: at least one check failed",
    "input-error": "INPUT ERROR: a raw batch could not be ingested",
    "error": "ERROR: a check raised an error",
}

CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:0 auto;max-width:1240px;
padding:0 18px 40px;color:#1b1b1b;line-height:1.4}
h1{font-size:1.5em;margin:18px 0 6px}
h2{border-bottom:1px solid #ccc;padding-bottom:3px;margin-top:34px}
h3{margin:18px 0 6px}.verdict{padding:12px 16px;border-radius:6px;font-size:1.25em;font-weight:600}
.v-pass{background:#e3f4e3;color:#185c18}.v-fail{background:#fbe3e3;color:#8a1616}
.v-error,.v-input-error{background:#f6e3f6;color:#6a1470}
.caution{border-left:4px solid #c08a00;background:#fff8e1;padding:8px 12px;margin:12px 0}
table{border-collapse:collapse;margin:6px 0 12px;font-size:.9em}
th,td{border:1px solid #ddd;padding:3px 7px;text-align:left;vertical-align:top}
th{background:#f3f3f3}td.num{text-align:right;font-variant-numeric:tabular-nums}
.s-fail,.s-error{color:#a01010;font-weight:600}.s-warn{color:#8a6000;font-weight:600}
.s-pass{color:#186018}.s-skip,.s-waived,.s-excluded{color:#666}
.card{border:1px solid #e0b4b4;border-radius:5px;padding:8px 12px;margin:8px 0;background:#fffafa}
.card.warn{border-color:#e6d3a0;background:#fffdf5}
pre{white-space:pre-wrap;word-break:break-word;font-size:.8em;background:#f7f7f7;padding:6px;
max-height:340px;overflow:auto}figure{margin:8px 0}nav ul{columns:3;font-size:.9em}
.muted{color:#666}code{font-size:.9em}
.figrow{display:flex;flex-wrap:wrap;gap:14px;align-items:flex-start}
figure.phase{flex:0 1 780px;min-width:560px}figure.deviation{max-width:1000px}
svg.plot{width:100%;height:auto;display:block;border:1px solid #eee;background:#fff}
svg.plot .fl-points use{cursor:crosshair}
.flagbox{flex:1 1 340px;min-width:300px}.flagbox h4{margin:4px 0}
table.flags{font-size:.8em}table.flags code{font-size:.95em}
.flagno{display:inline-block;min-width:1.3em;text-align:center;color:#d62728;font-weight:700;
border:1px solid #d62728;border-radius:4px}
table.evidence{font-size:.85em;margin:4px 0}table.evidence th{font-weight:600}
table.evidence.kv>tbody>tr>th{background:#f7f7f7;text-align:left;white-space:nowrap}
table.evidence table.evidence{margin:0}span.num{font-variant-numeric:tabular-nums}
details.group{border:1px solid #e6d3a0;border-radius:5px;padding:6px 12px;margin:8px 0;
background:#fffdf5}details.group>summary{cursor:pointer}
.decide{margin:6px 0 0}.decide li{margin:3px 0}
.decide code{display:block;background:#f4f4f4;padding:3px 6px;white-space:pre-wrap;
word-break:break-all;font-size:.8em}
"""


def e(value: Any) -> str:
    """Escape ``value`` for HTML text or a quoted attribute."""
    return escape("" if value is None else clean(value), quote=True)


def fmt(value: Any, digits: int = 6) -> str:
    """A number with ``digits`` significant digits; '' for None/NaN."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, (int, float)):
        if isinstance(value, float) and not math.isfinite(value):
            return ""
        return f"{value:.{digits}g}"
    return str(value)


def anchor(fluid_id: str) -> str:
    """Element id of a fluid's section (fluid ids are slugs; anything else is replaced)."""
    return "fluid-" + "".join(c if c.isalnum() or c in "-_" else "_" for c in fluid_id)


@dataclass
class ReportPage:
    """Everything the HTML page shows (``nightly`` is :meth:`NightlyResult.asdict`)."""

    nightly: Mapping[str, Any]
    check_run: CheckRun
    sections: Mapping[str, FluidSection]
    figures: Mapping[str, Any]        # fluid -> pipeline.report.figures.FluidFigures | None
    decisions: Sequence[Mapping[str, Any]] | None = None
    fluid_order: Sequence[str] = field(default_factory=list)
    decide: DecideContext = field(default_factory=DecideContext)
    #: fluids shown as an index row linking to their own page (fluid -> pages.IndexRow)
    pages: Mapping[str, Any] = field(default_factory=dict)

    def results_of(self, fluid_id: str) -> list[CheckResult]:
        """The check results of one fluid (grouped once for all fluids)."""
        if getattr(self, "_by_fluid", None) is None:
            self._by_fluid: dict[str, list[CheckResult]] = {}
            for r in self.check_run.results:
                self._by_fluid.setdefault(r.fluid_id, []).append(r)
        return self._by_fluid.get(fluid_id, [])


def _status(s: str) -> str:
    return f'<span class="s-{e(s)}">{e(s)}</span>'


def _table(headers: Sequence[str], rows: Sequence[Sequence[str]], num: Sequence[int] = ()) -> str:
    head = "".join(f"<th>{e(h)}</th>" for h in headers)
    body = []
    for r in rows:
        cells = "".join(f'<td class="num">{c}</td>' if i in num else f"<td>{c}</td>"
                        for i, c in enumerate(r))
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _header(page: ReportPage) -> str:
    n = page.nightly
    verdict = n["verdict"]
    counts = n.get("counts") or {}
    count_text = ", ".join(f"{counts[s]} {s}" for s in STATUS_ORDER if counts.get(s))
    return (f"<h1>FluidLedger nightly report</h1>"
            f'<p class="muted">run <code>{e(n["run_id"])}</code>, started {e(n["started_at"])} '
            f'UTC, finished {e(n["finished_at"])} UTC ({fmt(n["duration_s"], 3)} s); pipeline '
            f'{e(n["pipeline_version"])}; check run <code>{e(n.get("check_run_id"))}</code></p>'
            f'<div class="verdict v-{e(verdict)}">{e(VERDICT_TEXT.get(verdict, verdict))} '
            f'(exit code {e(n["exit_code"])})</div>' + _refused(n) +
            f"<p>{e(count_text or 'no check results')}</p>"
            f'<div class="caution"><strong>Caution.</strong> {e(CAUTION)}</div>')


def _refused(n: Mapping[str, Any]) -> str:
    """The batches the ingest stage refused, named under the verdict."""
    errors = n.get("stages", {}).get("ingest", {}).get("detail", {}).get("errors", [])
    if not errors:
        return ""
    items = "".join(f"<li><code>{e(x['batch'])}</code>: {e(x['error'])}</li>" for x in errors)
    return (f"<p>Refused batches, not ingested ({len(errors)}; the other batches were "
            f"loaded):</p><ul>{items}</ul>")


def _transition_items(items: Sequence[Mapping[str, Any]]) -> str:
    lis = []
    for t in items:
        extra = ""
        if t.get("new_failing"):
            extra += " &mdash; now failing: " + ", ".join(
                f"<code>{e(s or '(whole fluid)')}</code>" for s in t["new_failing"])
        if t.get("fixed"):
            extra += " &mdash; fixed: " + ", ".join(
                f"<code>{e(s or '(whole fluid)')}</code>" for s in t["fixed"])
        lis.append(f'<li><code>{e(t["check_id"])}</code> <a href="#{e(anchor(t["fluid_id"]))}">'
                   f'{e(t["fluid_id"])}</a>: {_status(t["before"] or "new")} &rarr; '
                   f'{_status(t["after"])}{extra}</li>')
    return "<ul>" + "".join(lis) + "</ul>"


def _changes(page: ReportPage) -> str:
    n = page.nightly
    ch = n["changes"]
    prev = n.get("previous_run_id")
    out = ["<h2 id=\"changes\">What changed since the previous run</h2>"]
    if prev is None:
        out.append("<p>This is the first nightly run on this store: there is no previous run "
                   "to compare with, so every failure below is listed as new.</p>")
    else:
        out.append(f"<p>Previous nightly run: <code>{e(prev)}</code>.</p>")
    if n.get("no_changes"):
        out.append("<p><strong>No changes</strong>: no batch was new or changed, nothing was "
                   "refitted, and every check result was reused from the previous run.</p>")
    for title, key in (("New failures", "new_failures"), ("Fixed failures", "fixed"),
                       ("Other status changes", "changed")):
        items = ch.get(key) or []
        out.append(f"<h3>{e(title)} ({len(items)})</h3>")
        out.append(_transition_items(items) if items else "<p class=\"muted\">none</p>")
    values = ch.get("values") or []
    basis = ch.get("values_basis", "")
    out.append(f"<h3>Changed recommended values ({len(values)})</h3>")
    if basis:
        out.append(f'<p class="muted">{e(basis)}</p>')
    if values:
        rows = [[f'<a href="#{e(anchor(v["fluid_id"]))}">{e(v["fluid_id"])}</a>', e(v["name"]),
                 e(v.get("unit", "")) + (f" at {fmt(v['T_ref_K'])} K"
                                         if v.get("T_ref_K") is not None else ""),
                 fmt(v.get("before")), fmt(v.get("after")), fmt(v.get("delta"), 4),
                 fmt(v.get("u"), 3), e(relative(v.get("u"), v.get("after", v.get("before")))),
                 fmt(v.get("shift_u"), 3), e(v.get("note", ""))] for v in values]
        out.append(_table(["fluid", "value", "unit", "before", "after", "change", "u (k = 1)",
                           "u relative", "change / u", "note"], rows, num=(3, 4, 5, 6, 7, 8)))
    else:
        out.append('<p class="muted">none</p>')
    out.append(_stages(n))
    pub = n.get("publish") or {}
    out.append(f"<h3>Publication</h3><p>{e(pub.get('status', ''))}: "
               f"{e(pub.get('reason') or pub.get('release_id') or '')}</p>")
    return "".join(out)


def _stages(n: Mapping[str, Any]) -> str:
    rows = [[e(name), e(s.get("status", "")), f'{s.get("duration_s", 0.0):.3f}',
             e(s.get("text", ""))]
            for name, s in n.get("stages", {}).items()]
    errors = n["stages"].get("ingest", {}).get("detail", {}).get("errors", [])
    extra = ""
    if errors:
        extra = "<h3>Batches that could not be ingested</h3><ul>" + "".join(
            f"<li><code>{e(x['batch'])}</code>: {e(x['error'])}</li>" for x in errors) + "</ul>"
    findings = n["stages"].get("verify", {}).get("detail", {}).get("findings", [])
    if findings:
        extra += "<h3>Integrity findings (verify)</h3><ul>" + "".join(
            f"<li><code>{e(f['rule'])}</code>: {e(f['message'])} [{int(f['count'])}]"
            + (f" (e.g. {e('; '.join(f['samples']))})" if f.get("samples") else "") + "</li>"
            for f in findings) + "</ul>"
    return "<h3>Stages</h3>" + _table(["stage", "status", "seconds", "what happened"], rows,
                                      num=(2,)) + extra


def card_id(r: CheckResult) -> str:
    """Element id of a finding's card."""
    raw = f"{r.check_id}-{r.fluid_id}-{r.subject}"
    return "f-" + "".join(c if c.isalnum() or c in "-_." else "_" for c in raw)


def _decide(r: CheckResult, ctx: DecideContext) -> str:
    commands = decide_commands(r, ctx)
    if not commands:
        return ""
    items = "".join(f"<li>{e(what)}:<code>{e(cmd)}</code></li>" for what, cmd in commands)
    return (f'<details class="decide"><summary>curate it: {len(commands)} decide '
            f'command{"s" if len(commands) > 1 else ""}</summary><ul>{items}</ul></details>')


def _card(r: CheckResult, ctx: DecideContext, warn: bool = False) -> str:
    measured = ""
    if r.measured is not None or r.limit is not None:
        measured = (f"<br>{e(r.statistic or 'measured')} = {e(fmt(r.measured, 4) or 'n/a')}, "
                    f"limit {e(fmt(r.limit, 4) or 'n/a')}")
    subject = f" &middot; <code>{e(r.subject)}</code>" if r.subject else ""
    evidence = (f"<details><summary>evidence</summary>{evidence_table(r.evidence)}</details>")
    return (f'<div class="card{" warn" if warn else ""}" id="{e(card_id(r))}">{_status(r.status)} '
            f'<code>{e(r.check_id)}</code> &middot; <a href="#{e(anchor(r.fluid_id))}">'
            f'{e(r.fluid_id)}</a>{subject}<br>{e(r.message)}{measured}{evidence}'
            f"{_decide(r, ctx)}</div>")


def _findings(page: ReportPage) -> str:
    run = page.check_run
    failing = run.by_status(("fail", "error"))
    warns = run.by_status(("warn",))
    out = [f'<h2 id="failures">Failures ({len(failing)})</h2>']
    out += [_card(r, page.decide) for r in failing] or ['<p class="muted">no check failed</p>']
    out.append(f'<h2 id="warnings">Warnings ({len(warns)})</h2>')
    out.append(_grouped(warns, page.decide) if warns else '<p class="muted">no warnings</p>')
    out.append(_set_aside(page))
    per: dict[str, dict[str, int]] = {c: dict.fromkeys(STATUS_ORDER, 0) for c in run.checks}
    for r in run.results:
        per.setdefault(r.check_id, dict.fromkeys(STATUS_ORDER, 0))[r.status] += 1
    rows = [[f"<code>{e(c)}</code>"] + [str(v[s]) for s in STATUS_ORDER] for c, v in per.items()]
    out.append("<h3>Results per check</h3>" + _table(["check", *STATUS_ORDER], rows,
                                                       num=range(1, len(STATUS_ORDER) + 1)))
    return "".join(out)


#: A check with more warnings than this has its cards folded under one line.
OPEN_WARNINGS = 3


def _grouped(warns: Sequence[CheckResult], ctx: DecideContext) -> str:
    """Warning cards grouped by check; a check with many warnings is folded, so one check
    cannot bury the others."""
    by_check: dict[str, list[CheckResult]] = {}
    for r in warns:
        by_check.setdefault(r.check_id, []).append(r)
    out = []
    for check, rs in by_check.items():
        fluids = ", ".join(dict.fromkeys(r.fluid_id for r in rs))
        cards = "".join(_card(r, ctx, warn=True) for r in rs)
        if len(rs) <= OPEN_WARNINGS:
            out.append(cards)
        else:
            out.append(f'<details class="group"><summary><span class="s-warn">warn</span> '
                       f"<code>{e(check)}</code>: {len(rs)} findings ({e(fluids)})</summary>"
                       f"{cards}</details>")
    return "".join(out)


def _set_aside(page: ReportPage) -> str:
    """Waived and excluded findings, each with the decision behind it."""
    found = page.check_run.by_status(("waived", "excluded"))
    out = [f'<h2 id="waived">Waived and excluded findings ({len(found)})</h2>']
    if not found:
        return out[0] + '<p class="muted">none: no curation decision set a finding aside</p>'
    why = {d.get("id"): d for d in (page.decisions or [])}
    rows = []
    for r in found:
        d = why.get(r.decision_id, {})
        decision = (f"<code>{e(r.decision_id)}</code> {e(d.get('what', ''))}<br>"
                    f'<span class="muted">{e(d.get("why", ""))} &mdash; {e(d.get("who", ""))}, '
                    f"{e(d.get('when', ''))}</span>" if d else f"<code>{e(r.decision_id)}</code>")
        rows.append([_status(r.status), f"<code>{e(r.check_id)}</code>",
                     f'<a href="#{e(anchor(r.fluid_id))}">{e(r.fluid_id)}</a>',
                     f"<code>{e(r.subject)}</code>", decision, e(r.message)])
    out.append('<p class="muted">Waived: a waiver holds the finding until its date or until '
               "the check's inputs change. Excluded: the finding rests only on data a decision "
               "excluded; the checks without those data do not find it.</p>")
    out.append(_table(["status", "check", "fluid", "subject", "decision", "finding"], rows))
    return "".join(out)


def decisions_html(decisions: Sequence[Mapping[str, Any]] | None) -> str:
    """The decisions section: the curation decisions in force, or a placeholder heading."""
    out = ['<h2 id="decisions">Curation decisions</h2>']
    if decisions is None:
        out.append('<p class="muted">Curation decisions are not available in this version of '
                   "FluidLedger; this section will list the decisions in force (waived "
                   "findings, excluded points and sources) once they are.</p>")
        return "".join(out)
    if not decisions:
        return out[0] + '<p class="muted">no decisions in force</p>'
    keys = list(dict.fromkeys(k for d in decisions for k in d))   # the rows' column order
    rows = [[e(fmt(d.get(k))) for k in keys] for d in decisions]
    return out[0] + _table(keys, rows)


#: Hook for the decisions section: replace to render decisions differently.
DECISIONS_SECTION: Callable[[Sequence[Mapping[str, Any]] | None], str] = decisions_html


def _fluid(page: ReportPage, fid: str) -> str:
    return fluid_section(page.sections[fid], page.results_of(fid), page.figures.get(fid),
                         anchor(fid), card_id)


def render_html(page: ReportPage) -> str:
    """The whole report page."""
    from pipeline.report.pages import index_html

    order = list(page.fluid_order) or sorted(page.sections)
    full = [f for f in order if f in page.sections and f not in page.pages]
    nav = "".join(f'<li><a href="#{e(anchor(f))}">{e(f)}</a></li>' for f in full)
    passed = (f' &middot; <a href="#passed">passed every check ({len(page.pages)})</a>'
              if page.pages else "")
    body = [_header(page),
            '<nav><strong>Contents:</strong> <a href="#changes">changes</a> &middot; '
            '<a href="#failures">failures</a> &middot; <a href="#warnings">warnings</a> '
            '&middot; <a href="#waived">waived and excluded</a> &middot; '
            f'<a href="#decisions">decisions</a>{passed}<ul>{nav}</ul></nav>',
            _changes(page), _findings(page), DECISIONS_SECTION(page.decisions)]
    body += [_fluid(page, f) for f in full]
    if page.pages:
        body.append(index_html([page.pages[f] for f in order if f in page.pages]))
    body.append(f'<footer><div class="caution"><strong>Caution.</strong> {e(CAUTION)}</div>'
                "</footer>")
    title = f"FluidLedger nightly {page.nightly['run_id']}: {page.nightly['verdict']}"
    # every data string went through e(); the last clean() also covers any that did not
    return clean("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
                 "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
                 "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
                 "img-src data:; style-src 'unsafe-inline'\">"
                 f"<title>{e(title)}</title><style>{CSS}</style></head><body>"
                 + "".join(body) + "</body></html>\n")
