"""Source agreement: several sources stating one constant agree within their uncertainties."""

from __future__ import annotations

import numpy as np

from pipeline.checks.data import CheckBatch, FluidData
from pipeline.checks.findings import Findings
from pipeline.checks.points import SOURCE_RANK, parse_phases
from pipeline.checks.registry import register_check
from pipeline.checks.stats import birge_limit, birge_ratio, leave_one_out_z, weighted_mean

#: fixed-point column -> (constant name for a critical point, for a triple point, unit)
POINT_QUANTITIES = {"T_K": ("Tc", "Tt", "K"), "p_Pa": ("pc", "pt", "Pa"),
                    "rho_kg_m3": ("rhoc", None, "kg/m3")}


def _entries(fluid: FluidData):
    """(subject, name, unit, values, uncertainties, sources, kinds) per stated constant."""
    groups: dict[tuple, list[tuple]] = {}
    for r in fluid.fixed_point_records:
        key = f"{r['kind']}:{','.join(parse_phases(r['phases']))}"
        for col, (crit, trip, unit) in POINT_QUANTITIES.items():
            name = crit if r["kind"] == "critical" else trip
            if name:
                groups.setdefault((f"{key}|{name}", name, unit), []).append(
                    (r[col], r["u_" + col], r["source_id"], r["source_kind"],
                     col in r.get("u_defaulted", ())))
    for r in fluid.constant_records:
        groups.setdefault((f"constant|{r['name']}", r["name"], r["si_unit"]), []).append(
            (r["value_si"], r["u_si"], r["source_id"], r["source_kind"], bool(r.get("u_defaulted"))))
    for (subject, name, unit), rows in groups.items():
        x, u, sources, kinds, defaulted = zip(*rows)
        yield (subject, name, unit, np.array(x, dtype=float), np.array(u, dtype=float),
               np.array(sources, dtype=object), np.array(kinds, dtype=object),
               np.array(defaulted, dtype=bool))


def _discrepant(z: np.ndarray, sources, kinds, z_max: float) -> list[str]:
    """Sources whose leave-one-out |z| exceeds z_max; of two equal ones, the less authoritative."""
    bad = [i for i in np.argsort(-np.abs(z)) if abs(z[i]) > z_max]
    if len(z) == 2 and len(bad) == 2:
        ranks = [SOURCE_RANK.get(k, 9) for k in kinds]
        if ranks[0] != ranks[1]:
            return [str(sources[int(np.argmax(ranks))])]
        return [str(s) for s in sources]
    return [str(sources[i]) for i in bad[:1]] if bad else []


def _judge_entry(out: Findings, fluid: FluidData, subject, name, unit, x, u, sources, kinds,
                 defaulted, th) -> None:
    listing = [{"source": str(s), "kind": str(k), "value": float(v), "u": float(w),
                "u_is_default": bool(d)} for s, k, v, w, d in zip(sources, kinds, x, u, defaulted)]
    if np.all(np.isfinite(u) & (u > 0)):
        rb, limit = birge_ratio(x, u), birge_limit(len(x), th["birge_k"])
        mean, u_mean = weighted_mean(x, u)
        z = leave_one_out_z(x, u)
        for entry, zi in zip(listing, z):
            entry["z_leave_one_out"] = float(zi)
        bad = _discrepant(z, sources, kinds, th["z_max"]) if rb > limit else []
        stat, measured = "Birge ratio", rb
        summary = f"weighted mean {mean:.7g} ± {u_mean:.2g} {unit}"
    else:
        med = float(np.median(x))
        dev = np.abs(x - med) / abs(med)
        stat, measured, limit = "max |x/median - 1|", float(dev.max()), th["rel_tol"]
        far = np.flatnonzero(dev == dev.max())
        bad = [str(sources[i]) for i in far] if measured > limit else []
        summary = f"median {med:.7g} {unit} (a source states no uncertainty)"
    values = ", ".join(f"{e['source']} {e['value']:.7g}" for e in listing)
    blame = f"; discrepant: {', '.join(bad)}" if bad else ""
    out.judge(fluid.fluid_id, subject, measured=measured, limit=limit, statistic=stat,
              evidence={"values": listing, "discrepant": bad, "unit": unit},
              context=f"{name} from {len(x)} sources ({values}), {summary}{blame}")


@register_check("sources.agreement", tags=("sources", "critical", "triple-point"),
                vectorised=True,
                purpose="Values of one constant from several sources agree; a discrepant one is named.")
def agreement(batch: CheckBatch, th) -> Findings:
    """Each constant stated by two or more sources (Tc, pc, ρc of the critical point, Tt and pt
    of every triple point, stated constants such as the acentric factor) is tested for mutual
    consistency. With uncertainties: the Birge ratio R_B = sqrt(chi2/(n − 1)) about the
    inverse-variance weighted mean (R. T. Birge, Phys. Rev. 40, 207 (1932), from memory) is
    compared with 1 + birge_k sqrt(1/(2(n − 1))), the spread expected of R_B for consistent
    data; each value's normalised residual against the weighted mean of the others,
    z_i = (x_i − m_-i)/sqrt(u_i^2 + u(m_-i)^2), names the discrepant source (of two, the one from
    the less authoritative kind of source). A value stated without an uncertainty takes the
    budget's default for its quantity and source kind (thresholds.toml ["uncertainty"]; the
    evidence marks it), so the test is always a Birge ratio; only a constant the budget has no
    default for falls back to its spread about the median against rel_tol.

    Usual causes of a failure: a value on another temperature scale; an old value superseded by
    a newer evaluation; a unit slip (kPa for MPa); a copying error.
    """
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        for subject, name, unit, x, u, sources, kinds, defaulted in _entries(fluid):
            ok = np.isfinite(x)
            if ok.sum() >= 2:
                _judge_entry(out, fluid, subject, name, unit, x[ok], u[ok], sources[ok],
                             kinds[ok], defaulted[ok], t)
    return out
