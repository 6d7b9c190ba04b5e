"""metastable.extensions and phase-rule.ordering on IAPWS water and Span-Wagner CO2."""

import pytest

from check_fixtures import (
    PT_CO2,
    TT_CO2,
    by_subject,
    co2,
    point,
    th,
    water,
    water_fixed_points,
    with_range,
)
from pipeline.checks.metastable import extensions
from pipeline.checks.phase_rule import ordering
from pipeline.correlations import Curve

VLI = "triple:vapour,liquid,Ih"


def test_water_extensions_lie_in_the_metastable_regions():
    """Below 273.16 K SR1-86 p_vap > R14-08 p_sub (supercooled water) by 1.3 % at 265 K; above it p_sub > p_vap."""
    found = by_subject(extensions(water(), th("metastable.extensions")))
    below, above = found[f"{VLI}|below"], found[f"{VLI}|above"]
    assert below.status == "pass" and above.status == "pass"
    assert below.statistic == "min (p_vap - p_sub)/u" and below.measured > 3.0
    assert below.evidence["worst_relative_margin"] == pytest.approx(0.0133, abs=0.002)


def test_extension_beyond_the_extrapolation_policy_is_skipped_naming_it():
    """A sublimation curve whose data end 20 K below Tt is not extended to Tt (policy: 5 % of T)."""
    fluid = water()
    curves = {k: v.curve for k, v in fluid.curves.items()}
    sv = ("solid-vapour", "Ih", "pressure")
    curves[sv] = with_range(curves[sv], T_max=250.0)
    obs = fluid.observations[fluid.observations["boundary"] != "solid-vapour"]
    found = by_subject(extensions(water(curves=curves, observations=obs), th("metastable.extensions")))
    for side in ("below", "above"):
        f = found[f"{VLI}|{side}"]
        assert f.status == "skip" and "extrapolation policy" in f.message, f.message


def test_sublimation_form_undefined_above_tt_is_continued_along_clausius_clapeyron():
    """The Span-Wagner sublimation form has (1 − T/Tt)^1.9, undefined above Tt: it is continued
    with ln p linear in 1/T, and the superheated-solid order still holds (common practice)."""
    found = by_subject(extensions(co2(), th("metastable.extensions")))
    assert found["triple:vapour,liquid,solid|above"].status == "pass"
    assert found["triple:vapour,liquid,solid|below"].status == "pass"


def test_interchanged_curves_violate_the_metastable_order():
    """With SR1-86 and R14-08 sublimation swapped, the supercooled liquid lies below the solid."""
    base = water()
    curves = {k: v.curve for k, v in base.curves.items()}
    lv, sv = ("liquid-vapour", "", "pressure"), ("solid-vapour", "Ih", "pressure")
    curves[lv], curves[sv] = with_range(curves[sv], T_max=647.0), with_range(curves[lv], T_min=200.0)
    found = by_subject(extensions(water(curves=curves), th("metastable.extensions")))
    assert found[f"{VLI}|below"].status == "violated"
    assert found[f"{VLI}|above"].status == "violated"


def test_water_phase_diagram_obeys_the_phase_rule():
    """IAPWS water: Tt < Tc, pt < pc, five distinct triple points, no stray curve crossings."""
    found = ordering(water(), th("phase-rule.ordering"))
    assert found and all(f.status == "pass" for f in found), [f.message for f in found if f.status != "pass"]
    subjects = {f.subject for f in found}
    assert {f"{VLI}|Tt<Tc", f"{VLI}|pt<pc", "phase-count"} <= subjects


def test_triple_point_above_the_critical_point_fails():
    """A vapour-liquid-Ih point stated at 700 K, 30 MPa lies beyond Tc = 647.096 K, pc = 22.064 MPa."""
    pts = water_fixed_points()
    pts[0] = point("triple", "vapour,liquid,Ih", 700.0, 30e6)
    found = by_subject(ordering(water(fixed_points=pts), th("phase-rule.ordering")))
    assert found[f"{VLI}|Tt<Tc"].status == "violated" and found[f"{VLI}|pt<pc"].status == "violated"


def test_two_triple_points_at_one_state_make_a_forbidden_quadruple_point():
    """Stating a V-VI-liquid and a V-VII-liquid point at the same (T, p) means four phases meet."""
    pts = water_fixed_points() + [point("triple", "V,VII,liquid", 273.31, 632.400e6)]
    f = by_subject(ordering(water(fixed_points=pts), th("phase-rule.ordering")))["phase-count"]
    assert f.status == "violated" and f.measured == 1


def test_curves_crossing_away_from_a_triple_point_fail():
    """A melting polynomial p/pt = 1 - 80x + 1000x^2 (x = T/Tt - 1) crosses the Span-Wagner p_vap near 231 K."""
    dip = Curve(form="melting-polynomial", params=(PT_CO2, -80.0, 1000.0),
                ref={"T_ref_K": TT_CO2, "exponents": (1.0, 2.0)}, T_min_K=TT_CO2, T_max_K=250.0)
    curves = {k: v.curve for k, v in co2().curves.items()}
    curves[("solid-liquid", "", "pressure")] = dip
    f = by_subject(ordering(co2(curves=curves), th("phase-rule.ordering")))["curves:liquid-vapour|solid-liquid"]
    assert f.status == "violated" and f.measured >= 1
    stray = [x for x in f.evidence["intersections"] if x["triple_point"] is None]
    assert all(x["T_K"] > TT_CO2 + 1 for x in stray)
