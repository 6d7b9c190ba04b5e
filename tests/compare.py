"""Comparing results of two implementations: equal, floats within a relative tolerance."""

from __future__ import annotations

import math

#: Relative tolerance of results that must not change (issue 14: fits to 1e-10 relative).
RTOL = 1e-10


def close(a, b, rtol: float = RTOL) -> bool:
    """Equal; floats within ``rtol`` relative (NaN equal to NaN); containers item by item."""
    if isinstance(a, float) and isinstance(b, float):
        if math.isnan(a) or math.isnan(b):
            return math.isnan(a) and math.isnan(b)
        return abs(a - b) <= rtol * max(abs(a), abs(b))
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(close(x, y, rtol) for x, y in zip(a, b))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(close(a[k], b[k], rtol) for k in a)
    return a == b
