"""Screening a series before it is fitted: values and uncertainties that cannot be fitted,
points outside a form's domain or above the reference temperature, and series that do not
rise with temperature. Each screen returns the reason (text and code) a fit is skipped."""

from __future__ import annotations

import math

import numpy as np

from pipeline.correlations.outcomes import FitOutcome, PointFlag, SkipCode

MONOTONIC_K = 3.0            # a step "falls" when it drops by more than 3 combined u
MONOTONIC_MAX_FRACTION = 0.1  # more than 10 % falling steps (and more than 2): non-monotonic


def skipped_outcome(n: int, code: SkipCode, reason: str, flags=None, criterion="bic") -> FitOutcome:
    return FitOutcome(curve=None, form=None, n_used=0, n_flagged=0,
                      outlier_mask=np.zeros(n, dtype=bool), z=np.full(n, np.nan),
                      weighted_rms=math.nan, reduced_chi2=math.nan, bic=math.nan,
                      skipped_reason=reason, skip_code=code.value,
                      point_flags=tuple(flags) if flags is not None else ("",) * n,
                      criterion=criterion)


def as_arrays(T, y, u_y, u_T):
    T = np.atleast_1d(np.asarray(T, dtype=float))
    y = np.atleast_1d(np.asarray(y, dtype=float))
    u_y = np.broadcast_to(np.asarray(u_y, dtype=float), T.shape).copy()
    u_T = np.broadcast_to(np.asarray(0.0 if u_T is None else u_T, dtype=float), T.shape).copy()
    return T, y, u_y, u_T


def screen_values(forms, T, y, u_y, u_T, ref) -> tuple[SkipCode, str] | None:
    bad = ~(np.isfinite(T) & np.isfinite(y) & np.isfinite(u_y) & np.isfinite(u_T))
    if bad.any():
        return SkipCode.NON_FINITE, (f"non-finite values: {int(bad.sum())} of {T.size} points "
                                     f"have NaN or inf in T, value or uncertainty (first at "
                                     f"index {int(np.argmax(bad))})")
    if np.any(u_y <= 0) or np.any(u_T < 0):
        i = int(np.argmax((u_y <= 0) | (u_T < 0)))
        return SkipCode.NON_POSITIVE, (f"uncertainties must be u_value > 0 and u_T >= 0; "
                                       f"index {i} has u_value = {u_y[i]:g}, u_T = {u_T[i]:g}")
    if np.any(T <= 0):
        return SkipCode.NON_POSITIVE, f"temperatures must be > 0 K; minimum is {T.min():g} K"
    if any(f.link == "log" for f in forms) and np.any(y <= 0):
        return SkipCode.NON_POSITIVE, (f"{int(np.sum(y <= 0))} values are <= 0; a form fitted "
                                       f"in ln(value) needs positive values")
    T_ref = ref.get("T_ref_K")
    needs = [f.name for f in forms if f.reference_point]
    if needs and not (T_ref is not None and math.isfinite(T_ref) and T_ref > 0):
        return SkipCode.NO_REFERENCE, (f"forms {needs} need ref['T_ref_K'] (Tc or Tt) > 0; "
                                       f"got {T_ref!r}")
    return None


def domain_flags(cands, T) -> list[str]:
    """Per point: "" inside every candidate's domain, else the first reason found."""
    flags = [""] * T.size
    for cand in cands:
        ok = cand.form.domain(T, cand.T_ref, cand.exps)
        above = T > cand.T_ref
        kind = {"critical": PointFlag.ABOVE_CRITICAL, "triple": PointFlag.ABOVE_TRIPLE}.get(
            cand.form.reference_point, PointFlag.OUTSIDE_DOMAIN)
        for i in np.flatnonzero(~ok):
            if not flags[i]:
                flags[i] = (kind if above[i] else PointFlag.OUTSIDE_DOMAIN).value
    return flags


def crossing_reason(flags, T, T_ref) -> str | None:
    above = [i for i, f in enumerate(flags)
             if f in (PointFlag.ABOVE_CRITICAL.value, PointFlag.ABOVE_TRIPLE.value)]
    if not above:
        return None
    which = "critical temperature Tc" if flags[above[0]] == PointFlag.ABOVE_CRITICAL.value \
        else "triple-point temperature Tt"
    return (f"{len(above)} of {T.size} points lie above the {which} = {T_ref:g} K (highest "
            f"{T[above].max():g} K), where this boundary does not exist; fix the data or the "
            f"reference point, or pass above_reference='exclude' to fit without them "
            f"(they are then flagged)")


def monotonic_reason(T, y, u_y, u_T) -> str | None:
    """Reason text when the series clearly does not rise with T, else None."""
    order = np.lexsort((y, T))
    T, y, u_y, u_T = T[order], y[order], u_y[order], u_T[order]
    dT = np.diff(T)
    judged = dT > MONOTONIC_K * np.hypot(u_T[1:], u_T[:-1])
    falls = judged & (-np.diff(y) > MONOTONIC_K * np.hypot(u_y[1:], u_y[:-1]))
    n_j, n_f = int(judged.sum()), int(falls.sum())
    if n_f > max(2, MONOTONIC_MAX_FRACTION * n_j):
        return (f"pressure does not rise with temperature: {n_f} of {n_j} steps fall by more "
                f"than {MONOTONIC_K:g} combined standard uncertainties (a vapour or "
                f"sublimation pressure must increase with T)")
    return None
