"""Curves of many fluids evaluated and inverted together, exactly as one curve at a time.

The recommendation derives a normal boiling point (the vapour-pressure curve inverted at
101 325 Pa) and an acentric factor (the curve at 0.7 Tc) for every fluid. One
:meth:`pipeline.correlations.Curve.inverse` costs 190 calls of the form's kernels (129 grid
points, then 60 bisection steps), so 1,000 fluids took seconds of Python overhead. Here the
curves of one form (same form, parameter count and exponents) go through each step together:
the same kernels on arrays with one row per curve. Every kernel is elementwise along the rows,
so each curve's numbers are those of its own call, bit for bit
(``tests/publish/test_publish_derived.py`` holds them equal on every registered form).
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from pipeline.correlations import Curve

_RANGE_RTOL = 1e-12   # as pipeline.correlations.base._RANGE_RTOL (Curve._mask)


def _groups(curves: Sequence[Curve]) -> dict[tuple, list[int]]:
    groups: dict[tuple, list[int]] = {}
    for i, c in enumerate(curves):
        groups.setdefault((c.form, len(c.params), c.ref["exponents"]), []).append(i)
    return groups


def _args(curves: Sequence[Curve]):
    P = np.array([c.params for c in curves])
    T_ref = np.array([[math.nan if c.ref["T_ref_K"] is None else c.ref["T_ref_K"]]
                      for c in curves])
    return P, T_ref


def _in_range(curves: Sequence[Curve], T: np.ndarray) -> np.ndarray:
    """Curve._mask: T inside each curve's range up to float noise."""
    lo = np.array([c.T_min_K - _RANGE_RTOL * abs(c.T_min_K) for c in curves])
    hi = np.array([c.T_max_K + _RANGE_RTOL * abs(c.T_max_K) for c in curves])
    return (T >= lo) & (T <= hi)


def at(curves: Sequence[Curve], T: np.ndarray, *, extrapolate: bool
       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Value, slope and standard uncertainty of curve i at T[i], as ``curve.value(T[i])``,
    ``curve.slope(T[i])`` and ``curve.u(T[i])`` give them (NaN outside the range unless
    ``extrapolate``; u NaN without a covariance)."""
    T = np.asarray(T, dtype=float)
    value, slope, u = (np.full(len(curves), np.nan) for _ in range(3))
    for (name, _, exps), idx in _groups(curves).items():
        group = [curves[i] for i in idx]
        form = group[0].correlation_form
        P, T_ref = _args(group)
        T2 = T[idx][:, None]
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            value[idx] = form.evaluate(T2, P, T_ref, exps)[:, 0]
            slope[idx] = form.derivative(T2, P, T_ref, exps)[:, 0]
            J = form.jacobian(T2, P, T_ref, exps)
        for j, i in enumerate(idx):
            if curves[i].covariance is not None:    # as Curve.u: sqrt(J C J^T), one curve
                Ji = J[j].reshape(-1, P.shape[1])
                var = np.einsum("mi,ij,mj->m", Ji, np.asarray(curves[i].covariance), Ji)
                u[i] = np.sqrt(np.clip(var, 0.0, None))[0]
    if not extrapolate:
        inside = _in_range(curves, T)
        value, slope, u = (np.where(inside, a, np.nan) for a in (value, slope, u))
    return value, slope, u


def inverse(curves: Sequence[Curve], y: float, *, n_grid: int = 129,
            n_iter: int = 60) -> np.ndarray:
    """Temperature [K] inside each curve's range where it takes the value ``y``: what
    ``curve.inverse(y)`` gives (grid bracketing in the form's fit space, the lowest root,
    bisection), for all curves at once; NaN where a curve has none."""
    out = np.full(len(curves), np.nan)
    for (name, _, exps), idx in _groups(curves).items():
        group = [curves[i] for i in idx]
        for c in group:
            if not (math.isfinite(c.T_min_K) and math.isfinite(c.T_max_K)):
                raise ValueError(f"{c!r}: inverse needs a finite temperature range")
        form = group[0].correlation_form
        P, T_ref = _args(group)

        def g(T2):
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                return form.to_fit_space(form.evaluate(T2, P, T_ref, exps))

        with np.errstate(invalid="ignore", divide="ignore"):
            target = form.to_fit_space(np.atleast_1d(np.asarray(y, dtype=float)))[0]
        grid = np.array([np.linspace(c.T_min_K, c.T_max_K, n_grid) for c in group])
        d = g(grid) - target
        change = (d[:, :-1] * d[:, 1:] <= 0.0) & np.isfinite(d[:, :-1]) & np.isfinite(d[:, 1:])
        has_root = change.any(axis=1)
        first = np.argmax(change, axis=1)
        rows = np.arange(len(group))
        lo, hi = grid[rows, first].copy(), grid[rows, first + 1].copy()
        d_lo = d[rows, first]
        for _ in range(n_iter):
            mid = 0.5 * (lo + hi)
            d_mid = g(mid[:, None])[:, 0] - target
            left = (d_lo * d_mid <= 0.0)
            hi = np.where(left, mid, hi)
            lo = np.where(left, lo, mid)
            d_lo = np.where(left, d_lo, d_mid)
        out[idx] = np.where(has_root, 0.5 * (lo + hi), np.nan)
    return out
