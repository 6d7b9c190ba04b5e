"""What a command shows while and after it works: a rich progress bar on a terminal (stderr),
log lines otherwise (they reach the console only with ``--verbose``, and the nightly job's
nightly.log always); the full result on a terminal, one line off a terminal (cron, CI)."""

from __future__ import annotations

import logging
import sys
from contextlib import contextmanager

from pipeline.safetext import clean, raw

log = logging.getLogger("fluidledger.progress")


def brief(args) -> bool:
    """True when a command prints its one-line result: with ``--quiet``, or when stdout is not
    a terminal and ``--verbose`` is not given (a cron job mails only what matters)."""
    if getattr(args, "quiet", False):
        return True
    return not getattr(args, "verbose", False) and not sys.stdout.isatty()


@contextmanager
def stage_progress(stage: str, total: int, *, quiet: bool = False):
    """Yield ``tick(label)``; draws a bar when stderr is a terminal, logs lines when not."""
    if quiet or total == 0:
        yield lambda label="": None
        return
    if sys.stderr.isatty():
        from rich.console import Console
        from rich.markup import escape
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

        with Progress(TextColumn(f"[bold]{stage}[/]"), BarColumn(), MofNCompleteColumn(),
                      TextColumn("{task.description}"), transient=True,
                      console=Console(file=raw(sys.stderr))) as bar:
            task = bar.add_task("", total=total)
            yield lambda label="": bar.update(
                task, advance=1, description=escape(clean(label, one_line=True)))
        return
    done = [0]

    def tick(label: str = "") -> None:
        done[0] += 1
        log.info("%s %d/%d %s", stage, done[0], total, label)

    yield tick
