"""triple-point.on-curves and triple-point.slopes on IAPWS water and Span-Wagner CO2."""

import pytest

from check_fixtures import (
    TT_WATER,
    WATER_ICE_TRIPLES,
    by_subject,
    co2,
    constant,
    point,
    th,
    water,
    water_fixed_points,
    H_FUS_TT,
    H_SUB_TT,
    H_VAP_TT,
)
from pipeline.checks.points import parse_phases
from pipeline.checks.triple_point import on_curves, slopes

VLI = "triple:vapour,liquid,Ih"


def test_water_triple_point_lies_on_all_three_curves():
    """Tt = 273.16 K, pt = 611.657 Pa (IAPWS R14-08) lies on SR1-86 p_vap, R14-08 p_sub and p_melt(Ih)."""
    found = by_subject(on_curves(water(), th("triple-point.on-curves")))
    for curve in ("liquid-vapour", "solid-vapour:Ih", "solid-liquid:Ih"):
        assert found[f"{VLI}|{curve}"].status == "pass", found[f"{VLI}|{curve}"].message


@pytest.mark.parametrize("phases, T, p", WATER_ICE_TRIPLES)  # IAPWS R14-08 Table 1
def test_water_ice_liquid_triple_points_lie_on_both_melting_curves(phases, T, p):
    """Each solid-solid-liquid triple point of R14-08 lies on both neighbouring melting curves."""
    label = "triple:" + ",".join(parse_phases(phases))
    found = [f for f in on_curves(water(), th("triple-point.on-curves")) if f.subject.startswith(label)]
    melting = [f for f in found if "solid-liquid" in f.subject]
    assert len(melting) == 2 and all(f.status == "pass" for f in melting), [f.message for f in melting]


def test_melting_check_reads_the_steep_direction_and_fails_a_shifted_temperature():
    """A V-VI-L point stated 0.2 K off (273.51 K vs 273.31 K, R14-08) fails on the melting curves in K."""
    pts = [p for p in water_fixed_points() if p["phases"] != "V,VI,liquid"]
    pts.append(point("triple", "V,VI,liquid", 273.51, 632.400e6))
    found = by_subject(on_curves(water(fixed_points=pts), th("triple-point.on-curves")))
    bad = found["triple:liquid,V,VI|solid-liquid:V"]
    assert bad.status == "violated" and bad.statistic == "|z|"
    assert abs(bad.evidence["T_curve_minus_Tt_K"]) == pytest.approx(0.2, rel=0.05)
    assert "mK" in bad.message


def test_shifted_triple_pressure_fails_with_a_z_score():
    """pt = 620 Pa with u = 1 Pa is off the SR1-86 curve (611.657 Pa) by |z| ~ 8."""
    pts = water_fixed_points()
    pts[0] = point("triple", "vapour,liquid,Ih", TT_WATER, 620.0, u_p=1.0, u_T=1e-4)
    found = by_subject(on_curves(water(fixed_points=pts), th("triple-point.on-curves")))
    bad = found[f"{VLI}|liquid-vapour"]
    assert bad.status == "violated" and bad.statistic == "|z|"
    assert bad.measured == pytest.approx(8.3, abs=0.1)
    assert "|z| = 8.3" in bad.message and "> 3" in bad.message


def test_missing_curve_is_a_skip_with_the_reason():
    """Without a fitted sublimation curve the solid-vapour subject is skipped, the rest still run."""
    curves = {k: v for k, v in water().curves.items() if k[0] != "solid-vapour"}
    found = by_subject(on_curves(water(curves=curves), th("triple-point.on-curves")))
    assert found[f"{VLI}|solid-vapour:Ih"].status == "skip"
    assert found[f"{VLI}|liquid-vapour"].status == "pass"


def test_sublimation_steeper_than_vaporization_at_the_water_triple_point():
    """dp_sub/dT = 50.37 Pa/K > dp_vap/dT = 44.44 Pa/K at 273.16 K (R14-08, SR1-86)."""
    found = by_subject(slopes(water(), th("triple-point.slopes")))
    assert found[f"{VLI}|order"].status == "pass"
    assert found[f"{VLI}|order"].measured == pytest.approx(50.3714 / 44.4367, rel=1e-4)


def test_slope_ratio_matches_enthalpies_of_iapws_water():
    """The slope ratio 1.1335 agrees with 1 + Δh_fus/Δh_vap = 1 + 333.4449/2500.915 (IAPWS-95)."""
    found = by_subject(slopes(water(), th("triple-point.slopes")))
    assert found[f"{VLI}|ratio"].status == "pass"
    assert found[f"{VLI}|ratio"].evidence["expected"] == pytest.approx(1 + 333.4449 / 2500.915, rel=1e-5)


def test_slope_ratio_fails_when_the_fusion_enthalpy_is_doubled():
    """Δh_fus = 2 x 6007 J/mol predicts a ratio 1.267, far from the curves' 1.1335."""
    consts = [constant("h_fusion_triple", 2 * H_FUS_TT), constant("h_vaporization_triple", H_VAP_TT),
              constant("h_sublimation_triple", H_SUB_TT)]
    found = by_subject(slopes(water(constants=consts), th("triple-point.slopes")))
    assert found[f"{VLI}|ratio"].status == "violated"


def test_sublimation_flatter_than_vaporization_fails_the_order():
    """Swapping the CO2 sublimation and vapour-pressure curves (Span-Wagner) reverses the slope order."""
    base = co2()
    curves = dict(base.curves)
    curves[("liquid-vapour", "", "pressure")], curves[("solid-vapour", "", "pressure")] = (
        base.curves[("solid-vapour", "", "pressure")].curve, base.curves[("liquid-vapour", "", "pressure")].curve)
    found = by_subject(slopes(co2(curves=curves), th("triple-point.slopes")))
    order = found["triple:vapour,liquid,solid|order"]
    assert order.status == "violated" and order.measured < 1
