"""What the commands print: one line and no log lines off a terminal (cron mails nothing on a
quiet night), a progress bar and a short summary on a terminal, the full log in nightly.log."""

from __future__ import annotations

import os
import pty
import select
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "nightly"))
from nightly_fixtures import ARGON_BATCHES, copy_demo  # noqa: E402

ENV = {**os.environ, "COLUMNS": "120", "TERM": "xterm-256color"}


def _cli(*argv: str, cwd: Path) -> subprocess.CompletedProcess:
    """``fluidledger ARGV`` with stdout and stderr as pipes (not a terminal), as cron runs it."""
    return subprocess.run([sys.executable, "-m", "pipeline.cli", *argv], cwd=cwd, env=ENV,
                          capture_output=True, text=True, timeout=300)


@pytest.fixture(scope="module")
def argon(tmp_path_factory) -> Path:
    """A folder with raw/ holding the two argon batches (a fast, clean fluid)."""
    root = tmp_path_factory.mktemp("console")
    copy_demo(root, ARGON_BATCHES)
    return root


def test_off_a_terminal_nightly_prints_one_line_and_logs_to_nightly_log(argon):
    """Off a terminal the nightly prints the one-line verdict, nothing on stderr, and its
    nightly.log holds the stage lines; a second run with nothing to do is as quiet."""
    first = _cli("nightly", "--store", "s/store.duckdb", cwd=argon)
    assert first.returncode == 0, first.stderr
    assert first.stderr == ""
    (line,) = first.stdout.splitlines()
    assert line.startswith("nightly nightly-") and ": PASS (exit 0); checks: " in line
    assert line.endswith("report.html")
    log = next((argon / "reports").glob("nightly-*/nightly.log")).read_text()
    for stage in ("ingest:", "fit:", "check:", "publish:", "verify:"):
        assert f"INFO pipeline.nightly: {stage}" in log
    again = _cli("nightly", "--store", "s/store.duckdb", cwd=argon)
    assert again.stderr == "" and len(again.stdout.splitlines()) == 1
    assert "; no changes;" in again.stdout


def test_off_a_terminal_commands_with_nothing_to_do_are_silent(argon):
    """ingest and fit with nothing to do print nothing at all; check prints only what needs
    attention and its one-line verdict (no table of counts)."""
    _cli("nightly", "--store", "s/store.duckdb", cwd=argon)
    for argv in (("ingest",), ("fit",)):
        proc = _cli(*argv, "--store", "s/store.duckdb", cwd=argon)
        assert (proc.returncode, proc.stdout, proc.stderr) == (0, "", ""), argv
    check = _cli("check", "--store", "s/store.duckdb", cwd=argon)
    assert check.stderr == "" and "results per check" not in check.stdout
    assert check.stdout.strip().splitlines()[-1].startswith("check run check-")


def test_verbose_off_a_terminal_shows_the_summary_and_log_lines(argon):
    """--verbose restores the stage summary on stdout and the timestamped log lines."""
    proc = _cli("nightly", "--store", "s/store.duckdb", "--verbose", cwd=argon)
    assert proc.returncode == 0
    assert "  ingest   " in proc.stdout and "report: " in proc.stdout
    assert " INFO pipeline.nightly: " in proc.stderr


def test_on_a_terminal_nightly_draws_progress_and_a_short_summary(tmp_path):
    """On a terminal the first nightly draws rich progress bars and ends with the summary,
    with no log lines."""
    copy_demo(tmp_path, ARGON_BATCHES)
    master, slave = pty.openpty()
    proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "nightly", "--store",
                             "s/store.duckdb"], cwd=tmp_path, env=ENV, stdin=subprocess.DEVNULL,
                            stdout=slave, stderr=slave)
    os.close(slave)
    chunks = []
    while True:
        ready, _, _ = select.select([master], [], [], 120)
        if not ready:
            proc.kill()
            break
        try:
            data = os.read(master, 65536)
        except OSError:   # the child closed the terminal
            break
        if not data:
            break
        chunks.append(data)
    os.close(master)
    assert proc.wait(timeout=60) == 0
    text = b"".join(chunks).decode("utf-8", "replace")
    assert "\x1b[" in text and "ingest" in text            # a rich progress bar was drawn
    assert "━" in text or "\u2501" in text
    assert "  verify   ok" in text and "report: " in text   # the short summary
    assert " INFO " not in text and "WARNING" not in text
