"""Robust consensus fits run together give the numbers of each fit run alone."""

from __future__ import annotations

import numpy as np

from pipeline.checks.consensus import (poly_design, robust_fit, robust_fit_steps, robust_fits, run_steps,
                                       solve_many, wagner_design)


def _bits(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=float).view(np.int64)


def test_least_squares_of_one_shape_solved_together_equal_numpy_one_by_one():
    """Problems sharing a shape, solved in one call, give np.linalg.lstsq's coefficients and
    rank bit for bit; a rank-deficient problem among them keeps its own rank."""
    rng = np.random.default_rng(11)
    requests = [(rng.normal(size=(m, n)), rng.normal(size=m))
                for m, n in [(50, 2)] * 5 + [(135, 5)] * 4 + [(7, 3)]]
    requests[1][0][:, 1] = requests[1][0][:, 0]          # two equal columns: rank 1
    for (A, b), (coef, rank) in zip(requests, solve_many(requests)):
        ref, _, ref_rank, _ = np.linalg.lstsq(A, b, rcond=None)
        assert rank == ref_rank and np.array_equal(_bits(coef), _bits(ref))
    assert solve_many(requests)[1][1] == 1


def _group(rng, Tc: float, offset_file: bool):
    """Three files of ln p on a Clapeyron-like line; one off by ln 1000 when asked."""
    T = np.concatenate([np.linspace(0.55 * Tc, 0.98 * Tc, n) for n in (50, 45, 40)])
    files = np.repeat([0, 1, 2], [50, 45, 40])
    y = 20.0 - 5.0 * Tc / T + rng.normal(0, 1e-4, len(T))
    if offset_file:
        y[files == 2] -= np.log(1000.0)
    return T, y, files


def test_fits_run_together_equal_fits_run_alone():
    """The pooled robust fits of many groups run in lock-step (Wagner and polynomial designs,
    groups with a file off by a unit factor) equal each fit run alone, weights and
    coefficients bit for bit; the off file ends with zero weight."""
    rng = np.random.default_rng(5)
    args = []
    for i in range(12):
        Tc = 150.0 + 10 * i
        T, y, files = _group(rng, Tc, offset_file=i % 3 == 0)
        make = wagner_design(Tc) if i % 2 else poly_design(lambda t: 1.0 / t)
        args.append((T, y, files, make, poly_design(lambda t: 1.0 / t, 1), 1e-3))
    together = run_steps([robust_fit_steps(*a) for a in args])
    for i, (a, (model, w)) in enumerate(zip(args, together)):
        ref_model, ref_w = robust_fit(*a)
        assert np.array_equal(_bits(w), _bits(ref_w))
        assert np.array_equal(_bits(model.coef), _bits(ref_model.coef))
        if i % 3 == 0:
            assert np.all(w[a[2] == 2] == 0.0) and np.all(w[a[2] != 2] > 0.5)


def test_fits_as_stacked_rows_equal_fits_run_alone():
    """robust_fits (the reweighting of fits of one design shape as rows of stacked arrays) gives
    each fit's own model and weights bit for bit, a fit that cannot be made included."""
    rng = np.random.default_rng(9)
    problems = []
    for i in range(10):
        Tc = 140.0 + 13 * i
        T, y, files = _group(rng, Tc, offset_file=i % 4 == 1)
        if i == 3:
            y[::7] = np.nan                           # missing values: fewer usable rows
        problems.append((T, y, files, wagner_design(Tc) if i % 2 else poly_design(lambda t: 1.0 / t),
                         poly_design(lambda t: 1.0 / t, 1), 2e-3, None))
    T1 = np.full(6, 120.0)                            # one temperature: no fit at all
    problems.append((T1, np.linspace(1, 2, 6), np.zeros(6, dtype=int), wagner_design(150.0),
                     poly_design(lambda t: 1.0 / t, 1), 1e-3, None))
    for args, (model, w) in zip(problems, robust_fits(problems)):
        ref_model, ref_w = robust_fit(*args)
        if ref_model is None:
            assert model is None and w is None
            continue
        assert np.array_equal(_bits(w), _bits(ref_w))
        assert np.array_equal(_bits(model.coef), _bits(ref_model.coef))
        assert (model.T_min_K, model.T_max_K) == (ref_model.T_min_K, ref_model.T_max_K)
        T = np.linspace(model.T_min_K, model.T_max_K, 9)
        assert np.array_equal(_bits(model(T)), _bits(ref_model(T)))


def test_design_columns_are_those_numpy_builds():
    """The polynomial design's columns equal np.vander's (increasing powers, the running
    product) and the Wagner design's equal the column_stack of its terms, bit for bit."""
    from pipeline.checks.consensus import WAGNER_EXPONENTS, _powers

    s = np.random.default_rng(2).normal(size=37)
    for degree in (1, 2, 3):
        assert np.array_equal(_bits(_powers(s, degree)), _bits(np.vander(s, degree + 1, increasing=True)))
    T, Tc = np.linspace(90.0, 200.0, 23), 190.0
    with np.errstate(invalid="ignore"):
        tau = 1.0 - T / Tc
        expected = np.column_stack([np.ones_like(T)] + [Tc / T * tau ** e for e in WAGNER_EXPONENTS[:5]])
    got = wagner_design(Tc)(T, 5)(T)
    assert np.array_equal(np.isnan(got), np.isnan(expected))
    assert np.array_equal(_bits(np.nan_to_num(got)), _bits(np.nan_to_num(expected)))
