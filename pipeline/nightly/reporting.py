"""The report stage of the nightly job: figures drawn or taken from the cache, the page and
what its decide commands need."""

from __future__ import annotations

import time
from typing import Any

from pipeline.nightly.curation import Curation
from pipeline.nightly.model import NightlyResult, Stage
from pipeline.nightly.state import digest
from pipeline.progress import stage_progress
from pipeline.report import content, deviation, figures, labels, plots, svg
from pipeline.report.actions import DecideContext
from pipeline.report.figures import FluidFigures
from pipeline.report.files import PlotCache, source_hash
from pipeline.report.html import ReportPage


def decide_context(con, opts, curation: Curation, results) -> Any:
    """What the report's decide commands need: store and decisions file of the run, the source
    of each raw file, and the rows of the files that findings are about."""
    files = sorted({r.subject[len("file:"):].split("|", 1)[0] for r in results
                    if r.status in ("warn", "fail") and r.subject.startswith("file:")})
    sources = dict(con.execute("SELECT path, source_id FROM raw_file_current WHERE role = "
                               "'table'").fetchall())
    rows: dict[str, list[int]] = {}
    for path, row in con.execute("SELECT file_path, row_number FROM observation_current WHERE "
                                 "list_contains(?, file_path) ORDER BY 1, 2", [files]).fetchall():
        rows.setdefault(path, []).append(int(row))
    decisions = curation.path or str(opts.raw / "decisions.toml")
    return DecideContext(str(opts.store) if opts.store else None, decisions, sources, rows)


def report_stage(con, opts, result: NightlyResult, check_run, selected, check_fp,
                 curation: Curation) -> tuple[Stage, Any]:
    t0 = time.perf_counter()
    sections = content.fluid_sections(con, selected)
    flagged = content.flagged_from_results(check_run.results)
    code = source_hash(plots, content, deviation, figures, labels, svg)
    cache = PlotCache(opts.reports / ".cache" / "plots", enabled=not opts.full)

    def marks(f: str) -> list:
        entry = flagged.get(f, {})
        return [sorted((str(k), sorted(v)) for k, v in entry.get(part, {}).items())
                for part in ("obs", "files")] + [sorted(entry.get("corrections", {}).items())]

    keys = {f: digest(code, check_fp.get(f), sections[f].name, sections[f].formula, marks(f))
            for f in sections}
    cached = {f: cache.get(k) for f, k in keys.items()}
    figs = {f: FluidFigures.from_json(b) if b is not None else None for f, b in cached.items()}
    todo = [f for f in sections if figs[f] is None]
    drawn = 0
    with stage_progress("plots", len(todo), quiet=opts.quiet) as tick:
        for start in range(0, len(todo), 50):
            batch = todo[start:start + 50]
            for f, data in content.diagram_data(con, sections, batch, flagged).items():
                if len(data.observations) or data.curves:
                    figs[f] = figures.render_figures(data)
                    cache.put(keys[f], figs[f].to_json())
                    drawn += 1
                tick(f)
    if not opts.fluids:
        cache.prune(set(keys.values()))
    page = ReportPage({}, check_run, sections, figs,
                      decisions=curation.report_rows(con, check_run.run_id),
                      fluid_order=selected,
                      decide=decide_context(con, opts, curation, check_run.results))
    n_cached = len(sections) - len(todo)
    text = (f"{drawn} fluid(s) drawn, {n_cached} from the cache, {len(todo) - drawn} "
            "fluid(s) without pressure data")
    return Stage("written", time.perf_counter() - t0, text,
                 {"plots_drawn": drawn, "plots_cached": n_cached}), page
