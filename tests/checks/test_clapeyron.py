"""clapeyron.slope-sign and clapeyron.magnitude: signs from density changes, slopes from Δh/(TΔv)."""

import numpy as np
import pytest

from check_fixtures import (
    H_FUS_TT,
    H_SUB_TT,
    H_VAP_TT,
    RHO_ICE_IH_TT,
    by_subject,
    co2,
    co2_melting_file,
    constant,
    th,
    water,
)
from pipeline.checks.clapeyron import magnitude, slope_sign

ICE_CURVE = "curve:solid-liquid:Ih"


def test_ice_ih_melting_slope_negative_passes_because_ice_is_less_dense():
    """R14-08 Ih curve falls (−13.47 MPa/K at Tt); ice Ih 916.709 < liquid 999.793 kg/m3 (R10-06, IAPWS-95)."""
    found = by_subject(slope_sign(water(), th("clapeyron.slope-sign")))
    assert found[ICE_CURVE].status == "pass"
    assert found[ICE_CURVE].evidence["expected_sign"] == -1
    assert found[ICE_CURVE].evidence["rho_solid_minus_liquid_kg_m3"] == pytest.approx(916.709 - 999.793)


def test_same_data_with_ice_made_denser_fails():
    """Ice at 1083 kg/m3 (denser than the 999.793 kg/m3 liquid) demands a rising curve: R14-08 Ih fails."""
    found = by_subject(slope_sign(water(rho_ice=1083.0), th("clapeyron.slope-sign")))
    assert found[ICE_CURVE].status == "violated"
    assert "must be positive" in found[ICE_CURVE].message
    assert found["file:memory/r14-melting.csv|solid-liquid:Ih"].status == "violated"


def test_co2_melting_slope_positive_passes():
    """Span-Wagner melting curve rises (4.676 MPa/K at Tt): solid CO2 (~1512 kg/m3) is denser than 1178.46."""
    found = by_subject(slope_sign(co2(), th("clapeyron.slope-sign")))
    assert found["curve:solid-liquid"].status == "pass"
    assert found["file:memory/lit-melting-a.csv|solid-liquid"].status == "pass"


def test_one_melting_file_with_falling_pressure_is_named():
    """A CO2 melting series whose pressure falls with T fails on its own file; the other files pass."""
    fluid = co2(extra=[co2_melting_file("lit-reversed", reverse=True)])
    found = by_subject(slope_sign(fluid, th("clapeyron.slope-sign")))
    bad = found["file:memory/lit-reversed.csv|solid-liquid"]
    assert bad.status == "violated" and "memory/lit-reversed.csv" in bad.message
    assert found["file:memory/lit-melting-a.csv|solid-liquid"].status == "pass"


def test_without_densities_the_sign_follows_from_the_triple_point():
    """With no density stored, CO2 melting data lie above Tt = 216.592 K (Span & Wagner 1996),
    so their curve must rise: the reversed file fails, the fitted curve passes."""
    fluid = co2(extra=[co2_melting_file("lit-reversed", reverse=True)])
    obs = fluid.observations[~fluid.observations["quantity"].str.startswith("rho_")]
    found = by_subject(slope_sign(co2(observations=obs), th("clapeyron.slope-sign")))
    assert found["curve:solid-liquid"].status == "pass"
    assert "lie above" in found["curve:solid-liquid"].message
    assert found["file:memory/lit-reversed.csv|solid-liquid"].status == "violated"


def test_a_single_reversed_melting_file_is_caught_without_densities():
    """The only melting file of a fluid, reversed, fails from the triple point's position alone."""
    fluid = co2(observations=co2_melting_file("lit-reversed", reverse=True))
    found = by_subject(slope_sign(fluid, th("clapeyron.slope-sign")))
    assert found["file:memory/lit-reversed.csv|solid-liquid"].status == "violated"


def test_ice_ih_melting_data_below_tt_must_fall():
    """Ice Ih melts at 251.165-273.16 K (IAPWS R14-08): below the vapour triple point, so falling."""
    obs = water().observations
    obs = obs[~obs["quantity"].str.startswith("rho_")]
    found = by_subject(slope_sign(water(observations=obs), th("clapeyron.slope-sign")))
    f = found["curve:solid-liquid:Ih"]
    assert f.status == "pass" and "lie below" in f.message


def test_vapour_and_sublimation_slopes_positive_pass_and_a_falling_curve_fails():
    """SR1-86 and R14-08 sublimation slopes are positive; the mirrored curve p(2Tm − T) fails."""
    found = by_subject(slope_sign(water(), th("clapeyron.slope-sign")))
    assert found["curve:liquid-vapour"].status == "pass"
    assert found["curve:solid-vapour:Ih"].status == "pass"

    class Mirrored:  # a falling "vapour pressure": the SR1-86 curve read backwards in T
        def __init__(self, c):
            self.c, self.T_min_K, self.T_max_K, self.covariance = c, c.T_min_K, c.T_max_K, None

        def _m(self, T):
            return self.T_min_K + self.T_max_K - np.asarray(T)

        def value(self, T, extrapolate=False):
            return self.c.value(self._m(T), extrapolate=extrapolate)

        def slope(self, T, extrapolate=False):
            return -self.c.slope(self._m(T), extrapolate=extrapolate)

    curves = dict(water().curves)
    curves[("liquid-vapour", "", "pressure")] = Mirrored(curves[("liquid-vapour", "", "pressure")].curve)
    found = by_subject(slope_sign(water(curves=curves), th("clapeyron.slope-sign")))
    assert found["curve:liquid-vapour"].status == "violated"


def test_ice_melting_slope_magnitude_agrees_with_clapeyron():
    """R14-08 slope −13.46558 MPa/K vs Δh_fus/(TΔv) = −13.46593 MPa/K (IAPWS-95, R10-06): ratio 0.99997."""
    found = by_subject(magnitude(water(), th("clapeyron.magnitude")))
    f = found["curve:solid-liquid:Ih"]
    assert f.status == "pass"
    assert f.evidence["worst"]["slope_clapeyron_Pa_K"] == pytest.approx(-13.4659e6, rel=2e-4)


def test_vaporization_and_sublimation_magnitudes_agree_at_the_triple_point():
    """SR1-86 slope 44.44 Pa/K and R14-08 50.37 Pa/K match Δh_vap and Δh_sub of IAPWS-95 within 0.1 %."""
    found = by_subject(magnitude(water(), th("clapeyron.magnitude")))
    assert found["curve:liquid-vapour"].status == "pass"
    assert found["curve:solid-vapour:Ih"].status == "pass"
    assert abs(found["curve:solid-vapour:Ih"].evidence["worst"]["ratio"] - 1) < 1e-3


def test_enthalpy_in_j_per_kg_stored_as_j_per_mol_fails():
    """Δh_fus = 333444.9 'J/mol' (really J/kg) predicts a slope 55 times the R14-08 one."""
    consts = [constant("h_fusion_triple", 333.4449e3), constant("h_vaporization_triple", H_VAP_TT),
              constant("h_sublimation_triple", H_SUB_TT)]
    found = by_subject(magnitude(water(constants=consts), th("clapeyron.magnitude")))
    assert found["curve:solid-liquid:Ih"].status == "violated"
    assert found["curve:liquid-vapour"].status == "pass"


def test_magnitude_uses_a_z_score_when_every_uncertainty_is_stated():
    """With u(Δh_fus) = 6 J/mol (0.1 %) and u(ρ) = 0.01 kg/m3 the ice slope agrees by |z| < 3."""
    consts = [constant("h_fusion_triple", H_FUS_TT, 6.0)]
    f = by_subject(magnitude(water(constants=consts), th("clapeyron.magnitude")))["curve:solid-liquid:Ih"]
    assert f.statistic == "|z|" and f.status == "pass"
    assert f.measured < 1


def test_fixture_values_agree_with_the_iapws_package():
    """ρ(ice Ih, Tt) (R10-06), ρ'(Tt) and Δh at Tt (IAPWS-95) of the fixtures match the iapws package."""
    import iapws  # a test dependency (pyproject [test])
    ice = iapws._Ice(273.16, 611.657e-6)            # R10-06 at (273.16 K, 611.657 Pa); p in MPa
    liquid, vapour = iapws.IAPWS95(T=273.16, x=0), iapws.IAPWS95(T=273.16, x=1)
    assert ice["rho"] == pytest.approx(RHO_ICE_IH_TT, abs=1e-3)
    assert liquid.rho == pytest.approx(999.793, abs=1e-3)
    assert (liquid.h - ice["h"]) * 1e3 * 0.018015268 == pytest.approx(H_FUS_TT, rel=1e-6)
    assert (vapour.h - liquid.h) * 1e3 * 0.018015268 == pytest.approx(H_VAP_TT, rel=1e-6)
