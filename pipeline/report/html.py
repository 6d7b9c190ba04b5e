"""The nightly report as one self-contained HTML file (no script, no network, images inline).

Reading order: the verdict and what changed since the previous run; failures with their
evidence; warnings; curation decisions; then one section per fluid with its phase diagram,
fits, fixed points and sources. Every string that comes from data (citations, messages, ids,
evidence) goes through :func:`e` (``html.escape`` with quotes), so a citation holding markup
shows as text.
"""

from __future__ import annotations

import base64
import json
import math
from dataclasses import dataclass, field
from html import escape
from typing import Any, Callable, Mapping, Sequence

from pipeline.checks.results import STATUS_ORDER, CheckResult, CheckRun
from pipeline.report.content import FluidSection
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

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:0 auto;max-width:1180px;
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
.s-pass{color:#186018}.s-skip,.s-waived{color:#666}
.card{border:1px solid #e0b4b4;border-radius:5px;padding:8px 12px;margin:8px 0;background:#fffafa}
.card.warn{border-color:#e6d3a0;background:#fffdf5}
pre{white-space:pre-wrap;word-break:break-word;font-size:.8em;background:#f7f7f7;padding:6px;
max-height:340px;overflow:auto}figure{margin:8px 0}img.plot{max-width:100%;height:auto;
border:1px solid #eee}nav ul{columns:3;font-size:.9em}.muted{color:#666}code{font-size:.9em}
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
    images: Mapping[str, bytes | None]
    image_size: tuple[int, int] = (900, 414)
    decisions: Sequence[Mapping[str, Any]] | None = None
    fluid_order: Sequence[str] = field(default_factory=list)

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
                 e(v.get("unit", "")), fmt(v.get("before")), fmt(v.get("after")),
                 fmt(v.get("delta"), 4), fmt(v.get("u"), 3), fmt(v.get("shift_u"), 3),
                 e(v.get("note", ""))] for v in values]
        out.append(_table(["fluid", "value", "unit", "before", "after", "change", "u (k=1)",
                           "change / u", "note"], rows, num=(3, 4, 5, 6, 7)))
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


def _evidence(r: CheckResult) -> str:
    text = json.dumps(r.evidence, indent=1, sort_keys=True, default=str)
    return f"<details><summary>evidence</summary><pre>{e(text)}</pre></details>"


def _card(r: CheckResult, warn: bool = False) -> str:
    measured = ""
    if r.measured is not None or r.limit is not None:
        measured = (f"<br>{e(r.statistic or 'measured')} = {e(fmt(r.measured, 4) or 'n/a')}, "
                    f"limit {e(fmt(r.limit, 4) or 'n/a')}")
    subject = f" &middot; <code>{e(r.subject)}</code>" if r.subject else ""
    return (f'<div class="card{" warn" if warn else ""}">{_status(r.status)} '
            f'<code>{e(r.check_id)}</code> &middot; <a href="#{e(anchor(r.fluid_id))}">'
            f'{e(r.fluid_id)}</a>{subject}<br>{e(r.message)}{measured}{_evidence(r)}</div>')


def _findings(page: ReportPage) -> str:
    run = page.check_run
    failing = run.by_status(("fail", "error"))
    warns = run.by_status(("warn",))
    out = [f'<h2 id="failures">Failures ({len(failing)})</h2>']
    out += [_card(r) for r in failing] or ['<p class="muted">no check failed</p>']
    out.append(f'<h2 id="warnings">Warnings ({len(warns)})</h2>')
    out += [_card(r, warn=True) for r in warns] or ['<p class="muted">no warnings</p>']
    per: dict[str, dict[str, int]] = {c: dict.fromkeys(STATUS_ORDER, 0) for c in run.checks}
    for r in run.results:
        per.setdefault(r.check_id, dict.fromkeys(STATUS_ORDER, 0))[r.status] += 1
    rows = [[f"<code>{e(c)}</code>"] + [str(v[s]) for s in STATUS_ORDER] for c, v in per.items()]
    out.append("<h3>Results per check</h3>" + _table(["check", *STATUS_ORDER], rows,
                                                       num=range(1, 7)))
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
    sec = page.sections[fid]
    results = page.results_of(fid)
    counts = {s: sum(r.status == s for r in results) for s in STATUS_ORDER}
    count_text = ", ".join(f"{counts[s]} {s}" for s in STATUS_ORDER if counts[s])
    title = sec.name + (f" ({sec.formula})" if sec.formula else "")
    out = [f'<section><h2 id="{e(anchor(fid))}">{e(title)} <span class="muted">'
           f"&middot; <code>{e(fid)}</code></span></h2>",
           f"<p>{e(count_text or 'not checked')}; {sec.n_observations} observations.</p>"]
    png = page.images.get(fid)
    if png:
        w, h = page.image_size
        data = base64.b64encode(png).decode("ascii")
        out.append(f'<figure><img class="plot" src="data:image/png;base64,{data}" width="{w}" '
                   f'height="{h}" alt="phase diagram of {e(title)}" data-fluid="{e(fid)}">'
                   "<figcaption class=\"muted\">Left: pressure (log scale) against temperature, "
                   "data by source, fitted curves with k = 2 bands, triple and critical points "
                   "with k = 2 error bars, flagged points circled. Right: melting curve(s) on "
                   "a linear pressure axis.</figcaption></figure>")
    else:
        out.append('<p class="muted">no plot (no pressure data)</p>')
    bad = [r for r in results if r.status in ("fail", "error", "warn")]
    if bad:
        out.append("<h3>Findings needing attention</h3><ul>" + "".join(
            f"<li>{_status(r.status)} <code>{e(r.check_id)}</code> {e(r.subject)}: "
            f"{e(r.message)}</li>" for r in sorted(bad, key=lambda r: (
                STATUS_ORDER.index(r.status), r.check_id, r.subject))) + "</ul>")
    if sec.fits:
        rows = []
        for f in sec.fits:
            ref = ""
            if f.ref_value is not None:
                ref = f"{fmt(f.ref_value)} {e(f.unit)} at {fmt(f.T_ref_K)} K"
                if f.ref_u is not None:
                    ref += f" &plusmn; {fmt(f.ref_u, 3)}"
            rng = f"{fmt(f.T_min_K, 5)}&ndash;{fmt(f.T_max_K, 5)}" if f.T_min_K is not None else ""
            rows.append([e(f.group), e(f.status), e(f.form or ""), f"{f.n_used}/{f.n_points}",
                         str(f.n_flagged), rng, ref,
                         e(fmt(f.reduced_chi2, 3) if f.status == "fitted" else f.reason or "")])
        out.append("<h3>Fits</h3>" + _table(
            ["group", "status", "form", "used/points", "flagged", "T range [K]",
             "value at T_ref (± u, k=1)", "reduced chi2 / reason"], rows, num=(3, 4)))
    if sec.fixed_points:
        rows = [[e(p.kind), e(p.phases), fmt(p.T_K, 7), fmt(p.u_T_K, 3), fmt(p.p_Pa, 7),
                 fmt(p.u_p_Pa, 3), e(p.source_id)] for p in sec.fixed_points]
        out.append("<h3>Stated fixed points</h3>" + _table(
            ["kind", "phases", "T [K]", "u(T) [K]", "p [Pa]", "u(p) [Pa]", "source"], rows,
            num=(2, 3, 4, 5)))
    if sec.sources:
        rows = [[f"<code>{e(s)}</code>", e(k), e(c)] for s, k, c in sec.sources]
        out.append("<h3>Sources</h3>" + _table(["source", "kind", "citation"], rows))
    out.append("</section>")
    return "".join(out)


def render_html(page: ReportPage) -> str:
    """The whole report page."""
    order = list(page.fluid_order) or sorted(page.sections)
    nav = "".join(f'<li><a href="#{e(anchor(f))}">{e(f)}</a></li>' for f in order)
    body = [_header(page),
            '<nav><strong>Contents:</strong> <a href="#changes">changes</a> &middot; '
            '<a href="#failures">failures</a> &middot; <a href="#warnings">warnings</a> '
            f'&middot; <a href="#decisions">decisions</a><ul>{nav}</ul></nav>',
            _changes(page), _findings(page), DECISIONS_SECTION(page.decisions)]
    body += [_fluid(page, f) for f in order if f in page.sections]
    body.append(f'<footer><div class="caution"><strong>Caution.</strong> {e(CAUTION)}</div>'
                "</footer>")
    title = f"FluidLedger nightly {page.nightly['run_id']}: {page.nightly['verdict']}"
    # every data string went through e(); the last clean() also covers any that did not
    return clean("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
                 "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
                 "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
                 "img-src data:; style-src 'unsafe-inline'\">"
                 f"<title>{e(title)}</title><style>{_CSS}</style></head><body>"
                 + "".join(body) + "</body></html>\n")
