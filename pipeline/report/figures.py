"""The figures of one fluid as the report embeds them: phase diagram and deviation plots as
inline SVG, and the flag groups their numbers refer to (cached together, as JSON).

:func:`draw_all` draws many fluids: in this process, or in worker processes when
``FLUIDLEDGER_REPORT_WORKERS`` asks for them and there are enough fluids to pay for starting
the workers (``spawn``: each worker imports numpy and parts of matplotlib, about a second; a
fluid's figures take about 5-10 ms, :mod:`pipeline.report.svgkit`). The SVG text does not
depend on the process that drew it (numbers written to fixed decimals, no dates, no random
ids), so the figures are the same bytes either way (``tests/report/test_report_views.py``).
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from typing import Callable, Iterable

from pipeline.report.plots import FlagGroup, PhaseDiagramData


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
    # imported here: matplotlib (markers, ticks, font widths) is loaded only by a report that
    # draws (start-up of the rest)
    from pipeline.report.deviation import deviation_figure
    from pipeline.report.plots import phase_diagram
    from pipeline.report.svg import figure_svg

    phase = figure_svg(phase_diagram(data), prefix=_prefix(data.fluid_id, "ph"), figure="phase",
                       fluid_id=data.fluid_id, label=f"phase diagram of {data.title}")
    dev_fig = deviation_figure(data)
    deviation = None if dev_fig is None else figure_svg(
        dev_fig, prefix=_prefix(data.fluid_id, "dv"), figure="deviation",
        fluid_id=data.fluid_id, label=f"deviation plots of {data.title}")
    return FluidFigures(phase, deviation, [g.asdict() for g in data.flags])


#: Environment variable setting the number of drawing processes (1: draw in this process).
WORKERS_ENV = "FLUIDLEDGER_REPORT_WORKERS"
#: Fewest fluids to draw for which worker processes are started (when asked for).
PARALLEL_MIN_FLUIDS = 24


def worker_count(n_fluids: int, workers: int | None = None) -> int:
    """Drawing processes for ``n_fluids``: ``workers``, else ``$FLUIDLEDGER_REPORT_WORKERS``
    from :data:`PARALLEL_MIN_FLUIDS` fluids on, else 1 (this process).

    One process is the default because it was measured faster on a shared 2-CPU machine: a
    cold report of 200 fluids took 25.1 s in one process and 31.0 s with two workers (load
    average 12-13; ``python benchmarks/report.py --cold``; with the former matplotlib figures
    150.7 s and 203.7 s at load 13): a fluid's figures cost less than a worker's start-up. A
    machine with idle CPUs may set the variable; the figures are the same bytes either way."""
    if workers is None:
        text = os.environ.get(WORKERS_ENV, "").strip()
        if text:
            try:
                workers = int(text)
            except ValueError:
                from pipeline.errors import FluidLedgerError
                raise FluidLedgerError(f"{WORKERS_ENV} must be a whole number of processes, "
                                       f"got {text!r}") from None
        if n_fluids < PARALLEL_MIN_FLUIDS or workers is None:
            workers = 1
    return max(1, min(workers, n_fluids))


def _draw_one(data: PhaseDiagramData) -> tuple[str, bytes]:
    return data.fluid_id, render_figures(data).to_json()


def draw_all(batches: Iterable[list[PhaseDiagramData]], n_fluids: int, *,
             workers: int | None = None,
             done: Callable[[str, FluidFigures], None] = lambda f, fig: None) -> int:
    """Draw every fluid of ``batches`` (lists of figure inputs, read lazily so that only one
    batch of observations is in memory), calling ``done(fluid, figures)`` for each; returns
    the number of processes used. Fluids without pressure data or curves are skipped."""
    n = worker_count(n_fluids, workers)
    if n == 1:
        for batch in batches:
            for data in batch:
                if len(data.observations) or data.curves:
                    done(data.fluid_id, render_figures(data))
        return 1
    from concurrent.futures import ProcessPoolExecutor
    from multiprocessing import get_context

    # spawn, not fork: the parent holds a DuckDB connection and its threads
    with ProcessPoolExecutor(max_workers=n, mp_context=get_context("spawn")) as pool:
        for batch in batches:
            todo = [d for d in batch if len(d.observations) or d.curves]
            for fid, blob in pool.map(_draw_one, todo, chunksize=max(1, len(todo) // (4 * n))):
                done(fid, FluidFigures.from_json(blob))
    return n


__all__ = ["FlagGroup", "FluidFigures", "draw_all", "render_figures", "worker_count"]
