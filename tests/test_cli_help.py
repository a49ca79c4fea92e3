"""Every command answers --help with an example, and the commands that handle people's data carry
the caution (skeleton data is pseudonymised; automated redaction needs human review)."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from redact.cli import COMMANDS as LAZY_COMMANDS
from redact.cli import main

COMMANDS = sorted(LAZY_COMMANDS)  # the lazily loaded commands (redact.cli.COMMANDS)
# Commands whose output holds or reveals data about people.
CAUTIONED = {"process", "demo", "export", "derive", "audit", "tracks", "report", "batch"}


def test_every_registered_command_is_listed():
    r = CliRunner().invoke(main, ["--help"])
    assert r.exit_code == 0
    for name in COMMANDS:
        assert name in r.output
    assert "pseudonymised" in r.output


@pytest.mark.parametrize("name", COMMANDS)
def test_help_has_an_example(name):
    r = CliRunner().invoke(main, [name, "--help"])
    assert r.exit_code == 0, r.output
    assert "example" in r.output.lower()
    assert f"redact {name}" in r.output


@pytest.mark.parametrize("name", sorted(CAUTIONED))
def test_help_carries_the_caution(name):
    text = " ".join(CliRunner().invoke(main, [name, "--help"]).output.lower().split())
    assert any(w in text for w in ("pseudonymised", "review", "sensitive", "does not replace")), name


def test_every_command_module_is_in_the_lazy_table():
    """Importing every cli/cmd_*.py registers exactly the commands the lazy table names, each defined
    in the module the table says: a new command cannot be forgotten."""
    import importlib
    from pathlib import Path

    import redact.cli as cli

    for path in sorted(Path(cli.__file__).parent.glob("cmd_*.py")):
        importlib.import_module(f"redact.cli.{path.stem}")
    assert set(main.commands) == set(LAZY_COMMANDS)
    for name, module in LAZY_COMMANDS.items():
        assert main.commands[name].callback.__module__ == f"redact.cli.{module}", name


def test_help_lists_each_command_with_its_own_one_line_help():
    r = CliRunner().invoke(main, ["--help"])
    assert r.exit_code == 0
    listing = r.output.split("Commands:", 1)[1]
    for name in COMMANDS:
        cmd = main.get_command(None, name)
        first = cmd.get_short_help_str(200).split()[:3]  # its own words, as click shortens them
        line = next(x for x in listing.splitlines() if x.strip().startswith(name + " "))
        assert " ".join(first) in " ".join(line.split()), (name, line)
