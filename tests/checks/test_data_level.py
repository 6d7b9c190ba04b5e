"""data.monotonic, data.ranges, data.outliers, data.duplicates over stacked fluids."""

import numpy as np

from check_fixtures import by_subject, co2, sample_series, single, stack, water, water_observations
from pipeline.checks import CheckBatch
from pipeline.checks.data_level import duplicates, monotonic, outliers, ranges
from pipeline.checks.thresholds import Thresholds
from pipeline.correlations import reference_curve

LV = reference_curve("water", "liquid-vapour", "pressure")  # IAPWS SR1-86


def _run(fn, check_id, *fluids):
    return fn(CheckBatch({f.fluid_id: f for f in fluids}), Thresholds.load().view(check_id))


def _lab_file(values=None, T=np.arange(300.0, 401.0, 10.0), **kw):
    frame = sample_series(LV, T, boundary="liquid-vapour", source_id="lab-c", **kw)
    if values is not None:
        frame["value_si"] = values
    return frame


def test_pressures_rising_with_temperature_pass_for_every_file_of_every_fluid():
    """SR1-86 water tables and Span-Wagner CO2 vapour pressures rise with T in every file."""
    found = _run(monotonic, "data.monotonic", water(), co2())
    assert {f.fluid_id for f in found} == {"water", "carbon-dioxide"}
    assert all(f.status == "pass" for f in found)


def test_a_falling_step_fails_and_names_the_rows():
    """A lab file where the 350 K value is entered 5 % below the 340 K one fails with both obs ids."""
    lab = _lab_file()
    lab.loc[5, "value_si"] = lab.loc[4, "value_si"] * 0.95
    obs = stack(water_observations(), lab)
    found = by_subject(_run(monotonic, "data.monotonic", water(observations=obs)))
    bad = found["file:memory/lab-c.csv|liquid-vapour"]
    assert bad.status == "violated" and bad.measured == 1
    assert found["file:memory/sr1-86-table.csv|liquid-vapour"].status == "pass"


def test_a_fall_within_the_uncertainty_passes():
    """A 0.01 % dip with u = 0.1 % per point is noise, not a falling curve."""
    lab = _lab_file(u_rel=1e-3)
    lab.loc[5, "value_si"] = lab.loc[4, "value_si"] * 0.9999
    obs = stack(water_observations(), lab)
    found = by_subject(_run(monotonic, "data.monotonic", water(observations=obs)))
    assert found["file:memory/lab-c.csv|liquid-vapour"].status == "pass"


def test_values_in_physical_ranges_pass():
    """Published water and CO2 data are positive and inside every bound."""
    assert all(f.status == "pass" for f in _run(ranges, "data.ranges", water(), co2()))


def test_negative_pressure_and_vapour_pressure_above_pc_fail():
    """p = −5 Pa, and 30 MPa on the water liquid-vapour curve (pc = 22.064 MPa, IAPWS-95), are out of range."""
    obs = stack(water_observations(), single("liquid-vapour", "pressure", 300.0, -5.0, file="memory/bad.csv"),
                single("liquid-vapour", "pressure", 640.0, 30e6, file="memory/bad.csv"))
    f = by_subject(_run(ranges, "data.ranges", water(observations=obs)))["liquid-vapour/pressure"]
    assert f.status == "violated" and f.measured == 2
    rules = {r for o in f.evidence["out_of_range"] for r in o["rules"]}
    assert rules == {"value <= 0", "vapour pressure above pc"}


def test_saturated_vapour_denser_than_critical_fails():
    """ρ'' = 400 kg/m3 exceeds ρc = 322 kg/m3 (IAPWS-95): impossible on the saturation curve."""
    obs = stack(water_observations(), single("liquid-vapour", "rho_vapour", 600.0, 400.0))
    f = by_subject(_run(ranges, "data.ranges", water(observations=obs)))["liquid-vapour/rho_vapour"]
    assert f.status == "violated"


def _with_lab(factor=None, u_rel=2e-3, **kw):
    """Water observations plus a lab file (SR1-86 values, 11 points 300-400 K) whose values
    are multiplied by ``factor(n)``; every liquid-vapour row belongs to the SR1-86 fit."""
    lab = _lab_file(u_rel=u_rel, **kw)
    if factor is not None:
        lab["value_si"] = lab["value_si"] * factor(len(lab))
    obs = stack(water_observations(), lab)
    obs.loc[obs["boundary"] == "liquid-vapour", "fit_id"] = "water-lv-fit"
    return obs


def test_small_residuals_have_no_outliers():
    """A lab file scattering by +-0.2 % (u = 0.2 %) about SR1-86 has no outlier."""
    obs = _with_lab(lambda n: 1 + 0.002 * np.sin(np.arange(n)))
    found = _run(outliers, "data.outliers", water(observations=obs))
    assert [f.status for f in found] == ["pass"]


def test_a_gross_outlier_is_reported_as_a_warning_candidate():
    """One lab point 8 % high (u = 0.2 %) is off its file's own trend by |z| > 30 and is named by obs id."""
    def factor(n):
        out = np.ones(n)
        out[3] = 1.08
        return out
    (f,) = _run(outliers, "data.outliers", water(observations=_with_lab(factor)))
    assert f.status == "violated" and 30.0 < f.measured < 42.0
    assert len(f.evidence["outliers"]) == 1 and "z = +3" in f.message
    assert f.evidence["outliers"][0]["row"] == 4


def test_a_file_offset_as_a_whole_is_not_an_outlier():
    """A lab file 1.5 % above SR1-86 throughout is a between-source offset, not eleven outliers."""
    found = _run(outliers, "data.outliers", water(observations=_with_lab(lambda n: np.full(n, 1.015))))
    assert [f.status for f in found] == ["pass"]


def test_the_lowest_pressures_carry_the_absolute_floor():
    """A point 3 % high at 275 K (SR1-86: 698 Pa) is inside a literature source's absolute floor
    of 10 Pa (|z| ~ 2) but an outlier for a measurement's floor of 1 Pa (common practice)."""
    T = np.array([275.0, 280.0, 285.0, 290.0, 295.0, 300.0, 305.0])
    for kind, expected in (("literature", "pass"), ("measurement", "violated")):
        lab = sample_series(LV, T, boundary="liquid-vapour", source_id="lab-c", u_rel=2e-3,
                            source_kind=kind)
        lab.loc[0, "value_si"] *= 1.03
        obs = stack(water_observations(), lab)
        obs.loc[obs["boundary"] == "liquid-vapour", "fit_id"] = "water-lv-fit"
        found = by_subject(_run(outliers, "data.outliers", water(observations=obs)))
        assert found["curve:liquid-vapour"].status == expected, kind


def test_distinct_files_have_no_duplicates():
    """The water fixture's files sample SR1-86 at different temperatures: no shared points."""
    found = _run(duplicates, "data.duplicates", water())
    assert [f.status for f in found] == ["pass"]


def test_a_table_entered_twice_under_two_files_is_flagged():
    """The SR1-86 table copied into a second file shares all 19 points with the first."""
    obs = water_observations()
    copy = obs[obs["file_path"] == "memory/sr1-86-table.csv"].copy()
    copy["file_path"], copy["source_id"] = "memory/copy.csv", "compilation"
    found = by_subject(_run(duplicates, "data.duplicates", water(observations=stack(obs, copy))))
    f = found["files:memory/copy.csv|memory/sr1-86-table.csv"]
    assert f.status == "violated" and f.measured == 19


def test_vapour_pressure_below_the_triple_point_temperature_fails():
    """Ice Ih sublimation pressures at 250-270 K (IAPWS R14-08) filed as liquid-vapour lie below
    Tt = 273.16 K, where no liquid is stable: the rows are named (issue 12, rule 8)."""
    sub = reference_curve("water", "solid-vapour", "pressure", "Ih")
    misfiled = sample_series(sub, np.array([250.0, 260.0, 270.0]), boundary="liquid-vapour",
                             source_id="misfiled")
    obs = stack(water_observations(), misfiled)
    found = by_subject(_run(ranges, "data.ranges", water(observations=obs)))
    bad = found["liquid-vapour/pressure"]
    assert bad.status == "violated" and bad.measured == 3
    assert "liquid-vapour below the triple-point temperature" in bad.message
    assert all(o["file"] == "memory/misfiled.csv" for o in bad.evidence["out_of_range"])


def test_vapour_pressure_starting_at_the_triple_point_passes():
    """IAPWS SR1-86 starts at Tt = 273.16 K: a point 0.1 K below it is within T_rel_tol (0.2 %)."""
    lab = sample_series(lambda T: LV.value(T, extrapolate=True), np.array([273.06, 280.0, 290.0]),
                        boundary="liquid-vapour", source_id="lab-c")
    assert np.isfinite(lab["value_si"]).all()
    found = by_subject(_run(ranges, "data.ranges", water(observations=stack(water_observations(), lab))))
    assert found["liquid-vapour/pressure"].status == "pass"
