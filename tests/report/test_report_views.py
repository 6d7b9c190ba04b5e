"""Per-fluid views of the report: figures drawn only when their inputs change (also under
--full), fluids that passed everything as index rows with pages of their own, drawing in
worker processes giving the same bytes."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "nightly"))
from nightly_fixtures import ARGON_BATCHES, copy_demo, next_second, nightly  # noqa: E402

from pipeline.report.pages import PageCache  # noqa: E402


@pytest.fixture(scope="module")
def argon(tmp_path_factory):
    """Two nightly runs on the argon batches of the demo (argon passes every check there):
    the second with --full."""
    tmp = tmp_path_factory.mktemp("views-argon")
    raw = copy_demo(tmp, ARGON_BATCHES)
    first = nightly(tmp, raw)
    next_second()
    second = nightly(tmp, raw, full=True)
    return {"tmp": tmp, "first": first, "second": second}


def _page(result) -> Path:
    return Path(result.report["dir"]) / "fluids" / "fluid-argon.html"


def test_a_fluid_that_passed_everything_is_an_index_row_with_its_own_page(argon):
    """report.html lists argon as one index row linking to fluids/fluid-argon.html, which holds
    its two figures, a link back and nothing of the run."""
    first = argon["first"]
    assert first.counts["fail"] == first.counts["warn"] == first.counts["error"] == 0
    html = Path(first.report["html"]).read_text()
    assert '<tr id="fluid-argon"><td><a href="fluids/fluid-argon.html">' in html
    assert "<svg" not in html
    page = _page(first).read_text()
    assert page.count('data-fluid="argon"') == 2 and 'data-figure="deviation"' in page
    assert '<a href="../report.html">' in page and first.run_id not in page
    detail = first.stages["report"].detail     # fluids without data have no finding either
    assert detail["pages_rendered"] == detail["pages"] == 4


def test_full_run_redraws_no_figure_and_links_the_cached_page(argon):
    """nightly --full recomputes the stages but draws no figure whose inputs are unchanged:
    the passing fluid's page is the cached file, linked, byte for byte the first run's."""
    first, second = argon["first"], argon["second"]
    detail = second.stages["report"].detail
    assert detail["plots_drawn"] == 0 and detail["pages_rendered"] == 0
    assert _page(second).read_bytes() == _page(first).read_bytes()
    assert os.path.samefile(_page(first), _page(second))     # one file, two links


def test_page_cache_renders_once_links_and_prunes(tmp_path):
    """A page is rendered only when its key is new; each placement is a link to the cached
    file; pruning keeps the listed keys."""
    cache = PageCache(tmp_path / "cache")
    calls = []
    render = lambda: calls.append(1) or "<p>page</p>"  # noqa: E731
    assert cache.place("k1", tmp_path / "run1" / "a.html", render) is True
    assert cache.place("k1", tmp_path / "run2" / "a.html", render) is False
    assert calls == [1]
    assert os.path.samefile(tmp_path / "run1" / "a.html", tmp_path / "run2" / "a.html")
    cache.place("k2", tmp_path / "run2" / "b.html", render)
    assert cache.prune({"k2"}) == 1 and not cache.has("k1") and cache.has("k2")
    assert (tmp_path / "run1" / "a.html").read_text() == "<p>page</p>"   # the run keeps it


def test_figures_drawn_in_worker_processes_are_the_same_bytes(argon):
    """draw_all with two worker processes gives each fluid's figures byte for byte as drawn
    in this process."""
    from pipeline.report import content
    from pipeline.report.figures import draw_all
    from pipeline.store import open_store

    with open_store(argon["tmp"] / "store.duckdb", read_only=True) as s:
        sections = content.fluid_sections(s.con)
        data = content.diagram_data(s.con, sections, list(sections), {})
    copies = [data["argon"]] * 3
    here, there = {}, {}
    assert draw_all([copies], 3, workers=1, done=lambda f, fig: here.setdefault(f, fig)) == 1
    assert draw_all([copies], 3, workers=2, done=lambda f, fig: there.setdefault(f, fig)) == 2
    assert here["argon"].to_json() == there["argon"].to_json()
