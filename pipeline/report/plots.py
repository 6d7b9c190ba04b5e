"""Per-fluid figures of the nightly report: data in, SVG figures out (no I/O, no store).

:func:`phase_diagram` draws one fluid on two panels:

* left, log p against T: every pressure observation, one marker and colour per source, in
  layers: samples of evaluated equations (sources of kind standard or evaluated, dense, drawn
  small, one merged path per source) at the bottom, then the fitted curves, then literature
  data, then measured data on top; stated triple and critical points; flagged observations
  (fit outliers, points named by failing checks) circled in red and numbered, the numbers
  explained in the report's table beside the figure (no other text in the plot);
* right, the melting curve(s) on a linear pressure axis [MPa], one colour per solid phase.

A file diagnosed with a unit mix-up (``data.unit-mixup``) is drawn at its corrected position
with hollow markers, so it neither hides among nor stretches the axes away from the other data.
Uncertainty bands are not drawn on the log axis, where a k = 2 band is thinner than the line:
they are in the deviation plots (:mod:`pipeline.report.deviation`).

Figures are drawn as SVG text with :mod:`pipeline.report.svgkit` (matplotlib's marker
shapes, tick positions and font metrics, not its figures: a fluid's two figures cost a few
milliseconds instead of a quarter of a second). Every measured point is one ``<use>`` carrying
its hover text (source, file, row, T, p) as an SVG ``<title>``; the dense samples of evaluated
equations, which carry none, are merged into one path per source.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from pipeline.report.labels import place_numbers
from pipeline.report.svgkit import (
    LEGEND_FONT,
    LEGEND_ROW,
    Canvas,
    Handle,
    Panel,
    PointStyle,
    grid_cells,
)

#: Coverage factor of the error bars and bands drawn.
K_COVERAGE = 2.0
#: Source kinds whose values are samples of evaluated equations (the bottom layer).
EQUATION_KINDS = ("standard", "evaluated")
#: Layer (zorder) of a source's points by kind: measured data on top.
KIND_LAYER = {"standard": 1.2, "evaluated": 1.2, "estimate": 3.0, "literature": 3.2,
              "measurement": 3.4}
MARKERS = ("o", "s", "D", "^", "v", "P", "X", "<", ">", "h", "p", "d")
STRONG = ("#d62728", "#1f77b4", "#ff7f0e", "#2ca02c", "#9467bd", "#8c564b", "#e377c2",
          "#17becf", "#bcbd22", "#393b79", "#637939", "#8c6d31")
MUTED = ("#8497b0", "#a4a4a4", "#a98fc0", "#8fb996", "#c9a27e", "#9ab7c9")
#: Curve colours: vapour pressure, sublimation, then one per solid phase of the melting curves.
CURVE_COLOURS = {"liquid-vapour": "#222222", "solid-vapour": "#1b6ca8"}
PHASE_COLOURS = ("#b2182b", "#e08214", "#7b3294", "#1a9850", "#c51b7d", "#4d4d4d")
BOUNDARY_NAME = {"liquid-vapour": "vapour pressure", "solid-vapour": "sublimation",
                 "solid-liquid": "melting", "solid-solid": "solid-solid"}
FLAG_COLOUR = "#d62728"


@dataclass(frozen=True)
class Observations:
    """Pressure observations of one fluid as arrays (all the same length).

    ``T_K``, ``p_Pa`` are where a point is drawn: the stored values, or the corrected ones
    where a unit mix-up was diagnosed (``correction`` names it; ``T_stored_K``, ``p_stored_Pa``
    keep the stored values). ``flag`` is the number of the point's flag group (0: none);
    ``excluded_by`` the decision that left it out of the fit ('' when used). [K], [Pa]
    """

    T_K: np.ndarray
    p_Pa: np.ndarray
    source_id: np.ndarray
    boundary: np.ndarray
    obs_id: np.ndarray
    solid_phase: np.ndarray
    source_kind: np.ndarray
    file_path: np.ndarray
    row_number: np.ndarray
    T_stored_K: np.ndarray
    p_stored_Pa: np.ndarray
    correction: np.ndarray
    flag: np.ndarray
    excluded_by: np.ndarray

    @classmethod
    def build(cls, T_K, p_Pa, source_id, boundary, obs_id=None, **columns) -> "Observations":
        """Observations from the essential columns; the others get neutral defaults."""
        T, p = np.asarray(T_K, dtype=float), np.asarray(p_Pa, dtype=float)
        n = len(T)
        text = lambda v: np.full(n, v, dtype=object)  # noqa: E731
        defaults = {"solid_phase": text(""), "source_kind": text("measurement"),
                    "file_path": text(""), "row_number": np.arange(1, n + 1),
                    "T_stored_K": T, "p_stored_Pa": p, "correction": text(""),
                    "flag": np.zeros(n, dtype=np.int64), "excluded_by": text("")}
        cols = {k: np.asarray(columns.get(k, v)) for k, v in defaults.items()}
        for k in ("solid_phase", "source_kind", "file_path", "correction", "excluded_by"):
            cols[k] = cols[k].astype(object)
        ids = np.arange(1, n + 1) if obs_id is None else np.asarray(obs_id, dtype=np.int64)
        return cls(T, p, np.asarray(source_id, dtype=object), np.asarray(boundary, dtype=object),
                   ids, **cols)

    @classmethod
    def empty(cls) -> "Observations":
        return cls.build(np.zeros(0), np.zeros(0), np.zeros(0, dtype=object),
                         np.zeros(0, dtype=object))

    def __len__(self) -> int:
        return len(self.T_K)

    def hover(self, i: int, extra: str = "") -> str:
        """The hover text of point ``i``: source, file, row, T and p (and what was done)."""
        lines = [f"{self.source_id[i]} ({self.source_kind[i]})",
                 f"{self.file_path[i]} row {int(self.row_number[i])} (obs {int(self.obs_id[i])})",
                 f"T = {self.T_stored_K[i]:.6g} K, p = {self.p_stored_Pa[i]:.6g} Pa"]
        if self.correction[i]:
            lines.append(f"drawn corrected ({self.correction[i]}): T = {self.T_K[i]:.6g} K, "
                         f"p = {self.p_Pa[i]:.6g} Pa")
        if self.excluded_by[i]:
            lines.append(f"excluded from the fit by {self.excluded_by[i]}")
        if self.flag[i]:
            lines.append(f"flag {int(self.flag[i])} (see the table beside the figure)")
        if extra:
            lines.append(extra)
        return "\n".join(lines)


@dataclass(frozen=True)
class CurveSpec:
    """A fitted curve to draw: ``curve`` has ``value(T)``, ``u(T)``, ``T_min_K``, ``T_max_K``."""

    boundary: str
    solid_phase: str
    curve: Any
    label: str = ""

    @property
    def name(self) -> str:
        return self.label or (BOUNDARY_NAME.get(self.boundary, self.boundary)
                              + (f" {self.solid_phase}" if self.solid_phase else ""))


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
class FlagGroup:
    """Flagged points of one file that share their reasons: one number in the figures."""

    number: int
    file_path: str
    source_id: str
    reasons: tuple[str, ...]        # check ids (failing), and "fit outlier" when only that
    obs_ids: tuple[int, ...]
    rows: tuple[int, ...]
    T_min_K: float
    T_max_K: float
    n_outliers: int = 0             # of them, flagged as outliers by the fit
    correction: str = ""            # unit mix-up the file is drawn corrected for

    def asdict(self) -> dict:
        return {"number": self.number, "file": self.file_path, "source": self.source_id,
                "reasons": list(self.reasons), "obs_ids": list(self.obs_ids),
                "rows": list(self.rows), "T_min_K": self.T_min_K, "T_max_K": self.T_max_K,
                "n_outliers": self.n_outliers, "correction": self.correction}


@dataclass(frozen=True)
class PhaseDiagramData:
    """Everything the figures of one fluid draw."""

    fluid_id: str
    title: str
    observations: Observations
    curves: Sequence[CurveSpec] = ()
    fixed_points: Sequence[FixedPointMark] = ()
    flags: Sequence[FlagGroup] = field(default_factory=tuple)


# -- styles ------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SourceStyle:
    marker: str
    colour: str
    size: float
    layer: float
    equation: bool

    def variant(self, name: str) -> tuple[PointStyle, float, bool]:
        """(style, layer, titled) of the source's points drawn plain, drawn corrected (hollow:
        the points below stay visible) or excluded by a decision (grey cross)."""
        if name == "corrected":
            return PointStyle(self.marker, self.size, None, self.colour, 1.3, 1.0), 3.3, True
        alpha = 0.6 if self.equation else 0.95
        if name == "excluded":
            return PointStyle("x", 30.0, "#777777", None, 1.0, alpha), 3.5, True
        if self.equation:   # dense smooth samples: small, muted, no edge, under everything
            return PointStyle(self.marker, self.size, self.colour, None, 0.0, alpha), \
                self.layer, False
        return PointStyle(self.marker, self.size, self.colour, "#111111", 0.45, alpha), \
            self.layer, True


def source_styles(sources: Sequence[str], kinds: Sequence[str]) -> dict[str, SourceStyle]:
    """One style per source: measured and literature sources get strong colours, samples of
    evaluated equations muted ones; markers cycle over all sources."""
    kind_of = dict(zip(sources, kinds))
    order = sorted(kind_of, key=lambda s: (kind_of[s] in EQUATION_KINDS, s))
    out, strong, muted = {}, 0, 0
    for i, s in enumerate(order):
        eq = kind_of[s] in EQUATION_KINDS
        colour = MUTED[muted % len(MUTED)] if eq else STRONG[strong % len(STRONG)]
        muted, strong = muted + eq, strong + (not eq)
        out[s] = SourceStyle(MARKERS[i % len(MARKERS)], colour, 9.0 if eq else 26.0,
                             KIND_LAYER.get(kind_of[s], 3.0), eq)
    return out


def curve_colour(boundary: str, solid_phase: str, phases: Sequence[str]) -> str:
    if boundary in CURVE_COLOURS:
        return CURVE_COLOURS[boundary]
    i = list(phases).index(solid_phase) if solid_phase in phases else 0
    return PHASE_COLOURS[i % len(PHASE_COLOURS)]


def _finite(*arrays) -> np.ndarray:
    mask = np.ones(len(arrays[0]), dtype=bool)
    for a in arrays:
        mask &= np.isfinite(np.asarray(a, dtype=float))
    return mask


def _limits(values: list[np.ndarray], log: bool) -> tuple[float, float] | None:
    v = (np.concatenate([np.asarray(a, dtype=float).ravel() for a in values]) if values
         else np.zeros(0))
    v = v[np.isfinite(v) & ((v > 0) if log else True)]
    if not len(v):
        return None
    lo, hi = float(v.min()), float(v.max())
    if log:
        return lo / 2.5, hi * 2.5
    pad = 0.05 * (hi - lo) or (abs(hi) * 0.1 or 1.0)
    return lo - pad, hi + pad


# -- drawing -----------------------------------------------------------------------------------
def draw_points(fig: Canvas, panel: Panel, obs: Observations, styles, mask: np.ndarray,
                x: np.ndarray, y: np.ndarray, legend: dict, extra: list[str] | None = None
                ) -> None:
    """Points selected by ``mask`` at (x, y), one layer per source and style variant: plain,
    drawn corrected (hollow), excluded by a decision (grey cross); every point but the dense
    equation samples carries its hover text."""
    for source, st in styles.items():
        base = mask & (obs.source_id == source)
        if not base.any():
            continue
        variants = (("plain", base & (obs.correction == "") & (obs.excluded_by == "")),
                    ("corrected", base & (obs.correction != "") & (obs.excluded_by == "")),
                    ("excluded", base & (obs.excluded_by != "")))
        for variant, sel in variants:
            if not sel.any():
                continue
            style, z, titled = st.variant(variant)
            label = {"plain": source, "corrected": f"{source} (drawn corrected)",
                     "excluded": "excluded by a curation decision"}[variant]
            idx = np.flatnonzero(sel)
            titles = ([obs.hover(i, extra[i] if extra else "") for i in idx] if titled
                      else None)
            panel.points(fig, x[idx], y[idx], style, z, label=label, titles=titles,
                         layer="points" if titled else "samples")
            legend.setdefault(label, Handle("marker", style))


RING = PointStyle("o", 80.0, None, FLAG_COLOUR, 1.1)


def draw_flags(fig: Canvas, panel: Panel, obs: Observations, mask: np.ndarray, x: np.ndarray,
               y: np.ndarray, legend: dict) -> dict:
    """Red circles around the flagged points of ``mask``; returns where each flag group's
    number goes (data coordinates of its middle point) and the panel's other points, for
    :func:`finish` to place the numbers."""
    sel = mask & (obs.flag > 0) & _finite(x, y)
    if not sel.any():
        return {}
    idx = np.flatnonzero(sel)
    # rings under the measured points (which stay visible) and over the fitted curves
    panel.points(fig, x[idx], y[idx], RING, 3.35, layer="flags", label="flagged",
                 titles=[obs.hover(i) for i in idx])
    legend.setdefault("flagged (numbers: see the table)", Handle("marker", RING))
    anchors = {}
    for n in sorted(set(int(f) for f in obs.flag[idx])):
        pts = idx[obs.flag[idx] == n]
        mid = pts[np.argsort(x[pts], kind="stable")[len(pts) // 2]]
        anchors[n] = (float(x[mid]), float(y[mid]))
    drawn = mask & _finite(x, y)
    anchors["points"] = np.column_stack([x[drawn], y[drawn]])
    return anchors


def draw_fixed(fig: Canvas, panel: Panel, points: Sequence[FixedPointMark], scale: float,
               legend: dict) -> None:
    for fp in points:
        if not (math.isfinite(fp.T_K) and math.isfinite(fp.p_Pa)):
            continue
        critical = fp.kind == "critical"
        name = "critical point" if critical else "triple point"
        style = PointStyle("*" if critical else "^", 150.0 if critical else 60.0,
                           "#f2c200" if critical else "#2e8b57", "#000000", 0.7)
        u = (f"u(T) = {fp.u_T_K:.2g} K, u(p) = {fp.u_p_Pa:.2g} Pa (k = 1)"
             if math.isfinite(fp.u_T_K) and math.isfinite(fp.u_p_Pa) else "")
        panel.points(fig, [fp.T_K], [fp.p_Pa / scale], style, 5.0, layer="fixed", label=name,
                     titles=[f"{fp.kind} point {fp.phases} ({fp.source_id})\nT = {fp.T_K:.7g} "
                             f"K, p = {fp.p_Pa:.7g} Pa\n{u}".rstrip()])
        legend.setdefault(name, Handle("marker", style))


def curve_grid(spec: CurveSpec, n: int = 160) -> tuple[np.ndarray, np.ndarray]:
    """T grid over the curve's range and the curve's values (NaN where undefined)."""
    lo, hi = float(spec.curve.T_min_K), float(spec.curve.T_max_K)
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return np.zeros(0), np.zeros(0)
    T = np.linspace(lo, hi, n)
    with np.errstate(all="ignore"):
        return T, np.asarray(spec.curve.value(T), dtype=float)


def draw_curves(panel: Panel, curves: Sequence[CurveSpec], scale: float, log: bool,
                phases: Sequence[str], legend: dict) -> list[np.ndarray]:
    """The fitted curves; returns their drawn values (for limits when there are no points)."""
    drawn = []
    for spec in curves:
        T, value = curve_grid(spec)
        ok = _finite(T, value) & ((value > 0) if log else True) if len(T) else np.zeros(0, bool)
        if not ok.any():
            continue
        colour = curve_colour(spec.boundary, spec.solid_phase, phases)
        panel.line(T[ok], value[ok] / scale, colour, 1.3, 2.0, label=f"{spec.name} (fit)")
        legend.setdefault(f"{spec.name} (fit)", Handle("line", colour=colour, width=1.3))
        drawn.append(np.column_stack([T[ok], value[ok] / scale]))
    return drawn


def solid_phases(data: PhaseDiagramData) -> list[str]:
    """The solid phases of the melting curves and data, in a stable order."""
    found = {c.solid_phase for c in data.curves if c.boundary == "solid-liquid"}
    obs = data.observations
    if len(obs):
        found |= set(obs.solid_phase[obs.boundary == "solid-liquid"].tolist())
    return sorted(found)


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076"
                                              "\u2077\u2078\u2079")


def decade_label(value: float, _pos=None) -> str:
    """``10⁵`` for 1e5: a log axis label in plain text ('' between decades)."""
    if not (value > 0 and math.isfinite(value)):
        return ""
    k = math.log10(value)
    return "10" + str(int(round(k))).translate(_SUPERSCRIPT) if abs(k - round(k)) < 1e-9 else ""


def set_limits(panel: Panel, xlim, ylim, curves: list[np.ndarray], log: bool) -> None:
    """The panel's limits; where the points gave none, the curves' (else a unit range)."""
    if (xlim is None or ylim is None) and curves:
        pts = np.concatenate(curves)
        xlim = xlim or _limits([pts[:, 0]], log=False)
        ylim = ylim or _limits([pts[:, 1]], log=log)
    panel.xlim = xlim or (0.0, 1.0)
    panel.ylim = ylim or ((1.0, 10.0) if log else (0.0, 1.0))
    panel.ylog = log


def legend_columns(labels: Sequence[str], width_in: float) -> int:
    """As many legend columns as fit the figure width (labels measured at 0.56 em a char)."""
    widest = max((len(t) for t in labels), default=1) * LEGEND_FONT * 0.56 + 28.0   # [pt]
    return max(1, min(4, int(width_in * 72 * 0.96 // widest)))


def finish(fig: Canvas, legend: dict, numbers: Sequence[tuple[Panel, dict]], *, axes_in: float,
           nrows: int, ncols: int, top_in: float = 0.32, axis_label_in: float = 0.52,
           **adjust) -> Canvas:
    """Size the figure for its legend (below the panels, never over them), place the panels,
    then the flag numbers (their positions need the final layout)."""
    width_in = fig.width / 72
    fig.ncol = legend_columns(list(legend), width_in)
    rows = -(-len(legend) // fig.ncol) if legend else 0
    bottom_in = axis_label_in + rows * LEGEND_ROW / 72 + 0.08
    height_in = axes_in + top_in + bottom_in
    fig.height = height_in * 72
    frames = grid_cells(fig.width, fig.height, nrows, ncols, top=1 - top_in / height_in,
                        bottom=bottom_in / height_in, **adjust)
    for panel, frame in zip(fig.panels, frames):
        panel.x0, panel.y0, panel.w, panel.h = frame
    fig.legend = dict(legend)
    for panel, anchors in numbers:
        if anchors:
            anchors = dict(anchors)
            points = anchors.pop("points", None)
            place_numbers(panel, anchors, colour=FLAG_COLOUR, points=points)
    return fig


def phase_diagram(data: PhaseDiagramData, *, width_in: float = 8.4,
                  axes_in: float = 3.0) -> Canvas:
    """The phase diagram of one fluid (see the module docstring), ready to be written as SVG
    (:func:`pipeline.report.svg.figure_svg`)."""
    fig = Canvas(width_in * 72, (axes_in + 1.5) * 72)
    ax, ax_m = fig.panel((0, 0, 1, 1)), fig.panel((0, 0, 1, 1))
    obs = data.observations
    ok = _finite(obs.T_K, obs.p_Pa) & (obs.p_Pa > 0) if len(obs) else np.zeros(0, dtype=bool)
    styles = source_styles(obs.source_id[ok].tolist(), obs.source_kind[ok].tolist())
    phases = solid_phases(data)
    legend: dict[str, Handle] = {}

    # left panel: log p(T), every boundary
    ylim = _limits([obs.p_Pa[ok]] + [np.array([f.p_Pa]) for f in data.fixed_points], log=True)
    xlim = _limits([obs.T_K[ok]] + [np.array([f.T_K]) for f in data.fixed_points], log=False)
    draw_points(fig, ax, obs, styles, ok, obs.T_K, obs.p_Pa, legend)
    lines = draw_curves(ax, data.curves, 1.0, True, phases, legend)
    set_limits(ax, xlim, ylim, lines, log=True)
    draw_fixed(fig, ax, data.fixed_points, 1.0, legend)
    numbers = [(ax, draw_flags(fig, ax, obs, ok, obs.T_K, obs.p_Pa, legend))]
    ax.axes(title="phase boundaries", xlabel="T [K]", ylabel="p [Pa] (log scale)", nbins_x=7,
            nbins_y=8, label_pad=(16.0, 30.0), ylabels=lambda v: [decade_label(t) for t in v])

    # right panel: melting curves on a linear axis [MPa], one colour per solid phase
    melt = ok & (obs.boundary == "solid-liquid") if len(obs) else ok
    m_curves = [c for c in data.curves if c.boundary == "solid-liquid"]
    m_fixed = [f for f in data.fixed_points
               if f.kind == "triple" and "liquid" in f.phases.split(",")]
    if melt.any() or m_curves:
        p_m = obs.p_Pa / 1e6
        m_xlim = _limits([obs.T_K[melt]] + [curve_grid(c)[0] for c in m_curves]
                         + [np.array([f.T_K]) for f in m_fixed], log=False)
        m_ylim = _limits([p_m[melt]] + [np.array([f.p_Pa / 1e6]) for f in m_fixed], log=False)
        draw_points(fig, ax_m, obs, styles, melt, obs.T_K, p_m, legend)
        m_lines = draw_curves(ax_m, m_curves, 1e6, False, phases, legend)
        set_limits(ax_m, m_xlim, m_ylim, m_lines, log=False)
        draw_fixed(fig, ax_m, m_fixed, 1e6, legend)
        numbers.append((ax_m, draw_flags(fig, ax_m, obs, melt, obs.T_K, p_m, legend)))
        ax_m.axes(title="melting curve(s)", xlabel="T [K]", ylabel="p [MPa] (linear)",
                  nbins_x=6, nbins_y=6, label_pad=(16.0, 30.0))
    else:
        ax_m.empty("melting curve(s)", "no melting data")
    return finish(fig, legend, numbers, axes_in=axes_in, nrows=1, ncols=2, left=0.085,
                  right=0.985, wspace=0.28, width_ratios=(1.55, 1.0))
