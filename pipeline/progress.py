"""Progress display: a rich bar on a terminal, plain log lines otherwise."""

from __future__ import annotations

import logging
import sys
from contextlib import contextmanager

from pipeline.safetext import clean, raw

log = logging.getLogger("fluidledger.progress")


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
                      console=Console(file=raw(sys.stdout))) as bar:
            task = bar.add_task("", total=total)
            yield lambda label="": bar.update(
                task, advance=1, description=escape(clean(label, one_line=True)))
        return
    done = [0]

    def tick(label: str = "") -> None:
        done[0] += 1
        log.info("%s %d/%d %s", stage, done[0], total, label)

    yield tick
