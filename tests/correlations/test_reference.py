"""Published reference equations reproduce their publications' check values and the iapws package.

Expected values come from /work/shared/reference-values.md, which names the publication of
each value and how it was verified; the source is repeated beside every row below.
"""

import numpy as np
import pytest
from iapws import _iapws
from iapws.iapws95 import IAPWS95

from pipeline.correlations import REFERENCE_CONSTANTS, REFERENCE_CURVES, reference_curve

MPa, kPa = 1e6, 1e3

# (fluid, boundary, quantity, solid_phase, T [K], expected [SI], rtol, source)
PUBLISHED_CHECK_VALUES = [
    ("water", "solid-liquid", "pressure", "Ih", 260.0, 138.268 * MPa, 4e-6,
     "IAPWS R14-08(2011) Table 3"),
    ("water", "solid-liquid", "pressure", "III", 254.0, 268.685 * MPa, 4e-6,
     "IAPWS R14-08(2011) Table 3"),
    ("water", "solid-liquid", "pressure", "V", 265.0, 479.640 * MPa, 2e-6,
     "IAPWS R14-08(2011) Table 3"),
    ("water", "solid-liquid", "pressure", "VI", 320.0, 1356.76 * MPa, 4e-6,
     "IAPWS R14-08(2011) Table 3"),
    ("water", "solid-liquid", "pressure", "VII", 550.0, 6308.71 * MPa, 2e-6,
     "IAPWS R14-08(2011) Table 3"),
    ("water", "solid-vapour", "pressure", "Ih", 230.0, 8.94735, 1e-6,
     "IAPWS R14-08(2011) Table 3"),
    ("water", "liquid-vapour", "pressure", "", 273.16, 611.657, 1e-6,
     "IAPWS SR1-86(1992) check values"),
    ("water", "liquid-vapour", "rho_liquid", "", 273.16, 999.789, 1e-6,
     "IAPWS SR1-86(1992) check values"),
    ("water", "liquid-vapour", "rho_vapour", "", 273.16, 0.00485426, 2e-6,
     "IAPWS SR1-86(1992) check values"),
    ("water", "liquid-vapour", "pressure", "", 373.1243, 101325.0, 1e-6,
     "IAPWS SR1-86(1992) check values"),
    ("water", "liquid-vapour", "rho_liquid", "", 373.1243, 958.365, 1e-6,
     "IAPWS SR1-86(1992) check values"),
    ("water", "liquid-vapour", "rho_vapour", "", 373.1243, 0.597586, 1e-6,
     "IAPWS SR1-86(1992) check values"),
]


@pytest.mark.parametrize("fluid, boundary, quantity, phase, T, expected, rtol, source",
                         PUBLISHED_CHECK_VALUES)
def test_published_check_values(fluid, boundary, quantity, phase, T, expected, rtol, source):
    """Each water equation reproduces the check value printed in its release."""
    curve = reference_curve(fluid, boundary, quantity, phase)
    assert curve.value(T) == pytest.approx(expected, rel=rtol), source


# Ancillary equations vs the equation-of-state saturation table of the same paper, within the
# ancillary-vs-EOS deviations the paper's ancillaries are known to have (reference-values §2.3:
# p within 1e-5, reached at 280 K (-1.002e-5), hence 1.2e-5; rho' 7e-5; rho'' 1.1e-4).
# (T [K], p [Pa], rho' [kg/m3], rho'' [kg/m3]) - Span & Wagner (1996), saturation table (EOS).
CO2_EOS_SATURATION = [
    (216.592, 0.517964 * MPa, 1178.463, 13.7609),
    (250.0, 1.785045 * MPa, 1045.972, 46.6440),
    (280.0, 4.160740 * MPa, 883.583, 121.743),
    (300.0, 6.713080 * MPa, 679.239, 268.584),
]


@pytest.mark.parametrize("T, p, rho_l, rho_v", CO2_EOS_SATURATION)
def test_co2_ancillaries_match_eos_saturation_table(T, p, rho_l, rho_v):
    """CO2 ancillaries (Span & Wagner 1996, Eqs. 3.13-3.15) agree with the paper's EOS table."""
    curve = lambda q: reference_curve("carbon-dioxide", "liquid-vapour", q)  # noqa: E731
    assert curve("pressure").value(T) == pytest.approx(p, rel=1.2e-5)
    assert curve("rho_liquid").value(T) == pytest.approx(rho_l, rel=7e-5)
    assert curve("rho_vapour").value(T) == pytest.approx(rho_v, rel=1.1e-4)


# Published fixed points each curve must reproduce (to the deviation stated in reference-values).
# (fluid, boundary, quantity, T [K], expected [SI], rtol, source)
FIXED_POINT_CHECKS = [
    ("carbon-dioxide", "liquid-vapour", "pressure", 216.592, 0.51795 * MPa, 3e-5,
     "Span & Wagner (1996) triple-point pressure"),
    ("carbon-dioxide", "solid-vapour", "pressure", 194.686, 101325.0, 2e-4,
     "Span & Wagner (1996) normal sublimation temperature"),
    ("nitrogen", "liquid-vapour", "pressure", 63.151, 12.523 * kPa, 1.2e-4,
     "Span et al. (2000) triple-point pressure"),
    ("nitrogen", "liquid-vapour", "pressure", 77.355, 101325.0, 5e-5,
     "Span et al. (2000) normal boiling point"),
    ("argon", "liquid-vapour", "pressure", 83.8058, 68.891 * kPa, 4e-5,
     "Tegeler et al. (1999) triple-point pressure"),
    ("argon", "liquid-vapour", "pressure", 87.302, 101325.0, 8e-5,
     "Tegeler et al. (1999) normal boiling point"),
]


@pytest.mark.parametrize("fluid, boundary, quantity, T, expected, rtol, source",
                         FIXED_POINT_CHECKS)
def test_ancillaries_reproduce_published_fixed_points(fluid, boundary, quantity, T, expected,
                                                      rtol, source):
    """Vapour-pressure and sublimation ancillaries pass through the published fixed points."""
    curve = reference_curve(fluid, boundary, quantity)
    assert curve.value(T, extrapolate=True) == pytest.approx(expected, rel=rtol), source


# Values computed independently from the equations as published (reference-values.md, tag O);
# they guard against transcription errors such as a mis-factored polynomial or an inverted
# Tt/T prefactor. (fluid, boundary, quantity, T [K], expected [SI], rtol, source)
COMPUTED_VALUES = [
    ("carbon-dioxide", "solid-vapour", "pressure", 180.0, 27.557 * kPa, 2e-5,
     "Span & Wagner (1996) Eq. 3.12; reference-values §2.3"),
    ("carbon-dioxide", "solid-vapour", "pressure", 150.0, 0.8426 * kPa, 1e-4,
     "Span & Wagner (1996) Eq. 3.12; reference-values §2.3"),
    ("carbon-dioxide", "solid-liquid", "pressure", 220.0, 16.719 * MPa, 3e-5,
     "Span & Wagner (1996) Eq. 3.10; reference-values §2.3"),
    ("carbon-dioxide", "solid-liquid", "pressure", 250.0, 182.08 * MPa, 3e-5,
     "Span & Wagner (1996) Eq. 3.10; reference-values §2.3"),
    ("carbon-dioxide", "liquid-vapour", "rho_liquid", 216.592, 1178.525, 1e-6,
     "Span & Wagner (1996) Eq. 3.14; reference-values §2.3"),
    ("carbon-dioxide", "liquid-vapour", "rho_vapour", 216.592, 13.7614, 5e-6,
     "Span & Wagner (1996) Eq. 3.15; reference-values §2.3"),
    ("nitrogen", "liquid-vapour", "rho_liquid", 77.355, 806.10, 1e-5,
     "Span et al. (2000); reference-values §3"),
    ("nitrogen", "liquid-vapour", "rho_vapour", 77.355, 4.612, 2e-4,
     "Span et al. (2000); reference-values §3"),
    ("nitrogen", "solid-liquid", "pressure", 100.0, 204.59 * MPa, 3e-5,
     "Span et al. (2000); reference-values §3"),
    ("nitrogen", "solid-liquid", "pressure", 300.0, 2445.8 * MPa, 3e-5,
     "Span et al. (2000); reference-values §3"),
    ("nitrogen", "solid-vapour", "pressure", 50.0, 400.5, 2e-4,
     "Span et al. (2000); reference-values §3"),
    ("argon", "liquid-vapour", "rho_liquid", 87.302, 1395.42, 1e-5,
     "Tegeler et al. (1999); reference-values §4"),
    ("argon", "liquid-vapour", "rho_vapour", 87.302, 5.773, 2e-4,
     "Tegeler et al. (1999); reference-values §4"),
    ("argon", "solid-liquid", "pressure", 100.0, 68.42 * MPa, 1e-4,
     "Tegeler et al. (1999); reference-values §4"),
    ("argon", "solid-liquid", "pressure", 300.0, 1351.6 * MPa, 5e-5,
     "Tegeler et al. (1999); reference-values §4"),
    ("argon", "solid-vapour", "pressure", 80.0, 40.06 * kPa, 2e-4,
     "Tegeler et al. (1999); reference-values §4"),
    ("argon", "solid-vapour", "pressure", 70.0, 7.26 * kPa, 1e-3,
     "Tegeler et al. (1999); reference-values §4"),
]


@pytest.mark.parametrize("fluid, boundary, quantity, T, expected, rtol, source", COMPUTED_VALUES)
def test_ancillaries_reproduce_independent_computation(fluid, boundary, quantity, T, expected,
                                                       rtol, source):
    """CO2, N2 and Ar ancillaries give the values computed independently from the papers."""
    assert reference_curve(fluid, boundary, quantity).value(T) == pytest.approx(
        expected, rel=rtol), source


# Slopes at the triple point (reference-values §1.4, §2.3, §4; analytic, checked numerically).
# (fluid, boundary, phase, T [K], dp/dT [Pa/K], rtol)
TRIPLE_POINT_SLOPES = [
    ("water", "solid-liquid", "Ih", 273.16, -13.46558 * MPa, 1e-6),
    ("water", "solid-vapour", "Ih", 273.16, 50.3714, 2e-6),
    ("carbon-dioxide", "liquid-vapour", "", 216.592, 22523.0, 5e-5),
    ("carbon-dioxide", "solid-vapour", "", 216.592, 35251.0, 5e-5),
    ("carbon-dioxide", "solid-liquid", "", 216.592, 4.676 * MPa, 2e-4),
    ("argon", "liquid-vapour", "", 83.8058, 7941.0, 1e-4),
    ("argon", "solid-vapour", "", 83.8058, 9364.0, 1e-4),
    ("argon", "solid-liquid", "", 83.8058, 3.985 * MPa, 2e-4),
]


@pytest.mark.parametrize("fluid, boundary, phase, T, slope, rtol", TRIPLE_POINT_SLOPES)
def test_triple_point_slopes(fluid, boundary, phase, T, slope, rtol):
    """Analytic slopes at the triple point match the values in reference-values.md."""
    assert reference_curve(fluid, boundary, "pressure", phase).slope(T) == pytest.approx(
        slope, rel=rtol)


def test_ice_ih_melting_slope_agrees_with_clapeyron():
    """The R14-08 Ih slope at Tt equals Clapeyron with IAPWS-95/R10-06 data to 2.5e-5."""
    # Delta h_fus = 333.4449 kJ/kg, rho' = 999.79252, rho_Ih = 916.70949 kg/m3 (reference-values
    # §1.1, computed with iapws from IAPWS-95 and IAPWS R10-06(2009)).
    dv = 1 / 999.79252 - 1 / 916.70949
    clapeyron = 333.4449e3 / (273.16 * dv)
    slope = reference_curve("water", "solid-liquid", "pressure", "Ih").slope(273.16)
    assert slope / clapeyron == pytest.approx(1.0, abs=5e-5)


# Neighbouring ice curves meet at their shared triple points to a few kPa (R14-08 Table 1 points;
# the mismatch of the published equations is 0.6, 0.02, 0.65 and 2.3 kPa, reference-values §1.2).
ICE_TRIPLE_POINTS = [("Ih", "III", 251.165), ("III", "V", 256.164), ("V", "VI", 273.31),
                     ("VI", "VII", 355.0)]


@pytest.mark.parametrize("low, high, T", ICE_TRIPLE_POINTS)
def test_ice_melting_curves_meet_at_triple_points(low, high, T):
    """Melting curves of neighbouring ices agree at their common triple point within 3 kPa."""
    a = reference_curve("water", "solid-liquid", "pressure", low).value(T)
    b = reference_curve("water", "solid-liquid", "pressure", high).value(T)
    assert a == pytest.approx(b, abs=3 * kPa)


# --- agreement with the iapws package (the only allowed reference library) ---------------------
# iapws returns MPa. Pitfalls handled: _Melting_Pressure needs the ice name below 273.15 K and
# above that picks the ice by temperature alone, so the grids stay inside each ice's own range.
ICE_GRIDS = [
    ("Ih", np.linspace(251.165, 273.16, 23)),
    ("III", np.linspace(251.2, 256.164, 9)),
    ("V", np.linspace(256.2, 273.31, 12)),
    ("VI", np.linspace(273.4, 355.0, 15)),
    ("VII", np.linspace(355.5, 715.0, 20)),
]


@pytest.mark.parametrize("ice, grid", ICE_GRIDS)
def test_melting_matches_iapws(ice, grid):
    """R14-08 melting curves agree with iapws._iapws._Melting_Pressure to 1e-12."""
    expected = np.array([_iapws._Melting_Pressure(T, ice) for T in grid]) * MPa
    got = reference_curve("water", "solid-liquid", "pressure", ice).value(grid)
    np.testing.assert_allclose(got, expected, rtol=1e-12)


def test_sublimation_matches_iapws():
    """R14-08 sublimation curve agrees with iapws._iapws._Sublimation_Pressure, 50-273.16 K."""
    grid = np.linspace(50.0, 273.16, 30)
    expected = np.array([_iapws._Sublimation_Pressure(T) for T in grid]) * MPa
    got = reference_curve("water", "solid-vapour", "pressure", "Ih").value(grid)
    np.testing.assert_allclose(got, expected, rtol=1e-11)


SR1_AUXILIARY = [
    ("pressure", lambda T: IAPWS95._Vapor_Pressure(T) * MPa),
    ("rho_liquid", IAPWS95._Liquid_Density),
    ("rho_vapour", IAPWS95._Vapor_Density),
]


@pytest.mark.parametrize("quantity, library", SR1_AUXILIARY)
def test_sr1_auxiliary_equations_match_iapws(quantity, library):
    """SR1-86 auxiliary equations agree with the iapws implementation on 273.16 K to Tc."""
    grid = np.linspace(273.16, 647.096, 40)
    expected = np.array([library(T) for T in grid])
    got = reference_curve("water", "liquid-vapour", quantity).value(grid)
    np.testing.assert_allclose(got, expected, rtol=1e-11)


# Auxiliary equations vs IAPWS-95 phase equilibrium: tolerances of reference-values §1.5.
# (T [K], rtol p, rtol rho', rtol rho'')
IAPWS95_SATURATION = [(275.0, 3e-5, 6e-5, 1.2e-4), (373.124, 3e-5, 6e-5, 1.2e-4),
                      (450.0, 3e-5, 6e-5, 1.2e-4), (500.0, 3e-5, 6e-5, 1.2e-4),
                      (640.0, 3e-5, 9e-4, 7e-4)]


@pytest.mark.parametrize("T, rtol_p, rtol_l, rtol_v", IAPWS95_SATURATION)
def test_sr1_agrees_with_iapws95_saturation(T, rtol_p, rtol_l, rtol_v):
    """SR1-86 values agree with IAPWS-95 saturation (iapws) within the release's deviations."""
    liquid, vapour = IAPWS95(T=T, x=0.0), IAPWS95(T=T, x=1.0)
    curve = lambda q: reference_curve("water", "liquid-vapour", q)  # noqa: E731
    assert curve("pressure").value(T) == pytest.approx(liquid.P * MPa, rel=rtol_p)
    assert curve("rho_liquid").value(T) == pytest.approx(liquid.rho, rel=rtol_l)
    assert curve("rho_vapour").value(T) == pytest.approx(vapour.rho, rel=rtol_v)


def test_iapws_library_reproduces_iapws95_verification_values():
    """The reference library itself gives the IAPWS-95 saturation verification values (450 K)."""
    # IAPWS R6-95(2018), verification table for saturation: 450 K -> 0.932203564 MPa,
    # 890.341250 and 4.81200360 kg/m3.
    liquid, vapour = IAPWS95(T=450.0, x=0.0), IAPWS95(T=450.0, x=1.0)
    assert liquid.P == pytest.approx(0.932203564, rel=1e-8)
    assert liquid.rho == pytest.approx(890.341250, rel=1e-8)
    assert vapour.rho == pytest.approx(4.81200360, rel=1e-8)


# --- constants and API ---------------------------------------------------------------------------

def test_triple_points_lie_on_their_curves():
    """Each stated vapour-liquid-solid triple point is the reference point of its solid curves."""
    for fluid, consts in REFERENCE_CONSTANTS.items():
        tp = consts["triple_points"][0]
        phase = "Ih" if fluid == "water" else ""
        for boundary in ("solid-liquid", "solid-vapour"):
            curve = reference_curve(fluid, boundary, "pressure", phase)
            assert curve.value(tp["T_K"]) == pytest.approx(tp["p_Pa"], rel=1e-9), (fluid,
                                                                                   boundary)


def test_liquid_vapour_curves_end_at_the_stated_critical_point():
    """p_vap(Tc) = pc and rho'(Tc) = rho''(Tc) = rho_c for every reference fluid."""
    for fluid, c in REFERENCE_CONSTANTS.items():
        Tc = c["Tc_K"]
        assert reference_curve(fluid, "liquid-vapour", "pressure").value(Tc) == pytest.approx(
            c["pc_Pa"], rel=1e-12)
        for q in ("rho_liquid", "rho_vapour"):
            assert reference_curve(fluid, "liquid-vapour", q).value(Tc) == pytest.approx(
                c["rhoc_kg_m3"], rel=1e-12)


def test_every_constant_has_a_citation():
    """Every numeric constant of REFERENCE_CONSTANTS carries a citation, as do all curves."""
    for fluid, c in REFERENCE_CONSTANTS.items():
        numeric = [k for k, v in c.items() if isinstance(v, float)]
        assert set(numeric) <= set(c["citations"]), fluid
        assert all(tp["citation"] for tp in c["triple_points"])
    assert all(curve.citation for curve in REFERENCE_CURVES.values())


def test_unknown_reference_curve_lists_valid_keys():
    """Asking for a curve that does not exist raises KeyError naming the valid combinations."""
    with pytest.raises(KeyError, match="valid:.*'Ih'"):
        reference_curve("water", "solid-liquid", "pressure")
    with pytest.raises(KeyError, match="argon"):
        reference_curve("helium", "liquid-vapour", "pressure")


def test_reference_curves_have_no_covariance():
    """Published curves carry no covariance, so their fit uncertainty is NaN (unknown)."""
    curve = reference_curve("argon", "liquid-vapour", "pressure")
    assert curve.covariance is None and np.isnan(curve.u(100.0))
