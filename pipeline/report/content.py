"""What the report shows per fluid, read from the store with set-based queries.

:func:`fluid_sections` returns, for each fluid, its fits (with the reference value each fit
recommends and its standard uncertainty), stated fixed points, sources with their citations,
and the observations the phase diagram needs (only for fluids whose plot is not cached).
:func:`flagged_from_results` turns failing check evidence into the observations to mark.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from pipeline.report.plots import (
    CurveSpec,
    FixedPointMark,
    FlaggedPoint,
    Observations,
    PhaseDiagramData,
)

#: What the first parameter of a fit recommends, per (boundary, quantity).
REFERENCE_NAME = {
    ("liquid-vapour", "pressure"): "p at T_ref (vapour-pressure fit)",
    ("solid-vapour", "pressure"): "p at T_ref (sublimation fit)",
    ("solid-liquid", "pressure"): "p at T_ref (melting fit)",
    ("solid-solid", "pressure"): "p at T_ref (solid-solid fit)",
    ("liquid-vapour", "rho_liquid"): "rho at T_ref (saturated-liquid density fit)",
    ("liquid-vapour", "rho_vapour"): "rho at T_ref (saturated-vapour density fit)",
}
UNIT = {"pressure": "Pa", "rho_liquid": "kg/m^3", "rho_vapour": "kg/m^3"}


@dataclass(frozen=True)
class FitRow:
    """One current fit of a fluid, as the report lists it."""

    fit_id: str
    boundary: str
    solid_phase: str
    quantity: str
    status: str
    form: str | None
    n_points: int
    n_used: int
    n_flagged: int
    T_min_K: float | None
    T_max_K: float | None
    reduced_chi2: float | None
    reason: str | None
    T_ref_K: float | None = None
    ref_value: float | None = None
    ref_u: float | None = None

    @property
    def group(self) -> str:
        return f"{self.boundary}/{self.solid_phase or '-'}/{self.quantity}"

    @property
    def unit(self) -> str:
        return UNIT.get(self.quantity, "")


@dataclass
class FluidSection:
    """Everything the report shows for one fluid apart from the check results."""

    fluid_id: str
    name: str
    formula: str
    fits: list[FitRow] = field(default_factory=list)
    fixed_points: list[FixedPointMark] = field(default_factory=list)
    sources: list[tuple[str, str, str]] = field(default_factory=list)   # id, kind, citation
    n_observations: int = 0


def fit_reference(curve_json: str | None) -> tuple[float | None, float | None, float | None]:
    """(T_ref [K], value at T_ref, its standard uncertainty) of a stored fit's curve."""
    if not curve_json:
        return None, None, None
    from pipeline.correlations import Curve

    curve = Curve.from_dict(json.loads(curve_json))
    T_ref = curve.ref.get("T_ref_K")
    if T_ref is None:
        return None, None, None
    with np.errstate(all="ignore"):
        value = float(curve.value(T_ref, extrapolate=True))
        u = float(curve.u(T_ref, extrapolate=True)) if curve.covariance is not None else math.nan
    return (float(T_ref), value if math.isfinite(value) else None,
            u if math.isfinite(u) else None)


def _opt(x, kind=float):
    if x is None:
        return None
    if isinstance(x, float) and math.isnan(x):
        return None
    return kind(x)


def _param(ids: Sequence[str] | None) -> dict:
    return {"ids": None if ids is None else sorted(set(ids))}


_FLUIDS_SQL = """SELECT fluid_id, name, coalesce(formula, '') FROM fluid
WHERE $ids IS NULL OR list_contains($ids, fluid_id) ORDER BY fluid_id"""
_FITS_SQL = """SELECT fluid_id, fit_id, boundary, solid_phase, quantity, status, form, n_points,
       n_used, n_flagged, T_min_K, T_max_K, reduced_chi2, skipped_reason, curve_json
FROM fit WHERE is_current AND ($ids IS NULL OR list_contains($ids, fluid_id))
ORDER BY fluid_id, boundary, solid_phase, quantity"""
_FIXED_SQL = """SELECT fluid_id, kind, phases, T_K, coalesce(u_T_K, 'NaN'), coalesce(p_Pa, 'NaN'),
       coalesce(u_p_Pa, 'NaN'), source_id
FROM fixed_point_current WHERE $ids IS NULL OR list_contains($ids, fluid_id)
ORDER BY fluid_id, kind DESC, T_K, source_id"""
_SOURCES_SQL = """WITH used AS (
    SELECT DISTINCT fluid_id, source_id FROM raw_file_current
    WHERE role = 'table' AND fluid_id IS NOT NULL
    UNION SELECT DISTINCT fluid_id, source_id FROM fixed_point_current
    UNION SELECT DISTINCT fluid_id, source_id FROM stated_constant_current)
SELECT u.fluid_id, u.source_id, coalesce(s.kind, ''), coalesce(s.citation, '')
FROM used u LEFT JOIN source s ON s.source_id = u.source_id
WHERE $ids IS NULL OR list_contains($ids, u.fluid_id) ORDER BY u.fluid_id, u.source_id"""
_NOBS_SQL = """SELECT f.fluid_id, sum(f.rows_loaded) FROM raw_file_current f
WHERE f.role = 'table' AND ($ids IS NULL OR list_contains($ids, f.fluid_id)) GROUP BY ALL"""
_OBS_SQL = """SELECT o.fluid_id, o.obs_id, o.boundary, o.T_K, o.value_si, o.source_id,
       o.file_path, coalesce(r.is_outlier, false) AS is_outlier
FROM observation_current o
LEFT JOIN (SELECT fr.obs_id, bool_or(fr.is_outlier) AS is_outlier FROM fit_residual fr
           JOIN fit f ON f.fit_id = fr.fit_id WHERE f.is_current AND f.status = 'fitted'
           GROUP BY fr.obs_id) r ON r.obs_id = o.obs_id
WHERE o.quantity = 'pressure' AND list_contains($ids, o.fluid_id)
ORDER BY o.fluid_id, o.obs_id"""


def fluid_sections(con, fluid_ids: Sequence[str] | None = None) -> dict[str, FluidSection]:
    """Fits, fixed points and sources of each fluid (all fluids when ``fluid_ids`` is None)."""
    p = _param(fluid_ids)
    out = {fid: FluidSection(fid, name, formula)
           for fid, name, formula in con.execute(_FLUIDS_SQL, p).fetchall()}
    for row in con.execute(_FITS_SQL, p).fetchall():
        (fid, fit_id, boundary, phase, quantity, status, form, n_points, n_used, n_flagged,
         t_min, t_max, chi2, reason, curve_json) = row
        if fid not in out:
            continue
        T_ref, value, u = fit_reference(curve_json) if status == "fitted" else (None, None, None)
        out[fid].fits.append(FitRow(fit_id, boundary, phase or "", quantity, status, form,
                                    int(n_points), int(n_used), int(n_flagged), _opt(t_min),
                                    _opt(t_max), _opt(chi2), reason, T_ref, value, u))
    for fid, kind, phases, T, uT, pp, up, source in con.execute(_FIXED_SQL, p).fetchall():
        if fid in out:
            out[fid].fixed_points.append(FixedPointMark(kind, phases, float(T), float(pp),
                                                        float(uT), float(up), source))
    for fid, source, kind, citation in con.execute(_SOURCES_SQL, p).fetchall():
        if fid in out:
            out[fid].sources.append((source, kind, citation))
    for fid, n in con.execute(_NOBS_SQL, p).fetchall():
        if fid in out:
            out[fid].n_observations = int(n or 0)
    return out


def _walk_obs_ids(value: Any, found: set[int]) -> None:
    if isinstance(value, Mapping):
        for k, v in value.items():
            if k == "obs_id" and isinstance(v, int) and not isinstance(v, bool):
                found.add(v)
            elif k == "obs_ids" and isinstance(v, list):
                found.update(x for x in v if isinstance(x, int) and not isinstance(x, bool))
            else:
                _walk_obs_ids(v, found)
    elif isinstance(value, list):
        for v in value:
            _walk_obs_ids(v, found)


def flagged_from_results(results: Iterable) -> dict[str, dict[str, Any]]:
    """Per fluid: {"obs": {obs_id: check ids}, "files": {file path: check ids}} named by
    failing (fail or error) results: observation ids found anywhere in the evidence, and raw
    files that are the subject of a per-file finding (``file:<path>|...``)."""
    out: dict[str, dict[str, Any]] = {}
    for r in results:
        if r.status not in ("fail", "error"):
            continue
        entry = out.setdefault(r.fluid_id, {"obs": {}, "files": {}})
        ids: set[int] = set()
        _walk_obs_ids(r.evidence, ids)
        for i in ids:
            entry["obs"].setdefault(i, set()).add(r.check_id)
        if r.subject.startswith("file:"):
            path = r.subject[len("file:"):].split("|", 1)[0]
            entry["files"].setdefault(path, set()).add(r.check_id)
    return out


def diagram_data(con, sections: Mapping[str, FluidSection], fluid_ids: Sequence[str],
                 flagged: Mapping[str, dict[str, Any]]) -> dict[str, PhaseDiagramData]:
    """Phase-diagram inputs for ``fluid_ids`` (one query for all their observations)."""
    from pipeline.correlations import Curve

    if not fluid_ids:
        return {}
    frame = con.execute(_OBS_SQL, _param(fluid_ids)).df()
    groups = {fid: g for fid, g in frame.groupby("fluid_id", sort=False)}
    curves: dict[str, list[CurveSpec]] = {}
    rows = con.execute("SELECT fluid_id, boundary, solid_phase, curve_json FROM fit WHERE "
                       "is_current AND status = 'fitted' AND quantity = 'pressure' AND "
                       "curve_json IS NOT NULL AND list_contains($ids, fluid_id) "
                       "ORDER BY fluid_id, boundary, solid_phase", _param(fluid_ids)).fetchall()
    for fid, boundary, phase, curve_json in rows:
        curves.setdefault(fid, []).append(
            CurveSpec(boundary, phase or "", Curve.from_dict(json.loads(curve_json))))
    out = {}
    for fid in fluid_ids:
        sec = sections[fid]
        g = groups.get(fid)
        if g is None:
            obs = Observations.empty()
            marks: list[FlaggedPoint] = []
        else:
            obs = Observations(g["T_K"].to_numpy(float), g["value_si"].to_numpy(float),
                               g["source_id"].to_numpy(object), g["boundary"].to_numpy(object),
                               g["obs_id"].to_numpy(np.int64))
            named = flagged.get(fid, {"obs": {}, "files": {}})
            marks = []
            for row in g.itertuples(index=False):
                reasons = set(named["obs"].get(int(row.obs_id), ()))
                reasons |= named["files"].get(row.file_path, set())
                if row.is_outlier:
                    reasons.add("fit outlier")
                if reasons:
                    marks.append(FlaggedPoint(int(row.obs_id), float(row.T_K),
                                              float(row.value_si), row.boundary,
                                              ", ".join(sorted(reasons))))
        title = sec.name + (f" ({sec.formula})" if sec.formula else "")
        out[fid] = PhaseDiagramData(fid, title, obs, curves.get(fid, []), sec.fixed_points,
                                    marks)
    return out
