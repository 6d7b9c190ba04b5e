"""A curation decision reaches the provenance the Python API gives for the values it shaped."""

from __future__ import annotations

from decisions_fixtures import demo_copy
from pipeline import open_release

LIT_N2 = "lit-nitrogen-critical-point"


def test_api_provenance_names_the_decision_and_the_excluded_candidate(tmp_path_factory, tmp_path):
    """After excluding the literature nitrogen Tc, open_release().provenance(Tc) lists decision
    D-0001 and the literature fixed point as not used 'excluded by curation decision D-0001';
    pc, untouched, lists no decision."""
    demo = demo_copy(tmp_path_factory, tmp_path)
    assert demo.decide("exclude-source", "--fluid", "nitrogen", "--source", LIT_N2,
                       "--constant", "Tc", why="transcription under review") == 0
    assert demo.cli("publish", "-q", "--allow-failures", "--out", str(demo.root / "out")) == 0
    release = open_release(path=demo.root / "out")
    prov = release.provenance(release.constant("nitrogen", "Tc"))
    assert list(prov.loc[prov.relation == "decision", "decision_id"]) == ["D-0001"]
    (lit,) = prov[(prov.relation == "wasDerivedFrom") & (prov.source_id == LIT_N2)].itertuples()
    assert not lit.used and lit.note == "excluded by curation decision D-0001"
    assert release.constant("nitrogen", "Tc").value == 126.192   # Span et al. (2000)
    pc = release.provenance(release.constant("nitrogen", "pc"))
    assert (pc.relation == "decision").sum() == 0
