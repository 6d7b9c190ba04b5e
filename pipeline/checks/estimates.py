"""Vapour pressures estimated from stated constants alone, for comparing a single file.

When a fluid has one vapour-pressure file and no published reference equation, the file can
still be compared with what its stated constants imply (on their common temperature range
only):

* the corresponding-states correlation of Lee and Kesler,
  ln(p/pc) = f0(Tr) + ω f1(Tr), with
  f0 = 5.92714 − 6.09648/Tr − 1.28862 ln Tr + 0.169347 Tr^6,
  f1 = 15.2518 − 15.6875/Tr − 13.4721 ln Tr + 0.43577 Tr^6
  (B. I. Lee, M. G. Kesler, AIChE J. 21, 510 (1975)), which needs Tc, pc and ω. Where ω is not
  stated it is solved from another stated point on the curve (the normal boiling point, or the
  triple point with its pressure), so the estimate passes through that point exactly.

The estimate is good to a few per cent for simple fluids and worse for polar ones; its
uncertainty is the caller's floor, far below the factors and offsets of unit mix-ups.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

P_ATM = 101325.0   # standard atmosphere [Pa] (the normal boiling point's pressure, by definition)
TR_MIN = 0.3       # below this reduced temperature the correlation is not used


def lee_kesler_f(Tr: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(f0, f1) of the Lee-Kesler vapour-pressure correlation at reduced temperature Tr."""
    Tr = np.asarray(Tr, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        f0 = 5.92714 - 6.09648 / Tr - 1.28862 * np.log(Tr) + 0.169347 * Tr ** 6
        f1 = 15.2518 - 15.6875 / Tr - 13.4721 * np.log(Tr) + 0.43577 * Tr ** 6
    return f0, f1


@dataclass(frozen=True)
class CorrespondingStates:
    """p(T) = pc exp(f0(Tr) + ω f1(Tr)) on TR_MIN Tc <= T <= Tc; NaN elsewhere."""

    Tc_K: float
    pc_Pa: float
    omega: float
    basis: str

    def __call__(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        Tr = T / self.Tc_K
        f0, f1 = lee_kesler_f(Tr)
        p = self.pc_Pa * np.exp(f0 + self.omega * f1)
        return np.where((Tr >= TR_MIN) & (Tr <= 1.0), p, np.nan)


def omega_through(Tc: float, pc: float, T: float, p: float) -> float:
    """The ω for which the Lee-Kesler curve passes through (T, p)."""
    f0, f1 = lee_kesler_f(np.array([T / Tc]))
    return float((math.log(p / pc) - f0[0]) / f1[0])


def estimate_from_constants(Tc: float, pc: float, *, omega: float | None = None,
                            T_nb: float | None = None, triple: tuple[float, float] | None = None
                            ) -> CorrespondingStates | None:
    """The best corresponding-states estimate the stated constants allow, or None.

    ``omega`` (a stated acentric factor) first; else ω through the normal boiling point
    ``T_nb`` (p = 101325 Pa); else through the triple point ``triple`` = (Tt, pt).
    """
    if not (math.isfinite(Tc) and math.isfinite(pc) and Tc > 0 and pc > 0):
        return None
    if omega is not None and math.isfinite(omega):
        return CorrespondingStates(Tc, pc, omega, f"Lee-Kesler with the stated ω = {omega:.4g}")
    for T, p, what in ((T_nb, P_ATM, "the normal boiling point"),
                       (*(triple or (None, None)), "the triple point")):
        if T is not None and p is not None and math.isfinite(T) and math.isfinite(p) \
                and TR_MIN <= T / Tc < 1.0 and 0 < p < pc:
            w = omega_through(Tc, pc, T, p)
            return CorrespondingStates(Tc, pc, w, f"Lee-Kesler through {what} (ω = {w:.4g})")
    return None
