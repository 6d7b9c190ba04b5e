"""Property look-ups shared by the checks: densities and enthalpies near a temperature.

A value comes from the first place that has it: a fitted curve covering T, then the
observation nearest in T (within a tolerance). Each look-up returns a :class:`Looked`
(value, standard uncertainty, and the basis, for the evidence).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

import numpy as np

from pipeline.checks.data import FluidData
from pipeline.checks.points import SINGLE_SOLID, curve_label, solid_label  # noqa: F401 (re-exported)

R_GAS = 8.314462618  # molar gas constant [J/(mol K)] (CODATA 2018, exact since the 2019 SI)

#: enthalpy quantity of each boundary and the stated constant giving it at the triple point
ENTHALPY_OF = {"liquid-vapour": ("h_vaporization", "h_vaporization_triple"),
               "solid-liquid": ("h_fusion", "h_fusion_triple"),
               "solid-vapour": ("h_sublimation", "h_sublimation_triple")}
#: the two phases of each boundary, low-density side last: Δv = M (1/ρ_second − 1/ρ_first)
PHASES_OF = {"liquid-vapour": ("liquid", "vapour"), "solid-liquid": ("solid", "liquid"),
             "solid-vapour": ("solid", "vapour")}


@dataclass(frozen=True)
class Looked:
    """A looked-up value [SI] with its standard uncertainty (NaN if unknown) and basis."""

    value: float
    u: float
    basis: str
    obs_id: int | None = None

    def evidence(self) -> dict:
        return {"value": self.value, "u": self.u, "basis": self.basis, "obs_id": self.obs_id}


def lookup_requests(fluid: FluidData, T: float) -> list[tuple[FluidData, tuple, float]]:
    """The curve points a look-up at ``T`` may read (every fitted curve covering T), for
    :meth:`~pipeline.checks.data.CheckBatch.prefetch`."""
    return [(fluid, key, T) for key, fitted in fluid.curves.items() if fitted.covers(T)]


def _from_curve(fluid: FluidData, key, T: float) -> Looked | None:
    fitted = fluid.curve(*key)
    if fitted is None or not fitted.covers(T):
        return None
    point, _ = fluid.at(key, T)
    if point is None:
        return None
    return Looked(point.value, point.u, f"fit {fitted.fit_id} ({key[0]} {key[2]})")


def _from_observations(fluid: FluidData, key, T: float, T_tol_K: float) -> Looked | None:
    s = fluid.series(key[0], key[2], key[1])
    if not len(s):
        return None
    i = int(np.argmin(np.abs(s.T - T)))
    if abs(s.T[i] - T) > T_tol_K:
        return None
    value, u = float(s.value[i]), float(s.u_value_si[i])
    if not (math.isfinite(u) and u > 0):   # the budget's default for its source kind
        u = abs(value) * fluid.budget.uncertainty.observed_rel(key[2], str(s.source_kind[i]))
    return Looked(value, u,
                  f"observation {int(s.obs_id[i])} ({s.file_path[i]} row {int(s.row_number[i])}, "
                  f"T = {s.T[i]:.6g} K)", int(s.obs_id[i]))


def look_up(fluid: FluidData, quantity: str, places: Iterable[tuple[str, str]], T: float,
            T_tol_K: float) -> Looked | None:
    """``quantity`` at ``T`` from the first of ``places`` ((boundary, solid_phase)) that has it.

    Within a place a fit covering T comes first, then the nearest observation within T_tol_K.
    """
    for boundary, solid in places:
        key = (boundary, solid, quantity)
        found = _from_curve(fluid, key, T) or _from_observations(fluid, key, T, T_tol_K)
        if found is not None:
            return found
    return None


def density_places(fluid: FluidData, phase: str, boundary: str, solid_phase: str) -> list[tuple[str, str]]:
    """Where the density of ``phase`` on ``boundary`` may be read, best first.

    The liquid on a melting curve: the melting data, then the saturated liquid when that solid
    has a triple point with the vapour (the melting curve starts there). The vapour on a
    sublimation curve: the sublimation data, then the saturated vapour.
    """
    own = [(boundary, solid_phase)]
    solid = solid_phase or SINGLE_SOLID
    if phase == "liquid" and boundary == "solid-liquid":
        return own + ([("liquid-vapour", "")] if fluid.vapour_triple_point(solid) else [])
    if phase == "solid":
        other = {"solid-liquid": "solid-vapour", "solid-vapour": "solid-liquid"}[boundary]
        return own + [(other, solid_phase)]
    if phase == "vapour" and boundary == "solid-vapour":
        return own + [("liquid-vapour", "")]
    return own


def density(fluid: FluidData, phase: str, boundary: str, solid_phase: str, T: float,
            T_tol_K: float) -> Looked | None:
    """Density [kg/m^3] of ``phase`` (liquid | vapour | solid) at ``T`` on ``boundary``."""
    return look_up(fluid, f"rho_{phase}", density_places(fluid, phase, boundary, solid_phase), T,
                   T_tol_K)


def vapour_density_estimate(fluid: FluidData, p: float, T: float) -> Looked:
    """ρ = p M / (Z R T) [kg/m^3] of a vapour at low pressure, when nothing is stored.

    Z = 1 + B p / (R T), with the second virial coefficient from the corresponding-states
    correlation B pc/(R Tc) = B0 + ω B1, B0 = 0.083 − 0.422/Tr^1.6, B1 = 0.139 − 0.172/Tr^4.2
    (K. S. Pitzer, R. F. Curl, J. Am. Chem. Soc. 79, 2369 (1957), in the form of M. M. Abbott,
    from memory) when the critical point is stated (ω from a stated acentric factor, else 0);
    the ideal gas otherwise. Its standard uncertainty is half the correction (at least 1 %),
    10 % for the bare ideal gas.
    """
    cp = fluid.critical_point
    if cp is None or not (math.isfinite(cp.T_K) and math.isfinite(cp.p_Pa)):
        return Looked(p * fluid.molar_mass / (R_GAS * T), 0.1 * p * fluid.molar_mass / (R_GAS * T),
                      f"ideal gas at p = {p:.6g} Pa")
    omega = fluid.constant("acentric_factor")
    w = omega[0] if omega else 0.0
    Tr = T / cp.T_K
    B = (0.083 - 0.422 / Tr ** 1.6 + w * (0.139 - 0.172 / Tr ** 4.2)) * R_GAS * cp.T_K / cp.p_Pa
    Z = 1.0 + B * p / (R_GAS * T)
    if not (0.5 < Z <= 1.5):   # outside the virial range: the ideal gas, loosely
        return Looked(p * fluid.molar_mass / (R_GAS * T), 0.1 * p * fluid.molar_mass / (R_GAS * T),
                      f"ideal gas at p = {p:.6g} Pa")
    rho = p * fluid.molar_mass / (Z * R_GAS * T)
    return Looked(rho, rho * max(abs(Z - 1.0) / 2.0, 0.01),
                  f"virial estimate at p = {p:.6g} Pa (Z = {Z:.4f})")


def enthalpy(fluid: FluidData, boundary: str, solid_phase: str, T: float, T_tol_K: float,
             triple_T: float | None = None) -> Looked | None:
    """Molar enthalpy of transition [J/mol] on ``boundary`` at ``T``.

    A stated triple-point constant (``h_fusion_triple`` ...) is used when ``T`` is within
    ``T_tol_K`` of ``triple_T``; otherwise observations.
    """
    quantity, constant = ENTHALPY_OF[boundary]
    if triple_T is not None and abs(T - triple_T) <= T_tol_K:
        stated = fluid.constant(constant)   # u: stated, else the budget's default
        if stated is not None:
            return Looked(stated[0], stated[1], f"stated {constant} ({', '.join(stated[2])})")
    return look_up(fluid, quantity, [(boundary, solid_phase)], T, T_tol_K)


def delta_v(molar_mass: float, rho_first: Looked, rho_second: Looked) -> tuple[float, float]:
    """Molar volume change M (1/ρ_second − 1/ρ_first) [m^3/mol] and its standard uncertainty."""
    dv = molar_mass * (1.0 / rho_second.value - 1.0 / rho_first.value)
    u = molar_mass * math.hypot(_u(rho_first) / rho_first.value ** 2,
                                _u(rho_second) / rho_second.value ** 2)
    return dv, u


def _u(looked: Looked) -> float:
    return 0.0 if not math.isfinite(looked.u) else looked.u


def solid_of(phases: Iterable[str]) -> str | None:
    """The solid label among ``phases`` as a solid_phase value ('' for the single solid)."""
    for p in phases:
        if p not in ("vapour", "liquid"):
            return solid_label(p)
    return None
