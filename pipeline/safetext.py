"""Text that is safe to show: control characters escaped at every output point.

Names and texts from raw files (folder names, citations, a decision's reason, CSV cells)
reach the terminal, the log, junit.xml, summary.md and report.html. A control character
among them can rewrite a terminal (ESC sequences), fake a log line (a carriage return),
make XML invalid (XML 1.0 forbids most C0 characters) or reorder text on screen (the
Unicode bidirectional overrides). :func:`clean` replaces each such character by a visible
escape (``\\x1b``, ``\\u202e``), so nothing is lost and nothing is interpreted.

The output points call it once each: :class:`SafeStream` wraps ``sys.stdout`` and
``sys.stderr`` for the CLI (every print and the console log), :class:`SafeFormatter` formats
the run log, and the JUnit, Markdown and HTML writers clean their finished text. Rich
consoles are given :func:`raw` streams (their own colour codes must pass) and cleaned cells.
"""

from __future__ import annotations

import logging
import re

#: C0 controls but tab and newline, DEL, C1 controls, the bidirectional marks, embeddings,
#: overrides and isolates, and lone surrogates (undecodable bytes of a file name)
UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u202a-\u202e"
                    "\u2066-\u2069\ud800-\udfff]")
_LINE_BREAKS = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u202a-\u202e"
                          "\u2066-\u2069\ud800-\udfff]")


def _escape(match: re.Match) -> str:
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def clean(text: object, *, one_line: bool = False) -> str:
    """``text`` with every unsafe character replaced by a visible escape.

    Parameters
    ----------
    text : object
        Converted with ``str``.
    one_line : bool
        Also escape tabs and newlines (for messages that must stay on one line).
    """
    text = str(text)
    return (_LINE_BREAKS if one_line else UNSAFE).sub(_escape, text)


class SafeStream:
    """A text stream that cleans what is written to it and delegates everything else."""

    def __init__(self, stream):
        self._stream = stream

    def write(self, text: str) -> int:
        self._stream.write(clean(text))
        return len(text)

    def writelines(self, lines) -> None:
        for line in lines:
            self.write(line)

    @property
    def raw_stream(self):
        return self._stream

    def __getattr__(self, name):
        return getattr(self._stream, name)


def raw(stream):
    """The stream under a :class:`SafeStream` (for rich, whose output is its own)."""
    return stream.raw_stream if isinstance(stream, SafeStream) else stream


class SafeFormatter(logging.Formatter):
    """A log formatter whose lines carry no control characters (a message stays one line)."""

    def formatMessage(self, record: logging.LogRecord) -> str:
        return clean(super().formatMessage(record), one_line=True)

    def formatException(self, ei) -> str:
        return clean(super().formatException(ei))
