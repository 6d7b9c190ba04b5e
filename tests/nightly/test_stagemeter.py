"""The stage meter: wall time and peak RSS of a block, reset per block where Linux allows."""

from __future__ import annotations

import time

import numpy as np
import pytest

from pipeline import stagemeter
from pipeline.stagemeter import Meter, measure

LINUX_RESET = stagemeter.reset_peak() and stagemeter._status_bytes("VmHWM") is not None


def _touch(mib: int) -> float:
    """Allocate and write ``mib`` MiB (so the pages are resident), then free them."""
    block = np.ones(mib * 1024 * 1024 // 8)
    total = float(block[:: 4096].sum())
    del block
    return total


@pytest.mark.skipif(not LINUX_RESET, reason="needs /proc/self/clear_refs (Linux)")
def test_a_block_that_allocates_shows_its_peak_and_the_next_block_starts_afresh():
    """A block writing 200 MiB has a peak at least ~200 MiB above its start; the next block,
    allocating nothing, has a peak far below that (the high-water mark was reset)."""
    with measure() as big:
        _touch(200)
    with measure() as small:
        time.sleep(0.01)
    assert big.method == small.method == "stage"
    assert big.peak_rss_mib >= big.rss_start_mib + 190
    assert small.peak_rss_mib < big.peak_rss_mib - 150
    assert small.rss_start_mib <= small.peak_rss_mib and small.rss_end_mib <= small.peak_rss_mib
    assert small.wall_s >= 0.01 and big.wall_s > 0


def test_without_the_reset_the_process_peak_is_reported_and_never_decreases(monkeypatch):
    """Where the system refuses the reset, each block reports the process peak so far
    (ru_maxrss): at least its own RSS, and never lower than an earlier block's."""
    monkeypatch.setattr(stagemeter, "reset_peak", lambda: False)
    with measure() as first:
        _touch(50)
    with measure() as second:
        pass
    assert first.method == second.method == "process"
    assert second.peak_rss_mib >= first.peak_rss_mib > 0
    if first.rss_end_mib is not None:
        assert first.peak_rss_mib >= first.rss_end_mib


def test_a_worker_process_that_ends_in_the_block_is_reported_apart():
    """A child process larger than the parent and every earlier child that ends inside the
    block appears as the worker peak; a block without children has none."""
    import subprocess
    import sys

    import resource

    before = max(resource.getrusage(who).ru_maxrss for who in
                 (resource.RUSAGE_CHILDREN, resource.RUSAGE_SELF)) * stagemeter.RU_UNIT
    mib = max(400, int(before / stagemeter.MIB) + 200)   # larger than this process and any child
    code = f"import numpy as np; b = np.ones({mib} * 1024 * 1024 // 8); print(b[::4096].sum())"
    with measure() as usage:
        subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)
    with measure() as none:
        pass
    assert usage.children_peak_rss_mib is not None and usage.children_peak_rss_mib >= mib - 10
    assert none.children_peak_rss_mib is None


def test_cpu_time_counts_the_work_of_the_block_and_of_its_workers():
    """A block that computes for a while shows CPU time; a block that sleeps shows next to
    none; a worker's CPU time is counted apart."""
    import subprocess
    import sys

    with measure() as busy:
        x = 0
        t0 = time.process_time()
        while time.process_time() - t0 < 0.2:
            x += 1
    with measure() as idle:
        time.sleep(0.2)
    with measure() as worker:
        subprocess.run([sys.executable, "-c", "import time\nt=time.process_time()\n"
                        "while time.process_time() - t < 0.2: pass"], check=True)
    assert busy.cpu_s >= 0.19 and idle.cpu_s < 0.1
    assert worker.children_cpu_s >= 0.19 and busy.children_cpu_s == 0


def test_the_machine_form_rounds_and_names_the_method():
    """asdict() gives wall time, MiB figures rounded to 0.1 and the method, as the run record
    and its schema expect."""
    meter = Meter()
    d = meter.stop().asdict()
    assert set(d) == {"wall_s", "peak_rss_mib", "rss_start_mib", "rss_end_mib", "method",
                      "children_peak_rss_mib", "cpu_s", "children_cpu_s"}
    assert d["method"] in ("stage", "process") and d["peak_rss_mib"] > 0
    assert d["peak_rss_mib"] == round(d["peak_rss_mib"], 1)
