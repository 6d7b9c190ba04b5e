"""The Python API of published releases: ``from pipeline import open_release``.

It reads the published file (or a release's export folder), never the working store; see
:mod:`pipeline.api.release` and :mod:`pipeline.api.curve`.
"""

from pipeline.api.curve import CURVE_KINDS, ReleasedCurve
from pipeline.api.release import Constant, Release, ReleaseError, open_release

__all__ = ["CURVE_KINDS", "Constant", "Release", "ReleaseError", "ReleasedCurve",
           "open_release"]
