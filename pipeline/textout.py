"""Print tables for people: rich on a terminal, aligned plain text otherwise, or CSV."""

from __future__ import annotations

import csv
import sys
from typing import Iterable, Sequence

from pipeline.safetext import clean, raw

#: Columns whose cells are all at most this long are never wrapped on a terminal (ids, numbers,
#: dates); longer text columns take the wrapping.
NO_WRAP_WIDTH = 40


def _fmt(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.6g}"
    return clean(value, one_line=True)


def print_table(headers: Sequence[str], rows: Iterable[Sequence], *, title: str | None = None,
                as_csv: bool = False, stream=None) -> None:
    stream = stream or sys.stdout
    rows = [list(r) for r in rows]
    if as_csv:
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(headers)
        writer.writerows(rows)
        return
    if stream.isatty():
        from rich.console import Console
        from rich.table import Table
        from rich.text import Text

        table = Table(title=title)
        cells = [[_fmt(v) for v in r] for r in rows]
        for i, h in enumerate(headers):   # short cells (ids, numbers) never wrap mid-word
            longest = max([len(str(h))] + [len(r[i]) for r in cells])
            table.add_column(Text(clean(h, one_line=True)), no_wrap=longest <= NO_WRAP_WIDTH)
        for r in cells:
            table.add_row(*(Text(c) for c in r))
        Console(file=raw(stream)).print(table)
        return
    cells = [[_fmt(v) for v in r] for r in rows]
    widths = [max([len(str(h))] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]
    if title:
        print(title, file=stream)
    print("  ".join(str(h).ljust(w) for h, w in zip(headers, widths)).rstrip(), file=stream)
    print("  ".join("-" * w for w in widths), file=stream)
    for r in cells:
        print("  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip(), file=stream)
