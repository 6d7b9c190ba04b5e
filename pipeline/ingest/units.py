"""Unit conversion of raw columns to SI: one linear rule per column, applied with numpy.

A raw column declares its unit once (``unit = "bar"``); :func:`conversion` turns that
declaration into a frozen :class:`Linear` rule ``si = x * factor + offset`` computed with pint
*once*, and :meth:`Linear.apply` applies it to the whole column as a numpy operation. No pint
Quantity is ever built per row (per-row Quantities are some 700x slower).

SI targets (see docs/interfaces.md): temperature [K], pressure [Pa], density [kg/m^3],
enthalpy [J/mol], dimensionless [1].

How a unit string is matched (a decision of this module)
--------------------------------------------------------
1. Typography is normalised: surrounding and repeated blanks, ``**`` -> ``^``, superscript
   digits (``m³`` -> ``m^3``, ``m⁻³`` -> ``m^-3``), the middle dot and ``*`` -> a blank,
   ``℃``/``℉`` -> ``°C``/``°F``, the ordinal sign ``º`` -> ``°``, the Kelvin sign -> ``K``.
2. The normalised string must equal one of the explicit spellings in :data:`ALIASES` for the
   column's quantity. Matching is **case-sensitive**; there is no case folding, because unit
   symbols are case-sensitive (``mPa`` is a millipascal, ``MPa`` a megapascal). A string that
   differs from an accepted spelling only in case (``kpa``, ``mpa``) is refused with a message
   naming the accepted spelling; when pint can read more than one case variant with the
   column's dimension (``mpa``: millipascal or megapascal) the message says it is ambiguous and
   lists the readings.
3. Spellings that are ambiguous in themselves (``deg``, ``cal/mol``, ``M``, ``at``...) are
   refused with the reason (:data:`AMBIGUOUS`).
4. A unit of another quantity (``K`` in a pressure column), or any pint unit of the wrong
   dimension, is refused naming the expected and the given dimension; a pint unit of the right
   dimension that is not in the list (``inHg``) is refused too: the list is the contract.
5. Anything else is unknown: the message lists the accepted units and suggests the closest
   spellings (:mod:`difflib`).

Definitions are pint's (after removing its float noise, :func:`_tidy`), exact where the
definition is exact: 1 atm = 101 325 Pa, 1 bar = 10^5 Pa, 1 Torr = 101 325/760 Pa,
1 psi = 0.453 592 37 kg x 9.806 65 m s^-2 / (0.0254 m)^2 = 6 894.757... Pa,
1 mmHg (conventional) = 13.5951 g cm^-3 x 9.806 65 m s^-2 x 1 mm = 133.322 387 415 Pa. The mmHg value is checked when the registry is built and defined
explicitly should a pint release ever differ (:func:`_mmhg_name`).

References
----------
BIPM, *The International System of Units (SI)*, 9th ed. (2019) (atm, bar, Torr; the numeric
definitions were tabulated in the 8th ed. (2006), Tables 9 and 11 -- table numbers from memory).
A. Thompson and B. N. Taylor, *Guide for the Use of the International System of Units (SI)*,
NIST Special Publication 811 (2008), Appendix B.8 (mmHg, conventional: 1.333 224 E+02 Pa;
psi: 6.894 757 E+03 Pa; thermochemical and International Table calories).
"""

from __future__ import annotations

import difflib
import functools
import itertools
import math
import numbers
import re
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
import pint

from pipeline.errors import UnitError

MMHG_PA = 133.322387415
"""Conventional millimetre of mercury [Pa]: 13 595.1 kg/m^3 x 9.806 65 m/s^2 x 1e-3 m (exact)."""

REFERENCES = ("absolute", "gauge")
"""Pressure references: ``gauge`` values are relative to the stated ambient pressure."""


@dataclass(frozen=True)
class _Quantity:
    si_unit: str   # symbol written into the store and into Linear.si_unit
    si_pint: str   # the same unit as pint reads it
    title: str


QUANTITIES = MappingProxyType({
    "temperature": _Quantity("K", "kelvin", "temperature"),
    "pressure": _Quantity("Pa", "pascal", "pressure"),
    "density": _Quantity("kg/m^3", "kilogram / meter ** 3", "density"),
    "enthalpy": _Quantity("J/mol", "joule / mole", "enthalpy"),
    "dimensionless": _Quantity("1", "dimensionless", "dimensionless"),
})


@dataclass(frozen=True)
class UnitDef:
    """How one accepted unit reaches the SI unit of its quantity.

    ``factor = pint(1 pint_expr -> via) * M**molar_mass_power``; offsets come from pint for
    offset units (degC, degF). ``delta`` is the pint unit for differences (``delta_degC``).
    """

    pint_expr: str
    via: str
    molar_mass_power: int = 0
    delta: str | None = None
    meaning: str = ""


_K, _PA, _RHO, _RHO_N = "kelvin", "pascal", "kilogram / meter ** 3", "mole / meter ** 3"
_HM, _HW = "joule / mole", "joule / kilogram"

UNITS = MappingProxyType({
    "temperature": MappingProxyType({
        "K": UnitDef("kelvin", _K, meaning="kelvin"),
        "degC": UnitDef("degree_Celsius", _K, delta="delta_degree_Celsius",
                        meaning="degree Celsius"),
        "degF": UnitDef("degree_Fahrenheit", _K, delta="delta_degree_Fahrenheit",
                        meaning="degree Fahrenheit"),
        "degR": UnitDef("degree_Rankine", _K, meaning="degree Rankine"),
    }),
    "pressure": MappingProxyType({
        "Pa": UnitDef("pascal", _PA, meaning="pascal"),
        "hPa": UnitDef("hectopascal", _PA, meaning="hectopascal"),
        "kPa": UnitDef("kilopascal", _PA, meaning="kilopascal"),
        "MPa": UnitDef("megapascal", _PA, meaning="megapascal"),
        "GPa": UnitDef("gigapascal", _PA, meaning="gigapascal"),
        "mbar": UnitDef("millibar", _PA, meaning="millibar"),
        "bar": UnitDef("bar", _PA, meaning="bar"),
        "atm": UnitDef("standard_atmosphere", _PA, meaning="standard atmosphere"),
        "torr": UnitDef("torr", _PA, meaning="torr (101325/760 Pa)"),
        "mmHg": UnitDef("millimeter_Hg", _PA, meaning="millimetre of mercury, conventional"),
        "psi": UnitDef("psi", _PA, meaning="pound-force per square inch"),
    }),
    "density": MappingProxyType({
        "kg/m^3": UnitDef("kilogram / meter ** 3", _RHO),
        "g/cm^3": UnitDef("gram / centimeter ** 3", _RHO),
        "g/mL": UnitDef("gram / milliliter", _RHO),
        "g/L": UnitDef("gram / liter", _RHO),
        "kg/L": UnitDef("kilogram / liter", _RHO),
        "kg/dm^3": UnitDef("kilogram / decimeter ** 3", _RHO),
        "mol/L": UnitDef("mole / liter", _RHO_N, 1, meaning="molar density"),
        "mol/dm^3": UnitDef("mole / decimeter ** 3", _RHO_N, 1, meaning="molar density"),
        "mol/m^3": UnitDef("mole / meter ** 3", _RHO_N, 1, meaning="molar density"),
        "kmol/m^3": UnitDef("kilomole / meter ** 3", _RHO_N, 1, meaning="molar density"),
        "mol/cm^3": UnitDef("mole / centimeter ** 3", _RHO_N, 1, meaning="molar density"),
    }),
    "enthalpy": MappingProxyType({
        "J/mol": UnitDef("joule / mole", _HM),
        "kJ/mol": UnitDef("kilojoule / mole", _HM),
        "kJ/kmol": UnitDef("kilojoule / kilomole", _HM),
        "J/kg": UnitDef("joule / kilogram", _HW, 1, meaning="specific enthalpy"),
        "kJ/kg": UnitDef("kilojoule / kilogram", _HW, 1, meaning="specific enthalpy"),
        "J/g": UnitDef("joule / gram", _HW, 1, meaning="specific enthalpy"),
        "cal_th/mol": UnitDef("thermochemical_calorie / mole", _HM,
                              meaning="thermochemical calorie (4.184 J) per mole"),
        "kcal_th/mol": UnitDef("kilo_thermochemical_calorie / mole", _HM,
                               meaning="thermochemical kilocalorie per mole"),
        "cal_IT/mol": UnitDef("international_calorie / mole", _HM,
                              meaning="International Table calorie (4.1868 J) per mole"),
        "kcal_IT/mol": UnitDef("kilo_international_calorie / mole", _HM,
                               meaning="International Table kilocalorie per mole"),
    }),
    "dimensionless": MappingProxyType({
        "1": UnitDef("dimensionless", "dimensionless"),
        "%": UnitDef("percent", "dimensionless", meaning="percent"),
    }),
})
"""Accepted units per quantity: canonical spelling -> definition (the contract's unit list)."""

_ALIAS_LISTS = {
    "temperature": {
        "K": ("K", "kelvin", "Kelvin", "kelvins", "degK", "°K", "deg K"),
        "degC": ("degC", "°C", "° C", "deg C", "deg_C", "C", "celsius", "Celsius",
                 "degree_Celsius", "degrees C"),
        "degF": ("degF", "°F", "° F", "deg F", "deg_F", "F", "fahrenheit", "Fahrenheit",
                 "degree_Fahrenheit", "degrees F"),
        "degR": ("degR", "°R", "° R", "deg R", "deg_R", "R", "rankine", "Rankine",
                 "degree_Rankine", "degrees R"),
    },
    "pressure": {
        "Pa": ("Pa", "pascal"), "hPa": ("hPa", "hectopascal"), "kPa": ("kPa", "kilopascal"),
        "MPa": ("MPa", "megapascal"), "GPa": ("GPa", "gigapascal"),
        "mbar": ("mbar", "millibar"), "bar": ("bar", "bara", "barg"),
        "atm": ("atm", "standard_atmosphere"), "torr": ("torr", "Torr"),
        "mmHg": ("mmHg", "mm Hg", "mm_Hg"), "psi": ("psi", "psia", "psig"),
    },
    "density": {
        "kg/m^3": ("kg/m^3", "kg/m3", "kg m^-3"), "g/cm^3": ("g/cm^3", "g/cm3", "g cm^-3"),
        "g/mL": ("g/mL", "g/ml"), "g/L": ("g/L", "g/l"), "kg/L": ("kg/L", "kg/l"),
        "kg/dm^3": ("kg/dm^3", "kg/dm3"), "mol/L": ("mol/L", "mol/l"),
        "mol/dm^3": ("mol/dm^3", "mol/dm3", "mol dm^-3"),
        "mol/m^3": ("mol/m^3", "mol/m3", "mol m^-3"), "kmol/m^3": ("kmol/m^3", "kmol/m3"),
        "mol/cm^3": ("mol/cm^3", "mol/cm3"),
    },
    "enthalpy": {
        "J/mol": ("J/mol", "J mol^-1"), "kJ/mol": ("kJ/mol", "kJ mol^-1"),
        "kJ/kmol": ("kJ/kmol",), "J/kg": ("J/kg", "J kg^-1"), "kJ/kg": ("kJ/kg", "kJ kg^-1"),
        "J/g": ("J/g", "J g^-1"), "cal_th/mol": ("cal_th/mol",), "kcal_th/mol": ("kcal_th/mol",),
        "cal_IT/mol": ("cal_IT/mol",), "kcal_IT/mol": ("kcal_IT/mol",),
    },
    "dimensionless": {"1": ("1", "", "-", "dimensionless"), "%": ("%", "percent")},
}
ALIASES = MappingProxyType({
    q: MappingProxyType({alias: canonical for canonical, spellings in table.items()
                         for alias in spellings})
    for q, table in _ALIAS_LISTS.items()})
"""Per quantity: every accepted (normalised, case-sensitive) spelling -> canonical unit."""

IMPLIED_REFERENCE = MappingProxyType({
    "bara": "absolute", "psia": "absolute", "barg": "gauge", "psig": "gauge"})
"""Spellings that carry their pressure reference; it must agree with ``reference``."""

AMBIGUOUS = MappingProxyType({
    "deg": "'deg' does not say which degree (angle, Celsius, Fahrenheit, Rankine)",
    "degree": "'degree' does not say which degree (angle, Celsius, Fahrenheit, Rankine)",
    "degrees": "'degrees' does not say which degree (angle, Celsius, Fahrenheit, Rankine)",
    "°": "'°' alone does not say which degree (Celsius, Fahrenheit, Rankine)",
    "cal/mol": "the calorie has several definitions: write 'cal_th/mol' (thermochemical, "
               "4.184 J) or 'cal_IT/mol' (International Table, 4.1868 J)",
    "kcal/mol": "the calorie has several definitions: write 'kcal_th/mol' (thermochemical, "
                "4.184 kJ) or 'kcal_IT/mol' (International Table, 4.1868 kJ)",
    "cal/g": "the calorie has several definitions, and only molar calories are accepted: "
             "convert to 'J/g'",
    "M": "'M' may mean molar (mol/L) or the prefix mega: write 'mol/L'",
    "at": "'at' (technical atmosphere, 98 066.5 Pa) is easily confused with 'atm' "
          "(101 325 Pa): write 'atm' or convert to 'kPa'",
    "ata": "'ata' (technical atmosphere, absolute) is easily confused with 'atm': convert to 'kPa'",
    "atg": "'atg' (technical atmosphere, gauge) is easily confused with 'atm': convert to 'kPa'",
})
"""Spellings refused because they are ambiguous in themselves, with the reason."""

# typographic substitutions applied before matching (order matters: '⁻³' before '³')
_TYPOGRAPHY = (("**", "^"), ("⁻¹", "^-1"), ("⁻²", "^-2"), ("⁻³", "^-3"), ("¹", "^1"),
               ("²", "^2"), ("³", "^3"), ("·", " "), ("⋅", " "), ("*", " "), ("℃", "°C"),
               ("℉", "°F"), ("º", "°"), ("\u212a", "K"))
_BLANKS = re.compile(r"\s+")
_MAX_CASE_LETTERS = 8  # case variants probed through pint (2**8 parses at most, error path only)


@dataclass(frozen=True)
class Linear:
    """A linear rule from a source unit to SI: ``si = values * factor + offset``.

    Parameters
    ----------
    factor : float
        Multiplier to the SI unit. [SI unit / source unit]
    offset : float
        Added after scaling (degC, degF, gauge pressures), zero otherwise. [SI unit]
    si_unit : str
        SI unit of the result (``K``, ``Pa``, ``kg/m^3``, ``J/mol``, ``1``).
    source_unit : str
        Canonical spelling of the source unit.
    note : str
        What else went into the rule (gauge reference, molar mass, difference), for people.
    """

    factor: float
    offset: float
    si_unit: str
    source_unit: str
    note: str = ""

    def __post_init__(self) -> None:
        if not (math.isfinite(self.factor) and self.factor != 0 and math.isfinite(self.offset)):
            raise ValueError(f"Linear needs a finite non-zero factor and a finite offset, "
                             f"got factor={self.factor!r}, offset={self.offset!r}")

    def apply(self, values: np.ndarray) -> np.ndarray:
        """Convert a column to SI in one vectorised step (NaN stays NaN).

        Parameters
        ----------
        values : array_like
            Values in :attr:`source_unit`.

        Returns
        -------
        numpy.ndarray
            float64 values in :attr:`si_unit`.
        """
        return np.asarray(values, dtype=np.float64) * self.factor + self.offset

    def __repr__(self) -> str:
        rule = f"{self.source_unit} -> {self.si_unit}: x*{_fmt(self.factor)}"
        if self.offset:
            rule += f" {'-' if self.offset < 0 else '+'} {_fmt(abs(self.offset))}"
        return rule + (f" ({self.note})" if self.note else "")


def _fmt(x: float) -> str:
    """Shortest round-trip text of a float, without a trailing '.0'."""
    text = repr(float(x))
    return text[:-2] if text.endswith(".0") else text


# --------------------------------------------------------------------------- pint registry


def _mmhg_name(ureg) -> str:
    """Name of the conventional mmHg in ``ureg``: pint's own if exact, else one defined here."""
    if ureg.Quantity(1.0, "millimeter_Hg").to("pascal").magnitude == MMHG_PA:
        return "millimeter_Hg"
    ureg.define(f"fluidledger_mmHg = {MMHG_PA!r} * pascal")
    return "fluidledger_mmHg"


@functools.cache
def _registry() -> tuple[pint.UnitRegistry, MappingProxyType]:
    """The module's private pint registry and pint-name overrides (built on first use)."""
    ureg = pint.UnitRegistry()
    ureg.define("kilo_thermochemical_calorie = 1000 * thermochemical_calorie")
    ureg.define("kilo_international_calorie = 1000 * international_calorie")
    overrides = {"millimeter_Hg": _mmhg_name(ureg)}
    return ureg, MappingProxyType(overrides)


def _pint(expr: str):
    ureg, overrides = _registry()
    return ureg.parse_units(overrides.get(expr, expr))


@functools.lru_cache(maxsize=4096)
def _magnitude(value: float, expr: str, target: str) -> float:
    """``value`` in pint unit ``expr`` expressed in ``target`` (cached: a conversion that
    depends on a fluid's molar mass reuses the pint part for every fluid)."""
    ureg, _ = _registry()
    return float(ureg.Quantity(value, _pint(expr)).to(_pint(target)).magnitude)


@functools.cache
def _dimensions(quantity: str) -> frozenset:
    """The pint dimensionalities accepted in a column of ``quantity`` (mass or molar forms)."""
    return frozenset(_pint(u.pint_expr).dimensionality for u in UNITS[quantity].values())


# --------------------------------------------------------------------------- resolving names


def normalise_spelling(unit: str) -> str:
    """The unit string after the typographic normalisation described in the module docstring."""
    text = _BLANKS.sub(" ", unit.strip())
    for old, new in _TYPOGRAPHY:
        text = text.replace(old, new)
    return _BLANKS.sub(" ", text).strip()


def accepted_units(quantity: str) -> tuple[str, ...]:
    """Canonical spellings accepted for ``quantity`` (raises UnitError for an unknown quantity)."""
    _check_quantity(quantity)
    return tuple(UNITS[quantity])


def _check_quantity(quantity: str) -> None:
    if quantity not in QUANTITIES:
        raise UnitError(f"unknown quantity {quantity!r}; expected one of "
                        f"{', '.join(QUANTITIES)}")


def _listing(quantity: str) -> str:
    shown = [u if u else "''" for u in UNITS[quantity]]
    return f"accepted {QUANTITIES[quantity].title} units: {', '.join(shown)}"


def _a(word: str) -> str:
    """``word`` with its indefinite article."""
    return f"{'an' if word[:1] in 'aeiou' else 'a'} {word}"


def _dimension_text(quantity: str) -> str:
    dims = sorted({str(d) for d in _dimensions(quantity)})
    return f"{' or '.join(dims)}, SI unit {QUANTITIES[quantity].si_unit}"


def _case_readings(text: str, quantity: str) -> dict[tuple[float, float], str]:
    """Case variants of ``text`` that pint reads with the column's dimension: value -> spelling."""
    letters = [i for i, ch in enumerate(text) if ch.isalpha()]
    if len(letters) > _MAX_CASE_LETTERS:
        return {}
    ureg, _ = _registry()
    readings: dict[tuple[float, float], str] = {}
    for flips in itertools.product((False, True), repeat=len(letters)):
        chars = list(text.lower())
        for i, up in zip(letters, flips):
            if up:
                chars[i] = chars[i].upper()
        variant = "".join(chars)
        try:  # probing arbitrary strings: pint raises several error types for nonsense
            units = ureg.parse_units(variant)
            if units.dimensionality not in _dimensions(quantity):
                continue
            si = ureg.parse_units(QUANTITIES[quantity].si_pint)
            if units.dimensionality != si.dimensionality:
                continue  # molar vs mass forms are not compared here
            key = (round(ureg.Quantity(1.0, units).to(si).magnitude, 12),
                   round(ureg.Quantity(0.0, units).to(si).magnitude, 12))
        except Exception:  # noqa: BLE001 - any parse failure means "not a reading"
            continue
        readings.setdefault(key, f"'{variant}' = {units}")
    return readings


def _resolve(unit: str, quantity: str) -> tuple[str, str | None]:
    """(canonical unit, implied pressure reference or None) for a unit string; UnitError if none."""
    _check_quantity(quantity)
    if not isinstance(unit, str):
        raise UnitError(f"a {quantity} unit must be a string, got {unit!r}")
    text = normalise_spelling(unit)
    table = ALIASES[quantity]
    if text in table:
        return table[text], IMPLIED_REFERENCE.get(text)
    if not text:
        raise UnitError(f"no {quantity} unit given; {_listing(quantity)}")
    if text in table:
        return table[text], IMPLIED_REFERENCE.get(text)
    if text in AMBIGUOUS:
        raise UnitError(f"ambiguous {quantity} unit {unit!r}: {AMBIGUOUS[text]}; "
                        f"{_listing(quantity)}")
    expected = f"{_a(QUANTITIES[quantity].title)} unit was expected ({_dimension_text(quantity)})"
    for other, other_table in ALIASES.items():
        if other != quantity and text in other_table:
            dim = _pint(UNITS[other][other_table[text]].pint_expr).dimensionality
            raise UnitError(f"{expected}, but {unit!r} is {_a(QUANTITIES[other].title)} unit "
                            f"({dim}); {_listing(quantity)}")
    same_but_case = sorted({table[s] for s in table if s.casefold() == text.casefold()})
    if same_but_case:
        readings = _case_readings(text, quantity)
        want = " or ".join(f"'{c}'" for c in same_but_case)
        if len(readings) > 1:
            raise UnitError(
                f"{quantity} unit {unit!r} is ambiguous: unit symbols are case-sensitive and its "
                f"case variants read as {'; '.join(readings.values())}; write {want} exactly "
                f"if that is what is meant")
        raise UnitError(f"{quantity} unit {unit!r} is not accepted: unit symbols are "
                        f"case-sensitive and only exact spellings are accepted; write {want}")
    parsed = _try_parse(text)
    if parsed is not None and parsed.dimensionality not in _dimensions(quantity):
        raise UnitError(f"{expected}, but {unit!r} reads as {parsed} "
                        f"({parsed.dimensionality}); {_listing(quantity)}")
    if parsed is not None:
        raise UnitError(f"{quantity} unit {unit!r} (read as {parsed}) is not in the accepted "
                        f"list; convert the column or ask for an alias; {_listing(quantity)}")
    folded = {s.casefold(): s for s in table if s}
    close = difflib.get_close_matches(text.casefold(), list(folded), n=6, cutoff=0.6)
    suggestions = list(dict.fromkeys(table[folded[c]] for c in close))[:3]
    hint = f"; did you mean {' or '.join(map(repr, suggestions))}?" if suggestions else ""
    raise UnitError(f"unknown {quantity} unit {unit!r}; {_listing(quantity)}{hint}")


def _try_parse(text: str):
    ureg, _ = _registry()
    try:  # arbitrary user text: pint raises several error types for nonsense
        return ureg.parse_units(text) if text else None
    except Exception:  # noqa: BLE001
        return None


# --------------------------------------------------------------------------- the rule


def conversion(unit: str, quantity: str, *, molar_mass_kg_mol: float | None = None,
               reference: str = "absolute", ambient_Pa: float | None = None,
               difference: bool = False) -> Linear:
    """The rule converting a column in ``unit`` to the SI unit of ``quantity``.

    Parameters
    ----------
    unit : str
        Unit as written in the batch (matched as described in the module docstring).
    quantity : str
        ``temperature`` [K], ``pressure`` [Pa], ``density`` [kg/m^3], ``enthalpy`` [J/mol] or
        ``dimensionless`` [1].
    molar_mass_kg_mol : float, optional
        Molar mass of the fluid, needed by molar densities (mol/L) and specific enthalpies
        (kJ/kg); ignored otherwise. [kg/mol]
    reference : {"absolute", "gauge"}
        Pressure reference; ``gauge`` values are relative to ``ambient_Pa``.
    ambient_Pa : float, optional
        Ambient pressure of a gauge column, required with ``reference="gauge"`` and added as the
        offset; ignored for absolute pressures. [Pa]
    difference : bool
        The column holds differences (uncertainties, temperature differences): offsets (degC,
        degF, gauge ambient) are dropped, so 0.1 degC -> 0.1 K and 0.1 degF -> 0.0556 K.

    Returns
    -------
    Linear
        ``si = x * factor + offset``, with ``repr`` like ``degC -> K: x*1 + 273.15``.

    Raises
    ------
    UnitError
        Unknown, misspelt, ambiguous or dimensionally wrong unit; missing molar mass or ambient
        pressure; a reference that disagrees with the unit (``psig`` as absolute).

    Notes
    -----
    Results are cached: a column's rule is computed once, whatever the number of rows.
    """
    if not isinstance(unit, str) or not isinstance(quantity, str):
        raise UnitError(f"unit and quantity must be strings, got {unit!r} and {quantity!r}")
    if not isinstance(reference, str):
        raise UnitError(f"the pressure reference must be a string, got {reference!r}")
    for name, value in (("molar_mass_kg_mol", molar_mass_kg_mol), ("ambient_Pa", ambient_Pa)):
        if value is not None and not _is_real(value):
            raise UnitError(f"{name} must be a real number, got {value!r}")
    M = None if molar_mass_kg_mol is None else float(molar_mass_kg_mol)
    ambient = None if ambient_Pa is None else float(ambient_Pa)
    return _conversion(unit, quantity, M, reference, ambient, bool(difference))


@functools.lru_cache(maxsize=1024)
def _conversion(unit: str, quantity: str, molar_mass_kg_mol: float | None, reference: str,
                ambient_Pa: float | None, difference: bool) -> Linear:
    canonical, implied = _resolve(unit, quantity)
    if reference not in REFERENCES:
        raise UnitError(f"unknown pressure reference {reference!r}; expected one of "
                        f"{', '.join(REFERENCES)}")
    if reference != "absolute" and quantity != "pressure":
        raise UnitError(f"reference {reference!r} applies to pressures only, not to {quantity}")
    if implied is not None and implied != reference and not difference:
        raise UnitError(f"unit {unit!r} is a{'n' if implied == 'absolute' else ''} {implied} "
                        f"pressure but the reference is {reference!r}; "
                        + ("set reference = \"gauge\" and give the ambient pressure"
                           if implied == "gauge" else "use reference = \"absolute\""))
    udef = UNITS[quantity][canonical]
    si = QUANTITIES[quantity].si_unit
    notes = []
    if difference:
        factor, offset = _magnitude(1.0, udef.delta or udef.pint_expr, udef.via), 0.0
        notes.append("difference")
    else:
        offset = _magnitude(0.0, udef.pint_expr, udef.via)
        factor = _magnitude(1.0, udef.pint_expr, udef.via) - offset if udef.delta is None \
            else _magnitude(1.0, udef.delta, udef.via)
    if udef.molar_mass_power:
        M = _molar_mass(molar_mass_kg_mol, unit, quantity, udef)
        factor *= M ** udef.molar_mass_power
        notes.append(f"M = {_fmt(M)} kg/mol")
    if reference == "gauge":
        if ambient_Pa is None:
            raise UnitError(f"a gauge pressure in {unit!r} needs the ambient pressure "
                            f"(ambient = {{ value, unit }})")
        if not (_is_real(ambient_Pa) and math.isfinite(ambient_Pa) and ambient_Pa > 0):
            raise UnitError(f"the ambient pressure of a gauge column must be a positive finite "
                            f"number of pascals, got {ambient_Pa!r}")
        if not difference:
            offset = float(ambient_Pa)
            notes.append(f"gauge; ambient {_fmt(ambient_Pa)} Pa")
    return Linear(_tidy(factor), _tidy(offset), si, canonical, "; ".join(notes))


def _tidy(x: float) -> float:
    """Remove pint's float noise: a value within 4 ulp of a 12-digit decimal becomes that decimal.

    pint chains prefix factors in binary floating point (g/cm^3 -> 999.9999999999999 kg/m^3);
    the decimal is the exact definition, and the change is below 1e-15 relative. Values that
    are not short decimals (5/9, psi) are left exactly as pint gives them.
    """
    x = float(x)
    if x == 0.0 or not math.isfinite(x):
        return x
    short = float(f"{x:.12g}")
    return short if abs(short - x) <= 4 * math.ulp(x) else x


def _molar_mass(M: float | None, unit: str, quantity: str, udef: UnitDef) -> float:
    kind = "a molar" if udef.molar_mass_power > 0 and quantity == "density" else "a mass-based"
    if M is None:
        raise UnitError(f"{unit!r} is {kind} {quantity} unit: converting it to "
                        f"{QUANTITIES[quantity].si_unit} needs the fluid's molar mass")
    if not (_is_real(M) and math.isfinite(M) and M > 0):
        raise UnitError(f"the molar mass must be a positive finite number of kg/mol, got {M!r}")
    if M > 1.0:
        raise UnitError(f"molar mass {M!r} kg/mol is implausible for a pure fluid "
                        f"(was it given in g/mol?)")
    return float(M)


def _is_real(x) -> bool:
    """True for a real number (Python or numpy), False for bool, str, None..."""
    return isinstance(x, numbers.Real) and not isinstance(x, bool)
