"""A released phase-boundary curve, evaluated on numpy arrays.

:class:`ReleasedCurve` wraps the :class:`pipeline.correlations.Curve` rebuilt from one row of
a release's ``curves`` table (form, parameters, exponents, reference temperature, covariance,
validity range), so that Python evaluates exactly what the SQL macros of the published file
evaluate: the value, and NaN outside the validity range where the macros return NULL.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: curve kind -> (boundary, quantity), named as the SQL macros are (fl_<kind>)
CURVE_KINDS = {
    "vapour_pressure": ("liquid-vapour", "pressure"),
    "melting_pressure": ("solid-liquid", "pressure"),
    "sublimation_pressure": ("solid-vapour", "pressure"),
    "saturated_liquid_density": ("liquid-vapour", "rho_liquid"),
    "saturated_vapour_density": ("liquid-vapour", "rho_vapour"),
}


@dataclass(frozen=True)
class ReleasedCurve:
    """One curve of a release: its identity, its fit statistics, and the correlation.

    Call it (or :meth:`value`) with temperatures [K] to get values [Pa or kg/m^3]; NaN
    outside ``T_min_K``..``T_max_K``.
    """

    value_id: str
    fluid_id: str
    boundary: str
    solid_phase: str
    quantity: str
    unit: str
    form: str
    form_citation: str
    fit_id: str
    T_min_K: float
    T_max_K: float
    n_points: int
    n_used: int
    check_status: str
    release_id: str
    curve: object          # pipeline.correlations.Curve

    @classmethod
    def from_row(cls, row: dict) -> "ReleasedCurve":
        """Rebuild from a row of the release's ``curves`` table (as the exports hold it)."""
        from pipeline.correlations import Curve

        curve = Curve(form=row["form"], params=tuple(row["params"]),
                      ref={"T_ref_K": row["T_ref_K"], "exponents": tuple(row["exponents"])},
                      covariance=row["covariance"], T_min_K=row["T_min_K"],
                      T_max_K=row["T_max_K"], citation=row["form_citation"])
        return cls(value_id=row["value_id"], fluid_id=row["fluid_id"], boundary=row["boundary"],
                   solid_phase=row["solid_phase"], quantity=row["quantity"], unit=row["unit"],
                   form=row["form"], form_citation=row["form_citation"], fit_id=row["curve_id"],
                   T_min_K=float(row["T_min_K"]), T_max_K=float(row["T_max_K"]),
                   n_points=int(row["n_points"]), n_used=int(row["n_used"]),
                   check_status=row["check_status"], release_id=row["release_id"], curve=curve)

    def __repr__(self) -> str:
        return (f"<ReleasedCurve {self.value_id} [{self.unit}] {self.form}, "
                f"{self.T_min_K:g}-{self.T_max_K:g} K, checks: {self.check_status}>")

    @property
    def T_range(self) -> tuple[float, float]:
        """Validity range (T_min_K, T_max_K) [K]: the curve is NaN outside it."""
        return self.T_min_K, self.T_max_K

    def __call__(self, T):
        return self.value(T)

    def value(self, T):
        """Curve value at T [K]: [Pa] or [kg/m^3], NaN outside the validity range."""
        return self.curve.value(T)

    def u(self, T):
        """Standard uncertainty (k = 1) of the value at T [K], same unit: the fit's parameter
        covariance propagated to the value, sqrt(J C J^T) (delta method); NaN outside the
        validity range or when the release holds no covariance for the curve."""
        return self.curve.u(T)

    def slope(self, T):
        """Analytic d value / dT at T [K]: [Pa/K] or [kg/(m^3 K)]; NaN outside the range."""
        return self.curve.slope(T)

    def inverse(self, y):
        """Temperature [K] at which the curve takes the value y [Pa or kg/m^3] (for a vapour
        pressure: the saturation temperature), lowest root within the validity range; NaN
        where there is none. Same grid bracketing and bisection as the SQL macro
        ``fl_curve_inverse``."""
        return self.curve.inverse(y)

    def table(self, T):
        """A pandas DataFrame of T_K, value and its standard uncertainty ``u`` at T [K]."""
        import pandas as pd

        T = np.atleast_1d(np.asarray(T, dtype=float))
        return pd.DataFrame({"T_K": T, "value": np.atleast_1d(self.value(T)),
                             "u": np.atleast_1d(self.u(T))})
