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

#: Offsets [pt] of a number's lower-left corner from its point, tried in order.
OFFSETS = ((7.0, 6.0), (7.0, -15.0), (-15.0, 6.0), (-15.0, -15.0), (-4.0, 10.0),
           (-4.0, -19.0), (10.0, -4.5), (-19.0, -4.5))
RINGS = (1.0, 1.9, 2.9)
FONT = 7.5                 # [pt]
KEEP_CLEAR = 5.0           # radius around other numbered points a box must not cover [pt]


def _overlaps(a, b) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def _covers(box, point, radius: float) -> bool:
    x = min(max(point[0], box[0]), box[2])
    y = min(max(point[1], box[1]), box[3])
    return math.hypot(point[0] - x, point[1] - y) < radius


def place_numbers(ax, anchors: Mapping[int, tuple[float, float]], *, colour: str,
                  fontsize: float = FONT, points=None) -> dict[int, tuple[float, float] | None]:
    """Annotate ``ax`` with each number of ``anchors`` (number -> data coordinates) beside its
    point; returns number -> offset used [pt] (None when no free position was found).

    ``points`` (an (n, 2) array in data coordinates, optional) are the other drawn points: a
    position covering none of them is preferred; failing that, one covering some is taken
    (never one over another number). Call it once the panel's limits and the figure's size
    and margins are final.
    """
    fig = ax.figure
    scale = fig.dpi / 72.0
    frame = ax.get_window_extent()
    inside = (frame.x0 + 1, frame.y0 + 1, frame.x1 - 1, frame.y1 - 1)
    pixels = {}
    for n, xy in anchors.items():
        px, py = ax.transData.transform(xy)
        if math.isfinite(px) and math.isfinite(py) and \
                inside[0] <= px <= inside[2] and inside[1] <= py <= inside[3]:
            pixels[n] = (px, py)
    crowd = []
    if points is not None and len(points):
        xy = ax.transData.transform(points)
        keep = (xy[:, 0] >= inside[0]) & (xy[:, 0] <= inside[2]) & \
            (xy[:, 1] >= inside[1]) & (xy[:, 1] <= inside[3])
        crowd = [tuple(p) for p in xy[keep]]
    placed: list[tuple[float, float, float, float]] = []
    out: dict[int, tuple[float, float] | None] = {n: None for n in anchors}
    for n in sorted(pixels):
        px, py = pixels[n]
        w = (0.62 * fontsize * len(str(n)) + 5.0) * scale
        h = (fontsize + 4.0) * scale
        others = [p for m, p in pixels.items() if m != n]
        choice, ring = None, RINGS[0]
        for avoid in (crowd, []):          # first clear of every point, then of numbers only
            for ring in RINGS:
                for dx, dy in OFFSETS:
                    ox, oy = dx * ring * scale, dy * ring * scale
                    box = (px + ox, py + oy, px + ox + w, py + oy + h)
                    if not (inside[0] <= box[0] and box[2] <= inside[2] and
                            inside[1] <= box[1] and box[3] <= inside[3]):
                        continue
                    if any(_overlaps(box, b) for b in placed):
                        continue
                    if any(_covers(box, p, KEEP_CLEAR * scale) for p in others):
                        continue
                    if any(_covers(box, p, 3.0 * scale) for p in avoid):
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
        out[n] = (ox / scale, oy / scale)
        arrow = ({"arrowstyle": "-", "color": colour, "linewidth": 0.6, "shrinkA": 0,
                  "shrinkB": 4} if ring > 1.0 else None)
        ax.annotate(str(n), xy=anchors[n], xytext=(ox / scale + 2.5, oy / scale + 2.0),
                    textcoords="offset points", fontsize=fontsize, color=colour,
                    fontweight="bold", ha="left", va="bottom", zorder=7, arrowprops=arrow,
                    annotation_clip=False,
                    bbox={"boxstyle": "round,pad=0.12", "facecolor": "white",
                          "edgecolor": colour, "linewidth": 0.6, "alpha": 0.92})
    return out
