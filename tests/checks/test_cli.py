"""`fluidledger check` and `fluidledger explain` through pipeline.cli.main on SQL-built stores."""

import json
import xml.etree.ElementTree as ET

import pytest

from check_fixtures import co2, co2_melting_file, water, water_observations
from store_fixtures import build_store
from pipeline.checks import CheckSpec, registry
from pipeline.cli import main


@pytest.fixture()
def clean_store(tmp_path):
    """IAPWS water and Span-Wagner CO2: every check passes or skips."""
    return build_store(tmp_path / "clean.duckdb", [water(), co2()])


@pytest.fixture()
def failing_store(tmp_path):
    """CO2 with one melting file whose pressure falls with T."""
    return build_store(tmp_path / "bad.duckdb", [co2(extra=[co2_melting_file("lit-reversed", reverse=True)])])


def test_consistent_store_exits_0_and_records_the_run(clean_store, capsys):
    """All checks pass on published data: exit 0, and the run is stored with its results."""
    assert main(["check", "--store", clean_store]) == 0
    assert "check run check-" in capsys.readouterr().out
    from pipeline.store import open_store
    with open_store(clean_store, read_only=True) as s:
        (n_runs,) = s.con.execute("SELECT count(*) FROM run WHERE kind = 'check'").fetchone()
        (n_fail,) = s.con.execute("SELECT count(*) FROM check_result WHERE status = 'fail'").fetchone()
    assert (n_runs, n_fail) == (1, 0)


def test_a_failing_check_exits_1_and_names_the_file(failing_store, capsys):
    """The reversed CO2 melting file fails clapeyron.slope-sign: exit 1, file named in the table."""
    assert main(["check", "--store", failing_store]) == 1
    out = capsys.readouterr().out
    assert "FAIL" in out and "memory/lit-reversed.csv" in out


def test_selection_by_check_and_fluid_limits_the_run(failing_store, clean_store, capsys):
    """--check triple-point.on-curves passes on the failing store; --fluid water runs only water."""
    assert main(["check", "--store", failing_store, "--check", "triple-point.on-curves"]) == 0
    assert main(["check", "--store", clean_store, "--fluid", "water", "--tag", "critical", "--all"]) == 0
    out = capsys.readouterr().out
    assert "carbon-dioxide" not in out and "critical.curve-end" in out


@pytest.mark.parametrize("args, message", [
    (["--check", "no.such"], "unknown check id"),
    (["--tag", "nonsense"], "unknown tag"),
    (["--fluid", "helium"], "unknown fluid"),
])
def test_usage_errors_exit_2(clean_store, capsys, args, message):
    """Unknown check ids, tags and fluids are usage errors (exit 2) with one line on stderr."""
    assert main(["check", "--store", clean_store, *args]) == 2
    assert message in capsys.readouterr().err


def test_missing_store_and_bad_config_exit_2(tmp_path, clean_store, capsys):
    """A store that does not exist, or a threshold file with a typo, exit 2."""
    assert main(["check", "--store", str(tmp_path / "none.duckdb")]) == 2
    cfg = tmp_path / "t.toml"
    cfg.write_text('["data.outliers"]\nz_maks = 2\n')
    assert main(["check", "--store", clean_store, "--config", str(cfg)]) == 2
    assert "z_maks" in capsys.readouterr().err


def test_a_check_that_errors_exits_3_but_the_others_run(clean_store, monkeypatch, capsys):
    """If acentric.factor raises, the run still records the other checks and exits 3."""
    spec = registry.get_check("acentric.factor")

    def boom(fluid, th):
        raise ZeroDivisionError("synthetic")
    monkeypatch.setitem(registry._REGISTRY, spec.id, CheckSpec(spec.id, spec.purpose, spec.tags, spec.severity,
                                                               boom, spec.vectorised))
    assert main(["check", "--store", clean_store, "--json", str(clean_store) + ".json"]) == 3
    doc = json.loads(open(str(clean_store) + ".json").read())
    statuses = {(r["check_id"], r["status"]) for r in doc["results"]}
    assert ("acentric.factor", "error") in statuses and ("triple-point.on-curves", "pass") in statuses


def test_fail_on_warn_turns_a_warning_into_exit_1(tmp_path):
    """A duplicated file is a warning: exit 0 by default, 1 with --fail-on warn."""
    obs = water_observations()
    copy = obs[obs["file_path"] == "memory/lab-a.csv"].copy()
    copy["file_path"] = "memory/lab-a-copy.csv"
    from check_fixtures import stack
    store = build_store(tmp_path / "w.duckdb", [water(observations=stack(obs, copy))])
    assert main(["check", "--store", store, "--check", "data.duplicates"]) == 0
    assert main(["check", "--store", store, "--check", "data.duplicates", "--fail-on", "warn"]) == 1


def test_json_and_junit_files_are_written(failing_store, tmp_path):
    """--json writes a schema-valid document, --junit an XML file with the failure in it."""
    j, x = tmp_path / "out" / "r.json", tmp_path / "out" / "r.xml"
    assert main(["check", "--store", failing_store, "--json", str(j), "--junit", str(x), "-q"]) == 1
    doc = json.loads(j.read_text())
    assert doc["run"]["status"] == "failed" and doc["run"]["counts"]["fail"] >= 1
    root = ET.parse(x).getroot()
    assert int(root.get("failures")) == doc["run"]["counts"]["fail"]


def test_explain_prints_physics_and_thresholds_and_rejects_unknown_ids(tmp_path, capsys):
    """explain shows the equation and thresholds (with per-fluid overrides); an unknown id exits 2."""
    cfg = tmp_path / "t.toml"
    cfg.write_text('[fluid.water."clapeyron.slope-sign"]\nt_min = 3.0\n')
    assert main(["explain", "clapeyron.slope-sign", "--config", str(cfg)]) == 0
    out = capsys.readouterr().out
    assert "sign(ρ_solid − ρ_liquid)" in out and "t_min = 2" in out and "water: t_min = 3" in out
    assert main(["explain", "clapeyron.nope"]) == 2
    assert "valid ids: triple-point.on-curves" in capsys.readouterr().err
    assert main(["explain", "--list"]) == 0
    assert "acentric.factor" in capsys.readouterr().out
