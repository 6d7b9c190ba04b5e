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
    ("solid-liquid", "pressure"): ("triple", ("melting-polynomial", "melting-simon-sum",
                                              "iapws-melting", "simon-glatzel")),
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


def _best(points: pd.DataFrame) -> pd.Series | None:
    if points.empty:
        return None
    ranked = points.assign(rank=points["source_kind"].map(SOURCE_RANK).fillna(9),
                           u=points["u_T_K"].fillna(float("inf")))
    return ranked.sort_values(["rank", "u", "fp_id"]).iloc[0]


def _to_reference(row: pd.Series | None) -> Reference | None:
    if row is None:
        return None
    rho = row.get("rho_kg_m3")
    return Reference(int(row["fp_id"]), row["kind"], float(row["T_K"]), float(row["p_Pa"]),
                     None if pd.isna(rho) else float(rho), row["source_id"])


def reference_point(fixed: pd.DataFrame, boundary: str, solid_phase: str) -> Reference | None:
    """The anchoring point: the critical point for liquid-vapour groups; for a solid boundary
    the triple point of that solid with liquid (melting) or vapour (sublimation), preferring
    the one that also holds vapour (melting) or liquid (sublimation), else the lowest in T.
    Among several sources the best-ranked kind, then the smallest u(T) wins."""
    if boundary == "liquid-vapour":
        return _to_reference(_best(fixed[fixed["kind"] == "critical"]))
    solid = solid_phase or "solid"
    other = "liquid" if boundary == "solid-liquid" else "vapour"
    third = "vapour" if other == "liquid" else "liquid"
    triples = fixed[fixed["kind"] == "triple"]
    has = triples["phases"].str.split(",").apply(lambda ph: solid in ph and other in ph)
    candidates = triples[has]
    if candidates.empty:
        return None
    with_third = candidates[candidates["phases"].str.split(",").apply(lambda ph: third in ph)]
    if not with_third.empty:
        return _to_reference(_best(with_third))
    lowest = candidates[candidates["T_K"] == candidates["T_K"].min()]
    return _to_reference(_best(lowest))
