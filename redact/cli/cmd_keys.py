"""`redact keygen`: create an Ed25519 signing key pair protected by a passphrase."""

from __future__ import annotations

import os
import sys
import unicodedata
from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.errors import SigningKeyError

PASSPHRASE_ENV = "REDACT_KEY_PASSPHRASE"
#: Shortest passphrase `keygen` accepts for a new key, in characters (after Unicode NFKC
#: normalisation). NIST SP 800-63B-4 (2025) §3.1.1.2 requires at least 15 characters for a
#: password used as a single factor; anyone who copies the encrypted key file needs only the
#: passphrase, so it counts as a single factor here. Existing keys still open with shorter ones.
MIN_PASSPHRASE = 15


def _has_terminal() -> bool:
    """Whether a hidden prompt can be shown: stdin is a terminal, or the process has one (/dev/tty)."""
    try:
        if sys.stdin is not None and sys.stdin.isatty():
            return True
    except ValueError:  # stdin closed
        return False
    try:
        fd = os.open("/dev/tty", os.O_RDWR | os.O_NOCTTY)
    except OSError:
        return False
    os.close(fd)
    return True


def _lines_from_stdin(count: int) -> list[str]:
    """Without any terminal: the passphrase from the first line(s) of stdin, read quietly (Python's
    getpass would warn twice that input may be echoed before failing)."""
    lines = []
    for _ in range(count):
        line = sys.stdin.readline() if sys.stdin is not None else ""
        if not line:
            raise SigningKeyError(f"no passphrase given: set {PASSPHRASE_ENV} or run in a terminal")
        lines.append(line.rstrip("\r\n"))
    return lines


def read_passphrase(confirm: bool) -> bytes:
    """The key passphrase from $REDACT_KEY_PASSPHRASE, else prompted on the terminal (hidden input),
    else, with no terminal at all, the first line of stdin (two lines with `confirm`).

    Never taken from a command-line argument, where it would be visible to other users and in
    shell history. `confirm` asks twice (for a new key).
    """
    env = os.environ.get(PASSPHRASE_ENV)
    if env is not None:
        value = env
    elif _has_terminal():
        try:
            value = click.prompt("Key passphrase", hide_input=True, confirmation_prompt=confirm, err=True,
                                 default="", show_default=False)
        except click.Abort:  # the prompt was closed (end of input)
            raise SigningKeyError(f"no passphrase given: set {PASSPHRASE_ENV} or run in a terminal") from None
    else:
        lines = _lines_from_stdin(2 if confirm else 1)
        if confirm and lines[0] != lines[1]:
            raise SigningKeyError("the two passphrases differ")
        value = lines[0]
    if not value:
        raise SigningKeyError(f"an empty passphrase is not allowed (type one, or set {PASSPHRASE_ENV})")
    return value.encode("utf-8")


def check_new_passphrase(passphrase: bytes) -> None:
    """SigningKeyError when a passphrase for a new key is shorter than MIN_PASSPHRASE characters."""
    n = len(unicodedata.normalize("NFKC", passphrase.decode("utf-8")))
    if n < MIN_PASSPHRASE:
        raise SigningKeyError(f"the passphrase has {n} characters; a new key needs at least {MIN_PASSPHRASE} "
                              "(NIST SP 800-63B-4 §3.1.1.2); a few unrelated words are easy to remember")


@main.command("keygen", epilog=f"""\b
Example:
  redact keygen --out-dir ~/keys --name steward-2025
  # writes steward-2025.private.pem and steward-2025.public.pem, prints the key id

The passphrase is prompted twice with hidden input, or read from the environment
variable {PASSPHRASE_ENV}; it is never a command-line argument. It must have at least
{MIN_PASSPHRASE} characters (NIST SP 800-63B-4 §3.1.1.2: the minimum for a password that is
the only secret). Give the public key to recipients so that they can run
`redact verify --trusted-key NAME.public.pem`; the private key signs, with --signing-key.""")
@click.option("--out-dir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="A folder for the two key files (created if missing).")
@click.option("--name", default="redact-signing", show_default=True,
              help="Base name of the key files: NAME.private.pem and NAME.public.pem.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def keygen(out_dir: Path, name: str, as_json: bool) -> None:
    """Create an Ed25519 signing key; print its key id (RFC 7638 thumbprint).

    The private key is PKCS#8 PEM, encrypted with your passphrase. Existing key files are never
    overwritten.
    """
    from redact.errors import InputError
    from redact.provenance.signing import generate_key

    if not name or "/" in name or "\\" in name or name.startswith(".") or "\x00" in name:
        raise InputError(f"--name {name!r} must be a plain file name")
    passphrase = read_passphrase(confirm=True)
    check_new_passphrase(passphrase)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"cannot create {out_dir}: {e.strerror or e}") from None
    private, public = out_dir / f"{name}.private.pem", out_dir / f"{name}.public.pem"
    key_id = generate_key(private, public, passphrase)
    if as_json:
        echo_json({"key_id": key_id, "private_key": str(private), "public_key": str(public)})
        return
    click.echo(f"private key: {private} (keep it secret; you need the passphrase to sign)", err=True)
    click.echo(f"public key:  {public} (give it to recipients)", err=True)
    click.echo(key_id)
