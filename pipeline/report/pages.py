"""Fluids that passed everything: one row each in the report's compact index, their full
sections on pages of their own in the run folder (``fluids/<fluid>.html``).

Why pages and not one file: a fluid's figures are 100-180 kB of SVG, so one report of 10,000
fluids would be 1-2 GB of HTML, which no browser opens. ``report.html`` keeps what needs
attention in full (every fluid with a failure, error or warning, with its figures inline) and
lists the others in a table, one row per fluid, linking to its page. Each page is a
self-contained HTML file like the report (no script, no network, figures inline) and links
back to ``../report.html``.

A page holds nothing of the run (no run id, no date): it is a function of the fluid's
section, its status counts and its figures, so it is stored once under
``reports/.cache/pages/<key>.html`` (``key`` a digest of those inputs and of the code that
renders them) and hard-linked into each run folder (copied where links cannot be made). The
report of an unchanged store then neither draws nor reads a figure of a passing fluid.
"""

from __future__ import annotations

import hashlib
import os
import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

from pipeline.checks.results import STATUS_ORDER
from pipeline.report.evidence import e, number

#: Statuses that keep a fluid in full on the report page.
ATTENTION = ("fail", "error", "warn")
#: Folder of the per-fluid pages inside the run folder.
PAGE_DIR = "fluids"


def needs_attention(statuses: Sequence[str]) -> bool:
    """True when a fluid has a failure, an error or a warning (it stays on the main page)."""
    return any(s in ATTENTION for s in statuses)


def page_name(anchor: str) -> str:
    """File name of a fluid's page (``anchor`` is its element id, already a slug)."""
    return f"{anchor}.html"


def counts_text(statuses: Sequence[str]) -> str:
    return ", ".join(f"{statuses.count(s)} {s}" for s in STATUS_ORDER if s in statuses)


def render_page(section_html: str, title: str, css: str) -> str:
    """A fluid's page: its section with a link back to the report (nothing of the run)."""
    from pipeline.safetext import clean

    return clean("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
                 "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
                 "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
                 "img-src data:; style-src 'unsafe-inline'\">"
                 f"<title>FluidLedger: {e(title)}</title><style>{css}</style></head><body>"
                 '<p><a href="../report.html">&larr; the nightly report</a> &middot; this '
                 "fluid passed every check (no failure, error or warning)</p>"
                 + section_html + "</body></html>\n")


@dataclass(frozen=True)
class IndexRow:
    """One fluid of the compact index."""

    fluid_id: str
    title: str
    anchor: str
    href: str
    statuses: tuple[str, ...]
    n_observations: int
    n_fits: int
    n_fitted: int
    worst_chi2: float | None = None


def index_html(rows: Sequence[IndexRow]) -> str:
    """The compact index of the fluids that passed everything."""
    out = [f'<h2 id="passed">Fluids that passed every check ({len(rows)})</h2>']
    if not rows:
        return out[0] + '<p class="muted">none: every fluid has a finding above</p>'
    out.append('<p class="muted">No failure, error or warning. Each fluid\'s figures, fits, '
               "fixed points and sources are on its own page in this run folder "
               f"(<code>{PAGE_DIR}/</code>), a self-contained file like this one.</p>")
    body = []
    for r in rows:
        chi2 = "" if r.worst_chi2 is None else number(r.worst_chi2, 3)
        body.append(f'<tr id="{e(r.anchor)}"><td><a href="{e(r.href)}"><code>{e(r.fluid_id)}'
                    f"</code></a></td><td>{e(r.title)}</td><td>"
                    f"{e(counts_text(r.statuses) or 'not checked (no data)')}"
                    f'</td><td class="num">{r.n_observations}</td><td class="num">'
                    f'{r.n_fitted}/{r.n_fits}</td><td class="num">{chi2}</td></tr>')
    out.append('<table class="index"><thead><tr><th>fluid</th><th>name</th><th>checks</th>'
               "<th>observations</th><th>fitted/groups</th><th>largest reduced chi-square"
               f"</th></tr></thead><tbody>{''.join(body)}</tbody></table>")
    return "".join(out)


def page_key(*parts: str) -> str:
    """Digest of a page's inputs (section, counts, figure key, code)."""
    h = hashlib.sha256()
    for p in parts:
        h.update(p.encode("utf-8"))
        h.update(b"\0")
    return h.hexdigest()[:32]


@dataclass
class PageCache:
    """Rendered fluid pages by key, under ``reports/.cache/pages``; linked into run folders."""

    folder: Path

    def path(self, key: str) -> Path:
        return self.folder / f"{key}.html"

    def has(self, key: str) -> bool:
        return self.path(key).is_file()

    def place(self, key: str, dest: Path, render: Callable[[], str]) -> bool:
        """Put the page ``key`` at ``dest`` (rendered with ``render`` when not cached);
        returns True when it was rendered now. The cached file is never modified in place
        (written under a temporary name and renamed), so a run folder's link keeps its bytes."""
        src = self.path(key)
        rendered = False
        if not src.is_file():
            from pipeline.report.files import _atomic_write

            self.folder.mkdir(parents=True, exist_ok=True)
            _atomic_write(src, render())
            rendered = True
        dest.parent.mkdir(parents=True, exist_ok=True)
        dest.unlink(missing_ok=True)
        try:
            os.link(src, dest)
        except OSError:        # another file system, or links not allowed: a copy
            shutil.copyfile(src, dest)
        return rendered

    def prune(self, keep: set[str]) -> int:
        """Delete cached pages whose key is not in ``keep``; returns how many (run folders
        keep their own links)."""
        from pipeline.report.fragments import prune_folder

        return prune_folder(self.folder, keep, (".html",))


def worst_chi2(fits) -> float | None:
    """The reduced chi-square farthest from 1 (by ratio) of a fluid's fitted groups."""
    import math

    values = [f.reduced_chi2 for f in fits if f.status == "fitted" and f.reduced_chi2
              and math.isfinite(f.reduced_chi2) and f.reduced_chi2 > 0]
    return max(values, key=lambda v: abs(math.log(v)), default=None)


def index_row(sec, statuses: Sequence[str], anchor: str) -> IndexRow:
    title = sec.name + (f" ({sec.formula})" if sec.formula else "")
    fitted = sum(f.status == "fitted" for f in sec.fits)
    return IndexRow(sec.fluid_id, title, anchor, f"{PAGE_DIR}/{page_name(anchor)}",
                    tuple(statuses), int(sec.n_observations), len(sec.fits), fitted,
                    worst_chi2(sec.fits))


def section_digest(sec) -> str:
    """A stable text of everything a fluid's section shows besides figures and results."""
    return repr(sec)


__all__ = ["ATTENTION", "IndexRow", "PAGE_DIR", "PageCache", "index_html", "index_row",
           "needs_attention", "page_key", "render_page", "section_digest"]
