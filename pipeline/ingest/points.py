"""Fixed points and stated constants from batch.toml, normalised to SI and ITS-90.

Each ``[[fixed_point]]`` or ``[[constant]]`` entry is a "row" of the manifest (numbered from 1);
an entry that cannot be used goes to quarantine with a reason, like a CSV row.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

import numpy as np

from pipeline.ingest.contract import ConstantSpec, FixedPointSpec, PointValue
from pipeline.ingest.scales import to_its90
from pipeline.ingest.units import conversion

CONSTANT_KIND = {
    "acentric_factor": ("dimensionless", "1"),
    "normal_boiling_T": ("temperature", "K"),
    "h_fusion_triple": ("enthalpy", "J/mol"),
    "h_vaporization_triple": ("enthalpy", "J/mol"),
    "h_sublimation_triple": ("enthalpy", "J/mol"),
}


@dataclass(frozen=True)
class Rejected:
    """A manifest entry sent to quarantine."""

    entry: int
    key: str
    code: str
    message: str
    raw: str


def _si(v: PointValue, kind: str, molar_mass: float) -> tuple[float, float | None]:
    ambient = None
    if v.ambient is not None:
        ambient = conversion(v.ambient.unit, "pressure").apply(np.array([v.ambient.value]))[0]
    lin = conversion(v.unit, kind, molar_mass_kg_mol=molar_mass, reference=v.reference,
                     ambient_Pa=ambient)
    value = float(lin.apply(np.array([v.value]))[0])
    if kind == "temperature" and v.scale != "ITS-90":
        value = float(to_its90(np.array([value]), v.scale)[0])
    u = None
    if v.u is not None:
        du = conversion(v.unit, kind, molar_mass_kg_mol=molar_mass, difference=True)
        u = v.u * du.factor / v.coverage
    return value, u


def fixed_point_row(spec: FixedPointSpec, entry: int, molar_mass: float, label: str):
    """(row dict, None) for a usable entry, or (None, Rejected).

    A point may state its temperature only (compilations often give a triple-point temperature
    without its pressure): it is stored with ``p_Pa`` NULL and still anchors fits (they fix the
    reference temperature only) and bounds ranges; checks that need pt or pc skip or compare
    the curves with each other instead.
    """
    raw = json.dumps(spec.model_dump(exclude_none=True), sort_keys=True)
    where = f"{label}, fixed_point entry {entry}"
    T, uT = _si(spec.T, "temperature", molar_mass)
    p = up = None
    if spec.p is not None:
        p, up = _si(spec.p, "pressure", molar_mass)
    rho = urho = None
    if spec.rho is not None:
        rho, urho = _si(spec.rho, "density", molar_mass)
    for key, value, code in (("T", T, "non-positive-temperature"),
                             ("p", p, "non-positive-pressure"),
                             ("rho", rho, "non-positive-value")):
        if value is not None and (not math.isfinite(value) or value <= 0):
            what = "out-of-scale-range" if key == "T" and math.isnan(value) else code
            return None, Rejected(entry, key, what, f"{where}, key '{key}': {what} ({value})", raw)
    phases = ",".join(spec.phase_list())
    return dict(kind=spec.kind, phases=phases, T_K=T, u_T_K=uT, p_Pa=p, u_p_Pa=up,
                rho_kg_m3=rho, u_rho_kg_m3=urho, entry_number=entry, original_json=raw), None


def constant_row(spec: ConstantSpec, entry: int, molar_mass: float, label: str):
    """(row dict, None) for a usable constant, or (None, Rejected)."""
    raw = json.dumps(spec.model_dump(exclude_none=True), sort_keys=True)
    kind, si_unit = CONSTANT_KIND[spec.name]
    value, u = _si(PointValue(value=spec.value, unit=spec.unit, u=spec.u, coverage=spec.coverage,
                              scale=spec.scale), kind, molar_mass)
    if not math.isfinite(value) or (kind != "dimensionless" and value <= 0):
        return None, Rejected(entry, "value", "non-positive-value",
                              f"{label}, constant entry {entry}, key 'value': {value}", raw)
    return dict(name=spec.name, value_si=value, u_si=u, si_unit=si_unit, entry_number=entry,
                original_json=raw), None
