"""fit_curves: many series at once give, series by series, the outcomes of fit_curve.

Every branch of the reference algorithm is exercised in one mixed batch per case: clean
series of different lengths, outliers, a file in the wrong unit beside trusted data, u(T)
as a scalar and per point, points above the reference temperature, and every skip reason.
Outcomes are compared field by field: categorical fields exactly, numbers to 1e-10 relative
(common practice: a batched path checked against its reference implementation).
"""

from __future__ import annotations

import numpy as np
import pytest

from pipeline.correlations import fit_curve, reference_curve
from pipeline.correlations.batched import Series, fit_batch, fit_curves
from tests.compare import close


def assert_same(forms, series, **kw):
    """fit_curves on the batch equals fit_curve on each series (all fields of asdict)."""
    batched = fit_curves(forms, series, **kw)
    assert len(batched) == len(series)
    for i, (s, got) in enumerate(zip(series, batched)):
        want = fit_curve(forms, s.T, s.y, s.u_y, s.u_T, s.ref, trusted=s.trusted, **kw)
        a, b = got.asdict(), want.asdict()
        diff = [k for k in a if not close(a[k], b[k])]
        assert not diff, f"series {i}: {diff} differ ({b['skip_code'] or b['form']})"
    return batched


def published(key, T, rng, rel, u_T=0.0):
    """Noisy points of a published curve (reference.py: Tegeler et al. 1999 for argon,
    Span & Wagner 1996 for CO2, IAPWS R14-08 for water ices)."""
    curve = reference_curve(*key)
    y = curve.value(T)
    return T + u_T * rng.standard_normal(T.size), y * (1 + rel * rng.standard_normal(T.size)), \
        rel * y


ARGON_VP = ("argon", "liquid-vapour", "pressure", "")
ARGON_TC = 150.687            # K, Tegeler, Span & Wagner (1999)
CO2_MELT = ("carbon-dioxide", "solid-liquid", "pressure", "")
CO2_TT = 216.592              # K, Span & Wagner (1996)
WAGNER = ["wagner-3-6", "wagner-2.5-5", "wagner-pruss-6"]
MELTING = ["melting-polynomial", "melting-simon-sum", "iapws-melting", "iapws-melting-iii",
           "iapws-melting-v", "iapws-melting-vi", "iapws-melting-vii", "simon-glatzel"]


def vapour_batch() -> list[Series]:
    """Argon vapour-pressure series covering the branches of the reference algorithm."""
    rng = np.random.default_rng(14)
    ref = {"T_ref_K": ARGON_TC}
    out = []
    for n in (40, 40, 25, 120):                               # clean, two share a size
        T, y, u = published(ARGON_VP, np.linspace(84.0, 148.0, n), rng, 5e-4, 0.005)
        out.append(Series(T, y, u, 0.005, ref))
    T, y, u = published(ARGON_VP, np.linspace(84.0, 148.0, 30), rng, 5e-4)
    y[[5, 17]] *= (1.08, 0.9)                                 # two gross outliers
    out.append(Series(T, y, u, np.full(30, 0.01), ref))
    T1, y1, u1 = published(ARGON_VP, np.linspace(84.0, 148.0, 30), rng, 5e-4)
    T2, y2, u2 = published(ARGON_VP, np.linspace(85.5, 140.5, 20), rng, 2e-3)
    out.append(Series(np.r_[T1, T2], np.r_[y1, 1e-3 * y2], np.r_[u1, 1e-3 * u2], 0.0, ref,
                      trusted=np.r_[np.ones(30, bool), np.zeros(20, bool)]))   # kPa as Pa
    T, y, u = published(ARGON_VP, np.linspace(84.0, 150.0, 30), rng, 5e-4)
    out.append(Series(np.r_[T, 151.0, 152.0], np.r_[y, 4.9e6, 5.0e6], np.r_[u, 5e3, 5e3],
                      0.0, ref))                              # two points above Tc
    out.append(Series(T[:4], y[:4], u[:4], 0.0, ref))         # too few points
    bad = y.copy()
    bad[3] = np.nan
    out.append(Series(T, bad, u, 0.0, ref))                   # non-finite value
    out.append(Series(T, y, -u, 0.0, ref))                    # non-positive uncertainty
    out.append(Series(T, y[:-1], u, 0.0, ref))                # shapes differ
    out.append(Series(T, y, u, 0.0, {}))                      # no reference temperature
    out.append(Series(T, y[::-1].copy(), u, 0.0, ref))        # falls with T
    out.append(Series(np.full(12, 100.0), np.full(12, 3.2e5), np.full(12, 300.0), 0.0,
                      ref))                                   # one temperature: singular
    return out


@pytest.mark.parametrize("kw", [
    dict(),
    dict(above_reference="exclude"),
    dict(criterion="aic", outlier_z=3.0),
    dict(n_terms=2, min_points=8),
], ids=["defaults", "exclude-above", "aic", "two-terms"])
def test_vapour_pressure_batch_matches_fit_curve(kw):
    """Wagner candidates on argon series (every branch): outcomes equal fit_curve's."""
    out = assert_same(WAGNER, vapour_batch(), **kw)
    codes = {o.skip_code for o in out}
    assert {"too-few-points", "non-finite", "non-positive", "bad-shape",
            "no-reference-temperature", "non-monotonic"} <= codes
    assert sum(o.fitted for o in out) >= 5


def test_melting_batch_with_simon_glatzel_matches_fit_curve():
    """Every melting form of the fit plan (seven linear, Simon-Glatzel by least_squares,
    warm-started across rounds and stages) on CO2 melting series (Span & Wagner 1996)."""
    rng = np.random.default_rng(5)
    ref = {"T_ref_K": CO2_TT}
    series = []
    for n, rel in ((50, 2e-3), (50, 5e-4), (35, 2e-3), (80, 1e-3)):
        T, y, u = published(CO2_MELT, np.linspace(217.0, 250.0, n), rng, rel, 0.01)
        series.append(Series(T, y, u, 0.01, ref))
    T, y, u = published(CO2_MELT, np.linspace(217.0, 250.0, 40), rng, 2e-3)
    y[10] *= 1.2
    series.append(Series(T, y, u, 0.02, ref))
    out = assert_same(MELTING, series, above_reference="exclude")
    assert all(o.fitted for o in out)


def test_antoine_forms_without_reference_point_match_fit_curve():
    """Nonlinear forms with no reference temperature (Antoine, extended Antoine) on short
    argon ranges: outcomes equal fit_curve's."""
    rng = np.random.default_rng(9)
    series = [Series(*published(ARGON_VP, np.linspace(lo, lo + 25.0, n), rng, 1e-3), 0.0,
                     {"T_ref_K": ARGON_TC}) for lo, n in ((84.0, 20), (95.0, 20), (100.0, 31))]
    assert_same(["antoine", "antoine-extended"], series)


def test_given_exponents_batch_separately_and_match_fit_curve():
    """Series whose ref gives their own exponents (the Wagner-type sum) are fitted with them."""
    rng = np.random.default_rng(3)
    T, y, u = published(ARGON_VP, np.linspace(84.0, 148.0, 60), rng, 5e-4)
    series = [Series(T, y, u, 0.0, {"T_ref_K": ARGON_TC, "exponents": e})
              for e in ((1.0, 1.5, 2.0, 4.5), (1.0, 1.5, 3.0, 6.0), (1.0, 1.5, 2.0, 4.5))]
    out = assert_same("wagner-type", series)
    assert out[0].curve.ref["exponents"] != out[1].curve.ref["exponents"]


def test_fit_batch_takes_one_picklable_call():
    """fit_batch(forms, series, kwargs) is fit_curves for a worker process."""
    series = vapour_batch()[:3]
    a = fit_batch((tuple(WAGNER), series, {"outlier_z": 4.0}))
    b = fit_curves(WAGNER, series, outlier_z=4.0)
    assert [o.asdict() for o in a] == [o.asdict() for o in b]


def test_unknown_names_are_key_errors_as_in_fit_curve():
    """An unknown form, criterion or above_reference value raises KeyError naming it."""
    s = vapour_batch()[:1]
    with pytest.raises(KeyError, match="unknown correlation form"):
        fit_curves(["wagner-9"], s)
    with pytest.raises(KeyError):
        fit_curves(WAGNER, s, criterion="r2")
    with pytest.raises(KeyError, match="above_reference"):
        fit_curves(WAGNER, s, above_reference="drop")
