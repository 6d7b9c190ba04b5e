"""Wall time, CPU time and peak resident memory (RSS) of one stage of a run.

CPU time (``cpu_s``: user + system of every thread of the process; ``children_cpu_s``: of the
worker processes that ended during the stage) is what a stage costs whatever else the machine
runs; wall time is what it took, and grows with the machine's load.

How the peak is taken, best first:

``stage``
    Linux: writing ``5`` to ``/proc/self/clear_refs`` resets the process's high-water mark of
    resident memory (``VmHWM`` in ``/proc/self/status``) to its current RSS; read after the
    stage, ``VmHWM`` is the peak *of that stage alone* (all threads, DuckDB's included).
``process``
    where the reset is refused (not Linux, or a kernel or sandbox without ``clear_refs``):
    ``resource.getrusage(RUSAGE_SELF).ru_maxrss``, the peak of the whole process so far. It
    never decreases from one stage to the next, so it is an upper bound for each stage.

The reset also resets what ``getrusage`` reports for this process afterwards (Linux keeps one
high-water mark): after a measured run, the process peak is the largest stage peak, which the
run record holds. Worker processes (the fit stage may spawn some) are not in the parent's RSS,
and ``RUSAGE_CHILDREN`` cannot tell them apart from it: a child started by fork and exec keeps
the parent's high-water mark of the moment it was started as its own starting peak, so a
child's ``ru_maxrss`` is max(parent's peak so far, the child's own). ``children_peak_rss_mib``
is therefore given only when a child that ended during the stage peaked above the stage's own
peak (then the figure is the child's own); None means no worker grew larger than the parent.
"""

from __future__ import annotations

import resource
import sys
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

STATUS = Path("/proc/self/status")
CLEAR_REFS = Path("/proc/self/clear_refs")
MIB = 1024 * 1024
#: ``ru_maxrss`` is in KiB on Linux, in bytes on macOS.
RU_UNIT = 1 if sys.platform == "darwin" else 1024


def _status_bytes(key: str) -> int | None:
    """A ``kB`` field of /proc/self/status (``VmRSS``, ``VmHWM``) in bytes; None off Linux."""
    try:
        for line in STATUS.read_text().splitlines():
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def reset_peak() -> bool:
    """Reset the process's resident-memory high-water mark; False when the system refuses."""
    try:
        with open(CLEAR_REFS, "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def _ru_maxrss(who: int) -> int:
    return resource.getrusage(who).ru_maxrss * RU_UNIT


def _cpu(who: int) -> float:
    ru = resource.getrusage(who)
    return ru.ru_utime + ru.ru_stime


@dataclass
class StageUsage:
    """What a stage used: wall time [s], peak and start/end RSS [MiB], and how the peak was
    taken (``stage`` or ``process``, see the module docstring)."""

    wall_s: float = 0.0
    peak_rss_mib: float = 0.0
    rss_start_mib: float | None = None
    rss_end_mib: float | None = None
    method: str = "process"
    children_peak_rss_mib: float | None = None
    cpu_s: float = 0.0
    children_cpu_s: float = 0.0

    def asdict(self) -> dict:
        def mib(x):
            return None if x is None else round(x, 1)

        return {"wall_s": round(self.wall_s, 6), "peak_rss_mib": mib(self.peak_rss_mib),
                "rss_start_mib": mib(self.rss_start_mib), "rss_end_mib": mib(self.rss_end_mib),
                "method": self.method,
                "children_peak_rss_mib": mib(self.children_peak_rss_mib),
                "cpu_s": round(self.cpu_s, 3), "children_cpu_s": round(self.children_cpu_s, 3)}



class Meter:
    """A measurement in progress: ``meter = Meter()`` ... ``usage = meter.stop()``."""

    def __init__(self) -> None:
        self._children0 = _ru_maxrss(resource.RUSAGE_CHILDREN)
        self._cpu0 = (_cpu(resource.RUSAGE_SELF), _cpu(resource.RUSAGE_CHILDREN))
        self._start = _status_bytes("VmRSS")
        self._stage = reset_peak() and _status_bytes("VmHWM") is not None
        self._t0 = time.perf_counter()

    def stop(self) -> StageUsage:
        """The figures from the start until now."""
        wall = time.perf_counter() - self._t0
        end = _status_bytes("VmRSS")
        hwm = _status_bytes("VmHWM") if self._stage else None
        peak = hwm if hwm is not None else _ru_maxrss(resource.RUSAGE_SELF)
        children = _ru_maxrss(resource.RUSAGE_CHILDREN)
        peak = max(peak, self._start or 0, end or 0)
        larger = children > self._children0 and children > peak
        return StageUsage(
            wall_s=wall, peak_rss_mib=peak / MIB,
            rss_start_mib=None if self._start is None else self._start / MIB,
            rss_end_mib=None if end is None else end / MIB,
            method="stage" if hwm is not None else "process",
            children_peak_rss_mib=children / MIB if larger else None,
            cpu_s=_cpu(resource.RUSAGE_SELF) - self._cpu0[0],
            children_cpu_s=_cpu(resource.RUSAGE_CHILDREN) - self._cpu0[1])


@contextmanager
def measure() -> Iterator[StageUsage]:
    """Measure the block: ``with measure() as usage: ...``; ``usage`` is filled on exit
    (also when the block raises)."""
    usage = StageUsage()
    meter = Meter()
    try:
        yield usage
    finally:
        usage.__dict__.update(meter.stop().__dict__)
