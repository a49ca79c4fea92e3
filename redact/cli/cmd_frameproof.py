"""`redact frame-proof` / `redact frame-check`: RFC 6962 inclusion proofs for single source frames.

The holder of the source can show that one frame belongs to the signed source (its digest is a
leaf of the signed Merkle root `source.frames_root`) without handing over the other frames.
"""

from __future__ import annotations

import os
import re
import sys
from pathlib import Path
from typing import cast

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import load_trusted_keys, trusted_keys_option


def _verified_frames(package: Path, trusted_keys: tuple[Path, ...]):
    """Verify the package, then return (verified package, per-frame digests read through it)."""
    from redact.errors import InputError
    from redact.provenance import merkle
    from redact.provenance.package import FRAMES
    from redact.provenance.verify import verify_package

    result = verify_package(package, load_trusted_keys(trusted_keys))
    if not result.has(FRAMES):
        raise InputError(f"the package has no {FRAMES}: it was written without per-frame digests")
    with result.open(FRAMES) as f:
        digests = merkle.read_frame_digests(f)
    return result, digests


@main.command("frame-proof", epilog="""\b
Example:
  redact frame-proof out/package --trusted-key steward.public.pem --frame 1200 --out frame-1200.proof.json

The package is verified first. The proof holds the frame's digest, the signed root and the
audit path; it reveals nothing about other frames beyond their hashes.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@trusted_keys_option()
@click.option("--frame", required=True, type=click.IntRange(min=0), help="Frame index, 0-based, in decode order.")
@click.option("--out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="The proof, a file to write (JSON; must not exist).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def frame_proof(package: Path, trusted_keys: tuple[Path, ...], frame: int, out: Path, as_json: bool) -> None:
    """Write an RFC 6962 inclusion proof that frame N belongs to the package's signed source."""
    from redact.errors import OutputError
    from redact.fsio import atomic_write
    from redact.provenance import merkle

    result, digests = _verified_frames(package, trusted_keys)
    proof = merkle.make_frame_proof(digests, frame, result.predicate.source.sha256)
    if os.path.lexists(out):
        raise OutputError(f"{out} already exists; refusing to overwrite it")
    atomic_write(out, proof.to_json())  # never replaces a file that appeared meanwhile
    if as_json:
        echo_json({"proof": str(out), "frame": frame, "tree_size": proof.size, "root": proof.root.hex(),
                   "key_id": result.key_id})
        return
    click.echo(f"proof for frame {frame} of {proof.size}: {out}", err=True)
    click.echo(str(out))


@main.command("frame-check", epilog="""\b
Example:
  redact frame-check frame-1200.proof.json --package out/package --trusted-key steward.public.pem
  redact frame-check frame-1200.proof.json --root 5dc9da79... --frame-digest 0f1e...

Exit status: 0 the proof holds, 1 it does not (every reason is listed), 2 usage error.""")
@click.argument("proof_file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--package", type=click.Path(exists=True, path_type=Path), help="The signed package holding the root.")
@trusted_keys_option(required=False, help="Trusted public key, a file (NAME.public.pem) of the package; "
                                           "repeatable; required with --package.")
@click.option("--root", "root_hex", help="Instead of --package: the signed frames_root (64 hex digits) you trust.")
@click.option("--frame-digest", "digest_hex", help="The digest you computed for the frame; must equal the proof's.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def frame_check(proof_file: Path, package: Path | None, trusted_keys: tuple[Path, ...], root_hex: str | None,
                digest_hex: str | None, as_json: bool) -> None:
    """Check that PROOF_FILE shows its frame is a leaf of a signed frames_root."""
    from redact.errors import InputError
    from redact.provenance import merkle

    hex64 = re.compile(r"[0-9a-f]{64}")
    if (package is None) == (root_hex is None):
        raise InputError("give either --package with --trusted-key, or --root")
    if package is not None and not trusted_keys:
        raise InputError("--package needs at least one --trusted-key")
    for name, v in (("--root", root_hex), ("--frame-digest", digest_hex)):
        if v is not None and not hex64.fullmatch(v):
            raise InputError(f"{name} must be 64 lowercase hex digits")
    if proof_file.stat().st_size > 1024 * 1024:
        raise InputError(f"{proof_file} is too large to be a frame proof")
    proof = merkle.FrameProof.from_json(proof_file.read_bytes(), proof_file.name)
    size = None
    if package is not None:
        result, digests = _verified_frames(package, trusted_keys)
        root_hex = result.predicate.source.frames_root
        if root_hex is None:
            raise InputError("the package's signed statement has no source.frames_root")
        size = len(digests)
    # root_hex is --root, or the package's frames_root (exactly one of the two is given)
    digest = bytes.fromhex(digest_hex) if digest_hex else None
    findings = merkle.check_frame_proof(proof, cast(str, root_hex), size, digest)
    if as_json:
        echo_json({"valid": not findings, "frame": proof.frame, "tree_size": proof.size,
                   "root": proof.root.hex(), "findings": findings})
    elif findings:
        click.echo(f"INVALID proof for frame {proof.frame}: {len(findings)} finding(s)")
        for f in findings:
            click.echo(f"  - {f}")
    else:
        click.echo(f"VALID frame {proof.frame} of {proof.size} is in the tree with root {proof.root.hex()}")
    if findings:
        sys.exit(1)
