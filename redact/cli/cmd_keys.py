"""`redact keygen`: create an Ed25519 signing key pair protected by a passphrase."""

from __future__ import annotations

import os
from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import library_errors
from redact.errors import SigningKeyError

PASSPHRASE_ENV = "REDACT_KEY_PASSPHRASE"


def read_passphrase(confirm: bool) -> bytes:
    """The key passphrase from $REDACT_KEY_PASSPHRASE, else prompted on the terminal (hidden input).

    Never taken from a command-line argument, where it would be visible to other users and in
    shell history. `confirm` asks twice (for a new key).
    """
    env = os.environ.get(PASSPHRASE_ENV)
    if env is not None:
        value = env
    else:
        try:
            value = click.prompt("Key passphrase", hide_input=True, confirmation_prompt=confirm, err=True,
                                 default="", show_default=False)
        except click.Abort:  # no terminal to ask on (e.g. stdin closed in a script)
            raise SigningKeyError(f"no passphrase given: set {PASSPHRASE_ENV} or run in a terminal") from None
    if not value:
        raise SigningKeyError(f"an empty passphrase is not allowed (type one, or set {PASSPHRASE_ENV})")
    return value.encode("utf-8")


@main.command("keygen", epilog=f"""\b
Example:
  redact keygen --out-dir ~/keys --name steward-2025
  # writes steward-2025.private.pem and steward-2025.public.pem, prints the key id

The passphrase is prompted twice with hidden input, or read from the environment
variable {PASSPHRASE_ENV}; it is never a command-line argument. Give the public key
to recipients so that they can run `redact verify --key`.""")
@click.option("--out-dir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Directory for the two key files (created if missing).")
@click.option("--name", default="redact-signing", show_default=True,
              help="Base name of the key files: NAME.private.pem and NAME.public.pem.")
@library_errors
def keygen(out_dir: Path, name: str) -> None:
    """Create an Ed25519 signing key; print its key id (RFC 7638 thumbprint).

    The private key is PKCS#8 PEM, encrypted with your passphrase. Existing key files are never
    overwritten.
    """
    from redact.errors import InputError
    from redact.provenance.signing import generate_key

    if not name or "/" in name or "\\" in name or name.startswith(".") or "\x00" in name:
        raise InputError(f"--name {name!r} must be a plain file name")
    passphrase = read_passphrase(confirm=True)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"cannot create {out_dir}: {e.strerror or e}") from None
    private, public = out_dir / f"{name}.private.pem", out_dir / f"{name}.public.pem"
    key_id = generate_key(private, public, passphrase)
    click.echo(f"private key: {private} (keep it secret; you need the passphrase to sign)", err=True)
    click.echo(f"public key:  {public} (give it to recipients)", err=True)
    click.echo(key_id)
