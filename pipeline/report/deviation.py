"""Deviation plots: 100 (p_obs - p_fit) / p_fit against T, one panel per fitted boundary.

The view a data evaluator looks at first: each source's points (same markers as the phase
diagram) about the fitted curve of their boundary (and solid phase), with the fit's expanded
uncertainty band +/- 2 u_fit(T)/p_fit(T) (k = 2, from the fit's covariance). Points of a file
diagnosed with a unit mix-up are shown at their corrected values (hollow markers), excluded
points as grey crosses, flagged points circled and numbered as in the phase diagram.

The vertical range follows the band and the bulk of the unflagged points, so one gross
outlier does not flatten everything else: points beyond it are drawn on the panel's edge as
triangles pointing the way they are off, their hover text giving the true deviation.
"""

from __future__ import annotations

import math

import numpy as np

from pipeline.report.plots import (
    K_COVERAGE,
    CurveSpec,
    PhaseDiagramData,
    _finite,
    curve_colour,
    draw_flags,
    draw_points,
    finish,
    solid_phases,
    source_styles,
)
from pipeline.report.svgkit import Canvas, Handle, Panel, PointStyle

#: Panels per row.
COLUMNS = 3
#: Smallest half-range of the vertical axis [%].
MIN_HALF_RANGE = 1e-3
BAND_COLOUR = "#9e9e9e"


def pressure_curves(data: PhaseDiagramData) -> list[CurveSpec]:
    """The fitted pressure curves of the fluid, one panel each, in a stable order."""
    order = {"liquid-vapour": 0, "solid-vapour": 1, "solid-liquid": 2, "solid-solid": 3}
    return sorted(data.curves, key=lambda c: (order.get(c.boundary, 9), c.solid_phase))


def deviations(spec: CurveSpec, T: np.ndarray, p: np.ndarray) -> np.ndarray:
    """100 (p - p_fit)/p_fit [%] at each point (NaN outside the curve's range)."""
    with np.errstate(all="ignore"):
        fit = np.asarray(spec.curve.value(T), dtype=float)
        return 100.0 * (p - fit) / fit


def band(spec: CurveSpec, n: int = 80) -> tuple[np.ndarray, np.ndarray]:
    """T grid and the half-width of the k = 2 band of the fit [%] (zeros without covariance)."""
    lo, hi = float(spec.curve.T_min_K), float(spec.curve.T_max_K)
    if not (math.isfinite(lo) and math.isfinite(hi) and hi > lo):
        return np.zeros(0), np.zeros(0)
    T = np.linspace(lo, hi, n)
    with np.errstate(all="ignore"):
        value = np.asarray(spec.curve.value(T), dtype=float)
        try:
            u = np.asarray(spec.curve.u(T), dtype=float)
        except Exception:   # a curve without covariance support: no band
            u = np.full_like(T, np.nan)
        half = 100.0 * K_COVERAGE * u / np.abs(value)
    return T, np.where(np.isfinite(half), half, 0.0)


def y_range(dev: np.ndarray, flagged: np.ndarray, half: np.ndarray) -> float:
    """Half-range of the vertical axis [%]: every unflagged point (the fit kept them, so they
    are data, not outliers) and the typical band, with a margin; flagged points do not
    stretch it (they are drawn on the edge)."""
    good = np.abs(dev[np.isfinite(dev) & ~flagged])
    spread = float(good.max()) if len(good) else 0.0
    width = float(np.median(half)) if len(half) else 0.0
    if not len(good) and np.isfinite(dev).any():
        spread = float(np.median(np.abs(dev[np.isfinite(dev)])))
    return max(1.15 * max(spread, width), MIN_HALF_RANGE)


def _panel(fig: Canvas, ax: Panel, data: PhaseDiagramData, spec: CurveSpec, styles, phases,
           legend: dict) -> dict:
    obs = data.observations
    sel = (obs.boundary == spec.boundary) & (obs.solid_phase == spec.solid_phase) & \
        _finite(obs.T_K, obs.p_Pa) & (obs.p_Pa > 0) if len(obs) else np.zeros(0, bool)
    dev = np.full(len(obs), np.nan)
    if sel.any():
        dev[sel] = deviations(spec, obs.T_K[sel], obs.p_Pa[sel])
    sel &= np.isfinite(dev)
    T_band, half = band(spec)
    lim = y_range(dev[sel], (obs.flag[sel] > 0), half)
    colour = curve_colour(spec.boundary, spec.solid_phase, phases)
    if len(T_band) and np.any(half > 0):
        label = "fit uncertainty band (k = 2)"
        ax.band(T_band, -half, half, BAND_COLOUR, 0.35, 0.8, label=label)
        legend.setdefault(label, Handle("patch", colour=BAND_COLOUR, alpha=0.35))
    ax.hline(0.0, colour, 1.1, 1.0)
    y = np.clip(dev, -lim, lim)
    off = sel & (np.abs(dev) > lim)
    note = [f"deviation from the fit: {d:+.4g} %" if np.isfinite(d) else "" for d in dev]
    draw_points(fig, ax, obs, styles, sel & ~off, obs.T_K, y, legend, note)
    for source, st in styles.items():     # beyond the axis: a triangle on the edge
        for sign, marker in ((1.0, "^"), (-1.0, "v")):
            edge = np.flatnonzero(off & (np.sign(dev) == sign) & (obs.source_id == source))
            if len(edge):
                ax.points(fig, obs.T_K[edge], y[edge],
                          PointStyle(marker, 34.0, st.colour, "#000000", 0.4), 3.8,
                          layer="edge", label=source,
                          titles=[obs.hover(i, note[i] + " (beyond the axis)") for i in edge])
                legend.setdefault("off the axis: triangle on the edge (value on hover)",
                                  Handle("marker", PointStyle("^", 36.0, "#777777", "#000000",
                                                              0.4)))
    anchors = draw_flags(fig, ax, obs, sel, obs.T_K, y, legend)
    lo, hi = float(spec.curve.T_min_K), float(spec.curve.T_max_K)
    pad = 0.03 * (hi - lo) if hi > lo else 1.0
    T_all = np.concatenate([obs.T_K[sel], [lo, hi]])
    ax.xlim = (float(np.nanmin(T_all)) - pad, float(np.nanmax(T_all)) + pad)
    ax.ylim = (-lim * 1.06, lim * 1.06)
    return anchors


def deviation_figure(data: PhaseDiagramData, *, width_in: float = 10.4,
                     panel_in: float = 2.25) -> Canvas | None:
    """One panel per fitted pressure curve (None when the fluid has none), ready to be
    written as SVG (:func:`pipeline.report.svg.figure_svg`)."""
    specs = pressure_curves(data)
    if not specs:
        return None
    ncols = min(COLUMNS, len(specs))
    nrows = -(-len(specs) // ncols)
    fig = Canvas(width_in * 72, (nrows * panel_in + 1.5) * 72)
    obs = data.observations
    ok = _finite(obs.T_K, obs.p_Pa) & (obs.p_Pa > 0) if len(obs) else np.zeros(0, bool)
    styles = source_styles(obs.source_id[ok].tolist(), obs.source_kind[ok].tolist())
    phases = solid_phases(data)
    legend: dict[str, Handle] = {}
    numbers = []
    for k, spec in enumerate(specs):
        ax = fig.panel((0, 0, 1, 1))
        numbers.append((ax, _panel(fig, ax, data, spec, styles, phases, legend)))
        form = getattr(spec.curve, "form", "")
        ax.axes(title=f"{spec.name} ({form})" if form else spec.name,
                xlabel="T [K]" if k + ncols >= len(specs) else None,
                ylabel="100 (p - p_fit)/p_fit [%]" if k % ncols == 0 else None, nbins_x=5,
                nbins_y=5, label_pad=(14.0, 38.0))
    return finish(fig, legend, numbers, axes_in=nrows * panel_in + (nrows - 1) * 0.55,
                  nrows=nrows, ncols=ncols, top_in=0.3, left=0.78 / width_in, right=0.99,
                  wspace=0.3, hspace=0.55 / panel_in if nrows > 1 else 0.2)
