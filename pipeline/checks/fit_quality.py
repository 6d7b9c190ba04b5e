"""Fit quality: a fit whose reduced chi-square is far from 1 points at the stated uncertainties.

The fit stage weights every point by its stated standard uncertainty, so the reduced
chi-square of a fit, chi2_nu = sum(z_i^2) / (n - p), says how the residuals compare with those
uncertainties: about 1 when they are right, far below 1 when they are much larger than the
scatter, far above 1 when they are much smaller (or the form cannot follow the data).
"""

from __future__ import annotations

import math

import numpy as np

from pipeline.checks.data import CheckBatch, FluidData, ObsSeries
from pipeline.checks.findings import PASS, VIOLATED, Findings, num
from pipeline.checks.physics import curve_label
from pipeline.checks.registry import register_check


def source_chi2(series: ObsSeries, fit_id: str | None) -> list[dict]:
    """Per source, the mean squared normalised residual of the points the fit used (finite z,
    not flagged as outliers), largest departure from 1 first (on a log scale)."""
    if not len(series):
        return []
    z = series.z.astype(float)
    used = np.isfinite(z) & ~series.is_outlier.astype(bool)
    if fit_id is not None:
        used &= series.fit_id == fit_id
    out = []
    for source in dict.fromkeys(series.source_id[used]):
        sel = used & (series.source_id == source)
        kind = str(series.source_kind[sel][0])
        out.append({"source": str(source), "kind": kind, "n": int(sel.sum()),
                    "mean_z2": float(np.mean(z[sel] ** 2))})
    return sorted(out, key=lambda s: -abs(math.log10(max(s["mean_z2"], 1e-300))))


def _cause(too_low: bool, off: list[dict], equation_kinds) -> str:
    """The likely cause, naming the sources whose points sit off in the same direction."""
    off = sorted(off, key=lambda s: -s["n"])    # the sources carrying the fit first
    names = ", ".join(f"{s['source']} ({s['kind']}, {s['n']} point{'s' if s['n'] != 1 else ''}, "
                      f"mean z^2 = {num(s['mean_z2'])})" for s in off[:3]) or "the fitted sources"
    if not too_low:
        return (f"the residuals are far larger than the stated uncertainties, which are likely "
                f"too small: {names}; or the correlation form cannot follow the data")
    return (f"the residuals are far smaller than the stated uncertainties, which are likely too "
            f"large: {names}; look for expanded (k = 2) uncertainties entered as standard "
            "ones, a relative uncertainty entered in percent, or a wrong unit in an "
            "uncertainty column")


@register_check("data.reduced-chi-square", tags=("data", "fits", "uncertainty"), severity="warn",
                vectorised=True,
                purpose="A fit's reduced chi-square is not far from 1 (stated uncertainties "
                        "agree with the scatter).")
def reduced_chi2(batch: CheckBatch, th) -> Findings:
    """The fit stage weights each point by its stated standard uncertainty, so its reduced
    chi-square chi2_nu = sum(z_i^2)/(n − p) (n points used, p parameters; z the normalised
    residual) compares the scatter about the fit with the stated uncertainties. For correct
    uncertainties chi2_nu is close to 1 (its standard deviation is sqrt(2/(n − p))); the Birge
    ratio R_B = sqrt(chi2_nu) is the factor by which the uncertainties are off (R. T. Birge,
    Phys. Rev. 40, 207 (1932), from memory). A fit with chi2_nu below chi2_min (uncertainties
    about 1/sqrt(chi2_min) times the scatter) or above chi2_max is reported, naming the sources
    whose points sit off in the same direction (mean z^2 per source) as the likely cause: the
    fit's covariance, its uncertainty band and every published u derived from it rest on those
    stated uncertainties. Fits with fewer than min_dof degrees of freedom are skipped.

    Usual causes: expanded (k = 2) uncertainties entered as standard ones, a relative
    uncertainty in percent entered as a fraction (or the reverse), a wrong unit in an
    uncertainty column; a high value: uncertainties stated too small, or a form too stiff for
    the data. For samples of an evaluated equation (sources of the equation_kinds), which carry
    no scatter, a low value is expected -- their stated uncertainty is the equation's own, type
    B -- and passes with that said: only a low value some other source shares is reported.
    """
    out = Findings()
    for fluid in batch:
        _fit_quality(out, fluid, th(fluid.fluid_id))
    return out


def _fit_quality(out: Findings, fluid: FluidData, th) -> None:
    for key, curve in sorted(fluid.curves.items()):
        label = curve_label(key)
        subject = f"curve:{label}"
        chi2, n = curve.reduced_chi2, curve.n_used
        n_params = len(getattr(curve.curve, "params", ()) or ())
        if chi2 is None or not math.isfinite(chi2) or n is None:
            out.skip(fluid.fluid_id, subject, f"{label} fit: no reduced chi-square recorded")
            continue
        dof = n - n_params
        if dof < th["min_dof"]:
            out.skip(fluid.fluid_id, subject, f"{label} fit: {dof} degrees of freedom "
                                              f"(fewer than {th['min_dof']})")
            continue
        sources = source_chi2(fluid.series(key[0], key[2], key[1]), curve.fit_id)
        low, high = th["chi2_min"], th["chi2_max"]
        evidence = {"fit_id": curve.fit_id, "reduced_chi2": chi2, "dof": dof,
                    "birge_ratio": math.sqrt(chi2), "chi2_min": low, "chi2_max": high,
                    "sources": sources}
        context = f"{label} fit {curve.fit_id} ({n} points, {dof} degrees of freedom)"
        if low <= chi2 <= high:
            out.add(fluid.fluid_id, subject, PASS,
                    f"{context}: reduced chi-square = {num(chi2)} within "
                    f"[{num(low)}, {num(high)}]", chi2, high, "reduced chi-square",
                    evidence)
            continue
        too_low = chi2 < low
        off = [s for s in sources if (s["mean_z2"] < low if too_low else s["mean_z2"] > high)]
        # sources with too few points to show a scatter do not decide the cause
        carrying = [s for s in off if s["n"] >= th["min_dof"]] or off
        if too_low and carrying and all(s["kind"] in th["equation_kinds"] for s in carrying):
            # expected, not an oddity: samples of an evaluated equation carry no scatter, and
            # their stated u is the equation's own (type B; the budget treats it as shared by
            # all the file's points)
            out.add(fluid.fluid_id, subject, PASS,
                    f"{context}: reduced chi-square = {num(chi2)} < {num(low)}, as "
                    "expected of samples of an evaluated equation (no scatter; their "
                    "stated u is the equation's own, type B)", chi2, low,
                    "reduced chi-square", evidence)
            continue
        limit = low if too_low else high
        rule = f"reduced chi-square = {num(chi2)} {'<' if too_low else '>'} {num(limit)}"
        out.add(fluid.fluid_id, subject, VIOLATED,
                f"{context}: {rule}: {_cause(too_low, off, th['equation_kinds'])}",
                chi2, limit, "reduced chi-square", evidence)
