"""The `redact` command line: a thin layer over the library; each command lives in its own module."""

from __future__ import annotations

import importlib

import click

from redact import __version__

CAUTION = (
    "Skeleton data is pseudonymised, not anonymous: gait and body proportions can re-identify "
    "people. Automated redaction misses people; a person must review flagged frames before "
    "any disclosure. Local data-protection law and your data-protection officer decide what "
    "may be shared."
)


@click.group(help=f"Redact people from video and share signed skeleton-only data.\n\n{CAUTION}",
             context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="redact")
def main() -> None:
    """Entry point of the `redact` console script."""


# Each module defines its command(s) with @main.command(); keep this list sorted by workflow.
COMMAND_MODULES = (
    "cmd_models",
    "cmd_tracks",
    "cmd_process",
    "cmd_batch",
    "cmd_keys",
    "cmd_countersign",
    "cmd_verify",
    "cmd_inspect",
    "cmd_report",
    "cmd_derive",
    "cmd_export",
    "cmd_frameproof",
    "cmd_audit",
)

for _name in COMMAND_MODULES:
    importlib.import_module(f"redact.cli.{_name}")
