"""The two key options every command shares, as decorators, and the checks that catch a mix-up.

`--signing-key` is the private key that signs (process, batch, derive, demo); `--trusted-key`
(repeatable) is a public key a package must be signed by (verify, report, inspect, export,
frame-proof, frame-check, derive). `redact keygen --name NAME` writes NAME.private.pem and
NAME.public.pem, so when someone gives one where the other belongs the error names the file
they meant. The PEM label is read before any passphrase is asked for, so a wrong file never
leads to a prompt.
"""

from __future__ import annotations

import re
from pathlib import Path

import click

from redact.errors import SigningKeyError

SIGNING_FLAG = "--signing-key"
TRUSTED_FLAG = "--trusted-key"
_LABEL = re.compile(rb"-----BEGIN ([A-Z0-9 ]+)-----")
#: Larger than any PEM key file; the label is on the first line.
_HEAD_BYTES = 64 * 1024


def pem_kind(path: Path) -> str | None:
    """"private", "public" or None (no PEM label, or one of another kind), from the file's first label."""
    try:
        with open(path, "rb") as f:
            head = f.read(_HEAD_BYTES)
    except OSError as e:
        raise SigningKeyError(f"cannot read key file {path}: {e.strerror or e}") from None
    m = _LABEL.search(head)
    if m is None:
        return None
    label = m.group(1)
    if label.endswith(b"PRIVATE KEY"):
        return "private"
    if label == b"PUBLIC KEY":
        return "public"
    return None


def _partner(path: Path, want: str) -> str:
    """The file keygen wrote beside `path` for the other half of the pair, as a path to show."""
    for suffix in (".private.pem", ".public.pem"):
        if path.name.endswith(suffix):
            return str(path.with_name(path.name[: -len(suffix)] + f".{want}.pem"))
    return f"NAME.{want}.pem (from `redact keygen --name NAME`)"


def public_key_beside(signing_key: Path) -> str:
    """The public key keygen wrote beside a signing key, as a path to show in the next steps."""
    return _partner(Path(signing_key), "public")


def check_signing_key(path: Path, flag: str = SIGNING_FLAG) -> Path:
    """SigningKeyError unless `path` is a file holding a private key (a public key gets a pointer to
    the private one). Call before reading the passphrase."""
    if not path.is_file():
        raise SigningKeyError(f"{flag} {path}: no such key file (create one with `redact keygen`)")
    if pem_kind(path) == "public":
        raise SigningKeyError(f"{flag} {path}: this is a public key; the signing key is "
                              f"{_partner(path, 'private')}")
    return path


def load_trusted_keys(paths, flag: str = TRUSTED_FLAG) -> list:
    """The public keys in `paths` (redact.provenance.signing.PublicKey); a private key given here gets
    an error pointing to its public half (and is never parsed)."""
    from redact.provenance.signing import load_public_key

    keys = []
    for p in paths:
        p = Path(p)
        if not p.is_file():
            raise SigningKeyError(f"{flag} {p}: no such key file")
        if pem_kind(p) == "private":
            raise SigningKeyError(f"{flag} {p}: this is a private key (keep it to yourself); the trusted key is "
                                  f"{_partner(p, 'public')}")
        keys.append(load_public_key(p))
    return keys


def signing_key_option(required: bool = True, help: str | None = None):
    """`--signing-key FILE` (private key from `redact keygen`), passed to the command as `signing_key`."""
    return click.option(
        SIGNING_FLAG, "signing_key", required=required, default=None,
        type=click.Path(path_type=Path, dir_okay=False),
        help=help or "Private signing key, a file (NAME.private.pem from `redact keygen`).")


def trusted_keys_option(required: bool = True, help: str | None = None):
    """`--trusted-key FILE`, repeatable (public keys), passed to the command as `trusted_keys`."""
    text = help or ("Trusted public key, a file (NAME.public.pem from `redact keygen`); repeat for several."
                    + (" At least one is required." if required else ""))

    return click.option(TRUSTED_FLAG, "trusted_keys", multiple=True, required=required,
                        type=click.Path(path_type=Path, dir_okay=False), help=text)
