"""Leave-one-out residuals about each file's trend: many files at once, the numbers of one file."""

from __future__ import annotations

import numpy as np
import pytest

from pipeline.checks.file_trends import (deleted_residuals, deleted_residuals_rows,
                                         file_residuals, file_residuals_one)


def _bits(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=float).view(np.int64)


@pytest.mark.parametrize("n", [1, 2, 3, 4, 6, 7, 8, 9, 16, 17, 31, 45, 50, 127, 128, 129, 257])
def test_stacked_files_give_the_one_file_numbers_bit_for_bit(n):
    """Files of one length stacked as rows give each file's own deleted residuals to the last bit
    (all three trend degrees, pairwise-summed means of every length class, a file of one T)."""
    rng = np.random.default_rng(n)
    x = np.sort(rng.uniform(80.0, 300.0, (12, n)), axis=1)
    x[0] = 150.0                                   # no spread in T: the span falls back to 1
    r = rng.normal(0.0, 1e-4, (12, n))
    w = 1.0 / rng.uniform(1e-5, 1e-3, (12, n)) ** 2
    one = np.array([deleted_residuals(x[i], r[i], w[i]) for i in range(12)])
    assert np.array_equal(_bits(deleted_residuals_rows(x, r, w)), _bits(one))


def test_a_spike_stands_out_of_a_smooth_file():
    """A 10 u spike in a file of 20 points on a quadratic trend is the only point with |d|/u > 4
    (a deleted residual judges the point against the trend of the others)."""
    T = np.linspace(100.0, 200.0, 20)
    u = np.full(20, 1e-4)
    r = 1e-3 * ((T - 150.0) / 50.0) ** 2
    r[7] += 10 * u[7]
    z = np.abs(deleted_residuals(T, r, 1.0 / u ** 2) / u)
    assert np.flatnonzero(z > 4).tolist() == [7]


def test_many_files_give_the_one_file_numbers_bit_for_bit():
    """Files of mixed lengths, interleaved rows and spikes (several rounds of setting the worst
    point aside) give what each file's own call gives, to the last bit."""
    rng = np.random.default_rng(7)
    lengths = rng.integers(5, 70, 200)
    starts = np.r_[0, np.cumsum(lengths)[:-1]]
    n = int(lengths.sum())
    T, r, u = rng.uniform(90, 250, n), rng.normal(0, 1e-4, n), rng.uniform(5e-5, 2e-4, n)
    spikes = rng.random(n) < 0.06
    r[spikes] += rng.normal(0, 4e-3, spikes.sum())
    r[rng.integers(0, n, 5)] = np.nan            # a NaN residual: its file keeps setting points aside
    rows, z_max = rng.permutation(n), rng.uniform(2.0, 4.0, len(lengths))
    expected = r.copy()
    for i, (a, k) in enumerate(zip(starts, lengths)):
        m = rows[a:a + k]
        expected[m] = file_residuals_one(T[m], r[m], u[m], z_max[i])
    got = file_residuals(T, r, u, rows, starts, lengths, z_max)
    assert np.array_equal(_bits(got), _bits(expected))


def test_rows_outside_every_file_keep_their_residual():
    """Rows that belong to no judged file come back unchanged."""
    T, r, u = np.linspace(100, 200, 10), np.linspace(-1e-4, 1e-4, 10), np.full(10, 1e-4)
    got = file_residuals(T, r, u, np.arange(2, 8), np.array([0]), np.array([6]), np.array([3.0]))
    assert got[[0, 1, 8, 9]].tolist() == r[[0, 1, 8, 9]].tolist()
    assert not np.array_equal(got[2:8], r[2:8])
