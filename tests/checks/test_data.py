"""load_fluid_data reads a store built by SQL; FluidData groups observations and stated points."""

import numpy as np
import pytest

from check_fixtures import PT_WATER, TT_WATER, co2, water
from store_fixtures import OBS_ID_STRIDE, build_store
from pipeline.checks import FluidData, load_fluid_data
from pipeline.errors import CheckError
from pipeline.store import open_store


@pytest.fixture()
def store(tmp_path):
    return build_store(tmp_path / "s.duckdb", [water(), co2()])


def test_load_reads_every_fluid_with_observations_points_and_fits(store):
    """The store round-trips observations, the IAPWS triple point and the reference curves."""
    with open_store(store, read_only=True) as s:
        data = load_fluid_data(s.con)
    assert sorted(data) == ["carbon-dioxide", "water"]
    w = data["water"]
    assert len(w.observations) == len(water().observations)
    assert w.molar_mass == pytest.approx(0.018015268)
    tp = w.vapour_triple_point()
    assert (tp.T_K, tp.p_Pa) == (TT_WATER, PT_WATER)
    assert set(w.curves) == set(water().curves)
    fitted = w.curve("liquid-vapour")
    assert fitted.value(300.0) == pytest.approx(water().curve("liquid-vapour").value(300.0), rel=1e-14)
    assert set(w.observations["source_kind"]) >= {"standard", "measurement", "literature"}
    assert data["carbon-dioxide"].observations["obs_id"].min() > OBS_ID_STRIDE


def test_load_selects_fluids_and_rejects_unknown_ones(store):
    """Only the requested fluids are read; an unknown id names the fluids the store holds."""
    with open_store(store, read_only=True) as s:
        assert list(load_fluid_data(s.con, ["water"])) == ["water"]
        with pytest.raises(CheckError, match="unknown fluid.*nitrogen.*store holds: carbon-dioxide, water"):
            load_fluid_data(s.con, ["nitrogen"])


def test_series_are_numpy_groups_split_by_file():
    """series() returns one group's arrays; by_file() splits the three SR1-86 vapour files."""
    s = water().series("liquid-vapour")
    assert isinstance(s.T, np.ndarray) and len(s) == 19 + 18 + 13
    assert list(s.by_file()) == ["memory/sr1-86-table.csv", "memory/lab-a.csv", "memory/lit-b.csv"]
    assert len(water().series("solid-solid")) == 0


def test_consensus_point_prefers_the_most_authoritative_source():
    """A standard's Tc = 647.096 K wins over a measurement's 650 K in the consensus point."""
    f = FluidData.build("water", 0.018015268, fixed_points=[
        {"kind": "critical", "phases": "liquid,vapour", "T_K": 650.0, "source_kind": "measurement"},
        {"kind": "critical", "phases": "liquid,vapour", "T_K": 647.096, "source_kind": "standard"}])
    assert f.critical_point.T_K == 647.096


def test_input_hash_changes_with_the_data():
    """Changing one observed value changes the fluid's input hash."""
    a, obs = water(), water().observations.copy()
    obs.loc[0, "value_si"] *= 1.001
    assert a.input_hash == water().input_hash != water(observations=obs).input_hash
