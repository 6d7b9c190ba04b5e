"""Fitted curves as the checks read them, many points at once.

:meth:`FluidData.at <pipeline.checks.inputs.FluidData.at>` is the one way a check reads a fitted
curve: the value, slope and their standard uncertainties at one temperature under the one
uncertainty budget and the one extrapolation policy (:mod:`pipeline.checks.budget`). A check
over many fluids asks for many such points; :func:`evaluate_points` answers a whole list of
requests (fluid, curve, T) at once. Requests whose curves share a correlation form and term
count (across fluids) share one call of the form's kernels, as
:func:`pipeline.correlations.evaluate_batch` does, so a run over 1,000 fluids makes a few
hundred numpy calls where the point-by-point reading made hundreds of thousands; the curve
budgets the points need are computed in the same way (:func:`curve_budgets`).

Each number is the one the point-by-point reading gave, to the last bit: the kernels are
elementwise, and the few reductions whose rounding depends on the array shapes (the
uncertainty's quadratic form, the slope uncertainty's) are taken one point at a time, on the
same shapes as a single reading.
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Iterable, Sequence

import numpy as np

from pipeline.checks.budget import CurveBudget, CurvePoint, floor_rel_rows, reach
from pipeline.checks.budget import curve_budgets as budgets_of
from pipeline.checks.points import curve_label
from pipeline.correlations.base import Curve

if TYPE_CHECKING:  # pragma: no cover
    from pipeline.checks.inputs import FluidData

CurveKey = tuple[str, str, str]  # (boundary, solid_phase, quantity)
#: (fluid, curve key, temperature [K]) asked of :func:`evaluate_points`
Request = tuple["FluidData", CurveKey, float]
_KERNEL = {"value": "evaluate", "slope": "derivative", "jacobian": "jacobian"}


@dataclass(frozen=True)
class FittedCurve:
    """A current fit: the correlation :class:`~pipeline.correlations.Curve` and its metadata."""

    curve: Any
    fit_id: str | None = None
    form: str | None = None
    n_used: int | None = None
    reduced_chi2: float | None = None
    weighted_rms: float | None = None
    input_hash: str | None = None

    @property
    def T_min_K(self) -> float:
        return float(self.curve.T_min_K)

    @property
    def T_max_K(self) -> float:
        return float(self.curve.T_max_K)

    def covers(self, T: float, margin_K: float = 0.0) -> bool:
        """True when ``T`` lies inside the fitted range widened by ``margin_K`` [K]."""
        return self.T_min_K - margin_K <= T <= self.T_max_K + margin_K

    def value(self, T, extrapolate: bool = False):
        return self.curve.value(T, extrapolate=extrapolate)

    def slope(self, T, extrapolate: bool = False):
        return self.curve.slope(T, extrapolate=extrapolate)

    def u(self, T, extrapolate: bool = False):
        """Standard uncertainty of the fitted value (0 where the fit has no covariance)."""
        if getattr(self.curve, "covariance", None) is None:
            return np.zeros_like(np.asarray(T, dtype=float))
        return np.nan_to_num(self.curve.u(T, extrapolate=extrapolate), nan=0.0)

    def evidence(self) -> dict:
        return {"fit_id": self.fit_id, "form": self.form or getattr(self.curve, "form", None),
                "T_min_K": self.T_min_K, "T_max_K": self.T_max_K}


# -- kernels over rows: curve i at temperature i -----------------------------------------------
def _by_form(curves: Sequence[Any]) -> dict[tuple, list[int]]:
    """Row indices per (form, parameter count, exponents): rows that share one kernel call.

    Curves that are not :class:`~pipeline.correlations.Curve` (any object with ``value``,
    ``slope`` and, with a covariance, ``jacobian`` methods) are grouped under None and read
    through their own methods.
    """
    groups: dict[tuple | None, list[int]] = {}
    keys: dict[int, tuple | None] = {}
    for i, c in enumerate(curves):
        key = keys.get(id(c), False)
        if key is False:
            key = keys[id(c)] = ((c.form, len(c.params), c.ref["exponents"])
                                 if isinstance(c, Curve) else None)
        groups.setdefault(key, []).append(i)
    return groups


def _own(curves: Sequence[Any], idx: list[int], what: str, T: np.ndarray) -> list:
    """Rows read through the curves' own methods (``what`` at T[i], extrapolating)."""
    if what == "jacobian":
        return [np.asarray(curves[i].jacobian(float(T[i])), dtype=float) for i in idx]
    return [float(getattr(curves[i], what)(float(T[i]), extrapolate=True)) for i in idx]


def _kernel(form, what: str, T: np.ndarray, P: np.ndarray, T_ref: np.ndarray, exps) -> np.ndarray:
    """The form's kernel at T (n,) with parameters P (n, k): (n,) values or (n, k) Jacobians."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        out = getattr(form, _KERNEL[what])(T[:, None], P, T_ref, exps)
    return out[:, 0]


def _rows_of(curves: Sequence[Any], repeats) -> tuple[list[Any], np.ndarray]:
    """(distinct curves, the index of each row's curve among them): rows give one curve each,
    or curve i covers ``repeats[i]`` consecutive rows."""
    if repeats is not None:
        return list(curves), np.repeat(np.arange(len(curves)), np.asarray(repeats, dtype=np.intp))
    at: dict[int, int] = {}
    distinct: list[Any] = []
    owner = []
    for c in curves:
        j = at.get(id(c))
        if j is None:
            j = at[id(c)] = len(distinct)
            distinct.append(c)
        owner.append(j)
    return distinct, np.array(owner, dtype=np.intp)


class CurveRows:
    """Rows of curves (row i reads ``curves[i]``, or curve i covers ``repeats[i]`` consecutive
    rows), grouped once by form: each later kernel call is a few numpy operations."""

    def __init__(self, curves: Sequence[Any], repeats=None):
        distinct, owner = _rows_of(curves, repeats)
        self.n = len(owner)
        self.groups: list[tuple] = []
        for group, cidx in _by_form(distinct).items():
            local = np.full(len(distinct), -1, dtype=np.intp)
            local[cidx] = np.arange(len(cidx))
            rows = np.flatnonzero(local[owner] >= 0)
            if group is None:
                self.groups.append((None, rows, [distinct[owner[r]] for r in rows], None, None))
                continue
            sub = [distinct[c] for c in cidx]
            pick = local[owner[rows]]
            self.groups.append((sub[0].correlation_form, rows, np.array([c.params for c in sub])[pick],
                                np.array([[c._T_ref] for c in sub])[pick], group[2]))

    def at(self, T: np.ndarray, what: str) -> np.ndarray:
        """Each row's curve at its T, extrapolating: (n,) values or slopes, (n, k) Jacobians
        (rows of one parameter count k)."""
        out: np.ndarray | None = None
        for form, rows, P, T_ref, exps in self.groups:
            if form is None:
                values = np.asarray(_own(P, list(range(len(rows))), what, T[rows]), dtype=float)
            else:
                values = _kernel(form, what, T[rows], P, T_ref, exps)
            if out is None:
                out = np.full((self.n,) + values.shape[1:], np.nan)
            out[rows] = values
        return out if out is not None else np.full(self.n, np.nan)


def curves_at(curves: Sequence[Any], T, what: str = "value", repeats=None) -> np.ndarray:
    """Row i: ``curves[i]`` (a Curve) at ``T[i]``, extrapolating; ``what`` is value or slope.

    With ``repeats``, curve i covers ``repeats[i]`` consecutive rows instead. The same
    numbers as ``curve.value(T, extrapolate=True)`` (or ``slope``), one kernel call per
    correlation form and term count.
    """
    return CurveRows(curves, repeats).at(np.asarray(T, dtype=float), what)


def grid_values(curves: Sequence[Any], T: np.ndarray, what: str = "value") -> np.ndarray:
    """Row i: ``curves[i]`` at the temperatures ``T[i]`` (shape (n, m)), NaN outside its range.

    The same numbers as ``curves[i].value(T[i])`` (or ``slope``), including its range mask.
    """
    T = np.asarray(T, dtype=float)
    out = np.full(T.shape, np.nan)
    for group, idx in _by_form(curves).items():
        if group is None:
            for i in idx:
                out[i] = np.asarray(getattr(curves[i], what)(T[i]), dtype=float)
            continue
        exps = group[2]
        sub = [curves[i] for i in idx]
        P = np.array([c.params for c in sub])
        T_ref = np.array([[c._T_ref] for c in sub])
        form = sub[0].correlation_form
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            out[idx] = getattr(form, _KERNEL[what])(T[idx], P, T_ref, exps)
    lo = np.array([c.T_min_K - 1e-12 * abs(c.T_min_K) for c in curves])[:, None]
    hi = np.array([c.T_max_K + 1e-12 * abs(c.T_max_K) for c in curves])[:, None]
    return np.where((T >= lo) & (T <= hi), out, np.nan)


def linspace_rows(lo: np.ndarray, hi: np.ndarray, n: int) -> np.ndarray:
    """Row i: ``np.linspace(lo[i], hi[i], n)`` (the same numbers, all rows at once)."""
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    if n < 2:
        return np.array([np.linspace(a, b, n) for a, b in zip(lo, hi)]).reshape(len(lo), n)
    step = (hi - lo) / (n - 1)
    T = np.arange(0, n, dtype=float)[None, :] * step[:, None]
    T += lo[:, None]
    T[:, -1] = hi
    for i in np.flatnonzero(step == 0):   # numpy spaces a zero step another way
        T[i] = np.linspace(lo[i], hi[i], n)
    return T


def grids(fitted: Sequence[FittedCurve], n: Sequence[int], what: str = "value"
          ) -> list[tuple[np.ndarray, np.ndarray]]:
    """(T, values) of each fitted curve on ``n[i]`` points spread over its fitted range,
    NaN outside it (``fitted[i].value`` or ``slope`` on ``np.linspace(T_min, T_max, n[i])``)."""
    out: list[Any] = [None] * len(fitted)
    by_n: dict[int, list[int]] = {}
    for i, k in enumerate(n):
        by_n.setdefault(int(k), []).append(i)
    for k, idx in by_n.items():
        T = linspace_rows(np.array([fitted[i].T_min_K for i in idx]),
                          np.array([fitted[i].T_max_K for i in idx]), k)
        values = grid_values([fitted[i].curve for i in idx], T, what)
        for r, i in enumerate(idx):
            out[i] = (T[r], values[r])
    return out


# -- points under the budget and the policy ----------------------------------------------------
def _quadratic_u(J: np.ndarray, cov: np.ndarray) -> float:
    """sqrt(J C J^T) of one point (J of shape (1, k)), NaN read as 0: the number ``Curve.u``
    gives, computed on the same shapes (the reduction's rounding depends on them)."""
    var = float(np.einsum("mi,ij,mj->m", J, cov, J)[0])
    if not var > 0.0:          # clipped at zero; NaN read as 0
        return 0.0
    u = math.sqrt(var)
    return u if u != math.inf else sys.float_info.max


def _slope_u(Jm: np.ndarray, J0: np.ndarray, Jp: np.ndarray, h: np.ndarray,
             covs: Sequence[np.ndarray]) -> np.ndarray:
    """Delta-method u of the slope from Jacobians (n, k) at end - h, end, end + h: the
    derivative of the Jacobian by central differences, one-sided where a side is undefined;
    0 where none is finite."""
    out = np.zeros(len(h))
    todo = np.ones(len(h), dtype=bool)
    for lo, hi, width in ((Jm, Jp, 2 * h), (Jm, J0, 1 * h), (J0, Jp, 1 * h)):
        dJ = (hi - lo) / width[:, None]
        use = np.flatnonzero(todo & np.all(np.isfinite(dJ), axis=1))
        for i in use:
            var = float(dJ[i] @ covs[i] @ dJ[i])
            out[i] = math.sqrt(max(var, 0.0))
        todo[use] = False
    return out


def _continue(curve: Any, T: float, end: float, v_end: float, s_end: float,
              u_end: float) -> tuple[float, float, float]:
    """(value, slope, u) at ``T`` where the form is undefined, continued from ``end``.

    Along Clausius-Clapeyron (ln p linear in 1/T) for forms fitted in ln p, linearly for the
    others (melting curves); the uncertainty is that at the end.
    """
    if getattr(getattr(curve, "correlation_form", None), "link", "") == "log" and v_end > 0:
        b = -end ** 2 * s_end / v_end          # d ln p / d(1/T) at the end
        value = v_end * math.exp(b * (1.0 / T - 1.0 / end))
        return value, -value * b / T ** 2, u_end * value / v_end
    return v_end + s_end * (T - end), s_end, u_end


def _near(rows: list[int], fitted: list[FittedCurve], T: np.ndarray, with_slope_u: bool = True):
    """Value, slope, u of the covariance and u of the slope at the requested T of ``rows``.

    A form undefined at T (a fractional power of 1 - T/T_ref a rounding error past T_ref) is
    read at the nearest end of its range and continued from there (:func:`_continue`); the
    uncertainties are those at the point read.
    """
    curves = [fitted[i].curve for i in rows]
    Tq = T[rows]
    read = CurveRows(curves)
    v = read.at(Tq, "value")
    lo = np.array([c.T_min_K for c in curves], dtype=float)
    hi = np.array([c.T_max_K for c in curves], dtype=float)
    end = np.where(np.isfinite(v), Tq, np.minimum(np.maximum(Tq, lo), hi))
    slope = read.at(end, "slope")
    u_cov, u_slope = np.zeros(len(rows)), np.zeros(len(rows))
    by_k: dict[int, list[int]] = {}
    for j, c in enumerate(curves):
        if c.covariance is not None:
            by_k.setdefault(len(c.covariance), []).append(j)
    covs: dict[int, np.ndarray] = {}
    for with_cov in by_k.values():      # rows whose Jacobians stack: one parameter count
        sub = [curves[j] for j in with_cov]
        e = end[with_cov]
        h = 1e-5 * np.maximum(np.abs(e), 1.0)
        jac = CurveRows(sub)
        if with_slope_u:
            Jm, J0, Jp = (jac.at(e + d * h, "jacobian") for d in (-1, 0, 1))
        else:
            J0 = jac.at(e + 0 * h, "jacobian")
        cov = [covs[id(c)] if id(c) in covs else
               covs.setdefault(id(c), np.asarray(c.covariance, dtype=float)) for c in sub]
        u_cov[with_cov] = [_quadratic_u(J0[r:r + 1], cov[r]) for r in range(len(sub))]
        if with_slope_u:
            u_slope[with_cov] = _slope_u(Jm, J0, Jp, h, cov)
    value = v.copy()
    moved = np.flatnonzero(end != Tq)     # the rare continuation, point by point
    if len(moved):
        v_end = curves_at([curves[j] for j in moved], end[moved], "value")
        for j, ve in zip(moved, v_end):
            value[j], slope[j], u_cov[j] = _continue(curves[j], float(Tq[j]), float(end[j]),
                                                     float(ve), float(slope[j]), float(u_cov[j]))
    return value, slope, u_cov, u_slope


def curve_budgets(pairs: Iterable[tuple["FluidData", CurveKey]]) -> None:
    """Compute (once) the :class:`CurveBudget` of every (fluid, curve) in ``pairs``.

    The fitted values at the observations of all the curves are evaluated together (one kernel
    call per form); each budget is then stored in its fluid's cache.
    """
    todo, seen = [], set()
    for fluid, key in pairs:
        if (id(fluid), key) not in seen and not fluid.has_curve_budget(key):
            seen.add((id(fluid), key))
            todo.append((fluid, key))
    if not todo:
        return
    series = [fluid.series(key[0], key[2], key[1]) for fluid, key in todo]
    kept = [np.flatnonzero(~s.is_outlier.astype(bool) & np.isfinite(s.value.astype(float)))
            for s in series]
    curves = [fluid.curves[key].curve for fluid, key in todo]
    T = np.concatenate([s.T[k].astype(float) for s, k in zip(series, kept)])
    fitted = curves_at(curves, T, "value", repeats=[len(k) for k in kept])
    bounds = np.r_[0, np.cumsum([len(k) for k in kept])]
    parts = [(s.take(k), fitted[bounds[j]:bounds[j + 1]], fluid.budget.uncertainty,
              fluid.budget.extrapolation) for j, ((fluid, key), s, k) in enumerate(zip(todo, series, kept))]
    for (fluid, key), budget in zip(todo, budgets_of(parts)):
        fluid.set_curve_budget(key, budget)


@dataclass
class PointColumns:
    """Curve points as columns, one row per request: what :meth:`FluidData.at
    <pipeline.checks.inputs.FluidData.at>` gives, without an object per point. ``ok`` marks the
    rows read; ``reasons`` says why the others were not. ``u_slope`` is NaN when not asked."""

    requests: Sequence[Request]
    ok: np.ndarray
    reasons: list[str]
    value: np.ndarray
    slope: np.ndarray
    u: np.ndarray
    u_slope: np.ndarray
    u_cov: np.ndarray
    floor: np.ndarray
    beyond: np.ndarray

    def point(self, i: int) -> tuple[CurvePoint | None, str]:
        """Row ``i`` as ``FluidData.at`` returns it."""
        if not self.ok[i]:
            return None, self.reasons[i]
        return CurvePoint(self.requests[i][2], float(self.value[i]), float(self.slope[i]),
                          float(self.u[i]), float(self.u_slope[i]), float(self.u_cov[i]),
                          float(self.floor[i]), float(self.beyond[i])), ""


def evaluate_point_columns(requests: Sequence[Request], slope_u: bool = True) -> PointColumns:
    """``fluid.at(key, T)`` for every request, as columns (see :class:`PointColumns`).

    Honours the one extrapolation policy (a curve is not read further beyond its data than it
    allows; the reason names it) and the one uncertainty budget (u combines the covariance and
    the correlated floor of the files the curve was fitted to). ``slope_u=False`` leaves the
    slope's uncertainty out (NaN), for checks that read values only.
    """
    n = len(requests)
    reasons = [""] * n
    fitted: list[Any] = [None] * n
    T = np.array([float(t) for _, _, t in requests], dtype=float)
    far = np.zeros(n)
    within: list[int] = []
    for i, (fluid, key, t) in enumerate(requests):
        f = fluid.curves.get(key)
        if f is None:
            reasons[i] = f"no fitted {curve_label(key)} curve"
            continue
        policy = fluid.budget.extrapolation
        beyond = max(f.T_min_K - t, t - f.T_max_K, 0.0)   # as budget.reach, which words the no
        if not beyond <= policy.allowed(t):
            reasons[i] = reach(f.T_min_K, f.T_max_K, t, policy, curve_label(key)).reason
            continue
        fitted[i], far[i] = f, beyond
        within.append(i)
    cols = {c: np.full(n, np.nan) for c in ("value", "slope", "u", "u_slope", "u_cov", "floor")}
    ok = np.zeros(n, dtype=bool)
    if within:
        value, slope, u_cov, u_slope = _near(within, fitted, T, slope_u)
        rows = np.array(within)
        defined = np.isfinite(value) & np.isfinite(slope)
        for j in np.flatnonzero(~defined):
            fluid, key, t = requests[within[j]]
            reasons[within[j]] = f"the {curve_label(key)} fit's form is undefined at T = {t:.6g} K"
        good = np.flatnonzero(defined)
        curve_budgets((requests[within[j]][0], requests[within[j]][1]) for j in good)
        floor = np.full(len(within), np.nan)
        by_curve: dict[tuple, list[int]] = {}
        for j in good:
            fluid, key, _ = requests[within[j]]
            by_curve.setdefault((id(fluid), key), []).append(j)
        budgets = [requests[within[js[0]]][0].curve_budget(requests[within[js[0]]][1])
                   for js in by_curve.values()]
        if budgets:
            at = np.concatenate([np.asarray(js, dtype=np.intp) for js in by_curve.values()])
            owner = np.repeat(np.arange(len(budgets)), [len(js) for js in by_curve.values()])
            floor[at] = floor_rel_rows(budgets, owner, T[rows[at]])
        fv, fs = (floor * np.abs(value)).tolist(), (floor * np.abs(slope)).tolist()
        uc, us = u_cov.tolist(), u_slope.tolist()
        u = np.array([math.hypot(a, b) for a, b in zip(uc, fv)])
        ups = np.array([math.hypot(a, b) for a, b in zip(us, fs)]) if slope_u else u_slope
        target = rows[good]
        cols["value"][target], cols["slope"][target] = value[good], slope[good]
        cols["u"][target], cols["u_slope"][target] = u[good], ups[good]
        cols["u_cov"][target], cols["floor"][target] = u_cov[good], floor[good]
        ok[target] = True
    return PointColumns(requests, ok, reasons, beyond=far, **cols)


def evaluate_points(requests: Sequence[Request]) -> list[tuple[CurvePoint | None, str]]:
    """``fluid.at(key, T)`` for every request: (CurvePoint, "") or (None, why not); see
    :func:`evaluate_point_columns`."""
    cols = evaluate_point_columns(requests)
    return [cols.point(i) for i in range(len(requests))]


__all__ = ["CurveBudget", "CurveKey", "CurveRows", "FittedCurve", "PointColumns", "Request",
           "curve_budgets", "curves_at", "evaluate_point_columns", "evaluate_points", "grid_values",
           "grids", "linspace_rows"]
