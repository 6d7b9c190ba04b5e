"""The figures of the demo fluids hold their data: the SVG, parsed back, has every point of
every source in each panel, a hover title per measured point naming its file and row, a ring
per flagged point and each flag group's number, against the observations they were drawn
from."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from pipeline.checks import load_fluid_data, run_checks
from pipeline.fitting.stage import run_fit
from pipeline.ingest.stage import run_ingest
from pipeline.report import content
from pipeline.report.deviation import deviations, pressure_curves
from pipeline.report.figures import render_figures
from pipeline.report.plots import EQUATION_KINDS
from pipeline.report.svg import SVG_NS
from pipeline.store import open_store

RAW = Path(__file__).resolve().parents[2] / "raw"
G, USE, PATH, TEXT = (f"{{{SVG_NS}}}{t}" for t in ("g", "use", "path", "text"))
TITLE = f"{{{SVG_NS}}}title"
POINT_LAYERS = ("points", "samples", "edge")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo's figure inputs (ingest, fit and checks of raw/) and their drawn figures."""
    store = tmp_path_factory.mktemp("figure-content") / "demo.duckdb"
    with open_store(store) as s:
        run_ingest(s.con, [RAW])
        run_fit(s.con)
        run = run_checks(load_fluid_data(s.con), con=s.con)
        sections = content.fluid_sections(s.con)
        flagged = content.flagged_from_results(run.results)
        data = content.diagram_data(s.con, sections, list(sections), flagged)
    return {f: (d, render_figures(d)) for f, d in data.items()}


def _panels(svg: str) -> list[ET.Element]:
    root = ET.fromstring(svg)
    return [g for g in root.iter(G) if g.get("class") == "panel"]


def _layers(panel: ET.Element, *layers: str) -> list[ET.Element]:
    (body,) = [g for g in panel.findall(G) if g.get("clip-path")]
    return [el for el in body if el.get("data-layer") in layers]


def _points_by_source(panel: ET.Element, sources) -> Counter:
    """Points drawn per source: titled markers by the first line of their title (source and
    kind), merged sample markers by their layer's label."""
    out = Counter()
    for layer in _layers(panel, *POINT_LAYERS):
        for use in layer.iter(USE):
            first = use.find(TITLE).text.split("\n", 1)[0]
            out[first.rsplit(" (", 1)[0]] += 1
        for path in layer.iter(PATH):
            out[layer.get("data-label")] += path.get("d").count("M")
    assert set(out) <= set(sources)
    return out


def _expected(obs, mask) -> Counter:
    return Counter(obs.source_id[mask].tolist())


def _drawable(obs) -> np.ndarray:
    return np.isfinite(obs.T_K) & np.isfinite(obs.p_Pa) & (obs.p_Pa > 0)


def test_the_demo_has_what_these_tests_need(demo):
    """The demo draws equation samples, flagged points and more than one source per fluid."""
    kinds = {k for d, _ in demo.values() for k in d.observations.source_kind.tolist()}
    assert kinds & set(EQUATION_KINDS) and "measurement" in kinds
    assert sum(len(d.flags) for d, _ in demo.values()) >= 3
    assert all(len(set(d.observations.source_id.tolist())) > 1 for d, _ in demo.values())


def test_every_point_of_every_source_is_in_the_phase_diagram(demo):
    """Left panel: each source's points, all of them; right panel: its melting points."""
    for fluid, (data, figs) in demo.items():
        obs = data.observations
        ok = _drawable(obs)
        sources = set(obs.source_id.tolist())
        phase, melt = _panels(figs.phase_svg)
        assert _points_by_source(phase, sources) == _expected(obs, ok), fluid
        melting = ok & (obs.boundary == "solid-liquid")
        if melting.any():
            assert _points_by_source(melt, sources) == _expected(obs, melting), fluid


def test_each_measured_point_has_its_hover_title(demo):
    """Every point that is not an equation sample carries the hover text of its observation
    (source, file, row, T, p), once in the phase panel."""
    for fluid, (data, figs) in demo.items():
        obs = data.observations
        titled = np.flatnonzero(_drawable(obs) & ~np.isin(obs.source_kind.astype(str),
                                                          EQUATION_KINDS))
        (phase, _) = _panels(figs.phase_svg)
        shown = Counter(use.find(TITLE).text for layer in _layers(phase, "points")
                        for use in layer.iter(USE))
        assert shown == Counter(obs.hover(i) for i in titled), fluid
        for i in titled[:5]:
            assert f"{obs.file_path[i]} row {int(obs.row_number[i])}" in obs.hover(i)


def test_flagged_points_are_ringed_and_their_numbers_shown(demo):
    """One red ring per flagged point in the phase panel, and each flag group's number beside
    one of its points."""
    seen = 0
    for fluid, (data, figs) in demo.items():
        obs = data.observations
        flagged = _drawable(obs) & (obs.flag > 0)
        phase, melt = _panels(figs.phase_svg)
        rings = sum(len(layer.findall(USE)) for layer in _layers(phase, "flags"))
        assert rings == int(flagged.sum()), fluid
        numbers = {int(g.get("data-number")) for p in (phase, melt) for g in p.iter(G)
                   if g.get("class") == "flag-number"}
        assert numbers == set(obs.flag[flagged].tolist()), fluid
        assert {g.number for g in data.flags} >= numbers
        seen += len(numbers)
    assert seen >= 3


def test_each_deviation_panel_has_its_boundarys_points(demo):
    """One panel per fitted pressure curve, holding every point of its boundary (and solid
    phase) with a finite deviation, per source (those beyond the axis as edge triangles)."""
    for fluid, (data, figs) in demo.items():
        obs = data.observations
        specs = pressure_curves(data)
        panels = _panels(figs.deviation_svg)
        assert len(panels) == len(specs), fluid
        for spec, panel in zip(specs, panels):
            sel = _drawable(obs) & (obs.boundary == spec.boundary) & \
                (obs.solid_phase == spec.solid_phase)
            dev = np.full(len(obs), np.nan)
            dev[sel] = deviations(spec, obs.T_K[sel], obs.p_Pa[sel])
            sel &= np.isfinite(dev)
            assert _points_by_source(panel, set(obs.source_id.tolist())) == \
                _expected(obs, sel), (fluid, spec.name)


def test_the_same_input_gives_the_same_bytes(demo):
    """Drawing a fluid again gives the same SVG text, every id carrying the figure's prefix."""
    data, figs = demo["carbon-dioxide"]
    again = render_figures(data)
    assert again.phase_svg == figs.phase_svg and again.deviation_svg == figs.deviation_svg
    for svg in (figs.phase_svg, figs.deviation_svg):
        root = ET.fromstring(svg)
        ids = [el.get("id") for el in root.iter() if el.get("id")]
        assert ids and all(i.startswith("fcarbon_dioxide-") for i in ids)
        assert "\x00" not in svg


def test_the_figure_cache_key_covers_all_the_drawing_code():
    """Every report module the drawing code imports is hashed into the figure cache's key,
    so a figure cached by older drawing code (matplotlib's SVG, say) is drawn again."""
    import ast

    from pipeline.report import views

    folder = Path(views.__file__).parent
    listed = set(views.FIGURE_CODE)
    for name in sorted(listed):
        tree = ast.parse((folder / f"{name}.py").read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith(
                    "pipeline.report."):
                imported = node.module.split(".")[2]
                assert imported in listed, f"{name}.py imports {imported}, not in FIGURE_CODE"
    assert "svgkit" in listed
