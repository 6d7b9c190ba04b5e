"""Start-up of the command line: ``fluidledger --version``, ``--help`` and ``status``, each in
fresh processes (a ratio against the 0.25 s target of issue 14, not a timing test).

Each command runs ``--repeat`` times in a new process (the installed ``fluidledger`` script
beside this Python, else ``python -m pipeline.cli``), interleaved so that the machine's load
weighs on all alike; prints min/median/max wall time and the ratio of the median to 0.25 s.
Two yardsticks run in the same rounds: a bare ``python -c pass`` (the interpreter's own
start-up, which no change here can remove) and ``python -c "import duckdb"`` (the one library
``status`` needs). ``status`` reads the demo store, ingested first into a temporary folder.
``--importtime`` adds the ten slowest imports of each command (``python -X importtime``);
``--before SCRIPT`` runs another installation's ``fluidledger`` script in the same rounds
(e.g. one made from an older commit) and prints the ratio of the medians.

    python benchmarks/startup.py [--repeat N] [--importtime] [--before SCRIPT]
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TARGET_S = 0.25


def _fluidledger() -> list[str]:
    script = Path(sys.executable).with_name("fluidledger")
    if script.is_file():
        return [str(script)]
    found = shutil.which("fluidledger")
    return [found] if found else [sys.executable, "-m", "pipeline.cli"]


def _once(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=ROOT)
    elapsed = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} exited {proc.returncode}: {proc.stderr.decode()}")
    return elapsed


def importtime(cmd_args: list[str], top: int = 10) -> list[tuple[int, str]]:
    """The ``top`` slowest top-level imports (cumulative microseconds) of a command."""
    proc = subprocess.run([sys.executable, "-X", "importtime", "-m", "pipeline.cli", *cmd_args],
                          stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    rows = []
    for line in proc.stderr.splitlines():
        if not line.startswith("import time:") or "cumulative" in line:
            continue
        _, cumulative, name = line[len("import time:"):].split("|")
        rows.append((int(cumulative), name.rstrip()))
    return sorted(rows, reverse=True)[:top]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=9)
    ap.add_argument("--importtime", action="store_true")
    ap.add_argument("--before", metavar="SCRIPT", default=None,
                    help="another fluidledger script to time in the same rounds")
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="fl-startup-"))
    try:
        store = tmp / "demo.duckdb"
        subprocess.run([*_fluidledger(), "ingest", "--quiet", "--store", str(store),
                        str(ROOT / "raw")], check=True, cwd=ROOT, stdout=subprocess.DEVNULL)
        fl = _fluidledger()
        cases = {
            "python -c pass (yardstick)": [sys.executable, "-c", "pass"],
            "import duckdb (yardstick)": [sys.executable, "-c", "import duckdb"],
            "fluidledger --version": [*fl, "--version"],
            "fluidledger --help": [*fl, "--help"],
            "fluidledger status": [*fl, "status", "--store", str(store)],
        }
        if args.before:
            for sub in ("--version", "--help", "status"):
                extra = ["--store", str(store)] if sub == "status" else []
                cases[f"before {sub} (yardstick)"] = [args.before, sub, *extra]
        times: dict[str, list[float]] = {k: [] for k in cases}
        for name, cmd in cases.items():      # a warm-up round: the file cache, not the code
            _once(cmd)
        for _ in range(args.repeat):
            for name, cmd in cases.items():
                times[name].append(_once(cmd))
        load = os.getloadavg()
        print(f"start-up in fresh processes, {args.repeat} runs each (interleaved); load "
              f"average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f} on {os.cpu_count()} CPUs")
        print(f"{'command':<30}{'min':>8}{'median':>8}{'max':>8}   median / {TARGET_S} s")
        for name, ts in times.items():
            med = statistics.median(ts)
            target = "" if "yardstick" in name else (
                f"{med / TARGET_S:6.2f}  {'ok' if med <= TARGET_S else 'OVER'}")
            print(f"{name:<30}{min(ts):8.3f}{med:8.3f}{max(ts):8.3f}   {target}")
        bare = statistics.median(times["python -c pass (yardstick)"])
        print(f"above the bare interpreter (median): " + ", ".join(
            f"{n.split(' ', 1)[1]} {statistics.median(t) - bare:.3f} s"
            for n, t in times.items() if n.startswith("fluidledger")))
        if args.before:
            med = {k: statistics.median(t) for k, t in times.items()}
            print("before / now (medians): " + ", ".join(
                f"{sub} {med[f'before {sub} (yardstick)'] / med[f'fluidledger {sub}']:.2f}"
                for sub in ("--version", "--help", "status")))
        if args.importtime:
            for cmd_args in (["--version"], ["--help"], ["status", "--store", str(store)]):
                print(f"\nslowest imports of fluidledger {cmd_args[0]} (cumulative ms):")
                for us, name in importtime(cmd_args):
                    print(f"  {us / 1e3:8.1f}  {name}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
