"""Every command answers --help with an example, and the commands that handle people's data carry
the caution (skeleton data is pseudonymised; automated redaction needs human review)."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from redact.cli import main

COMMANDS = sorted(main.commands)
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
