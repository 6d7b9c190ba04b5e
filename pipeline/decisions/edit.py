"""Adding a decision to the file: tomlkit keeps every comment and the formatting.

Recipe: (1) take an exclusive lock beside the file (two curators at once cannot lose an
entry); (2) parse the file with tomlkit (or start from :data:`NEW_FILE_HEADER`); (3) append
the ``[[decision]]`` table; (4) validate the whole new text exactly as a run would read it
(:func:`pipeline.decisions.store.parse_document`) — nothing is written when it fails;
(5) write a temporary file in the same folder, fsync, and ``os.replace`` it over the file.
"""

from __future__ import annotations

import fcntl
import os
import re
import tomllib
from contextlib import contextmanager
from datetime import date
from pathlib import Path
from typing import Any, Iterable, Mapping

import tomlkit
import tomlkit.exceptions

from pipeline.decisions.model import ACTIONS, Decision, DecisionSet
from pipeline.decisions.store import (
    FORMAT_VERSION,
    DecisionsError,
    parse_document,
    read_document,
)

ID_PREFIX = "D-"
_NUMBERED = re.compile(r"^D-(\d+)$")

NEW_FILE_HEADER = """\
# FluidLedger curation decisions: replayed on every fit, check, publish and nightly run.
# Format: docs/decisions.md; schema: schemas/decisions.schema.json. Add entries with
# 'fluidledger decide ...' (comments and formatting are kept) or by hand, then commit.
"""


def next_id(decisions: DecisionSet | Iterable[Decision]) -> str:
    """The next free ``D-NNNN`` id (one more than the highest numbered id in use)."""
    numbers = [int(m.group(1)) for d in decisions if (m := _NUMBERED.match(d.id))]
    return f"{ID_PREFIX}{max(numbers, default=0) + 1:04d}"


@contextmanager
def _locked(path: Path):
    lock = path.with_name(f".{path.name}.lock")
    with open(lock, "a+") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


def _table(values: Mapping[str, Any]):
    table = tomlkit.table()
    for key, value in values.items():
        if value is not None:
            table[key] = list(value) if isinstance(value, tuple) else value
    return table


def _document(text: str, label: str):
    try:
        return tomlkit.parse(text)
    except tomlkit.exceptions.ParseError as err:
        raise DecisionsError(f"malformed TOML: {err}", file=label) from None


def render_with(text: str, entry: Mapping[str, Any], label: str) -> str:
    """``text`` with ``entry`` (id, who, when, why and one action table) appended."""
    if text and not text.endswith("\n"):
        text += "\n"
    doc = _document(text or NEW_FILE_HEADER, label)
    if "format_version" not in doc:
        doc["format_version"] = FORMAT_VERSION
    table = _table({k: entry[k] for k in ("id", "who", "when", "why")})
    kinds = [a for a in ACTIONS if a in entry]
    if len(kinds) != 1:
        raise DecisionsError(f"give exactly one action ({', '.join(ACTIONS)})", file=label,
                             decision=str(entry.get("id")))
    table[kinds[0]] = _table(entry[kinds[0]])
    if "decision" in doc:
        existing = doc["decision"]
        if not isinstance(existing, tomlkit.items.AoT):
            raise DecisionsError("'decision' must be an array of [[decision]] tables",
                                 file=label, key="decision")
        table.trivia.indent = "\n"
        existing.append(table)
    else:
        entries = tomlkit.aot()
        entries.append(table)
        doc.append("decision", entries)
    return tomlkit.dumps(doc)


def _atomic_write(path: Path, text: str) -> None:
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        if path.exists():
            os.chmod(tmp, path.stat().st_mode & 0o7777)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


def add_decision(path: str | Path, *, who: str, why: str, action: str,
                 spec: Mapping[str, Any], decision_id: str | None = None,
                 when: date | None = None) -> Decision:
    """Append one decision to ``path`` (created when missing) and return it as parsed back.

    Parameters
    ----------
    path : str or Path
        The decisions file.
    who, why : str
        Curator and reason (both required, not empty).
    action : str
        One of :data:`pipeline.decisions.model.ACTIONS`.
    spec : mapping
        The action's keys (None values are left out).
    decision_id : str, optional
        The id; the next ``D-NNNN`` when None.
    when : date, optional
        The date of the decision; today when None.

    Raises
    ------
    DecisionsError
        When the file is malformed, or the result would be (nothing is written then).
    """
    path = Path(path)
    label = str(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with _locked(path):
        text = path.read_bytes().decode("utf-8-sig") if path.exists() else ""
        document = read_document(path) if path.exists() else {}
        document.setdefault("format_version", FORMAT_VERSION)
        current = parse_document(document, label)  # a broken file is refused, not extended
        entry = {"id": decision_id or next_id(current), "who": who,
                 "when": when or date.today(), "why": why, action: dict(spec)}
        new_text = render_with(text, entry, label)
        try:
            parsed = parse_document(tomllib.loads(new_text), label)
        except tomllib.TOMLDecodeError as err:  # tomlkit produced text tomllib rejects
            raise DecisionsError(f"the edit would not be valid TOML: {err}", file=label) from None
        _atomic_write(path, new_text)
    return parsed.get(entry["id"])
