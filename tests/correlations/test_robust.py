"""Batched robust starts: soft-L1 minima of stacked problems, inlier sets as the reference."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import least_squares

from pipeline.correlations import reference_curve
from pipeline.correlations.fitting import (_fit_space_arrays, _make_candidates, _robust_start,
                                           soft_l1_linear)
from pipeline.correlations.base import get_form
from pipeline.correlations.robust import robust_start_masks, soft_l1_batch


def loss(A, b, z):
    """The soft-L1 loss sum sqrt(1 + r^2) of a linear model."""
    r = A @ b - z
    return np.sqrt(1.0 + r * r).sum()


def gradient(A, b, z):
    """Its gradient A^T r / sqrt(1 + r^2); zero at the minimum."""
    r = A @ b - z
    return A.T @ (r / np.sqrt(1.0 + r * r))


def contaminated(rng, n=120, k=4, n_bad=25):
    """A polynomial trend in normalised units with a block of gross outliers (test data)."""
    x = np.sort(rng.uniform(-1, 1, n))
    A = np.vander(x, k, increasing=True)
    z = A @ rng.normal(0, 50, k) + rng.standard_normal(n)
    z[rng.choice(n, n_bad, replace=False)] += rng.uniform(50, 500, n_bad)
    return A, z


def test_batched_newton_reaches_the_soft_l1_minimum_of_every_problem():
    """Twenty contaminated problems solved together: each at its minimum (gradient at rounding
    level) and equal to scipy least_squares with loss soft_l1, f_scale 1, run to tolerance
    1e-15 (the estimator scipy documents)."""
    rng = np.random.default_rng(1)
    problems = [contaminated(rng) for _ in range(20)]
    b, steps = soft_l1_batch(np.stack([p[0] for p in problems]),
                             np.stack([p[1] for p in problems]))
    assert steps.max() <= 20
    for (A, z), bi in zip(problems, b):
        ref = least_squares(lambda c: A @ c - z, np.zeros(A.shape[1]), loss="soft_l1",
                            f_scale=1.0, xtol=1e-15, ftol=1e-15, gtol=1e-15).x
        assert np.linalg.norm(gradient(A, bi, z)) < 1e-9 * np.linalg.norm(A) * np.sqrt(len(z))
        np.testing.assert_allclose(A @ bi, A @ ref, rtol=0, atol=1e-6)


def test_zero_rows_padding_a_problem_do_not_move_its_minimum():
    """Rows of zeros (with target 0), as shorter problems are padded in a batch, change nothing."""
    rng = np.random.default_rng(2)
    A, z = contaminated(rng, n=50)
    Ap = np.vstack([A, np.zeros((14, A.shape[1]))])
    zp = np.r_[z, np.zeros(14)]
    b1, _ = soft_l1_batch(A[None], z[None])
    b2, _ = soft_l1_batch(Ap[None], zp[None])
    np.testing.assert_allclose(A @ b2[0], A @ b1[0], rtol=1e-12, atol=1e-9)


def test_a_rank_deficient_design_still_reaches_the_minimum_residuals():
    """A repeated column (collinear design): the coefficients are not unique, the residuals
    at the minimum are, and the solver finds them (pseudo-inverse steps)."""
    rng = np.random.default_rng(3)
    A, z = contaminated(rng, k=3)
    Ad = np.column_stack([A, A[:, 1]])
    b, _ = soft_l1_batch(Ad[None], z[None])
    b_ref, _ = soft_l1_batch(A[None], z[None])
    assert np.all(np.isfinite(b))
    np.testing.assert_allclose(Ad @ b[0], A @ b_ref[0], rtol=0, atol=1e-6)


def test_reweighting_can_stop_short_of_the_minimum_newton_does_not():
    """A straight line fitted to a cubic far beyond the noise (every residual in the linear
    regime of the loss): iteratively reweighted least squares (fitting.soft_l1_linear) stops
    on a small step with a higher loss and a gradient far from zero; the Newton solver
    reaches the minimum. This is why the batched start solves the problem rather than
    repeating the reweighting (the inlier sets agree on all data sets tested)."""
    x = np.linspace(0.0, 1.0, 200)
    A = np.column_stack([np.ones_like(x), x])
    z = 1e4 * x**3
    b_irls = soft_l1_linear(A, z, np.linalg.lstsq(A, z, rcond=None)[0])
    b_newton = soft_l1_batch(A[None], z[None])[0][0]
    assert loss(A, b_newton, z) < loss(A, b_irls, z) - 0.01
    assert np.linalg.norm(gradient(A, b_newton, z)) < 1e-9
    assert np.linalg.norm(gradient(A, b_irls, z)) > 1e-3


def test_a_non_finite_problem_gives_nan_not_an_error():
    """A problem with a NaN in its design is returned as NaN; its neighbours are solved."""
    rng = np.random.default_rng(4)
    A, z = contaminated(rng)
    bad = A.copy()
    bad[3, 1] = np.nan
    b, _ = soft_l1_batch(np.stack([bad, A]), np.stack([z, z]))
    assert np.all(np.isnan(b[0])) and np.all(np.isfinite(b[1]))


def start_inputs(T, y, u, T_ref, forms, trusted=None):
    """The arguments of the reference _robust_start for one series."""
    cands = _make_candidates([get_form(f) for f in forms], T, {"T_ref_K": T_ref})
    zs, us = _fit_space_arrays(cands, y, u)
    base = np.ones(T.size, dtype=bool)
    return cands, zs, us, base, trusted


@pytest.mark.parametrize("wrong_unit", [False, True], ids=["clean", "kPa-as-Pa"])
def test_starting_masks_equal_the_per_series_reference(wrong_unit):
    """Argon vapour pressures (Tegeler et al. 1999 ancillary), clean or with a lab file 1000x
    low beside them, and a second clean series in the same batch: the batched inlier sets
    equal those of fitting._robust_start, series by series."""
    rng = np.random.default_rng(6)
    curve = reference_curve("argon", "liquid-vapour", "pressure")
    forms = ["wagner-3-6", "wagner-2.5-5", "wagner-pruss-6"]
    series = []
    for n, n_lab in ((40, 20 if wrong_unit else 0), (60, 0)):
        T = np.r_[np.linspace(84.0, 148.0, n), np.linspace(85.5, 140.5, n_lab)]
        y = curve.value(T) * (1 + 5e-4 * rng.standard_normal(T.size))
        y[n:] *= 1e-3
        u = 5e-4 * np.abs(y)
        trusted = np.r_[np.ones(n, bool), np.zeros(n_lab, bool)]
        series.append((T, y, u, trusted))
    ref_masks, X, zl, ul, base, on = [], [], [], [], [], []
    for T, y, u, trusted in series:
        cands, zs, us, b, _ = start_inputs(T, y, u, 150.687, forms)
        ref_masks.append(_robust_start(cands, T, zs, us, b, 4.0, trusted))
        X.append([c.X_full for c in cands])
        zl.append([zs[c.form.link] for c in cands])
        ul.append([us[c.form.link] for c in cands])
        base.append(b)
        on.append(b & trusted if (b & trusted).sum() >= 4 else b)
    cat = [(np.concatenate([x[i] for x in X]), np.concatenate([z[i] for z in zl]),
            np.concatenate([v[i] for v in ul])) for i in range(len(forms))]
    offsets = np.cumsum([0] + [s[0].size for s in series])
    got, _ = robust_start_masks(cat, np.concatenate(base), np.concatenate(on), offsets, 4.0)
    for j, want in enumerate(ref_masks):
        np.testing.assert_array_equal(got[offsets[j]:offsets[j + 1]], want)
    if wrong_unit:
        assert not got[40:60].any() and got[:40].all()
