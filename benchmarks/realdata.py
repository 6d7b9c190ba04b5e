"""Real published data through the nightly job: false alarms on clean fluids, planted faults.

Builds the real-data corpus (tests/realdata/build_corpus.py: about fifty real pure fluids
from open compilations and the IAPWS formulations, plus planted faults on copies of real
fluids) into a temporary folder -- or takes ``--raw DIR`` -- and runs the nightly job on it
as a user does, in a child process, into a temporary store and report folder with
``--exit-zero`` (the corpus's ``decisions.toml`` is replayed, so waivers apply). Then reads
the run's ``results.json`` and the store's quarantine and prints:

- clean fluids with at least one failure not covered by a recorded decision (the false-alarm
  rate, target <= 2 %), each with its failing check ids and subjects;
- clean fluids with at least one warning (target <= 10 %), each warning listed;
- skips by check and reason (numbers in reasons replaced by '#', so counts aggregate);
- failures per check;
- each planted fault (``faults.toml``) with the checks that caught it, whether its expected
  family did, and for unit mix-ups whether the diagnosis names the planted mix-up (100 %);
- quarantined rows by reason code;
- one line per target, measured vs target, MET / NOT MET; wall time and peak RSS.

Exit code 0 unless ``--strict`` (then 1 when a target is not met).

    python benchmarks/realdata.py [--raw DIR] [--keep DIR] [--strict] [--json PATH]

The analysis is importable: ``analyse(results, fluids, faults, quarantine)`` returns the
figures as a dict, and ``measure(raw=None)`` runs everything and returns the same dict.
"""

from __future__ import annotations

import argparse
import json
import re
import resource
import subprocess
import sys
import tempfile
import time
import tomllib
from collections import Counter, defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGETS = {"false_alarm_rate": 0.02, "warning_rate": 0.10, "faults_caught_by_family": 1.0,
           "unit_mixups_named": 1.0}
FAILING = ("fail", "error")
#: a number standing alone (not part of a name such as co2 or mcgarry-1983-wagner)
_NUMBER = re.compile(r"(?<![\w.])(?<![A-Za-z]-)[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
                     r"(?!\w|-[A-Za-z])")


def build_raw(dest: Path) -> Path:
    """Build the real-data corpus into ``dest`` (the committed one is tests/realdata/corpus)."""
    sys.path.insert(0, str(ROOT / "tests" / "realdata"))
    from build_corpus import build
    build(dest)
    return dest


def normalise_reason(message: str) -> str:
    """A skip message with its numbers replaced by '#', so equal reasons count together."""
    return _NUMBER.sub("#", message.strip())


def in_family(check_id: str, family: str) -> bool:
    """A check belongs to a family given as its id or as an id prefix (``critical``)."""
    return check_id == family or check_id.startswith(family + ".")


def _subject(r: dict) -> str:
    return r.get("subject") or "-"


def analyse(results: list[dict], fluids: list[str], faults: list[dict],
            quarantine: dict[str, int] | None = None, batch_errors: list | None = None) -> dict:
    """The benchmark's figures from the check results of one run.

    ``results``: check results (``results.json`` items: check_id, fluid_id, subject, status,
    message); ``fluids``: every fluid id of the corpus; ``faults``: the ``[[fault]]`` entries
    of faults.toml; ``quarantine``: quarantined rows by reason code.
    """
    fault_ids = {f["fluid"] for f in faults}
    clean = sorted(f for f in fluids if f not in fault_ids)
    by_fluid: dict[str, list[dict]] = defaultdict(list)
    for r in results:
        by_fluid[r["fluid_id"]].append(r)

    failing = {f: [f"{r['check_id']} [{_subject(r)}]" for r in by_fluid[f] if r["status"] in FAILING]
               for f in clean}
    failing = {f: v for f, v in failing.items() if v}
    warning = {f: [f"{r['check_id']} [{_subject(r)}]: {r['message']}" for r in by_fluid[f]
                   if r["status"] == "warn"] for f in clean}
    warning = {f: v for f, v in warning.items() if v}
    waived = [f"{r['fluid_id']}: {r['check_id']} [{_subject(r)}] ({r.get('decision_id')})"
              for r in results if r["status"] == "waived"]
    # what a first run shows, before a curator records any decision: a waived result counts
    # as the status it had (kept in its evidence as waived_status)
    def was(r):
        return (r.get("evidence") or {}).get("waived_status", r["status"]) \
            if r["status"] == "waived" else r["status"]
    first_fail = {f for f in clean for r in by_fluid[f] if was(r) in FAILING}
    first_warn = {f for f in clean for r in by_fluid[f] if was(r) == "warn"}

    skips = Counter((r["check_id"], normalise_reason(r.get("message") or "")) for r in results
                    if r["status"] == "skip")
    fails_per_check = Counter(r["check_id"] for r in results
                              if r["status"] in FAILING and r["fluid_id"] in clean)
    clean_failures = [r for r in results if r["status"] in FAILING and r["fluid_id"] in clean]

    fault_rows = []
    for f in faults:
        rows = by_fluid.get(f["fluid"], [])
        flagged = sorted({r["check_id"] for r in rows if r["status"] in FAILING + ("warn",)})
        failed = sorted({r["check_id"] for r in rows if r["status"] in FAILING})
        by_family = sorted(c for c in failed if any(in_family(c, fam) for fam in f["families"]))
        named = None
        if f.get("diagnosis"):
            named = any(r["check_id"] == "data.unit-mixup" and r["status"] in FAILING + ("warn",)
                        and f["diagnosis"] in (r.get("message") or "") for r in rows)
        fault_rows.append({"fluid": f["fluid"], "planted": f["planted"], "families": f["families"],
                           "diagnosis": f.get("diagnosis"), "failed": failed, "flagged": flagged,
                           "caught_by_family": bool(by_family), "family_checks": by_family,
                           "named": named})

    n_clean = len(clean)
    unit = [r for r in fault_rows if r["diagnosis"]]
    measured = {
        "false_alarm_rate": len(failing) / n_clean if n_clean else 0.0,
        "warning_rate": len(warning) / n_clean if n_clean else 0.0,
        "faults_caught_by_family": (sum(r["caught_by_family"] for r in fault_rows) / len(fault_rows)
                                    if fault_rows else 1.0),
        "unit_mixups_named": sum(bool(r["named"]) for r in unit) / len(unit) if unit else 1.0,
    }
    targets = {k: {"measured": measured[k], "target": TARGETS[k],
                   "met": (measured[k] <= TARGETS[k]) if k in ("false_alarm_rate", "warning_rate")
                   else measured[k] >= TARGETS[k]} for k in TARGETS}
    return {
        "n_fluids": len(fluids), "n_clean": n_clean, "n_faults": len(fault_rows),
        "clean_failing": failing, "clean_warning": warning, "waived": waived,
        "before_decisions": {"failing": sorted(first_fail), "warning": sorted(first_warn)},
        "n_clean_failing_results": len(clean_failures),
        "skips": [{"check_id": c, "reason": m, "count": n} for (c, m), n in sorted(skips.items())],
        "failures_per_check": dict(sorted(fails_per_check.items())),
        "faults": fault_rows, "quarantine": dict(sorted((quarantine or {}).items())),
        "batch_errors": list(batch_errors or []),
        "status_counts": dict(Counter(r["status"] for r in results)),
        "targets": targets, "all_met": all(t["met"] for t in targets.values()),
    }


def run_nightly(raw: Path, work: Path) -> dict:
    """Run ``fluidledger nightly --exit-zero`` in a child process; its results and quarantine."""
    store, reports = work / "store.duckdb", work / "reports"
    cmd = [sys.executable, "-m", "pipeline.cli", "nightly", "--raw", str(raw), "--reports", str(reports),
           "--store", str(store), "--exit-zero", "--quiet"]
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"nightly exited {proc.returncode}:\n{proc.stdout}\n{proc.stderr}")
    doc = json.loads((reports / "latest" / "results.json").read_text())
    import duckdb
    with duckdb.connect(str(store), read_only=True) as con:
        quarantine = dict(con.execute("SELECT reason_code, count(*) FROM quarantine_current "
                                      "GROUP BY reason_code").fetchall())
    return {"results": doc["results"], "nightly": doc["nightly"], "quarantine": quarantine,
            "wall_s": wall, "peak_rss_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024}


def measure(raw: Path | None = None, workdir: Path | None = None) -> dict:
    """Build (unless ``raw`` is given), run the nightly job, analyse: the figures as a dict."""
    with tempfile.TemporaryDirectory(prefix="fl-realdata-") as tmp:
        work = Path(workdir) if workdir else Path(tmp)
        if (work / "store.duckdb").exists():
            raise SystemExit(f"{work} already holds a store: give --keep a new folder, so every "
                             "figure comes from one fresh run")
        work.mkdir(parents=True, exist_ok=True)
        t0 = time.perf_counter()
        raw = Path(raw) if raw else build_raw(work / "raw")
        build_s = time.perf_counter() - t0
        run = run_nightly(raw, work)
        fluids = [f["id"] for f in tomllib.loads((raw / "fluids.toml").read_text())["fluid"]]
        faults_file = raw / "faults.toml"
        faults = tomllib.loads(faults_file.read_text()).get("fault", []) if faults_file.exists() else []
        ingest = run["nightly"]["stages"].get("ingest", {})
        figures = analyse(run["results"], fluids, faults, run["quarantine"],
                          ingest.get("detail", {}).get("errors", []))
        figures.update(build_s=build_s, nightly_s=run["wall_s"], peak_rss_mb=run["peak_rss_mb"],
                       verdict=run["nightly"]["verdict"],
                       stage_s={k: v["duration_s"] for k, v in run["nightly"]["stages"].items()})
        return figures


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


def report(fig: dict) -> str:
    out = [f"real-data corpus: {fig['n_fluids']} fluids ({fig['n_clean']} clean, {fig['n_faults']} "
           f"with a planted fault); nightly verdict {fig.get('verdict', '?')}; results "
           + ", ".join(f"{n} {s}" for s, n in sorted(fig["status_counts"].items()))]
    if fig["batch_errors"]:
        out.append(f"\nREJECTED BATCHES ({len(fig['batch_errors'])}):")
        out += [f"  {e}" for e in fig["batch_errors"]]
    out.append(f"\nclean fluids with a failure not covered by a decision: {len(fig['clean_failing'])} "
               f"of {fig['n_clean']} ({_pct(fig['targets']['false_alarm_rate']['measured'])}), "
               f"{fig['n_clean_failing_results']} failing results")
    for f, checks in sorted(fig["clean_failing"].items()):
        out.append(f"  {f}: " + "; ".join(checks))
    out.append(f"\nclean fluids with a warning: {len(fig['clean_warning'])} of {fig['n_clean']} "
               f"({_pct(fig['targets']['warning_rate']['measured'])})")
    for f, warns in sorted(fig["clean_warning"].items()):
        out += [f"  {f}: {w[:200]}" for w in warns]
    if fig["waived"]:
        out.append(f"\nwaived by a recorded decision: {len(fig['waived'])}")
        out += [f"  {w}" for w in fig["waived"]]
    before = fig["before_decisions"]
    out.append(f"\nbefore any recorded decision (a first run): clean fluids with a failure "
               f"{len(before['failing'])} of {fig['n_clean']} "
               f"({_pct(len(before['failing']) / max(fig['n_clean'], 1))}), with a warning "
               f"{len(before['warning'])} ({_pct(len(before['warning']) / max(fig['n_clean'], 1))})")
    out.append(f"\nskips by check and reason ({sum(s['count'] for s in fig['skips'])}):")
    out += [f"  {s['count']:4d}  {s['check_id']}: {s['reason'][:150]}"
            for s in sorted(fig["skips"], key=lambda s: (-s["count"], s["check_id"], s["reason"]))]
    out.append("\nfailures per check (clean fluids):")
    out += [f"  {n:4d}  {c}" for c, n in sorted(fig["failures_per_check"].items(), key=lambda x: -x[1])]
    out.append("\nplanted faults:")
    for r in fig["faults"]:
        named = "" if r["named"] is None else f"; diagnosis '{r['diagnosis']}' named: {'yes' if r['named'] else 'NO'}"
        out.append(f"  {r['fluid']}: {r['planted']}")
        out.append(f"      expected {'/'.join(r['families'])}: {'caught' if r['caught_by_family'] else 'NOT caught'}"
                   f" ({', '.join(r['family_checks']) or '-'}){named}; failed: {', '.join(r['failed']) or '-'}")
    out.append("\nquarantined rows by reason:")
    out += [f"  {n:4d}  {code}" for code, n in fig["quarantine"].items()] or ["  none"]
    if "nightly_s" in fig:
        stages = ", ".join(f"{k} {v:.1f} s" for k, v in fig["stage_s"].items())
        out.append(f"\nwall time: build {fig['build_s']:.1f} s, nightly {fig['nightly_s']:.1f} s ({stages}); "
                   f"peak RSS of the nightly process {fig['peak_rss_mb']:.0f} MB")
    out.append("\ntargets:")
    for k, t in fig["targets"].items():
        op = "<=" if k in ("false_alarm_rate", "warning_rate") else ">="
        out.append(f"  {k}: measured {_pct(t['measured'])} {op} target {_pct(t['target'])}: "
                   f"{'MET' if t['met'] else 'NOT MET'}")
    return "\n".join(out)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--raw", type=Path, help="a raw folder to run instead of building the corpus")
    parser.add_argument("--keep", type=Path, help="keep the raw folder, store and reports here")
    parser.add_argument("--strict", action="store_true", help="exit 1 when a target is not met")
    parser.add_argument("--json", type=Path, help="write the figures as JSON to this path")
    args = parser.parse_args(argv)
    fig = measure(args.raw, args.keep)
    print(report(fig))
    if args.json:
        args.json.write_text(json.dumps(fig, indent=2, sort_keys=True))
    return 1 if args.strict and not fig["all_met"] else 0


if __name__ == "__main__":
    raise SystemExit(main())
