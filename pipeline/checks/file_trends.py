"""Leave-one-out residuals of observations about their own file's trend, for many files at once.

``data.outliers`` judges each observation against the weighted polynomial trend of the other
residuals of its file (:func:`deleted_residuals`, one file). Over a whole compilation that is
thousands of files of a few dozen points: one small fit each. :func:`file_residuals` does the
same for all files together: files (or, in later rounds, what is left of them) with the same
number of points are stacked as rows of one array and share every numpy call, and the rounds
that set the worst point of a file aside run in lock-step over all files still going.

The numbers are those of the one-file code to the last bit: every operation works on each
row's own values in the same order (elementwise arithmetic; each row's mean and products
summed over that row alone, as the one-file arrays are; the 3 x 3 SVD of each matrix by the
same LAPACK routine). Files are never padded to a common length (padding changes the order in
which sums are taken, so the rounding); only files of one length are stacked.
``tests/checks/test_file_trends.py`` holds the two equal bit for bit.
"""

from __future__ import annotations

import numpy as np


def _pinv(a: np.ndarray) -> np.ndarray:
    """``np.linalg.pinv(a)`` of a real square matrix, its operations without its checks."""
    u, s, vt = np.linalg.svd(a, full_matrices=False)
    large = s > 1e-15 * s.max()
    s = np.divide(1, s, where=large, out=s)
    s[~large] = 0
    return vt.T @ (s[:, None] * u.T)


def _degree(n: int) -> int:
    return 2 if n >= 7 else 1 if n >= 4 else 0


def deleted_residuals(x: np.ndarray, r: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Studentised leave-one-out residuals of r about a weighted polynomial trend in x.

    Degree 2 from 7 points, 1 from 4, else the weighted mean. The deleted residual
    e_i / (1 − h_ii) (h the hat matrix) judges each point against the trend of the others, so a
    spike does not hide in a trend it pulled itself; its standard deviation is u_i /
    sqrt(1 − h_ii), so it is scaled by sqrt(1 − h_ii) to keep the points at the ends of a file
    (high leverage) on the same footing as the middle (D. A. Belsley, E. Kuh, R. E. Welsch,
    Regression Diagnostics, Wiley (1980), from memory).

    One file; :func:`deleted_residuals_rows` gives the same numbers for many files of one length.
    """
    n = len(r)
    degree = _degree(n)
    span = float(np.ptp(x)) or 1.0
    s = (x - x.mean()) / span
    A = np.column_stack([s * s, s, np.ones(n)][2 - degree:])   # np.vander(s, degree + 1)
    sw = np.sqrt(w)
    Aw = A * sw[:, None]
    G = _pinv(Aw.T @ Aw)
    coef = G @ (Aw.T @ (r * sw))
    e = r - A @ coef
    h = np.einsum("ij,jk,ik->i", A, G, A) * w
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(h < 1.0 - 1e-9, e / np.sqrt(np.clip(1.0 - h, 1e-12, None)), e)


def deleted_residuals_rows(X: np.ndarray, R: np.ndarray, W: np.ndarray) -> np.ndarray:
    """:func:`deleted_residuals` of each row of X, R, W (shape (files, n), one file per row)."""
    F, n = X.shape
    degree = _degree(n)
    span = np.ptp(X, axis=1)
    span = np.where(span == 0, 1.0, span)
    S = (X - X.mean(axis=1)[:, None]) / span[:, None]
    A = np.stack([S * S, S, np.ones_like(S)][2 - degree:], axis=2)       # (F, n, degree + 1)
    sw = np.sqrt(W)
    Aw = A * sw[:, :, None]
    AwT = Aw.transpose(0, 2, 1)
    u, sv, vt = np.linalg.svd(AwT @ Aw, full_matrices=False)
    large = sv > 1e-15 * sv.max(axis=1, keepdims=True)
    sv = np.divide(1, sv, where=large, out=sv)
    sv[~large] = 0
    G = vt.transpose(0, 2, 1) @ (sv[:, :, None] * u.transpose(0, 2, 1))
    coef = G @ (AwT @ (R * sw)[:, :, None])
    e = R - (A @ coef)[:, :, 0]
    h = np.einsum("fij,fjk,fik->fi", A, G, A) * W
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(h < 1.0 - 1e-9, e / np.sqrt(np.clip(1.0 - h, 1e-12, None)), e)


def file_residuals_one(T: np.ndarray, r: np.ndarray, u_rel: np.ndarray, z_max: float) -> np.ndarray:
    """Deleted residuals of one file, the worst point set aside while it exceeds z_max (up to a
    third of the points), so one spike does not tilt the trend its neighbours are judged by.

    One file; :func:`file_residuals` gives the same numbers for many files at once.
    """
    keep = np.ones(len(r), dtype=bool)
    out = np.empty(len(r))
    while True:
        idx = np.flatnonzero(keep)
        d = deleted_residuals(T[idx], r[idx], 1.0 / u_rel[idx] ** 2)
        out[idx] = d
        z = np.abs(d / u_rel[idx])
        worst = int(np.argmax(z))
        if z[worst] <= z_max or (~keep).sum() + 1 > len(r) // 3 or keep.sum() <= 3:
            return out
        keep[idx[worst]] = False


def file_residuals(T: np.ndarray, r: np.ndarray, u_rel: np.ndarray, rows: np.ndarray,
                   starts: np.ndarray, lengths: np.ndarray, z_max: np.ndarray) -> np.ndarray:
    """``r`` with the rows of each file replaced by :func:`file_residuals_one` of that file.

    File i holds the rows ``rows[starts[i]:starts[i] + lengths[i]]`` (of T, r, u_rel; in the
    order the one-file call would see them) and is judged against ``z_max[i]``. Rounds run
    in lock-step: in each, the files still going are stacked by their number of kept points.
    """
    out = np.array(r, dtype=float, copy=True)
    starts, lengths = np.asarray(starts, dtype=np.intp), np.asarray(lengths, dtype=np.intp)
    z_max = np.asarray(z_max, dtype=float)
    third = lengths // 3
    # kept points -> (file numbers, (files, kept) row indices of their kept points, set aside)
    going: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    for n in np.unique(lengths):
        which = np.flatnonzero(lengths == n)
        going[int(n)] = (which, rows[starts[which][:, None] + np.arange(n)],
                         np.zeros(len(which), dtype=np.intp))
    while going:
        after: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        for n, (which, idx, aside) in going.items():
            U = u_rel[idx]
            d = deleted_residuals_rows(T[idx], r[idx], 1.0 / U ** 2)
            out[idx] = d
            z = np.abs(d / U)
            worst = np.argmax(z, axis=1)
            at = np.arange(len(which))
            more = ~((z[at, worst] <= z_max[which]) | (aside + 1 > third[which]) | (n <= 3))
            if more.any():
                keep = np.ones(idx.shape, dtype=bool)
                keep[at, worst] = False
                m = np.flatnonzero(more)
                after[n - 1] = (which[m], idx[m][keep[m]].reshape(len(m), n - 1), aside[m] + 1)
        going = after
    return out
