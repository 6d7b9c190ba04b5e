"""Flag numbers beside their points, never over each other nor outside their panel.

A greedy placement in display coordinates: each number tries a ring of positions around its
point (then wider rings, with a leader line), and takes the first whose box stays inside the
panel, overlaps no number already placed and covers no other numbered point. A number that
finds no free position is left out of that panel (the table beside the figure still lists it,
and the point keeps its circle and hover text).
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from pipeline.report.svgkit import ASCENT, DESCENT, Panel, num, text, text_width

#: Offsets [pt] of a number's lower-left corner from its point, tried in order (y up).
OFFSETS = ((7.0, 6.0), (7.0, -15.0), (-15.0, 6.0), (-15.0, -15.0), (-4.0, 10.0),
           (-4.0, -19.0), (10.0, -4.5), (-19.0, -4.5))
RINGS = (1.0, 1.9, 2.9)
FONT = 7.5                 # [pt]
KEEP_CLEAR = 5.0           # radius around other numbered points a box must not cover [pt]
SHRINK = 4.0               # gap between a leader line and its point [pt]


def _overlaps(a, b) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def _covers(box, point, radius: float) -> bool:
    x = min(max(point[0], box[0]), box[2])
    y = min(max(point[1], box[1]), box[3])
    return math.hypot(point[0] - x, point[1] - y) < radius


def place_numbers(panel: Panel, anchors: Mapping[int, tuple[float, float]], *, colour: str,
                  fontsize: float = FONT, points=None) -> dict[int, tuple[float, float] | None]:
    """Draw each number of ``anchors`` (number -> data coordinates) beside its point on
    ``panel``; returns number -> offset used [pt, y up] (None when no free position was found).

    ``points`` (an (n, 2) array in data coordinates, optional) are the other drawn points: a
    position covering none of them is preferred; failing that, one covering some is taken
    (never one over another number). Call it once the panel's frame and limits are final.
    """
    # display coordinates with y up (the offsets' convention): y_up = -y_svg
    inside = (panel.x0 + 1, -(panel.y0 + panel.h) + 1, panel.x0 + panel.w - 1, -panel.y0 - 1)
    pixels = {}
    for n, xy in anchors.items():
        px, py = float(panel.X(xy[0])), -float(panel.Y(xy[1]))
        if math.isfinite(px) and math.isfinite(py) and \
                inside[0] <= px <= inside[2] and inside[1] <= py <= inside[3]:
            pixels[n] = (px, py)
    crowd = []
    if points is not None and len(points):
        pts = np.asarray(points, dtype=float)
        X, Y = panel.X(pts[:, 0]), -panel.Y(pts[:, 1])
        keep = (X >= inside[0]) & (X <= inside[2]) & (Y >= inside[1]) & (Y <= inside[3])
        crowd = list(zip(X[keep].tolist(), Y[keep].tolist()))
    placed: list[tuple[float, float, float, float]] = []
    out: dict[int, tuple[float, float] | None] = {n: None for n in anchors}
    for n in sorted(pixels):
        px, py = pixels[n]
        w = 0.62 * fontsize * len(str(n)) + 5.0
        h = fontsize + 4.0
        others = [p for m, p in pixels.items() if m != n]
        choice, ring = None, RINGS[0]
        for avoid in (crowd, []):          # first clear of every point, then of numbers only
            for ring in RINGS:
                for dx, dy in OFFSETS:
                    ox, oy = dx * ring, dy * ring
                    box = (px + ox, py + oy, px + ox + w, py + oy + h)
                    if not (inside[0] <= box[0] and box[2] <= inside[2] and
                            inside[1] <= box[1] and box[3] <= inside[3]):
                        continue
                    if any(_overlaps(box, b) for b in placed):
                        continue
                    if any(_covers(box, p, KEEP_CLEAR) for p in others):
                        continue
                    if any(_covers(box, p, 3.0) for p in avoid):
                        continue
                    choice = (ox, oy, box)
                    break
                if choice is not None:
                    break
            if choice is not None:
                break
        if choice is None:
            continue
        ox, oy, box = choice
        placed.append(box)
        out[n] = (ox, oy)
        panel.over.append(number_svg(n, px, -py, ox, oy, ring > 1.0, colour, fontsize))
    return out


def number_svg(n: int, x: float, y: float, ox: float, oy: float, leader: bool, colour: str,
               fontsize: float) -> str:
    """Number ``n`` in a white rounded box whose text starts (2.5, 2.0) pt beyond the offset
    (ox, oy) [pt, y up] from its point at (x, y) [SVG]; with a leader line to the point."""
    tx = x + ox + 2.5
    bottom = y - oy - 2.0                      # of the text's box (y down)
    base = bottom - DESCENT * fontsize
    tw = text_width(str(n), fontsize, bold=True)
    pad = 0.12 * fontsize
    top = base - ASCENT * fontsize
    out = [f'<g class="flag-number" data-number="{n}">']
    if leader:                                 # from the box's centre, stopping short
        cx, cy = tx + tw / 2, (top + bottom) / 2
        dx, dy = x - cx, y - cy
        dist = math.hypot(dx, dy)
        if dist > SHRINK:
            ex, ey = x - dx / dist * SHRINK, y - dy / dist * SHRINK
            out.append(f'<path d="M{num(cx)} {num(cy)}L{num(ex)} {num(ey)}" stroke="{colour}" '
                       f'stroke-width="0.6"/>')
    out.append(f'<rect x="{num(tx - pad)}" y="{num(top - pad)}" width="{num(tw + 2 * pad)}" '
               f'height="{num(bottom - top + 2 * pad)}" rx="{num(pad)}" fill="#ffffff" '
               f'fill-opacity="0.92" stroke="{colour}" stroke-width="0.6"/>')
    out.append(text(tx, base, str(n), fontsize, colour=colour, bold=True))
    out.append("</g>")
    return "".join(out)
