"""One module per sub-command; each is a thin layer over its stage."""

from __future__ import annotations

import argparse
import math


def finite_float(text: str) -> float:
    """argparse type: a finite number (NaN or infinity would make every comparison false)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return value
