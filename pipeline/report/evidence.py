"""Check evidence as HTML tables with sensible significant figures (no raw JSON).

Evidence is what a check stored beside a finding: numbers used, observations named, values
per source. It is shown as a key/value table; a list of records (observations, sources) as a
table with one column per field; numbers with six significant digits at most, so float noise
(``3.8847999999999843``) reads ``3.8848``. Every string goes through ``html.escape``.
"""

from __future__ import annotations

import math
from html import escape
from typing import Any, Mapping, Sequence

#: Rows of a list of records shown before "... and N more".
MAX_ROWS = 20
DIGITS = 6


def e(value: Any) -> str:
    """Escape ``value`` for HTML text or a quoted attribute."""
    return escape("" if value is None else str(value), quote=True)


def number(x: Any, digits: int = DIGITS) -> str:
    """A number with at most ``digits`` significant digits ('' for None, NaN)."""
    if x is None:
        return ""
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, int):
        return str(x)
    if isinstance(x, float):
        if not math.isfinite(x):
            return "" if math.isnan(x) else ("inf" if x > 0 else "-inf")
        return f"{x:.{digits}g}"
    return str(x)


def relative(u: float | None, value: float | None, digits: int = 2) -> str:
    """``u / |value|`` in percent (or ppm below 0.01 %), '' when it cannot be formed."""
    if u is None or value is None or not (math.isfinite(u) and math.isfinite(value)) \
            or value == 0:
        return ""
    r = abs(u / value)
    if r < 1e-4:
        return f"{r * 1e6:.{digits}g} ppm"
    return f"{r * 100:.0f} %" if r >= 1.0 else f"{r * 100:.{digits}g} %"


def _records(items: Sequence) -> bool:
    return bool(items) and all(isinstance(i, Mapping) for i in items)


def _scalar(value: Any) -> str:
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return f'<span class="num">{e(number(value))}</span>'
    return e(number(value) if isinstance(value, bool) else value)


def _value(value: Any, depth: int) -> str:
    if isinstance(value, Mapping):
        return evidence_table(value, depth + 1) if value else '<span class="muted">-</span>'
    if isinstance(value, (list, tuple)):
        if _records(value):
            return records_table(value, depth + 1)
        if not value:
            return '<span class="muted">none</span>'
        shown = ", ".join(_scalar(v) if not isinstance(v, (Mapping, list, tuple))
                          else _value(v, depth + 1) for v in value[:MAX_ROWS])
        more = f" &hellip; and {len(value) - MAX_ROWS} more" if len(value) > MAX_ROWS else ""
        return shown + more
    return _scalar(value)


def records_table(items: Sequence[Mapping], depth: int = 0) -> str:
    """A list of records as a table, one column per field (in first-seen order)."""
    keys = list(dict.fromkeys(k for item in items for k in item))
    head = "".join(f"<th>{e(k)}</th>" for k in keys)
    rows = []
    for item in items[:MAX_ROWS]:
        cells = "".join(
            f'<td class="num">{e(number(item.get(k)))}</td>'
            if isinstance(item.get(k), (int, float)) and not isinstance(item.get(k), bool)
            else f"<td>{_value(item.get(k), depth)}</td>" for k in keys)
        rows.append(f"<tr>{cells}</tr>")
    if len(items) > MAX_ROWS:
        rows.append(f'<tr><td colspan="{len(keys)}" class="muted">&hellip; and '
                    f"{len(items) - MAX_ROWS} more</td></tr>")
    return (f'<table class="evidence"><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}'
            "</tbody></table>")


def evidence_table(evidence: Mapping[str, Any], depth: int = 0) -> str:
    """A finding's evidence as a key/value table (nested values as nested tables)."""
    if not evidence:
        return '<p class="muted">no evidence recorded</p>'
    rows = "".join(f'<tr><th scope="row">{e(k)}</th><td>{_value(v, depth)}</td></tr>'
                   for k, v in evidence.items())
    return f'<table class="evidence kv"><tbody>{rows}</tbody></table>'
