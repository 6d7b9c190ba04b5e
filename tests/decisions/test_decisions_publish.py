"""Source exclusions and preferences reach the publish stage and the provenance of the values they shape."""

from __future__ import annotations

import pytest

from decisions_fixtures import demo_copy
from pipeline.decisions import load_decisions, publish_decisions, resolve_all
from pipeline.store import open_store

LIT_N2 = "lit-nitrogen-critical-point"
SPAN_N2 = "span-2000-nitrogen-ancillaries"


@pytest.fixture()
def demo(tmp_path_factory, tmp_path):
    return demo_copy(tmp_path_factory, tmp_path)


def _provenance(demo, value_id: str) -> tuple[list[str], list[dict]]:
    with open_store(demo.store, read_only=True) as s:
        ids, derived = s.con.execute("SELECT decision_ids, was_derived_from FROM curated_provenance "
                                     "WHERE value_id = ?", [value_id]).fetchone()
    return ids, derived


def test_an_excluded_source_is_left_out_and_named_in_the_provenance(demo):
    """Excluding the literature nitrogen Tc leaves its candidate out 'by D-0001'; Tc is the ancillary-equation value 126.192 K (Span et al. 2000)."""
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", LIT_N2,
                       "--constant", "Tc", why="transcription under review") == 0
    assert demo.cli("publish", "-q", "--allow-failures", "--out", str(demo.root / "out")) == 0
    ids, derived = _provenance(demo, "nitrogen/critical:vapour,liquid/Tc")
    assert ids == ["D-0001"]
    (lit,) = [e for e in derived if e["source_id"] == LIT_N2]
    assert not lit["used"] and lit["note"] == "excluded by curation decision D-0001"
    (value,) = demo.query("SELECT value_si FROM curated_constants WHERE value_id = "
                          "'nitrogen/critical:vapour,liquid/Tc'")[0]
    assert value == pytest.approx(126.192)
    assert _provenance(demo, "nitrogen/critical:vapour,liquid/pc")[0] == []
    with open_store(demo.store, read_only=True) as s:
        (touch,) = resolve_all(s.con, load_decisions(demo.decisions))
    assert touch.values == ["nitrogen/critical:vapour,liquid/Tc"]


def test_a_preferred_source_names_its_decision(demo):
    """Preferring the ancillary-equation source for nitrogen pc records the decision on pc only."""
    assert demo.decide("prefer-source", "--fluid", "nitrogen", "--constant", "pc", "--source",
                       SPAN_N2, why="the reference equation's own critical pressure") == 0
    assert demo.cli("publish", "-q", "--allow-failures", "--out", str(demo.root / "out")) == 0
    assert _provenance(demo, "nitrogen/critical:vapour,liquid/pc")[0] == ["D-0001"]
    assert _provenance(demo, "nitrogen/critical:vapour,liquid/Tc")[0] == []


def test_constants_are_named_as_the_publish_stage_names_them(demo):
    """A whole-source exclusion is '*'; Tt without a point covers each of water's triple points."""
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", LIT_N2,
                       why="whole source") == 0
    assert demo.decide("exclude-source", "--fluid", "water", "--source",
                       "iapws-r14-08-water-melting-sublimation", "--constant", "Tt",
                       why="all its triple temperatures") == 0
    assert demo.decide("prefer-source", "--fluid", "water", "--constant", "pt", "--point",
                       "triple:liquid,Ih,III", "--source",
                       "iapws-r14-08-water-melting-sublimation", why="one point") == 0
    with open_store(demo.store, read_only=True) as s:
        d = publish_decisions(s.con, load_decisions(demo.decisions))
    assert d.exclude[("nitrogen", "*")] == {LIT_N2: "D-0001"}
    water_tt = sorted(k for (f, k) in d.exclude if f == "water")
    assert water_tt == ["triple:liquid,III,Ih|Tt", "triple:liquid,III,V|Tt",
                        "triple:vapour,liquid,Ih|Tt"]
    assert d.prefer == {("water", "triple:liquid,III,Ih|pt"):
                        ("iapws-r14-08-water-melting-sublimation", "D-0003")}
