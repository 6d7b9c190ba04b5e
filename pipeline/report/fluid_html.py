"""One fluid's section of the report: its figures with the table of flagged points beside the
phase diagram, the findings needing attention, fits, stated fixed points and sources.

Uncertainties are shown absolute and relative (``611.653 Pa ± 1.83e+04 Pa (3000 %)``); for a
melting curve, whose pressure at fixed T is very uncertain because the curve is steep, also as
the equivalent temperature uncertainty u/|dp/dT|.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

from pipeline.checks.results import STATUS_ORDER, CheckResult
from pipeline.report.evidence import e, number, relative
from pipeline.report.actions import rows_text

PHASE_CAPTION = (
    "Pressure against temperature. Left, every boundary on a log scale: samples of evaluated "
    "equations small and muted at the bottom, fitted curves over them, literature and measured "
    "data on top (one marker per source); stated triple and critical points; flagged points "
    "circled in red and numbered (the table explains each number). Right, the melting "
    "curve(s) on a linear scale, one colour per solid phase. A file diagnosed with a unit "
    "mix-up is drawn at its corrected position with hollow markers. Rest the pointer on a "
    "measured, literature or flagged point for its source, file, row, T and p.")
DEVIATION_CAPTION = (
    "Deviation of each point from the fit of its boundary, 100 (p - p_fit)/p_fit, against T, "
    "with the fit's uncertainty band (k = 2). Points off the vertical axis sit on its edge as "
    "triangles; their hover text gives the true deviation.")


def _table(headers: Sequence[str], rows: Sequence[Sequence[str]], num: Sequence[int] = (),
           cls: str = "") -> str:
    head = "".join(f"<th>{e(h)}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f'<td class="num">{c}</td>' if i in num else f"<td>{c}</td>"
                                     for i, c in enumerate(r)) + "</tr>" for r in rows)
    klass = f' class="{cls}"' if cls else ""
    return f"<table{klass}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _status(s: str) -> str:
    return f'<span class="s-{e(s)}">{e(s)}</span>'


def _path(path: str) -> str:
    """A file path that may break after its slashes (never inside a name)."""
    return "/<wbr>".join(e(part) for part in path.split("/"))


def flags_table(flags: Sequence[Mapping[str, Any]]) -> str:
    """The numbered flag groups of the figures: what each number stands for."""
    if not flags:
        return '<p class="muted">No point is flagged: no fit outlier and no observation named ' \
               "by a failing check.</p>"
    rows = []
    for g in flags:
        why = ", ".join(f"<code>{e(r)}</code>" if "." in r else e(r) for r in g["reasons"])
        if g.get("n_outliers") and "fit outlier" not in g["reasons"]:
            why += f"; {g['n_outliers']} of them fit outliers"
        if g.get("correction"):
            why += f"; drawn corrected: {e(g['correction'])}"
        T = (f"{number(g['T_min_K'], 5)}" if g["T_min_K"] == g["T_max_K"]
             else f"{number(g['T_min_K'], 5)}&ndash;<wbr>{number(g['T_max_K'], 5)}")
        folder = g["file"].split("/", 1)[0]
        source = "" if folder == g["source"] else \
            f'<br><span class="muted">source {e(g["source"])}</span>'
        n = len(g["obs_ids"])
        rows.append([f'<span class="flagno">{int(g["number"])}</span>',
                     f"<code>{_path(g['file'])}</code>{source}",
                     f"{e(rows_text(g['rows']))}" + (f" ({n})" if n > 1 else ""), T, why])
    return _table(["#", "file", "rows (points)", "T [K]", "why flagged"], rows, num=(0, 3),
                  cls="flags")


def figures_html(fig, title: str) -> str:
    """The phase diagram with the flag table beside it, then the deviation plots."""
    if fig is None:
        return '<p class="muted">no figures (no pressure data)</p>'
    out = ['<div class="figrow"><figure class="phase">', fig.phase_svg,
           f'<figcaption class="muted">{e(PHASE_CAPTION)}</figcaption></figure>',
           '<div class="flagbox"><h4>Flagged points</h4>', flags_table(fig.flags), "</div></div>"]
    if fig.deviation_svg:
        out += ['<figure class="deviation">', fig.deviation_svg,
                f'<figcaption class="muted">{e(DEVIATION_CAPTION)}</figcaption></figure>']
    else:
        out.append('<p class="muted">no deviation plot (no fitted pressure curve)</p>')
    return "".join(out)


def with_relative(value, u, unit: str, slope=None) -> str:
    """``value unit ± u unit (rel. %)``, plus ``≙ u/|slope| K in T`` when a slope is given."""
    if value is None:
        return ""
    text = f"{number(value)} {e(unit)}"
    if u is None:
        return text
    text += f" &plusmn; {number(u, 3)} {e(unit)}"
    rel = relative(u, value)
    if rel:
        text += f" ({rel})"
    if slope:
        text += f"; &#8793; {number(abs(u / slope) * 1e3, 2)} mK in T"
    return text


def fits_table(fits) -> str:
    rows = []
    for f in fits:
        ref = ""
        if f.ref_value is not None:
            steep = f.ref_slope if f.boundary in ("solid-liquid", "solid-solid") else None
            ref = f"{with_relative(f.ref_value, f.ref_u, f.unit, steep)} at {number(f.T_ref_K)} K"
        rng = (f"{number(f.T_min_K, 5)}&ndash;{number(f.T_max_K, 5)}"
               if f.T_min_K is not None else "")
        rows.append([e(f.group), e(f.status), e(f.form or ""), f"{f.n_used}/{f.n_points}",
                     str(f.n_flagged), rng, ref,
                     e(number(f.reduced_chi2, 3) if f.status == "fitted" else f.reason or "")])
    return "<h3>Fits</h3>" + _table(
        ["group", "status", "form", "used/points", "flagged", "T range [K]",
         "value at T_ref (± u, k = 1)", "reduced chi-square / reason"], rows, num=(3, 4))


def fixed_points_table(points) -> str:
    rows = [[e(p.kind), e(p.phases), number(p.T_K, 7), number(p.u_T_K, 3), number(p.p_Pa, 7),
             number(p.u_p_Pa, 3), e(relative(p.u_p_Pa, p.p_Pa)), e(p.source_id)]
            for p in points]
    return "<h3>Stated fixed points</h3>" + _table(
        ["kind", "phases", "T [K]", "u(T) [K]", "p [Pa]", "u(p) [Pa]", "u(p)/p", "source"],
        rows, num=(2, 3, 4, 5, 6))


def attention_list(results: Sequence[CheckResult], anchor_of) -> str:
    bad = [r for r in results if r.status in ("fail", "error", "warn")]
    if not bad:
        return ""
    items = "".join(
        f'<li>{_status(r.status)} <a href="#{e(anchor_of(r))}"><code>{e(r.check_id)}</code></a> '
        f"{e(r.subject)}</li>" for r in sorted(bad, key=lambda r: (
            STATUS_ORDER.index(r.status), r.check_id, r.subject)))
    return ("<h3>Findings needing attention</h3><p class=\"muted\">Each links to its card "
            f"above (message, evidence, decide commands).</p><ul>{items}</ul>")


def fluid_section(sec, results: Sequence[CheckResult], fig, anchor: str, anchor_of) -> str:
    """The whole section of one fluid."""
    counts = {s: sum(r.status == s for r in results) for s in STATUS_ORDER}
    count_text = ", ".join(f"{counts[s]} {s}" for s in STATUS_ORDER if counts[s])
    title = sec.name + (f" ({sec.formula})" if sec.formula else "")
    out = [f'<section><h2 id="{e(anchor)}">{e(title)} <span class="muted">'
           f"&middot; <code>{e(sec.fluid_id)}</code></span></h2>",
           f"<p>{e(count_text or 'not checked')}; {sec.n_observations} observations.</p>",
           figures_html(fig, title), attention_list(results, anchor_of)]
    if sec.fits:
        out.append(fits_table(sec.fits))
    if sec.fixed_points:
        out.append(fixed_points_table(sec.fixed_points))
    if sec.sources:
        rows = [[f"<code>{e(s)}</code>", e(k), e(c)] for s, k, c in sec.sources]
        out.append("<h3>Sources</h3>" + _table(["source", "kind", "citation"], rows))
    out.append("</section>")
    return "".join(out)
