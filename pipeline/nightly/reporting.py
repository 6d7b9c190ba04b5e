"""The report stage of the nightly job: the fluids' views (figures drawn when their inputs
changed, pages of passing fluids; :mod:`pipeline.report.views`), the page and what its
decide commands need."""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

from pipeline.nightly.curation import Curation
from pipeline.nightly.model import NightlyResult, Stage
from pipeline.report.actions import DecideContext
from pipeline.report.files import write_report
from pipeline.report.html import ReportPage
from pipeline.report.views import fluid_views


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
                 curation: Curation, folder: Path) -> tuple[Stage, Any]:
    t0 = time.perf_counter()
    # figures are redrawn only when their inputs' digest changes, also under --full
    views = fluid_views(con, check_run=check_run, selected=selected, check_fp=check_fp,
                        reports=opts.reports, folder=folder, prune=not opts.fluids,
                        quiet=opts.quiet)
    page = ReportPage({}, check_run, views.sections, views.figures,
                      decisions=curation.report_rows(con, check_run.run_id),
                      fluid_order=selected,
                      decide=decide_context(con, opts, curation,
                                           check_run.by_status(("warn", "fail"))),
                      pages=views.pages)
    return Stage("written", time.perf_counter() - t0, views.text(), views.detail), page


def write_files(opts, folder: Path, page: ReportPage, origins: dict[str, str]) -> dict:
    """results.json and junit.xml (each fluid's share read from the fragment cache when the
    check run that made its results has one there), summary.md and report.html; what it did.
    Under ``--full`` every fluid is checked again, so each fluid's share is built again."""
    return write_report(folder, page.nightly, page, origins=origins,
                        cache=opts.reports / ".cache" / "results", prune=not opts.fluids)
