"""Unit mix-up diagnosis: a file whose pressures sit off the consensus of its group by a unit
factor or offset, or whose temperatures by a unit or scale offset, gets the likely cause named.

Recipe for one (fluid, boundary, solid phase) pressure group:
1. a robust pooled fit of all files (:mod:`pipeline.checks.consensus`), so files off by a unit
   factor carry no weight;
2. a file that agrees with that pooled fit (when three or more files carry weight in it) agrees
   with the others; for any other file, a consensus: the robust fit of the *other* files'
   inlier points (when two or more other files agree), else the published reference equation
   of the group (matched by the fluid's CAS number), else the one other file (unless it comes
   from a less authoritative source); a fluid's only file is compared with its stated
   constants: a corresponding-states estimate (:mod:`pipeline.checks.estimates`), else a stated
   point that ends its curve;
3. the file's median normalised log-residual against the consensus, then the same after undoing
   each hypothesis (a unit factor, a 273.15 K offset, gauge pressure, IPTS-68); the hypothesis
   under which the median collapses explains the file.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from pipeline.checks.consensus import _row_medians, poly_design, robust_fit, robust_fits, wagner_design
from pipeline.checks.inputs import CheckBatch, FluidData, ObsSeries
from pipeline.checks.estimates import estimate_from_constants
from pipeline.checks.findings import VIOLATED, WARN, Findings
from pipeline.checks.points import SOURCE_RANK
from pipeline.checks.registry import register_check
from pipeline.checks.stats import median, polyfit_lines

#: pressure units and their size in Pa (the candidates of a factor mix-up)
PRESSURE_UNITS_PA = {"Pa": 1.0, "hPa": 100.0, "kPa": 1e3, "bar": 1e5, "MPa": 1e6,
                     "atm": 101325.0, "mmHg": 133.322, "psi": 6894.76}
_ALIASES = {"torr": "mmHg", "Torr": "mmHg", "mbar": "hPa", "pascal": "Pa", "psia": "psi"}
ZERO_CELSIUS_K = 273.15
KELVIN_UNITS = {"K", "kelvin"}
CELSIUS_UNITS = {"degC", "°C", "celsius", "degree_Celsius"}



def _inv(T):
    return 1.0 / T


def _same(v):
    return v


@dataclass(frozen=True)
class Space:
    """How a boundary's consensus is fitted: ln p (or p) against a design in T."""

    log: bool                                   # fit ln p; else p itself (steep curves)
    x: Callable[[np.ndarray], np.ndarray]       # abscissa of lines and polynomial designs
    wagner: bool                                # Wagner-type design when Tc is stated

    def y(self, p: np.ndarray) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.log(p) if self.log else np.asarray(p, dtype=float)

    def back(self, y: np.ndarray) -> np.ndarray:
        with np.errstate(over="ignore"):
            return np.exp(y) if self.log else y

    def floor(self, p: np.ndarray, rel_floor: float) -> float:
        """Smallest robust scale: relative already in ln p, times the typical p otherwise."""
        return rel_floor if self.log else rel_floor * float(np.median(np.abs(p)))

    def design(self, fluid: FluidData):
        cp = fluid.critical_point
        if self.wagner and cp is not None and math.isfinite(cp.T_K):
            return wagner_design(cp.T_K)
        return poly_design(self.x)


#: boundary -> consensus space: ln p for vapour curves, p in T for steep curves
SPACES = {
    "liquid-vapour": Space(True, _inv, True),
    "solid-vapour": Space(True, _inv, False),
    "solid-liquid": Space(False, _same, False),
    "solid-solid": Space(False, _same, False),
}


@dataclass(frozen=True)
class Hypothesis:
    """A recording mistake and how to undo it: ``undo(T, p) -> (T, p)`` in SI."""

    name: str
    undo: Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]


def _factor(f: float) -> Callable:
    return lambda T, p: (T, p * f)


def _shift_T(d: float) -> Callable:
    return lambda T, p: (T + d, p)


def _shift_p(d: float) -> Callable:
    return lambda T, p: (T, p + d)


def _as_its90(T: np.ndarray, p: np.ndarray):
    """Temperatures that were IPTS-68 values stored as ITS-90: convert them now."""
    from pipeline.ingest.scales import ipts68_to_its90

    return np.asarray(ipts68_to_its90(T), dtype=float), p


def _converted_twice(T: np.ndarray, p: np.ndarray):
    """ITS-90 values declared IPTS-68 were converted once too often: undo that conversion."""
    from pipeline.ingest.scales import its90_to_ipts68

    return np.asarray(its90_to_ipts68(T), dtype=float), p


def hypotheses(value_unit: str, T_unit: str, T_scale: str, p_atm: float) -> list[Hypothesis]:
    """The mix-ups worth testing for a file declared in ``value_unit``, ``T_unit``, ``T_scale``."""
    declared = _ALIASES.get(value_unit, value_unit)
    out = []
    if declared in PRESSURE_UNITS_PA:
        size = PRESSURE_UNITS_PA[declared]
        for unit, pa in PRESSURE_UNITS_PA.items():
            if unit != declared:
                out.append(Hypothesis(f"{unit} recorded as {declared} (factor {pa / size:.6g})",
                                      _factor(pa / size)))
    else:  # unknown declaration: the usual factors, named by what they would mean in Pa
        for unit, pa in PRESSURE_UNITS_PA.items():
            if unit != "Pa":
                out.append(Hypothesis(f"values off by a factor {pa:.6g} (e.g. {unit} recorded as Pa)",
                                      _factor(pa)))
        out.append(Hypothesis("values off by a factor 0.001 (e.g. Pa recorded as kPa)", _factor(1e-3)))
    if T_unit not in CELSIUS_UNITS:
        out.append(Hypothesis("degC recorded as K (offset 273.15 K)", _shift_T(ZERO_CELSIUS_K)))
    if T_unit not in KELVIN_UNITS:
        out.append(Hypothesis("K recorded as degC (offset -273.15 K)", _shift_T(-ZERO_CELSIUS_K)))
    out.append(Hypothesis(f"gauge pressure recorded as absolute (offset {p_atm:g} Pa)", _shift_p(p_atm)))
    out.append(Hypothesis(f"absolute pressure recorded as gauge (offset -{p_atm:g} Pa)", _shift_p(-p_atm)))
    if T_scale == "ITS-90":
        out.append(Hypothesis("IPTS-68 temperatures recorded as ITS-90", _as_its90))
    elif T_scale == "IPTS-68":
        out.append(Hypothesis("ITS-90 temperatures recorded as IPTS-68 (converted twice)",
                              _converted_twice))
    return out


# -- what a file is compared with -----------------------------------------------------------------
@dataclass(frozen=True)
class Consensus:
    """What a file is compared with: T -> p (NaN outside its range), a phrase naming it, and
    the relative standard uncertainty it carries (the floor of the normalised residuals)."""

    curve: Callable[[np.ndarray], np.ndarray]
    basis: str
    floor: float


def _reference(fluid: FluidData, s: ObsSeries, th) -> Consensus | None:
    """The published reference equation of the fluid, matched by its CAS number."""
    from pipeline.correlations.reference import reference_curve, reference_fluid

    slug = reference_fluid(fluid.cas_rn)
    if slug is None:
        return None
    try:
        curve = reference_curve(slug, s.boundary, "pressure", s.solid_phase)
    except (KeyError, LookupError, ValueError):
        return None
    return Consensus(lambda T: np.asarray(curve.value(T), dtype=float),
                     f"the reference equation ({curve.citation.split(',')[0]})", th["rel_floor"])


def _estimate(fluid: FluidData, s: ObsSeries, th) -> Consensus | None:
    """Liquid-vapour only: the corresponding-states estimate from the stated constants."""
    if s.boundary != "liquid-vapour" or s.solid_phase:
        return None
    cp = fluid.critical_point
    if cp is None:
        return None
    omega, t_nb = fluid.constant("acentric_factor"), fluid.constant("normal_boiling_T")
    tp = fluid.vapour_triple_point()
    est = estimate_from_constants(cp.T_K, cp.p_Pa, omega=omega[0] if omega else None,
                                  T_nb=t_nb[0] if t_nb else None,
                                  triple=(tp.T_K, tp.p_Pa) if tp is not None else None)
    if est is None:
        return None
    return Consensus(est, f"the corresponding-states estimate from the stated constants "
                          f"({est.basis})", th["estimate_rel_floor"])


def _anchors(fluid: FluidData, s: ObsSeries) -> list[tuple[str, float, float]]:
    """Stated points that end the file's curve: (name, T, p) with p stated."""
    out = []
    if s.boundary == "liquid-vapour":
        cp, tp = fluid.critical_point, fluid.vapour_triple_point()
        out += [("the stated critical point", cp.T_K, cp.p_Pa)] if cp is not None else []
        out += [("the stated triple point", tp.T_K, tp.p_Pa)] if tp is not None else []
    elif s.boundary == "solid-vapour":
        tp = fluid.vapour_triple_point(s.solid_phase or "solid")
        out += [("the stated triple point", tp.T_K, tp.p_Pa)] if tp is not None else []
    return [a for a in out if math.isfinite(a[1]) and math.isfinite(a[2]) and a[2] > 0]


def _anchor_line(s: ObsSeries, th) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """(1/T, ln p, T) of the file's usable points, or None when too few for a line."""
    T, p = s.T.astype(float), s.value.astype(float)
    ok = np.isfinite(T) & np.isfinite(p) & (p > 0) & (T > 0)
    if ok.sum() < th["min_points"] or np.ptp(T[ok]) == 0:
        return None
    return 1.0 / T[ok], np.log(p[ok]), T[ok]


def _anchor_lines(files: list) -> dict:
    """The Clausius-Clapeyron line of every file alone in a vapour or sublimation group (the
    files the anchored consensus reads), all at once (:func:`~pipeline.checks.stats.polyfit_lines`):
    (fluid, boundary, solid phase, path) -> (slope, intercept, points)."""
    keys, xs, ys = [], [], []
    for f in files:
        if f.rel_u is None or f.group.boundary not in ("liquid-vapour", "solid-vapour") \
                or len(f.series) != len(f.group):
            continue
        line = _anchor_line(f.series, f.th)
        if line is not None:
            keys.append((id(f.fluid), f.group.boundary, f.group.solid_phase, str(f.path), len(line[0])))
            xs.append(line[0])
            ys.append(line[1])
    try:
        return dict(zip(keys, polyfit_lines(xs, ys)))
    except Exception:   # noqa: BLE001 - a file whose line fails fails alone, in _anchored
        return {}


def _anchored(fluid: FluidData, s: ObsSeries, th, lines: dict | None = None) -> Consensus | None:
    """The file's own shape shifted through a stated point that ends its curve.

    A straight line in (1/T, ln p) through the file's points (Clausius-Clapeyron), evaluated at
    the stated point's temperature when that lies within the extrapolation policy of the file,
    is scaled to pass through the stated pressure: a unit factor then shows as a constant
    offset of the file from it.
    """
    anchors = _anchors(fluid, s)
    line = _anchor_line(s, th) if anchors else None
    if line is None:
        return None
    policy = fluid.budget.extrapolation
    key = (id(fluid), s.boundary, s.solid_phase, str(s.file_path[0]), len(line[0]))
    found = (lines or {}).get(key)
    b, a = found if found is not None else np.polyfit(line[0], line[1], 1)
    lo, hi = float(line[2].min()), float(line[2].max())
    for name, T_a, p_a in anchors:
        if max(lo - T_a, T_a - hi, 0.0) > policy.allowed(T_a):
            continue
        shift = math.log(p_a) - (a + b / T_a)

        def curve(Tq, a=a, b=b, shift=shift):
            Tq = np.asarray(Tq, dtype=float)
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                out = np.exp(a + b / Tq + shift)
            return np.where((Tq >= lo) & (Tq <= hi), out, np.nan)
        return Consensus(curve, f"{name} (T = {T_a:.6g} K, p = {p_a:.6g} Pa), through which "
                                f"the file's own Clausius-Clapeyron line must pass",
                         th["estimate_rel_floor"])
    return None


def _file_rel_u(fluid: FluidData, group: ObsSeries, path: str) -> float:
    """The correlated relative uncertainty of the file at ``path`` (the budget's share of its
    stated u, or of the default for its source kind): what a consensus made of it carries."""
    m = group.file_path == path
    y, u = group.value[m].astype(float), group.u_value_si[m].astype(float)
    kind = str(group.source_kind[m][0])
    model = fluid.budget.uncertainty
    rel = np.where(np.isfinite(u) & (u > 0), np.abs(u / y), model.observed_rel("pressure", kind))
    return median(rel) * model.correlated_fraction(kind)


def _robust_args(fluid: FluidData, group: ObsSeries, th, start_w=None) -> tuple:
    space = SPACES[group.boundary]
    return (group.T.astype(float), space.y(group.value.astype(float)), group.file_code,
            space.design(fluid), poly_design(space.x, 1), space.floor(group.value, th["rel_floor"]),
            start_w)


def _robust(fluid: FluidData, group: ObsSeries, th, start_w=None):
    return robust_fit(*_robust_args(fluid, group, th, start_w))


def _curve_of(fluid: FluidData, group: ObsSeries, weights: np.ndarray, th):
    """The consensus of the points with weight as a callable T -> p, or None."""
    model, _ = _robust(fluid, group, th, start_w=weights)
    if model is None:
        return None
    back = SPACES[group.boundary].back
    return lambda T: back(model(T))


def _consensus(fluid: FluidData, group: ObsSeries, path: str, pooled_w, th, lines=None):
    """(Consensus, None) for the file at ``path``, or (None, reason).

    In order: the robust fit of two or more other files; the reference equation (matched by
    CAS number); the one other file (unless from a less authoritative source); for a single
    file, the corresponding-states estimate from the stated constants, then a stated point
    that ends its curve.
    """
    files = group.file_path
    others = files != path
    inlier_files = list(dict.fromkeys(files[others & (pooled_w > 0.5)]))
    if len(inlier_files) >= 2:
        cons = _curve_of(fluid, group, np.where(others, pooled_w, 0.0), th)
        if cons is not None:
            u = min(_file_rel_u(fluid, group, f) for f in inlier_files)
            return Consensus(cons, f"the robust fit of {len(inlier_files)} other files",
                             math.hypot(th["rel_floor"], u)), None
    ref = _reference(fluid, group, th)
    if ref is not None:
        return ref, None
    if len(inlier_files) == 1:
        other = inlier_files[0]
        kind_other = group.source_kind[files == other][0]
        kind_self = group.source_kind[~others][0]
        if SOURCE_RANK.get(kind_other, 9) > SOURCE_RANK.get(kind_self, 9):
            return None, f"the only other file ({other}) comes from a less authoritative source"
        cons = _curve_of(fluid, group, (files == other).astype(float), th)
        if cons is not None:
            return Consensus(cons, f"the other file {other}",
                             math.hypot(th["rel_floor"], _file_rel_u(fluid, group, other))), None
    own = group.take(np.flatnonzero(~others))
    cons = _estimate(fluid, own, th) or _anchored(fluid, own, th, lines)
    if cons is not None:
        return cons, None
    return None, ("no other file, reference equation or stated constants (Tc and pc with ω, "
                  "a normal boiling point or a triple point) to compare with")


def _median_z(cons: Consensus, T, p, rel_u, th) -> tuple[float, float]:
    """|median normalised ln-residual| of the points, and the share the consensus covers.

    Against a rough estimate from stated constants (floor >= estimate_rel_floor) the larger of
    that and the median of the third of the points with the lowest pressures: offsets (a gauge
    reading is one atmosphere off) show most at the lowest pressures and would hide in the
    estimate's width. Both are medians, so single outliers do not move them.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        r = np.log(p) - np.log(cons.curve(T))
    ok = np.isfinite(r)
    share = _share(ok)
    if not ok.any() or share < th["min_coverage"]:
        return math.inf, share
    z = r[ok] / np.sqrt(rel_u[ok] ** 2 + cons.floor ** 2)
    stat = abs(median(z))
    n_low = max(int(th["min_points"]), len(z) // 3)
    if cons.floor >= th["estimate_rel_floor"] and len(z) >= 2 * n_low:
        low = z[np.argsort(p[ok], kind="stable")[:n_low]]
        stat = max(stat, abs(median(low)))
    return stat, share


def _scores(cons: Consensus, s: ObsSeries, rel_u, th) -> list[tuple[float, str]]:
    out = []
    for h in hypotheses(str(s.value_unit[0]), str(s.T_unit[0]), str(s.T_scale[0]), th["p_atm_Pa"]):
        T2, p2 = h.undo(s.T.astype(float), s.value.astype(float))
        if np.all(T2 > 0) and np.all(p2 > 0):  # NaN (outside a scale's range) fails too
            out.append((_median_z(cons, T2, p2, rel_u, th)[0], h.name))
    return sorted(out)


def _share(ok: np.ndarray) -> float:
    """``float(ok.mean())`` (the same number: an exact count over the size, NaN when empty)."""
    return np.count_nonzero(ok) / ok.size if ok.size else math.nan


def _rel_u(s: ObsSeries) -> np.ndarray:
    """|u / value|, 0 where NaN (``np.nan_to_num`` of it, without its generic overhead)."""
    rel = np.abs(s.u_value_si / s.value)
    if rel.dtype != np.float64:
        return np.nan_to_num(rel)
    rel[np.isnan(rel)] = 0.0
    rel[rel == np.inf] = np.finfo(np.float64).max
    return rel


def _diagnose(out: Findings, fluid: FluidData, s: ObsSeries, subject: str, path: str,
              cons: Consensus, th, rel_u: np.ndarray, scored: tuple[float, float] | None = None
              ) -> None:
    """The file's finding against ``cons`` (``scored``: its :func:`_median_z`, when known)."""
    before, coverage = scored or _median_z(cons, s.T, s.value, rel_u, th)
    stat, limit, basis = "|median z| vs consensus", th["z_max"], cons.basis
    ev = {"consensus": basis, "consensus_rel_u": cons.floor, "n_points": int(len(s)),
          "coverage": coverage, "median_abs_z_before": before}
    if before <= limit:
        out.judge(fluid.fluid_id, subject, measured=before, limit=limit, statistic=stat,
                  evidence=ev, context=f"{path} agrees with {basis}")
        return
    ev["observations"] = s.refs(limit=5)
    scores = _scores(cons, s, rel_u, th)
    after, best = scores[0] if scores else (math.inf, None)
    explained = best is not None and after <= limit and after <= th["collapse"] * before
    ev["hypotheses"] = {name: score for score, name in scores}
    where = (f"outside the range of {basis}" if math.isinf(before)
             else f"off {basis} (|median z| = {before:.3g} > {limit:g})")
    measured = before if math.isfinite(before) else None
    if explained:
        ev["diagnosis"] = best
        out.add(fluid.fluid_id, subject, VIOLATED,
                f"{path}: values look like {best}: the file lies {where}; corrected, "
                f"|median z| = {after:.3g}", measured, limit, stat, ev)
        return
    ev["diagnosis"] = None
    out.add(fluid.fluid_id, subject, WARN,
            f"{path} lies {where} but no unit or scale mix-up explains it (best: {best}, "
            f"|median z| = {after:.3g})", measured, limit, stat, ev)


def _screen(fluid: FluidData, group: ObsSeries, pooled, pooled_w, th) -> Consensus | None:
    """The pooled consensus when three or more files carry weight in it, else None.

    A file agreeing with the robust fit of the whole group (in which a minority of wrong files
    has no weight) agrees with the others; only files off it need a leave-one-out consensus.
    """
    if pooled is None or len(set(group.file_path[pooled_w > 0.5])) < 3:
        return None
    back = SPACES[group.boundary].back
    n_files = len(set(group.file_path))
    return Consensus(lambda T: back(pooled(T)), f"the robust fit of all {n_files} files",
                     th["rel_floor"])


def _files(group: ObsSeries) -> dict[str, tuple[ObsSeries, np.ndarray]]:
    """:meth:`ObsSeries.by_file`, with each file's rows in the group."""
    paths, codes = group.columns["file_path"], group.columns["file_code"]
    out = {}
    for code in dict.fromkeys(codes.tolist()):
        rows = np.flatnonzero(codes == code)
        out[paths[rows[0]]] = (group.take(rows), rows)
    return out


@dataclass
class _File:
    """One file of a group on its way to a finding."""

    fluid: FluidData
    group: ObsSeries
    th: dict
    path: str
    series: ObsSeries
    subject: str
    rel_u: np.ndarray | None = None          # None: too few points (a skip)
    scored: tuple[float, float] | None = None   # against the pooled fit, when screened
    screen: Consensus | None = None
    pooled_w: np.ndarray | None = None
    pooled_model: object = None              # the pooled fit (a consensus Model), when screened
    design: np.ndarray | None = None         # the pooled model's design at the file's rows


def _plan(fluid: FluidData, group: ObsSeries, th, fit) -> list[_File]:
    """The files of one group; ``fit`` is the robust fit of all its files with its design
    (:func:`~pipeline.checks.consensus.robust_fits`), Nones for a group of one file."""
    pooled, pooled_w, A, usable = fit
    if pooled_w is None:
        pooled_w = np.ones(len(group))
    screen = _screen(fluid, group, pooled, pooled_w, th)
    out = []
    for path, (s, rows) in _files(group).items():
        subject = f"file:{path}|{group.boundary}" + (f":{group.solid_phase}" if group.solid_phase else "")
        f = _File(fluid, group, th, path, s, subject, pooled_w=pooled_w)
        if len(s) >= th["min_points"]:
            f.rel_u, f.screen = _rel_u(s), screen
            if screen is not None and A is not None and usable[rows].all():
                f.design, f.pooled_model = A[rows], pooled
        out.append(f)
    return out


def _screen_scores(files: list[_File]) -> None:
    """:func:`_median_z` of every screened file against its pooled fit, files whose design
    matrices share a shape (and consensus space) stacked as rows: the same numbers (the model's
    design rows as the fit built them, one product per file of the same shape, elementwise
    arithmetic, each row's median). Files the shortcut does not cover are scored one by one."""
    classes: dict[tuple, list[_File]] = {}
    for f in files:
        if f.screen is None:
            continue
        low = f.screen.floor >= f.th["estimate_rel_floor"]      # the low-pressure rule: one by one
        if f.design is None or low:
            f.scored = _median_z(f.screen, f.series.T, f.series.value, f.rel_u, f.th)
        else:
            key = (f.design.shape, SPACES[f.group.boundary].log, f.th["min_coverage"])
            classes.setdefault(key, []).append(f)
    for (_, log, min_coverage), group in classes.items():
        A = np.stack([f.design for f in group])
        C = np.stack([f.pooled_model.coef for f in group])[:, :, None]
        T = np.stack([np.asarray(f.series.T, dtype=float) for f in group])
        p = np.stack([f.series.value for f in group])
        lo = np.array([f.pooled_model.T_min_K for f in group])[:, None]
        hi = np.array([f.pooled_model.T_max_K for f in group])[:, None]
        with np.errstate(invalid="ignore", over="ignore"):
            y = np.where((T >= lo) & (T <= hi), (A @ C)[:, :, 0], np.nan)
        with np.errstate(over="ignore"):
            curve = np.exp(y) if log else y
        with np.errstate(invalid="ignore", divide="ignore"):
            r = np.log(p) - np.log(curve)
        ok = np.isfinite(r)
        U = np.stack([f.rel_u for f in group])
        f2 = np.array([f.screen.floor ** 2 for f in group])[:, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            z = np.where(ok, r / np.sqrt(U ** 2 + f2), np.nan)
        stat = np.abs(_row_medians(z, ok))
        share = ok.sum(axis=1) / ok.shape[1]
        for i, f in enumerate(group):
            if np.isnan(z[i][ok[i]]).any():                    # a NaN z: as the one-file code
                f.scored = _median_z(f.screen, f.series.T, f.series.value, f.rel_u, f.th)
            elif not ok[i].any() or share[i] < min_coverage:
                f.scored = (math.inf, float(share[i]))
            else:
                f.scored = (float(stat[i]), float(share[i]))


def _emit(out: Findings, f: _File, lines: dict | None = None) -> None:
    """The finding of one planned file (its screen score known)."""
    fluid, th, s = f.fluid, f.th, f.series
    if f.rel_u is None:
        out.skip(fluid.fluid_id, f.subject, f"{len(s)} points: too few to diagnose")
        return
    if f.scored is not None and f.scored[0] <= th["z_max"]:
        _diagnose(out, fluid, s, f.subject, f.path, f.screen, th, f.rel_u, f.scored)
        return
    cons, reason = _consensus(fluid, f.group, f.path, f.pooled_w, th, lines)
    if cons is None:
        out.skip(fluid.fluid_id, f.subject, reason)
        return
    _diagnose(out, fluid, s, f.subject, f.path, cons, th, f.rel_u)


@register_check("data.unit-mixup", tags=("data", "units", "sources"), vectorised=True,
                purpose="A file off the consensus by a unit factor or offset gets the mix-up named.")
def unit_mixup(batch: CheckBatch, th) -> Findings:
    """Each file's pressures are compared with the consensus of its group: the robust fit of
    the other files, else the published reference equation of the fluid (found by its CAS
    number, whatever its id), else the one other file; a fluid's only file is compared with
    what its stated constants imply: the corresponding-states estimate (Lee-Kesler, from Tc,
    pc and ω, or ω through the normal boiling point or the triple point; B. I. Lee,
    M. G. Kesler, AIChE J. 21, 510 (1975)), else a stated point that ends its curve (pc at Tc,
    pt at Tt) — always on their common temperature range only. r = ln p − ln p_cons(T),
    normalised by sqrt(u_rel^2 + floor^2) (rel_floor for files and reference equations,
    estimate_rel_floor for estimates); the file is off when |median z| (of all points, or of
    the third with the lowest pressures, where offsets show most) exceeds z_max. Then each
    hypothesis is undone and the median recomputed: pressure units (kPa, bar, MPa, atm, mmHg,
    psi, hPa recorded as the declared unit: a factor), °C recorded as K (a 273.15 K offset),
    gauge recorded as absolute (an offset of one atmosphere, p_atm_Pa), IPTS-68 recorded as
    ITS-90 (the small ITS-90 − IPTS-68 difference, R. L. Rusby, J. Chem. Thermodyn. 23, 1153
    (1991), from memory). A hypothesis explains the file when the median collapses below z_max
    and below collapse times its first value; the message names it, e.g. "values look like kPa
    recorded as Pa (factor 1000)". An off file no hypothesis explains is a warning. The
    consensus carries its own uncertainty: the correlated part of the other files' stated u
    (or the budget's defaults) besides rel_floor.

    Usual causes: a column header with the wrong unit, a spreadsheet that converted units
    twice, a gauge reading, temperatures on the old scale.
    """
    out = Findings()
    todo = [(fluid, fluid.series(boundary, "pressure", solid), t)
            for fluid, t in ((f, th(f.fluid_id)) for f in batch)
            for boundary, solid, quantity in fluid.groups()
            if quantity == "pressure" and boundary in SPACES]
    # the pooled fits of all groups of several files, run together (the same numbers as one by one)
    several = [i for i, (_, group, _) in enumerate(todo) if len(set(group.file_path)) > 1]
    fits = robust_fits([_robust_args(*todo[i]) for i in several], designs=True)
    pooled = dict(zip(several, fits))
    files = [f for i, (fluid, group, t) in enumerate(todo)
             for f in _plan(fluid, group, t, pooled.get(i, (None, None, None, None)))]
    _screen_scores(files)       # every screened file against its group's pooled fit, together
    lines = _anchor_lines(files)  # the lines of files alone in their group, together
    for f in files:
        _emit(out, f, lines)
    return out
