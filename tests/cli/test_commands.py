"""The command line: help everywhere, one-line user errors, exit codes."""

from __future__ import annotations

import subprocess
import sys

import pytest

from pipeline.cli import COMMANDS, build_parser, main


def registered() -> list[str]:
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    return sorted(sub.choices)


def test_every_registered_command_has_help(capsys):
    """`fluidledger COMMAND --help` prints a usage line and exits 0 for every command."""
    names = registered()
    assert {"ingest", "status"} <= set(names)
    for name in names:
        with pytest.raises(SystemExit) as exc:
            main([name, "--help"])
        assert exc.value.code == 0
        assert f"usage: fluidledger {name}" in capsys.readouterr().out


def test_registered_commands_come_from_the_command_list():
    """Only modules named in COMMANDS become sub-commands."""
    assert set(registered()) <= set(COMMANDS)


def test_status_on_missing_store_is_a_one_line_error(tmp_path):
    """A user error exits 2 with one line on stderr and no traceback."""
    proc = subprocess.run([sys.executable, "-m", "pipeline.cli", "status", "--store",
                           str(tmp_path / "none.duckdb")], capture_output=True, text=True)
    assert proc.returncode == 2
    assert proc.stderr.strip().count("\n") == 0
    assert "does not exist" in proc.stderr and "Traceback" not in proc.stderr


def test_unknown_option_is_a_usage_error(capsys):
    """argparse usage errors exit 2."""
    with pytest.raises(SystemExit) as exc:
        main(["ingest", "--no-such-option"])
    assert exc.value.code == 2
