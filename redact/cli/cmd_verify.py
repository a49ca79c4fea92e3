"""`redact verify`: check a package's signatures, completeness, hashes, log, source and video."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import load_trusted_keys, trusted_keys_option
from redact.errors import InputError, VerificationFailed

PSEUDONYMISED = ("Caution: a valid package proves integrity and origin, not that sharing it is lawful. "
                 "Skeleton data is pseudonymised, not anonymous.")
PACKAGE_NAMES = ("package", "package.tar")  # what `redact process --out DIR` writes inside DIR


def output_folder_package(path: Path) -> Path | None:
    """The package inside an output folder of `redact process` (DIR/package or DIR/package.tar), or None.

    A folder without envelope.json that holds one of those is an output folder, not a package:
    verifying it as a package would report a missing signature, as if it had been tampered with.
    """
    if not path.is_dir() or (path / "envelope.json").exists():
        return None
    return next((path / n for n in PACKAGE_NAMES if (path / n).exists()), None)


def _signer_lines(result) -> list[dict]:
    """One record per signer: key id, the trusted key file, the keyid hint, and its role."""
    return [{"key_id": s.key_id, "key_file": s.key.label or None, "keyid_hint": s.keyid_hint or None,
             "role": "author" if s.key_id == result.key_id else "countersignature"} for s in result.signers]


@main.command("verify", epilog="""\b
Example:
  redact verify out/package --trusted-key steward.public.pem --source cam1.mp4 --video out/redacted.mp4
  redact verify out/package.tar --trusted-key steward.public.pem --trusted-key dpo.public.pem --json
  redact verify out/package --trusted-key steward.public.pem --require-signer dpo.public.pem

\b
Every signature in the envelope must verify with a trusted key (a package may carry several,
e.g. a data-protection officer's countersignature); each signer is named. A signature by a key
you did not pass is a finding: pass that signer's public key if you trust it. Signatures are
independent, so one can be removed without breaking the others: when you expect a particular
signer, name it with --require-signer.

\b
What the signatures cover: the payload (the in-toto Statement, which names every file of the
package and the redacted video by SHA-256) and its payloadType. envelope.json itself cannot be
signed; its layout is fixed (compact JSON as this tool writes it, RFC 4648 canonical padded
base64), and only the choices DSSE requires a verifier to accept stay open: the base64 alphabet
(standard or URL-safe), whether a keyid hint is present, and the order of the signatures.

\b
Exit status: 0 valid, 1 invalid (every finding is listed), 2 usage error (also when PACKAGE is
an output folder: verify the package inside it).
Skeleton data is pseudonymised, not anonymous: a valid signature does not make it safe to publish.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@trusted_keys_option()
@click.option("--require-signer", "required", multiple=True,
              type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="Public key (PEM) that must be among the signers, e.g. a countersigner; trusted too. Repeatable.")
@click.option("--source", type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="The original video: its SHA-256 and size must match the signed source.")
@click.option("--video", type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="The redacted video: it must match the signed redacted-video subject.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@click.option("--quiet", "-q", is_flag=True, help="Print nothing; the exit status alone gives the result.")
@library_errors
def verify(package: Path, trusted_keys: tuple[Path, ...], required: tuple[Path, ...], source: Path | None,
           video: Path | None, as_json: bool, quiet: bool) -> None:
    """Verify PACKAGE (a directory or .tar): signatures first, then every file, the log and options.

    The signatures are checked over the exact signed bytes before anything is parsed; then the
    file set must be exactly the signed one, every SHA-256 must match, the transform log chain
    must be intact, and --source / --video must match when given.
    """
    from redact.provenance.verify import verify_package

    if quiet and as_json:
        raise click.UsageError("give either --json or --quiet, not both")
    inner = output_folder_package(package)
    if inner is not None:
        hint = f" --video {package / 'redacted.mp4'}" if (package / "redacted.mp4").is_file() else ""
        raise InputError(f"{package} is an output folder, not a package; verify the package inside it: "
                         f"redact verify {inner} --trusted-key …{hint}")
    trusted = load_trusted_keys(trusted_keys)
    must = load_trusted_keys(required, "--require-signer")
    try:
        result = verify_package(package, trusted, source=source, video=video, required_signers=must)
    except VerificationFailed as e:
        if quiet:
            sys.exit(1)
        if as_json:
            echo_json({"valid": False, "package": str(package), "findings": e.findings})
        else:
            click.echo(f"INVALID {package}: {len(e.findings)} finding(s)")
            for f in e.findings:
                click.echo(f"  - {f}")
        sys.exit(1)
    src = result.predicate.source
    partial = src.partial_warning()
    if quiet:
        if partial:  # even quiet: a valid package of a partly decoded source must not pass unnoticed
            click.echo(f"WARNING: {partial}", err=True)
        return
    signers = _signer_lines(result)
    if as_json:
        echo_json({"valid": True, "package": str(package), "warnings": [partial] if partial else [],
                   "stopped_early": src.stopped_early, "key_id": result.key_id, "signers": signers,
                   "checked": list(result.checked), "notes": list(result.notes),
                   "source": {"name": src.name, "sha256": src.sha256, "bytes": src.bytes, "frames": src.frames},
                   "findings": []})
        return
    if partial:
        click.echo(f"WARNING: {partial}")
    click.echo(f"VALID {package}" + (" (a PARTIAL source: see the warning above)" if partial else ""))
    click.echo(f"  signed by {len(signers)} key(s):")
    for s in signers:
        role = "author (named by the log)" if s["role"] == "author" else "countersignature"
        click.echo(f"    {s['key_id']}" + (f" ({s['key_file']})" if s["key_file"] else "") + f": {role}")
    click.echo(f"  checked: {', '.join(result.checked)}")
    click.echo(f"  source: {src.name} sha256 {src.sha256}")
    for n in result.notes:
        click.echo(f"note: {n}", err=True)
    if source is None:
        click.echo("note: the source file was not checked (use --source ORIGINAL)", err=True)
    click.echo(PSEUDONYMISED, err=True)
