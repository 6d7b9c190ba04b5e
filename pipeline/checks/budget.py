"""One uncertainty budget and one extrapolation policy for every check (DESIGN §5).

Real published data state uncertainties unevenly: a compilation gives Tc without one, a file of
points evaluated from one equation carries the equation's uncertainty on every point, a lab
campaign's points share its calibration. The checks decide with z-scores, so every number they
compare needs an honest standard uncertainty. This module supplies it in one place:

* **Defaults** (:class:`UncertaintyModel`): a stated value without an uncertainty gets the
  documented default of its quantity and source kind, read from the ``["uncertainty"]`` table
  of thresholds.toml (each default's reasoning and source is the comment beside it).
* **Correlated points** (:class:`CurveBudget`): the points of one file share a systematic
  (type B) part of their uncertainty (ISO/IEC Guide 98-3 (GUM), §5.2, correlated input
  quantities), so a fit's uncertainty at a temperature never falls below the correlated part of
  the best file covering it, however many points the file has; where the files scatter about
  the fit more than their correlated parts allow, the floor is expanded by their Birge ratio
  (R. T. Birge, Phys. Rev. 40, 207 (1932)).
* **Slopes**: a slope carries the fit covariance (delta method on d(dp/dT)/d(params)) and the
  same relative floor (a file's systematic relative offset scales its slope alike).
* **Extrapolation** (:class:`ExtrapolationPolicy`): a fitted curve is evaluated at most
  ``max(min_K, max_fraction * T)`` beyond the temperatures of its data; a check asking for more
  gets a skip whose reason names the policy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Mapping, Sequence

import numpy as np

from pipeline.checks.stats import group_medians, group_sums

UNCERTAINTY_TABLE = "uncertainty"
EXTRAPOLATION_TABLE = "extrapolation"
#: order of the per-kind arrays in the ["uncertainty"] table
SOURCE_KINDS = ("standard", "evaluated", "literature", "measurement", "estimate")
#: a source kind outside SOURCE_KINDS ('unknown', a typo in old data) is treated as this one
FALLBACK_KIND = "estimate"

#: quantity of a stated value -> (key in the ["uncertainty"] table, True if relative)
STATED_QUANTITY = {
    ("critical", "T_K"): ("T_critical_K", False),
    ("critical", "p_Pa"): ("p_critical_rel", True),
    ("critical", "rho_kg_m3"): ("rho_critical_rel", True),
    ("triple", "T_K"): ("T_triple_K", False),
    ("triple", "p_Pa"): ("p_triple_rel", True),
    ("triple", "rho_kg_m3"): ("rho_critical_rel", True),
    ("constant", "acentric_factor"): ("acentric_factor_abs", False),
    ("constant", "normal_boiling_T"): ("T_normal_boiling_K", False),
    ("constant", "h_fusion_triple"): ("h_fusion_rel", True),
    ("constant", "h_vaporization_triple"): ("h_vaporization_rel", True),
    ("constant", "h_sublimation_triple"): ("h_sublimation_rel", True),
}
#: observation quantity -> key of its relative default (observations that state no u)
OBSERVED_QUANTITY = {
    "pressure": "p_observed_rel", "rho_liquid": "rho_observed_rel",
    "rho_vapour": "rho_observed_rel", "rho_solid": "rho_observed_rel",
    "h_vaporization": "h_vaporization_rel", "h_fusion": "h_fusion_rel",
    "h_sublimation": "h_sublimation_rel",
}


def _kind_index(kind: str | None) -> int:
    return SOURCE_KINDS.index(kind if kind in SOURCE_KINDS else FALLBACK_KIND)


@dataclass(frozen=True)
class UncertaintyModel:
    """Default standard uncertainties (k = 1) per quantity and source kind, and the share of a
    file's stated uncertainty that its points have in common (``correlated_fraction``)."""

    table: Mapping[str, Any]

    def default(self, key: str, kind: str | None) -> float:
        """The default of ``key`` (a table key) for a source of ``kind``."""
        return float(self.table[key][_kind_index(kind)])

    def stated(self, what: str, name: str, value: float, u: float | None,
               kind: str | None) -> tuple[float, bool]:
        """(u, defaulted) for a stated value: its own u when stated (> 0), else the default.

        ``what`` is ``critical``, ``triple`` or ``constant``; ``name`` the column (``T_K``,
        ``p_Pa``, ``rho_kg_m3``) or the constant's name.
        """
        if u is not None and math.isfinite(u) and u > 0:
            return float(u), False
        if value is None or not math.isfinite(value):
            return math.nan, False
        key, relative = STATED_QUANTITY[(what, name)]
        d = self.default(key, kind)
        return (d * abs(value) if relative else d), True

    def observed_rel(self, quantity: str, kind: str | None) -> float:
        """Relative default of an observation of ``quantity`` that states no uncertainty."""
        return self.default(OBSERVED_QUANTITY.get(quantity, "p_observed_rel"), kind)

    def observed_abs(self, quantity: str, kind: str | None) -> float:
        """Absolute floor [SI] added to the u of an observation of ``quantity`` (pressures)."""
        return self.default("p_observed_abs_Pa", kind) if quantity == "pressure" else 0.0

    def correlated_fraction(self, kind: str | None) -> float:
        return float(self.table["correlated_fraction"][_kind_index(kind)])

    @property
    def birge_expansion(self) -> bool:
        return bool(self.table.get("birge_expansion", True))


@dataclass(frozen=True)
class ExtrapolationPolicy:
    """How far beyond its data a fitted curve may be evaluated: max(min_K, max_fraction * T)."""

    max_fraction: float
    min_K: float

    def allowed(self, T: float) -> float:
        """Largest distance [K] beyond the data at which the curve may be evaluated at ``T``."""
        return max(self.min_K, self.max_fraction * abs(T))

    def describe(self, T: float) -> str:
        return (f"the extrapolation policy allows {self.allowed(T):.3g} K (extrapolation."
                f"max_fraction = {self.max_fraction:g} of T, at least min_K = {self.min_K:g} K)")


@dataclass(frozen=True)
class Budget:
    """The uncertainty model and the extrapolation policy in force for one fluid."""

    uncertainty: UncertaintyModel
    extrapolation: ExtrapolationPolicy

    @classmethod
    def from_tables(cls, uncertainty: Mapping[str, Any], extrapolation: Mapping[str, Any]) -> "Budget":
        return cls(UncertaintyModel(dict(uncertainty)),
                   ExtrapolationPolicy(float(extrapolation["max_fraction"]),
                                       float(extrapolation["min_K"])))

    @classmethod
    def from_thresholds(cls, thresholds, fluid_id: str | None = None) -> "Budget":
        return cls.from_tables(thresholds.for_check(UNCERTAINTY_TABLE, fluid_id),
                               thresholds.for_check(EXTRAPOLATION_TABLE, fluid_id))


@lru_cache(maxsize=1)
def default_budget() -> Budget:
    """The package defaults (thresholds.toml), for fluids built without a run's thresholds."""
    from pipeline.checks.thresholds import Thresholds

    return Budget.from_thresholds(Thresholds.load(severities={}))


# -- a fitted curve's budget --------------------------------------------------------------------
@dataclass(frozen=True)
class FileShare:
    """One file's contribution to a curve: its temperature span and correlated relative u."""

    path: str
    T_min_K: float
    T_max_K: float
    correlated_rel: float      # the systematic (type B) relative standard uncertainty
    random_rel: float          # the rest, per point
    n: int
    offset_rel: float = math.nan   # weighted mean relative residual about the fit


@dataclass(frozen=True)
class CurveBudget:
    """Floor of a fitted curve's relative uncertainty, from the files it was fitted to."""

    files: tuple[FileShare, ...] = ()
    birge_ratio: float = math.nan
    expansion: float = 1.0
    policy: ExtrapolationPolicy | None = None

    def floor_rel(self, T: float) -> float:
        """Relative floor at ``T``: the correlated part of the best file covering T (the file
        nearest in T when none does), times the Birge expansion."""
        if not self.files:
            return 0.0
        margin = self.policy.allowed(T) if self.policy else 0.0
        covering = [f for f in self.files if f.T_min_K - margin <= T <= f.T_max_K + margin]
        if covering:
            best = min(f.correlated_rel for f in covering)
        else:
            best = min(self.files, key=lambda f: min(abs(T - f.T_min_K), abs(T - f.T_max_K))).correlated_rel
        return best * self.expansion

    def floor_rel_array(self, T: np.ndarray) -> np.ndarray:
        """:meth:`floor_rel` at every temperature of ``T`` (finite), the same numbers."""
        T = np.asarray(T, dtype=float)
        if not self.files:
            return np.zeros(len(T))
        policy = self.policy
        margin = (np.maximum(policy.min_K, policy.max_fraction * np.abs(T)) if policy
                  else np.zeros(len(T)))
        lo = np.array([f.T_min_K for f in self.files])[:, None]
        hi = np.array([f.T_max_K for f in self.files])[:, None]
        corr = np.array([f.correlated_rel for f in self.files])
        covering = (lo - margin <= T) & (T <= hi + margin)
        covered = np.where(covering, corr[:, None], np.inf).min(axis=0)
        nearest = corr[np.argmin(np.minimum(np.abs(T - lo), np.abs(T - hi)), axis=0)]
        return np.where(covering.any(axis=0), covered, nearest) * self.expansion

    def evidence(self) -> dict:
        return {"files": [{"file": f.path, "T_range_K": [f.T_min_K, f.T_max_K],
                           "correlated_rel_u": f.correlated_rel, "n": f.n,
                           "offset_rel": None if math.isnan(f.offset_rel) else f.offset_rel}
                          for f in self.files],
                "birge_ratio": None if math.isnan(self.birge_ratio) else self.birge_ratio,
                "expansion": self.expansion}


def floor_rel_rows(budgets: Sequence[CurveBudget], owner: np.ndarray, T: np.ndarray) -> np.ndarray:
    """``budgets[owner[i]].floor_rel_array`` at ``T[i]`` for every row i, all rows at once.

    The same numbers: the files of all budgets side by side (a budget with fewer files has
    empty places that never cover and are never nearest), then the same comparisons, minima
    and products per row (minima and comparisons do not round).
    """
    T = np.asarray(T, dtype=float)
    owner = np.asarray(owner, dtype=np.intp)
    n_files = max((len(b.files) for b in budgets), default=0)
    out = np.zeros(len(T))
    if not n_files or not len(T):
        return out
    lo = np.full((len(budgets), n_files), np.nan)
    hi, corr = lo.copy(), np.full((len(budgets), n_files), np.inf)
    place = np.zeros((len(budgets), n_files), dtype=bool)
    min_K, fraction = np.zeros(len(budgets)), np.zeros(len(budgets))
    policy, expansion = np.zeros(len(budgets), dtype=bool), np.ones(len(budgets))
    for i, b in enumerate(budgets):
        k = len(b.files)
        place[i, :k] = True
        lo[i, :k] = [f.T_min_K for f in b.files]
        hi[i, :k] = [f.T_max_K for f in b.files]
        corr[i, :k] = [f.correlated_rel for f in b.files]
        if b.policy is not None:
            policy[i], min_K[i], fraction[i] = True, b.policy.min_K, b.policy.max_fraction
        expansion[i] = b.expansion
    margin = np.where(policy[owner], np.maximum(min_K[owner], fraction[owner] * np.abs(T)), 0.0)
    Tc, m = T[:, None], margin[:, None]
    lo_r, hi_r, corr_r = lo[owner], hi[owner], corr[owner]
    covering = (lo_r - m <= Tc) & (Tc <= hi_r + m)
    covered = np.where(covering, corr_r, np.inf).min(axis=1)
    dist = np.where(place[owner], np.minimum(np.abs(Tc - lo_r), np.abs(Tc - hi_r)), np.inf)
    nearest = corr_r[np.arange(len(T)), np.argmin(dist, axis=1)]
    floor = np.where(covering.any(axis=1), covered, nearest) * expansion[owner]
    files = np.array([len(b.files) > 0 for b in budgets], dtype=bool)[owner]
    out[files] = floor[files]
    return out


def curve_budget(series, fitted: np.ndarray, model: UncertaintyModel,
                 policy: ExtrapolationPolicy, kept: np.ndarray | None = None) -> CurveBudget:
    """The :class:`CurveBudget` of a fitted curve from the observations it was fitted to.

    ``series`` is the group's :class:`~pipeline.checks.inputs.ObsSeries`; ``kept`` the positions
    of the observations that enter (fit outliers and non-finite values are left out; computed
    when None) and ``fitted`` the fitted curve's values at them (extrapolating).
    """
    if kept is None:
        kept = np.flatnonzero(~series.is_outlier.astype(bool) & np.isfinite(series.value.astype(float)))
    return curve_budgets([(series.take(kept), fitted, model, policy)])[0]


def curve_budgets(parts) -> list[CurveBudget]:
    """The :class:`CurveBudget` of many fitted curves at once.

    ``parts`` holds, per curve, the series of the observations that enter its budget, the
    fitted values at them, the uncertainty model and the extrapolation policy. Every file's
    statistics (median relative u, mean relative residual, T range) are computed for all
    files of all curves together, with the arithmetic of the same statistics file by file
    (:func:`~pipeline.checks.stats.group_medians`, :func:`~pipeline.checks.stats.group_sums`).
    """
    out: list[CurveBudget | None] = [None] * len(parts)
    full = [i for i, p in enumerate(parts) if len(p[0])]
    for i, (series, _, _, policy) in enumerate(parts):
        if not len(series):
            out[i] = CurveBudget(policy=policy)
    if not full:
        return out
    series = [parts[i][0] for i in full]
    sizes = np.array([len(s) for s in series])
    part = np.repeat(np.arange(len(full)), sizes)
    T = np.concatenate([s.T for s in series]).astype(float)
    y = np.concatenate([s.value for s in series]).astype(float)
    u = np.concatenate([s.u_value_si for s in series]).astype(float)
    fitted = np.concatenate([np.asarray(parts[i][1], dtype=float) for i in full])
    kinds = np.concatenate([s.source_kind for s in series])
    paths = np.concatenate([s.file_path for s in series])
    codes = np.concatenate([s.file_code for s in series])
    # the default relative u of each row's quantity and source kind, in each curve's model
    kind_codes = np.concatenate([s.kind_code for s in series])
    pair = part * (int(kind_codes.max()) + 2) + (kind_codes + 1)
    pairs, at, back = np.unique(pair, return_index=True, return_inverse=True)
    lut = np.array([parts[full[part[r]]][2].observed_rel(series[part[r]].quantity, kinds[r])
                    for r in at])
    defaults = lut[back]
    stated = np.isfinite(u) & (u > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(stated, np.abs(u / np.where(y != 0, y, np.nan)), defaults)
        resid = y / fitted - 1.0
    # files: one segment per (curve, file), in the order files first appear within a curve
    key = part * (int(codes.max()) + 2) + (codes + 1)
    uniq, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    by_first = np.argsort(first, kind="stable")          # curve by curve, files first-seen
    seg_of_uniq = np.empty(len(uniq), dtype=np.intp)
    seg_of_uniq[by_first] = np.arange(len(uniq))
    seg = seg_of_uniq[inverse]
    n_seg = len(uniq)
    first_row = first[by_first]
    order = np.argsort(seg, kind="stable")               # rows segment by segment, in order
    counts = np.bincount(seg, minlength=n_seg)
    starts = np.r_[0, np.cumsum(counts)[:-1]]
    T_seg = T[order]
    T_min = np.minimum.reduceat(T_seg, starts)
    T_max = np.maximum.reduceat(T_seg, starts)
    r_med = group_medians(rel, seg, n_seg)
    finite = np.isfinite(resid)
    ok_order = order[finite[order]]                       # the finite residuals, in order
    ok_counts = np.bincount(seg[finite], minlength=n_seg)
    ok_starts = np.r_[0, np.cumsum(ok_counts)[:-1]]
    offsets = np.full(n_seg, np.nan)
    has = ok_counts > 0
    offsets[has] = group_sums(resid[ok_order], ok_starts[has], ok_counts[has]) / ok_counts[has]
    seg_part = part[first_row]
    shares: list[list[FileShare]] = [[] for _ in full]
    for k in range(n_seg):
        j = int(seg_part[k])
        frac = parts[full[j]][2].correlated_fraction(kinds[first_row[k]])
        r = float(r_med[k])
        corr, rand = frac * r, math.sqrt(max(1.0 - frac ** 2, 0.0)) * r
        shares[j].append(FileShare(str(paths[first_row[k]]), float(T_min[k]), float(T_max[k]),
                                   corr, rand, int(counts[k]), float(offsets[k])))
    for j, i in enumerate(full):
        out[i] = _birge(tuple(shares[j]), parts[i][2], parts[i][3])
    return out


def _birge(shares: tuple[FileShare, ...], model: UncertaintyModel,
           policy: ExtrapolationPolicy) -> CurveBudget:
    """The curve budget of ``shares``: the Birge ratio of the files' offsets and the expansion."""
    birge, expansion = math.nan, 1.0
    usable = [f for f in shares if math.isfinite(f.offset_rel) and f.correlated_rel + f.random_rel > 0]
    if len(usable) >= 2:   # the files' scatter about their common offset (between-file chi2)
        var = np.array([f.correlated_rel ** 2 + f.random_rel ** 2 / f.n for f in usable])
        d = np.array([f.offset_rel for f in usable])
        mean = float(np.sum(d / var) / np.sum(1.0 / var))
        birge = math.sqrt(float(np.sum((d - mean) ** 2 / var)) / (len(usable) - 1))
        if model.birge_expansion:
            expansion = max(1.0, birge)
    return CurveBudget(shares, birge, expansion, policy)


@dataclass(frozen=True)
class CurvePoint:
    """A fitted curve evaluated at one temperature with its full budget (SI units)."""

    T_K: float
    value: float
    slope: float
    u: float              # standard uncertainty of the value: covariance and floor combined
    u_slope: float        # standard uncertainty of the slope
    u_cov: float          # the covariance part of u alone
    floor_rel: float      # the relative floor applied
    beyond_K: float       # distance outside the data range (0 inside)

    def evidence(self) -> dict:
        return {"T_K": self.T_K, "value": self.value, "slope": self.slope, "u": self.u,
                "u_slope": self.u_slope, "u_covariance": self.u_cov,
                "floor_rel": self.floor_rel, "extrapolated_K": self.beyond_K}


@dataclass(frozen=True)
class Reach:
    """Whether a curve may be evaluated at T under the policy; ``reason`` when not."""

    ok: bool
    beyond_K: float
    reason: str = ""
    extra: dict = field(default_factory=dict)


def reach(T_min_K: float, T_max_K: float, T: float, policy: ExtrapolationPolicy,
          label: str) -> Reach:
    """The policy applied to a curve fitted over [T_min_K, T_max_K] evaluated at ``T``."""
    beyond = max(T_min_K - T, T - T_max_K, 0.0)
    if beyond <= policy.allowed(T):
        return Reach(True, beyond)
    side = "below" if T < T_min_K else "above"
    return Reach(False, beyond,
                 f"{label} data span {T_min_K:.6g}-{T_max_K:.6g} K; T = {T:.6g} K lies "
                 f"{beyond:.3g} K {side} them and {policy.describe(T)}")
