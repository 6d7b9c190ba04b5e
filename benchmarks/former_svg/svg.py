"""A matplotlib figure as inline SVG for the report: hover texts as ``<title>``, unique ids.

The figure is written by matplotlib's SVG backend (text as ``<text>``, so it stays small and
sharp; artists marked ``rasterized`` — the dense samples of evaluated equations — become one
embedded PNG). Then, with ElementTree:

* every point of an artist listed in ``fig.fl_titles`` (gid -> texts, in drawing order) gets a
  ``<title>`` child: the browser shows it when the pointer rests on the point, no script and no
  network needed;
* every id (and every reference to one) gets a per-figure prefix, so many figures can share a
  page; the fixed ``svg.hashsalt`` keeps the output identical for identical input;
* the root loses its fixed size (CSS sizes it; the viewBox keeps the proportions) and gains
  ``data-*`` attributes naming the figure.
"""

from __future__ import annotations

import io
import re
import xml.etree.ElementTree as ET
from typing import Mapping

import matplotlib
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure

SVG_NS = "http://www.w3.org/2000/svg"
XLINK_NS = "http://www.w3.org/1999/xlink"
#: Resolution of the rasterised layers [dots per inch].
RASTER_DPI = 144
_RC = {"svg.fonttype": "none", "svg.hashsalt": "fluidledger", "svg.image_inline": True,
       "font.family": ["DejaVu Sans", "sans-serif"]}
_URL = re.compile(r"url\(#([^)]+)\)")

ET.register_namespace("", SVG_NS)
ET.register_namespace("xlink", XLINK_NS)


def _prefix_ids(root: ET.Element, prefix: str) -> None:
    href = f"{{{XLINK_NS}}}href"
    for el in root.iter():
        if "id" in el.attrib:
            el.set("id", prefix + el.get("id"))
        ref = el.get(href)
        if ref and ref.startswith("#"):
            el.set(href, "#" + prefix + ref[1:])
        for key, value in list(el.attrib.items()):
            if "url(#" in value:
                el.set(key, _URL.sub(lambda m: f"url(#{prefix}{m.group(1)})", value))


def _add_titles(root: ET.Element, titles: Mapping[str, list[str]]) -> int:
    """Give each point of the listed artists its title; returns how many got one."""
    done = 0
    use = f"{{{SVG_NS}}}use"
    for group in root.iter(f"{{{SVG_NS}}}g"):
        texts = titles.get(group.get("id", ""))
        if texts is None:
            continue
        points = [el for el in group.iter(use)]
        if len(points) != len(texts):   # matplotlib skipped a point: leave the artist untitled
            continue
        for el, text in zip(points, texts):
            title = ET.Element(f"{{{SVG_NS}}}title")
            title.text = text
            el.append(title)
            done += 1
        group.set("class", "fl-points")
    return done


def figure_svg(fig: Figure, *, prefix: str, figure: str, fluid_id: str, label: str) -> str:
    """``fig`` as an inline ``<svg>`` element (see the module docstring)."""
    FigureCanvasSVG(fig)
    buf = io.StringIO()
    with matplotlib.rc_context(_RC):
        fig.savefig(buf, format="svg", dpi=RASTER_DPI, metadata={"Date": None, "Creator": None})
    root = ET.fromstring(buf.getvalue())
    for meta in root.findall(f"{{{SVG_NS}}}metadata"):
        root.remove(meta)
    _add_titles(root, getattr(fig, "fl_titles", {}))
    _prefix_ids(root, prefix)
    width, height = root.attrib.pop("width", ""), root.attrib.pop("height", "")
    root.set("class", "plot")
    root.set("role", "img")
    root.set("aria-label", label)
    root.set("data-figure", figure)
    root.set("data-fluid", fluid_id)
    root.set("data-size", f"{width} {height}")
    return ET.tostring(root, encoding="unicode")
