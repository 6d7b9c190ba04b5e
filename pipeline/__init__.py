"""FluidLedger: curate pure-fluid phase-boundary data into a trusted DuckDB store.

``from pipeline import open_release`` opens a published release (:mod:`pipeline.api`); it is
imported on first use, so ``import pipeline`` stays cheap for the command line.
"""

__version__ = "0.1.0"

_LAZY = {"open_release": "pipeline.api", "Release": "pipeline.api",
         "ReleasedCurve": "pipeline.api", "ReleaseError": "pipeline.api"}


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'pipeline' has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_LAZY))
