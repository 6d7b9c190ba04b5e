"""Fit many phase-boundary series at once: the batched path of the fit stage.

:func:`fit_curves` gives every series the :class:`~pipeline.correlations.regression.FitOutcome`
that :func:`~pipeline.correlations.regression.fit_curve` gives it alone. ``fit_curve`` stays the
reference implementation (one series, readable, the specification); this module runs the same
algorithm for all series that share their candidate forms in lockstep, so that the linear
algebra is done on stacked arrays:

* the series are concatenated into flat arrays (rows of a series are contiguous); design
  matrices, domains and fit-space values are computed once for all rows;
* every model-selection round fits each candidate form and term count to all series that
  need the round, with one batched SVD solve per *size class* (series whose current inlier
  set has the same number of points, so the stacked matrices need no padding and every
  series gets the very floating-point operations of its own solve);
* the robust starting fits of all series are solved together
  (:func:`pipeline.correlations.robust.robust_start_masks`);
* the outlier rounds evaluate the selected curves of one form and size in one call;
* only the nonlinear forms (Simon-Glatzel, Antoine) are still fitted one series at a time, by
  the same ``least_squares`` call as the reference, warm-started the same way.

What else stays per series is cheap: screening, the slope that carries u(T) into the second
stage and the outcome record, through the reference module's functions or its very
expressions, so the numbers written are those of ``fit_curve``
(``tests/fitting/test_batched_fit.py`` compares both paths on the demo, the real-data corpus
and a synthetic store; ``tests/correlations/test_batched.py`` every branch).

Pure numpy/scipy, no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from pipeline.correlations.base import CorrelationForm, LinearForm, get_form
from pipeline.correlations.outcomes import FitOutcome, PointFlag, SkipCode
from pipeline.correlations.regression import (CRITERIA, MAX_OUTLIER_FRACTION, MAX_OUTLIER_ROUNDS,
                                              _Best, _Candidate, _no_model,
                                              _solve_nonlinear, fitted_outcome)
from pipeline.correlations.screening import (as_arrays, crossing_reason, monotonic_reason,
                                             screen_values, skipped_outcome)
from pipeline.correlations.robust import robust_start_masks
from pipeline.errors import FitError

# per-point flags as small codes (0: used); names as FitOutcome.point_flags gives them
_FLAG_NAMES = np.array(["", PointFlag.ABOVE_CRITICAL.value, PointFlag.ABOVE_TRIPLE.value,
                        PointFlag.OUTSIDE_DOMAIN.value, PointFlag.NON_FINITE_SLOPE.value,
                        PointFlag.OUTLIER.value], dtype=object)
_KIND = {"critical": 1, "triple": 2}
_OUTSIDE, _NON_FINITE_SLOPE, _OUTLIER = 3, 4, 5


@dataclass(frozen=True)
class Series:
    """One phase-boundary series: the arguments of ``fit_curve`` that differ per series.

    ``T`` [K], ``y`` [Pa or kg/m^3], ``u_y`` [as y], ``u_T`` [K] (array, scalar or None),
    ``ref`` (``T_ref_K`` [K], optionally ``exponents``), ``trusted`` (bool per point or None).
    """

    T: np.ndarray
    y: np.ndarray
    u_y: np.ndarray | float
    u_T: np.ndarray | float | None
    ref: dict
    trusted: np.ndarray | None = None


@dataclass
class _Live:
    """A screened series in flight: its rows in the flat arrays and its fitting state."""

    index: int
    T: np.ndarray
    y: np.ndarray
    u_y: np.ndarray
    u_T: np.ndarray
    ref: dict
    trusted: np.ndarray | None
    lo: int = 0
    hi: int = 0
    codes: np.ndarray | None = None               # point flags as codes of _FLAG_NAMES
    base: np.ndarray | None = None
    mask: np.ndarray | None = None
    best: _Best | None = None
    table: tuple = ([], 0)                         # (models of its last select, its row)
    errors: list = field(default_factory=list)
    warm: dict = field(default_factory=dict)      # candidate index -> {n_terms: params}


def fit_curves(candidate_forms: str | Sequence[str], series: Sequence[Series], *,
               outlier_z: float = 4.0, min_points: int = 5, criterion: str = "bic",
               n_terms: int | None = None, above_reference: str = "skip") -> list[FitOutcome]:
    """Fit many series with the same candidate forms; one outcome per series, in order.

    Parameters
    ----------
    candidate_forms : str or sequence of str
        Registry names of the forms to try, as for ``fit_curve``.
    series : sequence of Series
        The data sets.
    outlier_z, min_points, criterion, n_terms, above_reference
        As for :func:`pipeline.correlations.regression.fit_curve`.

    Returns
    -------
    list of FitOutcome
        ``outcomes[i]`` is what ``fit_curve(candidate_forms, s.T, s.y, s.u_y, s.u_T, s.ref,
        trusted=s.trusted, ...)`` returns for ``s = series[i]``.
    """
    names = [candidate_forms] if isinstance(candidate_forms, str) else list(candidate_forms)
    forms = [get_form(name) for name in names]
    CRITERIA[criterion]  # noqa: B018 - an unknown criterion is a KeyError, as in fit_curve
    if above_reference not in ("skip", "exclude"):
        raise KeyError(f"above_reference must be 'skip' or 'exclude', not {above_reference!r}")
    settings = dict(outlier_z=outlier_z, min_points=min_points, criterion=criterion,
                    n_terms=n_terms, above_reference=above_reference)
    outcomes: list[FitOutcome | None] = [None] * len(series)
    batches: dict[tuple, list[_Live]] = {}
    for i, s in enumerate(series):
        live = _screen(forms, i, s, criterion)
        if isinstance(live, FitOutcome):
            outcomes[i] = live
            continue
        key = tuple(f.exponents(live.ref) for f in forms)
        batches.setdefault(key, []).append(live)
    for exps, members in batches.items():
        for live, outcome in _Batch(forms, exps, members, **settings).run():
            outcomes[live.index] = outcome
    return outcomes


def _screen(forms, index: int, s: Series, criterion: str) -> _Live | FitOutcome:
    """The checks of ``fit_curve`` that need no candidate: shapes and values."""
    try:
        T, y, u_y, u_T = as_arrays(s.T, s.y, s.u_y, s.u_T)
    except ValueError as exc:
        return skipped_outcome(np.size(s.T), SkipCode.BAD_SHAPE, f"inputs do not match in shape: {exc}")
    n = T.size
    if y.shape != T.shape or T.ndim != 1:
        return skipped_outcome(n, SkipCode.BAD_SHAPE, f"T has shape {T.shape}, value {y.shape}; "
                     "both must be one-dimensional of equal length", criterion=criterion)
    screened = screen_values(forms, T, y, u_y, u_T, s.ref)
    if screened:
        return skipped_outcome(n, *screened, criterion=criterion)
    trusted = None if s.trusted is None else np.asarray(s.trusted, dtype=bool)
    return _Live(index, T, y, u_y, u_T, s.ref, trusted)


class _Batch:
    """Series that share forms and exponents, fitted in lockstep."""

    def __init__(self, forms, exps, members: list[_Live], *, outlier_z, min_points, criterion,
                 n_terms, above_reference):
        self.forms, self.exps, self.members = forms, exps, members
        self.outlier_z, self.min_points, self.criterion = outlier_z, min_points, criterion
        self.n_terms, self.above_reference = n_terms, above_reference
        sizes = np.array([m.T.size for m in members])
        self.offsets = np.concatenate([[0], np.cumsum(sizes)])
        for m, lo, hi in zip(members, self.offsets[:-1], self.offsets[1:]):
            m.lo, m.hi = int(lo), int(hi)
        self.T = np.concatenate([m.T for m in members])
        self.y = np.concatenate([m.y for m in members])
        self.T_ref = np.array([float(m.ref.get("T_ref_K", math.nan)) for m in members])
        self.T_ref_rows = np.repeat(self.T_ref, sizes)
        self.designs = [self._design(f, e) if f.linear else None for f, e in zip(forms, exps)]
        self.robust_solutions = None    # the last robust starts' coefficients: the next ones'
        #                                 starting point (stage 2 changes only uncertainties)
        self.links: dict = {}                    # link -> its first form (as the reference)
        for f in forms:
            self.links.setdefault(f.link, f)

    # --- set-up ----------------------------------------------------------------------------------
    def _design(self, form: LinearForm, exps) -> np.ndarray:
        """Design matrix of every row at once (``form.design`` of each series, stacked)."""
        phi = form.basis(self.T[None, :], self.T_ref_rows[None, :], exps)[0]
        return np.concatenate([np.ones((self.T.size, 1)), phi], axis=1)

    def _domain(self, ci: int) -> np.ndarray:
        """Rows inside the domain of candidate ``ci`` (``form.domain`` of each series)."""
        form, exps, X = self.forms[ci], self.exps[ci], self.designs[ci]
        if type(form).domain not in (CorrelationForm.domain, LinearForm.domain):
            return np.concatenate([form.domain(m.T, float(self.T_ref[j]), exps)
                                   for j, m in enumerate(self.members)])
        T = self.T
        ok = np.isfinite(T) & (T > 0.0)
        if form.bounded_by_reference:
            ok &= T <= self.T_ref_rows
        if X is not None:
            ok &= np.all(np.isfinite(X[:, 1:]), axis=-1)
        return ok

    def _fit_space(self, u_rows: np.ndarray) -> tuple[dict, dict]:
        """Fit-space values and uncertainties by link, for all rows (``_fit_space_arrays``)."""
        z, u = {}, {}
        for link, form in self.links.items():
            with np.errstate(all="ignore"):
                z[link] = form.to_fit_space(self.y)
                u[link] = u_rows * np.abs(form.fit_space_slope(self.y))
        return z, u

    def _cand(self, ci: int, m: _Live) -> _Candidate:
        return _Candidate(self.forms[ci], self.exps[ci], float(m.ref.get("T_ref_K", math.nan)))

    # --- the algorithm of fit_curve, in lockstep -------------------------------------------------
    def run(self):
        codes = np.zeros(self.T.size, dtype=np.int8)
        above = self.T > self.T_ref_rows
        for ci, form in enumerate(self.forms):
            new = (codes == 0) & ~self._domain(ci)
            codes[new & above] = _KIND.get(form.reference_point, _OUTSIDE)
            codes[new & ~above] = _OUTSIDE
        done, live = [], []
        for m in self.members:
            m.codes = codes[m.lo:m.hi].copy()
            n = m.T.size
            if np.any((m.codes == 1) | (m.codes == 2)):
                crossing = crossing_reason(_flag_list(m.codes), m.T,
                                            float(m.ref.get("T_ref_K", math.nan)))
                if crossing and self.above_reference == "skip":
                    done.append((m, skipped_outcome(n, SkipCode.CROSSES_REFERENCE, crossing,
                                          _flag_list(m.codes), self.criterion)))
                    continue
            m.base = m.codes == 0
            if m.base.sum() < self.min_points:
                done.append((m, skipped_outcome(n, SkipCode.TOO_FEW_POINTS, f"too few points: "
                                      f"{int(m.base.sum())} usable of {n}, at least "
                                      f"{self.min_points} needed", _flag_list(m.codes),
                                      self.criterion)))
                continue
            live.append(m)
        z1, u1 = self._fit_space(np.concatenate([m.u_y for m in self.members]))
        starts = self._robust_starts(live, z1, u1)
        if any(f.increasing for f in self.forms):
            kept = []
            for m, start in zip(live, starts):
                reason = monotonic_reason(m.T[start], m.y[start], m.u_y[start], m.u_T[start])
                if reason:
                    done.append((m, skipped_outcome(m.T.size, SkipCode.NON_MONOTONIC, reason,
                                          _flag_list(m.codes), self.criterion)))
                else:
                    m.mask = start
                    kept.append(m)
            live = kept
        else:
            for m, start in zip(live, starts):
                m.mask = start
        # stage 1: u_y only, to get the slope
        self._robust_select(live, z1, u1)
        stage2, final = [], []
        for m in live:
            if m.best is None:
                done.append((m, self._no_model(m)))
            elif np.any(m.u_T > 0):
                stage2.append(m)
            else:
                final.append((m, z1, u1))
        # stage 2: u_eff with u_T carried through the slope of the stage-1 curve
        if stage2:
            u_rows = np.concatenate([m.u_y for m in self.members])
            for m in stage2:
                u_eff = np.hypot(m.u_y, m.best.kernel("derivative", m.T) * m.u_T)
                bad = m.base & ~np.isfinite(u_eff)
                m.codes[bad] = _NON_FINITE_SLOPE
                m.base = m.base & ~bad
                u_rows[m.lo:m.hi] = np.where(np.isfinite(u_eff), u_eff, np.inf)
            z2, u2 = self._fit_space(u_rows)
            for m, start in zip(stage2, self._robust_starts(stage2, z2, u2)):
                m.mask = start
            self._robust_select(stage2, z2, u2)
            for m in stage2:
                if m.best is None:
                    done.append((m, self._no_model(m)))
                else:
                    final.append((m, z2, u2))
        for m, z, u in final:
            done.append((m, _outcome(m, {k: v[m.lo:m.hi] for k, v in z.items()},
                                     {k: v[m.lo:m.hi] for k, v in u.items()}, self.criterion)))
        return done

    def _no_model(self, m: _Live) -> FitOutcome:
        return _no_model(m.T.size, m.errors, m.base, _flag_list(m.codes), self.criterion)

    def _robust_starts(self, live: list[_Live], z: dict, u: dict) -> list[np.ndarray]:
        """The robust starting inlier set of each series in ``live``, all solved at once."""
        base = np.zeros(self.T.size, dtype=bool)
        fit_on = np.zeros(self.T.size, dtype=bool)
        for m in live:
            base[m.lo:m.hi] = m.base
            on = m.base
            if m.trusted is not None and int((m.base & m.trusted).sum()) >= 4:
                on = m.base & m.trusted
            fit_on[m.lo:m.hi] = on
        cands = [(X, z[f.link], u[f.link]) for f, X in zip(self.forms, self.designs)
                 if f.linear]
        mask, self.robust_solutions = robust_start_masks(
            cands, base, fit_on, self.offsets, self.outlier_z, self.robust_solutions)
        return [mask[m.lo:m.hi] for m in live]

    def _robust_select(self, live: list[_Live], z: dict, u: dict) -> None:
        """Model selection and outlier rounds until each series' inlier set is stable."""
        self._select(live, z, u)
        pending = [m for m in live if m.best is not None]
        for _ in range(MAX_OUTLIER_ROUNDS):
            again = []
            for m, zr in zip(pending, self._abs_z(pending, z, u)):
                new = m.base & (zr <= self.outlier_z)
                cap = int(MAX_OUTLIER_FRACTION * m.base.sum())
                if (m.base & ~new).sum() > cap:  # model misfit, not outliers: only the worst
                    worst = np.argsort(np.where(m.base, -zr, np.inf))[:cap]
                    new = m.base.copy()
                    new[worst] = False
                if np.array_equal(new, m.mask) or new.sum() < self.min_points:
                    continue
                m.mask = new
                again.append(m)
            if not again:
                break
            self._select(again, z, u)
            pending = [m for m in again if m.best is not None]

    def _abs_z(self, live: list[_Live], z: dict, u: dict) -> list[np.ndarray]:
        """|z| of every point of each series against its current best curve; the curves of
        one form and size are evaluated in one call (a row per point)."""
        out: list = [None] * len(live)
        by_model: dict[tuple, list[int]] = {}
        for i, m in enumerate(live):
            by_model.setdefault((self.forms.index(m.best.cand.form), m.best.n_terms), []
                                ).append(i)
        for (ci, nt), idx in by_model.items():
            form, best = self.forms[ci], live[idx[0]].best
            sizes = [live[i].hi - live[i].lo for i in idx]
            rows = np.concatenate([np.arange(live[i].lo, live[i].hi) for i in idx])
            P = np.repeat(np.array([live[i].best.params for i in idx]), sizes, axis=0)
            with np.errstate(all="ignore"):
                fitted = form.evaluate(self.T[rows][:, None], P, self.T_ref_rows[rows][:, None],
                                       best.exps)[:, 0]
                zr = np.abs((z[form.link][rows] - form.to_fit_space(fitted)) / u[form.link][rows])
            for i, part in zip(idx, np.split(zr, np.cumsum(sizes)[:-1])):
                out[i] = part
        return out

    def _select(self, live: list[_Live], z: dict, u: dict) -> None:
        """Fit every candidate form and size on each series' mask; keep the best (as
        ``_select`` of the reference), one batched solve per form, size and point count."""
        classes: dict[int, list[_Live]] = {}
        for m in live:
            classes.setdefault(int(m.mask.sum()), []).append(m)
        for n, members in classes.items():
            rows = np.array([np.flatnonzero(m.mask) + m.lo for m in members]).reshape(
                len(members), n)
            self._select_class(members, rows, n, z, u)

    def _select_class(self, members, rows, n, z, u) -> None:
        G = len(members)
        has = np.zeros(G, dtype=bool)
        best_crit = np.full(G, np.nan)
        best_at = [None] * G
        models = []                      # (name, k, crit, ok) of every model tried, in order
        for m in members:
            m.errors = []
        for ci, form in enumerate(self.forms):
            zc, uc = z[form.link][rows], u[form.link][rows]
            X = self.designs[ci][rows] if form.linear else None
            for nt in _sizes(form, self.exps[ci], self.n_terms):
                k = form.n_params(nt)
                if k > n - 2:
                    continue
                if form.linear:
                    ok, chi2, found = self._fit_linear(form, X[:, :, :nt + 1], zc, uc, members)
                else:
                    ok, chi2, found = self._fit_nonlinear(ci, nt, rows, zc, uc, members)
                crit = np.asarray(CRITERIA[self.criterion](chi2, k, n), dtype=float)
                better = ok & (~has | (crit < best_crit))
                models.append((form.name, k, crit, ok))
                for g in np.flatnonzero(better):
                    best_at[g] = (ci, nt, found, g)
                best_crit = np.where(better, crit, best_crit)
                has |= ok
        for g, m in enumerate(members):
            m.table = (models, g)
            m.best = None if best_at[g] is None else self._best(m, *best_at[g], best_crit[g], n)

    def _fit_linear(self, form, X, zc, uc, members):
        beta, factors, rank = _solve_stack(X, zc, 1.0 / uc)
        ok = rank >= X.shape[2]
        for g in np.flatnonzero(~ok):
            members[g].errors.append(f"{form.name}: design matrix is singular (rank "
                                     f"{int(rank[g])} < {X.shape[2]} parameters)")
        fitted = (X @ beta[:, :, None])[:, :, 0]
        chi2 = np.sum(((zc - fitted) / uc) ** 2, axis=1)
        return ok, chi2, ("linear", beta, factors, chi2)

    def _fit_nonlinear(self, ci, nt, rows, zc, uc, members):
        form, exps = self.forms[ci], self.exps[ci]
        G = len(members)
        ok, chi2 = np.zeros(G, dtype=bool), np.full(G, np.nan)
        results = [None] * G
        for g, m in enumerate(members):
            warm = m.warm.setdefault(ci, {})
            try:
                params, cov, c2, _ = _solve_nonlinear(form, self.T[rows[g]], zc[g], uc[g],
                                                      float(m.ref.get("T_ref_K", math.nan)),
                                                      exps, warm.get(nt))
            except FitError as exc:
                m.errors.append(str(exc))
                continue
            warm[nt] = params
            ok[g], chi2[g], results[g] = True, c2, (params, cov, c2)
        return ok, chi2, ("nonlinear", results)

    def _best(self, m: _Live, ci: int, nt: int, found, g: int, crit: float, n: int) -> _Best:
        form = self.forms[ci]
        if found[0] == "linear":
            beta = found[1][g]
            cov_beta = _covariance(*(f[g] for f in found[2]))
            params = form.params_from_beta(beta)
            jac = form.dparams_dbeta(beta)
            params_cov = jac @ cov_beta @ jac.T
            chi2 = float(found[3][g])
        else:
            params, params_cov, chi2 = found[1][g]
        return _Best(self._cand(ci, m), nt, params, params_cov, chi2, n, float(crit))


def fit_batches(calls: list[tuple]) -> list[list[FitOutcome]]:
    """:func:`fit_batch` of each call: the share of a worker process."""
    return [fit_batch(c) for c in calls]


def _table(models: list, g: int) -> tuple:
    """The models tried for member ``g`` of a size class: (form, parameters, criterion)."""
    return tuple((name, k, float(crit[g])) for name, k, crit, ok in models if ok[g])


def _flag_list(codes: np.ndarray) -> list[str]:
    return _FLAG_NAMES[codes].tolist()


def _outcome(m: _Live, zl: dict, ul: dict, criterion: str) -> FitOutcome:
    """The outcome record of a fitted series: the reference's record
    (:func:`~pipeline.correlations.regression.fitted_outcome`) with the point flags handled
    as codes."""
    link = m.best.cand.form.link
    outlier = (m.codes == 0) & ~m.mask
    codes = np.where(outlier, _OUTLIER, m.codes)
    return fitted_outcome(m.best, m.mask, m.T, zl[link], ul[link], outlier,
                          int(np.count_nonzero(codes)), tuple(_flag_list(codes)),
                          _table(*m.table), criterion)


def fit_batch(call: tuple) -> list[FitOutcome]:
    """:func:`fit_curves` on ``(forms, series, kwargs)``: a module-level function of this
    light module, so that worker processes import only the correlations package."""
    forms, series, kwargs = call
    return fit_curves(list(forms), series, **kwargs)


def _sizes(form, exps, n_terms) -> list[int]:
    """Term counts tried for a form (``_Candidate.sizes`` of the reference)."""
    if not form.linear:
        return [len(exps)]
    if n_terms is not None:
        return [n_terms] if n_terms <= len(exps) else []
    return list(range(form.min_terms, len(exps) + 1))


def _solve_stack(X: np.ndarray, z: np.ndarray, w: np.ndarray):
    """``weighted_linear_solve`` of stacked problems X (G, n, p): beta (NaN where the rank is
    short), the factors ``(Vt, s, norms)`` its covariance is made from (:func:`_covariance`,
    for the selected models only) and the numerical rank."""
    G, _, p = X.shape
    A = X * w[:, :, None]
    norms = np.sqrt(np.add.reduce(A * A, axis=1))
    norms[(norms == 0.0) | ~np.isfinite(norms)] = 1.0
    try:
        U, s, Vt = np.linalg.svd(A / norms[:, None, :], full_matrices=False)
    except np.linalg.LinAlgError:
        if G == 1:
            raise               # as weighted_linear_solve: the SVD did not converge
        parts = [_solve_stack(X[g:g + 1], z[g:g + 1], w[g:g + 1]) for g in range(G)]
        return (np.concatenate([q[0] for q in parts]),
                tuple(np.concatenate([q[1][i] for q in parts]) for i in range(3)),
                np.concatenate([q[2] for q in parts]))
    rank = np.where(s[:, 0] > 0, np.sum(s > 1e-13 * s[:, :1], axis=1), 0)
    Utz = (U.transpose(0, 2, 1) @ (z * w)[:, :, None])[:, :, 0]
    beta = (Vt.transpose(0, 2, 1) @ (Utz / s)[:, :, None])[:, :, 0] / norms
    beta[rank < p] = np.nan
    return beta, (Vt, s, norms), rank


def _covariance(Vt: np.ndarray, s: np.ndarray, norms: np.ndarray) -> np.ndarray:
    """(X^T W X)^-1 of one solve from its factors, by the expression of
    ``weighted_linear_solve``."""
    return ((Vt.T / s**2) @ Vt) / np.outer(norms, norms)
