"""The report's figures as drawn before pipeline/report/svgkit.py (matplotlib figures written
by its SVG backend, hover titles added with ElementTree), kept verbatim from
pipeline/report/{plots,deviation,svg,labels}.py as the yardstick of
benchmarks/report_figure.py. Not used by the product.

``draw(data)`` gives (phase SVG, deviation SVG or None) of a
:class:`pipeline.report.plots.PhaseDiagramData`, as ``pipeline.report.figures`` drew them.
"""

from __future__ import annotations


def draw(data) -> tuple[str, str | None]:
    from former_svg.deviation import deviation_figure
    from former_svg.plots import phase_diagram
    from former_svg.svg import figure_svg

    phase = figure_svg(phase_diagram(data), prefix="a-", figure="phase",
                       fluid_id=data.fluid_id, label="")
    dev = deviation_figure(data)
    return phase, (None if dev is None else figure_svg(dev, prefix="b-", figure="deviation",
                                                       fluid_id=data.fluid_id, label=""))
