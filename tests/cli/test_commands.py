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


def test_command_list_help_is_each_modules_help():
    """The help the command list shows (without importing a module) is each module's HELP."""
    from pipeline.cli import load_command

    for name, help_text in COMMANDS.items():
        module = load_command(name)
        assert module.NAME == name
        assert module.HELP == help_text, name


_IMPORTS = """
import json, sys
from pipeline.cli import main
try:
    main({argv!r})
except SystemExit:
    pass
heavy = ("numpy", "pandas", "pyarrow", "duckdb", "matplotlib", "scipy", "jsonschema", "rich")
print(json.dumps(sorted(m for m in sys.modules if m.split(".")[0] in heavy
                        or m.startswith("pipeline.commands."))), file=sys.stderr)
"""


@pytest.mark.parametrize("argv, allowed", [
    (["--version"], set()),
    (["--help"], set()),
    (["status", "--store", "{tmp}/none.duckdb"], {"duckdb", "pipeline.commands.status"}),
])
def test_start_up_imports_only_what_the_command_needs(tmp_path, argv, allowed):
    """--version and --help import no command module and no heavy library; status imports
    its own module and DuckDB only (start-up under 0.25 s: benchmarks/startup.py)."""
    import json

    argv = [a.format(tmp=tmp_path) for a in argv]
    proc = subprocess.run([sys.executable, "-c", _IMPORTS.format(argv=argv)],
                          capture_output=True, text=True)
    loaded = json.loads(proc.stderr.strip().splitlines()[-1])
    assert {m.split(".")[0] if not m.startswith("pipeline") else m for m in loaded} <= allowed
