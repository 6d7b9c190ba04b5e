"""Curves of many fluids evaluated and inverted at once give each curve's own numbers, bit for
bit, for every registered correlation form."""

from __future__ import annotations

import json

import duckdb
import numpy as np
import pytest

from pipeline.correlations import FORMS, Curve
from pipeline.correlations.reference import REFERENCE_CURVES
from pipeline.publish import derived

# forms that neither the reference equations nor the demo's fits use, with coefficients of the
# shape of argon's curves (approximate, for evaluation only)
HANDMADE = {
    "antoine": Curve("antoine", (21.7, 900.0, -5.0), {}, None, 84.0, 150.0),
    "antoine-extended": Curve("antoine-extended", (45.0, 1500.0, 0.0, -3.5, 1e-12),
                              {"exponents": (6.0,)}, None, 84.0, 150.0),
    "wagner-3-6": Curve("wagner-3-6", (15.397, -5.904, 1.125, -0.763, -1.697),
                        {"T_ref_K": 150.687}, None, 83.8058, 150.687),
    "iapws-melting-vi": Curve("iapws-melting-vi", (6.2e8, 1.07476),
                              {"T_ref_K": 273.31}, None, 273.31, 355.0),
}


@pytest.fixture(scope="module")
def curves(published_demo) -> list[Curve]:
    """Every form, each in several variants (one batch holds curves of different fluids)."""
    con = duckdb.connect(str(published_demo["store"]), read_only=True)
    base = [Curve.from_dict(json.loads(r[0])) for r in con.execute(
        "SELECT curve_json FROM fit WHERE is_current AND status = 'fitted'").fetchall()]
    con.close()
    base += list(REFERENCE_CURVES.values()) + list(HANDMADE.values())
    assert {c.form for c in base} == set(FORMS)
    out = []
    for c in base:
        for j in range(4):
            k = len(c.params)
            scale = 1.0 + 1e-4 * j
            cov = np.diag([(1e-4 * max(abs(p), 1e-3)) ** 2 for p in c.params]) * scale
            out.append(Curve(c.form, tuple(p * scale if i else p for i, p in enumerate(c.params)),
                             dict(c.ref), cov if j % 2 else c.covariance,
                             c.T_min_K * (1 + 1e-3 * j), c.T_max_K * (1 - 1e-4 * j)))
            assert len(out[-1].params) == k
    return out


def test_batched_inverse_equals_each_curves_inverse(curves):
    """derived.inverse gives curve.inverse(y) bit for bit: targets inside every curve's range,
    and targets no curve reaches (NaN)."""
    for frac, c0 in ((0.1, curves[0]), (0.5, curves[45]), (0.93, curves[90]), (0.5, curves[-1])):
        y = float(c0.value(c0.T_min_K + frac * (c0.T_max_K - c0.T_min_K)))
        got = derived.inverse(curves, y)
        want = np.array([c.inverse(y) for c in curves])
        assert np.array_equal(got, want, equal_nan=True)
        assert np.isfinite(want).sum() >= 4         # several curves of a form reach it
    unreached = derived.inverse(curves, -1.0)       # below every pressure and density
    assert np.array_equal(unreached, [c.inverse(-1.0) for c in curves], equal_nan=True)
    assert np.isnan(unreached).sum() > len(curves) // 2


@pytest.mark.parametrize("extrapolate", [False, True])
def test_batched_value_slope_and_u_equal_each_curves_own(curves, extrapolate):
    """derived.at gives curve.value, curve.slope and curve.u bit for bit, inside and outside
    the ranges (NaN outside unless extrapolating; u NaN without a covariance)."""
    rng = np.random.default_rng(5)
    T = np.array([rng.uniform(0.9 * c.T_min_K, 1.05 * c.T_max_K) for c in curves])
    value, slope, u = derived.at(curves, T, extrapolate=extrapolate)
    for i, c in enumerate(curves):
        want = (c.value(T[i], extrapolate=extrapolate), c.slope(T[i], extrapolate=extrapolate),
                c.u(T[i], extrapolate=extrapolate))
        assert np.array_equal([value[i], slope[i], u[i]], want, equal_nan=True), c
    assert np.isfinite(u).any() and np.isnan(u).any()
