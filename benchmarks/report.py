"""The report stage at scale: an unchanged store, and a store where one batch changed, per
1,000 fluids (ratios against the targets of issue 14, not a timing test).

Builds N synthetic fluids (``benchmarks/nightly.py``'s generator: argon scaled by
corresponding states, one batch per fluid) and runs the nightly job on them, each run in a
fresh child process (``spawn``), reading the report stage's own duration from the run's
record (what the stage really does: figures, pages, results.json, junit.xml, report.html):

  cold        ``nightly --full`` on an empty store: every fluid's figures drawn (in this
              process, the default);
  cold, pool  the same report again with the figure and page caches emptied, drawn by one
              worker process per CPU (``FLUIDLEDGER_REPORT_WORKERS``; ``--cold`` only: the
              pool measured against one process);
  cold, before  with ``--before REPO``: the same cold nightly (``--full`` on an empty store of
              the same raw folder) run by another checkout's code, e.g. the main branch
              before a change to the figures, in the same run (``--cold`` only);
  --full      ``nightly --full`` again: every stage recomputed, no figure redrawn;
  unchanged   ``nightly`` with nothing new (``--repeat`` times);
  one batch   ``nightly`` after one fluid's vapour-pressure file changed (``--repeat``
              times, a new variant each time): that fluid's figures drawn again.

The unchanged and one-batch runs alternate so the machine's load weighs on both alike.
Prints min/median/max seconds, per 1,000 fluids, and the ratio of the median to its target:

  unchanged store   <= 2 s per 1,000 fluids: a 10,000-fluid store then reports in ~20 s,
                    not minutes, and the no-change nightly keeps far under its 60 s;
  one batch changed <= 3 s per 1,000 fluids: the incremental nightly's whole budget is 5 %
                    of a 60 s full nightly, 3 s; the report must fit in it.

Also the peak RSS of each child (the whole nightly process: ``ru_maxrss`` of that process
alone), the size of report.html and of the run folder (pages are links into the page cache:
counted once), and the load average.

    python benchmarks/report.py [--fluids N] [--repeat N] [--cold [--before REPO]] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import os
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from nightly import make_raw, write_fluid  # noqa: E402

TARGETS = {"unchanged": 2.0, "one batch": 3.0}     # seconds per 1,000 fluids


def _child(args: list[str], env: dict, out) -> None:
    import resource

    os.environ.update(env)
    from pipeline.cli import main

    code = main(["nightly", "--quiet", "--exit-zero", *args])
    out.put((code, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024))


#: A nightly run by another checkout's code, in a fresh interpreter (its package first on the
#: path): prints its exit code and its own peak RSS [MiB].
OTHER = """import json, os, resource, sys
sys.path.insert(0, sys.argv[1])
from pipeline.cli import main
code = main(["nightly", "--quiet", "--exit-zero", *json.loads(sys.argv[2])])
print(json.dumps([code, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024]))
"""


def run_other(repo: Path, args: list[str]) -> tuple[int, float]:
    """One nightly run by the checkout at ``repo``: (exit code, its peak RSS [MiB])."""
    import subprocess

    out = subprocess.run([sys.executable, "-c", OTHER, str(repo), json.dumps(args)],
                         check=True, capture_output=True, text=True, cwd=str(repo))
    code, peak = json.loads(out.stdout.strip().splitlines()[-1])
    return code, peak


def run(common: list[str], *extra: str, env: dict | None = None) -> tuple[int, float]:
    """One nightly in a fresh process: (exit code, its peak RSS [MiB])."""
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_child, args=([*common, *extra], env or {}, q))
    p.start()
    res = q.get()
    p.join()
    return res


def last_report(store: Path) -> tuple[float, dict, str]:
    """(report stage seconds, its detail, the run's report folder) of the newest nightly."""
    import duckdb

    con = duckdb.connect(str(store), read_only=True)
    row = con.execute("SELECT summary_json FROM run WHERE kind = 'nightly' "
                      "ORDER BY started_at DESC, run_id DESC LIMIT 1").fetchone()
    con.close()
    summary = json.loads(row[0])
    stage = summary["stages"]["report"]
    return stage["duration_s"], stage.get("detail", {}), summary["report"].get("dir", "")


def folder_bytes(folder: Path) -> tuple[int, int]:
    """(bytes of report.html, bytes of the folder counting each linked file once)."""
    seen, total = set(), 0
    for p in folder.rglob("*"):
        st = p.stat()
        if p.is_file() and (st.st_dev, st.st_ino) not in seen:
            seen.add((st.st_dev, st.st_ino))
            total += st.st_size
    html = folder / "report.html"
    return (html.stat().st_size if html.is_file() else 0), total


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fluids", type=int, default=1000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--cold", action="store_true",
                    help="also draw every figure again in one process (slow: minutes)")
    ap.add_argument("--before", type=Path, default=None,
                    help="with --cold: also run the cold nightly with this checkout's code")
    ap.add_argument("--keep", type=Path, default=None)
    args = ap.parse_args()
    tmp = args.keep or Path(tempfile.mkdtemp(prefix="fl-report-bench-"))
    per_k = 1000.0 / args.fluids
    rows: dict[str, list[float]] = {}
    rss: dict[str, list[float]] = {}
    notes: dict[str, str] = {}
    files: dict[str, list[float]] = {}
    try:
        raw, store, reports = tmp / "raw", tmp / "store.duckdb", tmp / "reports"
        t0 = time.perf_counter()
        make_raw(raw, args.fluids)
        print(f"generated {args.fluids} synthetic fluids in {time.perf_counter() - t0:.1f} s")
        common = ["--store", str(store), "--raw", str(raw), "--reports", str(reports)]

        def measure(name: str, *extra: str, env: dict | None = None) -> dict:
            code, peak = run(common, *extra, env=env)
            seconds, detail, folder = last_report(store)
            rows.setdefault(name, []).append(seconds)
            rss.setdefault(name, []).append(peak)
            html, total = folder_bytes(Path(folder))
            files.setdefault(name, []).append(detail.get("files_s", float("nan")))
            notes[name] = (f"drawn {detail.get('plots_drawn')} ({detail.get('workers')} "
                           f"process(es)), pages rendered {detail.get('pages_rendered')} of "
                           f"{detail.get('pages')}; report.html {html / 1e6:.2f} MB, run "
                           f"folder {total / 1e6:.1f} MB; exit {code}")
            return detail

        if args.cold and args.before:      # the other code first, on its own store
            other = ["--store", str(tmp / "before.duckdb"), "--raw", str(raw), "--reports",
                     str(tmp / "reports-before")]
            code, peak = run_other(args.before.resolve(), [*other, "--full"])
            seconds, detail, folder = last_report(tmp / "before.duckdb")
            rows["cold, before"], rss["cold, before"] = [seconds], [peak]
            files["cold, before"] = [detail.get("files_s", float("nan"))]
            notes["cold, before"] = (f"{args.before}: drawn {detail.get('plots_drawn')}; "
                                     f"exit {code}")
        measure("cold", "--full")
        if args.cold:
            shutil.rmtree(reports / ".cache" / "plots", ignore_errors=True)
            shutil.rmtree(reports / ".cache" / "pages", ignore_errors=True)
            measure("cold, pool", "--full",
                    env={"FLUIDLEDGER_REPORT_WORKERS": str(os.cpu_count() or 1)})
        measure("--full", "--full")
        for r in range(args.repeat):
            measure("unchanged")
            write_fluid(raw, args.fluids // 2, variant=r + 1)     # one batch changes
            measure("one batch")
        load = os.getloadavg()
        print(f"{args.fluids} fluids, report stage seconds (run record), each nightly in a "
              f"fresh process; load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f} on "
              f"{os.cpu_count()} CPUs")
        print(f"{'run':<17}{'n':>3}{'min':>9}{'median':>9}{'max':>9}{'per 1,000':>11}"
              f"{'target':>8}{'ratio':>7}{'peak RSS':>10}")
        for name, ts in rows.items():
            med = statistics.median(ts)
            target = TARGETS.get(name)
            ratio = f"{med * per_k / target:7.2f}" if target else ""
            print(f"{name:<17}{len(ts):3d}{min(ts):9.2f}{med:9.2f}{max(ts):9.2f}"
                  f"{med * per_k:11.2f}{(f'{target:.1f}' if target else ''):>8}{ratio}"
                  f"{max(rss[name]):8.0f} MiB")
        for name, note in notes.items():
            print(f"  {name}: {note}; of the median, results.json, junit.xml, summary and "
                  f"report.html {statistics.median(files[name]):.2f} s")
        if "cold, before" in rows:
            one, old = rows["cold"][0], rows["cold, before"][0]
            print(f"cold report, this code against {args.before}: {one / old:.3f} "
                  f"({one:.1f} s vs {old:.1f} s)")
        if "cold, pool" in rows:
            one, pool = rows["cold"][0], rows["cold, pool"][0]
            print(f"cold report, worker pool against one process: {pool / one:.2f} "
                  f"({pool:.1f} s vs {one:.1f} s)")
    finally:
        if args.keep is None:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
