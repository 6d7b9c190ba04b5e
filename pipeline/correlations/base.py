"""Building blocks shared by every correlation form: the form protocol, the registry, `Curve`.

A *form* is the mathematics of one published equation (no coefficients); a :class:`Curve` is a
form plus its parameters, fixed reference inputs, covariance and validity range.

Conventions used by every form
------------------------------
* Temperatures in [K], pressures in [Pa], densities in [kg/m^3].
* ``ref`` holds the *fixed* inputs of a form: ``T_ref_K`` (Tc or Tt, taken from the fluid's
  stated point) and ``exponents`` (the t_i of the sum terms, or the single fixed exponent of
  the extended Antoine form).
* The reference *value* (pc, pt, rho_c) is the first parameter, ``params[0]``, and is fitted like
  the other coefficients: it is ``ln(p_ref/Pa)`` (or ``ln(rho_ref)``) for forms fitted in
  ln(value) ("log link") and ``p_ref`` itself for forms fitted in value ("scaled" forms).
  A curve that reproduces pc at Tc is therefore a finding, not a tautology.
* All evaluation kernels are batched: ``T`` has shape (n, m), ``P`` (parameters) shape
  (n, k), ``T_ref`` shape (n, 1), so one call evaluates n curves of one form at once.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

# --- Registry ------------------------------------------------------------------------------------

FORMS: dict[str, CorrelationForm] = {}
"""Registry of correlation forms by name; filled by the topic modules when the package loads."""


def register_form(form: CorrelationForm) -> CorrelationForm:
    """Add `form` to :data:`FORMS` under its name; registering a name twice is an error."""
    if form.name in FORMS:
        raise ValueError(f"correlation form {form.name!r} is already registered")
    FORMS[form.name] = form
    return form


def get_form(name: str) -> CorrelationForm:
    """Return the registered form `name`; an unknown name raises KeyError listing the valid ones."""
    try:
        return FORMS[name]
    except KeyError:
        valid = ", ".join(sorted(FORMS))
        raise KeyError(f"unknown correlation form {name!r}; valid forms: {valid}") from None


# --- Small numeric helpers -----------------------------------------------------------------------

def power(x: np.ndarray, t: float) -> np.ndarray:
    """x**t with NaN (not a warning) where the power is undefined (negative base, fractional t)."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return np.power(x, t)


def dpower(x: np.ndarray, t: float) -> np.ndarray:
    """d(x**t)/dx = t x**(t-1), with t = 0 giving 0 and x = 0, t = 1 giving 1."""
    if t == 0.0:
        return np.zeros_like(x)
    return t * power(x, t - 1.0)


def bracketed_inverse(g, target: np.ndarray, T_lo: float, T_hi: float,
                      n_grid: int = 129, n_iter: int = 60) -> np.ndarray:
    """Solve g(T) = target for T in [T_lo, T_hi] by grid bracketing and vectorised bisection.

    Parameters
    ----------
    g : callable
        Vectorised function of temperature [K] (any monotonic transform of the curve value).
    target : array_like
        Values of g to reach (same transform as g).
    T_lo, T_hi : float
        Search interval. [K]
    n_grid : int
        Grid points used to find the first sign change.
    n_iter : int
        Bisection steps; 60 halve a 1000 K bracket below 1e-15 K.

    Returns
    -------
    numpy.ndarray
        The lowest-temperature root for each target; NaN where g - target has no sign change
        on the grid (no root in the range, or a pair of roots inside one grid cell).
    """
    target = np.atleast_1d(np.asarray(target, dtype=float))
    grid = np.linspace(T_lo, T_hi, n_grid)
    d = g(grid)[None, :] - target[:, None]
    change = (d[:, :-1] * d[:, 1:] <= 0.0) & np.isfinite(d[:, :-1]) & np.isfinite(d[:, 1:])
    has_root = change.any(axis=1)
    first = np.argmax(change, axis=1)
    lo, hi = grid[first].copy(), grid[first + 1].copy()
    d_lo = d[np.arange(target.size), first]
    for _ in range(n_iter):
        mid = 0.5 * (lo + hi)
        d_mid = g(mid) - target
        left = (d_lo * d_mid <= 0.0)
        hi = np.where(left, mid, hi)
        lo = np.where(left, lo, mid)
        d_lo = np.where(left, d_lo, d_mid)
    root = 0.5 * (lo + hi)
    return np.where(has_root, root, np.nan)


# --- The form protocol ---------------------------------------------------------------------------

class CorrelationForm(ABC):
    """The mathematics of one published correlation, without coefficients.

    Subclasses set the class attributes below and implement the three batched kernels
    :meth:`evaluate`, :meth:`derivative` and :meth:`jacobian`.

    Attributes
    ----------
    name : str
        Registry name.
    quantity : str
        ``"pressure"`` [Pa] or ``"density"`` [kg/m^3].
    link : str
        Fit space: ``"log"`` (residuals in ln value, i.e. relative) or ``"identity"``.
    linear : bool
        True when the fit is a linear least-squares problem in a reparametrisation.
    increasing : bool
        True when physics demands a value that rises with T (vapour, sublimation pressure).
    reference_point : str or None
        ``"critical"`` or ``"triple"``: what ``T_ref_K`` means (None: no reference point).
    bounded_by_reference : bool
        True when the form is only defined for T <= T_ref (tau = 1 - T/T_ref >= 0).
    default_exponents : tuple of float
        Exponents used when ``ref`` gives none, and the longest nested series when fitting.
    fixed_exponents : bool
        True when the exponents are part of the form's definition (e.g. Wagner 3-6).
    min_terms : int
        Smallest number of sum terms tried when fitting.
    citation : str
        The paper the form comes from.
    """

    name: str = ""
    quantity: str = "pressure"
    link: str = "log"
    linear: bool = True
    increasing: bool = False
    reference_point: str | None = None
    bounded_by_reference: bool = False
    default_exponents: tuple[float, ...] = ()
    fixed_exponents: bool = False
    min_terms: int = 1
    citation: str = ""

    def __repr__(self) -> str:
        return f"<CorrelationForm {self.name}: {self.quantity}, fitted in {self.link} space>"

    # --- parameter bookkeeping -------------------------------------------------------------------
    @abstractmethod
    def n_params(self, n_terms: int) -> int:
        """Number of parameters of the form with `n_terms` sum terms."""

    @abstractmethod
    def n_terms(self, n_params: int) -> int:
        """Number of sum terms (exponents used) for a parameter vector of length `n_params`."""

    def max_terms(self, exponents: Sequence[float] | None = None) -> int:
        """Largest number of sum terms available with `exponents` (default: the form's own)."""
        return len(self.exponents({"exponents": exponents} if exponents else {}))

    def exponents(self, ref: Mapping[str, Any], n_terms: int | None = None) -> tuple[float, ...]:
        """The exponents in force for `ref`, truncated to `n_terms` (the nested series)."""
        given = tuple(float(t) for t in ref.get("exponents", ()) or ())
        if self.fixed_exponents and given and given != self.default_exponents[:len(given)]:
            raise ValueError(f"form {self.name!r} has fixed exponents {self.default_exponents}; "
                             f"ref gives {given}")
        exps = given or self.default_exponents
        if n_terms is not None:
            if n_terms > len(exps):
                raise ValueError(f"form {self.name!r}: {n_terms} terms requested but only "
                                 f"{len(exps)} exponents {exps} available")
            exps = exps[:n_terms]
        return exps

    # --- batched kernels (T: (n, m), P: (n, k), T_ref: (n, 1)) -----------------------------------
    @abstractmethod
    def evaluate(self, T: np.ndarray, P: np.ndarray, T_ref: np.ndarray,
                 exps: tuple[float, ...]) -> np.ndarray:
        """Value of the form, shape (n, m). [Pa] or [kg/m^3]"""

    @abstractmethod
    def derivative(self, T: np.ndarray, P: np.ndarray, T_ref: np.ndarray,
                   exps: tuple[float, ...]) -> np.ndarray:
        """Analytic d value / dT, shape (n, m). [Pa/K] or [kg/(m^3 K)]"""

    @abstractmethod
    def jacobian(self, T: np.ndarray, P: np.ndarray, T_ref: np.ndarray,
                 exps: tuple[float, ...]) -> np.ndarray:
        """d value / d params, shape (n, m, k)."""

    def domain(self, T: np.ndarray, T_ref: float, exps: tuple[float, ...]) -> np.ndarray:
        """Boolean mask of temperatures at which the form is defined for `T_ref` and `exps`."""
        ok = np.isfinite(T) & (T > 0.0)
        if self.bounded_by_reference:
            ok &= T <= T_ref
        return ok

    # --- fit-space transform ---------------------------------------------------------------------
    def to_fit_space(self, y: np.ndarray) -> np.ndarray:
        """Transform values to the space the form is fitted in (ln y or y)."""
        if self.link == "log":
            with np.errstate(invalid="ignore", divide="ignore"):
                return np.log(y)
        return np.asarray(y, dtype=float)

    def fit_space_slope(self, y: np.ndarray) -> np.ndarray:
        """d(fit-space value)/d value: 1/y for the log link, 1 otherwise."""
        return 1.0 / y if self.link == "log" else np.ones_like(y)

    def reference_value(self, params: Sequence[float]) -> float:
        """The reference value (pc, pt or rho_c) in SI units from a parameter vector."""
        return math.exp(params[0]) if self.link == "log" else float(params[0])


class LinearForm(CorrelationForm):
    """A form linear in its parameters after the fit-space transform.

    Two layouts cover every published equation used here, with phi_i(T) the form's basis:

    * ``link = "log"``: ln y = P0 + sum_i a_i phi_i(T), params (P0 = ln y_ref, a_1..a_k);
    * ``link = "identity"`` ("scaled"): y = P0 (1 + sum_i a_i phi_i(T)), params (y_ref, a_i).
      It is linear in beta = (P0, P0 a_1, ..., P0 a_k); :meth:`params_from_beta` maps back.
    """

    def n_params(self, n_terms: int) -> int:
        return n_terms + 1

    def n_terms(self, n_params: int) -> int:
        return n_params - 1

    @abstractmethod
    def basis(self, T: np.ndarray, T_ref: np.ndarray, exps: tuple[float, ...]) -> np.ndarray:
        """Basis functions phi_i(T), shape T.shape + (k,)."""

    @abstractmethod
    def dbasis(self, T: np.ndarray, T_ref: np.ndarray, exps: tuple[float, ...]) -> np.ndarray:
        """d phi_i / dT, shape T.shape + (k,). [1/K]"""

    def _sum(self, T, P, T_ref, exps):
        return np.einsum("nmk,nk->nm", self.basis(T, T_ref, exps), P[:, 1:])

    def evaluate(self, T, P, T_ref, exps):
        s = self._sum(T, P, T_ref, exps)
        if self.link == "log":
            with np.errstate(over="ignore"):
                return np.exp(P[:, :1] + s)
        return P[:, :1] * (1.0 + s)

    def derivative(self, T, P, T_ref, exps):
        ds = np.einsum("nmk,nk->nm", self.dbasis(T, T_ref, exps), P[:, 1:])
        if self.link == "log":
            return self.evaluate(T, P, T_ref, exps) * ds
        return P[:, :1] * ds

    def jacobian(self, T, P, T_ref, exps):
        phi = self.basis(T, T_ref, exps)
        if self.link == "log":
            y = self.evaluate(T, P, T_ref, exps)[..., None]
            return y * np.concatenate([np.ones_like(phi[..., :1]), phi], axis=-1)
        s = np.einsum("nmk,nk->nm", phi, P[:, 1:])
        return np.concatenate([(1.0 + s)[..., None], P[:, None, :1] * phi], axis=-1)

    def domain(self, T, T_ref, exps):
        ok = super().domain(T, T_ref, exps)
        phi = self.basis(T[None, :], np.array([[T_ref]]), exps)[0]
        return ok & np.all(np.isfinite(phi), axis=-1)

    # --- linear least squares --------------------------------------------------------------------
    def design(self, T: np.ndarray, T_ref: float, exps: tuple[float, ...]) -> np.ndarray:
        """Design matrix X (m, k+1) with fit-space value = X @ beta."""
        phi = self.basis(T[None, :], np.array([[T_ref]]), exps)[0]
        return np.concatenate([np.ones((T.size, 1)), phi], axis=1)

    def params_from_beta(self, beta: np.ndarray) -> np.ndarray:
        """Parameters from the linear coefficients beta."""
        if self.link == "log":
            return beta.copy()
        return np.concatenate([beta[:1], beta[1:] / beta[0]])

    def dparams_dbeta(self, beta: np.ndarray) -> np.ndarray:
        """Jacobian d params / d beta, used to carry the covariance over."""
        if self.link == "log":
            return np.eye(beta.size)
        jac = np.diag(np.concatenate([[1.0], np.full(beta.size - 1, 1.0 / beta[0])]))
        jac[1:, 0] = -beta[1:] / beta[0] ** 2
        return jac


class TauPowerBasis:
    """Basis phi_i = f(T) tau^t_i with tau = 1 - T/T_ref and f = T_ref/T (prefactor) or 1.

    Shared by the Wagner vapour-pressure equations, the sublimation equation of the
    Span-Wagner type and the saturated-density equations, which differ only in name,
    exponents and fit space.
    """

    prefactor: bool = True
    bounded_by_reference = True

    def basis(self, T, T_ref, exps):
        tau = 1.0 - T / T_ref
        f = T_ref / T if self.prefactor else np.ones_like(T)
        return np.stack([f * power(tau, t) for t in exps], axis=-1)

    def dbasis(self, T, T_ref, exps):
        tau = 1.0 - T / T_ref
        f = T_ref / T if self.prefactor else np.ones_like(T)
        df = -T_ref / T**2 if self.prefactor else np.zeros_like(T)
        return np.stack([df * power(tau, t) - f * dpower(tau, t) / T_ref for t in exps],
                        axis=-1)


class NonlinearForm(CorrelationForm):
    """A form with a fixed parameter count, fitted by scipy ``least_squares``."""

    linear = False
    n_fixed: int = 3

    def n_params(self, n_terms: int) -> int:
        return self.n_fixed

    def n_terms(self, n_params: int) -> int:
        return len(self.default_exponents)

    def max_terms(self, exponents=None) -> int:
        return len(self.default_exponents)

    @abstractmethod
    def initial_params(self, T: np.ndarray, z: np.ndarray, w: np.ndarray, T_ref: float,
                       exps: tuple[float, ...]) -> np.ndarray:
        """A starting point for the optimiser from data in fit space with weights w = 1/u_z^2."""

    def bounds(self, T: np.ndarray, T_ref: float) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper parameter bounds for the optimiser (default: unbounded)."""
        return np.full(self.n_fixed, -np.inf), np.full(self.n_fixed, np.inf)


# --- Curve ---------------------------------------------------------------------------------------

_RANGE_RTOL = 1e-12  # float noise allowed at the range ends (e.g. T_max = Tc computed elsewhere)


@dataclass(frozen=True)
class Curve:
    """A correlation with coefficients: a form, its parameters and where it holds.

    Parameters
    ----------
    form : str
        Registry name of the form (see :data:`FORMS`).
    params : tuple of float
        Parameters in the form's order (``params[0]`` is the reference value or its log).
    ref : dict
        Fixed inputs: ``T_ref_K`` [K] (None for forms without a reference point, e.g.
        Antoine) and ``exponents``.
    covariance : tuple of tuple of float or None
        Parameter covariance; None when unknown (published curves).
    T_min_K, T_max_K : float
        Validity range. [K]
    citation : str
        Where the coefficients come from (publication, or the fit that made them).
    """

    form: str
    params: tuple[float, ...]
    ref: dict = field(default_factory=dict)
    covariance: tuple[tuple[float, ...], ...] | None = None
    T_min_K: float = 0.0
    T_max_K: float = math.inf
    citation: str = ""

    def __post_init__(self):
        form = get_form(self.form)
        params = tuple(float(p) for p in self.params)
        k = form.n_terms(len(params))
        if (form.linear and k < 1) or (not form.linear and len(params) != form.n_params(k)):
            raise ValueError(f"curve {self.form!r}: {len(params)} parameters do not fit the "
                             f"form (linear forms need >= 2, others exactly their count)")
        exps = form.exponents(self.ref, k if form.linear else None)
        T_ref = self.ref.get("T_ref_K")
        ref = {"T_ref_K": None if T_ref is None else float(T_ref), "exponents": exps}
        cov = None
        if self.covariance is not None:
            c = np.asarray(self.covariance, dtype=float)
            if c.shape != (len(params), len(params)):
                raise ValueError(f"curve {self.form!r}: covariance shape {c.shape} does not "
                                 f"match {len(params)} parameters")
            cov = tuple(tuple(float(v) for v in row) for row in c)
        if not self.T_min_K <= self.T_max_K:
            raise ValueError(f"curve {self.form!r}: T_min_K = {self.T_min_K} > "
                             f"T_max_K = {self.T_max_K}")
        object.__setattr__(self, "params", params)
        object.__setattr__(self, "ref", ref)
        object.__setattr__(self, "covariance", cov)
        object.__setattr__(self, "T_min_K", float(self.T_min_K))
        object.__setattr__(self, "T_max_K", float(self.T_max_K))

    __hash__ = None  # ref is a dict; curves compare by value but are not hashable

    def __repr__(self) -> str:
        return (f"<Curve {self.form} ({len(self.params)} params) "
                f"{self.T_min_K:g}-{self.T_max_K:g} K>")

    # --- helpers ---------------------------------------------------------------------------------
    @property
    def correlation_form(self) -> CorrelationForm:
        """The registered form object."""
        return get_form(self.form)

    @property
    def reference_value(self) -> float:
        """Reference value in SI (pc or pt [Pa], rho_c [kg/m^3]; Antoine: exp(A))."""
        return self.correlation_form.reference_value(self.params)

    def _kernel_args(self, T):
        T = np.asarray(T, dtype=float)
        P = np.asarray(self.params)[None, :]
        return T, np.atleast_1d(T).reshape(1, -1), P, np.array([[self._T_ref]]), \
            self.ref["exponents"]

    @property
    def _T_ref(self) -> float:
        T_ref = self.ref["T_ref_K"]
        return math.nan if T_ref is None else T_ref

    def _mask(self, T: np.ndarray, out: np.ndarray, extrapolate: bool) -> np.ndarray:
        if extrapolate:
            return out
        lo = self.T_min_K - _RANGE_RTOL * abs(self.T_min_K)
        hi = self.T_max_K + _RANGE_RTOL * abs(self.T_max_K)
        return np.where((T >= lo) & (T <= hi), out, np.nan)

    def _call(self, kernel: str, T, extrapolate: bool):
        T, T2, P, T_ref, exps = self._kernel_args(T)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            out = getattr(self.correlation_form, kernel)(T2, P, T_ref, exps)
        if kernel == "jacobian":
            return out[0].reshape(T.shape + (len(self.params),))
        out = self._mask(T, out[0].reshape(T.shape), extrapolate)
        return out if out.ndim else float(out)

    # --- public evaluation -----------------------------------------------------------------------
    def value(self, T, *, extrapolate: bool = False):
        """Curve value at temperature(s) T [K]: [Pa] or [kg/m^3]; NaN outside the range."""
        return self._call("evaluate", T, extrapolate)

    def slope(self, T, *, extrapolate: bool = False):
        """Analytic d value / dT at T [K]: [Pa/K] or [kg/(m^3 K)]; NaN outside the range."""
        return self._call("derivative", T, extrapolate)

    def jacobian(self, T) -> np.ndarray:
        """d value / d params at T [K], shape T.shape + (n_params,)."""
        return self._call("jacobian", T, True)

    def u(self, T, *, extrapolate: bool = False):
        """Standard uncertainty of the value from the covariance (delta method, sqrt(J C J^T)).

        NaN where the curve has no covariance (published equations) or outside the range.
        """
        T = np.asarray(T, dtype=float)
        if self.covariance is None:
            out = np.full(T.shape, np.nan)
        else:
            J = self.jacobian(T).reshape(-1, len(self.params))
            C = np.asarray(self.covariance)
            var = np.einsum("mi,ij,mj->m", J, C, J)
            out = np.sqrt(np.clip(var, 0.0, None)).reshape(T.shape)
            out = self._mask(T, out, extrapolate)
        return out if out.ndim else float(out)

    def inverse(self, y, *, n_grid: int = 129):
        """Temperature [K] inside [T_min_K, T_max_K] where the curve takes value y.

        Root found by grid bracketing and bisection in the form's fit space (ln y for log-link
        forms); the lowest-temperature root if there are several; NaN where there is none.
        """
        y = np.asarray(y, dtype=float)
        form = self.correlation_form
        lo, hi = self.T_min_K, self.T_max_K
        if not (math.isfinite(lo) and math.isfinite(hi)):
            raise ValueError(f"{self!r}: inverse needs a finite temperature range")

        def g(T):
            return form.to_fit_space(self.value(T, extrapolate=True))

        with np.errstate(invalid="ignore", divide="ignore"):
            target = form.to_fit_space(np.atleast_1d(y))
        out = bracketed_inverse(g, target, lo, hi, n_grid=n_grid).reshape(y.shape)
        return out if out.ndim else float(out)

    # --- serialisation ---------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """JSON-safe dict (plain floats, lists) that :meth:`from_dict` turns back into the curve."""
        return {
            "form": self.form,
            "params": list(self.params),
            "ref": {"T_ref_K": self.ref["T_ref_K"], "exponents": list(self.ref["exponents"])},
            "covariance": None if self.covariance is None else [list(r) for r in self.covariance],
            "T_min_K": self.T_min_K,
            "T_max_K": self.T_max_K,
            "citation": self.citation,
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Curve:
        """Rebuild a curve from :meth:`to_dict` output."""
        return cls(form=data["form"], params=tuple(data["params"]), ref=dict(data["ref"]),
                   covariance=data.get("covariance"), T_min_K=data["T_min_K"],
                   T_max_K=data["T_max_K"], citation=data.get("citation", ""))


# --- Batch evaluation of many curves -------------------------------------------------------------

_BATCH_KERNELS = {"value": "evaluate", "slope": "derivative", "u": "jacobian"}


def evaluate_batch(curves: Sequence[Curve], T, what: str = "value", *,
                   extrapolate: bool = False) -> np.ndarray:
    """Evaluate many curves at once; curves of one form and term count share one numpy call.

    Parameters
    ----------
    curves : sequence of Curve
        n curves, of any forms.
    T : array_like
        Temperatures [K], shape (m,) (the same grid for all curves) or (n, m) (one row each).
    what : {"value", "slope", "u"}
        Quantity to evaluate.
    extrapolate : bool
        If False, points outside each curve's own range are NaN.

    Returns
    -------
    numpy.ndarray
        Shape (n, m).
    """
    if what not in _BATCH_KERNELS:
        raise KeyError(f"unknown quantity {what!r}; valid: {', '.join(_BATCH_KERNELS)}")
    n = len(curves)
    T = np.asarray(T, dtype=float)
    T = np.broadcast_to(T, (n, T.shape[-1])) if T.ndim == 1 else T
    out = np.full(T.shape, np.nan)
    groups: dict[tuple, list[int]] = {}
    for i, c in enumerate(curves):
        groups.setdefault((c.form, len(c.params), c.ref["exponents"]), []).append(i)
    for (name, _, exps), idx in groups.items():
        out[idx] = _evaluate_group([curves[i] for i in idx], T[idx], what, get_form(name), exps)
    if not extrapolate:
        lo = np.array([c.T_min_K for c in curves])[:, None]
        hi = np.array([c.T_max_K for c in curves])[:, None]
        out = np.where((T >= lo * (1 - _RANGE_RTOL)) & (T <= hi * (1 + _RANGE_RTOL)), out, np.nan)
    return out


def _evaluate_group(curves, T, what, form, exps):
    P = np.array([c.params for c in curves])
    T_ref = np.array([[c._T_ref] for c in curves])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        res = getattr(form, _BATCH_KERNELS[what])(T, P, T_ref, exps)
    if what != "u":
        return res
    nan = np.full((P.shape[1],) * 2, np.nan)
    C = np.array([nan if c.covariance is None else np.asarray(c.covariance) for c in curves])
    var = np.einsum("nmi,nij,nmj->nm", res, C, res)
    return np.sqrt(np.clip(var, 0.0, None))
