"""What the report shows per fluid, read from the store with set-based queries.

:func:`fluid_sections` returns, for each fluid, its fits (with the reference value each fit
recommends and its standard uncertainty), stated fixed points, sources with their citations,
and the observations the figures need (only for fluids whose figures are not cached), drawn
corrected where the unit mix-up check diagnosed their file. :func:`flagged_from_results`
turns failing check evidence into the observations to mark; :func:`flag_groups` numbers them.
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
    FlagGroup,
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
    ref_slope: float | None = None     # d value/dT at T_ref [unit/K]
    curve_digest: str = ""             # SHA-256 of the stored curve (what the refs come from)
    curve_json: str | None = field(default=None, repr=False, compare=False)

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


def _reference(curve_json: str | None) -> tuple:
    """(T_ref [K], value at T_ref, its standard uncertainty, slope there) of a stored curve."""
    if not curve_json:
        return None, None, None, None
    from pipeline.correlations import Curve

    curve = Curve.from_dict(json.loads(curve_json))
    T_ref = curve.ref.get("T_ref_K")
    if T_ref is None:
        return None, None, None, None
    with np.errstate(all="ignore"):
        value = float(curve.value(T_ref, extrapolate=True))
        u = float(curve.u(T_ref, extrapolate=True)) if curve.covariance is not None else math.nan
        slope = float(curve.slope(T_ref, extrapolate=True))
    fin = [x if math.isfinite(x) else None for x in (value, u, slope)]
    return (float(T_ref), *fin)


def fit_reference(curve_json: str | None) -> tuple[float | None, float | None, float | None]:
    """(T_ref [K], value at T_ref, its standard uncertainty) of a stored fit's curve."""
    return _reference(curve_json)[:3]


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
_OBS_SQL = """SELECT o.fluid_id, o.obs_id, o.boundary, coalesce(o.solid_phase, '') AS solid_phase,
       o.T_K, o.value_si, o.source_id, coalesce(s.kind, 'unknown') AS source_kind, o.file_path,
       o.row_number, o.value_unit, o.T_unit, o.T_scale,
       coalesce(r.is_outlier, false) AS is_outlier, coalesce(r.excluded_by, '') AS excluded_by
FROM observation_current o
LEFT JOIN source s ON s.source_id = o.source_id
LEFT JOIN (SELECT fr.obs_id, bool_or(fr.is_outlier) AS is_outlier,
                  min(fr.excluded_by) AS excluded_by FROM fit_residual fr
           JOIN fit f ON f.fit_id = fr.fit_id WHERE f.is_current AND f.status = 'fitted'
           GROUP BY fr.obs_id) r ON r.obs_id = o.obs_id
WHERE o.quantity = 'pressure' AND list_contains($ids, o.fluid_id)
ORDER BY o.fluid_id, o.obs_id"""


def with_references(sec: FluidSection) -> FluidSection:
    """``sec`` with the reference value, uncertainty and slope of each fitted curve filled in
    (:func:`fluid_sections` with ``references=False`` leaves them for the sections shown)."""
    from dataclasses import replace

    fits = [replace(f, **dict(zip(("T_ref_K", "ref_value", "ref_u", "ref_slope"),
                                  _reference(f.curve_json))))
            if f.status == "fitted" and f.ref_value is None and f.curve_json else f
            for f in sec.fits]
    return replace(sec, fits=fits)


def fluid_sections(con, fluid_ids: Sequence[str] | None = None, *,
                   references: bool = True) -> dict[str, FluidSection]:
    """Fits, fixed points and sources of each fluid (all fluids when ``fluid_ids`` is None);
    ``references=False`` leaves each fit's value at T_ref to :func:`with_references` (about a
    millisecond a fit: a report of an unchanged store computes it only for what it shows)."""
    import hashlib

    p = _param(fluid_ids)
    out = {fid: FluidSection(fid, name, formula)
           for fid, name, formula in con.execute(_FLUIDS_SQL, p).fetchall()}
    for row in con.execute(_FITS_SQL, p).fetchall():
        (fid, fit_id, boundary, phase, quantity, status, form, n_points, n_used, n_flagged,
         t_min, t_max, chi2, reason, curve_json) = row
        if fid not in out:
            continue
        ref = _reference(curve_json) if status == "fitted" and references else (None,) * 4
        digest = hashlib.sha256(curve_json.encode()).hexdigest()[:16] if curve_json else ""
        out[fid].fits.append(FitRow(fit_id, boundary, phase or "", quantity, status, form,
                                    int(n_points), int(n_used), int(n_flagged), _opt(t_min),
                                    _opt(t_max), _opt(chi2), reason, *ref, digest,
                                    curve_json if status == "fitted" else None))
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
    """Per fluid, what the figures mark: ``obs`` {obs id: check ids} and ``files`` {file path:
    check ids} named by failing (fail or error) results — observation ids anywhere in the
    evidence, raw files that are the subject of a per-file finding (``file:<path>|...``) — and
    ``corrections`` {file path: [mix-up name, ambient pressure]} of the files the unit mix-up
    check diagnosed (whatever the finding's status: waived or excluded, the diagnosis stands)."""
    out: dict[str, dict[str, Any]] = {}
    for r in results:
        entry = out.setdefault(r.fluid_id, {"obs": {}, "files": {}, "corrections": {}})
        path = r.subject[len("file:"):].split("|", 1)[0] if r.subject.startswith("file:") else None
        if r.check_id == "data.unit-mixup" and path and isinstance(r.evidence, Mapping) \
                and r.evidence.get("diagnosis"):
            entry["corrections"][path] = [str(r.evidence["diagnosis"]),
                                          float(r.thresholds.get("p_atm_Pa", 101325.0))]
        if r.status not in ("fail", "error"):
            continue
        ids: set[int] = set()
        _walk_obs_ids(r.evidence, ids)
        for i in ids:
            entry["obs"].setdefault(i, set()).add(r.check_id)
        if path:
            entry["files"].setdefault(path, set()).add(r.check_id)
    return out


def corrected(T: np.ndarray, p: np.ndarray, units: tuple[str, str, str],
              correction: Sequence | None) -> tuple[np.ndarray, np.ndarray, str]:
    """(T, p, name) of a file's points undone by its diagnosed mix-up (the hypothesis of
    :mod:`pipeline.checks.unit_mixup` of that name); unchanged with '' when none applies."""
    if not correction:
        return T, p, ""
    from pipeline.checks.unit_mixup import hypotheses

    name, p_atm = correction
    for h in hypotheses(*units, float(p_atm)):
        if h.name == name:
            T2, p2 = h.undo(T.astype(float), p.astype(float))
            if np.all(np.isfinite(T2)) and np.all(np.isfinite(p2)):
                return np.asarray(T2, dtype=float), np.asarray(p2, dtype=float), name
    return T, p, ""


def flag_groups(g, named: Mapping[str, Any], numbers: np.ndarray,
                corrections: Mapping[str, str]) -> list[FlagGroup]:
    """Number the flagged points of one fluid (frame ``g`` of :data:`_OBS_SQL` rows): points
    of one file flagged for the same failing checks form a group (fit outliers alone form
    their own), numbered in order of their first observation; ``numbers`` gets each point's
    group number. Only the rows a check names or the fit flagged are visited."""
    obs_ids = g["obs_id"].to_numpy(np.int64)
    paths = g["file_path"].to_numpy(object)
    outlier = g["is_outlier"].to_numpy(bool)
    by_obs, by_file = named["obs"], named["files"]
    candidate = outlier.copy()
    if by_obs:
        candidate |= np.fromiter((int(i) in by_obs for i in obs_ids), bool, len(obs_ids))
    if by_file:
        candidate |= np.fromiter((f in by_file for f in paths), bool, len(paths))
    groups: dict[tuple, list[int]] = {}
    for i in np.flatnonzero(candidate).tolist():
        checks = set(by_obs.get(int(obs_ids[i]), ())) | set(by_file.get(paths[i], ()))
        if not checks and not outlier[i]:
            continue
        key = (paths[i], tuple(sorted(checks)) or ("fit outlier",))
        groups.setdefault(key, []).append(i)
    out = []
    T_K = g["T_K"].to_numpy(float)
    rows = g["row_number"].to_numpy(np.int64)
    sources = g["source_id"].to_numpy(object)
    ordered = sorted(groups.items(), key=lambda kv: int(obs_ids[kv[1][0]]))
    for n, ((path, reasons), idx) in enumerate(ordered, start=1):
        numbers[idx] = n
        T = T_K[idx]
        T = T[~np.isnan(T)]
        out.append(FlagGroup(n, path, str(sources[idx[0]]), reasons,
                             tuple(int(x) for x in obs_ids[idx]),
                             tuple(int(x) for x in rows[idx]),
                             float(T.min()) if len(T) else math.nan,
                             float(T.max()) if len(T) else math.nan,
                             int(outlier[idx].sum()), corrections.get(path, "")))
    return out


def _observations(g, named: Mapping[str, Any]) -> tuple[Observations, list[FlagGroup]]:
    """One fluid's pressure observations as drawn: corrected where a mix-up is diagnosed,
    with their flag group numbers."""
    T_stored, p_stored = g["T_K"].to_numpy(float), g["value_si"].to_numpy(float)
    T, p = T_stored.copy(), p_stored.copy()
    correction = np.full(len(g), "", dtype=object)
    done: dict[str, str] = {}
    paths = g["file_path"].to_numpy(object)
    for path, spec in named.get("corrections", {}).items():
        sel = paths == path
        if not sel.any():
            continue
        first = np.flatnonzero(sel)[0]
        units = (str(g["value_unit"].iat[first]), str(g["T_unit"].iat[first]),
                 str(g["T_scale"].iat[first]))
        T[sel], p[sel], name = corrected(T[sel], p[sel], units, spec)
        correction[sel] = name
        if name:
            done[path] = name
    numbers = np.zeros(len(g), dtype=np.int64)
    flags = flag_groups(g, named, numbers, done)
    obs = Observations(T, p, g["source_id"].to_numpy(object), g["boundary"].to_numpy(object),
                       g["obs_id"].to_numpy(np.int64), g["solid_phase"].to_numpy(object),
                       g["source_kind"].to_numpy(object), paths,
                       g["row_number"].to_numpy(np.int64), T_stored, p_stored, correction,
                       numbers, g["excluded_by"].to_numpy(object))
    return obs, flags


def diagram_data(con, sections: Mapping[str, FluidSection], fluid_ids: Sequence[str],
                 flagged: Mapping[str, dict[str, Any]]) -> dict[str, PhaseDiagramData]:
    """Figure inputs for ``fluid_ids`` (one query for all their observations)."""
    from pipeline.correlations import Curve

    if not fluid_ids:
        return {}
    frame = con.execute(_OBS_SQL, _param(fluid_ids)).df()
    groups = {fid: g.reset_index(drop=True) for fid, g in frame.groupby("fluid_id", sort=False)}
    curves: dict[str, list[CurveSpec]] = {}
    rows = con.execute("SELECT fluid_id, boundary, solid_phase, curve_json FROM fit WHERE "
                       "is_current AND status = 'fitted' AND quantity = 'pressure' AND "
                       "curve_json IS NOT NULL AND list_contains($ids, fluid_id) "
                       "ORDER BY fluid_id, boundary, solid_phase", _param(fluid_ids)).fetchall()
    for fid, boundary, phase, curve_json in rows:
        curves.setdefault(fid, []).append(
            CurveSpec(boundary, phase or "", Curve.from_dict(json.loads(curve_json))))
    empty = {"obs": {}, "files": {}, "corrections": {}}
    out = {}
    for fid in fluid_ids:
        sec = sections[fid]
        g = groups.get(fid)
        obs, flags = (Observations.empty(), []) if g is None else \
            _observations(g, flagged.get(fid, empty))
        title = sec.name + (f" ({sec.formula})" if sec.formula else "")
        out[fid] = PhaseDiagramData(fid, title, obs, curves.get(fid, []), sec.fixed_points,
                                    tuple(flags))
    return out
