"""Report figures: what the phase diagram and the deviation plots draw for given data (pure:
data in, SVG out), read back from the SVG they become."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from pipeline.correlations import reference_curve
from pipeline.report.deviation import deviation_figure, y_range
from pipeline.report.figures import FluidFigures, render_figures
from pipeline.report.plots import (
    CurveSpec,
    FixedPointMark,
    FlagGroup,
    Observations,
    PhaseDiagramData,
    decade_label,
    phase_diagram,
)
from pipeline.report.svg import SVG_NS, figure_svg
from pipeline.report.svgkit import Panel

# Argon: Tegeler, Span & Wagner (1999) ancillary equations via pipeline.correlations.reference.
VAP = reference_curve("argon", "liquid-vapour", "pressure")
MELT = reference_curve("argon", "solid-liquid", "pressure")
SUB = reference_curve("argon", "solid-vapour", "pressure")
# Water: IAPWS R14-08(2011) melting pressure of ices Ih and III.
ICE_IH = reference_curve("water", "solid-liquid", "pressure", "Ih")
ICE_III = reference_curve("water", "solid-liquid", "pressure", "III")


class _WithBand:
    """A curve with a 0.5 % standard uncertainty (stands in for a fitted Curve.u)."""

    form = "test-form"

    def __init__(self, curve):
        self.curve, self.T_min_K, self.T_max_K = curve, curve.T_min_K, curve.T_max_K

    def value(self, T):
        return self.curve.value(T)

    def u(self, T):
        return 0.005 * np.asarray(self.curve.value(T))


def _data(flag_lab: bool = False, lab_offset: float = 0.0) -> PhaseDiagramData:
    """Argon: 40 equation samples (evaluated), 10 lab points 0.1 % high (measurement) of which
    the first may be flagged, 6 melting points; fitted curves with bands; fixed points."""
    T_eq = np.linspace(85.0, 148.0, 40)
    T_lab = np.linspace(90.0, 140.0, 10)
    T_m = np.linspace(90.0, 140.0, 6)
    T = np.concatenate([T_eq, T_lab, T_m])
    p = np.concatenate([VAP.value(T_eq), VAP.value(T_lab) * (1.001 + lab_offset),
                        MELT.value(T_m)])
    n_eq, n_lab, n_m = len(T_eq), len(T_lab), len(T_m)
    src = ["eq-src"] * n_eq + ["lab-a"] * n_lab + ["paper-c"] * n_m
    kind = ["evaluated"] * n_eq + ["measurement"] * n_lab + ["literature"] * n_m
    bnd = ["liquid-vapour"] * (n_eq + n_lab) + ["solid-liquid"] * n_m
    files = ["eq/vp.csv"] * n_eq + ["lab-a/vp.csv"] * n_lab + ["paper-c/melt.csv"] * n_m
    rows = list(range(1, n_eq + 1)) + list(range(1, n_lab + 1)) + list(range(1, n_m + 1))
    flag = np.zeros(len(T), dtype=np.int64)
    flags = ()
    if flag_lab:
        flag[n_eq] = 1
        flags = (FlagGroup(1, "lab-a/vp.csv", "lab-a", ("fit outlier",), (n_eq + 1,), (1,),
                           90.0, 90.0, 1),)
    obs = Observations.build(T, p, src, bnd, np.arange(1, len(T) + 1), source_kind=kind,
                             file_path=files, row_number=rows, flag=flag)
    curves = [CurveSpec("liquid-vapour", "", _WithBand(VAP)),
              CurveSpec("solid-liquid", "", _WithBand(MELT))]
    fixed = [FixedPointMark("critical", "vapour,liquid", 150.687, 4.863e6, 0.015, 3e3, "ev"),
             FixedPointMark("triple", "vapour,liquid,solid", 83.8058, 68.891e3, 2e-4, 5.0, "ev")]
    return PhaseDiagramData("argon", "argon (Ar)", obs, curves, fixed, flags)


G = f"{{{SVG_NS}}}g"
USE = f"{{{SVG_NS}}}use"
PATH = f"{{{SVG_NS}}}path"
TEXT = f"{{{SVG_NS}}}text"
RECT = f"{{{SVG_NS}}}rect"
FLAG_RED = "#d62728"


def _svg(fig) -> ET.Element:
    return ET.fromstring(figure_svg(fig, prefix="t-", figure="test", fluid_id="argon",
                                    label="test figure"))


def _panels(root: ET.Element) -> list[ET.Element]:
    return [g for g in root.iter(G) if g.get("class") == "panel"]


def _drawn(panel: ET.Element) -> list[ET.Element]:
    """What is drawn inside the panel's frame, bottom to top."""
    (body,) = [g for g in panel.findall(G) if g.get("clip-path")]
    return list(body)


def _layers(panel: ET.Element, layer: str) -> list[ET.Element]:
    return [el for el in _drawn(panel) if el.get("data-layer") == layer]


def _legend(root: ET.Element) -> list[str]:
    (legend,) = [g for g in root.iter(G) if g.get("class") == "legend"]
    return [t.text for t in legend.iter(TEXT)]


def _data_y(panel: Panel, Y: float) -> float:
    """The data value at SVG y coordinate ``Y`` of a linear panel."""
    lo, hi = panel.ylim
    return lo + (panel.y0 + panel.h - Y) / panel.h * (hi - lo)


def _path_xy(d: str) -> np.ndarray:
    return np.array([float(v) for v in re.findall(r"-?\d+(?:\.\d+)?", d)]).reshape(-1, 2)


def test_measured_data_sit_above_equation_samples_and_the_curves():
    """Lab points are drawn over the fitted curves, which are drawn over the samples of
    evaluated equations (one merged path, 40 markers, no hover text)."""
    (phase, _) = _panels(_svg(phase_diagram(_data())))
    drawn = _drawn(phase)
    kinds = [(el.get("data-layer"), el.get("data-label")) for el in drawn]
    samples = kinds.index(("samples", "eq-src"))
    curves = [i for i, k in enumerate(kinds) if k[0] == "curve"]
    lab = kinds.index(("points", "lab-a"))
    assert samples < min(curves) <= max(curves) < lab
    (merged,) = drawn[samples].findall(PATH)
    assert merged.get("d").count("M") == 40 and not drawn[samples].findall(USE)
    assert not list(drawn[samples].iter(f"{{{SVG_NS}}}title"))
    assert len(drawn[lab].findall(USE)) == 10


def test_one_legend_entry_per_source_and_no_in_plot_text():
    """Every source has one legend entry; without flags the panels carry no text at all
    (titles, ticks and axis labels aside)."""
    root = _svg(phase_diagram(_data()))
    labels = _legend(root)
    for source in ("eq-src", "lab-a", "paper-c"):
        assert labels.count(source) == 1
    assert "critical point" in labels and "triple point" in labels
    for panel in _panels(root):
        assert not [el for el in _drawn(panel) if el.tag == TEXT]
        assert not [g for g in panel.iter(G) if g.get("class") == "flag-number"]


def test_log_axis_has_no_band_and_plain_decade_labels():
    """No uncertainty band is drawn on the log panel (it would be thinner than the line); its
    ticks read 10⁵ without mathtext."""
    root = _svg(phase_diagram(_data()))
    phase = _panels(root)[0]
    assert not _layers(phase, "band")
    ticks = [t.text for t in phase.findall(TEXT) if t.get("text-anchor") == "end"]
    assert ticks and all(t.startswith("10") for t in ticks)
    assert decade_label(1e5) == "10\u2075" and decade_label(0.1) == "10\u207b\u00b9"
    assert decade_label(3e4) == ""


def test_melting_curves_of_solid_phases_differ_by_colour():
    """Ice Ih and ice III melting curves are drawn in two different colours, same style."""
    obs = Observations.empty()
    data = PhaseDiagramData("water", "water", obs, [CurveSpec("solid-liquid", "Ih", ICE_IH),
                                                    CurveSpec("solid-liquid", "III", ICE_III)])
    fig = phase_diagram(data)
    melt = _panels(_svg(fig))[1]
    curves = _layers(melt, "curve")
    assert len(curves) == 2
    assert len({c.get("stroke") for c in curves}) == 2
    assert len({(c.get("stroke-width"), c.get("stroke-dasharray")) for c in curves}) == 1
    assert "MPa" in fig.panels[1].ylabel


def test_flagged_points_are_circled_and_numbered_once_per_panel():
    """A flagged lab point gets a red ring and its group number beside it."""
    phase = _panels(_svg(phase_diagram(_data(flag_lab=True))))[0]
    numbers = [g for g in phase.iter(G) if g.get("class") == "flag-number"]
    assert [g.find(TEXT).text for g in numbers] == ["1"]
    (rings,) = _layers(phase, "flags")
    assert rings.get("stroke") == FLAG_RED and rings.get("fill") == "none"
    assert len(rings.findall(USE)) == 1


def test_many_flag_numbers_never_overlap_and_stay_in_their_panel():
    """Twelve flag groups on neighbouring points: every number placed lies inside the panel
    and no two number boxes overlap."""
    d = _data()
    obs = d.observations
    flag = np.zeros(len(obs), dtype=np.int64)
    lab = np.flatnonzero(obs.source_id == "lab-a")
    eq = np.flatnonzero(obs.source_id == "eq-src")[10:12]
    for n, i in enumerate(list(lab) + list(eq), start=1):
        flag[i] = n
    obs = Observations.build(obs.T_K, obs.p_Pa, obs.source_id, obs.boundary, obs.obs_id,
                             source_kind=obs.source_kind, file_path=obs.file_path, flag=flag)
    fig = phase_diagram(PhaseDiagramData("argon", "argon", obs, d.curves, d.fixed_points))
    phase = _panels(_svg(fig))[0]
    p = fig.panels[0]
    boxes = []
    for g in phase.iter(G):
        if g.get("class") == "flag-number":
            r = g.find(RECT)
            x, y = float(r.get("x")), float(r.get("y"))
            boxes.append((x, y, x + float(r.get("width")), y + float(r.get("height"))))
    assert len(boxes) >= 10
    for i, a in enumerate(boxes):
        assert p.x0 <= a[0] and a[2] <= p.x0 + p.w and p.y0 <= a[1] and a[3] <= p.y0 + p.h
        for b in boxes[i + 1:]:
            assert not (a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]), (a, b)


def test_a_corrected_file_is_drawn_hollow_where_it_belongs():
    """Points drawn corrected (a unit mix-up) are hollow and named as such in the legend."""
    d = _data()
    obs = d.observations
    corr = np.where(obs.source_id == "lab-a", "kPa recorded as Pa (factor 1000)", "")
    obs = Observations.build(obs.T_K, obs.p_Pa, obs.source_id, obs.boundary, obs.obs_id,
                             source_kind=obs.source_kind, correction=corr)
    root = _svg(phase_diagram(PhaseDiagramData("argon", "argon", obs, d.curves,
                                               d.fixed_points)))
    assert "lab-a (drawn corrected)" in _legend(root)
    (hollow,) = [g for g in _layers(_panels(root)[0], "points")
                 if g.get("data-label") == "lab-a (drawn corrected)"]
    assert len(hollow.findall(USE)) == 10
    assert hollow.get("fill") == "none" and hollow.get("stroke") == "#d62728"


def test_deviation_plot_has_one_panel_per_curve_with_its_k2_band():
    """One panel per fitted pressure curve; the band is +/- 2u/p [%] (here 1 %); the lab points
    sit at +0.1 %."""
    fig = deviation_figure(_data())
    root = _svg(fig)
    panels = _panels(root)
    assert [p.get("data-title") for p in panels] == ["vapour pressure (test-form)",
                                                     "melting (test-form)"]
    (band,) = _layers(panels[0], "band")
    top = min(_path_xy(band.get("d"))[:, 1])
    assert _data_y(fig.panels[0], top) == pytest.approx(1.0, abs=0.01)   # 0.01 pt rounding
    (lab,) = [g for g in _layers(panels[0], "points") if g.get("data-label") == "lab-a"]
    ys = [_data_y(fig.panels[0], float(u.get("y"))) for u in lab.findall(USE)]
    assert len(ys) == 10 and np.allclose(ys, 0.1, atol=0.002)
    assert "fit uncertainty band (k = 2)" in _legend(root)


def test_a_gross_outlier_sits_on_the_edge_and_does_not_stretch_the_axis():
    """A flagged point 8 % off is drawn as a triangle on the panel's edge; the axis follows
    the band and the other points."""
    assert y_range(np.array([0.1, -0.2, 8.0]), np.array([False, False, True]),
                   np.array([0.05])) == pytest.approx(0.23)
    d = _data(flag_lab=True)
    p = d.observations.p_Pa.copy()
    p[40] *= 1.08
    obs = Observations.build(d.observations.T_K, p, d.observations.source_id,
                             d.observations.boundary, d.observations.obs_id,
                             source_kind=d.observations.source_kind, flag=d.observations.flag)
    fig = deviation_figure(PhaseDiagramData("argon", "argon", obs, d.curves, d.fixed_points,
                                            d.flags))
    lo, hi = fig.panels[0].ylim
    assert hi < 2.0
    (edge,) = _layers(_panels(_svg(fig))[0], "edge")
    (u,) = edge.findall(USE)
    assert _data_y(fig.panels[0], float(u.get("y"))) == pytest.approx(hi / 1.06, rel=1e-3)
    assert "+8" in u.find(f"{{{SVG_NS}}}title").text and "beyond the axis" in \
        u.find(f"{{{SVG_NS}}}title").text


def test_svg_titles_name_source_file_row_T_and_p():
    """The SVG gives every measured point a <title> naming source, file, row, T and p; ids
    carry the figure's prefix; nothing points outside the document."""
    text = figure_svg(phase_diagram(_data(flag_lab=True)), prefix="x1-", figure="phase",
                      fluid_id="argon", label="phase diagram")
    root = ET.fromstring(text)
    titles = [t.text for t in root.iter(f"{{{SVG_NS}}}title")]
    lab = [t for t in titles if t.startswith("lab-a (measurement)")]
    assert len(lab) >= 10
    assert any("lab-a/vp.csv row 1 (obs 41)" in t and "T = 90 K, p = " in t and
               "flag 1" in t for t in lab)
    ids = [el.get("id") for el in root.iter() if el.get("id")]
    assert ids and all(i.startswith("x1-") for i in ids)
    assert not re.search(r"(?:href|src)=\"(?!#|data:)", text)
    assert root.get("data-figure") == "phase" and root.get("data-fluid") == "argon"


def test_render_figures_round_trips_through_the_cache_form():
    """Both figures and the flag rows survive the JSON the figure cache stores."""
    figs = render_figures(_data(flag_lab=True))
    back = FluidFigures.from_json(figs.to_json())
    assert back == figs and back.deviation_svg and back.flags[0]["number"] == 1


def test_hover_texts_with_markup_are_escaped_in_the_svg():
    """A source id or file name holding markup reaches the SVG as text, never as elements."""
    d = _data()
    obs = d.observations
    evil = "<script>alert(1)</script>"
    src = np.where(obs.source_id == "lab-a", evil, obs.source_id).astype(object)
    obs = Observations.build(obs.T_K, obs.p_Pa, src, obs.boundary, obs.obs_id,
                             source_kind=obs.source_kind, file_path=obs.file_path)
    text = figure_svg(phase_diagram(PhaseDiagramData("argon", "argon", obs, d.curves)),
                      prefix="e-", figure="phase", fluid_id="argon", label="x")
    assert "<script" not in text and "&lt;script&gt;alert(1)&lt;/script&gt;" in text


def test_a_fluid_without_melting_data_says_so_in_the_right_panel():
    """Without melting points or curves the right panel holds its title and 'no melting data',
    no ticks; the left panel's limits come from the curves when no point is drawable."""
    obs = Observations.empty()
    fig = phase_diagram(PhaseDiagramData("argon", "argon", obs,
                                         [CurveSpec("liquid-vapour", "", VAP)]))
    phase, melt = _panels(_svg(fig))
    assert [t.text for t in melt.findall(TEXT)] == ["melting curve(s)", "no melting data"]
    lo, hi = fig.panels[0].ylim
    assert lo < float(VAP.value(VAP.T_min_K)) and hi > float(VAP.value(VAP.T_max_K))
    assert len(_layers(phase, "curve")) == 1
