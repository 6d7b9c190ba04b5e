"""Per-fluid figures of the nightly report: data in, matplotlib figures out (no I/O, no store).

:func:`phase_diagram` draws one fluid on two panels:

* left, log p against T: every pressure observation, one marker and colour per source, in
  layers: samples of evaluated equations (sources of kind standard or evaluated, dense, drawn
  small and rasterised) at the bottom, then the fitted curves, then literature data, then
  measured data on top; stated triple and critical points; flagged observations (fit outliers,
  points named by failing checks) circled in red and numbered, the numbers explained in the
  report's table beside the figure (no other text in the plot);
* right, the melting curve(s) on a linear pressure axis [MPa], one colour per solid phase.

A file diagnosed with a unit mix-up (``data.unit-mixup``) is drawn at its corrected position
with hollow markers, so it neither hides among nor stretches the axes away from the other data.
Uncertainty bands are not drawn on the log axis, where a k = 2 band is thinner than the line:
they are in the deviation plots (:mod:`pipeline.report.deviation`).

Figures are built with :class:`matplotlib.figure.Figure` directly (no pyplot state); every
measured point carries a hover text (source, file, row, T, p) that :mod:`pipeline.report.svg`
writes as an SVG ``<title>``: artists with titles get a gid listed in ``fig.fl_titles``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from former_svg.labels import place_numbers

if TYPE_CHECKING:   # matplotlib is imported only when a figure is drawn
    from matplotlib.figure import Figure

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

    def scatter_kw(self) -> dict:
        if self.equation:   # dense smooth samples: small, muted, no edge, under everything
            return {"marker": self.marker, "s": self.size, "color": self.colour, "alpha": 0.6,
                    "linewidths": 0.0, "zorder": self.layer, "rasterized": True}
        return {"marker": self.marker, "s": self.size, "color": self.colour, "alpha": 0.95,
                "edgecolors": "#111111", "linewidths": 0.45, "zorder": self.layer}


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


class Titles:
    """Hover texts of a figure: gid -> one text per drawn point, in drawing order."""

    def __init__(self):
        self.by_gid: dict[str, list[str]] = {}

    def add(self, artist, texts: list[str], kind: str) -> None:
        gid = f"fl-{kind}-{len(self.by_gid)}"
        artist.set_gid(gid)
        self.by_gid[gid] = texts


# -- drawing -----------------------------------------------------------------------------------
def draw_points(ax, obs: Observations, styles, mask: np.ndarray, x: np.ndarray, y: np.ndarray,
                titles: Titles, legend: dict, extra: list[str] | None = None) -> None:
    """Points selected by ``mask`` at (x, y), one artist per source and style variant:
    plain, drawn corrected (hollow), excluded by a decision (grey cross)."""
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
            kw = st.scatter_kw()
            label = source
            if variant == "corrected":   # hollow: the points below stay visible
                kw.update(facecolors="none", edgecolors=st.colour, linewidths=1.3, alpha=1.0,
                          zorder=3.3, rasterized=False)
                kw.pop("color")
                label = f"{source} (drawn corrected)"
            elif variant == "excluded":
                kw.update(marker="x", color="#777777", s=30, linewidths=1.0, zorder=3.5,
                          rasterized=False)
                kw.pop("edgecolors", None)
                label = "excluded by a curation decision"
            idx = np.flatnonzero(sel)
            artist = ax.scatter(x[idx], y[idx], **kw)
            if label not in legend:
                legend[label] = artist
            if not kw.get("rasterized"):
                titles.add(artist, [obs.hover(i, extra[i] if extra else "") for i in idx], "pts")


def draw_flags(ax, obs: Observations, mask: np.ndarray, x: np.ndarray, y: np.ndarray,
               titles: Titles, legend: dict) -> dict:
    """Red circles around the flagged points of ``mask``; returns where each flag group's
    number goes (data coordinates of its middle point) and the panel's other points, for
    :func:`finish` to place the numbers."""
    sel = mask & (obs.flag > 0) & _finite(x, y)
    if not sel.any():
        return {}
    idx = np.flatnonzero(sel)
    # rings under the measured points (which stay visible) and over the fitted curves
    ring = ax.scatter(x[idx], y[idx], s=80, facecolors="none", edgecolors=FLAG_COLOUR,
                      linewidths=1.1, zorder=3.35)
    titles.add(ring, [obs.hover(i) for i in idx], "flag")
    legend.setdefault("flagged (numbers: see the table)", ring)
    anchors = {}
    for n in sorted(set(int(f) for f in obs.flag[idx])):
        pts = idx[obs.flag[idx] == n]
        mid = pts[np.argsort(x[pts], kind="stable")[len(pts) // 2]]
        anchors[n] = (float(x[mid]), float(y[mid]))
    drawn = mask & _finite(x, y)
    anchors["points"] = np.column_stack([x[drawn], y[drawn]])
    return anchors


def draw_fixed(ax, points: Sequence[FixedPointMark], scale: float, titles: Titles,
               legend: dict) -> None:
    for fp in points:
        if not (math.isfinite(fp.T_K) and math.isfinite(fp.p_Pa)):
            continue
        critical = fp.kind == "critical"
        name = "critical point" if critical else "triple point"
        artist = ax.scatter([fp.T_K], [fp.p_Pa / scale], marker="*" if critical else "^",
                            s=150 if critical else 60, color="#f2c200" if critical else "#2e8b57",
                            edgecolors="black", linewidths=0.7, zorder=5)
        u = (f"u(T) = {fp.u_T_K:.2g} K, u(p) = {fp.u_p_Pa:.2g} Pa (k = 1)"
             if math.isfinite(fp.u_T_K) and math.isfinite(fp.u_p_Pa) else "")
        titles.add(artist, [f"{fp.kind} point {fp.phases} ({fp.source_id})\nT = {fp.T_K:.7g} K, "
                            f"p = {fp.p_Pa:.7g} Pa\n{u}".rstrip()], "fixed")
        legend.setdefault(name, artist)


def curve_grid(spec: CurveSpec, n: int = 160) -> tuple[np.ndarray, np.ndarray]:
    """T grid over the curve's range and the curve's values (NaN where undefined)."""
    lo, hi = float(spec.curve.T_min_K), float(spec.curve.T_max_K)
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return np.zeros(0), np.zeros(0)
    T = np.linspace(lo, hi, n)
    with np.errstate(all="ignore"):
        return T, np.asarray(spec.curve.value(T), dtype=float)


def draw_curves(ax, curves: Sequence[CurveSpec], scale: float, log: bool, phases: Sequence[str],
                legend: dict) -> None:
    for spec in curves:
        T, value = curve_grid(spec)
        ok = _finite(T, value) & ((value > 0) if log else True) if len(T) else np.zeros(0, bool)
        if not ok.any():
            continue
        colour = curve_colour(spec.boundary, spec.solid_phase, phases)
        (line,) = ax.plot(T[ok], value[ok] / scale, color=colour, linewidth=1.3, zorder=2)
        legend.setdefault(f"{spec.name} (fit)", line)


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
    """``10⁵`` for 1e5: a log axis label in plain text (no mathtext parse, ~15 % of the
    drawing time of a figure)."""
    if not (value > 0 and math.isfinite(value)):
        return ""
    k = math.log10(value)
    return "10" + str(int(round(k))).translate(_SUPERSCRIPT) if abs(k - round(k)) < 1e-9 else ""


def style_axes(ax, *, title: str, xlabel: str | None, ylabel: str | None, log: bool = False,
               nbins: int | None = None, label_pad_pt: tuple[float, float] = (22.0, 40.0)
               ) -> None:
    """Titles, labels and ticks with fixed positions: matplotlib then skips measuring every
    tick label of every panel to place them (half the drawing time of a small figure)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullLocator
    from matplotlib.transforms import ScaledTranslation

    ax.set_title(title, fontsize=8.5, y=1.0, pad=4.0)
    fig = ax.figure
    if xlabel:
        ax.set_xlabel(xlabel, fontsize=8.0)
        ax.xaxis.set_label_coords(0.5, 0.0, transform=ax.transAxes + ScaledTranslation(
            0, -label_pad_pt[0] / 72, fig.dpi_scale_trans))
        ax.xaxis.label.set_va("top")
    if ylabel:
        ax.set_ylabel(ylabel, fontsize=8.0)
        ax.yaxis.set_label_coords(0.0, 0.5, transform=ax.transAxes + ScaledTranslation(
            -label_pad_pt[1] / 72, 0, fig.dpi_scale_trans))
        ax.yaxis.label.set_va("bottom")
    if log:
        ax.yaxis.set_major_locator(LogLocator(base=10.0, numticks=8))
        ax.yaxis.set_major_formatter(FuncFormatter(decade_label))
        ax.yaxis.set_minor_locator(NullLocator())
    elif nbins:
        ax.yaxis.set_major_locator(MaxNLocator(nbins))
    if nbins:
        ax.xaxis.set_major_locator(MaxNLocator(nbins))
    ax.tick_params(labelsize=7.0, length=3.0, pad=2.0)
    ax.grid(True, which="major", alpha=0.3)


LEGEND_FONT = 7.0          # [pt]
LEGEND_ROW_IN = 0.16       # height of a legend row [in]


def legend_columns(labels: Sequence[str], width_in: float) -> int:
    """As many legend columns as fit the figure width (labels measured at 0.56 em a char)."""
    widest = max((len(t) for t in labels), default=1) * LEGEND_FONT * 0.56 + 28.0   # [pt]
    return max(1, min(4, int(width_in * 72 * 0.96 // widest)))


def finish(fig: Figure, legend: dict, numbers: Sequence[tuple[Any, dict]], *, axes_in: float,
           top_in: float = 0.32, axis_label_in: float = 0.52, **adjust) -> None:
    """Size the figure for its legend (below the panels, never over them), then place the
    flag numbers (their positions need the final layout) and draw the legend."""
    width = fig.get_figwidth()
    ncol = legend_columns(list(legend), width)
    rows = -(-len(legend) // ncol) if legend else 0
    bottom_in = axis_label_in + rows * LEGEND_ROW_IN + 0.08
    height = axes_in + top_in + bottom_in
    fig.set_size_inches(width, height)
    fig.subplots_adjust(top=1 - top_in / height, bottom=bottom_in / height, **adjust)
    for ax, anchors in numbers:
        if anchors:
            anchors = dict(anchors)
            points = anchors.pop("points", None)
            place_numbers(ax, anchors, colour=FLAG_COLOUR, points=points)
    if legend:
        fig.legend(list(legend.values()), list(legend.keys()), loc="lower center", ncol=ncol,
                   fontsize=LEGEND_FONT, frameon=False, bbox_to_anchor=(0.5, 0.0),
                   handletextpad=0.4, columnspacing=1.2, borderaxespad=0.3)


def phase_diagram(data: PhaseDiagramData, *, width_in: float = 8.4,
                  axes_in: float = 3.0) -> Figure:
    """The phase diagram of one fluid (see the module docstring); ``fig.fl_titles`` holds the
    hover texts (gid -> texts)."""
    from matplotlib.figure import Figure   # lazy: a report that draws nothing never imports it

    fig = Figure(figsize=(width_in, axes_in + 1.5), dpi=72)
    ax, ax_m = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.55, 1.0]})
    obs = data.observations
    ok = _finite(obs.T_K, obs.p_Pa) & (obs.p_Pa > 0) if len(obs) else np.zeros(0, dtype=bool)
    styles = source_styles(obs.source_id[ok].tolist(), obs.source_kind[ok].tolist())
    phases = solid_phases(data)
    titles, legend = Titles(), {}

    # left panel: log p(T), every boundary
    ylim = _limits([obs.p_Pa[ok]] + [np.array([f.p_Pa]) for f in data.fixed_points], log=True)
    xlim = _limits([obs.T_K[ok]] + [np.array([f.T_K]) for f in data.fixed_points], log=False)
    ax.set_yscale("log")
    if ylim:
        ax.set_ylim(*ylim)
    if xlim:
        ax.set_xlim(*xlim)
    draw_points(ax, obs, styles, ok, obs.T_K, obs.p_Pa, titles, legend)
    draw_curves(ax, data.curves, 1.0, True, phases, legend)
    draw_fixed(ax, data.fixed_points, 1.0, titles, legend)
    numbers = [(ax, draw_flags(ax, obs, ok, obs.T_K, obs.p_Pa, titles, legend))]
    style_axes(ax, title="phase boundaries", xlabel="T [K]", ylabel="p [Pa] (log scale)",
               log=True, nbins=7, label_pad_pt=(16.0, 30.0))

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
        if m_xlim:
            ax_m.set_xlim(*m_xlim)
        if m_ylim:
            ax_m.set_ylim(*m_ylim)
        draw_points(ax_m, obs, styles, melt, obs.T_K, p_m, titles, legend)
        draw_curves(ax_m, m_curves, 1e6, False, phases, legend)
        draw_fixed(ax_m, m_fixed, 1e6, titles, legend)
        numbers.append((ax_m, draw_flags(ax_m, obs, melt, obs.T_K, p_m, titles, legend)))
        style_axes(ax_m, title="melting curve(s)", xlabel="T [K]",
                   ylabel="p [MPa] (linear)", nbins=6, label_pad_pt=(16.0, 30.0))
    else:
        ax_m.text(0.5, 0.5, "no melting data", ha="center", va="center",
                  transform=ax_m.transAxes, color="#666666", fontsize=8.5)
        ax_m.set_xticks([])
        ax_m.set_yticks([])
        ax_m.set_title("melting curve(s)", fontsize=8.5, y=1.0, pad=4.0)
    finish(fig, legend, numbers, axes_in=axes_in, left=0.085, right=0.985, wspace=0.28)
    fig.fl_titles = titles.by_gid
    return fig
