"""Robust consensus curves of a group of files, for comparing one file with the others.

A consensus is a linear model y(T) = D(T) c (y = ln p for vapour curves, p for steep curves)
fitted with Tukey-biweight reweighting (J. W. Tukey's bisquare; A. E. Beaton and J. W. Tukey,
Technometrics 16, 147 (1974), from memory), started from the least median of residuals over
straight lines through single files, so a minority of files off by a unit factor ends with zero
weight. Designs:

- Wagner-type basis ln p = c0 + (Tc/T) Σ c_i τ^t_i, τ = 1 − T/Tc, for vapour pressures when Tc
  is known (W. Wagner, Cryogenics 13, 470 (1973)): near-critical curvature needs it;
- a polynomial in x(T) (1/T for sublimation, T for melting curves) otherwise.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Generator, Sequence

import numpy as np

from pipeline.checks.stats import median

try:  # the kernel np.linalg.lstsq calls (a generalised ufunc: stacks of problems in one call)
    from numpy.linalg._umath_linalg import lstsq as _KERNEL
except ImportError:  # pragma: no cover - another numpy: one problem at a time
    _KERNEL = None

TUKEY_C = 4.685
ITERATIONS = 6
WAGNER_EXPONENTS = (1.0, 1.5, 2.5, 5.0, 2.0, 3.0, 4.0)   # the first four: Wagner's 2.5-5 form
MAX_POLY_DEGREE = 3

Design = Callable[[np.ndarray], np.ndarray]          # T -> design matrix (n, k + 1)
DesignMaker = Callable[[np.ndarray, int], Design]     # (T of the fit, k) -> design


def wagner_design(Tc: float) -> DesignMaker:
    """Designs [1, (Tc/T) τ^t_1, ..., (Tc/T) τ^t_k]; NaN above Tc."""
    def make(_T: np.ndarray, k: int) -> Design:
        exps = WAGNER_EXPONENTS[:max(1, min(k, len(WAGNER_EXPONENTS)))]

        def design(T: np.ndarray) -> np.ndarray:
            out = np.empty((len(T), len(exps) + 1))   # the columns np.column_stack would join
            out[:, 0] = 1.0
            with np.errstate(invalid="ignore", divide="ignore"):
                tau = 1.0 - T / Tc
                for j, e in enumerate(exps, start=1):
                    out[:, j] = Tc / T * tau ** e
            return out
        return design
    return make


def poly_design(x: Callable[[np.ndarray], np.ndarray], max_degree: int = MAX_POLY_DEGREE) -> DesignMaker:
    """Designs [1, s, ..., s^k] with s = x(T) scaled to the fitted points' range."""
    def make(T: np.ndarray, k: int) -> Design:
        xs = x(T)
        # np.mean and np.ptp, without their generic wrappers: the same sum, count and extremes
        centre, scale = float(xs.sum() / xs.size), float(xs.max() - xs.min()) or 1.0
        degree = max(1, min(k, max_degree))
        return lambda T: _powers((x(T) - centre) / scale, degree)
    return make


def _powers(s: np.ndarray, degree: int) -> np.ndarray:
    """``np.vander(s, degree + 1, increasing=True)``: columns 1, s, s*s, ... (each the last
    times s, as vander's running product makes them)."""
    out = np.empty((len(s), degree + 1))
    out[:, 0] = 1.0
    out[:, 1] = s
    for j in range(2, degree + 1):
        np.multiply(out[:, j - 1], s, out=out[:, j])
    return out


@dataclass(frozen=True)
class Model:
    """A fitted consensus y(T), NaN outside the temperatures of its inlier points."""

    design: Design
    coef: np.ndarray
    T_min_K: float
    T_max_K: float

    def __call__(self, T) -> np.ndarray:
        T = np.asarray(T, dtype=float)
        with np.errstate(invalid="ignore", over="ignore"):
            y = self.design(T) @ self.coef
        return np.where((T >= self.T_min_K) & (T <= self.T_max_K), y, np.nan)

    def raw(self, T: np.ndarray) -> np.ndarray:
        """y(T) without the range mask (used while fitting)."""
        with np.errstate(invalid="ignore", over="ignore"):
            return self.design(T) @ self.coef


def _terms(T: np.ndarray) -> int:
    """Sum terms a fit to these temperatures can carry: about one per three distinct points."""
    distinct = len(np.unique(T))
    return max(1, min(distinct // 3, distinct - 2))


def _two_distinct(T: np.ndarray) -> bool:
    """True when the (finite) temperatures ``T`` hold at least two distinct values."""
    return T.size > 0 and T.min() != T.max()


# -- least squares, one problem or many at once ---------------------------------------------------
Request = tuple[np.ndarray, np.ndarray]     # (A (m, n), b (m,)): least squares A c = b
Steps = Generator[list[Request], list[tuple[np.ndarray, int]], Any]


def _lstsq(A: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, int]:
    coef, _, rank, _ = np.linalg.lstsq(A, b, rcond=None)
    return coef, int(rank)


def solve_many(requests: Sequence[Request]) -> list[tuple[np.ndarray, int]]:
    """(coefficients, rank) of ``np.linalg.lstsq(A, b, rcond=None)`` for every request.

    Requests whose A have one shape go to numpy's least-squares kernel in one call (the
    generalised ufunc ``np.linalg.lstsq`` itself calls: one LAPACK ``gelsd`` per matrix, so
    the same numbers); any other, or all of a shape whose call fails, one by one.
    """
    out: list[tuple[np.ndarray, int] | None] = [None] * len(requests)
    shapes: dict[tuple[int, int], list[int]] = {}
    for i, (A, _) in enumerate(requests):
        shapes.setdefault(A.shape, []).append(i)
    for (m, n), idx in shapes.items():
        if _KERNEL is not None and len(idx) > 1 and m > 0 and n > 0:
            A = np.stack([requests[i][0] for i in idx]).astype(float, copy=False)
            b = np.stack([requests[i][1] for i in idx]).astype(float, copy=False)[:, :, None]
            try:
                with np.errstate(invalid="raise", over="ignore", divide="ignore", under="ignore"):
                    coef, _, rank, _ = _KERNEL(A, b, np.finfo(float).eps * max(m, n),
                                               signature="ddd->ddid")
            except (FloatingPointError, ValueError, TypeError):
                pass          # one by one below: a failing problem raises as it would alone
            else:
                for j, i in enumerate(idx):
                    out[i] = (coef[j, :, 0].copy(), int(rank[j]))
                continue
        for i in idx:
            out[i] = _lstsq(*requests[i])
    return out


def run_steps(steps: Sequence[Steps]) -> list[Any]:
    """The results of step generators run in lock-step: each yields a list of least-squares
    requests and is sent their solutions; all requests of a round are solved together
    (:func:`solve_many`)."""
    results: list[Any] = [None] * len(steps)
    pending: dict[int, list[Request]] = {}

    def advance(i: int, sent) -> None:
        try:
            pending[i] = steps[i].send(sent)
        except StopIteration as done:
            results[i] = done.value

    for i in range(len(steps)):
        advance(i, None)
    while pending:
        asked = list(pending.items())
        pending = {}
        solved = solve_many([r for _, reqs in asked for r in reqs])
        k = 0
        for i, reqs in asked:
            advance(i, solved[k:k + len(reqs)])
            k += len(reqs)
    return results


def _solve(A: np.ndarray, y: np.ndarray, w: np.ndarray) -> Steps:
    """Weighted least squares on the rows with w > 0; None when they cannot fix the model."""
    m = w > 0
    if m.sum() < A.shape[1]:
        return None
    sw = np.sqrt(w[m])
    (coef, rank), = yield [(A[m] * sw[:, None], y[m] * sw)]
    return coef if rank == A.shape[1] else None


def weighted_fit(T: np.ndarray, y: np.ndarray, w: np.ndarray, make: DesignMaker,
                 k: int | None = None) -> Model | None:
    """Weighted least squares on the points with w > 0; None when too few points."""
    m = (w > 0) & np.isfinite(y) & np.isfinite(T)
    if not _two_distinct(T[m]):
        return None
    design = make(T[m], _terms(T[m]) if k is None else k)
    A = design(T[m])
    ok = np.isfinite(A).all(axis=1)
    coef = run_steps([_solve(A[ok], y[m][ok], w[m][ok])])[0]
    if coef is None:
        return None
    return Model(design, coef, float(T[m][ok].min()), float(T[m][ok].max()))


def tukey_weights(r: np.ndarray, floor: float) -> np.ndarray:
    """Bisquare weights of residuals r, scale 1.4826 MAD (at least ``floor``); 0 for NaN."""
    fin = np.isfinite(r)
    mad = 1.4826 * median(np.abs(r[fin])) if fin.any() else 0.0
    q = np.where(fin, r / (TUKEY_C * max(mad, floor)), np.inf)
    return np.where(np.abs(q) < 1.0, (1.0 - q ** 2) ** 2, 0.0)


def _start(T, y, files, line: DesignMaker, floor) -> Steps:
    """Weights from the single-file straight line with the least median residual over all points.

    ``T`` and ``y`` are finite. Each file's line is ``weighted_fit(T, y, files == f, line, 1)``
    (unit weights: the same least-squares problem, without the weighting's masks and products).
    """
    lines, asked = [], []
    for f in dict.fromkeys(files.tolist()):
        m = files == f
        Tf = T[m]
        if not _two_distinct(Tf):
            continue
        design = line(Tf, 1)
        A = design(Tf)
        yf = y[m]
        ok = np.isfinite(A).all(axis=1)
        if not ok.all():
            A, yf = A[ok], yf[ok]
        if len(A) < A.shape[1]:
            continue
        lines.append((design, A.shape[1]))
        asked.append((A, yf))
    solved = (yield asked) if asked else []
    best = None
    for (design, n_coef), (coef, rank) in zip(lines, solved):
        if rank != n_coef:
            continue
        with np.errstate(invalid="ignore", over="ignore"):
            r = design(T) @ coef - y
        d = np.abs(r)
        med = median(d[~np.isnan(d)])
        if best is None or med < best[0]:
            best = (med, r)
    return None if best is None else tukey_weights(best[1], floor)


def _prepared(T: np.ndarray, y: np.ndarray, files: np.ndarray, make: DesignMaker,
              line: DesignMaker, floor: float, start_w: np.ndarray | None) -> Steps:
    """Steps to the starting weights and the design: (design, A, y, w, usable) or None."""
    ok = np.isfinite(T) & np.isfinite(y)
    w = np.zeros(len(T))
    start = (yield from _start(T[ok], y[ok], files[ok], line, floor)) if start_w is None \
        else start_w[ok]
    if start is None:
        return None
    w[ok] = start
    if not _two_distinct(T[w > 0]):
        return None
    design = make(T[w > 0], _terms(T[w > 0]))
    with np.errstate(invalid="ignore", divide="ignore"):
        A = design(np.where(ok, T, np.nan))
    usable = ok & np.isfinite(A).all(axis=1)
    A, yy = np.where(usable[:, None], A, 0.0), np.where(usable, y, 0.0)
    return design, A, yy, np.where(usable, w, 0.0), usable


def _model(design: Design, coef: np.ndarray, T: np.ndarray, w: np.ndarray) -> Model:
    inliers = w > 0.5
    return Model(design, coef, float(T[inliers].min()), float(T[inliers].max()))


def robust_fit_steps(T: np.ndarray, y: np.ndarray, files: np.ndarray, make: DesignMaker,
                     line: DesignMaker, floor: float, start_w: np.ndarray | None = None) -> Steps:
    """:func:`robust_fit` as steps (see :func:`run_steps`): many fits run together."""
    prepared = yield from _prepared(T, y, files, make, line, floor, start_w)
    if prepared is None:
        return None, None
    design, A, yy, w, usable = prepared
    for _ in range(ITERATIONS):
        coef = yield from _solve(A, yy, w)
        if coef is None:
            return None, None
        new = np.where(usable, tukey_weights(np.where(usable, A @ coef - yy, np.nan), floor), 0.0)
        done = np.max(np.abs(new - w)) < 1e-3
        w = new
        if done:
            break
    coef = yield from _solve(A, yy, np.where(w > 0.5, w, 0.0))
    if coef is None:
        return None, None
    return _model(design, coef, T, w), w


def robust_fit(T: np.ndarray, y: np.ndarray, files: np.ndarray, make: DesignMaker,
               line: DesignMaker, floor: float, start_w: np.ndarray | None = None):
    """(Model of the inliers, final weights), or (None, None) when no fit is possible.

    The design is built once from the starting inliers; the reweighting stops when no weight
    changes by more than 1e-3. Many fits at once: :func:`robust_fits` (the same numbers).
    """
    return run_steps([robust_fit_steps(T, y, files, make, line, floor, start_w)])[0]


# -- many fits at once ----------------------------------------------------------------------------
def _row_medians(V: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """The :func:`~pipeline.checks.stats.median` of each row's valid values (NaN-free; NaN for a
    row without any): the middle of the sorted values, the middle pair summed as it sums it."""
    S = np.sort(np.where(valid, V, np.nan), axis=1)             # NaN (the invalid) last
    count = valid.sum(axis=1)
    h = count // 2
    at = np.arange(len(V))
    upper = S[at, np.minimum(h, V.shape[1] - 1)]
    lower = S[at, np.maximum(h - 1, 0)]
    out = np.where(count % 2 == 1, upper, (lower + (0.0 + upper)) / 2)
    return np.where(count > 0, out, np.nan)


def _tukey_rows(R: np.ndarray, floor: np.ndarray) -> np.ndarray:
    """:func:`tukey_weights` of each row of R (row i with ``floor[i]``)."""
    fin = np.isfinite(R)
    mad = np.where(fin.any(axis=1), 1.4826 * _row_medians(np.abs(R), fin), 0.0)
    scale = TUKEY_C * np.maximum(mad, floor)
    q = np.where(fin, R / scale[:, None], np.inf)
    return np.where(np.abs(q) < 1.0, (1.0 - q ** 2) ** 2, 0.0)


def _solve_rows(A: np.ndarray, Y: np.ndarray, W: np.ndarray) -> list[np.ndarray | None]:
    """:func:`_solve` of each row (A (P, n, k), Y and W (P, n)): rows with every weight > 0 in
    one call of the least-squares kernel, the others through :func:`solve_many`."""
    k = A.shape[2]
    out: list[np.ndarray | None] = [None] * len(A)
    full = (W > 0).all(axis=1)
    asked, rows = [], []
    for i in np.flatnonzero(~full):
        m = W[i] > 0
        if m.sum() >= k:
            sw = np.sqrt(W[i][m])
            asked.append((A[i][m] * sw[:, None], Y[i][m] * sw))
            rows.append(i)
    whole = np.flatnonzero(full) if A.shape[1] >= k else np.zeros(0, dtype=np.intp)
    if len(whole):
        SW = np.sqrt(W[whole])
        for i, (c, r) in zip(whole, _solve_stack(A[whole] * SW[:, :, None], Y[whole] * SW)):
            out[i] = c if r == k else None
    for i, (c, r) in zip(rows, solve_many(asked)):
        out[i] = c if r == k else None
    return out


def _solve_stack(A: np.ndarray, b: np.ndarray) -> list[tuple[np.ndarray, int]]:
    """:func:`solve_many` of the problems A[i] c = b[i], given stacked."""
    return solve_many([(A[i], b[i]) for i in range(len(A))]) if len(A) < 2 or _KERNEL is None \
        else _kernel_stack(A, b)


def _kernel_stack(A: np.ndarray, b: np.ndarray) -> list[tuple[np.ndarray, int]]:
    m, n = A.shape[1:]
    try:
        with np.errstate(invalid="raise", over="ignore", divide="ignore", under="ignore"):
            coef, _, rank, _ = _KERNEL(A, b[:, :, None], np.finfo(float).eps * max(m, n),
                                       signature="ddd->ddid")
    except (FloatingPointError, ValueError, TypeError):
        return [_lstsq(A[i], b[i]) for i in range(len(A))]
    return [(coef[j, :, 0].copy(), int(rank[j])) for j in range(len(A))]


def _reweight_rows(items: list[tuple]) -> list[tuple]:
    """The reweighting of :func:`robust_fit_steps` for fits whose designs share one shape,
    as rows of stacked arrays: [(Model, w) or (None, None)] in the order of ``items``
    (each ``(design, A, y, w, usable, T, floor)``)."""
    A = np.stack([it[1] for it in items])
    Y = np.stack([it[2] for it in items])
    W = np.stack([it[3] for it in items])
    U = np.stack([it[4] for it in items])
    floor = np.array([it[6] for it in items], dtype=float)
    out: list[tuple] = [(None, None)] * len(items)
    going = np.arange(len(items))
    final: list[int] = []
    for _ in range(ITERATIONS):
        if not len(going):
            break
        coefs = _solve_rows(A[going], Y[going], W[going])
        solved = np.array([c is not None for c in coefs], dtype=bool)
        going = going[solved]
        if not len(going):
            break
        C = np.stack([c for c in coefs if c is not None])
        a, u = A[going], U[going]
        with np.errstate(invalid="ignore", over="ignore"):
            R = np.where(u, (a @ C[:, :, None])[:, :, 0] - Y[going], np.nan)
        new = np.where(u, _tukey_rows(R, floor[going]), 0.0)
        done = np.max(np.abs(new - W[going]), axis=1) < 1e-3
        W[going] = new
        final.extend(going[done].tolist())
        going = going[~done]
    final.extend(going.tolist())
    final = sorted(final)
    if final:
        idx = np.array(final)
        Wf = W[idx]
        for i, coef in zip(final, _solve_rows(A[idx], Y[idx], np.where(Wf > 0.5, Wf, 0.0))):
            if coef is not None:
                out[i] = (_model(items[i][0], coef, items[i][5], W[i]), W[i].copy())
    return out


def robust_fits(problems: Sequence[tuple], designs: bool = False) -> list[tuple]:
    """``robust_fit(*p)`` of every problem ``p`` (the arguments of :func:`robust_fit`), the same
    numbers, all at once: the starting fits in lock-step (:func:`run_steps`), the reweighting
    of fits whose designs share one shape as rows of stacked arrays.

    ``designs=True`` adds to each result the design matrix at the problem's temperatures and
    the rows where it is usable (None, None when no fit was made): the model's design there,
    for evaluating the model at those temperatures without building it again."""
    prepared = run_steps([_prepared(*p) if len(p) == 7 else _prepared(*p, None) for p in problems])
    out: list[tuple] = [(None, None)] * len(problems)
    shapes: dict[tuple[int, int], list[int]] = {}
    for i, prep in enumerate(prepared):
        if prep is not None:
            shapes.setdefault(prep[1].shape, []).append(i)
    for idx in shapes.values():
        items = [prepared[i] + (problems[i][0], problems[i][5]) for i in idx]
        for i, found in zip(idx, _reweight_rows(items)):
            out[i] = found
    if designs:
        return [fit + ((prep[1], prep[4]) if prep is not None and fit[0] is not None else (None, None))
                for fit, prep in zip(out, prepared)]
    return out
