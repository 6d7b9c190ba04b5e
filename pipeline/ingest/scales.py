"""Temperature scales: convert temperatures stated on an older scale to ITS-90.

Every stored temperature is on ITS-90 [K]. A column on ``IPTS-68`` is converted with the
published difference functions ``T90 - T68``; ``ITS-90`` is the identity. Older or special
scales (IPTS-48, ITS-27, EPT-76, PLTS-2000) are refused with :class:`ScaleError`: no conversion
from their published differences is implemented here.

Scale names are matched ignoring letter case, blanks, hyphens and underscores (``its90``,
``IPTS 68``): unlike unit symbols, the scale names cannot be confused by case.

Difference functions (T90 - T68)
--------------------------------
Three polynomials, all written in T90 (or t90 = T90 - 273.15 K):

* range A, 13.8 K <= T90 < 73.15 K (Rusby 1991)::

      T90 - T68 = sum_{i=0..12} a_i [(T90/K - 40)/40]^i            [K]

* range B, 73.15 K <= T90 <= 903.765 K, i.e. -200 degC to 630.615 degC (Rusby 1991)::

      t90 - t68 = sum_{i=1..8} b_i (t90 / 630 degC)^i                 [degC]

* range C, 903.765 K < T90 <= 1337.33 K (Rusby, Hudson & Durieux 1994, which replaces the
  1990 values from 630 degC to 1064 degC)::

      t90 - t68 = sum_{i=0..5} c_i (t90/degC)^i                       [degC]

Range A is published up to 83.8 K and range B down to 73.15 K; in the overlap this module uses B
(A and B differ there by at most 0.6 mK). B and C differ by 0.7 mK at 903.765 K; B must not be
extrapolated above 630 degC (-0.25 K at 1000 K against +0.012 K from C).

Range of the conversion: the functions are published for 13.8 K <= T90 <= 1337.33 K, and
IPTS-68 itself starts at 13.81 K (the e-H2 triple point). An IPTS-68 value is therefore
converted when 13.81 K <= T68 <= 1337.58 K (the IPTS-68 values of its lower limit and of the
gold point, which map to 13.8029 K and 1337.33 K on ITS-90). Range C maps the IPTS-68 gold
point 0.12 mK above 1337.33 K, so :func:`its90_minus_ipts68` accepts T90 up to
:data:`T90_EDGE_K` (0.2 mK above the gold point) and the gold point converts both ways.
Outside, the result is NaN and :func:`out_of_range_mask` tells the caller which rows to
quarantine; no exception per row.

Inverting the functions: because they are written in T90, T90 is found from T68 by the
fixed-point iteration ``T90 <- T68 + D(T90)``, started at ``T90 = T68`` and run
:data:`FIXED_POINT_ITERATIONS` (3) times on the whole array at once. ``|dD/dT90|`` stays below
8e-3 over the domain (largest at 13.8 K), so each pass shrinks the error by at least that
factor: from the initial error ``|D| <= 0.25 K``, one pass leaves < 1 mK, two < 1 uK, three
about 1e-9 K (checked in tests/ingest/test_scales.py). Near the switch
points (73.15 K, 903.765 K) the iterate can fall on either side; the answer then carries the
published discontinuity (< 1 mK), not an iteration error.

References
----------
R. L. Rusby, "The conversion of thermal reference values to the ITS-90",
J. Chem. Thermodyn. 23, 1153-1161 (1991) (ranges A and B; citation and title from memory).

R. L. Rusby, R. P. Hudson and M. Durieux, "Revised values for (t90 - t68) from 630 degC to
1064 degC", Metrologia 31, 149-153 (1994) (range C; title from memory).

H. Preston-Thomas, "The International Temperature Scale of 1990 (ITS-90)", Metrologia 27, 3-10
(1990), Table 6 (tabulated T90 - T68).

R. N. Goldberg and R. D. Weir, "Conversion of temperatures and thermodynamic properties to the
basis of the International Temperature Scale of 1990", Pure Appl. Chem. 64, 1545-1562 (1992)
(tables of T90 - T68 and the conversion of derived properties; title from memory).

The coefficients below are from memory of these publications, cross-checked against several
independent public codes (tag M+P in /work/shared/reference-values.md, section 5); check them
against the printed papers before treating them as authoritative.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass
from types import MappingProxyType
from typing import Callable

import numpy as np
from numpy.polynomial import polynomial as _P

from pipeline.errors import ScaleError

ZERO_CELSIUS_K = 273.15
T90_MIN_K = 13.8
"""Lowest T90 of the difference functions (range A). [K]"""
T90_MAX_K = 1337.33
"""Highest T90 of the difference functions (range C, the gold point). [K]"""
T_SWITCH_AB_K = 73.15
"""Range A below, range B from here up (-200 degC). [K]"""
T90_EDGE_K = T90_MAX_K + 2e-4
"""Upper end of T90 accepted by :func:`its90_minus_ipts68`: the gold point plus 0.2 mK. [K]"""
T68_MIN_K = 13.81
"""Lowest IPTS-68 temperature converted: the lower limit of IPTS-68 (e-H2 triple point). [K]"""
T68_MAX_K = 1337.58
"""Highest IPTS-68 temperature converted: the IPTS-68 gold point, 1064.43 degC. [K]"""
T_SWITCH_BC_K = 903.765
"""Range B up to here (630.615 degC), range C above. [K]"""
FIXED_POINT_ITERATIONS = 3

# Range A: T90 - T68 [K] = sum a_i x^i, x = (T90/K - 40)/40 (Rusby 1991; from memory, M+P)
A_COEFFS = (-0.005903, 0.008174, -0.061924, -0.193388, 1.490793, 1.252347, -9.835868,
            1.411912, 25.277595, -19.183815, -18.437089, 27.000895, -8.716324)
# Range B: t90 - t68 [degC] = sum_{i>=1} b_i x^i, x = t90/(630 degC) (Rusby 1991; M+P)
B_COEFFS = (0.0, -0.148759, -0.267408, 1.080760, 1.269056, -4.089591, -1.871251, 7.438081,
            -3.536296)
# Range C: t90 - t68 [degC] = sum c_i t^i, t = t90/degC (Rusby, Hudson & Durieux 1994; M+P)
C_COEFFS = (78.687209, -0.47135991, 1.0954715e-3, -1.2357884e-6, 6.7736583e-10,
            -1.4458081e-13)


def _difference(T90: np.ndarray) -> np.ndarray:
    """T90 - T68 [K] by range, for T90 already inside the domain (no range check)."""
    t90 = T90 - ZERO_CELSIUS_K
    a = _P.polyval((T90 - 40.0) / 40.0, A_COEFFS)
    b = _P.polyval(t90 / 630.0, B_COEFFS)
    c = _P.polyval(t90, C_COEFFS)
    return np.where(T90 < T_SWITCH_AB_K, a, np.where(T90 <= T_SWITCH_BC_K, b, c))


def _in_domain(T90: np.ndarray) -> np.ndarray:
    return (T90 >= T90_MIN_K) & (T90 <= T90_EDGE_K)  # False for NaN


def its90_minus_ipts68(T90_K: np.ndarray) -> np.ndarray:
    """Difference T90 - T68 at given ITS-90 temperatures.

    Parameters
    ----------
    T90_K : array_like
        Temperatures on ITS-90. [K]

    Returns
    -------
    numpy.ndarray
        T90 - T68 [K]; NaN outside 13.8 K <= T90 <= 1337.33 K (+0.2 mK, see
        :data:`T90_EDGE_K`).

    Notes
    -----
    Ranges A, B and C of the module docstring (Rusby 1991; Rusby, Hudson & Durieux 1994),
    switching at 73.15 K and 903.765 K.
    """
    T90 = np.asarray(T90_K, dtype=np.float64)
    inside = _in_domain(T90)
    return np.where(inside, _difference(np.where(inside, T90, 300.0)), np.nan)


def ipts68_to_its90(T68_K: np.ndarray) -> np.ndarray:
    """Convert IPTS-68 temperatures to ITS-90 by fixed-point iteration on T90 - T68.

    Parameters
    ----------
    T68_K : array_like
        Temperatures on IPTS-68. [K]

    Returns
    -------
    numpy.ndarray
        T90 [K]; NaN outside 13.81 K <= T68 <= 1337.58 K (the range of the difference
        functions, module docstring) and where the input is not finite.

    Notes
    -----
    ``T90 <- T68 + D(T90)``, ``D = T90 - T68`` from :func:`its90_minus_ipts68`, started at
    ``T90 = T68``, :data:`FIXED_POINT_ITERATIONS` passes; the iterate is clipped into the
    domain while D is evaluated.
    """
    T68 = np.asarray(T68_K, dtype=np.float64)
    inside = (T68 >= T68_MIN_K) & (T68 <= T68_MAX_K)  # False for NaN
    T68c = np.where(inside, T68, 300.0)
    T90 = T68c
    for _ in range(FIXED_POINT_ITERATIONS):
        T90 = T68c + _difference(np.clip(T90, T90_MIN_K, T90_EDGE_K))
    return np.where(inside, T90, np.nan)


def its90_to_ipts68(T90_K: np.ndarray) -> np.ndarray:
    """Convert ITS-90 temperatures to IPTS-68: ``T68 = T90 - D(T90)`` (explicit, no iteration).

    Parameters
    ----------
    T90_K : array_like
        Temperatures on ITS-90. [K]

    Returns
    -------
    numpy.ndarray
        T68 [K]; NaN outside 13.8 K <= T90 <= 1337.33 K (+0.2 mK).
    """
    T90 = np.asarray(T90_K, dtype=np.float64)
    return T90 - its90_minus_ipts68(T90)


def _double(value: float) -> str:
    """A SQL DOUBLE literal of exactly ``value`` (a plain decimal literal would be DECIMAL)."""
    text = repr(float(value))
    return text if "e" in text or "inf" in text or "nan" in text else text + "e0"


def _horner_sql(coeffs: tuple[float, ...], var: str) -> str:
    """``sum c_i var^i`` in Horner form, in the order numpy's ``polyval`` evaluates it."""
    expr = _double(coeffs[-1])
    for c in reversed(coeffs[:-1]):
        expr = f"({_double(c)} + {var} * {expr})"
    return expr


def _difference_sql(col: str) -> str:
    """SQL of :func:`_difference` for a column ``col`` already clipped into the domain."""
    zero = _double(ZERO_CELSIUS_K)
    a = _horner_sql(A_COEFFS, f"(({col} - 40.0e0) / 40.0e0)")
    b = _horner_sql(B_COEFFS, f"(({col} - {zero}) / 630.0e0)")
    c = _horner_sql(C_COEFFS, f"({col} - {zero})")
    return (f"CASE WHEN {col} < {_double(T_SWITCH_AB_K)} THEN {a} "
            f"WHEN {col} <= {_double(T_SWITCH_BC_K)} THEN {b} ELSE {c} END")


def ipts68_to_its90_sql(col: str, prefix: str = "fl_t90_"
                        ) -> tuple[list[tuple[str, str]], str]:
    """:func:`ipts68_to_its90` as SQL over the DOUBLE column ``col`` (IPTS-68 [K]).

    Returns ``(layers, result)``: each layer is one ``(expression, name)`` to add in its own
    ``SELECT *, expression AS name FROM (...)`` around the previous query (each iterate is a
    column, so no expression repeats the one before it), and ``result`` is the expression of
    T90 over the last layer. The arithmetic is the numpy code's, step for step (same Horner order, same
    clipping, :data:`FIXED_POINT_ITERATIONS` passes), so both give the same doubles; values
    that are not positive and finite pass through unchanged (they are another fault), and
    finite values outside 13.81 K <= T68 <= 1337.58 K become NaN.
    """
    layers, previous = [], col
    for i in range(1, FIXED_POINT_ITERATIONS + 1):
        clipped, iterate = f"{prefix}c{i}", f"{prefix}i{i}"
        layers.append((f"least(greatest({previous}, {_double(T90_MIN_K)}), "
                       f"{_double(T90_EDGE_K)})", clipped))
        layers.append((f"{col} + ({_difference_sql(clipped)})", iterate))
        previous = iterate
    result = (f"CASE WHEN {col} > 0 AND isfinite({col}) THEN (CASE WHEN {col} >= "
              f"{_double(T68_MIN_K)} AND {col} <= {_double(T68_MAX_K)} THEN {previous} "
              f"ELSE CAST('nan' AS DOUBLE) END) ELSE {col} END")
    return layers, result


def _identity(T_K: np.ndarray) -> np.ndarray:
    return np.array(T_K, dtype=np.float64, copy=True)


@dataclass(frozen=True)
class Scale:
    """A supported temperature scale and its conversion to ITS-90.

    ``T_min_K``/``T_max_K`` bound the temperatures *on this scale* that are converted; outside,
    ``to_its90`` gives NaN (unbounded for the identity).
    """

    name: str
    title: str
    to_its90: Callable[[np.ndarray], np.ndarray]
    from_its90: Callable[[np.ndarray], np.ndarray]
    T_min_K: float
    T_max_K: float
    references: tuple[str, ...]

    def __repr__(self) -> str:
        return (f"<Scale {self.name} -> ITS-90 for {self.T_min_K:g} K <= T <= "
                f"{self.T_max_K:g} K>")


SCALES = MappingProxyType({
    "ITS-90": Scale("ITS-90", "International Temperature Scale of 1990", _identity, _identity,
                    0.0, np.inf, ("H. Preston-Thomas, Metrologia 27, 3 (1990)",)),
    "IPTS-68": Scale(
        "IPTS-68", "International Practical Temperature Scale of 1968", ipts68_to_its90,
        its90_to_ipts68, T68_MIN_K, T68_MAX_K,
        ("R. L. Rusby, J. Chem. Thermodyn. 23, 1153 (1991)",
         "R. L. Rusby, R. P. Hudson, M. Durieux, Metrologia 31, 149 (1994)",
         "H. Preston-Thomas, Metrologia 27, 3 (1990), Table 6",
         "R. N. Goldberg, R. D. Weir, Pure Appl. Chem. 64, 1545 (1992)")),
})
"""Supported scales by name; ``SCALES[name].to_its90(T)`` converts an array."""

UNSUPPORTED = MappingProxyType({
    "IPTS-48": "International Practical Temperature Scale of 1948 (text of 1960)",
    "ITS-48": "International Temperature Scale of 1948",
    "ITS-27": "International Temperature Scale of 1927",
    "EPT-76": "1976 Provisional 0.5 K to 30 K Temperature Scale",
    "PLTS-2000": "Provisional Low Temperature Scale of 2000",
})
"""Scales known by name but refused: no conversion to ITS-90 is implemented for them."""


def _key(name: str) -> str:
    return re.sub(r"[\s_\-]", "", name).upper()


_LOOKUP = MappingProxyType({_key(n): n for n in SCALES})
_REFUSED = MappingProxyType({_key(n): n for n in UNSUPPORTED})


def get_scale(scale: str) -> Scale:
    """The :class:`Scale` registered under ``scale`` (case, blanks and hyphens ignored).

    Raises
    ------
    ScaleError
        For a known but unsupported scale (IPTS-48...) and for an unknown name, listing the
        supported scales.
    """
    supported = ", ".join(SCALES)
    if not isinstance(scale, str):
        raise ScaleError(f"a temperature scale must be a string, got {scale!r}; "
                         f"supported scales: {supported}")
    key = _key(scale)
    if key in _LOOKUP:
        return SCALES[_LOOKUP[key]]
    if key in _REFUSED:
        name = _REFUSED[key]
        raise ScaleError(f"temperature scale {scale!r} ({UNSUPPORTED[name]}): no published "
                         f"conversion to ITS-90 is implemented for it; supported scales: "
                         f"{supported}; convert the data to one of them first")
    close = difflib.get_close_matches(key, list(_LOOKUP) + list(_REFUSED), n=1, cutoff=0.6)
    hint = ""
    if close:
        hint = f"; did you mean {(_LOOKUP.get(close[0]) or _REFUSED[close[0]])!r}?"
    raise ScaleError(f"unknown temperature scale {scale!r}; supported scales: {supported}{hint}")


def to_its90(T_K: np.ndarray, scale: str) -> np.ndarray:
    """Convert temperatures on ``scale`` to ITS-90, vectorised.

    Parameters
    ----------
    T_K : array_like
        Temperatures on ``scale``. [K]
    scale : str
        A name in :data:`SCALES` (``ITS-90``: identity; ``IPTS-68``: difference functions).

    Returns
    -------
    numpy.ndarray
        T90 [K], a new float64 array; NaN where the conversion has no published function
        (see :func:`out_of_range_mask`) and where the input is NaN.

    Raises
    ------
    ScaleError
        Unknown or unsupported scale (never per row).
    """
    return get_scale(scale).to_its90(np.asarray(T_K, dtype=np.float64))


def out_of_range_mask(T_K: np.ndarray, scale: str) -> np.ndarray:
    """Rows whose finite temperature on ``scale`` cannot be converted to ITS-90.

    Parameters
    ----------
    T_K : array_like
        Temperatures on ``scale``. [K]
    scale : str
        A name in :data:`SCALES`.

    Returns
    -------
    numpy.ndarray of bool
        True where the input is finite but :func:`to_its90` gives NaN (for IPTS-68: outside
        13.81 K <= T68 <= 1337.58 K, see the module docstring). Missing or non-finite inputs are
        False: they are a different fault, for the reader to report.
    """
    T = np.asarray(T_K, dtype=np.float64)
    return np.isfinite(T) & np.isnan(to_its90(T, scale))
