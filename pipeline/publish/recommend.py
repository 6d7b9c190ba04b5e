"""Recommended values: candidates per fluid and constant, chosen by the policy.

Constants: critical temperature, pressure and density (``Tc``, ``pc``, ``rhoc``), triple-point
temperature and pressure (``Tt``, ``pt``) of every triple point, the normal boiling temperature
(``normal_boiling_T``), the acentric factor (``acentric_factor``) and the enthalpies of fusion,
vaporization and sublimation at the (vapour) triple point (``h_*_triple``).

Candidates are the values sources state (fixed points, ``[[constant]]`` entries, enthalpy
observations at Tt) and values derived from the fitted vapour-pressure curve:

* normal boiling point: T_nb = p_vap^-1(101 325 Pa) (``Curve.inverse``), with
  u(T_nb) = u_p(T_nb) / (dp/dT) - the delta method with the curve's covariance (``Curve.u``)
  and its slope;
* acentric factor (K. S. Pitzer, D. Z. Lippmann, R. F. Curl, C. M. Huggins, D. E. Petersen,
  J. Am. Chem. Soc. 77, 3433-3440 (1955)): omega = -log10(p_vap(0.7 Tc)/pc) - 1 with the
  recommended Tc and pc, and u(omega)^2 = [u_p^2 + (0.7 u(Tc) dp/dT)^2] / (p ln 10)^2
  + [u(pc) / (pc ln 10)]^2, the same propagation as the ``acentric.factor`` check.

The policy (:mod:`pipeline.publish.policy`, ``policy.toml``) then leaves candidates out (curation
decisions, sources named discrepant by a failed ``sources.agreement`` finding, derived values
from fits with failed checks), ranks the rest by source kind and combines the best-ranked ones
by their inverse-variance weighted mean with the Birge ratio (R. T. Birge, Phys. Rev. 40,
207-227 (1932)) expanding the uncertainty. Every left-out candidate keeps its reason.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from pipeline.checks.points import parse_phases, solid_label
from pipeline.correlations import Curve
from pipeline.publish import derived as batch, provenance as prov
from pipeline.publish.inputs import ReleaseInputs
from pipeline.publish.policy import DERIVED, Decisions, Policy

UNITS = {"Tc": "K", "pc": "Pa", "rhoc": "kg/m^3", "Tt": "K", "pt": "Pa",
         "normal_boiling_T": "K", "acentric_factor": "1", "h_fusion_triple": "J/mol",
         "h_vaporization_triple": "J/mol", "h_sublimation_triple": "J/mol"}
POINT_COLUMNS = {"critical": (("Tc", "T_K"), ("pc", "p_Pa"), ("rhoc", "rho_kg_m3")),
                 "triple": (("Tt", "T_K"), ("pt", "p_Pa"))}
ENTHALPY = {"h_fusion": ("h_fusion_triple", "solid-liquid"),
            "h_vaporization": ("h_vaporization_triple", "liquid-vapour"),
            "h_sublimation": ("h_sublimation_triple", "solid-vapour")}
LN10 = math.log(10.0)


@dataclass(frozen=True)
class Candidate:
    """One value offered for a constant, with where it comes from."""

    value: float
    u: float | None
    kind: str                 # source kind, or "derived"
    method: str               # stated | derived
    source_id: str | None
    entities: tuple[dict, ...]  # was_derived_from entries (the first is the candidate itself)
    refs: prov.Refs
    detail: str
    priority: int = 0         # within one source: 0 fixed point / constant, 1 observation
    fit_id: str | None = None


@dataclass
class Recommendation:
    """The recommended value of one constant and the fate of every candidate."""

    fluid_id: str
    point: str               # critical:vapour,liquid | triple:<phases> | "" (other constants)
    prop: str
    value: float
    u: float | None
    method: str
    detail: str
    used: list[Candidate]
    left_out: list[tuple[Candidate, str]]
    birge_ratio: float | None = None
    decision_ids: list[str] = field(default_factory=list)
    scope: str = ""          # the point part of key and value_id (default: point or "constant")

    @property
    def key(self) -> str:
        """The constant as check subjects and decisions name it, e.g. critical:vapour,liquid|Tc."""
        return f"{self.scope or self.point or 'constant'}|{self.prop}"

    @property
    def value_id(self) -> str:
        """Stable id across releases, e.g. water/critical:vapour,liquid/Tc."""
        return f"{self.fluid_id}/{self.scope or self.point or 'constant'}/{self.prop}"

    @property
    def unit(self) -> str:
        return UNITS[self.prop]


def _u(x) -> float | None:
    return float(x) if x is not None and math.isfinite(x) and x > 0 else None


# --- candidates ------------------------------------------------------------------------------

def point_label(kind: str, phases: str) -> str:
    return f"{kind}:{','.join(parse_phases(phases))}"


def point_candidates(inputs: ReleaseInputs) -> dict[tuple[str, str, str], list[Candidate]]:
    """Candidates for Tc, pc, rhoc, Tt, pt from the stated fixed points."""
    out: dict[tuple[str, str, str], list[Candidate]] = {}
    for fp in inputs.fixed_points:
        label = point_label(fp["kind"], fp["phases"])
        src = inputs.sources.get(fp["source_id"], {})
        for prop, col in POINT_COLUMNS.get(fp["kind"], ()):
            if fp.get(col) is None:
                continue
            u = _u(fp.get("u_" + col))
            ent = prov.entity("fixed_point", fp["fp_id"], source_id=fp["source_id"],
                              file=inputs.raw_files.get(int(fp["file_id"])),
                              rows=[fp["entry_number"]], value=fp[col], u=u)
            out.setdefault((fp["fluid_id"], label, prop), []).append(Candidate(
                float(fp[col]), u, src.get("kind", "estimate"), "stated", fp["source_id"],
                (ent,), prov.Refs(fp_ids=frozenset({int(fp["fp_id"])})),
                f"stated by {fp['source_id']} (batch.toml entry {fp['entry_number']})"))
    return out


def constant_candidates(inputs: ReleaseInputs) -> dict[tuple[str, str, str], list[Candidate]]:
    """Candidates from ``[[constant]]`` entries."""
    out: dict[tuple[str, str, str], list[Candidate]] = {}
    for c in inputs.constants:
        if c["name"] not in UNITS:
            continue
        u = _u(c.get("u_si"))
        ent = prov.entity("stated_constant", c["const_id"], source_id=c["source_id"],
                          file=inputs.raw_files.get(int(c["file_id"])), rows=[c["entry_number"]],
                          value=c["value_si"], u=u)
        refs = prov.Refs(stated=frozenset({(c["name"], c["source_id"])}),
                         subjects=frozenset({f"source:{c['source_id']}"})
                         if c["name"] == "acentric_factor" else frozenset())
        out.setdefault((c["fluid_id"], "", c["name"]), []).append(Candidate(
            float(c["value_si"]), u, inputs.sources.get(c["source_id"], {}).get("kind", "estimate"),
            "stated", c["source_id"], (ent,), refs,
            f"stated by {c['source_id']} (batch.toml [[constant]] entry {c['entry_number']})"))
    return out


def enthalpy_candidates(inputs: ReleaseInputs, vapour_triples: dict[str, tuple[str, float]],
                        policy: Policy) -> dict[tuple[str, str, str], list[Candidate]]:
    """Enthalpy observations within the tolerance of the recommended vapour triple-point T."""
    out: dict[tuple[str, str, str], list[Candidate]] = {}
    tol = policy.enthalpy.triple_T_tolerance_K
    for o in inputs.enthalpy_observations:
        prop, boundary = ENTHALPY[o["quantity"]]
        triple = vapour_triples.get(o["fluid_id"])
        if triple is None or o["boundary"] != boundary or abs(o["T_K"] - triple[1]) > tol:
            continue
        solids = [p for p in parse_phases(triple[0].split(":", 1)[1]) if p not in ("vapour", "liquid")]
        if boundary != "liquid-vapour" and o["solid_phase"] != solid_label(solids[0]):
            continue
        raw = inputs.raw_files[int(o["file_id"])]
        u = _u(o.get("u_value_si"))
        ent = prov.entity("observations", o["file_id"], source_id=o["source_id"], file=raw,
                          rows=[o["row_number"]], obs_ids=[o["obs_id"]], value=o["value_si"], u=u,
                          cells=[o["value_cell_ref"]] if o.get("value_cell_ref") else [])
        out.setdefault((o["fluid_id"], "", prop), []).append(Candidate(
            float(o["value_si"]), u, inputs.sources.get(o["source_id"], {}).get("kind", "estimate"),
            "stated", o["source_id"], (ent,), prov.Refs(obs_ids=frozenset({int(o["obs_id"])})),
            f"observed by {o['source_id']} at T = {o['T_K']:.6g} K ({raw['path']} row "
            f"{o['row_number']})", priority=1))
    return out


def vapour_pressure_fits(inputs: ReleaseInputs) -> dict[str, dict]:
    """The (first) fitted vapour-pressure curve of each fluid."""
    out: dict[str, dict] = {}
    for fit in inputs.fits:
        if (fit["boundary"], fit["solid_phase"], fit["quantity"]) == \
                ("liquid-vapour", "", "pressure"):
            out.setdefault(fit["fluid_id"], fit)
    return out


def vapour_pressure_fit(inputs: ReleaseInputs, fluid_id: str) -> dict | None:
    return vapour_pressure_fits(inputs).get(fluid_id)


def normal_boiling_points(fits: list[dict], policy: Policy, inputs: ReleaseInputs | None = None
                          ) -> dict[str, tuple[float, ...]]:
    """fit id -> (T_nb, slope, u_p) at the normal boiling pressure, all curves at once
    (:mod:`pipeline.publish.derived`; what ``curve.inverse``, ``curve.slope``, ``curve.u``
    give one by one)."""
    curves = [inputs.curve(f) if inputs else Curve.from_dict(f["curve"]) for f in fits]
    T = batch.inverse(curves, policy.derived.normal_boiling_pressure_Pa)
    _, slope, u = batch.at(curves, T, extrapolate=False)
    return {f["fit_id"]: (float(t), float(s), float(v)) for f, t, s, v in zip(fits, T, slope, u)}


def derived_normal_boiling(inputs: ReleaseInputs, fit: dict, policy: Policy,
                           at_nb: tuple[float, ...] | None = None) -> Candidate | str:
    """T_nb from the vapour-pressure curve, or the reason there is none (``at_nb``: the
    T_nb, slope and u_p of :func:`normal_boiling_points`, computed here when not given)."""
    curve = inputs.curve(fit)
    p_nb = policy.derived.normal_boiling_pressure_Pa
    if at_nb is None:
        at_nb = normal_boiling_points([fit], policy)[fit["fit_id"]]
    T, slope, u_p = at_nb
    if not math.isfinite(T):
        return (f"fit {fit['fit_id']} ({curve.T_min_K:.6g}-{curve.T_max_K:.6g} K) does not reach "
                f"{p_nb:g} Pa")
    u = _u(u_p / slope) if math.isfinite(u_p) and slope > 0 else None
    ent = prov.entity("fit", fit["fit_id"], value=T, u=u,
                      note=f"inverse of the fitted vapour-pressure curve at {p_nb:g} Pa")
    return Candidate(T, u, DERIVED, "derived", None, (ent,) + tuple(prov.fit_entities(inputs, fit)),
                     prov.fit_refs(inputs, fit),
                     f"vapour-pressure curve {fit['form']} inverted at {p_nb:g} Pa; u from the "
                     "fit covariance over the slope (delta method)", fit_id=fit["fit_id"])


def acentric_temperature(fit: dict, Tc: Recommendation, policy: Policy) -> float | str:
    """Tr Tc, where the acentric factor reads the curve, or why the curve does not cover it."""
    curve = fit["curve"]
    Tr = policy.derived.acentric_reduced_temperature
    T = Tr * Tc.value
    if not (curve["T_min_K"] - policy.derived.max_extrapolation_K <= T <= curve["T_max_K"]):
        return (f"fit {fit['fit_id']} ({curve['T_min_K']:.6g}-{curve['T_max_K']:.6g} K) does not "
                f"cover {Tr:g} Tc = {T:.6g} K within {policy.derived.max_extrapolation_K:g} K")
    return T


def derived_acentric(inputs: ReleaseInputs, fit: dict, Tc: Recommendation, pc: Recommendation,
                     policy: Policy, at_T: tuple[float, ...] | None = None) -> Candidate | str:
    """omega from the vapour-pressure curve and the recommended critical point (``at_T``: the
    curve's value, slope and u at Tr Tc, computed here when not given)."""
    curve = inputs.curve(fit)
    Tr = policy.derived.acentric_reduced_temperature
    T = acentric_temperature(fit, Tc, policy)
    if isinstance(T, str):
        return T
    if at_T is None:
        v, s, u = batch.at([curve], np.array([T]), extrapolate=True)
        at_T = (float(v[0]), float(s[0]), float(u[0]))
    p, slope, u_p = at_T
    omega = -math.log10(p / pc.value) - 1.0
    terms = [(u_p if math.isfinite(u_p) else 0.0) / (p * LN10),
             Tr * (Tc.u or 0.0) * slope / (p * LN10), (pc.u or 0.0) / (pc.value * LN10)]
    u = _u(math.sqrt(sum(t * t for t in terms)))
    ent = prov.entity("fit", fit["fit_id"], value=omega, u=u,
                      note=f"-log10(p_vap({Tr:g} Tc)/pc) - 1 from the fitted vapour-pressure curve"
                           + (" (extrapolated below its range)" if T < curve.T_min_K else ""))
    values = [prov.entity("value", r.value_id, value=r.value, u=r.u,
                          note="recommended value used in the derivation") for r in (Tc, pc)]
    refs = prov.fit_refs(inputs, fit) | prov.Refs(subjects=frozenset({"constant|acentric_factor"}))
    return Candidate(omega, u, DERIVED, "derived", None,
                     (ent, *values, *prov.fit_entities(inputs, fit)), refs,
                     f"Pitzer's definition at {Tr:g} Tc with the vapour-pressure curve "
                     f"{fit['form']} and the recommended Tc, pc", fit_id=fit["fit_id"])


# --- the choice --------------------------------------------------------------------------------

def choose(fluid_id: str, point: str, prop: str, candidates: list[Candidate], policy: Policy,
           decisions: Decisions, checks: prov.CheckIndex
           ) -> Recommendation | list[tuple[Candidate, str]]:
    """Apply the policy to the candidates of one constant; when none is usable, the list of
    (candidate, reason it was left out)."""
    key = f"{point or 'constant'}|{prop}"
    left: list[tuple[Candidate, str]] = []
    decision_ids: list[str] = []
    pool = list(candidates)

    def drop(pred, reason) -> None:
        nonlocal pool
        keep = []
        for c in pool:
            why = pred(c)
            if why:
                left.append((c, reason(c, why) if callable(reason) else reason))
            else:
                keep.append(c)
        pool = keep

    excluded = decisions.excluded(fluid_id, key)
    drop(lambda c: excluded.get(c.source_id), lambda c, d: f"excluded by curation decision {d}")
    decision_ids += sorted({excluded[c.source_id] for c, _ in left if c.source_id in excluded})
    if policy.exclusions.exclude_discrepant_sources:
        bad = checks.discrepant(fluid_id, key)
        drop(lambda c: bad.get(c.source_id),
             lambda c, s: f"named discrepant by sources.agreement ({key}, status {s})")
    if policy.exclusions.exclude_derived_from_failed_fits:
        def failed(c: Candidate):
            if c.method != "derived":
                return None
            found = checks.bad(fluid_id, c.refs)
            return ", ".join(sorted({f"{f['check_id']} {f['status']}" for f in found})) or None
        drop(failed, lambda c, w: f"its fit {c.fit_id} carries failed checks: {w}")
    if any(c.u is not None for c in pool):
        drop(lambda c: c.u is None, "states no uncertainty while other candidates do")
    if policy.combination.one_candidate_per_source:
        best: dict[str, Candidate] = {}
        for c in sorted(pool, key=lambda c: (c.priority, c.u if c.u is not None else math.inf,
                                             c.entities[0]["entity_id"])):
            best.setdefault(c.source_id or f"derived:{c.fit_id}", c)
        chosen = set(map(id, best.values()))
        drop(lambda c: id(c) not in chosen,
             "another value of the same source was preferred (stated entry, then smaller u)")
    if not pool:
        return left
    preferred = decisions.preferred(fluid_id, key)
    if preferred and any(c.source_id == preferred[0] for c in pool):
        source, decision = preferred
        drop(lambda c: c.source_id != source, f"curation decision {decision} prefers {source}")
        decision_ids.append(decision)
    ranks = {c.kind: policy.rank(c.kind) for c in pool}
    best_rank = min(ranks.values())
    best_kind = [k for k, r in ranks.items() if r == best_rank][0]
    drop(lambda c: ranks[c.kind] > best_rank,
         lambda c, _: f"kind {c.kind} ranks below the best available ({best_kind})")
    return _combine(fluid_id, point, prop, pool, left, policy, decision_ids)


def _combine(fluid_id, point, prop, pool, left, policy, decision_ids) -> Recommendation:
    if len(pool) == 1:
        c = pool[0]
        return Recommendation(fluid_id, point, prop, c.value, c.u, c.method, c.detail, pool,
                              left, None, decision_ids)
    x = np.array([c.value for c in pool])
    if all(c.u is not None for c in pool):
        w = 1.0 / np.array([c.u for c in pool]) ** 2
        mean = float(np.sum(w * x) / np.sum(w))
        u = float(1.0 / math.sqrt(np.sum(w)))
        birge = float(math.sqrt(np.sum(w * (x - mean) ** 2) / (len(x) - 1)))
        expanded = policy.combination.expand_by_birge_ratio and birge > 1.0
        detail = (f"inverse-variance weighted mean of {len(pool)} {pool[0].kind} values "
                  f"(Birge ratio {birge:.3g}"
                  + (", uncertainty expanded by it)" if expanded else ")"))
        return Recommendation(fluid_id, point, prop, mean, u * birge if expanded else u,
                              "recommended", detail, pool, left, birge, decision_ids)
    return Recommendation(fluid_id, point, prop, float(np.mean(x)), None, "recommended",
                          f"mean of {len(pool)} {pool[0].kind} values (no uncertainties stated)",
                          pool, left, None, decision_ids)


def _acentric_points(inputs: ReleaseInputs, vp: dict[str, dict], critical: dict,
                     policy: Policy) -> dict[str, tuple[float, ...]]:
    """fluid -> the curve's value, slope and u at Tr Tc, for all fluids at once."""
    todo = []
    for fluid, (Tc, pc) in critical.items():
        if Tc and pc:
            T = acentric_temperature(vp[fluid], Tc, policy)
            if not isinstance(T, str):
                todo.append((fluid, T))
    if not todo:
        return {}
    curves = [inputs.curve(vp[f]) for f, _ in todo]
    v, s, u = batch.at(curves, np.array([T for _, T in todo]), extrapolate=True)
    return {f: (float(a), float(b), float(c)) for (f, _), a, b, c in zip(todo, v, s, u)}


def recommend_all(inputs: ReleaseInputs, policy: Policy, decisions: Decisions,
                  checks: prov.CheckIndex) -> tuple[list[Recommendation], list[dict]]:
    """Every recommended constant, and the constants left without one (with the reason)."""
    recs: dict[tuple[str, str, str], Recommendation] = {}
    unresolved: list[dict] = []
    pools = point_candidates(inputs)
    for f, p, prop in sorted(pools):
        r = choose(f, p, prop, pools[(f, p, prop)], policy, decisions, checks)
        if isinstance(r, Recommendation):
            recs[(f, p, prop)] = r
        else:
            unresolved.append({"fluid_id": f, "property": prop, "point": p,
                               "reason": "; ".join(why for _, why in r)})
    stated = constant_candidates(inputs)
    vapour_triples = {f: (p, r.value) for (f, p, prop), r in recs.items()
                      if prop == "Tt" and "vapour" in p.split(":", 1)[1].split(",")}
    extra = enthalpy_candidates(inputs, vapour_triples, policy)
    fluids = [row["fluid_id"] for row in inputs.fluids]
    vp = vapour_pressure_fits(inputs)
    nb = normal_boiling_points([vp[f] for f in fluids if f in vp], policy, inputs)
    critical = {f: (recs.get((f, "critical:vapour,liquid", "Tc")),
                    recs.get((f, "critical:vapour,liquid", "pc"))) for f in fluids if f in vp}
    at_Tr = _acentric_points(inputs, vp, critical, policy)
    for fluid in fluids:
        fit = vp.get(fluid)
        derived: dict[str, Candidate | str] = {}
        if fit is not None:
            derived["normal_boiling_T"] = derived_normal_boiling(inputs, fit, policy,
                                                                 nb[fit["fit_id"]])
            Tc, pc = critical[fluid]
            derived["acentric_factor"] = derived_acentric(
                inputs, fit, Tc, pc, policy, at_Tr.get(fluid)) \
                if Tc and pc else "no recommended critical temperature and pressure"
        for prop in ("normal_boiling_T", "acentric_factor", "h_fusion_triple",
                     "h_vaporization_triple", "h_sublimation_triple"):
            cands = stated.get((fluid, "", prop), []) + extra.get((fluid, "", prop), [])
            d = derived.get(prop)
            if isinstance(d, Candidate):
                cands.append(d)
            if not cands:
                if prop in ("normal_boiling_T", "acentric_factor"):
                    unresolved.append({"fluid_id": fluid, "property": prop, "reason":
                                       d if isinstance(d, str) else "no stated value and no "
                                       "fitted vapour-pressure curve"})
                continue
            r = choose(fluid, "", prop, cands, policy, decisions, checks)
            if not isinstance(r, Recommendation):
                unresolved.append({"fluid_id": fluid, "property": prop,
                                   "reason": "; ".join(why for _, why in r)})
                continue
            if prop.startswith("h_") and fluid in vapour_triples:
                r = replace(r, point=vapour_triples[fluid][0], scope="constant")
            recs[(fluid, "constant", prop)] = r
    order = sorted(recs.values(), key=lambda r: r.value_id)
    return order, unresolved
