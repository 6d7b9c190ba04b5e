"""What the checks read: per fluid, observations, stated points and constants, current fits.

:func:`load_fluid_data` reads the store with five set-based queries (fluids, observations with
their source kind and fit residuals, fixed points, stated constants, current fits), whatever
the number of fluids, and splits the results per fluid. :meth:`FluidData.build` makes the same
object from in-memory published data (tests, benchmarks).

Checks read observations through :meth:`FluidData.series`, which returns numpy arrays
(:class:`ObsSeries`) so that per-fluid work stays out of pandas.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from pipeline.checks.budget import (
    Budget,
    CurveBudget,
    CurvePoint,
    curve_budget,
    default_budget,
    reach,
)
from pipeline.checks.points import (
    StatedPoint,
    boundary_between,
    consensus_constant,
    consensus_points,
    curve_label,
)
from pipeline.errors import CheckError

CurveKey = tuple[str, str, str]  # (boundary, solid_phase, quantity)

#: Observation columns and the default used by :meth:`FluidData.build` when one is missing.
OBS_COLUMNS: dict[str, Any] = {
    "obs_id": None, "boundary": None, "solid_phase": "", "quantity": "pressure",
    "T_K": None, "u_T_K": math.nan, "value_si": None, "u_value_si": math.nan,
    "source_id": "memory", "source_kind": "literature", "file_path": None, "file_sha256": "",
    "row_number": None, "T_unit": "K", "T_scale": "ITS-90", "value_unit": None,
    "fit_id": None, "z": math.nan, "is_outlier": False, "excluded_by": None,
}
FIXED_POINT_COLUMNS: dict[str, Any] = {
    "fp_id": None, "kind": None, "phases": None, "T_K": None, "u_T_K": math.nan,
    "p_Pa": math.nan, "u_p_Pa": math.nan, "rho_kg_m3": math.nan, "u_rho_kg_m3": math.nan,
    "source_id": "memory", "source_kind": "literature", "file_path": "memory/batch.toml",
}
CONSTANT_COLUMNS: dict[str, Any] = {
    "const_id": None, "name": None, "value_si": None, "u_si": math.nan, "si_unit": "",
    "source_id": "memory", "source_kind": "literature", "file_path": "memory/batch.toml",
}
SI_UNIT = {"pressure": "Pa", "rho_liquid": "kg/m^3", "rho_vapour": "kg/m^3",
           "rho_solid": "kg/m^3", "h_vaporization": "J/mol", "h_fusion": "J/mol",
           "h_sublimation": "J/mol"}
_FLOAT_OBS = ("T_K", "u_T_K", "value_si", "u_value_si", "z")
#: text columns kept as numpy object arrays: checks index them per fluid, and pandas' Arrow
#: strings make each such access an Arrow 'take' (measured ~10x slower in the benchmark)
_TEXT_OBS = ("boundary", "solid_phase", "quantity", "source_id", "source_kind", "file_path",
             "file_sha256", "T_unit", "T_scale", "value_unit", "fit_id", "excluded_by")


@dataclass(frozen=True)
class FittedCurve:
    """A current fit: the correlation :class:`~pipeline.correlations.Curve` and its metadata."""

    curve: Any
    fit_id: str | None = None
    form: str | None = None
    n_used: int | None = None
    reduced_chi2: float | None = None
    weighted_rms: float | None = None
    input_hash: str | None = None

    @property
    def T_min_K(self) -> float:
        return float(self.curve.T_min_K)

    @property
    def T_max_K(self) -> float:
        return float(self.curve.T_max_K)

    def covers(self, T: float, margin_K: float = 0.0) -> bool:
        """True when ``T`` lies inside the fitted range widened by ``margin_K`` [K]."""
        return self.T_min_K - margin_K <= T <= self.T_max_K + margin_K

    def value(self, T, extrapolate: bool = False):
        return self.curve.value(T, extrapolate=extrapolate)

    def slope(self, T, extrapolate: bool = False):
        return self.curve.slope(T, extrapolate=extrapolate)

    def u(self, T, extrapolate: bool = False):
        """Standard uncertainty of the fitted value (0 where the fit has no covariance)."""
        if getattr(self.curve, "covariance", None) is None:
            return np.zeros_like(np.asarray(T, dtype=float))
        return np.nan_to_num(self.curve.u(T, extrapolate=extrapolate), nan=0.0)

    def slope_u(self, T: float) -> float:
        """Standard uncertainty of the slope at ``T`` from the covariance (0 without one).

        Delta method on d(slope)/d(params), the parameter Jacobian differentiated in T by
        central differences (one-sided where the form ends, e.g. at a reference temperature).
        """
        cov = getattr(self.curve, "covariance", None)
        if cov is None:
            return 0.0
        T = self._end(T)
        h = 1e-5 * max(abs(T), 1.0)
        J = {d: np.asarray(self.curve.jacobian(T + d * h), dtype=float) for d in (-1, 0, 1)}
        for lo, hi in ((-1, 1), (-1, 0), (0, 1)):
            dJ = (J[hi] - J[lo]) / ((hi - lo) * h)
            if np.all(np.isfinite(dJ)):
                var = float(dJ @ np.asarray(cov, dtype=float) @ dJ)
                return math.sqrt(max(var, 0.0))
        return 0.0

    def _end(self, T: float) -> float:
        """``T`` where the form is defined there, else the nearest end of the fitted range."""
        if math.isfinite(float(self.value(T, extrapolate=True))):
            return T
        return min(max(T, self.T_min_K), self.T_max_K)

    def near(self, T: float) -> tuple[float, float, float]:
        """(value, slope, u) at a single T just outside (or inside) the fitted range.

        The form's own extrapolation is used where it is defined; where it is not (a fractional
        power of 1 − T/T_ref a rounding error past T_ref), the curve is continued from the
        nearest end of its range: along Clausius-Clapeyron (ln p linear in 1/T) for forms
        fitted in ln p, linearly for the others (melting curves). The uncertainty is that at
        the end. Callers bound how far from the range T may lie.
        """
        end = self._end(T)
        v_end, s_end = float(self.value(end, extrapolate=True)), float(self.slope(end, extrapolate=True))
        u_end = float(self.u(end, extrapolate=True))
        if end == T:
            return v_end, s_end, u_end
        if getattr(self.curve.correlation_form, "link", "") == "log" and v_end > 0:
            b = -end ** 2 * s_end / v_end          # d ln p / d(1/T) at the end
            value = v_end * math.exp(b * (1.0 / T - 1.0 / end))
            return value, -value * b / T ** 2, u_end * value / v_end
        return v_end + s_end * (T - end), s_end, u_end

    def evidence(self) -> dict:
        return {"fit_id": self.fit_id, "form": self.form or getattr(self.curve, "form", None),
                "T_min_K": self.T_min_K, "T_max_K": self.T_max_K}


@dataclass(frozen=True, eq=False)
class ObsSeries:
    """Observations of one (boundary, solid_phase, quantity) group as numpy arrays."""

    boundary: str
    solid_phase: str
    quantity: str
    columns: Mapping[str, np.ndarray]

    def __len__(self) -> int:
        return len(self.columns["obs_id"])

    def __getattr__(self, name: str) -> np.ndarray:
        try:
            return self.__dict__["columns"][name]
        except KeyError:
            raise AttributeError(name) from None

    @property
    def T(self) -> np.ndarray:
        return self.columns["T_K"]

    @property
    def value(self) -> np.ndarray:
        return self.columns["value_si"]

    def take(self, index) -> "ObsSeries":
        return ObsSeries(self.boundary, self.solid_phase, self.quantity,
                         {k: v[index] for k, v in self.columns.items()})

    def by_file(self) -> dict[str, "ObsSeries"]:
        """One series per raw file, in first-seen order."""
        paths = self.columns["file_path"]
        return {p: self.take(np.flatnonzero(paths == p)) for p in dict.fromkeys(paths)}

    def sorted_by_T(self) -> "ObsSeries":
        return self.take(np.argsort(self.T, kind="stable"))

    def refs(self, index=None, limit: int = 20) -> list[dict]:
        """Evidence entries (obs id, file, row, T, value) for the rows at ``index``."""
        idx = np.arange(len(self)) if index is None else np.asarray(index)
        cols = self.columns
        return [{"obs_id": int(cols["obs_id"][i]), "file": str(cols["file_path"][i]),
                 "row": int(cols["row_number"][i]), "T_K": float(cols["T_K"][i]),
                 "value_si": float(cols["value_si"][i])} for i in idx[:limit]]


@dataclass(eq=False)
class FluidData:
    """Everything the checks read about one fluid (SI units throughout)."""

    fluid_id: str
    molar_mass: float                       # [kg/mol]
    observations: pd.DataFrame              # OBS_COLUMNS
    fixed_points: pd.DataFrame              # FIXED_POINT_COLUMNS
    constants: pd.DataFrame                 # CONSTANT_COLUMNS
    curves: dict[CurveKey, FittedCurve] = field(default_factory=dict)
    cas_rn: str = ""                        # CAS registry number: identity for reference equations
    budget: Budget = field(default_factory=default_budget)

    def __repr__(self) -> str:
        return (f"<FluidData {self.fluid_id}: {len(self.observations)} observations, "
                f"{len(self.fixed_points)} fixed points, {len(self.curves)} curves>")

    # -- observations --------------------------------------------------------------------------
    @cached_property
    def _groups(self) -> dict[CurveKey, np.ndarray]:
        obs = self.observations
        if obs.empty:
            return {}
        key = (obs["boundary"].to_numpy(object) + "\x1f" + obs["solid_phase"].to_numpy(object)
               + "\x1f" + obs["quantity"].to_numpy(object))
        uniq, inverse = np.unique(key.astype(str), return_inverse=True)
        order = np.argsort(inverse, kind="stable")
        bounds = np.searchsorted(inverse[order], np.arange(len(uniq) + 1))
        return {tuple(u.split("\x1f")): order[bounds[i]:bounds[i + 1]] for i, u in enumerate(uniq)}

    @cached_property
    def _columns(self) -> dict[str, np.ndarray]:
        return {c: self.observations[c].to_numpy() for c in OBS_COLUMNS}

    def groups(self) -> list[CurveKey]:
        """The (boundary, solid_phase, quantity) groups that have observations."""
        return sorted(self._groups)

    @cached_property
    def _series_cache(self) -> dict[CurveKey, ObsSeries]:
        return {}

    def series(self, boundary: str, quantity: str = "pressure", solid_phase: str = "") -> ObsSeries:
        """Observations of one group (an empty series when there are none); cached."""
        key = (boundary, solid_phase, quantity)
        if key not in self._series_cache:
            index = self._groups.get(key, np.zeros(0, dtype=int))
            self._series_cache[key] = ObsSeries(boundary, solid_phase, quantity,
                                                {k: v[index] for k, v in self._columns.items()})
        return self._series_cache[key]

    # -- the uncertainty budget ----------------------------------------------------------------
    _BUDGET_CACHES = ("fixed_point_records", "constant_records", "triple_points", "critical_point",
                      "_curve_budgets")

    def use_budget(self, budget: Budget) -> None:
        """Judge this fluid with ``budget`` (the run's uncertainty defaults and policy)."""
        if budget != self.budget:
            self.budget = budget
            for name in self._BUDGET_CACHES:
                self.__dict__.pop(name, None)

    @cached_property
    def _curve_budgets(self) -> dict[CurveKey, CurveBudget]:
        return {}

    def curve_budget(self, key: CurveKey) -> CurveBudget:
        """Floor of the fitted curve ``key``'s uncertainty from the files it was fitted to."""
        if key not in self._curve_budgets:
            fitted = self.curves[key]
            self._curve_budgets[key] = curve_budget(
                self.series(key[0], key[2], key[1]),
                lambda T: fitted.value(T, extrapolate=True), self.budget.uncertainty,
                self.budget.extrapolation)
        return self._curve_budgets[key]

    def at(self, key: CurveKey, T: float) -> tuple[CurvePoint | None, str]:
        """The fitted curve ``key`` at ``T`` with its full budget, or (None, why not).

        Honours the one extrapolation policy: a curve is not evaluated further beyond its data
        than the policy allows; the reason names the policy.
        """
        fitted = self.curves.get(key)
        label = curve_label(key)
        if fitted is None:
            return None, f"no fitted {label} curve"
        r = reach(fitted.T_min_K, fitted.T_max_K, T, self.budget.extrapolation, label)
        if not r.ok:
            return None, r.reason
        value, slope, u_cov = fitted.near(T)
        if not (math.isfinite(value) and math.isfinite(slope)):
            return None, f"the {label} fit's form is undefined at T = {T:.6g} K"
        floor = self.curve_budget(key).floor_rel(T)
        u = math.hypot(u_cov, floor * abs(value))
        u_slope = math.hypot(fitted.slope_u(T), floor * abs(slope))
        return CurvePoint(T, value, slope, u, u_slope, u_cov, floor, r.beyond_K), ""

    # -- curves --------------------------------------------------------------------------------
    def curve(self, boundary: str, solid_phase: str = "", quantity: str = "pressure") -> FittedCurve | None:
        return self.curves.get((boundary, solid_phase, quantity))

    def curve_between(self, a: str, b: str,
                      quantity: str = "pressure") -> tuple[CurveKey, FittedCurve | None]:
        """The curve separating phases ``a`` and ``b`` (key of the first spelling tried, curve or None)."""
        boundary, labels = boundary_between(a, b)
        for label in labels:
            found = self.curve(boundary, label, quantity)
            if found is not None:
                return (boundary, label, quantity), found
        return (boundary, labels[0], quantity), None

    def pressure_curves(self) -> dict[CurveKey, FittedCurve]:
        return {k: c for k, c in self.curves.items() if k[2] == "pressure"}

    # -- stated values -------------------------------------------------------------------------
    @cached_property
    def fixed_point_records(self) -> list[dict]:
        """Stated fixed points as dicts (one per source statement), every stated value with a
        standard uncertainty: its own, else the budget's default (named in ``u_defaulted``)."""
        model = self.budget.uncertainty
        out = []
        for r in _records(self.fixed_points):
            r["u_defaulted"] = []
            for col in ("T_K", "p_Pa", "rho_kg_m3"):
                u, defaulted = model.stated(r["kind"], col, r[col], r["u_" + col], r["source_kind"])
                r["u_" + col] = u
                if defaulted:
                    r["u_defaulted"].append(col)
            out.append(r)
        return out

    @cached_property
    def constant_records(self) -> list[dict]:
        """Stated constants as dicts (one per source statement), with the budget's default
        uncertainty where none is stated (``u_defaulted``)."""
        model = self.budget.uncertainty
        out = []
        for r in _records(self.constants):
            try:
                r["u_si"], r["u_defaulted"] = model.stated("constant", r["name"], r["value_si"],
                                                           r["u_si"], r["source_kind"])
            except KeyError:  # a constant the budget has no default for keeps what it states
                r["u_defaulted"] = False
            out.append(r)
        return out

    @cached_property
    def triple_points(self) -> list[StatedPoint]:
        return consensus_points(self.fixed_point_records, "triple")

    @cached_property
    def critical_point(self) -> StatedPoint | None:
        points = consensus_points(self.fixed_point_records, "critical")
        return points[0] if points else None

    def vapour_triple_point(self, solid: str | None = None) -> StatedPoint | None:
        """The triple point where vapour, liquid and a solid meet (``solid`` label if given)."""
        for tp in self.triple_points:
            if tp.has_vapour and "liquid" in tp.phases and (solid is None or solid in tp.phases):
                return tp
        return None

    def constant(self, name: str) -> tuple[float, float, tuple[str, ...]] | None:
        """Consensus (value, u, sources) of a stated constant, or None."""
        return consensus_constant(self.constant_records, name)

    # -- provenance ----------------------------------------------------------------------------
    @cached_property
    def input_hash(self) -> str:
        """SHA-256 over the fluid's inputs: observations, fixed points, constants, fits."""
        h = hashlib.sha256(self.fluid_id.encode())
        cols = self._columns
        for col in ("obs_id", "T_K", "value_si"):
            h.update(np.ascontiguousarray(cols[col], dtype=float).tobytes())
        stated = [[r.get(c) for c in ("fp_id", "T_K", "p_Pa", "rho_kg_m3")] for r in self.fixed_point_records]
        stated += [[r.get(c) for c in ("const_id", "value_si")] for r in self.constant_records]
        h.update(repr(stated).encode())
        fits = sorted((str(k), c.fit_id or "", c.input_hash or "") for k, c in self.curves.items())
        h.update(json.dumps(fits).encode())
        return h.hexdigest()

    # -- construction from memory --------------------------------------------------------------
    @classmethod
    def build(cls, fluid_id: str, molar_mass: float, *, observations=None, fixed_points=None,
              constants=None, curves: Mapping[CurveKey, Any] | None = None,
              cas_rn: str = "") -> "FluidData":
        """A fluid from in-memory data; missing columns get the defaults of ``*_COLUMNS``.

        ``curves`` values may be :class:`FittedCurve` or bare correlation curves.
        """
        return cls(fluid_id, float(molar_mass), normalise_observations(observations),
                   _frame(fixed_points, FIXED_POINT_COLUMNS, "fp_id"),
                   _frame(constants, CONSTANT_COLUMNS, "const_id"), _fitted(fluid_id, curves),
                   cas_rn=cas_rn)


def _fitted(fluid_id: str, curves: Mapping[CurveKey, Any] | None) -> dict[CurveKey, FittedCurve]:
    """Curves as FittedCurve (bare correlation curves get a descriptive fit id)."""
    return {tuple(k): c if isinstance(c, FittedCurve) else FittedCurve(c, fit_id=f"{fluid_id}:{'/'.join(k)}")
            for k, c in (curves or {}).items()}


def _records(frame: pd.DataFrame) -> list[dict]:
    """Rows as dicts of plain Python values (``to_dict("records")`` is ~20x slower here)."""
    cols = list(frame.columns)
    return [dict(zip(cols, row)) for row in zip(*(frame[c].tolist() for c in cols))]


def _frame(rows, columns: Mapping[str, Any], id_col: str, keep: Sequence[str] = ()) -> pd.DataFrame:
    """``rows`` with every column of ``columns`` (defaults filled) plus the ``keep`` columns."""
    frame = pd.DataFrame(rows if rows is not None else [], columns=None)
    for col, default in columns.items():
        if col not in frame:
            frame[col] = default
        elif isinstance(default, (str, bool)) and frame[col].isna().any():
            frame[col] = frame[col].where(frame[col].notna(), default)
    if len(frame) and frame[id_col].isna().any():
        frame[id_col] = np.arange(1, len(frame) + 1)
    frame = frame[list(keep) + list(columns)].reset_index(drop=True)
    text = [c for c in frame if pd.api.types.is_string_dtype(frame[c]) and frame[c].dtype != object]
    return frame.astype({c: object for c in text}) if text else frame


def normalise_observations(rows, keep: Sequence[str] = ()) -> pd.DataFrame:
    """An observation frame with every :data:`OBS_COLUMNS` column, ids and row numbers filled."""
    frame = _frame(rows, OBS_COLUMNS, "obs_id", keep)
    if frame.empty:
        return frame.astype({c: float for c in _FLOAT_OBS})
    missing = frame["file_path"].isna()
    frame.loc[missing, "file_path"] = "memory/" + frame.loc[missing, "source_id"].astype(str) + ".csv"
    if frame["row_number"].isna().any():
        frame["row_number"] = frame.groupby("file_path").cumcount() + 1
    unit = frame["quantity"].map(SI_UNIT)
    frame["value_unit"] = frame["value_unit"].where(frame["value_unit"].notna(), unit)
    frame = frame.astype({c: float for c in _FLOAT_OBS})
    frame["is_outlier"] = frame["is_outlier"].fillna(False).astype(bool)
    frame["obs_id"] = frame["obs_id"].astype("int64")
    frame["row_number"] = frame["row_number"].astype("int64")
    return frame.astype({c: object for c in _TEXT_OBS})


def sample_series(curve, T: Sequence[float], *, boundary: str, quantity: str = "pressure",
                  solid_phase: str = "", source_id: str = "memory", source_kind: str = "literature",
                  file_path: str | None = None, u_rel: float | None = None,
                  u_T_K: float | None = None, value_unit: str | None = None,
                  scale: float = 1.0, first_obs_id: int = 1) -> pd.DataFrame:
    """Observations sampled from ``curve`` (a Curve or any callable T -> value) at ``T``.

    ``scale`` multiplies the values (to plant unit mix-ups); ``u_rel`` is a relative standard
    uncertainty of the value.
    """
    T = np.asarray(T, dtype=float)
    f = curve.value if hasattr(curve, "value") else curve
    values = np.asarray(f(T), dtype=float) * scale
    n = len(T)
    return pd.DataFrame({
        "obs_id": np.arange(first_obs_id, first_obs_id + n), "boundary": boundary,
        "solid_phase": solid_phase, "quantity": quantity, "T_K": T,
        "u_T_K": math.nan if u_T_K is None else u_T_K, "value_si": values,
        "u_value_si": np.abs(values) * u_rel if u_rel is not None else math.nan,
        "source_id": source_id, "source_kind": source_kind,
        "file_path": file_path or f"memory/{source_id}.csv", "row_number": np.arange(1, n + 1),
        "value_unit": value_unit or SI_UNIT[quantity],
    })


@dataclass(eq=False)
class CheckBatch:
    """The fluids of one run, with the stacked tables vectorised checks work on."""

    fluids: dict[str, FluidData]

    def __iter__(self):
        return iter(self.fluids.values())

    def __len__(self) -> int:
        return len(self.fluids)

    @property
    def ids(self) -> list[str]:
        return list(self.fluids)

    def _stack(self, attr: str) -> pd.DataFrame:
        frames = [getattr(f, attr) for f in self.fluids.values()]
        if not frames:
            return pd.DataFrame({"fluid_id": []})
        stacked = pd.concat(frames, keys=self.ids, names=["fluid_id", "_row"])
        return stacked.reset_index(level="fluid_id").reset_index(drop=True)

    @cached_property
    def observations(self) -> pd.DataFrame:
        """All observations with a ``fluid_id`` column."""
        return self._stack("observations")

    @cached_property
    def fixed_points(self) -> pd.DataFrame:
        return self._stack("fixed_points")

    @cached_property
    def constants(self) -> pd.DataFrame:
        return self._stack("constants")

    def subset(self, fluid_ids: Iterable[str]) -> "CheckBatch":
        return CheckBatch({f: self.fluids[f] for f in fluid_ids})


# -- the store ---------------------------------------------------------------------------------
_Q_FLUIDS = "SELECT fluid_id, molar_mass_kg_mol, cas_rn FROM fluid WHERE {f} ORDER BY fluid_id"
_Q_OBS = """
SELECT o.fluid_id, o.obs_id, o.boundary, o.solid_phase, o.quantity, o.T_K, o.u_T_K, o.value_si,
       o.u_value_si, o.source_id, coalesce(s.kind, 'unknown') AS source_kind, o.file_path,
       o.file_sha256, o.row_number, o.T_unit, o.T_scale, o.value_unit, r.fit_id, r.z,
       coalesce(r.is_outlier, false) AS is_outlier, r.excluded_by
FROM observation_current o
LEFT JOIN source s ON s.source_id = o.source_id
LEFT JOIN (SELECT fr.fit_id, fr.obs_id, fr.z, fr.is_outlier, fr.excluded_by FROM fit_residual fr
           JOIN fit f ON f.fit_id = fr.fit_id WHERE f.is_current AND f.status = 'fitted') r
       ON r.obs_id = o.obs_id
WHERE {f} ORDER BY o.fluid_id, o.obs_id"""
_Q_FIXED = """
SELECT p.fluid_id, p.fp_id, p.kind, p.phases, p.T_K, p.u_T_K, p.p_Pa, p.u_p_Pa, p.rho_kg_m3,
       p.u_rho_kg_m3, p.source_id, coalesce(s.kind, 'unknown') AS source_kind, p.file_path
FROM fixed_point_current p LEFT JOIN source s ON s.source_id = p.source_id
WHERE {f} ORDER BY p.fluid_id, p.fp_id"""
_Q_CONST = """
SELECT c.fluid_id, c.const_id, c.name, c.value_si, c.u_si, c.si_unit, c.source_id,
       coalesce(s.kind, 'unknown') AS source_kind, c.file_path
FROM stated_constant_current c LEFT JOIN source s ON s.source_id = c.source_id
WHERE {f} ORDER BY c.fluid_id, c.const_id"""
_Q_FITS = """
SELECT fluid_id, fit_id, boundary, solid_phase, quantity, form, curve_json, n_used,
       reduced_chi2, weighted_rms, input_hash
FROM fit WHERE is_current AND status = 'fitted' AND curve_json IS NOT NULL AND {f}
ORDER BY fluid_id, fit_id"""


def _query(con, sql: str, alias: str, fluid_ids: list[str] | None) -> pd.DataFrame:
    col = f"{alias}.fluid_id" if alias else "fluid_id"
    if fluid_ids is None:
        return con.execute(sql.format(f="TRUE")).df()
    return con.execute(sql.format(f=f"list_contains(?::VARCHAR[], {col})"), [fluid_ids]).df()


def _split(frame: pd.DataFrame) -> dict[str, pd.DataFrame]:
    if frame.empty:
        return {}
    return {fid: g.drop(columns="fluid_id").reset_index(drop=True)
            for fid, g in frame.groupby("fluid_id", sort=False)}


def _fits(frame: pd.DataFrame) -> dict[str, dict[CurveKey, FittedCurve]]:
    from pipeline.correlations import Curve

    out: dict[str, dict[CurveKey, FittedCurve]] = {}
    for row in frame.itertuples(index=False):
        curve = Curve.from_dict(json.loads(row.curve_json))
        fitted = FittedCurve(curve, row.fit_id, row.form, _opt(row.n_used, int),
                             _opt(row.reduced_chi2, float), _opt(row.weighted_rms, float),
                             row.input_hash)
        out.setdefault(row.fluid_id, {})[(row.boundary, row.solid_phase or "", row.quantity)] = fitted
    return out


def _opt(value, kind):
    return None if value is None or (isinstance(value, float) and math.isnan(value)) else kind(value)


def load_fluid_data(con, fluid_ids: Iterable[str] | None = None) -> dict[str, FluidData]:
    """Read every selected fluid from the store with five set-based queries.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        An open store connection.
    fluid_ids : iterable of str, optional
        Fluids to read; all fluids of the store when None.

    Raises
    ------
    CheckError
        When a requested fluid is not in the store.
    """
    ids = None if fluid_ids is None else sorted(set(fluid_ids))
    fluids = _query(con, _Q_FLUIDS, "", ids)
    if ids is not None:
        missing = sorted(set(ids) - set(fluids["fluid_id"]))
        if missing:
            known = [r[0] for r in con.execute("SELECT fluid_id FROM fluid ORDER BY 1").fetchall()]
            raise CheckError(f"unknown fluid(s) {', '.join(missing)}; the store holds: "
                             f"{', '.join(known) or '(none)'}")
    return fluids_from_tables(fluids, _query(con, _Q_OBS, "o", ids), _query(con, _Q_FIXED, "p", ids),
                              _query(con, _Q_CONST, "c", ids), _fits(_query(con, _Q_FITS, "", ids)))


def fluids_from_tables(fluids: pd.DataFrame, observations: pd.DataFrame, fixed_points: pd.DataFrame,
                       constants: pd.DataFrame,
                       curves: Mapping[str, Mapping[CurveKey, Any]]) -> dict[str, FluidData]:
    """FluidData for every row of ``fluids`` (fluid_id, molar_mass_kg_mol) from stacked tables.

    The tables carry a ``fluid_id`` column and the columns of :data:`OBS_COLUMNS`,
    :data:`FIXED_POINT_COLUMNS`, :data:`CONSTANT_COLUMNS` (missing ones get defaults); they are
    normalised once and then split per fluid, which is much faster than per-fluid pandas work.
    ``curves`` maps a fluid id to its curves (FittedCurve or bare curves).
    """
    obs = _split(normalise_observations(observations, keep=("fluid_id",)))
    fixed = _split(_frame(fixed_points, FIXED_POINT_COLUMNS, "fp_id", ("fluid_id",)))
    consts = _split(_frame(constants, CONSTANT_COLUMNS, "const_id", ("fluid_id",)))
    empty = {"obs": normalise_observations(None), "fixed": _frame(None, FIXED_POINT_COLUMNS, "fp_id"),
             "consts": _frame(None, CONSTANT_COLUMNS, "const_id")}
    out = {}
    cas = fluids["cas_rn"] if "cas_rn" in fluids else [""] * len(fluids)
    for fid, mm, cas_rn in zip(fluids["fluid_id"], fluids["molar_mass_kg_mol"], cas):
        out[fid] = FluidData(fid, float(mm), obs.get(fid, empty["obs"]), fixed.get(fid, empty["fixed"]),
                             consts.get(fid, empty["consts"]), _fitted(fid, curves.get(fid)),
                             cas_rn="" if cas_rn is None or cas_rn != cas_rn else str(cas_rn))
    return out
