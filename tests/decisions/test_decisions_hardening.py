"""Hostile or careless decisions: non-finite thresholds, deep nesting, FIFOs, control characters (issue 13)."""

from __future__ import annotations

import math
import os
import subprocess
import sys
import xml.etree.ElementTree as ET

import pytest

from decisions_fixtures import CURATOR, demo_copy
from pipeline.checks.thresholds import Thresholds
from pipeline.decisions import DecisionsError, load_decisions, with_threshold_overrides
from pipeline.ingest.rawread import MAX_TOML_DEPTH

OVERRIDE = """format_version = 1

[[decision]]
id = "D-0001"
who = "Odile Marchetti"
when = 2026-12-01
why = "wider limit"
[decision.override_threshold]
check = "sources.agreement"
fluid = "nitrogen"
threshold = "z_max"
value = {value}
"""


@pytest.mark.parametrize("value", ["nan", "inf", "-inf", "1e999"])
def test_decide_refuses_a_non_finite_threshold_override(tmp_path_factory, tmp_path, capsys, value):
    """Case 4: `decide override-threshold --value nan` exits 2 and writes nothing (a NaN threshold would turn a failing check into a pass or warning)."""
    demo = demo_copy(tmp_path_factory, tmp_path)
    before = demo.decisions.read_bytes()
    capsys.readouterr()
    code = demo.decide("override-threshold", "--check", "sources.agreement", "--fluid",
                       "nitrogen", "--threshold", "z_max", f"--value={value}")
    err = capsys.readouterr().err
    assert code == 2 and "expected a finite number" in err, err
    assert demo.decisions.read_bytes() == before


@pytest.mark.parametrize("value", ["nan", "+inf", "-inf"])
def test_a_non_finite_override_written_by_hand_is_refused(tmp_path, value):
    """Case 4: a hand-written `value = nan` in decisions.toml is refused naming the decision and the key."""
    path = tmp_path / "decisions.toml"
    path.write_text(OVERRIDE.format(value=value), encoding="utf-8")
    with pytest.raises(DecisionsError, match="not a finite number") as err:
        load_decisions(path)
    assert err.value.decision == "D-0001" and err.value.key == "override_threshold.value"


def test_the_nan_override_no_longer_softens_a_failing_check(tmp_path_factory, tmp_path, capsys):
    """Case 4: the nitrogen Tc disagreement still fails once a finite override is the only way in, and a NaN one cannot be merged into the thresholds."""
    demo = demo_copy(tmp_path_factory, tmp_path)
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 1
    demo.decisions.write_text(OVERRIDE.format(value="nan"), encoding="utf-8")
    capsys.readouterr()
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement") == 2
    assert "not a finite number" in capsys.readouterr().err
    demo.decisions.write_text(OVERRIDE.format(value="3.0"), encoding="utf-8")
    merged = with_threshold_overrides(Thresholds.load(), load_decisions(demo.decisions))
    assert math.isfinite(merged.for_check("sources.agreement", "nitrogen")["z_max"])


@pytest.mark.parametrize("body", [
    "format_version = 1\nx = " + "[" * 5000 + "]" * 5000 + "\n",
    "format_version = 1\nx = " + "{a = " * 3000 + "1" + "}" * 3000 + "\n",
    "format_version = 1\n" + ".".join(["k"] * 4000) + " = 1\n",
])
def test_a_deeply_nested_decisions_file_is_refused_with_one_message(tmp_path, body):
    """Case 2: a value nested thousands of levels deep in decisions.toml is refused naming the file, not a RecursionError."""
    path = tmp_path / "decisions.toml"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(DecisionsError, match=f"nested .*limit is {MAX_TOML_DEPTH} levels"):
        load_decisions(path)


def test_the_nightly_stops_with_exit_2_on_a_deeply_nested_decisions_file(tmp_path):
    """Case 2: the nightly job reads decisions.toml first; a hostile one gives exit 2 and one line, never exit 3."""
    raw = tmp_path / "raw"
    raw.mkdir()
    (raw / "decisions.toml").write_text("x = " + "[" * 3000 + "]" * 3000 + "\n", "utf-8")
    proc = subprocess.run([sys.executable, "-m", "pipeline.cli", "nightly", "--raw", str(raw),
                           "--reports", str(tmp_path / "reports"), "--store",
                           str(tmp_path / "s.duckdb")], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert "decisions.toml: nested 3000 levels deep at line 1" in proc.stderr
    assert "Traceback" not in proc.stderr


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes need POSIX")
def test_a_decisions_file_that_is_a_fifo_is_refused_without_hanging(tmp_path):
    """Case 8: a FIFO named decisions.toml is refused at once (reading it would block forever)."""
    path = tmp_path / "decisions.toml"
    os.mkfifo(path)
    proc = subprocess.run([sys.executable, "-m", "pipeline.cli", "decisions", "--decisions",
                           str(path), "--store", str(tmp_path / "none.duckdb")],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    assert "is a named pipe (FIFO), not a regular file; refused" in proc.stderr


def test_a_decision_reason_with_control_characters_keeps_outputs_clean(tmp_path_factory,
                                                                      tmp_path, capsys):
    """Case 6: a waiver whose reason holds ESC and BEL: the check table and junit.xml carry them escaped, and junit.xml parses."""
    demo = demo_copy(tmp_path_factory, tmp_path)
    reason = "under review \x1b[2J\x1b]0;owned\x07 with the lab"
    assert demo.cli("decide", "waive-check", "--check", "sources.agreement", "--fluid",
                    "nitrogen", "--until", "2999-12-31", "--why", reason, "--who", CURATOR) == 0
    junit = tmp_path / "junit.xml"
    capsys.readouterr()
    assert demo.cli("check", "--fluid", "nitrogen", "--check", "sources.agreement",
                    "--junit", str(junit)) == 0
    out, err = capsys.readouterr()
    assert "\x1b" not in out + err and "\x07" not in out + err
    assert "under review \\x1b[2J" in out
    skipped = [e.get("message") for e in ET.parse(junit).getroot().iter("skipped")]
    assert any("under review \\x1b[2J\\x1b]0;owned\\x07 with the lab" in m for m in skipped)


@pytest.mark.parametrize("text,key", [
    ('["triple-point.on-curves"]\nz_max = nan\n', "triple-point.on-curves.z_max"),
    ('[fluid.water."data.outliers"]\nz_max = inf\n', "fluid.water.data.outliers.z_max"),
])
def test_a_non_finite_threshold_in_a_user_file_is_refused(tmp_path, text, key):
    """Case 4: a threshold file (--config) setting nan or inf is refused naming the key, like a decision's override."""
    from pipeline.errors import ConfigError

    cfg = tmp_path / "thresholds.toml"
    cfg.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError, match="not a finite number") as err:
        Thresholds.load(cfg)
    assert err.value.key == key
