"""Unit conversion rules of pipeline.ingest.units: exact definitions, aliases, refusals."""

from __future__ import annotations

import dataclasses

import numpy as np
import pint
import pytest

from pipeline.errors import UnitError
from pipeline.ingest import units
from pipeline.ingest.units import ALIASES, UNITS, Linear, conversion

M_WATER = 0.018015268  # kg/mol, IAPWS-95
M_ARGON = 0.039948     # kg/mol, Tegeler, Span & Wagner (1999)
M_N2 = 0.02801348      # kg/mol, Span et al. (2000)

SI_BROCHURE = "BIPM, The International System of Units, 9th ed. (2019)"
SP811 = "NIST SP 811 (2008), Appendix B.8"


# ----------------------------------------------------------------------------- pressure


@pytest.mark.parametrize("unit, pascal, atol, source", [
    ("atm", 101325.0, 0.0, SI_BROCHURE),
    ("bar", 1e5, 0.0, SI_BROCHURE),
    ("torr", 101325.0 / 760.0, 1e-12, SI_BROCHURE),
    ("Torr", 101325.0 / 760.0, 1e-12, SI_BROCHURE),
    ("mmHg", 133.322387415, 0.0, SP811 + ", conventional: 13.5951 g/cm^3 x g_n x 1 mm"),
    ("psi", 6894.757, 1e-3, SP811),
    ("mbar", 100.0, 1e-12, "SI prefix milli"),
    ("hPa", 100.0, 1e-12, "SI prefix hecto"),
    ("kPa", 1e3, 0.0, "SI prefix kilo"),
    ("MPa", 1e6, 0.0, "SI prefix mega"),
    ("GPa", 1e9, 0.0, "SI prefix giga"),
    ("Pa", 1.0, 0.0, "SI unit"),
])
def test_pressure_unit_definitions(unit, pascal, atol, source):
    """One unit of each accepted pressure equals its defined value in pascals, with no offset."""
    rule = conversion(unit, "pressure")
    assert rule.factor == pytest.approx(pascal, rel=1e-15, abs=atol), source
    assert rule.offset == 0.0
    assert rule.si_unit == "Pa"


def test_mmhg_is_exact_in_pint_or_defined_here():
    """pint's mmHg is the conventional 133.322 387 415 Pa; otherwise the module defines it."""
    ureg = pint.UnitRegistry()
    assert units._mmhg_name(ureg) == "millimeter_Hg"

    class OtherRegistry:  # a registry whose mmHg differs, as an older pint could have
        def __init__(self):
            self.defined = []

        def Quantity(self, value, unit):  # noqa: N802 - mirrors pint's API
            return ureg.Quantity(value * 1.0001, "pascal") if unit == "millimeter_Hg" \
                else ureg.Quantity(value, unit)

        def define(self, text):
            self.defined.append(text)

    other = OtherRegistry()
    assert units._mmhg_name(other) == "fluidledger_mmHg"
    assert other.defined == ["fluidledger_mmHg = 133.322387415 * pascal"]


@pytest.mark.parametrize("value, ambient, expected, unit", [
    (1.5, 101325.0, 251325.0, "bar"),
    (0.0, 101325.0, 101325.0, "bar"),
    (-0.5, 100000.0, 50000.0, "bar"),
    (10.0, 101325.0, 101325.0 + 68947.572931683635, "psig"),
    (200.0, 98000.0, 298000.0, "kPa"),
])
def test_gauge_pressure_adds_the_ambient(value, ambient, expected, unit):
    """A gauge reading is converted to absolute by adding the stated ambient pressure."""
    rule = conversion(unit, "pressure", reference="gauge", ambient_Pa=ambient)
    assert rule.apply(np.array([value]))[0] == pytest.approx(expected, rel=1e-14)
    assert "gauge" in repr(rule)


def test_gauge_pressure_without_ambient_is_refused():
    """A gauge column without its ambient pressure raises UnitError naming the ambient."""
    with pytest.raises(UnitError, match="gauge pressure in 'bar' needs the ambient pressure"):
        conversion("bar", "pressure", reference="gauge")


@pytest.mark.parametrize("ambient", [0.0, -1.0, float("nan"), float("inf"), "101325", True])
def test_gauge_pressure_with_bad_ambient_is_refused(ambient):
    """A non-positive, non-finite or non-numeric ambient pressure raises UnitError."""
    with pytest.raises(UnitError, match="ambient"):
        conversion("bar", "pressure", reference="gauge", ambient_Pa=ambient)


@pytest.mark.parametrize("unit, reference, match", [
    ("psig", "absolute", "'psig' is a gauge pressure but the reference is 'absolute'"),
    ("barg", "absolute", "set reference = \"gauge\""),
    ("psia", "gauge", "'psia' is an absolute pressure but the reference is 'gauge'"),
])
def test_unit_with_implied_reference_must_agree(unit, reference, match):
    """Spellings carrying a reference (psig, barg, psia) must agree with the stated reference."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, "pressure", reference=reference, ambient_Pa=101325.0)


@pytest.mark.parametrize("quantity, reference, match", [
    ("pressure", "gage", "unknown pressure reference 'gage'; expected one of absolute, gauge"),
    ("temperature", "gauge", "applies to pressures only"),
])
def test_bad_reference_is_refused(quantity, reference, match):
    """An unknown reference, or a reference on a non-pressure column, raises UnitError."""
    unit = "bar" if quantity == "pressure" else "K"
    with pytest.raises(UnitError, match=match):
        conversion(unit, quantity, reference=reference, ambient_Pa=101325.0)


# ----------------------------------------------------------------------------- temperature


@pytest.mark.parametrize("unit, value, kelvin, source", [
    ("K", 273.16, 273.16, "SI unit"),
    ("degC", 0.0, 273.15, "SI Brochure 9th ed.: t/degC = T/K - 273.15"),
    ("degC", 100.0, 373.15, "SI Brochure 9th ed.: t/degC = T/K - 273.15"),
    ("degC", -273.15, 0.0, "SI Brochure 9th ed.: t/degC = T/K - 273.15"),
    ("degF", 32.0, 273.15, SP811 + ": t/degF = 1.8 t/degC + 32"),
    ("degF", 212.0, 373.15, SP811 + ": t/degF = 1.8 t/degC + 32"),
    ("degF", -459.67, 0.0, SP811 + ": t/degF = 1.8 t/degC + 32"),
    ("degR", 491.67, 273.15, SP811 + ": T/K = T/degR / 1.8"),
    ("degR", 0.0, 0.0, SP811 + ": T/K = T/degR / 1.8"),
])
def test_temperature_offsets(unit, value, kelvin, source):
    """Celsius, Fahrenheit and Rankine temperatures give the kelvin values of their definitions."""
    assert conversion(unit, "temperature").apply(np.array([value]))[0] == pytest.approx(
        kelvin, abs=1e-12), source


@pytest.mark.parametrize("alias, canonical", [
    ("C", "degC"), ("°C", "degC"), ("℃", "degC"), ("ºC", "degC"), ("celsius", "degC"),
    ("deg C", "degC"), ("F", "degF"), ("°F", "degF"), ("fahrenheit", "degF"), ("R", "degR"),
    ("°R", "degR"), ("rankine", "degR"), ("kelvin", "K"), ("°K", "K"), ("\u212a", "K"),
])
def test_temperature_aliases(alias, canonical):
    """Common spellings of the temperature units resolve to the canonical unit."""
    assert conversion(alias, "temperature") == conversion(canonical, "temperature")
    assert conversion(alias, "temperature").source_unit == canonical


@pytest.mark.parametrize("unit, value, kelvin", [
    ("degC", 0.1, 0.1),
    ("K", 0.1, 0.1),
    ("degF", 0.1, 0.1 * 5.0 / 9.0),
    ("degR", 0.1, 0.1 * 5.0 / 9.0),
])
def test_difference_drops_temperature_offsets(unit, value, kelvin):
    """A difference (uncertainty) converts by the factor only: 0.1 degF is 0.0556 K."""
    rule = conversion(unit, "temperature", difference=True)
    assert rule.offset == 0.0
    assert rule.apply(np.array([value]))[0] == pytest.approx(kelvin, rel=1e-15)


def test_difference_drops_gauge_ambient():
    """An uncertainty of a gauge pressure is not shifted by the ambient pressure."""
    rule = conversion("bar", "pressure", reference="gauge", ambient_Pa=101325.0,
                      difference=True)
    assert (rule.factor, rule.offset) == (1e5, 0.0)


def test_difference_ignores_implied_reference():
    """An uncertainty column in psig needs no ambient pressure: differences have no reference."""
    assert conversion("psig", "pressure", difference=True).offset == 0.0


# ----------------------------------------------------------------------------- density, enthalpy


@pytest.mark.parametrize("unit, M, kg_m3, rtol, source", [
    ("kg/m^3", None, 1.0, 0.0, "SI unit"),
    ("g/cm^3", None, 1000.0, 1e-15, "definition (pint gives 999.9999999999999)"),
    ("g/mL", None, 1000.0, 1e-15, "definition"),
    ("g/L", None, 1.0, 1e-15, "definition (pint gives 0.9999999999999999)"),
    ("kg/L", None, 1000.0, 1e-15, "definition"),
    ("kg/dm^3", None, 1000.0, 1e-15, "definition"),
    ("mol/L", M_WATER, 18.015268, 1e-15, "M of water, IAPWS-95"),
    ("mol/dm^3", M_WATER, 18.015268, 1e-15, "M of water, IAPWS-95"),
    ("mol/m^3", M_WATER, 0.018015268, 1e-15, "M of water, IAPWS-95"),
    ("kmol/m^3", M_WATER, 18.015268, 1e-15, "M of water, IAPWS-95"),
    ("mol/cm^3", M_WATER, 18015.268, 1e-15, "M of water, IAPWS-95"),
])
def test_density_factors(unit, M, kg_m3, rtol, source):
    """Mass and molar densities convert to kg/m^3, molar ones through the molar mass."""
    rule = conversion(unit, "density", molar_mass_kg_mol=M)
    assert rule.factor == pytest.approx(kg_m3, rel=rtol, abs=0.0), source
    assert rule.si_unit == "kg/m^3"


@pytest.mark.parametrize("rho_mol_dm3, M, rho_kg_m3, atol, source", [
    (13.40743, M_ARGON, 535.6, 1e-3, "argon rho_c, Tegeler, Span & Wagner (1999)"),
    (11.1839, M_N2, 313.300, 1e-3, "nitrogen rho_c, Span et al. (2000)"),
])
def test_molar_critical_densities(rho_mol_dm3, M, rho_kg_m3, atol, source):
    """Published critical densities in mol/dm^3 and kg/m^3 agree through the molar mass."""
    rho = conversion("mol/dm^3", "density", molar_mass_kg_mol=M).apply(np.array([rho_mol_dm3]))
    assert rho[0] == pytest.approx(rho_kg_m3, abs=atol), source


@pytest.mark.parametrize("unit, M, j_mol, source", [
    ("J/mol", None, 1.0, "SI unit"),
    ("kJ/mol", None, 1000.0, "SI prefix"),
    ("kJ/kmol", None, 1.0, "SI prefixes"),
    ("kJ/kg", M_WATER, 18.015268, "M of water, IAPWS-95"),
    ("J/kg", M_WATER, 0.018015268, "M of water, IAPWS-95"),
    ("J/g", M_WATER, 18.015268, "M of water, IAPWS-95"),
    ("cal_th/mol", None, 4.184, SP811 + ": thermochemical calorie"),
    ("kcal_th/mol", None, 4184.0, SP811 + ": thermochemical calorie"),
    ("cal_IT/mol", None, 4.1868, SP811 + ": International Table calorie"),
    ("kcal_IT/mol", None, 4186.8, SP811 + ": International Table calorie"),
])
def test_enthalpy_factors(unit, M, j_mol, source):
    """Molar and specific enthalpies convert to J/mol, specific ones through the molar mass."""
    assert conversion(unit, "enthalpy", molar_mass_kg_mol=M).factor == pytest.approx(
        j_mol, rel=1e-14), source


def test_specific_enthalpy_of_vaporization_of_water():
    """Water's Δh_vap at the triple point, 2500.915 kJ/kg (IAPWS-95), is 45054.65 J/mol."""
    rule = conversion("kJ/kg", "enthalpy", molar_mass_kg_mol=M_WATER)
    assert rule.apply(np.array([2500.915]))[0] == pytest.approx(2500.915e3 * M_WATER, rel=1e-14)
    assert rule.apply(np.array([2500.915]))[0] == pytest.approx(45054.654, abs=1e-3)


@pytest.mark.parametrize("unit, quantity", [("mol/L", "density"), ("kJ/kg", "enthalpy"),
                                            ("J/g", "enthalpy")])
def test_molar_mass_required(unit, quantity):
    """Molar densities and specific enthalpies without a molar mass raise UnitError saying so."""
    with pytest.raises(UnitError, match="needs the fluid's molar mass"):
        conversion(unit, quantity)


@pytest.mark.parametrize("M, match", [
    (-0.018, "positive finite"), (float("nan"), "positive finite"), (0.0, "positive finite"),
    (18.015268, "implausible.*g/mol"), ("0.018", "real number"),
])
def test_bad_molar_mass_is_refused(M, match):
    """A non-positive, non-finite, non-numeric or g/mol-looking molar mass raises UnitError."""
    with pytest.raises(UnitError, match=match):
        conversion("mol/L", "density", molar_mass_kg_mol=M)


def test_dimensionless_units():
    """Dimensionless columns accept 1, '', '-' and percent (0.01)."""
    assert [conversion(u, "dimensionless").factor for u in ("1", "", "-", "%")] == \
        [1.0, 1.0, 1.0, pytest.approx(0.01, rel=1e-15)]


# ----------------------------------------------------------------------------- the rule object


@pytest.mark.parametrize("unit, quantity, kwargs, text", [
    ("degC", "temperature", {}, "degC -> K: x*1 + 273.15"),
    ("bar", "pressure", {}, "bar -> Pa: x*100000"),
    ("degC", "temperature", {"difference": True}, "degC -> K: x*1 (difference)"),
    ("bar", "pressure", {"reference": "gauge", "ambient_Pa": 101325.0},
     "bar -> Pa: x*100000 + 101325 (gauge; ambient 101325 Pa)"),
    ("mol/L", "density", {"molar_mass_kg_mol": 0.039948},
     "mol/L -> kg/m^3: x*39.948 (M = 0.039948 kg/mol)"),
])
def test_repr_reads_like_the_rule(unit, quantity, kwargs, text):
    """The repr of a Linear states the rule: source -> SI: x*factor + offset (notes)."""
    assert repr(conversion(unit, quantity, **kwargs)) == text


def test_repr_of_negative_offset():
    """A negative offset is written with a minus sign."""
    assert repr(Linear(1.0, -5.0, "K", "X")) == "X -> K: x*1 - 5"


def test_apply_is_vectorised_and_keeps_nan():
    """apply converts a whole array at once, keeps shape and NaN, and returns float64."""
    rule = conversion("degF", "temperature")
    values = np.array([[32.0, np.nan], [212.0, -40.0]])
    out = rule.apply(values)
    assert out.dtype == np.float64 and out.shape == (2, 2)
    np.testing.assert_allclose(out, [[273.15, np.nan], [373.15, 233.15]], rtol=0, atol=1e-12)


def test_apply_matches_pint_quantities():
    """The linear rule gives what a pint Quantity gives, value by value (the slow way)."""
    ureg = pint.UnitRegistry()
    x = np.array([-40.0, 0.0, 37.5, 451.0])
    for unit, pint_unit, target in (("degF", "degF", "K"), ("psi", "psi", "Pa"),
                                    ("g/cm^3", "g/cm^3", "kg/m^3")):
        expected = [ureg.Quantity(v, pint_unit).to(target).magnitude for v in x]
        quantity = {"K": "temperature", "Pa": "pressure", "kg/m^3": "density"}[target]
        np.testing.assert_allclose(conversion(unit, quantity).apply(x), expected, rtol=1e-14)


def test_linear_is_frozen_and_validated():
    """A Linear cannot be changed, and a zero or non-finite factor is rejected."""
    rule = conversion("bar", "pressure")
    with pytest.raises(dataclasses.FrozenInstanceError):
        rule.factor = 2.0  # type: ignore[misc]
    with pytest.raises(ValueError, match="finite non-zero factor"):
        Linear(0.0, 0.0, "Pa", "bar")
    with pytest.raises(ValueError, match="finite offset"):
        Linear(1.0, float("nan"), "Pa", "bar")


def test_conversion_is_computed_once_per_column():
    """The same declaration returns the same cached rule object."""
    assert conversion("MPa", "pressure") is conversion("MPa", "pressure")


# ----------------------------------------------------------------------------- tables


def test_every_alias_gives_its_canonical_rule():
    """Each alias resolves to the same rule as its canonical spelling."""
    for quantity, table in ALIASES.items():
        M = M_WATER if quantity in ("density", "enthalpy") else None
        for alias, canonical in table.items():
            if alias in units.IMPLIED_REFERENCE and units.IMPLIED_REFERENCE[alias] == "gauge":
                continue
            assert conversion(alias, quantity, molar_mass_kg_mol=M) == \
                conversion(canonical, quantity, molar_mass_kg_mol=M), alias


def test_every_canonical_unit_is_its_own_alias():
    """Every accepted unit is spelled in the alias table under its own name."""
    for quantity, table in UNITS.items():
        for canonical in table:
            assert ALIASES[quantity].get(canonical) == canonical, (quantity, canonical)


def test_no_spelling_belongs_to_two_quantities():
    """An accepted spelling means one quantity only, so dimension errors are unambiguous."""
    seen: dict[str, str] = {}
    for quantity, table in ALIASES.items():
        for alias in table:
            assert alias not in seen, (alias, seen.get(alias), quantity)
            seen[alias] = quantity


@pytest.mark.parametrize("spelling, quantity, canonical", [
    ("kg/m³", "density", "kg/m^3"), ("kg·m⁻³", "density", "kg/m^3"),
    ("kg m^-3", "density", "kg/m^3"), ("kg*m**-3", "density", "kg/m^3"),
    ("  bar ", "pressure", "bar"), ("mol·dm⁻³", "density", "mol/dm^3"),
])
def test_typography_is_normalised(spelling, quantity, canonical):
    """Superscripts, middle dots, ** and blanks are normalised before matching."""
    M = M_WATER if quantity == "density" else None
    assert conversion(spelling, quantity, molar_mass_kg_mol=M).source_unit == canonical


# ----------------------------------------------------------------------------- refusals


@pytest.mark.parametrize("unit, quantity, match", [
    ("kPaa", "pressure", r"unknown pressure unit 'kPaa'; accepted pressure units: Pa, hPa, kPa"
                         r".*did you mean 'kPa'"),
    ("celcius", "temperature", r"unknown temperature unit 'celcius'.*did you mean 'degC'"),
    ("bra", "pressure", r"unknown pressure unit 'bra'.*did you mean 'bar'"),
    ("xyz", "density", r"unknown density unit 'xyz'; accepted density units: kg/m\^3"),
])
def test_unknown_or_misspelt_unit(unit, quantity, match):
    """An unknown unit raises UnitError listing the accepted units and the closest spelling."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, quantity)


@pytest.mark.parametrize("unit, match", [
    ("kpa", r"'kpa' is not accepted: unit symbols are case-sensitive.*write 'kPa'"),
    ("KPa", r"'KPa' is not accepted.*write 'kPa'"),
    ("pa", r"write 'Pa'"),
    ("mpa", r"'mpa' is ambiguous.*'mPa' = millipascal.*'MPa' = megapascal.*write 'MPa'"),
    ("Mpa", r"'Mpa' is ambiguous.*millipascal.*megapascal"),
    ("MBAR", r"'MBAR' is ambiguous.*millibar.*megabar.*write 'mbar'"),
])
def test_case_variants_are_refused(unit, match):
    """Units differing from an accepted one only in case are refused, ambiguous ones said to be."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, "pressure")


@pytest.mark.parametrize("unit, quantity, match", [
    ("K", "pressure", r"a pressure unit was expected \(\[mass\] / \[length\] / \[time\] \*\* 2,"
                      r" SI unit Pa\), but 'K' is a temperature unit \(\[temperature\]\)"),
    ("degC", "pressure", r"but 'degC' is a temperature unit"),
    ("bar", "temperature", r"a temperature unit was expected.*'bar' is a pressure unit"),
    ("J/kg", "density", r"a density unit was expected.*'J/kg' is an enthalpy unit"),
    ("m", "pressure", r"a pressure unit was expected.*'m' reads as meter \(\[length\]\)"),
    ("kg/m^3", "enthalpy", r"an enthalpy unit was expected.*'kg/m\^3' is a density unit"),
])
def test_dimensionally_wrong_unit(unit, quantity, match):
    """A unit of the wrong dimension raises UnitError naming expected and given dimension."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, quantity, molar_mass_kg_mol=M_WATER)


@pytest.mark.parametrize("unit, quantity, match", [
    ("inHg", "pressure", r"'inHg' \(read as inch_Hg\) is not in the accepted list"),
    ("lbf/in^2", "pressure", r"is not in the accepted list; convert the column"),
])
def test_right_dimension_but_not_accepted(unit, quantity, match):
    """A pint unit of the right dimension but not in the accepted list is refused."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, quantity)


@pytest.mark.parametrize("unit, quantity, match", [
    ("deg", "temperature", r"ambiguous temperature unit 'deg': 'deg' does not say which degree"),
    ("°", "temperature", r"ambiguous temperature unit"),
    ("cal/mol", "enthalpy", r"write 'cal_th/mol' \(thermochemical, 4.184 J\) or 'cal_IT/mol'"),
    ("M", "density", r"'M' may mean molar \(mol/L\) or the prefix mega"),
    ("at", "pressure", r"technical atmosphere"),
])
def test_ambiguous_spellings_are_refused(unit, quantity, match):
    """Spellings ambiguous in themselves raise UnitError giving the reason and the fix."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, quantity)


@pytest.mark.parametrize("unit, quantity, match", [
    ("", "pressure", r"no pressure unit given; accepted pressure units"),
    ("   ", "temperature", r"no temperature unit given"),
    (None, "pressure", r"unit and quantity must be strings"),
    (3, "pressure", r"unit and quantity must be strings"),
    ("K", "speed", r"unknown quantity 'speed'; expected one of temperature, pressure"),
])
def test_missing_or_malformed_declaration(unit, quantity, match):
    """An empty or non-string unit, or an unknown quantity, raises UnitError."""
    with pytest.raises(UnitError, match=match):
        conversion(unit, quantity)


def test_unit_error_carries_location_when_rewrapped():
    """A caller can re-raise the message with its file and column; the message keeps the facts."""
    with pytest.raises(UnitError) as info:
        conversion("K", "pressure")
    located = UnitError(info.value.detail, file="b/batch.toml", column="p")
    assert str(located).startswith("b/batch.toml, column 'p': a pressure unit was expected")


@pytest.mark.parametrize("raw, tidy", [
    (999.9999999999999, 1000.0), (0.9999999999999999, 1.0), (18.015268000000003, 18.015268),
    (5.0 / 9.0, 5.0 / 9.0), (6894.7572931683635, 6894.7572931683635),
    (101325.0 / 760.0, 101325.0 / 760.0), (0.0, 0.0), (-273.15, -273.15),
])
def test_tidy_removes_float_noise_only(raw, tidy):
    """Factors within 4 ulp of a short decimal become it; 5/9, psi and torr stay as pint gives."""
    assert units._tidy(raw) == tidy
