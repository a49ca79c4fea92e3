"""`redact report`: write the disclosure report of a package as one self-contained HTML file."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import load_trusted_keys, trusted_keys_option
from redact.errors import OutputError
from redact.fsio import atomic_write, lock_target


def _check_output(out: Path, force: bool) -> None:
    """Refuse an output that is a directory, already exists (without --force) or has no parent."""
    if out.is_dir():
        raise OutputError(f"--out {out} is a folder; give a file name such as report.html")
    if os.path.lexists(out) and not force:
        raise OutputError(f"{out} already exists; choose another --out or pass --force")
    if not out.parent.is_dir():
        raise OutputError(f"directory {out.parent} does not exist")


def _write_atomic(out: Path, data: bytes, force: bool) -> None:
    """Write to a hidden temporary name beside `out`, then rename: no partial report is left, and
    an existing file is replaced only with --force."""
    _check_output(out, force)
    atomic_write(out, data, replace=force)


@main.command("report", epilog="""\b
Example:
  redact report out/package --trusted-key steward.public.pem --video out/redacted.mp4 --out report.html
  redact report out/package.tar --trusted-key steward.public.pem --source cam1.mp4 --out report.html

\b
The page needs no network and prints cleanly to PDF from a browser. Pictures of the ranges to
review come only from the redacted video (--video); without it the report has no pictures.
Exit status: 0 report written and the package verified; 1 report written but verification
FAILED (the page says so at the top); 2 usage error or not a package, nothing written.
Skeleton data is pseudonymised, not anonymous; a person must review before disclosure.""")
@click.argument("package", type=click.Path(path_type=Path))
@trusted_keys_option()
@click.option("--video", type=click.Path(dir_okay=False, path_type=Path),
              help="The REDACTED video: checked against the package, and the source of the pictures.")
@click.option("--source", type=click.Path(dir_okay=False, path_type=Path),
              help="The original video: only its SHA-256 and size are checked; it is never shown.")
@click.option("--out", "output", required=True, type=click.Path(path_type=Path),
              help="The report, a file to write (HTML, e.g. report.html).")
@click.option("--force", is_flag=True, help="Replace an existing report file.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def report(package: Path, trusted_keys: tuple[Path, ...], video: Path | None, source: Path | None, output: Path,
           force: bool, as_json: bool) -> None:
    """Verify PACKAGE and write a readable, printable disclosure report of it to --out FILE."""
    from redact.errors import InputError
    from redact.report.document import make_report

    for p, what in ((video, "--video"), (source, "--source")):
        if p is not None and not p.is_file():
            raise InputError(f"{what} {p} does not exist")
    for p in (package, video, source, *trusted_keys):
        if p is not None and os.path.lexists(output) and output.resolve() == p.resolve():
            raise OutputError(f"--out {output} would overwrite an input")
    _check_output(output, force)
    trusted = load_trusted_keys(trusted_keys)
    with lock_target(output):  # a second report to the same file stops here
        result = make_report(package, trusted, video=video, source=source)
        _write_atomic(output, result.html, force)
    if as_json:
        echo_json({"report": str(output), "verified": result.verified, "key_id": result.key_id,
                   "findings": list(result.findings), "pictures": result.thumbnails})
    else:
        click.echo(str(output))
    if result.verified:
        click.echo(f"report written; package VALID, signed by key {result.key_id}", err=True)
    else:
        click.echo(f"report written; verification FAILED with {len(result.findings)} finding(s): see the report",
                   err=True)
    if video is None:
        click.echo("note: no --video given, so the report has no pictures of the ranges to review", err=True)
    click.echo("Skeleton data is pseudonymised, not anonymous; a person must review before disclosure.", err=True)
    if not result.verified:
        sys.exit(1)
