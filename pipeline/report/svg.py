"""A figure of the report as an inline ``<svg>`` element: hover texts as ``<title>``, unique ids.

The figures (:func:`pipeline.report.plots.phase_diagram`,
:func:`pipeline.report.deviation.deviation_figure`) are :class:`~pipeline.report.svgkit.Canvas`
objects that write their SVG text themselves (:mod:`pipeline.report.svgkit`):

* every point carrying a hover text is a ``<use>`` with a ``<title>`` child, inside a group of
  class ``fl-points``: the browser shows the title when the pointer rests on the point, no
  script and no network needed; the dense samples of evaluated equations are one merged path
  per source (they carry no hover text);
* every id (and every reference to one) carries a per-figure prefix, so many figures can share
  a page; nothing depends on the process or the time, so the same input gives the same bytes;
* the root has no fixed size (CSS sizes it; the viewBox keeps the proportions), and carries
  ``role="img"``, an ``aria-label`` and ``data-*`` attributes naming the figure.
"""

from __future__ import annotations

from pipeline.report.svgkit import Canvas, num

SVG_NS = "http://www.w3.org/2000/svg"
XLINK_NS = "http://www.w3.org/1999/xlink"
#: Version of the figures' SVG text; part of the figure cache's key through the drawing
#: code's digest (:data:`pipeline.report.views.FIGURE_CODE`), written into each figure.
FORMAT = "fl-svg-2"


def figure_svg(fig: Canvas, *, prefix: str, figure: str, fluid_id: str, label: str) -> str:
    """``fig`` as an inline ``<svg>`` element (see the module docstring)."""
    return fig.svg(prefix, {"class": "plot", "role": "img", "aria-label": label,
                            "data-figure": figure, "data-fluid": fluid_id,
                            "data-size": f"{num(fig.width)}pt {num(fig.height)}pt",
                            "data-format": FORMAT})
