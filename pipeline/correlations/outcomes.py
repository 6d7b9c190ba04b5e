"""What a fit gives: the outcome of a series (:class:`FitOutcome`), one form's fit
(:class:`FormFit`), and the codes of skipped fits and set-aside points."""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import Enum

import numpy as np

from pipeline.correlations.base import Curve


class PointFlag(str, Enum):
    """Why a point was not used in the final fit."""

    OUTLIER = "outlier"
    ABOVE_CRITICAL = "above-critical-temperature"
    ABOVE_TRIPLE = "above-triple-temperature"
    OUTSIDE_DOMAIN = "outside-form-domain"
    NON_FINITE_SLOPE = "non-finite-slope"


class SkipCode(str, Enum):
    """Why a fit was not made."""

    BAD_SHAPE = "bad-shape"
    NON_FINITE = "non-finite"
    NON_POSITIVE = "non-positive"
    NO_REFERENCE = "no-reference-temperature"
    CROSSES_REFERENCE = "crosses-reference-temperature"
    TOO_FEW_POINTS = "too-few-points"
    NON_MONOTONIC = "non-monotonic"
    SINGULAR = "singular-design"
    OPTIMISER_FAILED = "optimiser-failed"


@dataclass(frozen=True, eq=False)
class FormFit:
    """One weighted fit of one form with a fixed number of terms (no outlier handling)."""

    form: str
    params: np.ndarray
    covariance: np.ndarray  # scaled by max(1, reduced chi-square)
    chi2: float
    n: int
    exponents: tuple[float, ...]
    method: str             # "linear" | "nonlinear"
    nfev: int = 0

    @property
    def n_params(self) -> int:
        """Number of fitted parameters."""
        return int(self.params.size)

    @property
    def reduced_chi2(self) -> float:
        """chi2 / (n - k); NaN with no degrees of freedom."""
        dof = self.n - self.n_params
        return self.chi2 / dof if dof > 0 else math.nan


@dataclass(frozen=True, eq=False)
class FitOutcome:
    """Result of :func:`fit_curve`: the selected curve and what happened to every point.

    Arrays (``outlier_mask``, ``z``) are in the order of the input points. ``z`` holds the
    normalised residuals (obs - model)/u_z of all points, flagged ones included (NaN where the
    form is undefined). ``point_flags[i]`` is "" for a used point, else a :class:`PointFlag`
    value. ``weighted_rms`` is sqrt(sum w r^2 / sum w) of the fit-space residuals r of the used
    points (``fit_space`` says which space: ln(value) residuals are relative).
    """

    curve: Curve | None
    form: str | None
    n_used: int
    n_flagged: int
    outlier_mask: np.ndarray
    z: np.ndarray
    weighted_rms: float
    reduced_chi2: float
    bic: float
    skipped_reason: str | None = None
    skip_code: str | None = None
    point_flags: tuple[str, ...] = ()
    candidates: tuple[tuple[str, int, float], ...] = ()
    criterion: str = "bic"
    fit_space: str = ""

    @property
    def fitted(self) -> bool:
        """True when a curve was fitted."""
        return self.skipped_reason is None

    def asdict(self) -> dict:
        """Machine form (JSON-safe)."""
        def num(x):
            return None if x is None or not math.isfinite(x) else float(x)
        return {
            "curve": None if self.curve is None else self.curve.to_dict(),
            "form": self.form, "n_used": self.n_used, "n_flagged": self.n_flagged,
            "outlier_mask": [bool(v) for v in self.outlier_mask],
            "z": [num(v) for v in self.z],
            "weighted_rms": num(self.weighted_rms), "reduced_chi2": num(self.reduced_chi2),
            "bic": num(self.bic), "skipped_reason": self.skipped_reason,
            "skip_code": self.skip_code, "point_flags": list(self.point_flags),
            "candidates": [[f, k, num(c)] for f, k, c in self.candidates],
            "criterion": self.criterion, "fit_space": self.fit_space,
        }

    def asstr(self) -> str:
        """Human form, one line."""
        if not self.fitted:
            return f"skipped ({self.skip_code}): {self.skipped_reason}"
        n_out = int(np.sum(self.outlier_mask))
        return (f"{self.form} ({len(self.curve.params)} params): {self.n_used} points used, "
                f"{self.n_flagged} flagged ({n_out} outliers |z| > threshold); "
                f"reduced chi2 = {self.reduced_chi2:.3g}, weighted RMS = "
                f"{self.weighted_rms:.3g} in {self.fit_space}, BIC = {self.bic:.2f}")
