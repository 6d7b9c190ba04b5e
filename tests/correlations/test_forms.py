"""Correlation forms and Curve: registry, derivatives, Jacobians, inverses, ranges, JSON."""

import json
import math

import numpy as np
import pytest

from pipeline.correlations import (FORMS, REFERENCE_CURVES, Curve, evaluate_batch, fit_curve,
                                   get_form, reference_curve)

# Curves with no published counterpart, for the nonlinear forms and default exponent sets.
# Parameters are illustrative magnitudes for a simple fluid (pressures in Pa, T in K).
SYNTHETIC_CURVES = {
    "antoine": Curve("antoine", (21.9, 1767.0, -14.0), {}, T_min_K=220, T_max_K=300),
    "antoine-extended": Curve("antoine-extended", (29.4, 1858.0, -21.0, -1.25, 2e-16),
                              {"exponents": (6.0,)}, T_min_K=220, T_max_K=300),
    "simon-glatzel": Curve("simon-glatzel", (0.5e6, 300e6, 1.6), {"T_ref_K": 216.0},
                           T_min_K=216.0, T_max_K=400.0),
    "wagner-3-6": Curve("wagner-3-6", (math.log(4.9e6), -6.0, 1.2, -0.6, -1.5),
                        {"T_ref_K": 150.0}, T_min_K=80.0, T_max_K=150.0),
    # IAPWS SR1-86(1992) saturation-pressure coefficients in the fixed wagner-pruss-6 form
    "wagner-pruss-6": Curve("wagner-pruss-6", (math.log(22.064e6), -7.85951783, 1.84408259,
                                               -11.7866497, 22.6807411, -15.9618719, 1.80122502),
                            {"T_ref_K": 647.096}, T_min_K=273.16, T_max_K=647.096),
    "melting-polynomial-3": Curve("melting-polynomial", (1e5, 2000.0, 1500.0, -300.0),
                                  {"T_ref_K": 100.0}, T_min_K=100.0, T_max_K=200.0),
}

ALL_CURVES = {**{"/".join(k): c for k, c in REFERENCE_CURVES.items()}, **SYNTHETIC_CURVES}


def interior_grid(curve, n=9):
    """Temperatures strictly inside the curve's range (derivatives of tau^t blow up at Tc)."""
    lo, hi = curve.T_min_K, curve.T_max_K
    return np.linspace(lo + 0.02 * (hi - lo), hi - 0.02 * (hi - lo), n)


def test_registry_holds_every_form():
    """FORMS maps each registry name to a form object of that name."""
    expected = {"wagner-3-6", "wagner-2.5-5", "wagner-pruss-6", "wagner-type", "antoine", "antoine-extended",
                "sublimation-power", "iapws-sublimation", "simon-glatzel", "melting-polynomial",
                "melting-simon-sum", "iapws-melting", "iapws-melting-iii", "iapws-melting-v",
                "iapws-melting-vi", "iapws-melting-vii", "density-power",
                "density-log", "density-log-tc"}
    assert set(FORMS) == expected
    assert all(form.name == name and form.citation for name, form in FORMS.items())


@pytest.mark.parametrize("ice, form", [("III", "iapws-melting-iii"), ("V", "iapws-melting-v"),
                                       ("VI", "iapws-melting-vi")])
def test_ice_melting_forms_carry_the_published_exponents(ice, form):
    """The one-term IAPWS R14-08 forms of ices III (b = 60), V (8), VI (4.6) with their default
    exponents reproduce the release's curves (reference.py gives them as iapws-melting)."""
    ref = REFERENCE_CURVES[("water", "solid-liquid", "pressure", ice)]
    named = Curve(form, ref.params, {"T_ref_K": ref.ref["T_ref_K"]}, T_min_K=ref.T_min_K,
                  T_max_K=ref.T_max_K)
    T = interior_grid(ref)
    assert named.ref["exponents"] == ref.ref["exponents"]
    np.testing.assert_allclose(named.value(T), ref.value(T), rtol=1e-14)


def test_wagner_pruss_6_equals_the_published_water_equation():
    """The fixed six-exponent form reproduces IAPWS SR1-86(1992) as given in wagner-type form."""
    T = np.linspace(274.0, 640.0, 25)
    np.testing.assert_allclose(SYNTHETIC_CURVES["wagner-pruss-6"].value(T),
                               reference_curve("water", "liquid-vapour", "pressure").value(T),
                               rtol=1e-12)


def test_unknown_form_lists_valid_names():
    """An unknown form name raises KeyError naming the valid forms."""
    with pytest.raises(KeyError, match="valid forms: antoine, antoine-extended"):
        get_form("clausius")


@pytest.mark.parametrize("name", sorted(ALL_CURVES))
def test_slope_matches_finite_difference(name):
    """The analytic slope equals a central finite difference (h = 1e-5 T) to 1e-6 relative."""
    curve = ALL_CURVES[name]
    T = interior_grid(curve)
    h = 1e-5 * T
    fd = (curve.value(T + h, extrapolate=True) - curve.value(T - h, extrapolate=True)) / (2 * h)
    np.testing.assert_allclose(curve.slope(T), fd, rtol=1e-6, atol=1e-12 * np.abs(fd).max())


@pytest.mark.parametrize("name", sorted(ALL_CURVES))
def test_jacobian_matches_finite_difference(name):
    """d value / d params equals a central finite difference in each parameter."""
    curve = ALL_CURVES[name]
    T = interior_grid(curve, 5)
    J = curve.jacobian(T)
    for j, pj in enumerate(curve.params):
        h = 1e-6 * abs(pj) if pj else 1e-6
        up = list(curve.params)
        dn = list(curve.params)
        up[j] += h
        dn[j] -= h
        fd = (Curve(curve.form, tuple(up), curve.ref).value(T)
              - Curve(curve.form, tuple(dn), curve.ref).value(T)) / (2 * h)
        noise = 1e-10 * np.abs(curve.value(T)).max() / h  # round-off of the difference
        np.testing.assert_allclose(J[:, j], fd, rtol=1e-5, atol=noise)


@pytest.mark.parametrize("name", sorted(ALL_CURVES))
def test_inverse_round_trips(name):
    """inverse(value(T)) returns T inside the range to 1e-8 K."""
    curve = ALL_CURVES[name]
    T = interior_grid(curve)
    if name == "water/liquid-vapour/rho_liquid/":
        T = T[T > 290.0]  # below, the density maximum near 277 K gives two roots (next test)
    np.testing.assert_allclose(curve.inverse(curve.value(T)), T, rtol=0, atol=1e-8)


def test_inverse_returns_the_lowest_root():
    """Water's saturated-liquid density has a maximum near 277 K; inverse picks the lower root."""
    curve = reference_curve("water", "liquid-vapour", "rho_liquid")
    rho = curve.value(280.0)
    low = curve.inverse(rho)
    assert 273.16 < low < 277.0 and curve.value(low) == pytest.approx(rho, rel=1e-14)


def test_inverse_is_nan_without_a_root():
    """A value the curve never reaches inside its range gives NaN, not an extrapolated T."""
    curve = reference_curve("water", "liquid-vapour", "pressure")
    assert np.isnan(curve.inverse(1.0))        # 1 Pa: below p(273.16 K)
    assert np.isnan(curve.inverse(30e6))       # above pc
    assert curve.inverse(101325.0) == pytest.approx(373.1243, abs=1e-4)  # SR1-86 check value


def test_inverse_of_decreasing_melting_curve():
    """Inverting the ice Ih melting curve at 101325 Pa gives the normal melting point."""
    # IAPWS R14-08 Ih curve: 273.1525191 K (reference-values §1.1).
    curve = reference_curve("water", "solid-liquid", "pressure", "Ih")
    assert curve.inverse(101325.0) == pytest.approx(273.1525191, abs=1e-7)


def test_value_is_nan_outside_range_unless_extrapolating():
    """Outside [T_min_K, T_max_K] value and slope are NaN; extrapolate=True evaluates anyway."""
    curve = reference_curve("carbon-dioxide", "liquid-vapour", "pressure")
    assert np.isnan(curve.value(200.0)) and np.isnan(curve.slope(200.0))
    assert curve.value(200.0, extrapolate=True) > 0
    assert np.isnan(curve.value(310.0, extrapolate=True))  # tau < 0: the form is undefined


def test_scalar_in_scalar_out():
    """A scalar temperature gives a Python float; an array gives an array of its shape."""
    curve = reference_curve("argon", "liquid-vapour", "pressure")
    assert isinstance(curve.value(100.0), float)
    assert curve.value(np.full((2, 3), 100.0)).shape == (2, 3)


@pytest.mark.parametrize("name", sorted(ALL_CURVES))
def test_to_dict_round_trip_through_json(name):
    """to_dict is JSON-safe and from_dict rebuilds an equal curve."""
    curve = ALL_CURVES[name]
    again = Curve.from_dict(json.loads(json.dumps(curve.to_dict())))
    assert again == curve


def test_fitted_curve_round_trip_keeps_covariance():
    """A fitted curve's covariance survives to_dict/from_dict, and u(T) with it."""
    truth = reference_curve("argon", "liquid-vapour", "pressure")
    T = np.linspace(84.0, 150.0, 30)
    fit = fit_curve("wagner-3-6", T, truth.value(T), 1e-3 * truth.value(T), 0.0,
                    {"T_ref_K": 150.687}).curve
    again = Curve.from_dict(json.loads(json.dumps(fit.to_dict())))
    assert again == fit
    np.testing.assert_array_equal(again.u(T), fit.u(T))


def test_u_is_the_delta_method():
    """u(T) equals sqrt(J C J^T) computed by hand."""
    C = np.diag([1e-6, 1e-4, 1e-4, 1e-3, 1e-3])
    curve = Curve("wagner-3-6", SYNTHETIC_CURVES["wagner-3-6"].params, {"T_ref_K": 150.0},
                  covariance=C, T_min_K=80, T_max_K=150)
    T = np.array([90.0, 120.0])
    J = curve.jacobian(T)
    np.testing.assert_allclose(curve.u(T), np.sqrt(np.einsum("mi,ij,mj->m", J, C, J)))


def test_curve_rejects_bad_covariance_and_exponents():
    """Mismatched covariance shapes and exponents contradicting a fixed set raise ValueError."""
    params = SYNTHETIC_CURVES["wagner-3-6"].params
    with pytest.raises(ValueError, match="covariance shape"):
        Curve("wagner-3-6", params, {"T_ref_K": 150.0}, covariance=np.eye(3))
    with pytest.raises(ValueError, match="fixed exponents"):
        Curve("wagner-3-6", params, {"T_ref_K": 150.0, "exponents": (1.0, 1.5, 2.5, 5.0)})
    with pytest.raises(ValueError, match="only 4 exponents"):
        Curve("wagner-3-6", params + (1.0,), {"T_ref_K": 150.0})
    with pytest.raises(ValueError, match="parameters do not fit the form"):
        Curve("simon-glatzel", (1e5, 1e8), {"T_ref_K": 100.0})


def test_truncated_series_uses_the_leading_exponents():
    """A Wagner 3-6 curve with two coefficients uses tau and tau^1.5 only."""
    curve = Curve("wagner-3-6", (math.log(5e6), -6.0, 1.0), {"T_ref_K": 150.0},
                  T_min_K=80, T_max_K=150)
    T = 120.0
    tau = 1 - T / 150.0
    assert curve.ref["exponents"] == (1.0, 1.5)
    assert curve.value(T) == pytest.approx(5e6 * math.exp(150 / T * (-6 * tau + tau**1.5)))


def test_repr_reads_like_the_curve():
    """repr names the form, the parameter count and the range."""
    assert repr(reference_curve("nitrogen", "solid-vapour", "pressure")) == \
        "<Curve sublimation-power (2 params) 50-63.151 K>"


@pytest.mark.parametrize("what", ["value", "slope"])
def test_batch_evaluation_matches_single_curves(what):
    """evaluate_batch over mixed forms equals evaluating each curve on its own."""
    curves = list(REFERENCE_CURVES.values())
    T = np.array([[c.T_min_K + f * (c.T_max_K - c.T_min_K) for f in (0.1, 0.5, 0.9)]
                  for c in curves])
    expected = np.array([getattr(c, what)(row) for c, row in zip(curves, T, strict=True)])
    np.testing.assert_allclose(evaluate_batch(curves, T, what), expected, rtol=1e-13)


def test_batch_evaluation_of_many_wagner_curves():
    """1000 Wagner curves on a shared grid evaluate in one call, NaN outside each range."""
    rng = np.random.default_rng(5)
    Tc = rng.uniform(120, 600, 1000)
    curves = [Curve("wagner-2.5-5", (math.log(5e6), -6.5, 1.3, -0.8, -1.8), {"T_ref_K": t},
                    covariance=np.diag([1e-6, 1e-4, 1e-3, 1e-3, 1e-2]),
                    T_min_K=0.5 * t, T_max_K=t) for t in Tc]
    grid = np.linspace(100, 600, 200)
    values = evaluate_batch(curves, grid)
    u = evaluate_batch(curves, grid, "u")
    assert values.shape == u.shape == (1000, 200)
    i = 17
    np.testing.assert_allclose(values[i], curves[i].value(grid), rtol=1e-13)
    np.testing.assert_allclose(u[i], curves[i].u(grid), rtol=1e-12)
    assert np.all(np.isnan(values[grid[None, :] > Tc[:, None]]))


def test_batch_rejects_unknown_quantity():
    """evaluate_batch with an unknown quantity raises KeyError listing the valid ones."""
    with pytest.raises(KeyError, match="value, slope, u"):
        evaluate_batch([], np.array([1.0]), "curvature")
