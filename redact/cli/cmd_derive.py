"""`redact derive`: a new signed package from a verified one, with de-identification options applied."""

from __future__ import annotations

import hashlib
from pathlib import Path

import click

from redact.cli import main
from redact.cli.cmd_keys import PASSPHRASE_ENV, read_passphrase
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import check_signing_key, load_trusted_keys, signing_key_option, trusted_keys_option
from redact.cli.options import disclosure_options
from redact.cli.privacy_options import PRIVACY_CAUTION, privacy_options


@main.command("derive", epilog=f"""\b
Example:
  redact derive out/package --trusted-key steward.public.pem --signing-key steward.private.pem \\
      --out share-2025-06 --drop-keypoints head --normalise-proportions \\
      --noise-px 2 --target-fps 10 --new-ids --relative-time \\
      --recipient "Gait lab" --purpose "research agreement 17"

The parent is verified first (signature, every file, the log) and refused when anything is
wrong. The new package's log starts with the SHA-256 of the parent's signed statement, its key
id and log head; the options are recorded in the new signed statement. The key passphrase is
read from ${PASSPHRASE_ENV} or prompted (hidden).

\b
Exit status: 0 written, 1 the parent does not verify, 2 usage or input error.

Caution: {PRIVACY_CAUTION} Share it only as your data-protection officer allows.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@trusted_keys_option(help="Trusted public key, a file (NAME.public.pem) of the parent package; repeat for several.")
@signing_key_option(help="Private key that signs the new package, a file (NAME.private.pem from `redact keygen`).")
@click.option("--out", required=True, type=click.Path(path_type=Path),
              help="The new package: a folder to create (or a .tar file with --archive); must not exist.")
@privacy_options
@disclosure_options
@click.option("--archive", is_flag=True, help="Write the new package as one .tar instead of a folder.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@library_errors
def derive_cmd(package: Path, trusted_keys: tuple[Path, ...], signing_key: Path, out: Path, privacy, disclosure,
               archive: bool, as_json: bool) -> None:
    """Make a new signed, skeleton-only package from PACKAGE (a folder or .tar) with its skeletons
    de-identified: dropped keypoints, standard body proportions, relative coordinates, fewer frames,
    coarser numbers, noise, new track ids, relative time.
    """
    from redact.errors import InputError
    from redact.provenance.signing import load_private_key
    from redact.skeletons.derive import derive

    if privacy is None:
        raise InputError("no de-identification option given; choose at least one (see --help)")
    from redact import fsio

    trusted = load_trusted_keys(trusted_keys)
    signer = load_private_key(check_signing_key(signing_key), read_passphrase(confirm=False))
    with fsio.lock_target(out) as lock:  # a second derive to the same name stops here
        stale, _ = fsio.stale_staging(out.parent, f".{out.name}.derive-partial-", lock.acquired_at)
        result = derive(package, out, trusted, signer, privacy, disclosure, archive=archive)
    for line in fsio.staging_notices(out.parent, stale, []):
        click.echo(f"note: {line}", err=True)
    click.echo(f"caution: {PRIVACY_CAUTION}", err=True)
    if as_json:
        echo_json({"package": str(result.path), "key_id": result.key_id,
                   "statement_sha256": hashlib.sha256(result.payload).hexdigest(),
                   "parent": result.parent, "privacy": result.privacy,
                   "summary": result.summary})
        return
    s = result.summary
    click.echo(f"derived package: {result.path}  (signed, key id {result.key_id})")
    click.echo(f"parent statement sha256 {result.parent['statement_sha256']} (key id {result.parent['key_id']})")
    click.echo(f"rows: {s.get('rows_in')} in, {s.get('rows_out')} out; tracks: {s.get('tracks_out')}; "
               f"units {s.get('units')}")
