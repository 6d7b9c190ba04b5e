"""The one uncertainty budget and the one extrapolation policy every check uses (issue 12)."""

import math

import numpy as np
import pandas as pd
import pytest

from check_fixtures import M_WATER, by_subject, constant, point, sample_series, th, water
from pipeline.checks import FluidData
from pipeline.checks.budget import SOURCE_KINDS, default_budget, reach
from pipeline.checks.thresholds import threshold_notes
from pipeline.checks.triple_point import on_curves
from pipeline.checks.unit_mixup import unit_mixup
from pipeline.correlations import fit_curve, reference_curve


# (key, source kind, default, the source the note in thresholds.toml must name)
DEFAULTS = [
    ("T_critical_K", "standard", 0.01, "IUPAC"),        # IUPAC critical-data reviews (memory)
    ("T_critical_K", "literature", 0.3, "IUPAC"),       # ~0.1-0.5 K for organics (memory)
    ("T_critical_K", "estimate", 5.0, "common practice"),
    ("p_critical_rel", "evaluated", 0.002, "reviews"),
    ("p_critical_rel", "literature", 0.01, "reviews"),
    ("rho_critical_rel", "literature", 0.02, "common practice"),   # critical density 1-2 %
    ("rho_critical_rel", "standard", 0.005, "common practice"),
    ("T_triple_K", "standard", 0.0001, "Metrologia 27, 3"),        # ITS-90 defining points
    ("T_triple_K", "literature", 0.05, "Cryogenics 21, 131"),      # Staveley et al. (1981)
    ("p_triple_rel", "standard", 0.0001, "R14-08"),                # IAPWS pt = 611.657(10) Pa
    ("p_triple_rel", "literature", 0.01, "common practice"),
    ("acentric_factor_abs", "literature", 0.005, "common practice"),
    ("T_normal_boiling_K", "literature", 0.2, "common practice"),
    ("h_fusion_rel", "literature", 0.03, "common practice"),        # "a few %"
    ("h_vaporization_rel", "literature", 0.02, "common practice"),
    ("h_sublimation_rel", "literature", 0.03, "common practice"),
    ("p_observed_rel", "literature", 0.01, "common practice"),
    ("p_observed_abs_Pa", "literature", 10.0, "common practice"),
    ("rho_observed_rel", "measurement", 0.002, "common practice"),
    ("correlated_fraction", "evaluated", 1.0, "GUM"),               # ISO/IEC Guide 98-3, 5.2
    ("correlated_fraction", "measurement", 0.5, "GUM"),
]


@pytest.mark.parametrize("key, kind, value, source", DEFAULTS)
def test_each_default_uncertainty_is_documented_with_its_source(key, kind, value, source):
    """The default in force equals the documented value, and its note in thresholds.toml names
    where it comes from (a publication, or 'common practice')."""
    model = default_budget().uncertainty
    assert model.default(key, kind) == value
    note = threshold_notes()["uncertainty"][key]
    assert source in note, note


def test_every_default_key_is_covered_by_a_test():
    """No default uncertainty is left without a row in the table above."""
    table = default_budget().uncertainty.table
    keys = {k for k, v in table.items() if isinstance(v, list)}
    assert keys == {k for k, *_ in DEFAULTS}
    assert all(len(table[k]) == len(SOURCE_KINDS) for k in keys)


def test_the_extrapolation_policy_is_five_percent_of_t_and_at_least_one_kelvin():
    """max(min_K, max_fraction T): 4.19 K at the argon triple point (83.8058 K), 1 K at 10 K
    (common practice: a correlation is trusted a few % in T past its data)."""
    policy = default_budget().extrapolation
    assert policy.allowed(83.8058) == pytest.approx(4.19029)
    assert policy.allowed(10.0) == 1.0
    ok = reach(79.0, 83.0, 83.8058, policy, "solid-vapour")
    far = reach(79.0, 83.0, 210.0, policy, "solid-vapour")
    assert ok.ok and ok.beyond_K == pytest.approx(0.8058)
    assert not far.ok and "extrapolation policy allows 10.5 K" in far.reason


def test_a_stated_value_without_u_takes_its_kinds_default():
    """Tc = 647.1 K from a compilation ('literature') without u gets 0.3 K; with u it keeps it."""
    fluid = water(fixed_points=[point("critical", "liquid,vapour", 647.1, 22.06e6,
                                      source="handbook", source_kind="literature"),
                                point("triple", "vapour,liquid,Ih", 273.16, 611.657, u_T=1e-4,
                                      u_p=0.01)])
    crit, trip = fluid.fixed_point_records
    assert crit["u_T_K"] == 0.3 and crit["u_p_Pa"] == pytest.approx(0.01 * 22.06e6)
    assert crit["u_defaulted"] == ["T_K", "p_Pa"]
    assert trip["u_T_K"] == 1e-4 and trip["u_p_Pa"] == 0.01 and trip["u_defaulted"] == []


def _fitted_from_one_equation(n: int, u_rel: float):
    """n points sampled from the IAPWS SR1-86 vapour-pressure equation, fitted."""
    lv = reference_curve("water", "liquid-vapour", "pressure")
    T = np.linspace(280.0, 640.0, n)
    y = lv.value(T)
    out = fit_curve(["wagner-2.5-5"], T, y, u_rel * y, 0.0, {"T_ref_K": 647.096})
    obs = sample_series(lv, T, boundary="liquid-vapour", source_id="one-table",
                        source_kind="evaluated", u_rel=u_rel)
    return FluidData.build("water", M_WATER, observations=obs,
                           fixed_points=[point("critical", "liquid,vapour", 647.096, 22.064e6)],
                           curves={("liquid-vapour", "", "pressure"): out.curve})


def test_points_of_one_equation_do_not_shrink_the_fit_uncertainty():
    """200 points from one equation stated at 0.5 %: the covariance alone gives u far below
    0.5 % (1/sqrt(n)), the budget never below the file's correlated 0.5 % (GUM 5.2)."""
    fluid = _fitted_from_one_equation(200, 0.005)
    point_, _ = fluid.at(("liquid-vapour", "", "pressure"), 400.0)
    assert point_.u_cov < 0.001 * point_.value
    assert point_.u == pytest.approx(0.005 * point_.value, rel=0.02)
    assert point_.u_slope >= 0.005 * point_.slope


def test_files_scattering_beyond_their_u_widen_the_floor_by_their_birge_ratio():
    """Two tables of the same equation 2 % apart, each stated at 0.5 %: the floor is expanded
    by the Birge ratio of their offsets (Birge, Phys. Rev. 40, 207 (1932)), about 2.8."""
    lv = reference_curve("water", "liquid-vapour", "pressure")
    a = sample_series(lv, np.linspace(300, 600, 10), boundary="liquid-vapour", source_id="a",
                      source_kind="evaluated", u_rel=0.005)
    b = sample_series(lv, np.linspace(310, 610, 10), boundary="liquid-vapour", source_id="b",
                      source_kind="evaluated", u_rel=0.005, scale=1.02, first_obs_id=11)
    fluid = FluidData.build("water", M_WATER, observations=pd.concat([a, b], ignore_index=True),
                            curves={("liquid-vapour", "", "pressure"): lv})
    budget = fluid.curve_budget(("liquid-vapour", "", "pressure"))
    assert budget.birge_ratio == pytest.approx(0.02 / math.sqrt(2 * 0.005 ** 2), rel=0.05)
    assert budget.floor_rel(450.0) == pytest.approx(0.005 * budget.birge_ratio, rel=1e-9)


def test_a_single_file_in_kpa_declared_pa_is_diagnosed_without_a_second_file():
    """A fluid whose only vapour-pressure file holds kPa declared Pa, with no reference equation
    (no CAS number), is compared with the Lee-Kesler estimate from its stated Tc, pc and ω
    (argon: Tegeler et al. 1999 ancillary; ω = -0.002, compilation value from memory)."""
    lv = reference_curve("argon", "liquid-vapour", "pressure")
    obs = sample_series(lv, np.linspace(85.0, 145.0, 12), boundary="liquid-vapour",
                        source_id="rig", source_kind="measurement", u_rel=0.002,
                        value_unit="Pa", scale=1e-3)
    fluid = FluidData.build("my-argon", 0.039948, observations=obs,
                            fixed_points=[point("critical", "liquid,vapour", 150.687, 4.863e6)],
                            constants=[constant("acentric_factor", -0.002, unit="1")])
    (f,) = unit_mixup(fluid, th("data.unit-mixup"))
    assert f.status == "violated"
    assert "kPa recorded as Pa" in f.message and "Lee-Kesler" in f.evidence["consensus"]


def test_reference_equations_are_found_by_cas_number_not_by_slug():
    """A store calling water 'h2o' still gets the IAPWS SR1-86 equation as consensus (CAS 7732-18-5)."""
    lv = reference_curve("water", "liquid-vapour", "pressure")
    obs = sample_series(lv, np.linspace(300.0, 600.0, 10), boundary="liquid-vapour",
                        source_id="rig", source_kind="measurement", u_rel=0.002, value_unit="Pa",
                        scale=1e-3)
    named = FluidData.build("h2o", M_WATER, observations=obs, cas_rn="7732-18-5")
    (f,) = unit_mixup(named, th("data.unit-mixup"))
    assert f.status == "violated" and "SR1-86" in f.evidence["consensus"]
    assert f.evidence["diagnosis"] == "kPa recorded as Pa (factor 1000)"
    (skip,) = unit_mixup(FluidData.build("h2o", M_WATER, observations=obs), th("data.unit-mixup"))
    assert skip.status == "skip"


def test_a_temperature_only_triple_point_compares_the_curves_with_each_other():
    """With Tt = 273.16 K stated and no pt, SR1-86 and the R14-08 sublimation curve still meet
    at Tt (both give 611.657 Pa); a sublimation curve 3 % high does not."""
    pts = [point("triple", "vapour,liquid,Ih", 273.16, u_T=1e-4),
           point("critical", "liquid,vapour", 647.096, 22.064e6)]
    found = by_subject(on_curves(water(fixed_points=pts), th("triple-point.on-curves")))
    sub = found["triple:vapour,liquid,Ih|solid-vapour:Ih"]
    assert sub.status == "pass" and "no stated pt" in sub.message
    curves = dict(water().curves)
    sv = ("solid-vapour", "Ih", "pressure")

    class Scaled:
        def __init__(self, c):
            self.c = c
            self.T_min_K, self.T_max_K, self.covariance = c.T_min_K, c.T_max_K, None

        def value(self, T, extrapolate=False):
            return 1.03 * self.c.value(T, extrapolate=extrapolate)

        def slope(self, T, extrapolate=False):
            return 1.03 * self.c.slope(T, extrapolate=extrapolate)

    curves = {k: v.curve for k, v in curves.items()}
    curves[sv] = Scaled(curves[sv])
    found = by_subject(on_curves(water(fixed_points=pts, curves=curves), th("triple-point.on-curves")))
    assert found["triple:vapour,liquid,Ih|solid-vapour:Ih"].status == "violated"


def test_floors_of_many_curves_at_once_equal_each_curve_alone():
    """floor_rel_rows (the files of many budgets side by side) gives floor_rel_array's numbers
    for every curve: covered, uncovered (nearest file) and widened by the policy, a budget
    without files (floor 0) and one without a policy among them."""
    from pipeline.checks.budget import CurveBudget, ExtrapolationPolicy, FileShare, floor_rel_rows

    policy = ExtrapolationPolicy(0.02, 1.0)
    budgets = [
        CurveBudget((FileShare("a", 100.0, 150.0, 1e-3, 1e-4, 20),
                     FileShare("b", 140.0, 200.0, 4e-4, 1e-4, 30)), 1.3, 1.7, policy),
        CurveBudget((FileShare("c", 90.0, 95.0, 2e-3, 1e-4, 5),), 0.9, 1.0, None),
        CurveBudget(),
        CurveBudget((FileShare("d", 10.0, 20.0, 5e-3, 1e-4, 8), FileShare("e", 30.0, 40.0, 3e-3, 1e-4, 8),
                     FileShare("f", 21.0, 29.0, 7e-3, 1e-4, 8)), 1.0, 1.0, policy),
    ]
    T = [np.array([99.5, 120.0, 145.0, 210.0, 300.0]), np.array([80.0, 92.0, 96.0]),
         np.array([50.0]), np.array([5.0, 20.3, 25.0, 29.5, 45.0])]
    owner = np.repeat(np.arange(4), [len(t) for t in T])
    got = floor_rel_rows(budgets, owner, np.concatenate(T))
    expected = np.concatenate([b.floor_rel_array(t) for b, t in zip(budgets, T)])
    assert got.tolist() == expected.tolist()
    assert got[0] == pytest.approx(1e-3 * 1.7) and got[8] == 0.0   # the best covering file times the Birge expansion (floor_rel)
