"""Report figures per fluid: time to draw a fluid's figures (phase diagram + deviation plots,
SVG with hover titles), the size they add to report.html, and peak memory (ratios to
yardsticks drawn in the same run, not a timing test).

Builds the demo store in a temporary directory (ingest, fit, check), or ``--synthetic N``
fluids of benchmarks/nightly.py (the fluids of the 1,000-fluid nightly), then draws every
fluid's figures ``--repeat`` times, interleaved with two yardsticks so that all see the same
load, and keeps each one's best time per fluid:

  now        pipeline/report/figures.render_figures (SVG text written by svgkit);
  before     the figures as main drew them before svgkit: matplotlib figures through its SVG
             backend, titles added with ElementTree (benchmarks/former_svg/, kept verbatim);
  PNG        the figure the report had before SVG (benchmarks/former_figure.py): one PNG
             phase diagram per fluid.

Prints seconds per fluid (min/median/max over fluids), the ratio now/before, the ratio to the
target of issue 14 (a fluid's figures in 20 ms: the cold report of 1,000 fluids in 20 s, so
that a full nightly fits in 60 s), SVG bytes per fluid, the peak memory of the drawing
(tracemalloc), the process's max RSS and the load average.

    python benchmarks/report_figure.py [--repeat N] [--store PATH | --synthetic N]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
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

#: Seconds for one fluid's two figures (issue 14: a cold report of 1,000 fluids in ~20 s).
TARGET_S = 0.020
#: Best CPU seconds per fluid of each side (the steadier figure on a loaded machine).
CPU: dict[str, dict[str, float]] = {"now": {}, "before": {}}

RAW = Path(__file__).resolve().parents[1] / "raw"


def build(store: Path, raw: Path = RAW) -> None:
    with open_store(store) as s:
        run_ingest(s.con, [raw])
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


def before(data) -> tuple[float, int]:
    """Seconds and SVG bytes of the figures as drawn before svgkit (benchmarks/former_svg)."""
    import former_svg

    t0, c0 = time.perf_counter(), time.process_time()
    phase, dev = former_svg.draw(data)
    CPU["before"][data.fluid_id] = min(CPU["before"].get(data.fluid_id, float("inf")),
                                       time.process_time() - c0)
    return time.perf_counter() - t0, len(phase) + len(dev or "")


def draw(data) -> tuple[dict[str, float], int]:
    """Seconds per stage and SVG bytes of one fluid's figures."""
    t = {}
    c0 = time.process_time()
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
    CPU["now"][data.fluid_id] = min(CPU["now"].get(data.fluid_id, float("inf")),
                                    time.process_time() - c0)
    return t, len(svg_a) + len(svg_b)


def spread(values) -> str:
    v = list(values)
    return f"min {min(v):.4f}, median {statistics.median(v):.4f}, max {max(v):.4f} s"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--store", type=Path, default=None,
                        help="an existing store (default: build the demo store)")
    parser.add_argument("--synthetic", type=int, default=0,
                        help="build this many synthetic fluids instead of the demo")
    parser.add_argument("--no-png", action="store_true", help="leave out the PNG yardstick")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        store = args.store or Path(tmp) / "bench.duckdb"
        if args.store is None:
            raw = RAW
            if args.synthetic:
                from nightly import make_raw

                raw = Path(tmp) / "raw"
                make_raw(raw, args.synthetic)
            build(store, raw)
        with open_store(store, read_only=True) as s:
            results = run_checks(load_fluid_data(s.con)).results
            sections = content.fluid_sections(s.con)
            flagged = content.flagged_from_results(results)
            fluids = list(sections)
            t0 = time.perf_counter()
            data = content.diagram_data(s.con, sections, fluids, flagged)
            query_s = (time.perf_counter() - t0) / len(fluids)
    fluids = [f for f in fluids if len(data[f].observations) or data[f].curves]
    best: dict[str, dict[str, float]] = {}
    sizes: dict[str, int] = {}
    old: dict[str, float] = {}
    old_sizes: dict[str, int] = {}
    former: dict[str, float] = {}
    for _ in range(args.repeat):
        for f in fluids:     # interleaved, so that all see the same load
            if not args.no_png:
                former[f] = min(former.get(f, float("inf")), yardstick(data[f]))
            seconds, old_sizes[f] = before(data[f])
            old[f] = min(old.get(f, float("inf")), seconds)
            stages, sizes[f] = draw(data[f])
            if f not in best or sum(stages.values()) < sum(best[f].values()):
                best[f] = stages
    tracemalloc.start()          # a separate pass: tracing slows Python down several times
    for f in fluids:
        draw(data[f])
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    now = {f: sum(st.values()) for f, st in best.items()}
    load = os.getloadavg()
    print(f"{len(fluids)} {'synthetic' if args.synthetic else 'demo'} fluids, best of "
          f"{args.repeat}; observations query {query_s:.3f} s per fluid; load average "
          f"{load[0]:.2f} {load[1]:.2f} {load[2]:.2f} on {os.cpu_count()} CPUs")
    shown = fluids if len(fluids) <= 12 else fluids[:12]
    print(f"{'fluid':<16}{'now':>9}{'before':>9}{'ratio':>7}{'PNG':>8}{'SVG kB':>8}"
          f"{'before':>8}   " + ", ".join(next(iter(best.values()))))
    for f in shown:
        png = f"{former[f]:8.3f}" if former else f"{'':>8}"
        print(f"{f:<16}{now[f]:9.4f}{old[f]:9.4f}{now[f] / old[f]:7.3f}{png}"
              f"{sizes[f] / 1e3:8.1f}{old_sizes[f] / 1e3:8.1f}   "
              + ", ".join(f"{v:.4f}" for v in best[f].values()))
    if len(fluids) > len(shown):
        print(f"... and {len(fluids) - len(shown)} more")
    per_now = statistics.mean(now.values())
    per_old = statistics.mean(old.values())
    print(f"per fluid now:    {spread(now.values())}; mean {per_now:.4f} s")
    print(f"per fluid before: {spread(old.values())}; mean {per_old:.4f} s")
    cpu_now, cpu_old = (statistics.mean(CPU[k][f] for f in fluids) for k in ("now", "before"))
    print(f"CPU per fluid:    now {spread(CPU['now'][f] for f in fluids)}; before "
          f"{spread(CPU['before'][f] for f in fluids)}")
    print(f"ratio now/before (means): wall {per_now / per_old:.3f}, CPU {cpu_now / cpu_old:.3f}; "
          f"target {TARGET_S * 1e3:.0f} ms per fluid: ratio {per_now / TARGET_S:.2f} wall "
          f"({'met' if per_now <= TARGET_S else 'NOT met'}), {cpu_now / TARGET_S:.2f} CPU "
          f"({'met' if cpu_now <= TARGET_S else 'NOT met'})")
    if former:
        per_png = statistics.mean(former.values())
        print(f"the former PNG figure (same run): {per_png:.3f} s per fluid; now/PNG "
              f"{per_now / per_png:.3f}")
    print(f"mean SVG per fluid: now {statistics.mean(sizes.values()) / 1e3:.1f} kB, before "
          f"{statistics.mean(old_sizes.values()) / 1e3:.1f} kB")
    print(f"peak memory while drawing (tracemalloc): {peak / 1e6:.1f} MB; process max RSS: "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e3:.0f} MB")


if __name__ == "__main__":
    main()
