"""Reading the decisions file: schema, one action, code-level checks, errors naming decision and key."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from datetime import date

import pytest

from pipeline.decisions import DecisionsError, load_decisions

HEAD = "format_version = 1\n"
GOOD = """
[[decision]]
id = "D-0001"
who = "Odile Marchetti"
when = 2026-11-30
why = "spike in the pressure transducer"
[decision.exclude_observations]
source = "lab-a"
file = "lab-a/vp.csv"
rows = [3, 4]
quantity = "pressure"

[[decision]]
id = "D-0002"
who = "Odile Marchetti"
when = "2026-12-01"
why = "known disagreement, followed up with the lab"
[decision.waive_check]
check = "sources.agreement"
fluid = "nitrogen"
until = 2027-01-31
"""


def write(tmp_path, body: str):
    path = tmp_path / "decisions.toml"
    path.write_text(HEAD + textwrap.dedent(body), encoding="utf-8")
    return path


def test_a_valid_file_parses_into_models(tmp_path):
    """Both decisions parse, TOML and string dates alike, with their action and fields."""
    ds = load_decisions(write(tmp_path, GOOD))
    assert ds.ids == ["D-0001", "D-0002"]
    first, second = ds.decisions
    assert first.kind == "exclude_observations" and first.action.rows == (3, 4)
    assert second.kind == "waive_check" and second.waive_check.until == date(2027, 1, 31)
    assert second.when == date(2026, 12, 1)


def test_missing_default_file_means_no_decisions(tmp_path, monkeypatch):
    """Without --decisions and without raw/decisions.toml there are simply no decisions."""
    monkeypatch.chdir(tmp_path)
    assert len(load_decisions(None)) == 0


def test_a_named_file_that_is_missing_is_an_error(tmp_path):
    """A decisions file named on the command line must exist."""
    with pytest.raises(DecisionsError, match="decisions file not found"):
        load_decisions(tmp_path / "nope.toml")


@pytest.mark.parametrize("body, decision, key, what", [
    (GOOD.replace('why = "spike in the pressure transducer"', 'why = "   "'),
     "D-0001", "why", "must not be empty"),
    (GOOD.replace("until = 2027-01-31", "until = \"2027-02-30\""),
     "D-0002", "waive_check.until", "not a valid date"),
    (GOOD.replace("until = 2027-01-31\n", ""),
     "D-0002", "waive_check", "'until' (a date) or 'input_hash'"),
    (GOOD.replace("rows = [3, 4]", "rows = [0]"),
     "D-0001", "exclude_observations.rows[0]", "less than the minimum"),
    (GOOD.replace('check = "sources.agreement"', 'check = "sources.agreemnt"'),
     "D-0002", "waive_check.check", "unknown check id"),
    (GOOD.replace('quantity = "pressure"', 'quantity = "pressure"\nfluid = "argon"'),
     "D-0001", "exclude_observations.fluid", "not both"),
    (GOOD.replace('[decision.waive_check]', '[decision.waive_checks]'),
     "D-0002", "waive_checks", "unknown key"),
    (GOOD.replace('id = "D-0002"', 'id = "D-0001"'), "D-0001", "id", "duplicate id"),
    (GOOD + '\n[decision.exclude_source]\nfluid = "nitrogen"\nsource = "lab-b"\n',
     "D-0002", None, "exactly one action"),
    (GOOD.replace('id = "D-0001"\n', ''), "#1", "id", "required key is missing"),
])
def test_malformed_decisions_name_the_decision_and_the_key(tmp_path, body, decision, key, what):
    """Each kind of mistake is reported with the decision id (or position) and the key at fault."""
    with pytest.raises(DecisionsError) as err:
        load_decisions(write(tmp_path, body))
    assert err.value.decision == decision and err.value.key == key
    assert what in str(err.value)
    assert f"decision '{decision}'" in str(err.value)


def test_threshold_overrides_are_checked_against_the_defaults(tmp_path):
    """An override must name a real threshold and give a value of its type."""
    body = """
    [[decision]]
    id = "D-0003"
    who = "Odile Marchetti"
    when = 2026-12-01
    why = "wider limit for the demo"
    [decision.override_threshold]
    check = "data.outliers"
    fluid = "water"
    threshold = "{name}"
    value = {value}
    """
    with pytest.raises(DecisionsError, match="unknown threshold 'zmax'.*valid: .*z_max"):
        load_decisions(write(tmp_path, body.format(name="zmax", value="4.0")))
    with pytest.raises(DecisionsError, match="wrong type") as err:
        load_decisions(write(tmp_path, body.format(name="z_max", value='"four"')))
    assert err.value.key == "override_threshold.value"
    assert load_decisions(write(tmp_path, body.format(name="z_max", value="4"))) \
        .decisions[0].override_threshold.value == 4


def test_cli_reports_a_malformed_file_in_one_line_with_exit_2(tmp_path):
    """`fluidledger decisions` on a broken file: exit 2, decision and key named, no traceback."""
    path = write(tmp_path, GOOD.replace("until = 2027-01-31", "until = 2027-01-31T10:00:00"))
    proc = subprocess.run([sys.executable, "-m", "pipeline.cli", "decisions", "--decisions",
                           str(path), "--store", str(tmp_path / "none.duckdb")],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and proc.stderr.strip().count("\n") == 0
    assert "decision 'D-0002'" in proc.stderr and "key 'waive_check.until'" in proc.stderr


def test_toml_syntax_errors_name_the_line(tmp_path):
    """A TOML syntax error names the file and the line."""
    path = tmp_path / "decisions.toml"
    path.write_text(HEAD + '[[decision]]\nid = "D-1\n', encoding="utf-8")
    with pytest.raises(DecisionsError, match=r"decisions.toml: malformed TOML: .*line 3"):
        load_decisions(path)
