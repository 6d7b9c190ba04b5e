"""Data-level checks over the stacked observations of all fluids (vectorised): pressures rise
with T, values in physical ranges, residual outliers, duplicates across files.

The observations of the batch are numpy columns (:attr:`CheckBatch.stacked
<pipeline.checks.inputs.CheckBatch.stacked>`); text columns are grouped and compared through
their integer codes, so a run over thousands of fluids groups hundreds of thousands of rows
in a few integer sorts.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from pipeline.checks.curves import curves_at
from pipeline.checks.file_trends import file_residuals
from pipeline.checks.inputs import CheckBatch, Stacked, _Rows
from pipeline.checks.findings import Findings
from pipeline.checks.physics import curve_label
from pipeline.checks.registry import register_check

_COLUMNS = ("fluid_id", "boundary", "solid_phase", "quantity", "obs_id", "file_path",
            "row_number", "T_K", "value_si", "u_value_si", "fit_id", "z", "is_outlier")


def _ref(cols: dict, i: int) -> dict:
    """Evidence entry of row ``i``: obs id, file, row, T, value."""
    return {"obs_id": int(cols["obs_id"][i]), "file": str(cols["file_path"][i]),
            "row": int(cols["row_number"][i]), "T_K": float(cols["T_K"][i]),
            "value_si": float(cols["value_si"][i])}


class Codes:
    """Integer codes of the text columns of selected, ordered rows of a :class:`Stacked`."""

    def __init__(self, stacked: Stacked, rows: np.ndarray):
        self.stacked, self.rows = stacked, rows
        self._of: dict[str, np.ndarray] = {}

    def of(self, name: str) -> np.ndarray:
        found = self._of.get(name)
        if found is None:
            found = self._of[name] = self.stacked.codes(name)[0][self.rows]
        return found

    def matches(self, name: str, test: Callable[[object], bool]) -> np.ndarray:
        """Rows whose ``name`` passes ``test`` (tested once per distinct value)."""
        uniques = self.stacked.codes(name)[1]
        return np.isin(self.of(name), [i for i, u in enumerate(uniques) if test(u)])


def _segments(st: Stacked, rows: np.ndarray, keys: list[str], order: list[str] = (),
              extra: dict[str, np.ndarray] | None = None):
    """Rows ``rows`` grouped by ``keys`` (groups in order of first appearance, sorted by
    ``order`` within a group): the columns (``_COLUMNS`` and ``extra``, given for every row of
    ``st``) as sorted numpy arrays, the :class:`Codes` of the sorted rows, group codes, and each
    group's start and end row."""
    combined = np.zeros(len(rows), dtype=np.int64)
    for k in keys:
        codes, uniques = st.codes(k)
        combined = combined * (len(uniques) + 1) + (codes[rows] + 1)
    g, _ = pd.factorize(combined, sort=False)
    sort_keys = [st[c][rows] for c in reversed(list(order))] + [g]
    idx = np.lexsort(sort_keys) if order else np.argsort(g, kind="stable")
    ordered = rows[idx]
    # each column taken in the sorted order on first use (a check reads a few of them)
    cols = _Rows({**{c: st[c] for c in _COLUMNS}, **(extra or {})}, ordered)
    g = g[idx]
    starts = np.flatnonzero(np.r_[True, g[1:] != g[:-1]]) if len(g) else np.zeros(0, dtype=int)
    return cols, Codes(st, ordered), g, starts, np.r_[starts[1:], len(g)].astype(int)


def _per_row(th, key: str, codes: Codes) -> np.ndarray:
    """Threshold ``key`` for every row, from the per-fluid values."""
    _, uniques = codes.stacked.codes("fluid_id")
    return th.array(key, uniques)[codes.of("fluid_id")]


def _series_subject(boundary: str, solid: str, path: str) -> str:
    return f"file:{path}|{boundary}" + (f":{solid}" if solid else "")


@register_check("data.monotonic", tags=("data",), vectorised=True,
                purpose="Vapour and sublimation pressures rise with temperature in every file.")
def monotonic(batch: CheckBatch, th) -> Findings:
    """Along a vapour-pressure or sublimation curve dp/dT = Δh/(TΔv) > 0, so within one file's
    series, sorted by temperature, every step to a higher T must raise the pressure. A step
    is a fall when Δp < −max(z_max sqrt(u_1^2 + u_2^2), rel_tol p) (steps closer than
    min_dT_K are not compared). Each file's series gets one result naming the falling steps.

    Usual causes of a failure: rows out of order with a column shifted; a file mixing two
    campaigns at different pressures; temperatures in two units; a typing error in one row.
    """
    out = Findings()
    st = batch.stacked
    rows = np.flatnonzero(st.where("boundary", ["liquid-vapour", "solid-vapour"])
                          & st.where("quantity", ["pressure"])) if st.n else np.zeros(0, dtype=int)
    if not len(rows):
        return out
    cols, codes, g, starts, ends = _segments(st, rows, ["fluid_id", "boundary", "solid_phase",
                                                        "file_path"], ["T_K"])
    T, p = cols["T_K"].astype(float), cols["value_si"].astype(float)
    u = np.nan_to_num(cols["u_value_si"].astype(float))
    z, rel = _per_row(th, "z_max", codes), _per_row(th, "rel_tol", codes)
    min_dT = _per_row(th, "min_dT_K", codes)
    same = g[1:] == g[:-1]
    allowed = np.maximum(z[1:] * np.hypot(u[1:], u[:-1]), rel[1:] * np.abs(p[:-1]))
    fall_at = np.flatnonzero(same & (np.diff(T) > min_dT[1:]) & (np.diff(p) < -allowed))
    for start, end in zip(starts, ends):
        steps = fall_at[np.searchsorted(fall_at, start):np.searchsorted(fall_at, end - 1)]
        pairs = [{"from": _ref(cols, i), "to": _ref(cols, i + 1)} for i in steps[:10]]
        text = "; ".join(f"obs {q['from']['obs_id']} -> {q['to']['obs_id']} ({q['from']['T_K']:.6g} K "
                         f"{q['from']['value_si']:.6g} Pa -> {q['to']['T_K']:.6g} K "
                         f"{q['to']['value_si']:.6g} Pa)" for q in pairs[:3])
        fid, boundary, solid, path = (cols[c][start]
                                      for c in ("fluid_id", "boundary", "solid_phase", "file_path"))
        out.judge(fid, _series_subject(boundary, solid, path),
                  measured=float(len(steps)), limit=0.0, statistic="falling steps",
                  evidence={"n_points": int(end - start), "falls": pairs},
                  context=f"{path} ({boundary}): {len(steps)} of {end - start - 1} steps "
                          f"fall" + (f": {text}" if text else ""))
    return out


def _bounds(batch: CheckBatch) -> dict[tuple[str, str], tuple[float, ...]]:
    """Per fluid (and solid): pc, ρc, pt of the vapour triple point, lowest melting pt, and
    (for the liquid-vapour rows, solid_phase "") Tt of any vapour-liquid-solid triple point."""
    out = {}
    for f in batch:
        cp = f.critical_point
        any_vtp = f.vapour_triple_point()
        for solid in {""} | {k[1] for k in f.groups() if k[0] in ("solid-liquid", "solid-vapour")}:
            label = solid or "solid"
            vtp = f.vapour_triple_point(label)
            melt = [tp.p_Pa for tp in f.triple_points if "liquid" in tp.phases and label in tp.phases]
            out[(f.fluid_id, solid)] = (
                cp.p_Pa if cp else np.nan, cp.rho_kg_m3 if cp else np.nan,
                vtp.p_Pa if vtp else np.nan, np.nanmin(melt) if np.isfinite(melt).any() else np.nan,
                any_vtp.T_K if any_vtp is not None and solid == "" else np.nan)
    return out


def _bound_columns(st: Stacked, batch: CheckBatch) -> dict[str, np.ndarray]:
    """The :data:`_BOUND_COLUMNS` of every stacked row (NaN where its fluid and solid phase
    have none)."""
    fcodes, fluids = st.codes("fluid_id")
    scodes, solids = st.codes("solid_phase")
    table = np.full((len(fluids) + 1, len(solids) + 1, len(_BOUND_COLUMNS)), np.nan)
    f_at = {f: i for i, f in enumerate(fluids)}
    s_at = {s: i for i, s in enumerate(solids)}
    for (fid, solid), values in _bounds(batch).items():
        if fid in f_at and solid in s_at:
            table[f_at[fid], s_at[solid]] = values
    per_row = table[fcodes, scodes]
    return {c: per_row[:, i] for i, c in enumerate(_BOUND_COLUMNS)}


@dataclass(frozen=True)
class Bound:
    """A range rule: rows of (boundary, quantity) whose ``column`` lies beyond a bound."""

    column: str                      # T_K or value_si
    upper: bool                      # violated when above the bound (else when below)
    bound: str                       # threshold key, or a per-row bound column (pc, pt_vap ...)
    boundary: str | None = None      # None: every boundary
    quantity: str | None = None      # exact quantity, a prefix ending in '_', or None: all
    relative: bool = False           # bound column widened by the threshold ``tolerance``
    tolerance: str = "rel_tol"       # threshold key of the relative widening

    def violated(self, cols: dict[str, np.ndarray], t: dict[str, np.ndarray],
                 codes: "Codes") -> np.ndarray:
        limit = t[self.bound] if self.bound in t else cols[self.bound].astype(float)
        if self.relative:
            tol = t[self.tolerance]
            limit = limit * (1 + tol if self.upper else 1 - tol)
        x = cols[self.column].astype(float)
        bad = x > limit if self.upper else x < limit
        if self.boundary:
            bad &= codes.matches("boundary", lambda b: b == self.boundary)
        if self.quantity:
            bad &= codes.matches("quantity", lambda n: n == self.quantity or (
                self.quantity.endswith("_") and str(n).startswith(self.quantity)))
        return bad


#: rule -> bound, tested vectorised over the stacked frame (``zero`` is a constant 0 threshold)
RANGE_RULES = {
    "T <= 0 K": Bound("T_K", False, "zero"),
    "T above T_max_K": Bound("T_K", True, "T_max_K"),
    "value <= 0": Bound("value_si", False, "zero"),
    "pressure above p_max_Pa": Bound("value_si", True, "p_max_Pa", quantity="pressure"),
    "density above rho_max_kg_m3": Bound("value_si", True, "rho_max_kg_m3", quantity="rho_"),
    "enthalpy above h_max_J_mol": Bound("value_si", True, "h_max_J_mol", quantity="h_"),
    "vapour pressure above pc": Bound("value_si", True, "pc", "liquid-vapour", "pressure", True),
    "sublimation pressure above pt": Bound("value_si", True, "pt_vap", "solid-vapour", "pressure", True),
    "melting pressure below pt": Bound("value_si", False, "pt_melt", "solid-liquid", "pressure", True),
    "saturated vapour denser than rhoc": Bound("value_si", True, "rhoc", "liquid-vapour", "rho_vapour", True),
    "saturated liquid less dense than rhoc": Bound("value_si", False, "rhoc", "liquid-vapour", "rho_liquid",
                                                   True),
    "liquid-vapour below the triple-point temperature": Bound("T_K", False, "Tt_vap", "liquid-vapour",
                                                              None, True, "T_rel_tol"),
}
_BOUND_COLUMNS = ("pc", "rhoc", "pt_vap", "pt_melt", "Tt_vap")
_RANGE_KEYS = ("T_max_K", "p_max_Pa", "rho_max_kg_m3", "h_max_J_mol", "rel_tol", "T_rel_tol")


@register_check("data.ranges", tags=("data",), vectorised=True,
                purpose="Values are positive and inside physical ranges.")
def ranges(batch: CheckBatch, th) -> Findings:
    """Temperatures, pressures, densities and enthalpies of transition are positive and below
    generous physical bounds (T_max_K, p_max_Pa, rho_max_kg_m3, h_max_J_mol). The stated
    points bound them further: a vapour pressure cannot exceed pc, a sublimation pressure pt,
    a melting pressure cannot lie below the pt where that melting curve starts, and a
    saturated vapour is less dense, a saturated liquid denser, than ρc (all within rel_tol).
    Below the vapour-liquid-solid triple point the liquid is not stable, so a liquid-vapour
    observation at T < Tt (1 − T_rel_tol) is flagged: usually sublimation data filed as vapour
    pressure (a deliberate supercooled-liquid measurement is waived by a curation decision).
    One result per (boundary, solid phase, quantity) group names the rows out of range and the
    rule each breaks.

    Usual causes of a failure: a unit mix-up (see data.unit-mixup), a sign lost in a gauge
    conversion, densities of the other phase, values beyond the critical point.
    """
    out = Findings()
    st = batch.stacked
    if not st.n:
        return out
    cols, codes, _, starts, ends = _segments(st, np.arange(st.n),
                                             ["fluid_id", "boundary", "solid_phase", "quantity"],
                                             extra=_bound_columns(st, batch))
    t = {k: _per_row(th, k, codes) for k in _RANGE_KEYS}
    t["zero"] = np.zeros(len(cols["fluid_id"]))
    broken = {name: rule.violated(cols, t, codes) for name, rule in RANGE_RULES.items()}
    any_bad = np.logical_or.reduce(list(broken.values()))
    for start, end in zip(starts, ends):
        bad = start + np.flatnonzero(any_bad[start:end])
        offenders = [{**_ref(cols, i), "rules": [n for n, m in broken.items() if m[i]]} for i in bad[:20]]
        text = "; ".join(f"obs {o['obs_id']} ({o['file']} row {o['row']}): {', '.join(o['rules'])}"
                         for o in offenders[:3])
        fid, boundary, solid, quantity = (cols[c][start]
                                          for c in ("fluid_id", "boundary", "solid_phase", "quantity"))
        subject = f"{boundary}" + (f":{solid}" if solid else "") + f"/{quantity}"
        out.judge(fid, subject, measured=float(len(bad)), limit=0.0,
                  statistic="values out of range",
                  evidence={"n": int(end - start), "out_of_range": offenders},
                  context=f"{subject}: {len(bad)} of {end - start} values out of range"
                          + (f": {text}" if text else ""))
    return out


def _budget_u(batch: CheckBatch, cols: dict, codes: Codes, groups: list[tuple[int, int]],
              values: list, slopes: list) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(rows, r, u_rel) of the fitted groups ``groups`` (start, end), all at once.

    r = value / fit − 1 (relative residual about the fitted curve); u = the point's stated
    relative u, else the budget's default for its source kind, combined with the budget's
    absolute pressure floor (of its fluid's budget, for the group's quantity); a temperature
    uncertainty moves the point along the curve: u_eff^2 = u^2 + (dy/dT u_T)^2 (in the groups
    where any point states u_T).
    """
    sizes = np.array([b - a for a, b in groups], dtype=np.intp)
    rows = np.concatenate([np.arange(a, b) for a, b in groups]) if groups else np.zeros(0, dtype=np.intp)
    group = np.repeat(np.arange(len(groups)), sizes)
    y = cols["value_si"][rows].astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = y / np.concatenate(values) - 1.0 if groups else np.zeros(0)
    # the budget's defaults, one pair per (fluid's model, quantity, source kind)
    of_group: dict[tuple[int, str], int] = {}
    pairs, mq = [], []
    for a, _ in groups:
        model = batch.fluids[cols["fluid_id"][a]].budget.uncertainty
        quantity = str(cols["quantity"][a])
        k = of_group.setdefault((id(model), quantity), len(pairs))
        if k == len(pairs):
            pairs.append((model, quantity))
        mq.append(k)
    kinds = codes.of("source_kind")[rows]
    kind_names = codes.stacked.codes("source_kind")[1]
    key = np.asarray(mq, dtype=np.int64)[group] * (len(kind_names) + 1) + (kinds + 1)
    combos, inverse = np.unique(key, return_inverse=True)
    rel, floor = np.empty(len(combos)), np.empty(len(combos))
    for j, c in enumerate(combos.tolist()):
        model, quantity = pairs[c // (len(kind_names) + 1)]
        code = c % (len(kind_names) + 1) - 1
        kind = kind_names[code] if code >= 0 else None
        rel[j], floor[j] = model.observed_rel(quantity, kind), model.observed_abs(quantity, kind)
    u = cols["u_value_si"][rows].astype(float)
    u = np.hypot(np.where(np.isfinite(u) & (u > 0), u, rel[inverse] * np.abs(y)), floor[inverse])
    u_T = np.nan_to_num(cols["u_T_K"][rows].astype(float))
    stated = (np.logical_or.reduceat(u_T != 0, np.r_[0, np.cumsum(sizes)[:-1]])[group]
              if len(rows) else np.zeros(0, dtype=bool))
    if stated.any():
        slope = np.nan_to_num(np.concatenate(slopes))
        u = np.where(stated, np.hypot(u, slope * u_T), u)
    with np.errstate(invalid="ignore", divide="ignore"):
        return rows, r, u / np.abs(y)


def _budget_z(batch: CheckBatch, th, cols: dict, codes: Codes, starts, ends, values, slopes,
              zmax: np.ndarray) -> np.ndarray:
    """z of every row about its own file's trend (NaN in groups without a fitted curve).

    Within each file of ``min_file_points`` or more usable points (finite r, u_rel > 0), r is
    judged against the leave-one-out polynomial trend of the file's other residuals (an
    outlier is off its own data set; a file's systematic offset or a smooth drift at the end
    of its range is a between-source matter): :func:`~pipeline.checks.file_trends.file_residuals`,
    all files at once.
    """
    n = len(cols["fluid_id"])
    r, u_rel = np.full(n, np.nan), np.full(n, np.nan)
    fitted = np.zeros(n, dtype=bool)
    min_points = np.zeros(n, dtype=np.int64)
    have = [k for k, v in enumerate(values) if v is not None]
    at, r_fit, u_fit = _budget_u(batch, cols, codes, [(int(starts[k]), int(ends[k])) for k in have],
                                 [values[k] for k in have], [slopes[k] for k in have])
    r[at], u_rel[at], fitted[at] = r_fit, u_fit, True
    for k in have:
        min_points[starts[k]:ends[k]] = int(th(cols["fluid_id"][starts[k]])["min_file_points"])
    usable = fitted & np.isfinite(r) & np.isfinite(u_rel) & (u_rel > 0)
    # the usable rows of each (group, file), in row order
    group = np.repeat(np.arange(len(starts)), np.asarray(ends) - np.asarray(starts))
    rows = np.flatnonzero(usable)
    rows = rows[np.lexsort((codes.of("file_path")[rows], group[rows]))]
    key = group[rows] * (len(codes.stacked.codes("file_path")[1]) + 1) + codes.of("file_path")[rows]
    first = np.flatnonzero(np.r_[True, key[1:] != key[:-1]]) if len(rows) else np.zeros(0, dtype=int)
    lengths = np.diff(np.r_[first, len(rows)]).astype(np.intp)
    judged = lengths >= np.maximum(min_points[rows[first]], 1)
    first, lengths = first[judged], lengths[judged]
    r = file_residuals(cols["T_K"].astype(float), r, u_rel, rows, first, lengths,
                       zmax[rows[first]])
    return r / u_rel


def _fitted_at(batch: CheckBatch, cols: dict, starts, ends) -> tuple[list, list]:
    """Each group's fitted values and slopes at its observations (None without a curve): the
    fitted curves of all groups evaluated together, one kernel call per form."""
    curves, spans = [], []
    for a, b in zip(starts, ends):
        fluid = batch.fluids[cols["fluid_id"][a]]
        c = fluid.curve(cols["boundary"][a], cols["solid_phase"][a], cols["quantity"][a])
        spans.append(None if c is None else (int(a), int(b)))
        if c is not None:
            curves.append(c.curve)
    used = [sp for sp in spans if sp is not None]
    rows = np.concatenate([np.arange(a, b) for a, b in used]) if used else np.zeros(0, dtype=int)
    T = cols["T_K"][rows].astype(float)
    counts = [b - a for a, b in used]
    value = curves_at(curves, T, "value", repeats=counts)
    slope = curves_at(curves, T, "slope", repeats=counts)
    values, slopes, k = [], [], 0
    for sp in spans:
        if sp is None:
            values.append(None)
            slopes.append(None)
            continue
        n = sp[1] - sp[0]
        values.append(value[k:k + n])
        slopes.append(slope[k:k + n])
        k += n
    return values, slopes


@register_check("data.outliers", tags=("data", "fits"), severity="warn", vectorised=True,
                purpose="No observation sits far off its own file's level about the fitted curve.")
def outliers(batch: CheckBatch, th) -> Findings:
    """An outlier is a single observation off its own data set: a typing error, a point of
    another phase, a transient. Each observation of a fitted group gets z = (r − r_file)/u_rel,
    with r = y/y_fit − 1 its relative residual about the fitted curve, r_file the trend of the
    other residuals of its file at that temperature (a weighted polynomial, leave-one-out, in
    files of min_file_points or more points: a file's systematic offset from the fit, or its
    smooth drift at the end of its range, is a disagreement between sources, judged by
    data.unit-mixup and sources.agreement, not an outlier) and u_rel its uncertainty in the
    one budget (with dy/dT u_T, as the fit weighs it): stated, else the default of its
    source kind, combined with the budget's absolute floor for pressures (relative statements
    do not hold down to the lowest pressures, where compiled equations and gauges differ most).
    A point with |z| > z_max is reported with its file and row; it stays in the store (outliers
    are flagged, never hidden). The fit stage's own flags (points it left out of the fit) are
    in the evidence; observations a curation decision excluded from the fit are not judged.
    One result per fitted curve.

    Usual causes: a typing error in one row, a point of another phase, a transient in a
    measurement campaign, a unit slip in a single cell.
    """
    out = Findings()
    st = batch.stacked
    if not st.n:
        return out
    # observations a curation decision excluded from the fit are not judged here either
    rows = np.flatnonzero((st.codes("fit_id")[0] >= 0) & (st.codes("excluded_by")[0] < 0))
    if not len(rows):
        return out
    cols, codes, _, starts, ends = _segments(st, rows, ["fluid_id", "fit_id"],
                                             extra={c: st[c] for c in ("source_kind", "u_T_K")})
    zmax = _per_row(th, "z_max", codes)
    values, slopes = _fitted_at(batch, cols, starts, ends)
    z = _budget_z(batch, th, cols, codes, starts, ends, values, slopes, zmax)
    absz = np.abs(z)
    flagged = absz > zmax
    fit_z = cols["z"].astype(float)
    left_out = cols["is_outlier"].astype(bool)
    worst = np.fmax.reduceat(np.where(np.isfinite(absz), absz, 0.0), starts)
    for k, (start, end) in enumerate(zip(starts, ends)):
        bad = start + np.flatnonzero(flagged[start:end])
        refs = [{**_ref(cols, i), "z": float(z[i]), "fit_z": float(fit_z[i]),
                 "left_out_of_fit": bool(left_out[i])} for i in bad[:20]]
        text = "; ".join(f"obs {r['obs_id']} ({r['file']} row {r['row']}, T = {r['T_K']:.6g} K, "
                         f"z = {r['z']:+.3g})" for r in refs[:3])
        fid, fit_id = cols["fluid_id"][start], cols["fit_id"][start]
        label = curve_label((cols["boundary"][start], cols["solid_phase"][start], cols["quantity"][start]))
        n_left = int(left_out[start:end].sum())
        out.judge(fid, f"curve:{label}", measured=float(worst[k]), limit=float(zmax[start]),
                  ok=len(bad) == 0, statistic="max |z| about its file",
                  evidence={"fit_id": fit_id, "n": int(end - start), "outliers": refs,
                            "left_out_of_fit": n_left},
                  context=f"{label} fit {fit_id}: {len(bad)} of {end - start} observations "
                          f"off their file's level" + (f": {text}" if text else "")
                          + (f" ({n_left} left out of the fit by its robust weighting)"
                             if n_left else ""))
    return out


def _duplicate_pairs(st: Stacked, th) -> pd.DataFrame:
    cols, codes, g, _, _ = _segments(st, np.arange(st.n),
                                     ["fluid_id", "boundary", "solid_phase", "quantity"], ["T_K"])
    T, v, files = cols["T_K"].astype(float), cols["value_si"].astype(float), cols["file_path"]
    file_code = codes.of("file_path")
    T_tol, rel = _per_row(th, "T_tol_K", codes), _per_row(th, "rel_tol", codes)
    found = []
    for lag in range(1, int(th["max_lag"]) + 1):
        i = np.arange(len(T) - lag)
        j = i + lag
        hit = (g[i] == g[j]) & (np.abs(T[j] - T[i]) <= T_tol[i]) & \
              (np.abs(v[j] - v[i]) <= rel[i] * np.abs(v[i])) & (file_code[i] != file_code[j])
        found.append(np.column_stack([i[hit], j[hit]]))
    a, b = np.concatenate(found).T if found else (np.zeros(0, dtype=int),) * 2
    first = np.where(files[a] < files[b], files[a], files[b])
    second = np.where(files[a] < files[b], files[b], files[a])
    return pd.DataFrame({"fluid_id": cols["fluid_id"][a], "file_a": first, "file_b": second,
                         "obs_a": cols["obs_id"][a], "obs_b": cols["obs_id"][b], "T_K": T[a],
                         "value_si": v[a], "quantity": cols["quantity"][a]})


def _files_per_fluid(st: Stacked) -> dict[str, int]:
    """Number of distinct files of each fluid with observations."""
    fcodes, fluids = st.codes("fluid_id")
    pcodes, paths = st.codes("file_path")
    pairs = np.unique(fcodes * (len(paths) + 1) + pcodes)
    counts = np.bincount(pairs // (len(paths) + 1), minlength=len(fluids))
    return {f: int(n) for f, n in zip(fluids, counts)}


@register_check("data.duplicates", tags=("data", "sources"), severity="warn", vectorised=True,
                purpose="No data set appears twice under different files.")
def duplicates(batch: CheckBatch, th) -> Findings:
    """The same value at the same temperature (within T_tol_K and rel_tol) for the same fluid,
    boundary and quantity in two different files is almost surely one data set entered twice
    (a table copied from a paper that is also in the store, a file re-sent under a new name).
    A duplicate counts twice in a fit and shrinks its uncertainty. Neighbours after sorting by
    T (up to max_lag) are compared; one result per pair of files names the shared points.

    Usual causes: a compilation that reproduces a primary source also stored; the same
    campaign ingested under two batch names.
    """
    out = Findings()
    st = batch.stacked
    if not st.n:
        return out
    pairs = _duplicate_pairs(st, th)
    with_dups = set(pairs["fluid_id"])
    for (fid, fa, fb), grp in pairs.groupby(["fluid_id", "file_a", "file_b"], sort=False):
        ev = [{"obs_a": int(r.obs_a), "obs_b": int(r.obs_b), "quantity": r.quantity,
               "T_K": float(r.T_K), "value_si": float(r.value_si)} for r in grp.head(20).itertuples()]
        out.judge(fid, f"files:{fa}|{fb}", measured=float(len(grp)), limit=0.0,
                  statistic="shared points", evidence={"pairs": ev},
                  context=f"{len(grp)} observations of {fb} duplicate {fa} (same T within "
                          f"{th(fid)['T_tol_K']:g} K, value within {th(fid)['rel_tol']:g})")
    counts = _files_per_fluid(st)
    for fid in batch.ids:
        if fid not in with_dups and fid in counts:
            out.judge(fid, "", measured=0.0, limit=0.0, statistic="shared points",
                      evidence={"files": counts[fid]},
                      context=f"no duplicates across {counts[fid]} file(s)")
    return out
