"""The ``fluidledger decide ...`` commands a finding offers: waive it, or exclude the data it
names (rows of a raw file, or a source's value of a constant).

Each command is exact for the run's store and decisions file and shell-quoted; only the
reason (``--why``) is left for the curator to write. ``--who`` comes from
``$FLUIDLEDGER_CURATOR`` unless given.
"""

from __future__ import annotations

import shlex
from dataclasses import dataclass
from typing import Any, Iterable, Mapping, Sequence

WHY = "<your reason>"
#: Rows named in one exclude command at most (more: the whole file's rows are listed).
MAX_ROWS = 200
DEFAULT_DECISIONS = "raw/decisions.toml"


@dataclass(frozen=True)
class DecideContext:
    """What the commands need to be exact: the store and decisions file of the run, each raw
    file's source, and the rows holding observations in the files findings are about."""

    store: str | None = None
    decisions: str | None = None
    file_sources: Mapping[str, str] | None = None
    file_rows: Mapping[str, Sequence[int]] | None = None

    def options(self) -> list[str]:
        out = ["--store", self.store] if self.store else []
        if self.decisions and self.decisions != DEFAULT_DECISIONS:
            out += ["--decisions", self.decisions]
        return out


def rows_text(rows: Iterable[int]) -> str:
    """``1-13,16`` for rows 1..13 and 16 (the form ``decide --row`` reads)."""
    out: list[list[int]] = []
    for r in sorted(set(int(x) for x in rows)):
        if out and r == out[-1][1] + 1:
            out[-1][1] = r
        else:
            out.append([r, r])
    return ",".join(f"{a}" if a == b else f"{a}-{b}" for a, b in out)


def _command(kind: str, args: list[str], ctx: DecideContext) -> str:
    return shlex.join(["fluidledger", "decide", kind, *args, *ctx.options(), "--why", WHY])


def _named_rows(evidence: Any, found: dict[str, set[int]]) -> None:
    """file -> rows of every observation reference ({"file": ..., "row": ...}) in evidence."""
    if isinstance(evidence, Mapping):
        if isinstance(evidence.get("file"), str) and isinstance(evidence.get("row"), int):
            found.setdefault(evidence["file"], set()).add(int(evidence["row"]))
        for v in evidence.values():
            _named_rows(v, found)
    elif isinstance(evidence, (list, tuple)):
        for v in evidence:
            _named_rows(v, found)


def _constant(subject: str) -> tuple[str, str | None] | None:
    """(constant, point) of a sources.agreement subject such as ``critical:vapour,liquid|Tc``
    or ``constant|acentric_factor``."""
    if "|" not in subject:
        return None
    where, name = subject.rsplit("|", 1)
    return name, (None if where == "constant" or where.startswith("critical") else where)


def decide_commands(result, ctx: DecideContext) -> list[tuple[str, str]]:
    """(what it does, the command) for a warn or fail finding; none for other statuses."""
    if result.status not in ("warn", "fail"):
        return []
    waive = ["--check", result.check_id, "--fluid", result.fluid_id]
    if result.subject:
        waive += ["--subject", result.subject]
    out = [("waive this finding (it counts again when the check's inputs change)",
            _command("waive-check", waive, ctx))]
    sources = ctx.file_sources or {}
    files: dict[str, set[int]] = {}
    if result.subject.startswith("file:"):
        path = result.subject[len("file:"):].split("|", 1)[0]
        files[path] = set((ctx.file_rows or {}).get(path, ()))
    else:
        _named_rows(result.evidence, files)
    for path, rows in sorted(files.items()):
        source = sources.get(path)
        if not rows or source is None or len(rows) > MAX_ROWS:
            continue
        out.append((f"exclude {'this row' if len(rows) == 1 else f'these {len(rows)} rows'} of "
                    f"{path} from fits and checks",
                    _command("exclude-observations", ["--source", source, "--file", path,
                                                      "--row", rows_text(rows)], ctx)))
    discrepant = result.evidence.get("discrepant") if isinstance(result.evidence, Mapping) \
        else None
    named = _constant(result.subject) if result.check_id == "sources.agreement" else None
    if named and isinstance(discrepant, list):
        constant, point = named
        for source in discrepant:
            args = ["--fluid", result.fluid_id, "--source", str(source), "--constant", constant]
            out.append((f"exclude {source}'s {constant} from the recommended value and the "
                        "checks", _command("exclude-source", args + (
                            ["--point", point] if point else []), ctx)))
    return out
