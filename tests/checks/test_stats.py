"""Small statistics of the checks: many straight lines at once give each line's own numbers."""

from __future__ import annotations

import numpy as np
import pytest

from pipeline.checks.stats import linear_fit, linear_fits


def test_lines_fitted_together_equal_each_line_alone():
    """linear_fits (lines of one length stacked) gives linear_fit's parameters and covariance
    bit for bit, for lengths shared by many lines and lengths of a single line."""
    rng = np.random.default_rng(3)
    xs, ys = [], []
    for n in [20] * 30 + [31] * 12 + [2, 3, 9]:
        x = np.sort(rng.uniform(80.0, 300.0, n))
        xs.append(x)
        ys.append(2.0 + 0.05 * x + rng.normal(0.0, 1e-3, n) * rng.uniform(0.1, 100.0))
    for (p, c), x, y in zip(linear_fits(xs, ys), xs, ys):
        p0, c0 = linear_fit(x, y)
        assert p.tolist() == p0.tolist() and c.tolist() == c0.tolist()


def test_a_line_through_exact_points_has_its_slope_and_no_scatter():
    """Points on y = 1 + 2x give intercept 1, slope 2 and a zero covariance (no scatter)."""
    x = np.linspace(0.0, 10.0, 11)
    (a, b), cov = linear_fits([x, x], [1 + 2 * x, 1 + 2 * x])[0]
    assert (a, b) == (pytest.approx(1.0), pytest.approx(2.0))
    assert np.allclose(cov, 0.0, atol=1e-20)


def test_polyfit_lines_together_equal_numpy_polyfit_alone():
    """polyfit_lines (lines of one length stacked) gives np.polyfit(x, y, 1) bit for bit,
    Clausius-Clapeyron-like lines in (1/T, ln p) of several lengths included."""
    from pipeline.checks.stats import polyfit_lines

    rng = np.random.default_rng(12)
    xs, ys = [], []
    for n in [30] * 20 + [8] * 5 + [9, 200]:
        T = np.sort(rng.uniform(60.0, 140.0, n))
        xs.append(1.0 / T)
        ys.append(20.0 - 1500.0 / T + rng.normal(0.0, 1e-3, n))
    for got, x, y in zip(polyfit_lines(xs, ys), xs, ys):
        assert got.tolist() == np.polyfit(x, y, 1).tolist()
