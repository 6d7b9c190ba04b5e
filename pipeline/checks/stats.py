"""Small statistics shared by the checks: combined uncertainties, z-or-tolerance decisions,
weighted means and the Birge ratio.

Decisions use a z-score where uncertainties exist and a stated tolerance where they do not
(DESIGN §5); :func:`deviation_statistic` makes that choice in one place.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pipeline.checks.points import u0


def combined_u(*terms: float | None) -> float:
    """Root sum of squares of standard uncertainties; None and NaN count as zero."""
    return math.sqrt(sum(u0(t) ** 2 for t in terms))


@dataclass(frozen=True)
class Deviation:
    """A deviation judged either as a z-score or as a relative deviation."""

    statistic: str
    measured: float
    limit: float

    @property
    def ok(self) -> bool:
        return self.measured <= self.limit


def deviation_statistic(difference: float, reference: float, u: float, *, z_max: float,
                        rel_tol: float) -> Deviation:
    """``|z|`` against ``z_max`` when ``u > 0``, else ``|relative deviation|`` against ``rel_tol``."""
    if u > 0:
        return Deviation("|z|", abs(difference) / u, z_max)
    return Deviation("|relative deviation|", abs(difference / reference), rel_tol)


#: below this many values a sum is added one by one from -0.0 (as numpy adds so few), so the
#: statistics of a few stated values are computed in plain floats, to the same numbers
_FEW = 8


def _sum(values: list[float]) -> float:
    total = -0.0
    for v in values:
        total += v
    return total


def weighted_mean(x: np.ndarray, u: np.ndarray) -> tuple[float, float]:
    """Inverse-variance weighted mean and its standard uncertainty."""
    if len(x) < _FEW:
        w = [1.0 / (ui * ui) for ui in np.asarray(u, float).tolist()]
        sw = _sum(w)
        return _sum([wi * xi for wi, xi in zip(w, np.asarray(x, float).tolist())]) / sw, \
            1.0 / math.sqrt(sw)
    w = 1.0 / np.asarray(u, float) ** 2
    return float(np.sum(w * x) / np.sum(w)), float(1.0 / math.sqrt(np.sum(w)))


def birge_ratio(x: np.ndarray, u: np.ndarray) -> float:
    """R_B = sqrt(chi2 / (n - 1)) about the weighted mean (Birge, Phys. Rev. 40, 207 (1932))."""
    mean, _ = weighted_mean(x, u)
    if len(x) < _FEW:
        t = [(xi - mean) / ui for xi, ui in zip(np.asarray(x, float).tolist(),
                                                np.asarray(u, float).tolist())]
        return math.sqrt(_sum([ti * ti for ti in t]) / (len(x) - 1))
    chi2 = float(np.sum(((x - mean) / u) ** 2))
    return math.sqrt(chi2 / (len(x) - 1))


def birge_limit(n: int, k: float) -> float:
    """Critical Birge ratio: 1 + k * sqrt(1 / (2 (n - 1))), the spread of R_B for consistent data."""
    return 1.0 + k * math.sqrt(1.0 / (2.0 * (n - 1)))


def leave_one_out_z(x: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Each value against the weighted mean of the others: (x_i - m_-i) / sqrt(u_i^2 + u(m_-i)^2)."""
    if len(x) < _FEW:
        xs, us = np.asarray(x, float).tolist(), np.asarray(u, float).tolist()
        w = [1.0 / (ui * ui) for ui in us]
        sw, swx = _sum(w), _sum([wi * xi for wi, xi in zip(w, xs)])
        out = []
        for xi, ui, wi in zip(xs, us, w):
            rest = sw - wi
            with np.errstate(divide="ignore", invalid="ignore"):   # one value: no others
                mean_rest = (np.float64(swx) - wi * xi) / rest
                out.append((xi - mean_rest) / np.sqrt(ui * ui + 1.0 / np.float64(rest)))
        return np.array(out, dtype=float)
    w = 1.0 / u ** 2
    sw, swx = w.sum(), (w * x).sum()
    w_rest = sw - w
    mean_rest = (swx - w * x) / w_rest
    return (x - mean_rest) / np.sqrt(u ** 2 + 1.0 / w_rest)


def median(x: np.ndarray) -> float:
    """The median of a 1-D float array: the number ``np.median`` gives (NaN when the array
    holds one), without its generic overhead (a partial sort of the two middle values)."""
    n = x.size
    if n == 0:
        return math.nan
    h = n // 2
    part = np.partition(x, [h - 1, h, -1] if n % 2 == 0 else [h, -1])
    if part[-1] != part[-1]:            # a NaN sorts last
        return math.nan
    # an even count: the mean of the middle pair, summed as numpy's mean sums it
    return float(part[h]) if n % 2 else float((part[h - 1] + (0.0 + part[h])) / 2)


def _pairwise_rows(v: np.ndarray) -> np.ndarray:
    """Each row's sum, added in the order numpy's pairwise summation adds a 1-D array."""
    n = v.shape[1]
    if n < 8:
        res = np.full(v.shape[0], -0.0)
        for i in range(n):
            res = res + v[:, i]
        return res
    if n <= 128:
        r = v[:, :8].copy()
        stop = n - n % 8
        for i in range(8, stop, 8):
            r += v[:, i:i + 8]
        res = ((r[:, 0] + r[:, 1]) + (r[:, 2] + r[:, 3])) + ((r[:, 4] + r[:, 5]) + (r[:, 6] + r[:, 7]))
        for i in range(stop, n):
            res = res + v[:, i]
        return res
    half = n // 2
    half -= half % 8
    return _pairwise_rows(v[:, :half]) + _pairwise_rows(v[:, half:])


def group_sums(values: np.ndarray, starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """The sum of each run ``values[starts[i]:starts[i] + lengths[i]]`` (lengths >= 1): the
    number ``np.sum`` gives for that run alone, for all runs at once (runs of one length share
    the arithmetic)."""
    out = np.zeros(len(starts))
    for n in np.unique(lengths):
        which = np.flatnonzero(lengths == n)
        out[which] = _pairwise_rows(values[starts[which][:, None] + np.arange(n)])
    return out


def group_medians(values: np.ndarray, group: np.ndarray, n_groups: int) -> np.ndarray:
    """The median of the values of each group (``group`` gives each value's group, every group
    non-empty): the number :func:`median` gives for that group alone (NaN if it holds one)."""
    order = np.lexsort((values, group))
    v = values[order]
    counts = np.bincount(group, minlength=n_groups)
    starts = np.r_[0, np.cumsum(counts)[:-1]]
    h = counts // 2
    odd = counts % 2 == 1
    upper = v[starts + h]
    lower = v[starts + np.maximum(h - 1, 0)]
    out = np.where(odd, upper, (lower + (0.0 + upper)) / 2)
    return np.where(np.isnan(v[starts + counts - 1]), np.nan, out)


def linear_fit(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares line y = a + b x: parameters (a, b) and their covariance from the scatter."""
    A = np.column_stack([np.ones_like(x), x])
    params, *_ = np.linalg.lstsq(A, y, rcond=None)
    dof = max(len(x) - 2, 1)
    s2 = float(np.sum((y - A @ params) ** 2) / dof)
    cov = s2 * np.linalg.inv(A.T @ A)
    return params, cov


def linear_fits(xs: list[np.ndarray], ys: list[np.ndarray]) -> list[tuple[np.ndarray, np.ndarray]]:
    """:func:`linear_fit` of every pair (x, y), the same numbers: pairs of one length are
    stacked and solved together (numpy's least-squares kernel, one LAPACK call per matrix;
    each row's residuals summed over that row alone; one inverse per matrix)."""
    from pipeline.checks.consensus import solve_many

    out: list[tuple[np.ndarray, np.ndarray] | None] = [None] * len(xs)
    lengths: dict[int, list[int]] = {}
    for i, x in enumerate(xs):
        lengths.setdefault(len(x), []).append(i)
    for n, idx in lengths.items():
        if len(idx) < 2 or n < 2:
            for i in idx:
                out[i] = linear_fit(xs[i], ys[i])
            continue
        X = np.stack([np.asarray(xs[i], dtype=float) for i in idx])
        Y = np.stack([np.asarray(ys[i], dtype=float) for i in idx])
        A = np.stack([np.ones_like(X), X], axis=2)
        params = np.stack([c for c, _ in solve_many([(A[j], Y[j]) for j in range(len(idx))])])
        dof = max(n - 2, 1)
        s2 = np.sum((Y - (A @ params[:, :, None])[:, :, 0]) ** 2, axis=1) / dof
        cov = s2[:, None, None] * np.linalg.inv(A.transpose(0, 2, 1) @ A)
        for j, i in enumerate(idx):
            out[i] = (params[j], cov[j])
    return out


def polyfit_lines(xs: list[np.ndarray], ys: list[np.ndarray]) -> list[np.ndarray]:
    """``np.polyfit(x, y, 1)`` of every pair, the same numbers: pairs of one length stacked
    (the same design [x, 1], column scaling and least-squares kernel, one LAPACK call per
    matrix); a pair of its own length, or whose line is rank-deficient, through np.polyfit."""
    from pipeline.checks.consensus import _KERNEL

    out: list[np.ndarray | None] = [None] * len(xs)
    lengths: dict[int, list[int]] = {}
    for i, x in enumerate(xs):
        lengths.setdefault(len(x), []).append(i)
    for n, idx in lengths.items():
        if len(idx) > 1 and n >= 2 and _KERNEL is not None:
            X = np.stack([np.asarray(xs[i], dtype=float) for i in idx])
            Y = np.stack([np.asarray(ys[i], dtype=float) for i in idx])
            lhs = np.stack([X, np.ones_like(X)], axis=2)          # np.vander(x, 2)
            scale = np.sqrt((lhs * lhs).sum(axis=1))
            lhs = lhs / scale[:, None, :]
            try:
                with np.errstate(invalid="raise", over="ignore", divide="ignore", under="ignore"):
                    c, _, rank, _ = _KERNEL(lhs, Y[:, :, None], n * np.finfo(float).eps,
                                            signature="ddd->ddid")
            except FloatingPointError:
                pass
            else:
                c = (c[:, :, 0].T / scale.T).T
                for j, i in enumerate(idx):
                    if rank[j] == 2:
                        out[i] = c[j].copy()
        for i in idx:
            if out[i] is None:
                out[i] = np.polyfit(xs[i], ys[i], 1)
    return out
