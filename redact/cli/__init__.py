"""The `redact` command line: a thin layer over the library; each command lives in its own module.

Commands are loaded lazily (click's documentation, "Complex Applications", "Lazily Loading
Subcommands": a Group whose list_commands/get_command import a command's module only when it is
needed), so `redact verify`, `inspect` and `frame-check` import provenance and `cryptography`
only: a recipient verifies a package without OpenCV, onnxruntime, PyAV or NumPy installed.
"""

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


#: Command name → module of redact.cli that defines it (with @main.command); in workflow order.
COMMANDS: dict[str, str] = {
    "models": "cmd_models",
    "tracks": "cmd_tracks",
    "process": "cmd_process",
    "demo": "cmd_process",
    "batch": "cmd_batch",
    "keygen": "cmd_keys",
    "countersign": "cmd_countersign",
    "verify": "cmd_verify",
    "inspect": "cmd_inspect",
    "report": "cmd_report",
    "review": "cmd_review",
    "disclose": "cmd_review",
    "derive": "cmd_derive",
    "export": "cmd_export",
    "frame-proof": "cmd_frameproof",
    "frame-check": "cmd_frameproof",
    "audit": "cmd_audit",
}


class LazyGroup(click.Group):
    """A click Group that imports a command's module on first use (see the module docstring)."""

    def __init__(self, *args, lazy_commands: dict[str, str] | None = None, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.lazy_commands = dict(lazy_commands or {})
        self._unavailable: dict[str, str] = {}

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted(set(super().list_commands(ctx)) | set(self.lazy_commands))

    def _load(self, name: str) -> click.Command | None:
        if name not in self.commands and name in self.lazy_commands:
            try:
                importlib.import_module(f"redact.cli.{self.lazy_commands[name]}")
            except ImportError as e:  # a dependency of this command is not installed
                self._unavailable[name] = e.name or str(e)
                return None
        return self.commands.get(name)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        cmd = self._load(cmd_name)
        if cmd is None and cmd_name in self._unavailable:
            click.echo(f"error: `redact {cmd_name}` needs the Python module {self._unavailable[cmd_name]!r}, which "
                       "is not installed here: install all of redact's dependencies (pyproject.toml); verify, "
                       "inspect and frame-check need only `cryptography` and `click`", err=True)
            ctx.exit(2)
        return cmd

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """The command list of --help; a command whose dependencies are missing is listed as such."""
        rows = []
        limit = formatter.width - 6 - max((len(n) for n in self.list_commands(ctx)), default=0)
        for name in self.list_commands(ctx):
            cmd = self._load(name)
            if cmd is None and name in self._unavailable:
                rows.append((name, f"(not available here: needs {self._unavailable[name]})"))
            elif cmd is not None and not cmd.hidden:
                rows.append((name, cmd.get_short_help_str(limit)))
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


@click.group(cls=LazyGroup, lazy_commands=COMMANDS,
             help=f"Redact people from video and share signed skeleton-only data.\n\n{CAUTION}",
             context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="redact")
def main() -> None:
    """Entry point of the `redact` console script."""
