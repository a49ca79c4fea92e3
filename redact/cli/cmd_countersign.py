"""`redact countersign`: add a second (third, …) signature to a package without touching what it signs."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from redact.cli import main
from redact.cli.cmd_keys import PASSPHRASE_ENV, read_passphrase
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import check_signing_key, load_trusted_keys
from redact.errors import VerificationFailed


@main.command("countersign", epilog=f"""\b
Example:
  redact countersign out/package --signing-key keys/dpo.private.pem --trusted-key keys/steward.public.pem
  redact countersign out/package.tar --signing-key keys/dpo.private.pem \\
      --trusted-key keys/steward.public.pem --out approved/package.tar

\b
The package is verified first with the --trusted-key keys (every signature already on it must
verify with one of them), then your signature is added to envelope.json over the same signed
bytes: no file, hash or log entry changes. Without --out the package is changed in place;
with --out a countersigned copy is written and the original is left as it was. Recipients
then verify with both public keys, e.g.
  redact verify out/package --trusted-key steward.public.pem --trusted-key dpo.public.pem
and can insist on yours with --require-signer dpo.public.pem.

The key passphrase is read from ${PASSPHRASE_ENV} or prompted (hidden).
A signature says you checked this package; it does not make sharing it lawful.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@click.option("--signing-key", "signing_key", required=True,
              type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="Your private signing key (NAME.private.pem from `redact keygen`).")
@click.option("--trusted-key", "trusted_keys", multiple=True, required=True,
              type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="Public key of a signer already on the package (PEM); repeat for several.")
@click.option("--out", "out", type=click.Path(path_type=Path),
              help="The countersigned copy: a folder, or a .tar file when PACKAGE is one (must not exist); "
                   "without it PACKAGE itself is changed.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def countersign(package: Path, signing_key: Path, trusted_keys: tuple[Path, ...], out: Path | None,
                as_json: bool) -> None:
    """Add your signature to PACKAGE (a folder or .tar) and say who has signed it now."""
    from redact.provenance.countersign import countersign_package
    from redact.provenance.signing import load_private_key

    trusted = load_trusted_keys(trusted_keys)  # key files checked before any prompt
    signer = load_private_key(check_signing_key(signing_key), read_passphrase(confirm=False))
    try:
        result = countersign_package(package, signer, trusted, out=out)
    except VerificationFailed as e:
        if as_json:
            echo_json({"countersigned": False, "package": str(package), "findings": e.findings})
        else:
            click.echo(f"NOT COUNTERSIGNED {package}: it does not verify, {len(e.findings)} finding(s)")
            for f in e.findings:
                click.echo(f"  - {f}")
        sys.exit(1)
    signers = [{"key_id": s.key_id, "key_file": (signing_key.name if s.key_id == result.added else s.key.label) or None,
                "added_now": s.key_id == result.added, "author": s.key_id == result.package.key_id}
               for s in result.signers]
    if as_json:
        echo_json({"countersigned": True, "package": str(result.path), "added": result.added, "signers": signers})
        return
    click.echo(f"countersigned {result.path}")
    click.echo(f"  signed by {len(signers)} key(s):")
    for s in signers:
        role = "author (named by the log)" if s["author"] else "countersignature"
        if s["added_now"]:
            role += ", added now"
        click.echo(f"    {s['key_id']}" + (f" ({s['key_file']})" if s["key_file"] else "") + f": {role}")
