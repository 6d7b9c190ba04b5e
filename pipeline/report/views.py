"""What the report of a run shows per fluid, drawn only where its inputs changed.

The rule (issue 14): a fluid's figures are drawn again only when the digest of everything
they show changes (its data and fits, its name, the points the checks flag, the unit mix-ups
diagnosed, and the drawing code); otherwise they come from the figure cache
(``reports/.cache/plots``), also under ``nightly --full``, which recomputes the stages but
cannot change a figure whose inputs are the same. Fluids that passed everything get a page of
their own (:mod:`pipeline.report.pages`), itself cached by its inputs: for them the report of
an unchanged store reads no figure at all, it links the cached page into the run folder.
Figures that must be drawn are drawn in worker processes when there are many
(:func:`pipeline.report.figures.draw_all`).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

from pipeline.report import content, figures
from pipeline.report.figures import FluidFigures
from pipeline.report.files import PlotCache, source_hash

#: The modules whose source makes the figures (hashed by file, so that a report drawing
#: nothing never imports matplotlib).
FIGURE_CODE = ("plots", "content", "deviation", "figures", "labels", "svg", "svgkit")

#: Fluids whose observations are read in one query.
BATCH = 50


@dataclass
class FluidViews:
    """The per-fluid parts of a report: sections, figures of the fluids shown in full, and the
    index rows of the fluids on pages of their own."""

    sections: dict[str, Any]
    figures: dict[str, FluidFigures | None]
    pages: dict[str, Any] = field(default_factory=dict)
    detail: dict[str, Any] = field(default_factory=dict)

    def text(self) -> str:
        d = self.detail
        return (f"{d['plots_drawn']} fluid(s) drawn ({d['workers']} process(es)), "
                f"{d['plots_cached']} from the cache, {d['no_figures']} fluid(s) without "
                f"pressure data; {d['pages']} passing fluid(s) on pages of their own "
                f"({d['pages_rendered']} rendered, the others linked from the page cache)")


def _h(*parts: Any) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()[:32]


def figure_keys(sections: Mapping[str, Any], flagged: Mapping[str, Any],
                check_fp: Mapping[str, Any]) -> dict[str, str]:
    """Digest of each fluid's figure inputs (the figure cache's key)."""
    folder = Path(content.__file__).parent
    h = hashlib.sha256()
    for name in FIGURE_CODE:     # the bytes source_hash() would read from the modules
        h.update((folder / f"{name}.py").read_bytes())
    code = h.hexdigest()

    def marks(f: str) -> list:
        entry = flagged.get(f, {})
        return [sorted((str(k), sorted(v)) for k, v in entry.get(part, {}).items())
                for part in ("obs", "files")] + [sorted(entry.get("corrections", {}).items())]

    return {f: _h(code, check_fp.get(f), sections[f].name, sections[f].formula, marks(f))
            for f in sections}


def fluid_views(con, *, check_run, selected: Sequence[str], check_fp: Mapping[str, Any],
                reports: Path, folder: Path, prune: bool = True, quiet: bool = False,
                workers: int | None = None) -> FluidViews:
    """Sections, figures and pages of ``selected`` for the report written to ``folder``."""
    from pipeline.progress import stage_progress
    from pipeline.report import actions, evidence, fluid_html, html, pages

    sections = content.fluid_sections(con, selected, references=False)
    flagged = content.flagged_from_results(check_run.results)
    keys = figure_keys(sections, flagged, check_fp)
    cache = PlotCache(reports / ".cache" / "plots")
    page_cache = pages.PageCache(reports / ".cache" / "pages")
    results_of: dict[str, list] = {f: [] for f in sections}
    for r in check_run.results:
        if r.fluid_id in results_of:
            results_of[r.fluid_id].append(r)
    statuses = {f: [r.status for r in rs] for f, rs in results_of.items()}
    passing = [f for f in sections if not pages.needs_attention(statuses[f])]
    page_code = source_hash(pages, fluid_html, evidence, actions, html)
    page_keys = {f: pages.page_key(page_code, keys[f], pages.section_digest(sections[f]),
                                   pages.counts_text(statuses[f])) for f in passing}
    # figures needed now: the fluids shown in full, and passing fluids whose page is not cached
    wanted = [f for f in sections if f not in page_keys or not page_cache.has(page_keys[f])]
    for f in wanted:     # the sections rendered now show each fit's value at T_ref
        sections[f] = content.with_references(sections[f])
    figs: dict[str, FluidFigures | None] = {}
    for f in wanted:
        blob = cache.get(keys[f])
        figs[f] = None if blob is None else FluidFigures.from_json(blob)
    todo = [f for f in wanted if figs[f] is None]
    drawn = 0
    with stage_progress("plots", len(todo), quiet=quiet) as tick:
        def done(f: str, fig: FluidFigures) -> None:
            nonlocal drawn
            figs[f] = fig
            cache.put(keys[f], fig.to_json())
            drawn += 1
            tick(f)

        batches = (list(content.diagram_data(con, sections, todo[i:i + BATCH], flagged).values())
                   for i in range(0, len(todo), BATCH))
        n_workers = figures.draw_all(batches, len(todo), workers=workers, done=done)
    rendered = 0
    rows = {}
    anchor = html.anchor
    for f in passing:
        sec = sections[f]
        rows[f] = pages.index_row(sec, statuses[f], anchor(f))
        def render(f=f, sec=sec, results=results_of[f]) -> str:
            title = sec.name + (f" ({sec.formula})" if sec.formula else "")
            body = fluid_html.fluid_section(sec, results, figs.get(f), anchor(f), html.card_id)
            return pages.render_page(body, title, html.CSS)

        rendered += page_cache.place(page_keys[f], folder / pages.PAGE_DIR /
                                     pages.page_name(anchor(f)), render)
    if prune:
        cache.prune(set(keys.values()))
        page_cache.prune(set(page_keys.values()))
    detail = {"plots_drawn": drawn, "plots_cached": len(sections) - len(todo),
              "no_figures": len(todo) - drawn, "workers": n_workers, "pages": len(passing),
              "pages_rendered": rendered}
    return FluidViews(sections, {f: figs.get(f) for f in sections if f not in rows}, rows,
                      detail)
