"""What the figures are drawn from, on the demo data: unit mix-ups drawn corrected, flagged
points numbered by file and reason, and decide commands that the decide command accepts."""

from __future__ import annotations

import shlex
import shutil
from pathlib import Path

import numpy as np
import pytest

from pipeline.checks import load_fluid_data, run_checks
from pipeline.cli import main
from pipeline.fitting.stage import run_fit
from pipeline.ingest.stage import run_ingest
from pipeline.nightly import Curation, NightlyOptions, decide_context
from pipeline.report import content
from pipeline.report.actions import decide_commands
from pipeline.store import open_store

RAW = Path(__file__).resolve().parents[2] / "raw"
# planted flaws (raw/README.md)
N2_RIG_B = "brackenridge-rig-b-nitrogen-2022-11/nitrogen-vapour-pressure-rig-b.csv"
H2O_RIG_B = "brackenridge-rig-b-water-2021-03/water-vapour-pressure-rig-b.csv"
CO2_RIG_A = "brackenridge-rig-a-co2-2024-05/co2-vle-rig-a.csv"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo data ingested, fitted and checked; the figure inputs of every fluid."""
    root = tmp_path_factory.mktemp("content")
    raw = root / "raw"
    shutil.copytree(RAW, raw, ignore=shutil.ignore_patterns("*.py", "decisions.toml"))
    store = root / "store.duckdb"
    with open_store(store) as s:
        run_ingest(s.con, [raw])
        run_fit(s.con)
        run = run_checks(load_fluid_data(s.con), con=s.con)
        sections = content.fluid_sections(s.con)
        flagged = content.flagged_from_results(run.results)
        data = content.diagram_data(s.con, sections, list(sections), flagged)
        opts = NightlyOptions(store=store, raw=raw)
        ctx = decide_context(s.con, opts, Curation(), run.results)
    return {"root": root, "raw": raw, "store": store, "run": run, "data": data, "ctx": ctx}


def _file(obs, path):
    return np.flatnonzero(obs.file_path == path)


def test_kpa_recorded_as_pa_is_drawn_a_thousand_times_higher(demo):
    """The nitrogen rig-B file (kPa recorded as Pa) is drawn at 1000 x its stored pressures,
    hover text keeping the stored value, and forms one flag group with the diagnosis."""
    obs = demo["data"]["nitrogen"].observations
    i = _file(obs, N2_RIG_B)
    assert len(i) == 21
    assert np.allclose(obs.p_Pa[i], 1000.0 * obs.p_stored_Pa[i], rtol=1e-12)
    assert np.array_equal(obs.T_K[i], obs.T_stored_K[i])
    assert set(obs.correction[i]) == {"kPa recorded as Pa (factor 1000)"}
    hover = obs.hover(int(i[0]))
    assert f"{N2_RIG_B} row 1" in hover and "drawn corrected (kPa recorded as Pa" in hover
    (group,) = [g for g in demo["data"]["nitrogen"].flags if g.file_path == N2_RIG_B]
    assert group.reasons == ("data.unit-mixup",) and group.rows == tuple(range(1, 22))
    assert group.correction == "kPa recorded as Pa (factor 1000)"
    assert set(obs.flag[i]) == {group.number}


def test_celsius_recorded_as_kelvin_is_drawn_at_the_right_temperature(demo):
    """The water rig-B file (degC labelled K) is drawn 273.15 K warmer: at 293-368 K, on the
    vapour-pressure curve, not at 20-95 K."""
    obs = demo["data"]["water"].observations
    i = _file(obs, H2O_RIG_B)
    assert np.allclose(obs.T_K[i] - obs.T_stored_K[i], 273.15)
    assert obs.T_K[i].min() > 290.0 and obs.T_stored_K[i].max() < 100.0


def test_co2_flags_are_numbered_by_file_and_reason(demo):
    """CO2: the rig-A outlier (row 16), the rig-B point above Tc (row 20, two failing checks)
    and the reversed melting file (13 rows): three numbered groups in order of observation."""
    flags = demo["data"]["carbon-dioxide"].flags
    got = [(g.number, g.file_path.split("/")[0], g.reasons, g.rows if len(g.rows) < 3 else
            len(g.rows)) for g in flags]
    assert got == [(1, "brackenridge-rig-a-co2-2024-05", ("fit outlier",), (16,)),
                   (2, "brackenridge-rig-b-co2-2025-02",
                    ("critical.no-vle-above-tc", "data.ranges"), (20,)),
                   (3, "lit-co2-melting-transcribed", ("clapeyron.slope-sign",), 13)]


def test_the_offered_exclusion_is_accepted_by_decide(demo, monkeypatch):
    """The exclude command the report offers for the CO2 rig-A outlier, with a reason and a
    curator filled in, records the decision for row 16 of that file."""
    (finding,) = [r for r in demo["run"].results if r.check_id == "data.outliers"
                  and r.fluid_id == "carbon-dioxide" and r.subject == "curve:liquid-vapour"]
    commands = dict(decide_commands(finding, demo["ctx"]))
    (cmd,) = [c for what, c in commands.items() if CO2_RIG_A in what]
    argv = shlex.split(cmd.replace("<your reason>", "transducer spike"))
    assert argv[:3] == ["fluidledger", "decide", "exclude-observations"]
    decisions = demo["raw"] / "decisions.toml"
    monkeypatch.chdir(demo["root"])
    assert main(argv[1:] + ["--who", "A. Curator"]) == 0
    text = decisions.read_text()
    assert "rows = [16]" in text and f'file = "{CO2_RIG_A}"' in text
    assert 'why = "transducer spike"' in text
