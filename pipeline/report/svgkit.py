"""A small SVG drawing kit for the report's figures: panels, markers, ticks, legend, text.

The report's figures used to be matplotlib figures written by its SVG backend: about 0.23 s
per fluid, most of it in building axes and tick objects and in the backend's writer, which
made the first report of 1,000 fluids take about 4 minutes. The figures are simple (points,
lines, bands, a few texts on linear or log axes), so they are written here as SVG text
directly, with what matplotlib knows where it matters: its marker shapes
(:class:`matplotlib.markers.MarkerStyle`), its tick locators (the same tick positions as
before) and the advance widths of its DejaVu Sans font (for the legend's and the flag
numbers' layout). matplotlib is imported on first use only.

Units: a figure is measured in points (1/72 in), the SVG user unit, y pointing down. Every
number is written with two decimals (0.01 pt), so the same input gives the same bytes in any
process. Ids are written with a placeholder (:data:`ID`) that :meth:`Canvas.svg` replaces by
the figure's prefix, so many figures can share a page.
"""

from __future__ import annotations

import functools
import html
import math
import re
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np

#: Stands for the figure's id prefix until :meth:`Canvas.svg` writes it.
ID = "\x00"
FONT_FAMILY = "DejaVu Sans, Bitstream Vera Sans, Arial, sans-serif"
#: Fractions of the font size: the height of digits above the baseline and the depth below.
ASCENT, DESCENT = 0.76, 0.24
SPINE_WIDTH = 0.8
TICK_LENGTH, TICK_PAD, TICK_FONT = 3.0, 2.0, 7.0
GRID = 'stroke="#b0b0b0" stroke-opacity="0.3" stroke-width="0.8"'
TITLE_FONT, TITLE_PAD, LABEL_FONT = 8.5, 4.0, 8.0
LEGEND_FONT = 7.0
LEGEND_ROW = 11.52         # height a legend row takes in the figure's layout [pt]
LEGEND_PITCH = 10.6        # distance between legend rows as drawn [pt] (matplotlib's, at 7 pt)
LEGEND_HANDLE = 14.0       # width of a legend handle [pt] (2 em)
LEGEND_PAD = 4.9           # legend's distance from the figure's bottom edge [pt]


def esc(text: str) -> str:
    """``text`` as SVG character data (markup escaped; NUL, never valid XML, dropped)."""
    return html.escape(str(text).replace(ID, ""), quote=False)


def attr(text: str) -> str:
    return html.escape(str(text).replace(ID, ""), quote=True)


def num(v: float) -> str:
    """A coordinate with two decimals and no trailing zeros ('12.5', '-3', '0')."""
    s = f"{v:.2f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


_ZEROS = re.compile(r"\.?0+$|(?<=\.\d)0$", re.MULTILINE)
_NEG_ZERO = re.compile(r"^-0$", re.MULTILINE)


def nums(values) -> list[str]:
    """:func:`num` of each value of an array, formatted in one pass (the figures write
    thousands of coordinates; one Python call per number was a third of the drawing time)."""
    v = np.asarray(values, dtype=float).ravel()
    if not len(v):
        return []
    text = ("%.2f\n" * len(v)) % tuple(v.tolist())
    return _NEG_ZERO.sub("0", _ZEROS.sub("", text[:-1])).split("\n")


def pairs(X, Y, sep: str = " ") -> list[str]:
    """'x y' of each point, formatted as by :func:`num`."""
    return [a + sep + b for a, b in zip(nums(X), nums(Y))]


# -- text --------------------------------------------------------------------------------------
@functools.cache
def _advances() -> dict[str, float]:
    """Advance width of each printable character of DejaVu Sans [em] (matplotlib's font)."""
    from matplotlib import font_manager, ft2font

    no_hinting = (ft2font.LoadFlags.NO_HINTING if hasattr(ft2font, "LoadFlags")
                  else ft2font.LOAD_NO_HINTING)        # matplotlib < 3.10
    font = ft2font.FT2Font(font_manager.findfont(
        font_manager.FontProperties(family="DejaVu Sans")))
    font.set_size(1000.0, 72)
    chars = [chr(c) for c in range(32, 127)] + list("\u2212\u00b1\u00b7\u2070\u00b9\u00b2"
                                                     "\u00b3\u2074\u2075\u2076\u2077\u2078"
                                                     "\u2079\u207b\u2080\u2081\u2082\u2083")
    out = {}
    for c in chars:
        glyph = font.load_char(ord(c), flags=no_hinting)
        out[c] = glyph.linearHoriAdvance / 65536 / 1000.0
    return out


def text_width(text: str, size: float, bold: bool = False) -> float:
    """Width of ``text`` set in DejaVu Sans at ``size`` [pt] (bold: about 10 % wider)."""
    adv = _advances()
    w = sum(adv.get(c, 0.62) for c in text) * size
    return w * 1.1 if bold else w


def text(x: float, y: float, content: str, size: float, *, anchor: str = "start",
         colour: str = "#000000", bold: bool = False, rotate: bool = False) -> str:
    """A ``<text>`` with its baseline at ``y`` (rotated a quarter turn to read upwards)."""
    rot = f' transform="rotate(-90 {num(x)} {num(y)})"' if rotate else ""
    weight = ' font-weight="bold"' if bold else ""
    fill = f' fill="{colour}"' if colour != "#000000" else ""
    return (f'<text x="{num(x)}" y="{num(y)}" font-size="{num(size)}" '
            f'text-anchor="{anchor}"{weight}{fill}{rot}>{esc(content)}</text>')


# -- markers -----------------------------------------------------------------------------------
@functools.cache
def _marker(marker: str) -> tuple[tuple[tuple[str, tuple[float, ...]], ...], bool]:
    """Segments of matplotlib's ``marker`` at size 1 (y up) and whether it is filled."""
    from matplotlib.markers import MarkerStyle
    from matplotlib.path import Path

    style = MarkerStyle(marker)
    path = style.get_path().transformed(style.get_transform())
    names = {Path.MOVETO: "M", Path.LINETO: "L", Path.CURVE3: "Q", Path.CURVE4: "C",
             Path.CLOSEPOLY: "Z"}
    segs = tuple((names[int(code)], tuple(float(v) for v in verts))
                 for verts, code in path.iter_segments(simplify=False, curves=True))
    return segs, bool(style.is_filled())


def marker_filled(marker: str) -> bool:
    return _marker(marker)[1]


@functools.cache
def marker_path(marker: str, size: float, relative: bool = False) -> str:
    """SVG path data of ``marker`` ``size`` pt wide (matplotlib's markersize), centred on the
    origin; ``relative``: in relative commands, to follow an ``M x y`` at the point."""
    out, cur, start = [], (0.0, 0.0), (0.0, 0.0)
    for cmd, verts in _marker(marker)[0]:
        if cmd == "Z":
            out.append("z")
            cur = start
            continue
        pts = [(verts[i] * size, -verts[i + 1] * size) for i in range(0, len(verts), 2)]
        if relative:
            rel = [(x - cur[0], y - cur[1]) for x, y in pts]
            out.append(cmd.lower() + " ".join(f"{num(x)} {num(y)}" for x, y in rel))
        else:
            out.append(cmd + " ".join(f"{num(x)} {num(y)}" for x, y in pts))
        cur = pts[-1]
        if cmd == "M":
            start = cur
    return "".join(out)


def marker_size(s: float) -> float:
    """matplotlib's scatter size ``s`` [pt²] as a marker width [pt]."""
    return math.sqrt(s)


@dataclass(frozen=True)
class PointStyle:
    """How a set of points is drawn: marker, size ``s`` [pt²], fill and edge."""

    marker: str
    s: float
    fill: str | None          # None: hollow
    edge: str | None          # None: no edge
    edge_width: float = 0.0   # [pt]
    alpha: float = 1.0

    def paint(self) -> str:
        filled = marker_filled(self.marker)
        fill = self.fill if (self.fill and filled) else "none"
        edge = self.edge if filled else (self.edge or self.fill)
        parts = [f'fill="{fill}"']
        if edge and self.edge_width > 0:
            join = "round" if self.marker in ("o", "x") else "miter"
            parts.append(f'stroke="{edge}" stroke-width="{num(self.edge_width)}" '
                         f'stroke-linejoin="{join}"')
        if self.alpha < 1.0:
            parts.append(f'fill-opacity="{self.alpha:g}" stroke-opacity="{self.alpha:g}"')
        return " ".join(parts)


# -- ticks -------------------------------------------------------------------------------------
@functools.cache
def _locator(kind: str, n: int):
    from matplotlib.ticker import LogLocator, MaxNLocator

    return LogLocator(base=10.0, numticks=n) if kind == "log" else MaxNLocator(n)


def ticks(lo: float, hi: float, *, log: bool, nbins: int) -> np.ndarray:
    """Major tick positions in [lo, hi]: matplotlib's ``MaxNLocator(nbins)``, or on a log axis
    ``LogLocator(numticks=nbins)``."""
    values = np.asarray(_locator("log" if log else "lin", nbins).tick_values(lo, hi), float)
    span = abs(hi - lo)
    if log:
        keep = (values >= lo * (1 - 1e-9)) & (values <= hi * (1 + 1e-9))
    else:
        keep = (values >= lo - 1e-9 * span) & (values <= hi + 1e-9 * span)
    return values[keep]


def tick_labels(values: np.ndarray) -> list[str]:
    """Plain labels for linear-axis ticks: as many decimals as the step needs, a minus sign,
    and scientific notation for very large or very small numbers."""
    if not len(values):
        return []
    step = float(np.min(np.diff(values))) if len(values) > 1 else abs(float(values[0])) or 1.0
    big = float(np.max(np.abs(values)))
    if big >= 1e6 or (big > 0 and big < 1e-4):
        digits = max(0, min(6, int(math.ceil(-math.log10(step / 10 ** math.floor(
            math.log10(big))) - 1e-9))))
        labels = [f"{v:.{digits}e}" for v in values]
    else:
        digits = 0 if step <= 0 else max(0, int(math.ceil(-math.log10(step) - 1e-9)))
        if step > 0 and abs(round(step * 10 ** digits) - step * 10 ** digits) > 1e-6:
            digits += 1
        labels = [f"{v:.{digits}f}" for v in values]
    return [(t[1:] if float(t) == 0.0 and t.startswith("-") else t).replace("-", "\u2212")
            for t in labels]


# -- panels ------------------------------------------------------------------------------------
@dataclass
class Panel:
    """One set of axes: a frame [pt] and the data limits mapped onto it."""

    x0: float
    y0: float                 # top edge
    w: float
    h: float
    xlim: tuple[float, float] = (0.0, 1.0)
    ylim: tuple[float, float] = (0.0, 1.0)
    ylog: bool = False
    items: list[tuple[float, int, Callable[[], str]]] = field(default_factory=list)
    over: list[str] = field(default_factory=list)      # above the frame (flag numbers)
    frame: list[str] = field(default_factory=list)     # title, ticks, labels
    grid: list[str] = field(default_factory=list)
    title: str = ""
    xlabel: str = ""
    ylabel: str = ""
    _axes: dict | None = None
    _empty: str | None = None

    def X(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        lo, hi = self.xlim
        return self.x0 + (x - lo) / ((hi - lo) or 1.0) * self.w

    def Y(self, y) -> np.ndarray:
        y = np.asarray(y, dtype=float)
        lo, hi = self.ylim
        if self.ylog:
            with np.errstate(all="ignore"):
                y, lo, hi = np.log10(y), math.log10(lo), math.log10(hi)
        return self.y0 + self.h - (y - lo) / ((hi - lo) or 1.0) * self.h

    def add(self, z: float, draw: Callable[[], str]) -> None:
        """Draw what ``draw()`` returns inside the frame at layer ``z`` (higher is on top; ties
        keep their order); it is called when the figure is written, once the frame is final."""
        self.items.append((z, len(self.items), draw))

    # -- data layers ---------------------------------------------------------------------------
    def points(self, canvas: "Canvas", x, y, style: PointStyle, z: float, *, layer: str,
               label: str, titles: Sequence[str] | None = None) -> int:
        """One marker per point; with ``titles``, each a ``<use>`` carrying its hover text
        (``class="fl-points"``); without, all merged into one path (a dense layer)."""
        size = marker_size(style.s)
        head = (f'<g data-layer="{layer}" data-label="{attr(label)}" {style.paint()}')
        x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        if titles is None:
            rel = marker_path(style.marker, size, relative=True)

            def merged() -> str:
                X, Y = self.X(x), self.Y(y)
                ok = np.isfinite(X) & np.isfinite(Y)
                d = "".join(f"M{xy}{rel}" for xy in pairs(X[ok], Y[ok]))
                return f'{head}><path d="{d}"/></g>'

            self.add(z, merged)
            return len(x)
        ref = canvas.marker_def(style.marker, size)
        gid = canvas.next_id("pts")

        def titled() -> str:
            X, Y = self.X(x), self.Y(y)
            ok = np.isfinite(X) & np.isfinite(Y)
            keep = np.flatnonzero(ok)
            uses = [f'<use xlink:href="#{ref}" x="{a}" y="{b}"><title>{esc(titles[i])}'
                    f'</title></use>' for a, b, i in zip(nums(X[keep]), nums(Y[keep]), keep)]
            return f'{head} id="{gid}" class="fl-points">{"".join(uses)}</g>'

        self.add(z, titled)
        return len(x)

    def line(self, x, y, colour: str, width: float, z: float, *, label: str = "") -> None:
        def draw() -> str:
            X, Y = self.X(x), self.Y(y)
            ok = np.isfinite(X) & np.isfinite(Y)
            if ok.sum() < 2:
                return ""
            d = "M" + "L".join(pairs(X[ok], Y[ok]))
            return (f'<path data-layer="curve" data-label="{attr(label)}" d="{d}" '
                    f'fill="none" stroke="{colour}" stroke-width="{num(width)}" '
                    f'stroke-linejoin="round"/>')

        self.add(z, draw)

    def hline(self, y: float, colour: str, width: float, z: float) -> None:
        self.add(z, lambda: f'<path data-layer="zero" d="M{num(self.x0)} '
                            f'{num(float(self.Y(y)))}h{num(self.w)}" stroke="{colour}" '
                            f'stroke-width="{num(width)}"/>')

    def band(self, x, lo, hi, colour: str, alpha: float, z: float, *, label: str) -> None:
        def draw() -> str:
            X, L, H = self.X(x), self.Y(lo), self.Y(hi)
            pts = list(zip(X, H)) + list(zip(X[::-1], L[::-1]))
            d = "M" + "L".join(pairs(*np.array(pts, dtype=float).T)) + "Z"
            return (f'<path data-layer="band" data-label="{attr(label)}" d="{d}" '
                    f'fill="{colour}" fill-opacity="{alpha:g}"/>')

        self.add(z, draw)

    # -- frame ---------------------------------------------------------------------------------
    def axes(self, *, title: str, xlabel: str | None, ylabel: str | None, nbins_x: int,
             nbins_y: int, label_pad: tuple[float, float],
             ylabels: Callable[[np.ndarray], list[str]] | None = None) -> None:
        """Title, grid, ticks with labels and axis labels (at fixed distances [pt]), drawn
        when the figure is written."""
        self.title, self.xlabel, self.ylabel = title, xlabel or "", ylabel or ""
        self._axes = dict(title=title, xlabel=xlabel, ylabel=ylabel, nbins_x=nbins_x,
                          nbins_y=nbins_y, label_pad=label_pad, ylabels=ylabels)

    def _draw_axes(self, *, title: str, xlabel: str | None, ylabel: str | None, nbins_x: int,
                   nbins_y: int, label_pad: tuple[float, float],
                   ylabels: Callable[[np.ndarray], list[str]] | None = None) -> None:
        x1, y1 = self.x0 + self.w, self.y0 + self.h
        xt = ticks(*self.xlim, log=False, nbins=nbins_x)
        yt = ticks(*self.ylim, log=self.ylog, nbins=nbins_y)
        out = []
        X, Y = self.X(xt), self.Y(yt)
        Xs, Ys = nums(X), nums(Y)
        top, bottom, left, right = num(self.y0), num(y1), num(self.x0), num(x1)
        for a in Xs:
            self.grid.append(f"M{a} {top}V{bottom}")
        for b in Ys:
            self.grid.append(f"M{left} {b}H{right}")
        marks = "".join(f"M{a} {bottom}v{num(TICK_LENGTH)}" for a in Xs) + \
            "".join(f"M{left} {b}h{num(-TICK_LENGTH)}" for b in Ys)
        if marks:
            out.append(f'<path d="{marks}" stroke="#000000" stroke-width="0.8"/>')
        base = y1 + TICK_LENGTH + TICK_PAD + ASCENT * TICK_FONT
        for a, t in zip(X, tick_labels(xt)):
            out.append(text(a, base, t, TICK_FONT, anchor="middle"))
        right = self.x0 - TICK_LENGTH - TICK_PAD
        for b, t in zip(Y, (ylabels or tick_labels)(yt)):
            if t:
                out.append(text(right, b + 0.36 * TICK_FONT, t, TICK_FONT, anchor="end"))
        out.append(text(self.x0 + self.w / 2, self.y0 - TITLE_PAD, title,
                        TITLE_FONT, anchor="middle"))
        if xlabel:
            out.append(text(self.x0 + self.w / 2, y1 + label_pad[0] + ASCENT * LABEL_FONT,
                            xlabel, LABEL_FONT, anchor="middle"))
        if ylabel:
            x = self.x0 - label_pad[1] - DESCENT * LABEL_FONT
            out.append(text(x, self.y0 + self.h / 2, ylabel, LABEL_FONT, anchor="middle",
                            rotate=True))
        self.frame.extend(out)

    def empty(self, title: str, message: str) -> None:
        """A panel with nothing to show: its title and a grey message, no ticks."""
        self.title, self._empty = title, message

    def _draw_empty(self, title: str, message: str) -> None:
        self.frame.append(text(self.x0 + self.w / 2, self.y0 - TITLE_PAD,
                               title, TITLE_FONT, anchor="middle"))
        self.frame.append(text(self.x0 + self.w / 2, self.y0 + self.h / 2 + 0.36 * TITLE_FONT,
                               message, TITLE_FONT, anchor="middle", colour="#666666"))

    def render(self, index: int) -> str:
        clip = f"{ID}clip{index}"
        self.frame, self.grid = [], []
        if self._axes:
            self._draw_axes(**self._axes)
        elif self._empty is not None:
            self._draw_empty(self.title, self._empty)
        body = "".join(draw() for _, _, draw in sorted(self.items, key=lambda t: t[:2]))
        grid = (f'<path data-layer="grid" d="{"".join(self.grid)}" {GRID}/>'
                if self.grid else "")
        rect = f'x="{num(self.x0)}" y="{num(self.y0)}" width="{num(self.w)}" ' \
               f'height="{num(self.h)}"'
        return (f'<g class="panel" data-title="{attr(self.title)}">'
                f'<clipPath id="{clip}"><rect {rect}/></clipPath>{grid}'
                f'<g clip-path="url(#{clip})">{body}</g>'
                f'<rect {rect} fill="none" stroke="#000000" stroke-width="{SPINE_WIDTH}"/>'
                f'{"".join(self.frame)}{"".join(self.over)}</g>')


def grid_cells(width: float, height: float, nrows: int, ncols: int, *, left: float,
               right: float, bottom: float, top: float, wspace: float, hspace: float = 0.2,
               width_ratios: Sequence[float] | None = None) -> list[tuple[float, float, float,
                                                                          float]]:
    """Frames (x0, top, w, h) [pt] of a grid of panels, row by row, as matplotlib's
    ``subplots_adjust`` and ``GridSpec`` place them (fractions of the figure)."""
    tot_w, tot_h = (right - left) * width, (top - bottom) * height
    cell_h = tot_h / (nrows + hspace * (nrows - 1))
    cell_w = tot_w / (ncols + wspace * (ncols - 1))
    ratios = list(width_ratios or [1.0] * ncols)
    widths = [r / sum(ratios) * cell_w * ncols for r in ratios]
    out = []
    for r in range(nrows):
        y = (1 - top) * height + r * cell_h * (1 + hspace)
        x = left * width
        for c in range(ncols):
            out.append((x, y, widths[c], cell_h))
            x += widths[c] + wspace * cell_w
    return out


# -- the figure --------------------------------------------------------------------------------
@dataclass
class Handle:
    """A legend entry's symbol: a point style, a line (colour, width) or a filled patch."""

    kind: str                       # marker | line | patch
    style: PointStyle | None = None
    colour: str = "#000000"
    width: float = 1.0
    alpha: float = 1.0


class Canvas:
    """A figure: panels, a legend below them and the marker definitions they share."""

    def __init__(self, width: float, height: float):
        self.width, self.height = width, height
        self.panels: list[Panel] = []
        self.defs: dict[tuple[str, float], str] = {}
        self.legend: dict[str, Handle] = {}
        self.ncol = 1
        self._ids = 0

    def next_id(self, kind: str) -> str:
        self._ids += 1
        return f"{ID}{kind}{self._ids}"

    def marker_def(self, marker: str, size: float) -> str:
        key = (marker, round(size, 2))
        if key not in self.defs:
            self.defs[key] = f"{ID}m{len(self.defs)}"
        return self.defs[key]

    def panel(self, frame: tuple[float, float, float, float]) -> Panel:
        p = Panel(*frame)
        self.panels.append(p)
        return p

    def _legend_svg(self) -> str:
        labels = list(self.legend)
        if not labels:
            return ""
        ncol = max(1, min(self.ncol, len(labels)))
        rows, large = divmod(len(labels), ncol)     # column-major, the first columns longer
        cols, start = [], 0
        for c in range(ncol):
            n = rows + (c < large)
            cols.append(labels[start:start + n])
            start += n
        cols = [c for c in cols if c]
        rows = len(cols[0])
        pad = 0.4 * LEGEND_FONT
        widths = [LEGEND_HANDLE + pad + max(text_width(t, LEGEND_FONT) for t in c)
                  for c in cols]
        gap = 1.2 * LEGEND_FONT
        x = (self.width - sum(widths) - gap * (len(cols) - 1)) / 2
        out = ['<g class="legend">']
        for c, col in enumerate(cols):
            for r, label in enumerate(col):
                yc = self.height - LEGEND_PAD - (rows - r - 0.5) * LEGEND_PITCH
                out.append(self._handle(x, yc, self.legend[label]))
                out.append(text(x + LEGEND_HANDLE + pad, yc + 0.36 * LEGEND_FONT, label,
                                LEGEND_FONT))
            x += widths[c] + gap
        out.append("</g>")
        return "".join(out)

    def _handle(self, x: float, yc: float, h: Handle) -> str:
        if h.kind == "line":
            return (f'<path d="M{num(x)} {num(yc)}h{num(LEGEND_HANDLE)}" stroke="{h.colour}" '
                    f'stroke-width="{num(h.width)}"/>')
        if h.kind == "patch":
            hh = 0.7 * LEGEND_FONT
            return (f'<rect x="{num(x)}" y="{num(yc - hh / 2)}" width="{num(LEGEND_HANDLE)}" '
                    f'height="{num(hh)}" fill="{h.colour}" fill-opacity="{h.alpha:g}"/>')
        st = h.style
        ref = self.marker_def(st.marker, marker_size(st.s))
        return (f'<use xlink:href="#{ref}" x="{num(x + LEGEND_HANDLE / 2)}" y="{num(yc)}" '
                f'{st.paint()}/>')

    def svg(self, prefix: str, attrs: dict[str, str]) -> str:
        """The figure as one ``<svg>`` element, ids prefixed with ``prefix``."""
        body = "".join(p.render(i) for i, p in enumerate(self.panels))
        legend = self._legend_svg()      # may add marker definitions
        defs = "".join(f'<path id="{ref}" d="{marker_path(m, s)}"/>'
                       for (m, s), ref in self.defs.items())
        head = " ".join(f'{k}="{attr(v)}"' for k, v in attrs.items())
        out = (f'<svg xmlns="http://www.w3.org/2000/svg" '
               f'xmlns:xlink="http://www.w3.org/1999/xlink" version="1.1" '
               f'viewBox="0 0 {num(self.width)} {num(self.height)}" {head} '
               f'font-family="{FONT_FAMILY}"><defs>{defs}</defs>'
               f'<rect width="{num(self.width)}" height="{num(self.height)}" fill="#ffffff"/>'
               f'{body}{legend}</svg>')
        return out.replace(ID, prefix)
