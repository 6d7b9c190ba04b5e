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
