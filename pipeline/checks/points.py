"""Stated fixed points and constants: phase labels, the curve between two phases, consensus.

Several sources may state the same triple or critical point. Checks other than
``sources.agreement`` compare with one *consensus* value per point: the sources of the most
authoritative kind present (standard > evaluated > literature > measurement > estimate), and
among them the inverse-variance weighted mean (the plain mean when no uncertainty is stated).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterable

FLUID_PHASES = ("vapour", "liquid")
SINGLE_SOLID = "solid"
SOURCE_RANK = {"standard": 0, "evaluated": 1, "literature": 2, "measurement": 3, "estimate": 4}

# phase classes of a pair -> boundary (the solid label supplies solid_phase)
_PAIR_BOUNDARY = {
    frozenset({"liquid", "vapour"}): "liquid-vapour",
    frozenset({"solid", "liquid"}): "solid-liquid",
    frozenset({"solid", "vapour"}): "solid-vapour",
    frozenset({"solid"}): "solid-solid",
}
BOUNDARY_PHASE_CLASSES = {b: tuple(sorted(k)) for k, b in _PAIR_BOUNDARY.items()}


def phase_class(phase: str) -> str:
    """``vapour``, ``liquid`` or ``solid`` (any solid label)."""
    return phase if phase in FLUID_PHASES else "solid"


def solid_label(phase: str) -> str:
    """The ``solid_phase`` value for a solid phase label (empty for the single solid)."""
    return "" if phase == SINGLE_SOLID else phase


def order_phases(phases: Iterable[str]) -> tuple[str, ...]:
    """Phases in canonical order: vapour, liquid, then solids sorted."""
    phases = set(phases)
    return tuple(p for p in FLUID_PHASES if p in phases) + tuple(sorted(phases - set(FLUID_PHASES)))


@lru_cache(maxsize=4096)
def parse_phases(text: str) -> tuple[str, ...]:
    """``"vapour,liquid,Ih"`` -> ``("vapour", "liquid", "Ih")`` in canonical order."""
    return order_phases(p.strip() for p in str(text).split(",") if p.strip())


def boundary_between(a: str, b: str) -> tuple[str, tuple[str, ...]]:
    """The boundary between phases ``a`` and ``b`` and the solid_phase labels to look for.

    A solid–solid boundary's label is the two solid labels written together (the batch
    contract allows letters and digits only), in either order.
    """
    boundary = _PAIR_BOUNDARY[frozenset({phase_class(a), phase_class(b)})]
    solids = [p for p in (a, b) if phase_class(p) == "solid"]
    if boundary == "solid-solid":
        return boundary, (solids[0] + solids[1], solids[1] + solids[0])
    return boundary, (solid_label(solids[0]) if solids else "",)


def curve_phases(boundary: str, solid_phase: str, known_solids: Iterable[str] = ()) -> tuple[str, ...] | None:
    """Phases on either side of a boundary curve (None for an unresolvable solid–solid label)."""
    classes = BOUNDARY_PHASE_CLASSES[boundary]
    if boundary != "solid-solid":
        solid = solid_phase or SINGLE_SOLID
        return order_phases(solid if c == "solid" else c for c in classes)
    for a in known_solids:
        b = solid_phase[len(a):] if solid_phase.startswith(a) else None
        if b and b in known_solids and b != a:
            return order_phases((a, b))
    return None


@dataclass(frozen=True)
class StatedPoint:
    """Consensus value of one stated fixed point (SI; NaN where not stated)."""

    kind: str
    phases: tuple[str, ...]
    T_K: float
    u_T_K: float
    p_Pa: float
    u_p_Pa: float
    rho_kg_m3: float
    u_rho_kg_m3: float
    sources: tuple[str, ...]
    fp_ids: tuple[int, ...]

    @property
    def label(self) -> str:
        return f"{self.kind}:{','.join(self.phases)}"

    @property
    def has_vapour(self) -> bool:
        return "vapour" in self.phases

    def pairs(self) -> list[tuple[str, str]]:
        """The phase pairs meeting at the point (three for a triple point)."""
        ph = self.phases
        return [(ph[i], ph[j]) for i in range(len(ph)) for j in range(i + 1, len(ph))]

    def evidence(self) -> dict:
        """The point as evidence (a value not stated is None, as JSON will hold it)."""
        return {"T_K": _stated(self.T_K), "u_T_K": _stated(self.u_T_K), "p_Pa": _stated(self.p_Pa),
                "u_p_Pa": _stated(self.u_p_Pa), "rho_kg_m3": _stated(self.rho_kg_m3),
                "sources": list(self.sources), "fp_ids": list(self.fp_ids)}


def _stated(x: float) -> float | None:
    return x if math.isfinite(x) else None


def curve_label(key) -> str:
    """``liquid-vapour``, ``solid-liquid:Ih``, ``liquid-vapour/rho_liquid`` for a curve key."""
    boundary, solid, quantity = key
    label = boundary + (f":{solid}" if solid else "")
    return label if quantity == "pressure" else f"{label}/{quantity}"


def u0(u: float | None) -> float:
    """An uncertainty with 'not stated' (None, NaN) read as zero."""
    return 0.0 if u is None or not math.isfinite(u) else float(u)


def consensus(values, uncertainties) -> tuple[float, float]:
    """Weighted mean and its standard uncertainty; plain mean and NaN when u is missing."""
    pairs = [(float(v), float(u)) for v, u in zip(values, uncertainties) if math.isfinite(v)]
    if not pairs:
        return math.nan, math.nan
    stated = [(v, u) for v, u in pairs if math.isfinite(u) and u > 0]
    if stated:
        w = [1.0 / u ** 2 for _, u in stated]
        return sum(wi * v for wi, (v, _) in zip(w, stated)) / sum(w), 1.0 / math.sqrt(sum(w))
    return sum(v for v, _ in pairs) / len(pairs), math.nan


def _best_ranked(rows: list[dict]) -> list[dict]:
    rank = [SOURCE_RANK.get(r["source_kind"], len(SOURCE_RANK)) for r in rows]
    best = min(rank)
    return [r for r, k in zip(rows, rank) if k == best]


def consensus_points(records: Iterable[dict], kind: str) -> list[StatedPoint]:
    """One :class:`StatedPoint` per distinct phase set of ``kind`` (triple | critical).

    ``records`` are fixed-point rows as dicts. Each quantity (T, p, rho) is the consensus of
    the best-ranked sources that state it, so a temperature-only point from a standard and a
    pressure from a compilation combine.
    """
    groups: dict[tuple[str, ...], list[dict]] = {}
    for r in records:
        if r["kind"] == kind:
            groups.setdefault(parse_phases(r["phases"]), []).append(r)
    out = []
    for phases in sorted(groups):
        cols, used, seen = {}, [], set()
        for col in ("T_K", "p_Pa", "rho_kg_m3"):
            rows = [r for r in groups[phases] if _finite(r[col])]
            best = _best_ranked(rows) if rows else []
            cols[col], cols["u_" + col] = consensus([r[col] for r in best], [r["u_" + col] for r in best])
            for r in best:       # each record once (records differ: each has its own fp_id)
                if id(r) not in seen:
                    seen.add(id(r))
                    used.append(r)
        out.append(StatedPoint(kind, phases, cols["T_K"], cols["u_T_K"], cols["p_Pa"],
                               cols["u_p_Pa"], cols["rho_kg_m3"], cols["u_rho_kg_m3"],
                               tuple(dict.fromkeys(r["source_id"] for r in used)),
                               tuple(int(r["fp_id"]) for r in used)))
    return out


def _finite(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)


def consensus_constant(records: Iterable[dict], name: str) -> tuple[float, float, tuple[str, ...]] | None:
    """Consensus (value, u, sources) of a stated constant, None when no source states it."""
    rows = [r for r in records if r["name"] == name]
    if not rows:
        return None
    best = _best_ranked(rows)
    value, u = consensus([r["value_si"] for r in best], [r["u_si"] for r in best])
    return value, u, tuple(r["source_id"] for r in best)
