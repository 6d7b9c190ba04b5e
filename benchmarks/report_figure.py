"""Report figures per fluid: time to draw a fluid's figures (phase diagram + deviation plots,
SVG with hover titles), the size they add to report.html, and peak memory (a ratio to a
yardstick, not a timing test).

Builds the demo store in a temporary directory (ingest, fit, check), then draws every demo
fluid's figures ``--repeat`` times and keeps the best time per fluid. The yardstick, drawn in
the same run (interleaved, so under the same load), is the figure the report had before
(benchmarks/former_figure.py, kept verbatim): one PNG phase diagram per fluid, about 0.28 s
on a quiet 2-core machine. Prints seconds per fluid and per figure stage, the ratio to the
yardstick, the SVG bytes per fluid and the peak memory of the drawing (tracemalloc) and of the
process (max RSS).

    python benchmarks/report_figure.py [--repeat N] [--store PATH]
"""

from __future__ import annotations

import argparse
import resource
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from pipeline.checks import load_fluid_data, run_checks  # noqa: E402
from pipeline.fitting.stage import run_fit  # noqa: E402
from pipeline.ingest.stage import run_ingest  # noqa: E402
from pipeline.report import content  # noqa: E402
from pipeline.report.deviation import deviation_figure  # noqa: E402
from pipeline.report.plots import phase_diagram  # noqa: E402
from pipeline.report.svg import figure_svg  # noqa: E402
from pipeline.store import open_store  # noqa: E402

RAW = Path(__file__).resolve().parents[1] / "raw"


def build(store: Path) -> None:
    with open_store(store) as s:
        run_ingest(s.con, [RAW])
        run_fit(s.con)
        run_checks(load_fluid_data(s.con), con=s.con)


def yardstick(data) -> float:
    """Seconds to draw the former figure of ``data`` (benchmarks/former_figure.py)."""
    import former_figure as old

    obs = data.observations
    flagged = [old.FlaggedPoint(int(obs.obs_id[i]), float(obs.T_K[i]), float(obs.p_Pa[i]),
                                str(obs.boundary[i]), "flagged")
               for i in range(len(obs)) if obs.flag[i]]
    former = old.PhaseDiagramData(
        data.fluid_id, data.title,
        old.Observations(obs.T_stored_K, obs.p_stored_Pa, obs.source_id, obs.boundary,
                         obs.obs_id),
        [old.CurveSpec(c.boundary, c.solid_phase, c.curve) for c in data.curves],
        [old.FixedPointMark(f.kind, f.phases, f.T_K, f.p_Pa, f.u_T_K, f.u_p_Pa, f.source_id)
         for f in data.fixed_points], flagged)
    t0 = time.perf_counter()
    old.figure_png(old.phase_diagram(former))
    return time.perf_counter() - t0


def draw(data) -> tuple[dict[str, float], int]:
    """Seconds per stage and SVG bytes of one fluid's figures."""
    t = {}
    t0 = time.perf_counter()
    phase = phase_diagram(data)
    t["phase: draw"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    svg_a = figure_svg(phase, prefix="a-", figure="phase", fluid_id=data.fluid_id, label="")
    t["phase: svg"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    dev = deviation_figure(data)
    t["deviation: draw"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    svg_b = figure_svg(dev, prefix="b-", figure="deviation", fluid_id=data.fluid_id,
                       label="") if dev is not None else ""
    t["deviation: svg"] = time.perf_counter() - t0
    return t, len(svg_a) + len(svg_b)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--store", type=Path, default=None,
                        help="an existing store (default: build the demo store)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        store = args.store or Path(tmp) / "demo.duckdb"
        if args.store is None:
            build(store)
        with open_store(store, read_only=True) as s:
            results = run_checks(load_fluid_data(s.con)).results
            sections = content.fluid_sections(s.con)
            flagged = content.flagged_from_results(results)
            fluids = list(sections)
            t0 = time.perf_counter()
            data = content.diagram_data(s.con, sections, fluids, flagged)
            query_s = (time.perf_counter() - t0) / len(fluids)
    best: dict[str, dict[str, float]] = {}
    sizes: dict[str, int] = {}
    former: dict[str, float] = {}
    for _ in range(args.repeat):
        for f in fluids:     # interleaved, so that both see the same load
            former[f] = min(former.get(f, float("inf")), yardstick(data[f]))
            stages, sizes[f] = draw(data[f])
            if f not in best or sum(stages.values()) < sum(best[f].values()):
                best[f] = stages
    tracemalloc.start()          # a separate pass: tracing slows Python down several times
    for f in fluids:
        draw(data[f])
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(f"{len(fluids)} demo fluids, best of {args.repeat}; observations query "
          f"{query_s:.3f} s per fluid")
    print(f"{'fluid':<16}{'seconds':>9}{'former':>9}{'ratio':>7}{'SVG kB':>9}   "
          + ", ".join(next(iter(best.values()))))
    for f in fluids:
        st = best[f]
        print(f"{f:<16}{sum(st.values()):9.3f}{former[f]:9.3f}"
              f"{sum(st.values()) / former[f]:7.2f}{sizes[f] / 1e3:9.1f}   "
              + ", ".join(f"{v:.3f}" for v in st.values()))
    per_fluid = sum(sum(st.values()) for st in best.values()) / len(fluids)
    per_former = sum(former.values()) / len(fluids)
    print(f"mean per fluid: {per_fluid:.3f} s; the former PNG figure (same run): "
          f"{per_former:.3f} s; ratio {per_fluid / per_former:.2f}")
    print(f"mean SVG per fluid: {sum(sizes.values()) / len(sizes) / 1e3:.1f} kB")
    print(f"peak memory while drawing (tracemalloc): {peak / 1e6:.1f} MB; process max RSS: "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e3:.0f} MB")


if __name__ == "__main__":
    main()
