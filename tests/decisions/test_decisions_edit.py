"""`fluidledger decide` edits the file safely: comments kept, next id, validated before writing."""

from __future__ import annotations

import tomllib

import pytest

from decisions_fixtures import CO2_RIG_A, CO2_RIG_A_SOURCE, demo_copy
from pipeline.decisions import DecisionsError, load_decisions
from pipeline.decisions.edit import add_decision, next_id

COMMENTED = """\
# Curation decisions of the Brackenridge demo (invented).
# Keep this header: it tells new curators where the format is described.

format_version = 1   # do not change

[[decision]]
id = "D-0007"  # the first one, numbered by hand
who = "Odile Marchetti"
when = 2026-11-02
why = "duplicate campaign upload"   # see lab log

[decision.exclude_source]
fluid = "nitrogen"
source = "lit-nitrogen-critical-point"
constant = "Tc"
"""


@pytest.fixture()
def demo(tmp_path_factory, tmp_path):
    return demo_copy(tmp_path_factory, tmp_path)


def test_decide_keeps_comments_and_assigns_the_next_id(demo):
    """Two `decide` runs append D-0008 and D-0009 after the hand-numbered D-0007; the old text stays byte for byte."""
    demo.decisions.write_text(COMMENTED, encoding="utf-8")
    assert demo.decide("exclude-observations", "--source", CO2_RIG_A_SOURCE, "--file", CO2_RIG_A,
                       "--row", "16", "--quantity", "pressure", why="spike") == 0
    assert demo.decide("waive-check", "--check", "data.outliers", "--fluid", "nitrogen",
                       "--subject", "curve:liquid-vapour", why="caused by the kPa file") == 0
    text = demo.decisions.read_text("utf-8")
    assert text.startswith(COMMENTED)
    assert load_decisions(demo.decisions).ids == ["D-0007", "D-0008", "D-0009"]
    parsed = tomllib.loads(text)["decision"]
    assert parsed[2]["waive_check"]["input_hash"] == demo.query(
        "SELECT DISTINCT input_hash FROM check_result WHERE fluid_id = 'nitrogen'")[0][0]


def test_decide_refuses_a_reference_that_does_not_resolve(demo, capsys):
    """A row the file does not have is refused (exit 2) and the file is left untouched."""
    before = demo.decisions.read_bytes()
    assert demo.decide("exclude-observations", "--source", CO2_RIG_A_SOURCE, "--file", CO2_RIG_A,
                       "--row", "99", why="no such row") == 2
    assert "row(s) 99" in capsys.readouterr().err
    assert demo.decide("prefer-source", "--fluid", "nitrogen", "--constant", "Tc", "--source",
                       CO2_RIG_A_SOURCE, why="wrong fluid") == 2
    assert demo.decisions.read_bytes() == before


def test_an_edit_that_would_break_the_file_writes_nothing(tmp_path):
    """A duplicate id is caught by validating the new text; the file keeps its old bytes."""
    path = tmp_path / "decisions.toml"
    path.write_text(COMMENTED, encoding="utf-8")
    with pytest.raises(DecisionsError, match="duplicate id") as err:
        add_decision(path, who="Odile Marchetti", why="again", action="exclude_source",
                     spec={"fluid": "argon", "source": "x"}, decision_id="D-0007")
    assert err.value.key == "id"
    assert path.read_text("utf-8") == COMMENTED
    assert sorted(p.name for p in tmp_path.iterdir()) == [".decisions.toml.lock", "decisions.toml"]


def test_a_new_file_gets_a_header_and_the_format_version(tmp_path):
    """`decide` on a missing file creates it with the explanatory header and D-0001."""
    path = tmp_path / "raw" / "decisions.toml"
    d = add_decision(path, who="Odile Marchetti", why="test", action="waive_check",
                     spec={"check": "data.outliers", "fluid": "water", "until": "2027-01-01"})
    text = path.read_text("utf-8")
    assert d.id == "D-0001" and text.startswith("# FluidLedger curation decisions")
    assert tomllib.loads(text)["format_version"] == 1
    assert next_id(load_decisions(path)) == "D-0002"
