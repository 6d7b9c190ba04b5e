"""data.unit-mixup: files off the consensus by a unit factor or offset get the mix-up named."""

import numpy as np
import pytest

from check_fixtures import M_WATER, by_subject, sample_series, stack, th, water, water_observations
from pipeline.checks import FluidData
from pipeline.checks.unit_mixup import unit_mixup
from pipeline.correlations import reference_curve
from pipeline.ingest.scales import its90_to_ipts68

LV = reference_curve("water", "liquid-vapour", "pressure")  # IAPWS SR1-86
LAB = "file:memory/lab-c.csv|liquid-vapour"


def _lab(T=np.arange(300.0, 421.0, 10.0), *, scale=1.0, shift_T=0.0, shift_p=0.0, **kw):
    """A lab file sampled from SR1-86 at the true T, then written down wrongly."""
    frame = sample_series(LV, T, boundary="liquid-vapour", source_id="lab-c",
                          source_kind="measurement", u_rel=5e-4, scale=scale, **kw)
    frame["T_K"] = frame["T_K"] + shift_T
    frame["value_si"] = frame["value_si"] + shift_p
    return frame


def _diagnose(lab, thresholds=None, observations=None):
    obs = stack(water_observations() if observations is None else observations, lab)
    return by_subject(unit_mixup(water(observations=obs), thresholds or th("data.unit-mixup")))


def test_files_agreeing_with_the_consensus_pass():
    """The three SR1-86 vapour-pressure files of the water fixture agree with each other."""
    found = unit_mixup(water(), th("data.unit-mixup"))
    assert found and all(f.status == "pass" for f in found), [f.message for f in found]


def test_kpa_recorded_as_pa_is_diagnosed():
    """A file of kPa values declared 'Pa' (1000 times too small) is named 'kPa recorded as Pa'."""
    f = _diagnose(_lab(scale=1e-3))[LAB]
    assert f.status == "violated"
    assert "values look like kPa recorded as Pa (factor 1000)" in f.message
    assert f.evidence["diagnosis"].startswith("kPa recorded as Pa")


def test_bar_recorded_as_pa_is_diagnosed():
    """Values in bar declared 'Pa' (1e5 too small) get the bar diagnosis, not kPa or MPa."""
    f = _diagnose(_lab(scale=1e-5))[LAB]
    assert f.status == "violated" and f.evidence["diagnosis"].startswith("bar recorded as Pa")


def test_pa_recorded_as_kpa_is_diagnosed_from_the_declared_unit():
    """A file declared 'kPa' holding Pa values (1000 times too large) gets 'Pa recorded as kPa'."""
    f = _diagnose(_lab(scale=1e3, value_unit="kPa"))[LAB]
    assert f.evidence["diagnosis"] == "Pa recorded as kPa (factor 0.001)"


def test_celsius_recorded_as_kelvin_is_diagnosed():
    """Temperatures 26.85-146.85 written in degC under a K header: 'degC recorded as K'."""
    f = _diagnose(_lab(shift_T=-273.15))[LAB]
    assert f.status == "violated"
    assert "degC recorded as K" in f.message
    assert "outside the range of" in f.message


def test_gauge_pressure_recorded_as_absolute_is_diagnosed():
    """Gauge readings (p − 101325 Pa) at 390-450 K stored as absolute are named as such."""
    f = _diagnose(_lab(np.arange(390.0, 451.0, 10.0), shift_p=-101325.0))[LAB]
    assert f.status == "violated" and f.evidence["diagnosis"].startswith("gauge pressure recorded as absolute")


def test_ipts68_recorded_as_its90_is_diagnosed_with_precise_data():
    """IPTS-68 readings (T90 − T68 ≈ −0.03 K near 500 K, Rusby 1991) of a precise file stored as ITS-90."""
    T90 = np.arange(420.0, 621.0, 20.0)
    lab = sample_series(LV, T90, boundary="liquid-vapour", source_id="lab-c", u_rel=2e-6)
    lab["T_K"] = its90_to_ipts68(T90)
    only_lab = water_observations()
    only_lab = only_lab[only_lab["boundary"] != "liquid-vapour"]
    f = _diagnose(lab, th("data.unit-mixup", rel_floor=1e-6), observations=only_lab)[LAB]
    assert f.evidence["consensus"].startswith("the reference equation")
    assert f.status == "violated"
    assert f.evidence["diagnosis"] == "IPTS-68 temperatures recorded as ITS-90"


def test_an_offset_no_hypothesis_explains_is_a_warning():
    """A file 3 % high everywhere is off the consensus but matches no unit mix-up: a warning."""
    f = _diagnose(_lab(scale=1.03))[LAB]
    assert f.status == "warn" and f.evidence["diagnosis"] is None
    assert "no unit or scale mix-up explains it" in f.message


def test_the_good_files_still_pass_next_to_a_bad_one():
    """With one kPa-as-Pa file present, the SR1-86 files are judged against the good majority."""
    found = _diagnose(_lab(scale=1e-3))
    good = {s: f for s, f in found.items() if s != LAB and "liquid-vapour" in s}
    assert good and all(f.status == "pass" for f in good.values()), [f.message for f in good.values()]


def test_a_lone_file_without_a_reference_equation_is_skipped():
    """A fluid with one vapour-pressure file and no published equation has nothing to compare with."""
    lone = FluidData.build("lonely-fluid", M_WATER, observations=_lab())
    (f,) = unit_mixup(lone, th("data.unit-mixup"))
    assert f.status == "skip" and "no other file" in f.message


@pytest.mark.parametrize("scale, unit", [(1 / 101325, "atm"), (1 / 133.322, "mmHg"), (1 / 6894.76, "psi"),
                                         (1e-6, "MPa")])
def test_other_pressure_units_recorded_as_pa(scale, unit):
    """atm (101325 Pa), mmHg (133.322 Pa), psi (6894.76 Pa) and MPa values declared 'Pa' are named."""
    f = _diagnose(_lab(scale=scale))[LAB]
    assert f.evidence["diagnosis"].startswith(f"{unit} recorded as Pa")
