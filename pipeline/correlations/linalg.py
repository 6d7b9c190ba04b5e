"""Weighted linear least squares and covariances by column-equilibrated SVD, shared by the
linear fits of every form and by the nonlinear fits' covariance (pure numpy)."""

from __future__ import annotations

import numpy as np


def weighted_linear_solve(X: np.ndarray, z: np.ndarray, w_sqrt: np.ndarray,
                          rcond: float = 1e-13) -> tuple[np.ndarray, np.ndarray, int]:
    """Weighted least squares by SVD of the column-equilibrated design matrix.

    Returns beta, the unscaled covariance (X^T W X)^-1 and the numerical rank.
    """
    U, s, Vt, norms, rank = _equilibrated_svd(X * w_sqrt[:, None], rcond)
    if rank < X.shape[1]:
        return np.full(X.shape[1], np.nan), np.full((X.shape[1],) * 2, np.nan), rank
    beta = (Vt.T @ ((U.T @ (z * w_sqrt)) / s)) / norms
    cov = ((Vt.T / s**2) @ Vt) / np.outer(norms, norms)
    return beta, cov, rank


def covariance_from_jacobian(J: np.ndarray, rcond: float = 1e-13) -> tuple[np.ndarray, int]:
    """(J^T J)^-1 of a weighted residual Jacobian J, by column-equilibrated SVD, and its rank."""
    _, s, Vt, norms, rank = _equilibrated_svd(J, rcond)
    if rank < J.shape[1]:
        return np.full((J.shape[1],) * 2, np.nan), rank
    return ((Vt.T / s**2) @ Vt) / np.outer(norms, norms), rank


def column_norms(A: np.ndarray) -> np.ndarray:
    """Euclidean norm of each column of ``A`` (1 for zero or non-finite columns), to
    equilibrate a design matrix before solving."""
    norms = np.linalg.norm(A, axis=0)
    norms[(norms == 0.0) | ~np.isfinite(norms)] = 1.0
    return norms


def _equilibrated_svd(A: np.ndarray, rcond: float):
    norms = column_norms(A)
    U, s, Vt = np.linalg.svd(A / norms, full_matrices=False)
    rank = int(np.sum(s > rcond * s[0])) if s.size and s[0] > 0 else 0
    return U, s, Vt, norms, rank
