"""Writing batch folders of the raw contract (batch.toml + CSV) byte-reproducibly.

A :class:`Batch` collects tables, fixed points and constants for one source and renders them
as TOML text written by hand (fixed key order, ``repr`` of floats), so rebuilding the corpus
gives byte-identical files on every platform.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np


def rng_for(*key: str) -> np.random.Generator:
    """A random generator seeded from a text key (stable across runs, independent streams)."""
    digest = hashlib.sha256("\x1f".join(key).encode()).digest()
    return np.random.default_rng(int.from_bytes(digest[:8], "little"))


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {v!r} as TOML")


@dataclass
class Table:
    """One CSV file and its ``[[table]]`` entry."""

    file: str
    entry: dict
    header: list[str]
    rows: list[list[str]]
    comment: str = ""

    def csv_text(self) -> str:
        lines = [",".join(self.header)] + [",".join(r) for r in self.rows]
        return "\n".join(lines) + "\n"


@dataclass
class Batch:
    """One source: its ``[source]`` table, tables, fixed points and constants."""

    folder: str
    source: dict
    header_comment: str
    tables: list[Table] = field(default_factory=list)
    fixed_points: list[tuple[str, dict]] = field(default_factory=list)
    constants: list[tuple[str, dict]] = field(default_factory=list)

    def empty(self) -> bool:
        return not (self.tables or self.fixed_points or self.constants)

    def toml_text(self) -> str:
        out = [f"# {line}".rstrip() for line in self.header_comment.strip().splitlines()]
        out += ["", "format_version = 1", "", "[source]"]
        out += [f"{k} = {toml_value(v)}" for k, v in self.source.items()]
        for t in self.tables:
            out.append("")
            if t.comment:
                out += [f"# {line}".rstrip() for line in t.comment.strip().splitlines()]
            out.append("[[table]]")
            nested = {}
            for k, v in t.entry.items():
                if k in ("uncertainty", "columns"):
                    nested[k] = v
                else:
                    out.append(f"{k} = {toml_value(v)}")
            for k, v in nested.items():
                out.append(f"[table.{k}]")
                out += [f"{q} = {toml_value(x)}" for q, x in v.items()]
        for kind, items in (("fixed_point", self.fixed_points), ("constant", self.constants)):
            for comment, entry in items:
                out.append("")
                if comment:
                    out += [f"# {line}".rstrip() for line in comment.strip().splitlines()]
                out.append(f"[[{kind}]]")
                out += [f"{k} = {toml_value(v)}" for k, v in entry.items()]
        return "\n".join(out) + "\n"

    def write(self, root: Path) -> list[Path]:
        folder = root / self.folder
        folder.mkdir(parents=True, exist_ok=True)
        written = [folder / "batch.toml"]
        written[0].write_text(self.toml_text(), encoding="utf-8", newline="\n")
        for t in self.tables:
            path = folder / t.file
            path.write_text(t.csv_text(), encoding="utf-8", newline="\n")
            written.append(path)
        return written
