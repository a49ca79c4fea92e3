"""`redact verify`: check a package's signature, completeness, hashes, log, source and video."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.errors import VerificationFailed

PSEUDONYMISED = ("Caution: a valid package proves integrity and origin, not that sharing it is lawful. "
                 "Skeleton data is pseudonymised, not anonymous.")


@main.command("verify", epilog="""\b
Example:
  redact verify out/package --key steward.public.pem --source cam1.mp4 --video out/redacted.mp4
  redact verify out/package.tar --key steward.public.pem --json

\b
Exit status: 0 valid, 1 invalid (every finding is listed), 2 usage error.
Skeleton data is pseudonymised, not anonymous: a valid signature does not make it safe to publish.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@click.option("--key", "keys", multiple=True, required=True, type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="Trusted public key (PEM); repeat for several. At least one is required.")
@click.option("--source", type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="The original video: its SHA-256 and size must match the signed source.")
@click.option("--video", type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="The redacted video: it must match the signed redacted-video subject.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def verify(package: Path, keys: tuple[Path, ...], source: Path | None, video: Path | None, as_json: bool) -> None:
    """Verify PACKAGE (a directory or .tar): signature first, then every file, the log and options.

    The signature is checked over the exact signed bytes before anything is parsed; then the
    file set must be exactly the signed one, every SHA-256 must match, the transform log chain
    must be intact, and --source / --video must match when given.
    """
    from redact.provenance.signing import load_public_key
    from redact.provenance.verify import verify_package

    trusted = [load_public_key(k) for k in keys]
    try:
        result = verify_package(package, trusted, source=source, video=video)
    except VerificationFailed as e:
        if as_json:
            echo_json({"valid": False, "package": str(package), "findings": e.findings})
        else:
            click.echo(f"INVALID {package}: {len(e.findings)} finding(s)")
            for f in e.findings:
                click.echo(f"  - {f}")
        sys.exit(1)
    src = result.predicate.get("source") if isinstance(result.predicate.get("source"), dict) else {}
    if as_json:
        echo_json({"valid": True, "package": str(package), "key_id": result.key_id, "checked": list(result.checked),
                   "source": {k: src.get(k) for k in ("name", "sha256", "bytes")}, "findings": []})
        return
    click.echo(f"VALID {package}")
    click.echo(f"  signed by key {result.key_id}")
    click.echo(f"  checked: {', '.join(result.checked)}")
    click.echo(f"  source: {src.get('name')} sha256 {src.get('sha256')}")
    if source is None:
        click.echo("note: the source file was not checked (use --source ORIGINAL)", err=True)
    click.echo(PSEUDONYMISED, err=True)
