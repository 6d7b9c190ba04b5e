"""The report's former figure (pipeline/report/plots.py before the SVG figures), kept verbatim
as the yardstick of benchmarks/report_figure.py: one PNG phase diagram per fluid. Not used by the
product."""

from __future__ import annotations

import io
import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

#: Coverage factor of the bands and error bars drawn.
K_COVERAGE = 2.0
#: At most this many flagged points get a text label (the others are circled only).
MAX_LABELS = 6
MARKERS = ("o", "s", "D", "v", "P", "X", "<", ">", "h", "p", "d", "*")
COLOURS = ("#1f77b4", "#ff7f0e", "#2ca02c", "#9467bd", "#8c564b", "#e377c2", "#17becf",
           "#bcbd22", "#7f7f7f", "#393b79", "#637939", "#8c6d31")
BOUNDARY_STYLE = {"liquid-vapour": ("#222222", "-"), "solid-vapour": ("#444488", "--"),
                  "solid-liquid": ("#884444", "-."), "solid-solid": ("#448844", ":")}
BOUNDARY_NAME = {"liquid-vapour": "vapour pressure", "solid-vapour": "sublimation",
                 "solid-liquid": "melting", "solid-solid": "solid-solid"}


@dataclass(frozen=True)
class Observations:
    """Pressure observations of one fluid as arrays (all the same length). [K], [Pa]"""

    T_K: np.ndarray
    p_Pa: np.ndarray
    source_id: np.ndarray     # str per point
    boundary: np.ndarray      # str per point
    obs_id: np.ndarray        # int per point

    @classmethod
    def empty(cls) -> "Observations":
        z = np.zeros(0)
        return cls(z, z, z.astype(object), z.astype(object), z.astype(np.int64))

    def __len__(self) -> int:
        return len(self.T_K)


@dataclass(frozen=True)
class CurveSpec:
    """A fitted curve to draw: ``curve`` has ``value(T)``, ``u(T)``, ``T_min_K``, ``T_max_K``."""

    boundary: str
    solid_phase: str
    curve: Any
    label: str = ""


@dataclass(frozen=True)
class FixedPointMark:
    """A stated triple or critical point. [K], [Pa]; uncertainties are standard (k = 1)."""

    kind: str                 # triple | critical
    phases: str
    T_K: float
    p_Pa: float
    u_T_K: float = math.nan
    u_p_Pa: float = math.nan
    source_id: str = ""


@dataclass(frozen=True)
class FlaggedPoint:
    """An observation to mark: a fit outlier or one named by a failing check."""

    obs_id: int
    T_K: float
    p_Pa: float
    boundary: str
    reason: str               # e.g. "fit outlier" or a check id


@dataclass(frozen=True)
class PhaseDiagramData:
    """Everything :func:`phase_diagram` draws for one fluid."""

    fluid_id: str
    title: str
    observations: Observations
    curves: Sequence[CurveSpec] = ()
    fixed_points: Sequence[FixedPointMark] = ()
    flagged: Sequence[FlaggedPoint] = ()
    notes: Sequence[str] = field(default_factory=tuple)


def _finite(*arrays) -> np.ndarray:
    mask = np.ones(len(arrays[0]), dtype=bool)
    for a in arrays:
        mask &= np.isfinite(np.asarray(a, dtype=float))
    return mask


def _curve_arrays(spec: CurveSpec, n: int = 200) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """T grid over the curve's range, values and k=2 half-widths (NaN-free where finite)."""
    lo, hi = float(spec.curve.T_min_K), float(spec.curve.T_max_K)
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return np.zeros(0), np.zeros(0), np.zeros(0)
    T = np.linspace(lo, hi, n)
    with np.errstate(all="ignore"):
        value = np.asarray(spec.curve.value(T), dtype=float)
        try:
            u = np.asarray(spec.curve.u(T), dtype=float)
        except Exception:  # a curve without covariance support: no band
            u = np.full_like(T, np.nan)
    return T, value, K_COVERAGE * np.nan_to_num(u, nan=0.0)


def _limits(values: list[np.ndarray], log: bool) -> tuple[float, float] | None:
    v = (np.concatenate([np.asarray(a, dtype=float).ravel() for a in values]) if values
         else np.zeros(0))
    v = v[np.isfinite(v) & ((v > 0) if log else True)]
    if not len(v):
        return None
    lo, hi = float(v.min()), float(v.max())
    if log:
        return lo / 3.0, hi * 3.0
    pad = 0.06 * (hi - lo) or (abs(hi) * 0.1 or 1.0)
    return lo - pad, hi + pad


def _source_styles(sources: Sequence[str]) -> dict[str, tuple[str, str]]:
    return {s: (MARKERS[i % len(MARKERS)], COLOURS[i % len(COLOURS)])
            for i, s in enumerate(sorted(set(sources)))}


def _draw_points(ax, obs: Observations, styles, mask, scale: float, labelled: set) -> None:
    for source, (marker, colour) in styles.items():
        sel = mask & (obs.source_id == source)
        if not sel.any():
            continue
        label = source if source not in labelled else None
        labelled.add(source)
        ax.scatter(obs.T_K[sel], obs.p_Pa[sel] / scale, marker=marker, s=16, color=colour,
                   alpha=0.8, linewidths=0.4, edgecolors="white", label=label, zorder=3)


def _draw_curves(ax, curves: Sequence[CurveSpec], scale: float, log: bool, labelled: set) -> None:
    for spec in curves:
        T, value, half = _curve_arrays(spec)
        ok = _finite(T, value) & ((value > 0) if log else True)
        if not ok.any():
            continue
        colour, style = BOUNDARY_STYLE.get(spec.boundary, ("#000000", "-"))
        name = spec.label or BOUNDARY_NAME.get(spec.boundary, spec.boundary) + (
            f" {spec.solid_phase}" if spec.solid_phase else "") + " fit"
        ax.plot(T[ok], value[ok] / scale, color=colour, linestyle=style, linewidth=1.2,
                label=None if name in labelled else name, zorder=2)
        labelled.add(name)
        lo = value - half
        if log:
            lo = np.where(lo > 0, lo, value * 1e-3)
        if np.any(half[ok] > 0):
            band = "fit uncertainty (k = 2)"
            ax.fill_between(T[ok], lo[ok] / scale, (value + half)[ok] / scale, color=colour,
                            alpha=0.18, linewidth=0, label=None if band in labelled else band,
                            zorder=1)
            labelled.add(band)


def _draw_fixed(ax, points: Sequence[FixedPointMark], scale: float, labelled: set) -> None:
    for fp in points:
        if not (math.isfinite(fp.T_K) and math.isfinite(fp.p_Pa)):
            continue
        critical = fp.kind == "critical"
        name = "critical point" if critical else "triple point"
        xerr = K_COVERAGE * fp.u_T_K if math.isfinite(fp.u_T_K) else None
        yerr = K_COVERAGE * fp.u_p_Pa / scale if math.isfinite(fp.u_p_Pa) else None
        ax.errorbar([fp.T_K], [fp.p_Pa / scale], xerr=xerr, yerr=yerr,
                    fmt="*" if critical else "^", markersize=11 if critical else 8,
                    color="#d4a017" if critical else "#2e8b57", markeredgecolor="black",
                    markeredgewidth=0.6, ecolor="black", elinewidth=0.8, capsize=3,
                    label=None if name in labelled else f"{name} (k = 2)", zorder=5)
        labelled.add(name)


def _draw_flagged(ax, flagged: Sequence[FlaggedPoint], scale: float, labelled: set,
                  annotate: bool) -> None:
    pts = [f for f in flagged if math.isfinite(f.T_K) and math.isfinite(f.p_Pa)]
    if not pts:
        return
    name = "flagged (outlier or failing check)"
    ax.scatter([f.T_K for f in pts], [f.p_Pa / scale for f in pts], s=90, facecolors="none",
               edgecolors="#d62728", linewidths=1.4, label=None if name in labelled else name,
               zorder=6)
    labelled.add(name)
    if not annotate:
        return
    order = sorted(range(len(pts)), key=lambda i: (pts[i].T_K, pts[i].obs_id))
    picks = sorted({order[int(round(j))] for j in np.linspace(0, len(order) - 1,
                                                              min(len(order), MAX_LABELS))})
    for n, i in enumerate(picks):
        f = pts[i]
        ax.annotate(f"obs {f.obs_id}: {f.reason}", (f.T_K, f.p_Pa / scale),
                    xytext=(7, 9 if n % 2 == 0 else -13), textcoords="offset points",
                    fontsize=6.5, color="#a01010", zorder=7,
                    arrowprops={"arrowstyle": "-", "color": "#a01010", "linewidth": 0.5})
    if len(pts) > MAX_LABELS:
        ax.text(0.01, 0.01, f"{len(pts)} flagged points, {MAX_LABELS} labelled",
                transform=ax.transAxes, fontsize=6.5, color="#a01010", va="bottom")


def phase_diagram(data: PhaseDiagramData, *, width_in: float = 10.0,
                  height_in: float = 4.6) -> Figure:
    """The phase diagram of one fluid (see the module docstring for what is drawn)."""
    fig = Figure(figsize=(width_in, height_in))
    FigureCanvasAgg(fig)
    ax, ax_m = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.6, 1.0]})
    fig.subplots_adjust(left=0.075, right=0.985, top=0.88, bottom=0.34, wspace=0.22)
    obs = data.observations
    ok = _finite(obs.T_K, obs.p_Pa) & (obs.p_Pa > 0) if len(obs) else np.zeros(0, dtype=bool)
    styles = _source_styles(obs.source_id[ok].tolist()) if len(obs) else {}
    labelled: set = set()

    # left panel: log p(T), everything
    _draw_points(ax, obs, styles, ok, 1.0, labelled)
    _draw_curves(ax, data.curves, 1.0, True, labelled)
    _draw_fixed(ax, data.fixed_points, 1.0, labelled)
    _draw_flagged(ax, data.flagged, 1.0, labelled, annotate=True)
    ax.set_yscale("log")
    ylim = _limits([obs.p_Pa[ok]] + [np.array([f.p_Pa]) for f in data.fixed_points], log=True)
    if ylim:
        ax.set_ylim(*ylim)
    xlim = _limits([obs.T_K[ok]] + [np.array([f.T_K]) for f in data.fixed_points], log=False)
    if xlim:
        ax.set_xlim(*xlim)
    ax.set_xlabel("T [K]")
    ax.set_ylabel("p [Pa] (log scale)")
    ax.set_title("phase boundaries", fontsize=9)
    ax.grid(True, which="major", alpha=0.3)

    # right panel: melting curves on a linear axis [MPa]
    melt = ok & (obs.boundary == "solid-liquid") if len(obs) else ok
    m_curves = [c for c in data.curves if c.boundary == "solid-liquid"]
    m_fixed = [f for f in data.fixed_points
               if f.kind == "triple" and "liquid" in f.phases.split(",")]
    m_flag = [f for f in data.flagged if f.boundary == "solid-liquid"]
    if melt.any() or m_curves:
        mlab: set = set(labelled)
        _draw_points(ax_m, obs, styles, melt, 1e6, mlab)
        _draw_curves(ax_m, m_curves, 1e6, False, mlab)
        _draw_fixed(ax_m, m_fixed, 1e6, mlab)
        _draw_flagged(ax_m, m_flag, 1e6, mlab, annotate=False)
        labelled |= mlab
        ylim = _limits([obs.p_Pa[melt] / 1e6] + [np.array([f.p_Pa / 1e6]) for f in m_fixed],
                       log=False)
        if ylim:
            ax_m.set_ylim(*ylim)
        ax_m.set_xlabel("T [K]")
        ax_m.set_ylabel("p [MPa] (linear)")
        ax_m.grid(True, alpha=0.3)
    else:
        ax_m.text(0.5, 0.5, "no melting data", ha="center", va="center",
                  transform=ax_m.transAxes, color="#666666")
        ax_m.set_xticks([])
        ax_m.set_yticks([])
    ax_m.set_title("melting curve(s)", fontsize=9)

    fig.suptitle(data.title, fontsize=11)
    handles, labels = [], []
    for a in (ax, ax_m):
        for h, lab in zip(*a.get_legend_handles_labels()):
            if lab not in labels:
                handles.append(h)
                labels.append(lab)
    if handles:
        fig.legend(handles, labels, loc="lower center", ncol=min(4, len(labels)),
                   fontsize=7, frameon=False, bbox_to_anchor=(0.5, 0.0))
    for i, note in enumerate(data.notes[:3]):
        fig.text(0.005, 0.995 - 0.04 * i, note, fontsize=6.5, va="top", color="#555555")
    return fig


def figure_png(fig: Figure, dpi: int = 90) -> bytes:
    """The figure rendered as PNG bytes."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()
