"""What the checks read: per fluid, observations, stated points and constants, current fits.

:func:`~pipeline.checks.loader.load_fluid_data` reads the store with five set-based queries
(fluids, observations with their source kind and fit residuals, fixed points, stated constants,
current fits), whatever the number of fluids; each :class:`FluidData` then holds slices of the
stacked columns (:class:`FluidRows`), so nothing is split per fluid in pandas. The per-fluid
DataFrames (``observations``, ``fixed_points``, ``constants``) are built only when asked for.
:meth:`FluidData.build` makes the same object from in-memory data (tests, benchmarks).

Checks read observations through :meth:`FluidData.series`, which returns numpy arrays
(:class:`ObsSeries`, columns taken on first use), and fitted curves through
:meth:`FluidData.at`, or many points at once through :meth:`CheckBatch.prefetch`
(:mod:`pipeline.checks.curves`).
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from functools import cached_property
from typing import Any, Iterable, Iterator, Mapping, Sequence

import numpy as np
import pandas as pd

from pipeline.checks.budget import Budget, CurveBudget, CurvePoint, default_budget
from pipeline.checks.curves import CurveKey, FittedCurve, Request, curve_budgets, evaluate_points
from pipeline.checks.frames import (  # noqa: F401 (the column definitions, re-exported)
    _FLOAT_OBS,
    _SEP,
    _TEXT_OBS,
    CODE_COLUMNS,
    CONSTANT_COLUMNS,
    FIXED_POINT_COLUMNS,
    OBS_COLUMNS,
    SI_UNIT,
    _frame,
    _records,
    normalise_observations,
    sample_series,
    with_codes,
)
from pipeline.checks.points import (
    StatedPoint,
    boundary_between,
    consensus_constant,
    consensus_points,
)

class _Rows(Mapping):
    """Columns of some rows of parent columns, each taken on first use.

    A check reading three columns of a group pays for three, not for the twenty the
    observations have.
    """

    __slots__ = ("parent", "index", "_taken")

    def __init__(self, parent: Mapping[str, np.ndarray], index: np.ndarray):
        self.parent, self.index, self._taken = parent, index, {}

    def __getitem__(self, name: str) -> np.ndarray:
        col = self._taken.get(name)
        if col is None:
            col = self._taken[name] = self.parent[name][self.index]
        return col

    def __iter__(self) -> Iterator[str]:
        return iter(self.parent)

    def __len__(self) -> int:
        return len(self.parent)


@dataclass(frozen=True, eq=False)
class ObsSeries:
    """Observations of one (boundary, solid_phase, quantity) group as numpy arrays."""

    boundary: str
    solid_phase: str
    quantity: str
    columns: Mapping[str, np.ndarray]

    def __len__(self) -> int:
        cols = self.columns
        return len(cols.index) if isinstance(cols, _Rows) else len(cols["obs_id"])

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
        cols = self.columns
        if isinstance(cols, _Rows):
            rows = _Rows(cols.parent, cols.index[index])
        else:
            rows = _Rows(cols, np.arange(len(self))[index])
        return ObsSeries(self.boundary, self.solid_phase, self.quantity, rows)

    def by_file(self) -> dict[str, "ObsSeries"]:
        """One series per raw file, in first-seen order."""
        paths, codes = self.columns["file_path"], self.columns["file_code"]
        out = {}
        for code in dict.fromkeys(codes.tolist()):
            rows = np.flatnonzero(codes == code)
            out[paths[rows[0]]] = self.take(rows)
        return out

    def sorted_by_T(self) -> "ObsSeries":
        return self.take(np.argsort(self.T, kind="stable"))

    def refs(self, index=None, limit: int = 20) -> list[dict]:
        """Evidence entries (obs id, file, row, T, value) for the rows at ``index``."""
        idx = np.arange(len(self)) if index is None else np.asarray(index)
        cols = self.columns
        return [{"obs_id": int(cols["obs_id"][i]), "file": str(cols["file_path"][i]),
                 "row": int(cols["row_number"][i]), "T_K": float(cols["T_K"][i]),
                 "value_si": float(cols["value_si"][i])} for i in idx[:limit]]


@dataclass(frozen=True, eq=False)
class FluidRows:
    """One fluid's rows in tables stacked over all fluids (made by the store loader).

    ``obs`` holds this fluid's slice of every :data:`OBS_COLUMNS` column, ``groups`` the
    positions of each (boundary, solid_phase, quantity) group in it, ``fixed`` and
    ``constants`` the stated rows as dicts; ``tables`` are the stacked frames (ordered by
    fluid) and ``spans`` this fluid's (start, stop) in each, for the DataFrames asked for.
    """

    obs: Mapping[str, np.ndarray]
    groups: Mapping[CurveKey, np.ndarray]
    fixed: Sequence[dict]
    constants: Sequence[dict]
    tables: Mapping[str, pd.DataFrame]
    spans: Mapping[str, tuple[int, int]]

    def frame(self, name: str, empty: pd.DataFrame) -> pd.DataFrame:
        if name not in self.spans:
            return empty
        a, b = self.spans[name]
        return self.tables[name].iloc[a:b].drop(columns="fluid_id").reset_index(drop=True)


class FluidData:
    """Everything the checks read about one fluid (SI units throughout).

    Parameters
    ----------
    fluid_id : str
    molar_mass : float
        [kg/mol]
    observations, fixed_points, constants : pandas.DataFrame, optional
        Rows with the columns of :data:`OBS_COLUMNS`, :data:`FIXED_POINT_COLUMNS`,
        :data:`CONSTANT_COLUMNS` (see :meth:`build`, which fills missing columns); or
    rows : FluidRows, optional
        The same, as slices of tables stacked over all fluids (the store loader).
    curves : dict of curve key to FittedCurve
    cas_rn : str
        CAS registry number: identity for reference equations.
    budget : Budget
        The uncertainty budget in force (the run sets it with :meth:`use_budget`).
    """

    def __init__(self, fluid_id: str, molar_mass: float, observations: pd.DataFrame | None = None,
                 fixed_points: pd.DataFrame | None = None, constants: pd.DataFrame | None = None,
                 curves: dict[CurveKey, FittedCurve] | None = None, cas_rn: str = "",
                 budget: Budget | None = None, *, rows: FluidRows | None = None):
        self.fluid_id, self.molar_mass = fluid_id, molar_mass
        self.curves = {} if curves is None else curves
        self.cas_rn = cas_rn
        self.budget = default_budget() if budget is None else budget
        self._rows = rows
        self._frames = {"observations": observations, "fixed_points": fixed_points,
                        "constants": constants}
        self._points: dict[tuple[CurveKey, float], tuple[CurvePoint | None, str]] = {}
        self._curve_budgets: dict[CurveKey, CurveBudget] = {}

    def __repr__(self) -> str:
        return (f"<FluidData {self.fluid_id}: {self.n_observations} observations, "
                f"{len(self._fixed_rows)} fixed points, {len(self.curves)} curves>")

    # -- the tables as DataFrames (built on first use when the loader gave slices) --------------
    def _frame(self, name: str, empty) -> pd.DataFrame:
        frame = self._frames[name]
        if frame is None:
            frame = self._frames[name] = (self._rows.frame(name, empty()) if self._rows is not None
                                          else empty())
        return frame

    @property
    def observations(self) -> pd.DataFrame:
        """The observations (:data:`OBS_COLUMNS`)."""
        return self._frame("observations", lambda: normalise_observations(None))

    @property
    def fixed_points(self) -> pd.DataFrame:
        """Stated fixed points (:data:`FIXED_POINT_COLUMNS`)."""
        return self._frame("fixed_points", lambda: _frame(None, FIXED_POINT_COLUMNS, "fp_id"))

    @property
    def constants(self) -> pd.DataFrame:
        """Stated constants (:data:`CONSTANT_COLUMNS`)."""
        return self._frame("constants", lambda: _frame(None, CONSTANT_COLUMNS, "const_id"))

    # -- observations --------------------------------------------------------------------------
    @cached_property
    def _columns(self) -> Mapping[str, np.ndarray]:
        """The observation columns (:data:`OBS_COLUMNS`) and the integer codes of two text
        columns (:data:`CODE_COLUMNS`), as numpy arrays."""
        if self._rows is not None:
            return self._rows.obs
        return with_codes({c: self.observations[c].to_numpy() for c in OBS_COLUMNS})

    @property
    def n_observations(self) -> int:
        return len(self._columns["obs_id"])

    def observation_ids(self) -> np.ndarray:
        """The ids of the fluid's observations (as integers)."""
        return np.asarray(self._columns["obs_id"], dtype=np.int64)

    @cached_property
    def _groups(self) -> Mapping[CurveKey, np.ndarray]:
        if self._rows is not None:
            return self._rows.groups
        cols = self._columns
        if not len(cols["obs_id"]):
            return {}
        key = cols["boundary"] + _SEP + cols["solid_phase"] + _SEP + cols["quantity"]
        uniq, inverse = np.unique(key.astype(str), return_inverse=True)
        order = np.argsort(inverse, kind="stable")
        bounds = np.searchsorted(inverse[order], np.arange(len(uniq) + 1))
        return {tuple(u.split(_SEP)): order[bounds[i]:bounds[i + 1]] for i, u in enumerate(uniq)}

    def groups(self) -> list[CurveKey]:
        """The (boundary, solid_phase, quantity) groups that have observations."""
        return sorted(self._groups)

    @cached_property
    def _series_cache(self) -> dict[CurveKey, ObsSeries]:
        return {}

    def series(self, boundary: str, quantity: str = "pressure", solid_phase: str = "") -> ObsSeries:
        """Observations of one group (an empty series when there are none); cached."""
        key = (boundary, solid_phase, quantity)
        found = self._series_cache.get(key)
        if found is None:
            index = self._groups.get(key, np.zeros(0, dtype=np.intp))
            found = self._series_cache[key] = ObsSeries(boundary, solid_phase, quantity,
                                                        _Rows(self._columns, index))
        return found

    # -- the uncertainty budget ----------------------------------------------------------------
    _BUDGET_CACHES = ("fixed_point_records", "constant_records", "triple_points", "critical_point")

    def use_budget(self, budget: Budget) -> None:
        """Judge this fluid with ``budget`` (the run's uncertainty defaults and policy)."""
        if budget != self.budget:
            self.budget = budget
            for name in self._BUDGET_CACHES:
                self.__dict__.pop(name, None)
            self._points.clear()
            self._curve_budgets.clear()

    def has_curve_budget(self, key: CurveKey) -> bool:
        return key in self._curve_budgets

    def set_curve_budget(self, key: CurveKey, budget: CurveBudget) -> None:
        self._curve_budgets[key] = budget

    def curve_budget(self, key: CurveKey) -> CurveBudget:
        """Floor of the fitted curve ``key``'s uncertainty from the files it was fitted to."""
        if key not in self._curve_budgets:
            curve_budgets([(self, key)])
        return self._curve_budgets[key]

    def at(self, key: CurveKey, T: float) -> tuple[CurvePoint | None, str]:
        """The fitted curve ``key`` at ``T`` with its full budget, or (None, why not).

        Honours the one extrapolation policy: a curve is not evaluated further beyond its data
        than the policy allows; the reason names the policy. Points are kept once computed (a
        check over many fluids computes them all at once with :meth:`CheckBatch.prefetch`).
        """
        found = self._points.get((key, T))
        if found is None:
            found = self._points[(key, T)] = evaluate_points([(self, key, T)])[0]
        return found

    def has_point(self, key: CurveKey, T: float) -> bool:
        return (key, T) in self._points

    def keep_point(self, key: CurveKey, T: float, found: tuple[CurvePoint | None, str]) -> None:
        self._points[(key, T)] = found

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
    def _fixed_rows(self) -> Sequence[dict]:
        return self._rows.fixed if self._rows is not None else _records(self.fixed_points)

    @cached_property
    def _constant_rows(self) -> Sequence[dict]:
        return self._rows.constants if self._rows is not None else _records(self.constants)

    @cached_property
    def fixed_point_records(self) -> list[dict]:
        """Stated fixed points as dicts (one per source statement), every stated value with a
        standard uncertainty: its own, else the budget's default (named in ``u_defaulted``)."""
        model = self.budget.uncertainty
        out = []
        for row in self._fixed_rows:
            r = dict(row)
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
        for row in self._constant_rows:
            r = dict(row)
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


class Stacked(Mapping):
    """Observations of many fluids as numpy columns, with the integer codes of any column.

    ``codes(name)`` factorises a column once (codes in order of first appearance, -1 for a
    missing value): grouping, filtering and comparing text then cost integer operations.
    """

    def __init__(self, columns: dict[str, np.ndarray]):
        self._columns = columns
        self.n = len(columns["fluid_id"])
        self._codes: dict[str, tuple[np.ndarray, np.ndarray]] = {}

    def __getitem__(self, name: str) -> np.ndarray:
        return self._columns[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._columns)

    def __len__(self) -> int:
        return len(self._columns)

    def codes(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """(codes, uniques) of column ``name`` (``pandas.factorize``, first-seen order)."""
        found = self._codes.get(name)
        if found is None:
            codes, uniques = pd.factorize(self._columns[name], sort=False)
            found = self._codes[name] = (codes.astype(np.int64), np.asarray(uniques, dtype=object))
        return found

    def code_of(self, name: str, value: Any) -> int:
        """The code of ``value`` in column ``name`` (-2 when it does not occur)."""
        uniques = self.codes(name)[1]
        hit = np.flatnonzero(uniques == value)
        return int(hit[0]) if len(hit) else -2

    def where(self, name: str, values: Iterable[Any]) -> np.ndarray:
        """Boolean mask of the rows whose ``name`` is one of ``values``."""
        codes, _ = self.codes(name)
        wanted = [self.code_of(name, v) for v in values]
        return np.isin(codes, [w for w in wanted if w >= 0])


class CheckBatch:
    """The fluids of one run, with the stacked tables vectorised checks work on."""

    def __init__(self, fluids: dict[str, FluidData]):
        self.fluids = fluids

    def __repr__(self) -> str:
        return f"<CheckBatch of {len(self.fluids)} fluids>"

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
    def stacked(self) -> "Stacked":
        """All observations as numpy columns (``fluid_id`` first), fluid after fluid."""
        full = [f for f in self.fluids.values() if f.n_observations]
        if not full:
            return Stacked({"fluid_id": np.zeros(0, dtype=object),
                            **{c: np.asarray(self._stack("observations")[c]) for c in OBS_COLUMNS}})
        ids = np.repeat(np.array([f.fluid_id for f in full], dtype=object),
                        [f.n_observations for f in full])
        return Stacked({"fluid_id": ids, **{c: np.concatenate([f._columns[c] for f in full])
                                            for c in OBS_COLUMNS}})

    @cached_property
    def observations(self) -> pd.DataFrame:
        """All observations with a ``fluid_id`` column (stacked from the fluids' columns)."""
        if not any(f.n_observations for f in self.fluids.values()):
            return self._stack("observations")
        # as numpy gives them: text stays object (pandas would make Arrow strings of it)
        return pd.DataFrame({c: pd.Series(v, dtype=v.dtype, copy=False)
                             for c, v in self.stacked.items()})

    @cached_property
    def fixed_points(self) -> pd.DataFrame:
        return self._stack("fixed_points")

    @cached_property
    def constants(self) -> pd.DataFrame:
        return self._stack("constants")

    def subset(self, fluid_ids: Iterable[str]) -> "CheckBatch":
        return CheckBatch({f: self.fluids[f] for f in fluid_ids})

    def prefetch(self, requests: Iterable[Request]) -> None:
        """Compute the points ``fluid.at(key, T)`` of all ``requests`` at once (see
        :func:`pipeline.checks.curves.evaluate_points`); later ``at`` calls find them."""
        todo, seen = [], set()
        for fluid, key, T in requests:
            if not fluid.has_point(key, T) and (id(fluid), key, T) not in seen:
                seen.add((id(fluid), key, T))
                todo.append((fluid, key, T))
        if todo:
            for (fluid, key, T), found in zip(todo, evaluate_points(todo)):
                fluid.keep_point(key, T, found)


def __getattr__(name: str):
    """The store loader's names, importable from here as before it moved to ``loader``."""
    if name in ("load_fluid_data", "fluids_from_tables"):
        from pipeline.checks import loader

        return getattr(loader, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
