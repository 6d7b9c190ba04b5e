"""The figures of one fluid as the report embeds them: phase diagram and deviation plots as
inline SVG, and the flag groups their numbers refer to (cached together, as JSON)."""

from __future__ import annotations

import json
from dataclasses import dataclass, field

from pipeline.report.deviation import deviation_figure
from pipeline.report.plots import FlagGroup, PhaseDiagramData, phase_diagram
from pipeline.report.svg import figure_svg


@dataclass(frozen=True)
class FluidFigures:
    """What the report shows of one fluid's data: two SVG figures and the flag table rows."""

    phase_svg: str
    deviation_svg: str | None = None
    flags: list[dict] = field(default_factory=list)     # FlagGroup.asdict() rows

    def to_json(self) -> bytes:
        return json.dumps({"phase": self.phase_svg, "deviation": self.deviation_svg,
                           "flags": self.flags}, sort_keys=True).encode("utf-8")

    @classmethod
    def from_json(cls, data: bytes) -> "FluidFigures":
        doc = json.loads(data.decode("utf-8"))
        return cls(doc["phase"], doc.get("deviation"), doc.get("flags", []))


def _prefix(fluid_id: str, figure: str) -> str:
    return "f" + "".join(c if c.isalnum() else "_" for c in fluid_id) + f"-{figure}-"


def render_figures(data: PhaseDiagramData) -> FluidFigures:
    """Draw and serialise the phase diagram and the deviation plots of one fluid."""
    phase = figure_svg(phase_diagram(data), prefix=_prefix(data.fluid_id, "ph"), figure="phase",
                       fluid_id=data.fluid_id, label=f"phase diagram of {data.title}")
    dev_fig = deviation_figure(data)
    deviation = None if dev_fig is None else figure_svg(
        dev_fig, prefix=_prefix(data.fluid_id, "dv"), figure="deviation",
        fluid_id=data.fluid_id, label=f"deviation plots of {data.title}")
    return FluidFigures(phase, deviation, [g.asdict() for g in data.flags])


__all__ = ["FlagGroup", "FluidFigures", "render_figures"]
