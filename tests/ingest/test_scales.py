"""Temperature scales of pipeline.ingest.scales: IPTS-68 -> ITS-90 difference functions."""

from __future__ import annotations

import numpy as np
import pytest

from pipeline.errors import ScaleError
from pipeline.ingest import scales
from pipeline.ingest.scales import (SCALES, get_scale, ipts68_to_its90, its90_minus_ipts68,
                                    its90_to_ipts68, out_of_range_mask, to_its90)

REF = "reference-values.md s5"
TABLE = "Preston-Thomas (1990) Table 6 / Goldberg & Weir (1992)"

# T90 [K], polynomial value [K] (computed, 0.1 mK), published table value [K] (or None)
CHECK_VALUES = [
    (14.0, -0.0058, -0.006),
    (20.0, -0.0091, -0.009),
    (30.0, -0.0063, -0.006),
    (50.0, -0.0057, -0.006),
    (60.0, +0.0025, +0.003),
    (70.0, +0.0068, +0.007),
    (93.15, +0.0094, +0.008),
    (133.15, +0.0129, +0.014),
    (183.15, +0.0134, +0.012),
    (273.15, 0.0000, 0.000),
    (298.15, -0.0062, -0.006),
    (373.15, -0.0256, -0.026),
    (473.15, -0.0398, -0.040),
    (573.15, -0.0395, -0.039),
    (773.15, -0.0795, -0.079),
    (873.15, -0.1146, -0.115),
    (1000.0, +0.0123, None),
]


@pytest.mark.parametrize("T90, poly, table", CHECK_VALUES)
def test_difference_polynomials_give_the_check_values(T90, poly, table):
    """T90 - T68 from ranges A, B, C equals the computed check values to 0.1 mK (ref. values s5)."""
    assert its90_minus_ipts68(np.array([T90]))[0] == pytest.approx(poly, abs=1e-4), REF


@pytest.mark.parametrize("T90, poly, table", [c for c in CHECK_VALUES if c[2] is not None])
def test_difference_polynomials_agree_with_the_published_table(T90, poly, table):
    """T90 - T68 agrees with the published table within 2 mK (worst: 1.4 mK at 93.15 K)."""
    assert its90_minus_ipts68(np.array([T90]))[0] == pytest.approx(table, abs=2e-3), TABLE


def test_range_c_at_1000_K():
    """Range C gives T90 - T68 = +0.012318 K at 1000 K (public docstring value, ref. s5)."""
    assert its90_minus_ipts68(np.array([1000.0]))[0] == pytest.approx(0.012318, abs=1e-6)


@pytest.mark.parametrize("T_switch, below, above, limit", [
    (scales.T_SWITCH_AB_K, "A", "B", 0.7e-3),
    (scales.T_SWITCH_BC_K, "B", "C", 0.8e-3),
])
def test_ranges_meet_within_a_millikelvin(T_switch, below, above, limit):
    """The ranges meet within 0.8 mK at the switch points (A/B 0.6 mK, B/C 0.7 mK, ref. s5)."""
    eps = 1e-9
    jump = its90_minus_ipts68(np.array([T_switch - eps, T_switch + eps]))
    assert abs(jump[1] - jump[0]) < limit, (below, above)


# IPTS-68 assigned value [K], ITS-90 value [K]: Preston-Thomas (1990) and the IPTS-68 text
# (Metrologia 5, 35 (1969); values from memory, ref. values s5); all within 0.6 mK there
FIXED_POINTS = [
    ("e-H2 triple point", 13.81, 13.8033),
    ("O2 triple point", 54.361, 54.3584),
    ("Ar triple point", 83.798, 83.8058),
    ("water boiling point", 373.15, 373.124),
    ("In freezing point", 429.784, 429.7485),
    ("Sn freezing point", 505.1181, 505.078),
    ("Zn freezing point", 692.73, 692.677),
    ("Ag freezing point", 1235.08, 1234.93),
    ("Au freezing point", 1337.58, 1337.33),
]


@pytest.mark.parametrize("name, T68, T90", FIXED_POINTS)
def test_fixed_points_convert_to_their_its90_values(name, T68, T90):
    """IPTS-68 fixed-point values convert to their ITS-90 values within 1 mK."""
    assert to_its90(np.array([T68]), "IPTS-68")[0] == pytest.approx(T90, abs=1e-3), name


def test_argon_triple_point_uses_range_b():
    """83.798 K (IPTS-68) -> 83.8058 K (ITS-90): range B gives +8.3 mK, within 1 mK of +7.8 mK."""
    T90 = to_its90(np.array([83.798]), "IPTS-68")[0]
    assert T90 - 83.798 == pytest.approx(0.0083, abs=1e-4)
    assert T90 == pytest.approx(83.8058, abs=1e-3)


def test_fixed_point_iteration_has_converged(monkeypatch):
    """Three passes of T90 <- T68 + D(T90) agree with twenty to 1e-8 K over 13.81 K...1337.58 K."""
    T68 = np.linspace(scales.T68_MIN_K, scales.T68_MAX_K, 20001)
    three = ipts68_to_its90(T68)
    monkeypatch.setattr(scales, "FIXED_POINT_ITERATIONS", 20)
    many = ipts68_to_its90(T68)
    np.testing.assert_allclose(three, many, rtol=0, atol=1e-8)


def test_converted_value_solves_the_difference_equation():
    """The converted T90 satisfies T90 - D(T90) = T68 to 1e-8 K away from the switch points."""
    T68 = np.concatenate([np.linspace(14.0, 73.0, 500), np.linspace(74.0, 903.0, 2000),
                          np.linspace(905.0, 1337.0, 500)])
    T90 = ipts68_to_its90(T68)
    np.testing.assert_allclose(T90 - its90_minus_ipts68(T90), T68, rtol=0, atol=1e-8)


def test_round_trip_t68_t90_t68():
    """T68 -> T90 -> T68 returns the input to 1e-8 K (the inverse is explicit in T90)."""
    T68 = np.linspace(scales.T68_MIN_K, scales.T68_MAX_K, 5001)
    np.testing.assert_allclose(its90_to_ipts68(ipts68_to_its90(T68)), T68, rtol=0, atol=1e-8)


def test_round_trip_t90_t68_t90():
    """T90 -> T68 -> T90 returns the input to 1e-8 K inside the IPTS-68 range."""
    T90 = np.linspace(13.81, 1337.33, 5001)
    np.testing.assert_allclose(ipts68_to_its90(its90_to_ipts68(T90)), T90, rtol=0, atol=1e-8)


@pytest.mark.parametrize("T68", [1.0, 10.0, 13.80, 13.809, 1337.59, 1500.0, 3000.0, 0.0, -5.0])
def test_out_of_range_gives_nan_and_mask(T68):
    """Outside 13.81 K <= T68 <= 1337.58 K the result is NaN and the mask flags the row."""
    T = np.array([T68, 300.0])
    out = to_its90(T, "IPTS-68")
    assert np.isnan(out[0]) and np.isfinite(out[1])
    assert out_of_range_mask(T, "IPTS-68").tolist() == [True, False]


def test_missing_values_are_not_out_of_range():
    """NaN and infinite inputs give NaN but are not flagged as out of range (another fault)."""
    T = np.array([np.nan, np.inf, -np.inf, 300.0])
    assert np.isnan(to_its90(T, "IPTS-68")[:3]).all()
    assert out_of_range_mask(T, "IPTS-68").tolist() == [False, False, False, False]


@pytest.mark.parametrize("T90", [13.79, 1337.3303, 1337.34, 5.0, 2000.0])
def test_difference_function_is_nan_outside_its_range(T90):
    """its90_minus_ipts68 is NaN outside 13.8 K <= T90 <= 1337.33 K (+0.2 mK at the gold point)."""
    assert np.isnan(its90_minus_ipts68(np.array([T90]))[0])


def test_its90_is_the_identity():
    """ITS-90 temperatures are returned unchanged, as a new array, and never flagged."""
    T = np.array([0.5, 83.8058, 273.16, 5000.0])
    out = to_its90(T, "ITS-90")
    np.testing.assert_array_equal(out, T)
    assert out is not T
    assert not out_of_range_mask(T, "ITS-90").any()


def test_conversion_is_vectorised_and_keeps_shape():
    """to_its90 converts arrays of any shape, and scalars, in one call."""
    T = np.array([[273.15, 373.15], [83.798, 1.0]])
    out = to_its90(T, "IPTS-68")
    assert out.shape == (2, 2)
    assert out[0, 0] == pytest.approx(273.15, abs=1e-12)
    assert np.isnan(out[1, 1])
    assert float(to_its90(373.15, "IPTS-68")) == pytest.approx(373.124, abs=1e-3)


@pytest.mark.parametrize("name, expected", [
    ("ITS-90", "ITS-90"), ("its90", "ITS-90"), ("ITS 90", "ITS-90"),
    ("IPTS-68", "IPTS-68"), ("ipts_68", "IPTS-68"), ("IPTS68", "IPTS-68"),
])
def test_scale_names_ignore_case_and_separators(name, expected):
    """Scale names match ignoring case, blanks, hyphens and underscores."""
    assert get_scale(name) is SCALES[expected]


@pytest.mark.parametrize("name, title", [
    ("IPTS-48", "International Practical Temperature Scale of 1948"),
    ("ipts48", "International Practical Temperature Scale of 1948"),
    ("ITS-27", "International Temperature Scale of 1927"),
    ("EPT-76", "1976 Provisional 0.5 K to 30 K Temperature Scale"),
    ("PLTS-2000", "Provisional Low Temperature Scale of 2000"),
])
def test_unsupported_scales_are_refused(name, title):
    """Known older scales raise ScaleError naming them, saying no conversion is implemented."""
    with pytest.raises(ScaleError, match=rf"temperature scale '{name}' \({title}.*\): no published "
                                         r"conversion to ITS-90 is implemented.*"
                                         r"supported scales: ITS-90, IPTS-68"):
        to_its90(np.array([300.0]), name)


@pytest.mark.parametrize("name, match", [
    ("IPTS-86", r"unknown temperature scale 'IPTS-86'; supported scales: ITS-90, IPTS-68; "
                r"did you mean 'IPTS-68'\?"),
    ("Kelvin", r"unknown temperature scale 'Kelvin'; supported scales: ITS-90, IPTS-68$"),
    (68, r"a temperature scale must be a string"),
])
def test_unknown_scales_are_refused(name, match):
    """An unknown scale raises ScaleError listing the supported ones, with the closest name."""
    with pytest.raises(ScaleError, match=match):
        out_of_range_mask(np.array([300.0]), name)


def test_registry_describes_each_scale():
    """Each registered scale names its range, its inverse and its published sources."""
    ipts68 = SCALES["IPTS-68"]
    assert (ipts68.T_min_K, ipts68.T_max_K) == (13.81, 1337.58)
    assert any("Metrologia 31, 149" in r for r in ipts68.references)
    assert repr(ipts68) == "<Scale IPTS-68 -> ITS-90 for 13.81 K <= T <= 1337.58 K>"
    T90 = np.array([100.0, 500.0])
    np.testing.assert_allclose(ipts68.to_its90(ipts68.from_its90(T90)), T90, atol=1e-8)


def test_sql_conversion_equals_the_numpy_conversion_bit_for_bit():
    """The ingest converts IPTS-68 in SQL (generated from the same coefficients); over a dense
    grid, the switch points, the domain ends and beyond it, the doubles are identical to
    ipts68_to_its90 (common practice: one implementation checked against the other); values
    that are not positive and finite pass through for the reader's other faults."""
    import duckdb
    import pyarrow as pa

    from pipeline.ingest.scales import T68_MAX_K, T68_MIN_K, ipts68_to_its90_sql

    grid = np.linspace(10.0, 1340.0, 400_001)
    edges = np.array([T68_MIN_K, T68_MAX_K, np.nextafter(T68_MIN_K, 0),
                      np.nextafter(T68_MAX_K, 2e3), 73.15, 903.765, 83.8058, 273.16, 1e308])
    T = np.concatenate([grid, edges])
    layers, result = ipts68_to_its90_sql("x")
    query = "SELECT x FROM t"
    for expression, name in layers:
        query = f"SELECT *, {expression} AS {name} FROM ({query})"
    con = duckdb.connect()
    con.register("t", pa.table({"x": np.concatenate([T, [np.nan, np.inf, -5.0, 0.0]])}))
    got = con.execute(f"SELECT {result} AS y FROM ({query})").fetchnumpy()["y"]
    expected = ipts68_to_its90(T)
    assert np.array_equal(got[:T.size], expected, equal_nan=True)
    assert np.isnan(got[T.size]) and got[T.size + 1] == np.inf
    assert list(got[T.size + 2:]) == [-5.0, 0.0]
    con.register("n", pa.table({"x": pa.array([None], type=pa.float64())}))
    query_n = query.replace("FROM t", "FROM n", 1)
    assert con.execute(f"SELECT {result} FROM ({query_n})").fetchall() == [(None,)]

