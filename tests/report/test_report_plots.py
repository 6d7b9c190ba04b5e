"""Phase-diagram plots: what is drawn for given data (pure: data in, figure out)."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.collections import PolyCollection

from pipeline.correlations import reference_curve
from pipeline.report.plots import (
    CurveSpec,
    FixedPointMark,
    FlaggedPoint,
    Observations,
    PhaseDiagramData,
    figure_png,
    phase_diagram,
)

# Argon: Tegeler, Span & Wagner (1999) ancillary equations via pipeline.correlations.reference.
VAP = reference_curve("argon", "liquid-vapour", "pressure")
MELT = reference_curve("argon", "solid-liquid", "pressure")


class _WithBand:
    """A curve with a 0.5 % standard uncertainty (stands in for a fitted Curve.u)."""

    def __init__(self, curve):
        self.curve, self.T_min_K, self.T_max_K = curve, curve.T_min_K, curve.T_max_K

    def value(self, T):
        return self.curve.value(T)

    def u(self, T):
        return 0.005 * self.curve.value(T)


def _data(with_melting=True, flagged=()):
    T_v = np.linspace(85.0, 145.0, 12)
    T_m = np.linspace(90.0, 140.0, 6) if with_melting else np.zeros(0)
    T = np.concatenate([T_v, T_m])
    p = np.concatenate([VAP.value(T_v), MELT.value(T_m)])
    src = np.array(["lab-a"] * 6 + ["lab-b"] * 6 + ["paper-c"] * len(T_m), dtype=object)
    bnd = np.array(["liquid-vapour"] * 12 + ["solid-liquid"] * len(T_m), dtype=object)
    obs = Observations(T, p, src, bnd, np.arange(1, len(T) + 1))
    curves = [CurveSpec("liquid-vapour", "", _WithBand(VAP))]
    if with_melting:
        curves.append(CurveSpec("solid-liquid", "", MELT))
    fixed = [FixedPointMark("critical", "vapour,liquid", 150.687, 4.863e6, 0.015, 3e3, "ev"),
             FixedPointMark("triple", "vapour,liquid,solid", 83.8058, 68.891e3, 2e-4, 5.0, "ev")]
    return PhaseDiagramData("argon", "argon (Ar)", obs, curves, fixed, list(flagged))


def test_left_panel_is_log_pressure_with_a_legend_entry_per_source():
    """The first panel has a log pressure axis; every source gets its own legend entry."""
    fig = phase_diagram(_data())
    ax, ax_m = fig.axes[:2]
    assert ax.get_yscale() == "log" and ax_m.get_yscale() == "linear"
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    for source in ("lab-a", "lab-b", "paper-c"):
        assert labels.count(source) == 1
    assert "critical point (k = 2)" in labels and "triple point (k = 2)" in labels


def test_a_curve_with_uncertainty_gets_a_k2_band():
    """Curve.u gives a filled band of half-width 2u around the fitted curve."""
    fig = phase_diagram(_data())
    ax = fig.axes[0]
    bands = [c for c in ax.collections if isinstance(c, PolyCollection)]
    assert len(bands) == 1
    ys = bands[0].get_paths()[0].vertices[:, 1]
    T_mid = 0.5 * (VAP.T_min_K + VAP.T_max_K)
    p_mid = float(VAP.value(T_mid))
    assert ys.max() == pytest.approx(float(VAP.value(VAP.T_max_K)) * 1.01, rel=1e-6)
    assert ys.min() < p_mid  # the band reaches below the curve as well
    assert "fit uncertainty (k = 2)" in [t.get_text() for t in fig.legends[0].get_texts()]


def test_flagged_points_are_circled_and_labelled():
    """Flagged observations are circled and labelled with their id and reason."""
    flagged = [FlaggedPoint(3, 95.0, float(VAP.value(95.0)), "liquid-vapour", "fit outlier"),
               FlaggedPoint(14, 100.0, float(MELT.value(100.0)), "solid-liquid",
                            "clapeyron.slope-sign")]
    fig = phase_diagram(_data(flagged=flagged))
    texts = [t.get_text() for t in fig.axes[0].texts]
    assert "obs 3: fit outlier" in texts and "obs 14: clapeyron.slope-sign" in texts
    circled = [c for c in fig.axes[0].collections
               if c.get_label().startswith("flagged")]
    assert len(circled) == 1 and len(circled[0].get_offsets()) == 2
    # the melting panel circles the melting point only
    m_circled = [c for c in fig.axes[1].collections if len(c.get_offsets()) == 1
                 and np.allclose(c.get_edgecolor()[0][:3], (0.839, 0.153, 0.157), atol=0.01)]
    assert m_circled


def test_melting_panel_is_linear_in_mpa():
    """The melting panel plots pressures in MPa on a linear axis."""
    fig = phase_diagram(_data())
    ax_m = fig.axes[1]
    assert "MPa" in ax_m.get_ylabel()
    top = max(np.max(c.get_offsets()[:, 1]) for c in ax_m.collections if len(c.get_offsets()))
    assert top == pytest.approx(float(MELT.value(140.0)) / 1e6, rel=1e-6)


def test_no_melting_data_says_so():
    """Without melting data the second panel says so instead of plotting an empty axis."""
    fig = phase_diagram(_data(with_melting=False))
    assert [t.get_text() for t in fig.axes[1].texts] == ["no melting data"]


def test_figure_png_gives_png_bytes():
    """figure_png renders a PNG of the requested size."""
    png = figure_png(phase_diagram(_data(), width_in=5.0, height_in=2.5), dpi=40)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
    assert (width, height) == (200, 100)
