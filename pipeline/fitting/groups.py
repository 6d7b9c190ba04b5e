"""Which groups get fitted, against which reference point, with which candidate forms.

Pure functions over DataFrames read by the stage; no I/O here.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

# (boundary, quantity) -> (reference kind, candidate forms in order of preference)
FIT_PLAN: dict[tuple[str, str], tuple[str, tuple[str, ...]]] = {
    ("liquid-vapour", "pressure"): ("critical", ("wagner-3-6", "wagner-2.5-5",
                                                 "wagner-pruss-6")),
    ("liquid-vapour", "rho_liquid"): ("critical", ("density-power", "density-log")),
    ("liquid-vapour", "rho_vapour"): ("critical", ("density-log-tc", "density-log")),
    ("solid-vapour", "pressure"): ("triple", ("sublimation-power",)),
    # every published melting form: the IAPWS R14-08 forms of ices Ih, III, V, VI and VII keep
    # water's curves within the release's uncertainty
    ("solid-liquid", "pressure"): ("triple", ("melting-polynomial", "melting-simon-sum",
                                              "iapws-melting", "iapws-melting-iii",
                                              "iapws-melting-v", "iapws-melting-vi",
                                              "iapws-melting-vii", "simon-glatzel")),
}
FITTED_QUANTITIES = ("pressure", "rho_liquid", "rho_vapour")
SOURCE_RANK = {"standard": 0, "evaluated": 1, "literature": 2, "measurement": 3, "estimate": 4}


@dataclass(frozen=True)
class Reference:
    """The fixed point a group's correlation is anchored to."""

    fp_id: int
    kind: str
    T_K: float
    p_Pa: float
    rho_kg_m3: float | None
    source_id: str


def _best(points: list[dict]) -> dict | None:
    """The point of the best-ranked source kind, then the smallest u(T), then the first id."""
    def key(r: dict) -> tuple:
        u = r.get("u_T_K")
        return (SOURCE_RANK.get(r.get("source_kind"), 9),
                float("inf") if u is None or pd.isna(u) else float(u), r["fp_id"])

    return min(points, key=key) if points else None


def _to_reference(row: dict | None) -> Reference | None:
    if row is None:
        return None
    rho = row.get("rho_kg_m3")
    return Reference(int(row["fp_id"]), row["kind"], float(row["T_K"]), float(row["p_Pa"]),
                     None if rho is None or pd.isna(rho) else float(rho), row["source_id"])


def reference_point(fixed: pd.DataFrame | list[dict], boundary: str,
                    solid_phase: str) -> Reference | None:
    """The anchoring point: the critical point for liquid-vapour groups; for a solid boundary
    the triple point of that solid with liquid (melting) or vapour (sublimation), preferring
    the one that also holds vapour (melting) or liquid (sublimation), else the lowest in T.
    Among several sources the best-ranked kind, then the smallest u(T) wins.

    ``fixed``: the fluid's fixed points, a DataFrame or its records (the fit stage passes
    records, split per fluid once)."""
    points = fixed.to_dict("records") if isinstance(fixed, pd.DataFrame) else fixed
    if boundary == "liquid-vapour":
        return _to_reference(_best([r for r in points if r["kind"] == "critical"]))
    solid = solid_phase or "solid"
    other = "liquid" if boundary == "solid-liquid" else "vapour"
    third = "vapour" if other == "liquid" else "liquid"
    candidates = [r for r in points if r["kind"] == "triple"
                  and {solid, other} <= set(str(r["phases"]).split(","))]
    if not candidates:
        return None
    with_third = [r for r in candidates if third in str(r["phases"]).split(",")]
    if with_third:
        return _to_reference(_best(with_third))
    lowest = min(r["T_K"] for r in candidates)
    return _to_reference(_best([r for r in candidates if r["T_K"] == lowest]))
