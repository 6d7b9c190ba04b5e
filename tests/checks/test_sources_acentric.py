"""sources.agreement and acentric.factor."""

import numpy as np
import pytest

from check_fixtures import (
    PC_WATER,
    RHOC_WATER,
    TC_WATER,
    by_subject,
    constant,
    point,
    th,
    water,
    water_fixed_points,
)
from pipeline.checks.acentric import acentric_factor
from pipeline.checks.sources import agreement

CRIT = "critical:vapour,liquid"


def _critical_sources(*rows):
    return [q for q in water_fixed_points() if q["kind"] != "critical"] + list(rows)


def test_sources_agreeing_on_tc_pass():
    """Tc = 647.096 ± 0.01 K (IAPWS-95) and 647.10 ± 0.02 K from a second source agree (Birge 0.18)."""
    pts = _critical_sources(point("critical", "liquid,vapour", TC_WATER, PC_WATER, RHOC_WATER, u_T=0.01, u_p=5e3),
                            point("critical", "liquid,vapour", 647.10, 22.066e6, u_T=0.02, u_p=5e3, source="lit"))
    found = by_subject(agreement(water(fixed_points=pts), th("sources.agreement")))
    assert found[f"{CRIT}|Tc"].status == "pass" and found[f"{CRIT}|Tc"].statistic == "Birge ratio"
    assert found[f"{CRIT}|Tc"].measured == pytest.approx(0.004 / np.hypot(0.01, 0.02), rel=1e-6)
    assert found[f"{CRIT}|pc"].status == "pass"


def test_a_discrepant_tc_source_is_named():
    """Three sources at 647.096, 647.09, 647.096 K (u = 0.01 K) and one at 648.5 K: the last is named."""
    rows = [point("critical", "liquid,vapour", T, PC_WATER, u_T=0.01, source=s, source_kind=k)
            for T, s, k in ((TC_WATER, "iapws", "standard"), (647.09, "lit-a", "literature"),
                            (TC_WATER, "lit-b", "literature"), (648.5, "lab-x", "measurement"))]
    f = by_subject(agreement(water(fixed_points=_critical_sources(*rows)), th("sources.agreement")))[f"{CRIT}|Tc"]
    assert f.status == "violated" and f.evidence["discrepant"] == ["lab-x"]
    assert "discrepant: lab-x" in f.message


def test_of_two_disagreeing_sources_the_less_authoritative_is_named():
    """A standard (647.096 K) and a measurement (649 K) disagree: the measurement is named."""
    rows = [point("critical", "liquid,vapour", TC_WATER, u_T=0.01),
            point("critical", "liquid,vapour", 649.0, u_T=0.05, source="lab", source_kind="measurement")]
    f = by_subject(agreement(water(fixed_points=_critical_sources(*rows)), th("sources.agreement")))[f"{CRIT}|Tc"]
    assert f.status == "violated" and f.evidence["discrepant"] == ["lab"]


def test_without_uncertainties_the_budget_defaults_decide():
    """Triple-point pressures 611.657 and 611.654771 Pa (R14-08, IAPWS-95), stated without u, agree
    within the default u of a standard (1e-4 relative); 650 Pa does not."""
    ok = water_fixed_points() + [point("triple", "vapour,liquid,Ih", 273.16, 611.654771, source="iapws-95")]
    f = by_subject(agreement(water(fixed_points=ok), th("sources.agreement")))["triple:vapour,liquid,Ih|pt"]
    assert f.status == "pass" and f.statistic == "Birge ratio"
    assert all(v["u_is_default"] and v["u"] == pytest.approx(611.657e-4, rel=1e-3)
               for v in f.evidence["values"])
    bad = water_fixed_points() + [point("triple", "vapour,liquid,Ih", 273.16, 650.0, source="old")]
    f = by_subject(agreement(water(fixed_points=bad), th("sources.agreement")))["triple:vapour,liquid,Ih|pt"]
    assert f.status == "violated"


def test_stated_constants_from_two_sources_are_compared():
    """Two acentric factors 0.3443 and 0.40 (no uncertainty) disagree beyond the tolerance."""
    consts = [constant("acentric_factor", 0.3443, unit="1"),
              constant("acentric_factor", 0.40, unit="1", source="other")]
    f = by_subject(agreement(water(constants=consts), th("sources.agreement")))["constant|acentric_factor"]
    assert f.status == "violated"


def test_stated_acentric_factor_of_water_agrees_with_the_vapour_pressure_curve():
    """ω = 0.3443 (value from memory) vs −log10(p_vap(452.967 K)/22.064 MPa) − 1 = 0.34429 (SR1-86)."""
    (f,) = acentric_factor(water(constants=[constant("acentric_factor", 0.3443, unit="1")]),
                           th("acentric.factor"))
    assert f.status == "pass" and f.subject == "source:iapws"
    assert f.evidence["omega_curve"] == pytest.approx(0.34429, abs=1e-5)


def test_a_wrong_acentric_factor_fails():
    """ω = 0.3000 ± 0.005 is 8.9 standard uncertainties from the SR1-86 value 0.34429."""
    (f,) = acentric_factor(water(constants=[constant("acentric_factor", 0.30, 0.005, unit="1")]),
                           th("acentric.factor"))
    assert f.status == "violated" and f.statistic == "|z|"
    assert f.measured == pytest.approx(8.86, abs=0.05)


def test_acentric_factor_skips_when_the_curve_does_not_reach_0_7_tc():
    """Without a vapour-pressure fit the stated ω cannot be checked (skip with the reason)."""
    curves = {k: v.curve for k, v in water().curves.items() if k[0] != "liquid-vapour"}
    (f,) = acentric_factor(water(curves=curves, constants=[constant("acentric_factor", 0.3443, unit="1")]),
                           th("acentric.factor"))
    assert f.status == "skip" and "no fitted liquid-vapour curve" in f.message
