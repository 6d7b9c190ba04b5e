"""The registry covers the documented catalogue; thresholds load, merge and refuse typos."""

import re
from pathlib import Path

import pytest

from pipeline.checks import Thresholds, all_checks, get_check, select_checks
from pipeline.errors import CheckError, ConfigError

INTERFACES = Path(__file__).resolve().parents[2] / "docs" / "interfaces.md"


def _documented_ids() -> set[str]:
    text = INTERFACES.read_text()
    section = text.split("## Check ids", 1)[1].split("##", 1)[0]
    return set(re.findall(r"`([a-z-]+\.[a-z-]+)`", section))


def test_every_documented_check_id_is_registered():
    """The ids listed in docs/interfaces.md are exactly the registered checks."""
    assert _documented_ids() == set(all_checks())


def test_every_check_has_purpose_tags_explanation_and_a_thresholds_table():
    """Each check states its purpose, tags, severity, physics and causes, and has defaults."""
    th = Thresholds.load()
    for spec in all_checks().values():
        assert spec.purpose and spec.tags and spec.severity in ("warn", "fail")
        assert "Usual causes" in spec.explain, spec.id
        assert "severity" in th.for_check(spec.id)
        assert len(th.for_check(spec.id)) > 1, f"{spec.id} has no thresholds in thresholds.toml"


def test_unknown_check_id_lists_the_valid_ones():
    """get_check('x.y') raises CheckError listing every valid id."""
    with pytest.raises(CheckError, match="unknown check id 'x.y'; valid ids: .*acentric.factor"):
        get_check("x.y")


def test_selection_by_id_and_tag_is_a_union():
    """--check acentric.factor --tag clapeyron selects that check and the Clapeyron ones."""
    ids = {s.id for s in select_checks(["acentric.factor"], ["clapeyron"])}
    assert ids == {"acentric.factor", "clapeyron.slope-sign", "clapeyron.magnitude", "triple-point.slopes"}


def test_user_file_overrides_defaults_and_adds_per_fluid_tables(tmp_path):
    """A user file sets z_max = 4 for on-curves and T_tol_K = 0.05 for water only."""
    cfg = tmp_path / "t.toml"
    cfg.write_text('["triple-point.on-curves"]\nz_max = 4\n\n'
                   '[fluid.water."triple-point.on-curves"]\nT_tol_K = 0.05\n')
    th = Thresholds.load(cfg)
    assert th.for_check("triple-point.on-curves")["z_max"] == 4
    assert th.for_check("triple-point.on-curves", "water")["T_tol_K"] == 0.05
    assert th.for_check("triple-point.on-curves", "argon")["T_tol_K"] == 0.01
    assert th.overrides("triple-point.on-curves") == {"water": {"T_tol_K": 0.05}}
    assert th.files[-1] == str(cfg)


@pytest.mark.parametrize("text, match", [
    ('["triple-point.on-curves"]\nz_mx = 4\n', "unknown threshold; valid keys: .*z_max"),
    ('["triple-point.on-curves"]\nz_max = "4"\n', "wrong type"),
    ('["no.such"]\nz_max = 4\n', "unknown check id"),
    ('["data.outliers"]\nseverity = "fatal"\n', "severity 'fatal'"),
    ('[fluid.water."data.outliers"]\nzmax = 1\n', "fluid.water.data.outliers.zmax"),
    ('not toml = = 1\n', "not valid TOML"),
])
def test_malformed_user_files_are_refused_naming_the_key(tmp_path, text, match):
    """Typos, wrong types, unknown checks and bad severities are ConfigErrors with the key."""
    cfg = tmp_path / "bad.toml"
    cfg.write_text(text)
    with pytest.raises(ConfigError, match=match):
        Thresholds.load(cfg)
