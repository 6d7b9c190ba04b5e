"""fit_curve: recovery of published curves from noisy data, outliers, coverage, bad input."""

import json
import math

import numpy as np
import pytest
from scipy.stats import chi2

from pipeline.correlations import Curve, fit_curve, fit_form, reference_curve


def noisy(curve, T_true, rng, rel=0.0, absolute=0.0, u_T=0.0):
    """Synthetic series: values at the true T plus value noise; reported T carries T noise."""
    y_true = curve.value(T_true)
    u = rel * y_true + absolute
    y = y_true + u * rng.standard_normal(T_true.size)
    T = T_true + u_T * rng.standard_normal(T_true.size)
    return T, y, u


def scheffe_bound(n_params, level=0.999):
    """Simultaneous bound on |fit - truth|/u over all T: sqrt of the chi2(k) quantile.

    For a correctly specified model, |J delta| <= sqrt(J C J^T) sqrt(delta^T C^-1 delta) and
    delta^T C^-1 delta ~ chi2(k), so the whole curve lies within this many u with probability
    `level`. A literal "within 2u at every T" would fail for a sizeable fraction of seeds even
    for a perfect fit, because 2u is a pointwise 95 % band.
    """
    return math.sqrt(chi2.ppf(level, n_params))


# (published curve key, candidate forms, ref exponents or None, T grid, rel noise,
#  absolute noise [SI], u_T [K]); sources: reference.py (IAPWS SR1-86, R14-08, Span & Wagner
#  1996, Span et al. 2000, Tegeler et al. 1999).
RECOVERY_CASES = [
    (("water", "liquid-vapour", "pressure", ""), "wagner-type", True,
     np.linspace(273.16, 646.0, 200), 1e-3, 0.0, 0.0),
    (("argon", "liquid-vapour", "pressure", ""), ["wagner-type"], True,
     np.linspace(84.0, 150.0, 120), 5e-4, 0.0, 0.005),
    (("water", "solid-liquid", "pressure", "Ih"), "iapws-melting", True,
     np.linspace(251.2, 273.15, 80), 0.0, 0.05e6, 0.005),
    (("water", "solid-liquid", "pressure", "VII"), "iapws-melting-vii", False,
     np.linspace(356.0, 715.0, 60), 1e-3, 0.0, 0.01),
    (("water", "solid-vapour", "pressure", "Ih"), "iapws-sublimation", False,
     np.linspace(150.0, 273.1, 60), 1e-3, 0.0, 0.0),
    (("carbon-dioxide", "solid-vapour", "pressure", ""), "sublimation-power", False,
     np.linspace(150.0, 216.5, 60), 2e-3, 0.0, 0.01),
    (("carbon-dioxide", "solid-liquid", "pressure", ""), "melting-polynomial", True,
     np.linspace(216.7, 250.0, 50), 2e-3, 0.0, 0.01),
    (("nitrogen", "solid-liquid", "pressure", ""), "melting-simon-sum", True,
     np.linspace(64.0, 300.0, 60), 2e-3, 0.0, 0.01),
    (("water", "liquid-vapour", "rho_liquid", ""), "density-power", True,
     np.linspace(273.16, 640.0, 150), 2e-4, 0.0, 0.0),
    (("water", "liquid-vapour", "rho_vapour", ""), "density-log", True,
     np.linspace(273.16, 640.0, 150), 1e-3, 0.0, 0.0),
    (("nitrogen", "liquid-vapour", "rho_vapour", ""), "density-log-tc", True,
     np.linspace(63.2, 126.0, 100), 1e-3, 0.0, 0.0),
]


@pytest.mark.parametrize("key, forms, with_exps, T_true, rel, absolute, u_T", RECOVERY_CASES,
                         ids=lambda v: "/".join(v) if isinstance(v, tuple) else None)
def test_fit_recovers_published_curve(key, forms, with_exps, T_true, rel, absolute, u_T):
    """Noisy data from a published curve are fitted back within the fit's own uncertainty."""
    rng = np.random.default_rng(20260301)
    truth = reference_curve(*key)
    T, y, u = noisy(truth, T_true, rng, rel, absolute, u_T)
    ref = {"T_ref_K": truth.ref["T_ref_K"]}
    if with_exps:
        ref["exponents"] = truth.ref["exponents"]
    out = fit_curve(forms, T, y, u, u_T, ref)
    assert out.fitted, out.skipped_reason
    grid = np.linspace(out.curve.T_min_K, out.curve.T_max_K, 300)
    dev = np.abs(out.curve.value(grid) - truth.value(grid, extrapolate=True)) / out.curve.u(grid)
    assert dev.max() < scheffe_bound(len(out.curve.params))
    dof = out.n_used - len(out.curve.params)
    assert abs(out.reduced_chi2 - 1.0) < 4 * math.sqrt(2 / dof)  # 4 sd of chi2/dof
    assert out.n_flagged == 0


def test_fitted_reference_pressure_agrees_with_published_pc():
    """The fitted ln pc is a real estimate: within 3 u of the published pc, not equal to it."""
    rng = np.random.default_rng(11)
    truth = reference_curve("water", "liquid-vapour", "pressure")  # IAPWS SR1-86, pc 22.064 MPa
    T, y, u = noisy(truth, np.linspace(300.0, 645.0, 150), rng, rel=1e-3)
    out = fit_curve("wagner-type", T, y, u, 0.0,
                    {"T_ref_K": 647.096, "exponents": truth.ref["exponents"]})
    pc_fit = out.curve.value(647.096, extrapolate=True)
    u_pc = out.curve.u(647.096, extrapolate=True)
    assert pc_fit == pytest.approx(out.curve.reference_value, rel=1e-14)
    assert pc_fit != 22.064e6 and abs(pc_fit - 22.064e6) < 3 * u_pc


def test_planted_outliers_are_flagged_not_deleted():
    """Five planted 10-30 sigma outliers are flagged, kept in z, and the fit is unaffected."""
    rng = np.random.default_rng(3)
    truth = reference_curve("argon", "liquid-vapour", "pressure")  # Tegeler et al. (1999)
    T, y, u = noisy(truth, np.linspace(84.0, 150.0, 200), rng, rel=1e-3)
    planted = np.array([5, 40, 99, 150, 190])
    y[planted] *= 1 + 1e-3 * np.array([12.0, -15.0, 30.0, -10.0, 20.0])
    out = fit_curve(["wagner-2.5-5", "wagner-3-6"], T, y, u, 0.0, {"T_ref_K": 150.687})
    np.testing.assert_array_equal(np.flatnonzero(out.outlier_mask), planted)
    assert out.n_flagged == 5 and out.n_used == 195
    assert np.all(np.abs(out.z[planted]) > 8) and len(out.z) == 200
    assert [out.point_flags[i] for i in planted] == ["outlier"] * 5
    assert abs(out.reduced_chi2 - 1.0) < 0.4


def test_uncertainty_band_coverage_is_95_percent():
    """Over 1000 noisy draws the k=2 band u(T) covers the true curve about 95 % of the time."""
    # Statistics: at each T the coverage is a binomial fraction of N = 1000 draws; with
    # p = 0.9545 its standard deviation is 0.0066. The covariance is inflated by the reduced
    # chi-square when it exceeds 1, which can only widen the band (E[coverage] ~ 0.96 for
    # 36 degrees of freedom). Bounds: 0.9545 - 3 sd = 0.935 and 0.962 + 3 sd = 0.982.
    rng = np.random.default_rng(20260302)
    truth = reference_curve("argon", "liquid-vapour", "pressure")
    T_true = np.linspace(84.0, 150.0, 40)
    grid = np.array([85.0, 100.0, 120.0, 140.0, 149.0])
    ref = {"T_ref_K": 150.687, "exponents": truth.ref["exponents"]}
    hits = np.zeros(grid.size)
    n_draws = 1000
    for _ in range(n_draws):
        T, y, u = noisy(truth, T_true, rng, rel=2e-3)
        curve = fit_curve("wagner-type", T, y, u, None, ref, n_terms=4).curve
        hits += np.abs(curve.value(grid) - truth.value(grid)) <= 2 * curve.u(grid)
    coverage = hits / n_draws
    assert np.all((coverage > 0.935) & (coverage < 0.982)), coverage


def test_temperature_uncertainty_enters_through_the_slope():
    """On a steep melting curve the fit is consistent (chi2/dof ~ 1) only with u_T included."""
    rng = np.random.default_rng(8)
    truth = reference_curve("water", "solid-liquid", "pressure", "VI")  # IAPWS R14-08
    T, y, u = noisy(truth, np.linspace(274.0, 354.0, 80), rng, absolute=0.1e6, u_T=0.02)
    with_uT = fit_curve("iapws-melting", T, y, u, 0.02, {"T_ref_K": 273.31, "exponents": (4.6,)})
    without = fit_curve("iapws-melting", T, y, u, 0.0, {"T_ref_K": 273.31, "exponents": (4.6,)},
                        outlier_z=1e9)
    assert abs(with_uT.reduced_chi2 - 1.0) < 4 * math.sqrt(2 / 78)
    assert without.reduced_chi2 > 10


def test_bic_does_not_overfit():
    """Data from a two-term Wagner curve select two terms (3 parameters), not four."""
    rng = np.random.default_rng(4)
    truth = Curve("wagner-3-6", (math.log(5e6), -6.2, 0.9), {"T_ref_K": 200.0},
                  T_min_K=100.0, T_max_K=200.0)
    T, y, u = noisy(truth, np.linspace(100.0, 199.0, 100), rng, rel=1e-3)
    out = fit_curve("wagner-3-6", T, y, u, 0.0, {"T_ref_K": 200.0})
    assert len(out.curve.params) == 3
    assert [k for _, k, _ in out.candidates] == [2, 3, 4, 5]


def test_parameter_count_is_limited_by_the_points():
    """With 5 points no candidate has more than 3 parameters (n_used - 2)."""
    truth = reference_curve("nitrogen", "liquid-vapour", "pressure")  # Span et al. (2000)
    T = np.linspace(70.0, 120.0, 5)
    out = fit_curve("wagner-2.5-5", T, truth.value(T), 1e-3 * truth.value(T), 0.0,
                    {"T_ref_K": 126.192})
    assert out.fitted and max(k for _, k, _ in out.candidates) == 3


def test_simon_glatzel_recovers_its_parameters():
    """A nonlinear Simon-Glatzel fit returns pt, a, c within 3 standard uncertainties."""
    rng = np.random.default_rng(9)
    truth = Curve("simon-glatzel", (0.5e6, 300e6, 1.6), {"T_ref_K": 216.0},
                  T_min_K=216.0, T_max_K=400.0)
    T, y, u = noisy(truth, np.linspace(217.0, 400.0, 60), rng, rel=2e-3, u_T=0.01)
    out = fit_curve("simon-glatzel", T, y, u, 0.01, {"T_ref_K": 216.0})
    fitted = np.array(out.curve.params)
    sd = np.sqrt(np.diag(out.curve.covariance))
    assert np.all(np.abs(fitted - truth.params) < 3 * sd)
    assert abs(out.reduced_chi2 - 1.0) < 4 * math.sqrt(2 / 57)


def test_antoine_forms_are_chosen_by_bic():
    """On 60 K of CO2 vapour pressure at 1e-4, BIC prefers extended Antoine to Antoine."""
    rng = np.random.default_rng(1)
    truth = reference_curve("carbon-dioxide", "liquid-vapour", "pressure")  # Span & Wagner 1996
    T, y, u = noisy(truth, np.linspace(220.0, 280.0, 40), rng, rel=1e-4)
    out = fit_curve(["antoine", "antoine-extended"], T, y, u, 0.001, {})
    assert out.form == "antoine-extended" and out.n_flagged == 0
    assert out.curve.ref["T_ref_K"] is None


def test_linear_and_nonlinear_solvers_agree():
    """The Wagner fit solved linearly and by plain least_squares gives the same parameters."""
    rng = np.random.default_rng(2)
    truth = reference_curve("argon", "liquid-vapour", "pressure")
    T, y, u = noisy(truth, np.linspace(84.0, 150.0, 200), rng, rel=1e-3)
    ref = {"T_ref_K": 150.687}
    lin = fit_form("wagner-2.5-5", T, y, u, ref)
    x0 = np.array([math.log(y.max()), -6.0, 0.0, 0.0, 0.0])
    nonlin = fit_form("wagner-2.5-5", T, y, u, ref, method="nonlinear", x0=x0, loss="linear")
    sd = np.sqrt(np.diag(lin.covariance))
    assert np.all(np.abs(nonlin.params - lin.params) < 1e-3 * sd)
    np.testing.assert_allclose(nonlin.covariance, lin.covariance, rtol=1e-3)


def test_outcome_serialises_to_json():
    """asdict is JSON-safe and asstr names the form and the statistics."""
    truth = reference_curve("argon", "solid-vapour", "pressure")
    T = np.linspace(70.0, 83.0, 20)
    out = fit_curve("sublimation-power", T, truth.value(T), 1e-3 * truth.value(T), 0.0,
                    {"T_ref_K": 83.8058, "exponents": (1.0, 2.7)})
    data = json.loads(json.dumps(out.asdict()))
    assert data["form"] == "sublimation-power" and len(data["z"]) == 20
    assert "sublimation-power" in out.asstr() and "reduced chi2" in out.asstr()


# --- bad input: a clear skipped_reason, never an exception ------------------------------------

ARGON_VP = reference_curve("argon", "liquid-vapour", "pressure")


def _argon_series(T):
    return T, ARGON_VP.value(T, extrapolate=True), 1e-3 * ARGON_VP.value(T, extrapolate=True)


@pytest.mark.parametrize("T, y, u, u_T, code, pattern", [
    (*_argon_series(np.array([90.0, 100.0, 110.0])), 0.0, "too-few-points", "too few points"),
    (np.array([]), np.array([]), np.array([]), 0.0, "too-few-points", "too few points"),
    (np.linspace(90, 140, 30), ARGON_VP.value(np.linspace(140, 90, 30)),
     1e-3 * ARGON_VP.value(np.linspace(140, 90, 30)), 0.0, "non-monotonic",
     "does not rise with temperature"),
    (*_argon_series(np.linspace(90, 140, 10)), np.nan, "non-finite", "non-finite values"),
    (np.linspace(90, 140, 10), -ARGON_VP.value(np.linspace(90, 140, 10)), 1.0, 0.0,
     "non-positive", "needs positive values"),
    (*_argon_series(np.linspace(90, 140, 10))[:2], 0.0, 0.0, "non-positive", "u_value > 0"),
    (np.full(10, 100.0), np.full(10, ARGON_VP.value(100.0)), 100.0, 0.0, "singular-design",
     "singular"),
    (np.linspace(90, 140, 10), np.ones(9), 1.0, 0.0, "bad-shape", "shape"),
])
def test_bad_input_is_skipped_with_a_reason(T, y, u, u_T, code, pattern):
    """Too few, reversed, non-finite, non-positive, degenerate or mis-shaped data skip the fit."""
    out = fit_curve(["wagner-2.5-5"], T, y, u, u_T, {"T_ref_K": 150.687})
    assert not out.fitted and out.curve is None
    assert out.skip_code == code
    assert pattern in out.skipped_reason


def test_range_crossing_tc_is_skipped_by_default():
    """Liquid-vapour points above Tc skip the fit with a reason naming Tc and the points."""
    T = np.linspace(100.0, 155.0, 40)
    y = np.interp(T, [100.0, 150.687, 155.0], [ARGON_VP.value(100.0), 4.863e6, 5.2e6])
    out = fit_curve("wagner-2.5-5", T, y, 1e-3 * y, 0.0, {"T_ref_K": 150.687})
    assert out.skip_code == "crosses-reference-temperature"
    assert "above the critical temperature Tc = 150.687 K" in out.skipped_reason
    assert out.point_flags.count("above-critical-temperature") == int(np.sum(T > 150.687))


def test_range_crossing_tc_can_exclude_and_flag():
    """With above_reference='exclude' the points above Tc are flagged and the rest fitted."""
    T = np.linspace(100.0, 155.0, 40)
    y = ARGON_VP.value(np.minimum(T, 150.687), extrapolate=True)
    out = fit_curve("wagner-2.5-5", T, y, 1e-3 * y, 0.0, {"T_ref_K": 150.687},
                    above_reference="exclude")
    above = T > 150.687
    assert out.fitted and out.n_used == int((~above).sum())
    flags = np.array(out.point_flags)
    assert np.all(flags[above] == "above-critical-temperature")
    assert not out.outlier_mask[above].any() and np.all(np.isnan(out.z[above]))


def test_sublimation_above_triple_point_is_named():
    """Solid-vapour points above Tt are reported as above the triple-point temperature."""
    truth = reference_curve("carbon-dioxide", "solid-vapour", "pressure")
    T = np.linspace(190.0, 220.0, 20)
    y = truth.value(np.minimum(T, 216.592))
    out = fit_curve("sublimation-power", T, y, 1e-3 * y, 0.0, {"T_ref_K": 216.592})
    assert out.skip_code == "crosses-reference-temperature"
    assert "triple-point temperature Tt" in out.skipped_reason


def test_missing_reference_temperature_is_skipped():
    """A Wagner fit without ref['T_ref_K'] skips with a reason, it does not raise."""
    out = fit_curve("wagner-3-6", *_argon_series(np.linspace(90, 140, 10)), 0.0, {})
    assert out.skip_code == "no-reference-temperature"


def test_a_few_noisy_reversals_are_not_non_monotonic():
    """Two isolated outliers do not make a vapour-pressure series non-monotonic."""
    rng = np.random.default_rng(6)
    T, y, u = noisy(ARGON_VP, np.linspace(84.0, 150.0, 60), rng, rel=1e-3)
    y[[20, 40]] *= [1.05, 0.95]
    out = fit_curve("wagner-2.5-5", T, y, u, 0.0, {"T_ref_K": 150.687})
    assert out.fitted and list(np.flatnonzero(out.outlier_mask)) == [20, 40]


def test_unknown_form_or_criterion_is_a_programming_error():
    """Configuration mistakes (unknown form, criterion) raise KeyError rather than skip."""
    args = (*_argon_series(np.linspace(90, 140, 10)), 0.0, {"T_ref_K": 150.687})
    with pytest.raises(KeyError, match="valid forms"):
        fit_curve("wagner-7", *args)
    with pytest.raises(KeyError):
        fit_curve("wagner-3-6", *args, criterion="r2")
