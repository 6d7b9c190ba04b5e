"""Python's cyclic garbage collector kept out of a bulk pass (the check run, the report's
result fragments).

A pass over thousands of fluids holds hundreds of thousands of objects and makes more;
every full collection walks them all, again and again as they grow. Measured: the check run
over 4,000 fluids took 35 s with the collector against 28 s without (before results became
columns), and parsing the report's fragment headers beside 51,000 results took 1.4 s with
it against 0.3 s without (under load). Neither pass makes reference cycles worth collecting.
"""

from __future__ import annotations

import gc
from contextlib import contextmanager


@contextmanager
def quiet_collector():
    """The collector off for the block: ``gc.freeze`` sets aside what is alive at the start;
    what the block made then joins the oldest generation, collected when that one is."""
    enabled = gc.isenabled()
    gc.freeze()
    gc.disable()
    try:
        yield
    finally:
        gc.freeze()       # what the block made joins the oldest generation, not the youngest,
        if enabled:       # so re-enabling does not start a collection over all of it
            gc.enable()
        gc.unfreeze()
