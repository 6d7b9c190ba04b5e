"""critical.curve-end, critical.no-vle-above-tc, critical.density-convergence."""

import numpy as np
import pytest

from check_fixtures import (
    PC_WATER,
    RHOC_WATER,
    TC_WATER,
    by_subject,
    point,
    sample_series,
    stack,
    th,
    water,
    water_fixed_points,
    water_observations,
    with_range,
)
from pipeline.checks import CheckBatch
from pipeline.checks.critical import curve_end, density_convergence, no_vle_above_tc
from pipeline.checks.thresholds import Thresholds
from pipeline.correlations import reference_curve

LV = ("liquid-vapour", "", "pressure")


def _with_critical(T=TC_WATER, p=PC_WATER, rho=RHOC_WATER, **u):
    pts = [q for q in water_fixed_points() if q["kind"] != "critical"]
    return pts + [point("critical", "liquid,vapour", T, p, rho, **u)]


def test_water_vapour_pressure_ends_at_the_critical_point():
    """SR1-86 reaches Tc = 647.096 K and gives p_vap(Tc) = 22.064 MPa (IAPWS-95)."""
    found = by_subject(curve_end(water(), th("critical.curve-end")))
    assert found["reach"].status == "pass" and found["p(Tc)"].status == "pass"


def test_stated_pc_one_percent_high_fails_by_z_score():
    """pc = 22.285 MPa with u = 20 kPa is 11 standard uncertainties from SR1-86's 22.064 MPa."""
    fluid = water(fixed_points=_with_critical(p=22.285e6, u_p=20e3, u_T=0.001))
    f = by_subject(curve_end(fluid, th("critical.curve-end")))["p(Tc)"]
    assert f.status == "violated" and f.statistic == "|z|"
    assert f.measured == pytest.approx(11.05, abs=0.1)


def test_fit_ending_far_below_tc_is_a_coverage_gap_warning():
    """A vapour-pressure fit stopping at 500 K (0.77 Tc) is a coverage gap: a warning, not a failure."""
    curves = dict(water().curves)
    curves[LV] = with_range(curves[LV].curve, T_max=500.0)
    found = by_subject(curve_end(water(curves=curves), th("critical.curve-end")))
    assert found["reach"].status == "warn" and "coverage gap" in found["reach"].message
    assert found["p(Tc)"].status == "skip" and "extrapolation policy" in found["p(Tc)"].message


def test_data_ending_at_0_62_tc_warn_with_the_gap_named():
    """Data ending at 0.62 Tc (401 K for water, IAPWS-95 Tc = 647.096 K) warn and name the gap (issue 12)."""
    curves = dict(water().curves)
    curves[LV] = with_range(curves[LV].curve, T_max=0.62 * 647.096)
    found = by_subject(curve_end(water(curves=curves), th("critical.curve-end")))
    assert found["reach"].status == "warn"
    assert "0.62 Tc" in found["reach"].message and "not tested" in found["reach"].message


def test_fit_extending_above_tc_fails_the_reach():
    """A fit valid to 660 K claims a vapour pressure above Tc = 647.096 K."""
    curves = dict(water().curves)
    curves[LV] = with_range(curves[LV].curve, T_max=660.0)
    f = by_subject(curve_end(water(curves=curves), th("critical.curve-end")))["reach"]
    assert f.status == "violated" and "above Tc" in f.message


def _batch(*fluids):
    return CheckBatch({f.fluid_id: f for f in fluids})


def test_vapour_pressures_below_tc_pass():
    """The SR1-86 tables end at 645 K < Tc: no boiling above the critical temperature."""
    (f,) = no_vle_above_tc(_batch(water()), Thresholds.load().view("critical.no-vle-above-tc"))
    assert f.status == "pass" and f.measured == 0


def test_vapour_pressure_series_extended_above_tc_fails_naming_the_points():
    """A series continued past Tc (650, 660 K, extrapolated SR1-86) fails and names both obs ids."""
    lv = reference_curve("water", "liquid-vapour", "pressure")
    extended = sample_series(lambda T: lv.value(T, extrapolate=True), [600.0, 640.0, 650.0, 660.0],
                             boundary="liquid-vapour", source_id="lab-extended")
    obs = stack(water_observations(), extended)
    ids = obs.loc[obs["T_K"] > TC_WATER, "obs_id"].tolist()
    (f,) = no_vle_above_tc(_batch(water(observations=obs)), Thresholds.load().view("critical.no-vle-above-tc"))
    assert f.status == "violated" and f.measured == 2
    assert sorted(r["obs_id"] for r in f.evidence["above"]) == sorted(ids)
    assert all(f"obs {i}" in f.message for i in ids)


def test_a_point_within_the_uncertainty_of_tc_is_not_above_it():
    """T = Tc + 0.02 K with u(Tc) = 0.01 K is within 3 u of Tc and passes."""
    obs = stack(water_observations(), sample_series(lambda T: np.full_like(T, PC_WATER), [TC_WATER + 0.02],
                                                    boundary="liquid-vapour", source_id="near-tc"))
    fluid = water(observations=obs, fixed_points=_with_critical(u_T=0.01))
    (f,) = no_vle_above_tc(_batch(fluid), Thresholds.load().view("critical.no-vle-above-tc"))
    assert f.status == "pass"


def _saturated_density_observations(T):
    return stack(*(sample_series(reference_curve("water", "liquid-vapour", q), T, boundary="liquid-vapour",
                                 quantity=q, source_id="sr1-86-densities") for q in ("rho_liquid", "rho_vapour")))


def test_saturated_densities_converge_on_the_stated_critical_point():
    """SR1-86 ρ', ρ'' at 615-645 K give Tc and ρc within 0.1 % and 1 % of 647.096 K, 322 kg/m3."""
    fluid = water(observations=_saturated_density_observations(np.arange(615.0, 646.0, 5.0)))
    found = by_subject(density_convergence(fluid, th("critical.density-convergence")))
    assert found["Tc"].status == "pass" and found["rhoc"].status == "pass"
    assert found["Tc"].evidence["basis"] == "observations"
    assert found["Tc"].evidence["Tc_estimate_K"] == pytest.approx(TC_WATER, rel=1e-3)


def test_density_convergence_fails_a_stated_point_off_the_densities():
    """A stated Tc = 640 K and ρc = 360 kg/m3 contradict the SR1-86 coexistence curve."""
    fluid = water(fixed_points=_with_critical(T=640.0, rho=360.0))
    found = by_subject(density_convergence(fluid, th("critical.density-convergence")))
    assert found["Tc"].status == "violated" and found["rhoc"].status == "violated"
    assert found["Tc"].evidence["basis"] == "fitted curves"


def test_density_convergence_skips_without_near_critical_densities():
    """Densities only below 0.95 Tc (and no fitted density curves) cannot locate Tc."""
    curves = {k: v.curve for k, v in water().curves.items() if k[2] == "pressure"}
    fluid = water(observations=_saturated_density_observations(np.arange(300.0, 600.0, 20.0)), curves=curves)
    found = by_subject(density_convergence(fluid, th("critical.density-convergence")))
    assert found["Tc"].status == "skip"
