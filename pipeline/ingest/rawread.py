"""Reading raw files defensively: regular files only, read once, bounded before parsing.

* :func:`read_regular` opens a file without blocking (a FIFO named ``batch.toml`` would
  otherwise hang the run), checks on the open descriptor that it is a regular file (so a
  file swapped for a FIFO or a device between a check and the open is caught too), and
  returns its bytes read once: the caller hashes and parses those same bytes.
* :func:`parse_toml` bounds a TOML document before :mod:`tomllib` sees it: its size
  (:data:`MAX_TOML_BYTES`) and its nesting depth (:data:`MAX_TOML_DEPTH`, counted over the
  brackets and braces outside strings and comments, and again over the parsed document for
  dotted keys), so a hostile document gives one clear message instead of a RecursionError.

Limits are documented in docs/batch-contract.md.
"""

from __future__ import annotations

import os
import re
import stat
import tomllib
from pathlib import Path
from typing import Any, Callable

from pipeline.errors import BatchError

#: Largest TOML document read (batch.toml, fluids.toml, decisions.toml) [bytes]
MAX_TOML_BYTES = 8 * 1024 * 1024
#: Deepest nesting of tables, arrays and inline tables in a TOML document
MAX_TOML_DEPTH = 32

_KINDS = ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a named pipe (FIFO)"),
          (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
          (stat.S_ISSOCK, "a socket"))
# strings and comments are skipped whole; brackets outside them count
_TOML_TOKENS = re.compile(
    r'"""(?:[^"\\]|\\.|"(?!""))*"""|\'\'\'.*?\'\'\'|"(?:[^"\\\n]|\\.)*"|\'[^\'\n]*\'|#[^\n]*'
    r'|[\[{]|[\]}]', re.S)


def special_kind(mode: int) -> str | None:
    """What a non-regular file is ('a named pipe (FIFO)', ...), None for a regular file."""
    if stat.S_ISREG(mode):
        return None
    return next((name for test, name in _KINDS if test(mode)), "not a regular file")


def read_regular(path: Path, label: str, *, limit: int | None = None,
                 error: Callable[..., Exception] = BatchError) -> bytes:
    """The bytes of the regular file ``path``, read once.

    Refuses, naming ``label``: a missing file, a directory, FIFO, device or socket (without
    blocking on it), a file that cannot be read, and more than ``limit`` bytes.
    """
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise error("file not found", file=label) from None
    except OSError as err:
        raise error(f"cannot be read: {err.strerror or err}", file=label) from None
    try:
        info = os.fstat(fd)
        kind = special_kind(info.st_mode)
        if kind is not None:
            raise error(f"is {kind}, not a regular file; refused", file=label)
        if limit is not None and info.st_size > limit:
            raise error(f"is {info.st_size:,} bytes long, over the limit of {limit:,} bytes",
                        file=label)
        # the size the file has now in one read (one buffer, not chunks joined into a second
        # copy: a large table would need twice its size); then on to the end of the file (a
        # short read, a file that grew, one that states no size)
        first = os.read(fd, info.st_size + 1) if info.st_size else b""
        chunks, size = [first], len(first)
        while True:
            if limit is not None and size > limit:
                raise error(f"grew past the limit of {limit:,} bytes while being read",
                            file=label)
            chunk = os.read(fd, 1 << 20)
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
        return first if len(chunks) == 1 else b"".join(chunks)
    except OSError as err:
        raise error(f"cannot be read: {err.strerror or err}", file=label) from None
    finally:
        os.close(fd)


def _depth_of_text(text: str) -> tuple[int, int]:
    """(deepest bracket nesting outside strings and comments, the line where it is reached)."""
    depth = deepest = 0
    where = 0
    for m in _TOML_TOKENS.finditer(text):
        token = m.group()
        if token in "[{":
            depth += 1
            if depth > deepest:
                deepest, where = depth, m.start()
        elif token in "]}":
            depth = max(depth - 1, 0)
    return deepest, text.count("\n", 0, where) + 1


def _depth_of_document(document: Any) -> int:
    """Nesting depth of a parsed document, without recursion."""
    deepest, stack = 0, [(document, 0)]
    while stack:
        node, depth = stack.pop()
        if isinstance(node, dict):
            deepest = max(deepest, depth + 1)
            stack.extend((v, depth + 1) for v in node.values())
        elif isinstance(node, list):
            deepest = max(deepest, depth + 1)
            stack.extend((v, depth + 1) for v in node)
    return deepest


def parse_toml(data: bytes, label: str, error: Callable[..., Exception] = BatchError) -> dict:
    """A TOML document parsed within the size and depth bounds; every problem names ``label``
    (and the line, for a syntax error or a nesting that is too deep)."""
    if len(data) > MAX_TOML_BYTES:
        raise error(f"is {len(data):,} bytes long, over the limit of {MAX_TOML_BYTES:,} bytes "
                    "for a TOML document", file=label)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise error(f"not valid UTF-8 (byte {err.start})", file=label) from None
    deepest, line = _depth_of_text(text)
    if deepest > MAX_TOML_DEPTH:
        raise error(f"nested {deepest} levels deep at line {line}; the limit is "
                    f"{MAX_TOML_DEPTH} levels", file=label)
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise error(f"malformed TOML: {err}", file=label) from None
    except RecursionError:
        raise error(f"nested too deeply to parse; the limit is {MAX_TOML_DEPTH} levels",
                    file=label) from None
    depth = _depth_of_document(document)
    if depth > MAX_TOML_DEPTH:
        raise error(f"nested {depth} levels deep (dotted keys or table headers); the limit is "
                    f"{MAX_TOML_DEPTH} levels", file=label)
    return document
