"""The SVG drawing kit of the report's figures: numbers, marker shapes, ticks and panel layout
as matplotlib gives them (the figures look as they did when matplotlib drew them)."""

from __future__ import annotations

import re

import numpy as np
import pytest
from matplotlib.figure import Figure
from matplotlib.markers import MarkerStyle
from matplotlib.ticker import MaxNLocator

from pipeline.report.svgkit import (
    grid_cells,
    marker_path,
    num,
    nums,
    text_width,
    tick_labels,
    ticks,
)


def test_numbers_are_written_alike_one_by_one_and_in_bulk():
    """Two decimals, no trailing zeros, no negative zero, the same from num() and nums()."""
    values = np.concatenate([[0.0, -0.001, 1.5, 100.0, -3.1, 12.345, 250.999],
                             np.random.default_rng(7).normal(0.0, 300.0, 5000)])
    assert nums(values) == [num(v) for v in values]
    assert nums([0.0, -0.001, 1.5, 100.0, -3.1, 250.999]) == ["0", "0", "1.5", "100", "-3.1",
                                                               "251"]


@pytest.mark.parametrize("marker", ["o", "s", "D", "^", "v", "P", "X", "h", "*", "x"])
def test_marker_paths_have_matplotlibs_extent(marker):
    """A marker 10 pt wide spans what matplotlib's MarkerStyle path spans at size 10 (y
    flipped for SVG)."""
    style = MarkerStyle(marker)
    ref = style.get_transform().transform(style.get_path().vertices) * 10.0
    d = marker_path(marker, 10.0)
    xy = np.array([float(v) for v in re.findall(r"-?\d+(?:\.\d+)?", d)]).reshape(-1, 2)
    assert xy[:, 0].min() == pytest.approx(ref[:, 0].min(), abs=0.01)
    assert xy[:, 0].max() == pytest.approx(ref[:, 0].max(), abs=0.01)
    assert -xy[:, 1].max() == pytest.approx(ref[:, 1].min(), abs=0.01)


@pytest.mark.parametrize("lo, hi, nbins", [(83.2, 151.0, 7), (-0.163, 0.163, 5),
                                           (216.0, 250.9, 6), (0.0, 1.0, 5)])
def test_linear_ticks_are_matplotlibs(lo, hi, nbins):
    """Tick positions are MaxNLocator's within the axis limits."""
    expected = [v for v in MaxNLocator(nbins).tick_values(lo, hi) if lo - 1e-12 <= v <= hi]
    assert ticks(lo, hi, log=False, nbins=nbins) == pytest.approx(expected)


def test_log_ticks_are_decades_inside_the_limits():
    """A log axis from 300 Pa to 5e8 Pa has its ticks on decades 1e3 ... 1e8."""
    assert ticks(300.0, 5e8, log=True, nbins=8) == pytest.approx(10.0 ** np.arange(3, 9))


def test_tick_labels_have_the_digits_the_step_needs():
    """0.5 steps get one decimal, 40 steps none; the minus is U+2212; huge values go
    scientific."""
    assert tick_labels(np.array([-0.5, 0.0, 0.5])) == ["\u22120.5", "0.0", "0.5"]
    assert tick_labels(np.array([0.0, 40.0, 80.0])) == ["0", "40", "80"]
    assert tick_labels(np.array([-0.016, 0.0, 0.016])) == ["\u22120.016", "0.000", "0.016"]
    assert all("e" in t for t in tick_labels(np.array([1e6, 2e6, 3e6])))


def test_panels_are_placed_as_matplotlib_places_subplots():
    """grid_cells gives the frames matplotlib's subplots_adjust and GridSpec give, for the
    phase diagram's two panels and a 2 x 3 deviation grid."""
    for (w, h, nrows, ncols, kw) in [
            (604.8, 340.0, 1, 2, dict(left=0.085, right=0.985, bottom=0.2, top=0.9,
                                      wspace=0.28, width_ratios=(1.55, 1.0))),
            (748.8, 450.0, 2, 3, dict(left=0.075, right=0.99, bottom=0.15, top=0.95,
                                      wspace=0.3, hspace=0.24))]:
        fig = Figure(figsize=(w / 72, h / 72), dpi=72)
        ratios = kw.pop("width_ratios", None)
        axes = fig.subplots(nrows, ncols, squeeze=False,
                            gridspec_kw={"width_ratios": ratios} if ratios else None)
        fig.subplots_adjust(**kw)
        cells = grid_cells(w, h, nrows, ncols, width_ratios=ratios, **kw)
        for ax, (x0, top, cw, ch) in zip(axes.ravel(), cells):
            box = ax.get_position()
            assert (x0, top, cw, ch) == pytest.approx(
                (box.x0 * w, (1 - box.y1) * h, box.width * w, box.height * h), abs=1e-6)


def test_text_is_measured_with_dejavu_sans():
    """'10' at 10 pt is 12.7 pt wide (two DejaVu Sans digits, 0.636 em each)."""
    assert text_width("10", 10.0) == pytest.approx(12.72, abs=0.05)
    assert text_width("WW", 10.0) > text_width("ii", 10.0) * 2
