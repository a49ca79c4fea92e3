"""`redact review` (the local review page) and `redact disclose` (a new disclosure record, no reprocessing)."""

from __future__ import annotations

from pathlib import Path

import click

from redact.cli import main
from redact.cli.cmd_keys import PASSPHRASE_ENV, read_passphrase
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import check_signing_key, load_trusted_keys, signing_key_option, trusted_keys_option
from redact.cli.options import disclosure_options

REVIEW_CAUTION = ("Automated redaction misses people: check every flagged range and watch the whole "
                  "redacted video before disclosure. The source view shows people unredacted (sensitive). "
                  "Notes are signed and disclosed: write no personal data in them. Local data-protection law "
                  "and your data-protection officer decide what may be shared.")


def _keys(trusted: tuple[Path, ...], signing_key: Path):
    from redact.provenance.signing import load_private_key

    keys = load_trusted_keys(trusted)
    return keys, load_private_key(check_signing_key(signing_key), read_passphrase(confirm=False))


@main.command("review", epilog=f"""\b
Example:
  redact review lobby-out --source lobby.mp4 --trusted-key keys/steward.public.pem \\
      --signing-key keys/steward.private.pem

Prints an address with a one-time token: open it in a browser on this computer. The server
listens on 127.0.0.1 only and stops with Ctrl+C. "Apply" writes OUT/review-N/redacted.mp4 and a
new signed OUT/review-N/package/ (nothing existing is changed); run `redact review OUT` again to
go on from the newest reviewed copy. The key passphrase is read from ${PASSPHRASE_ENV} or prompted.

{REVIEW_CAUTION}""")
@click.argument("out", type=click.Path(exists=True, file_okay=False, path_type=Path))
@click.option("--source", required=True, type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="The original video the output was made from (checked against the signed SHA-256).")
@trusted_keys_option(help="Trusted public key, a file (NAME.public.pem): the output's package must verify "
                         "with it; repeat for several (e.g. a countersigned copy).")
@signing_key_option(help="Private key that signs the reviewed package, a file (NAME.private.pem).")
@click.option("--port", type=click.IntRange(0, 65535), default=0, show_default=True,
              help="Port on 127.0.0.1 (0: a free one chosen by the system).")
@library_errors
def review(out: Path, source: Path, trusted_keys: tuple[Path, ...], signing_key: Path, port: int) -> None:
    """Open the review page for OUT (a folder written by `redact process`): step through the
    redacted copy, check each flagged range, draw what was missed, and apply: a re-rendered copy
    and a signed review record, without running the model again."""
    from redact.review.server import ReviewServer, ReviewSession

    keys, signer = _keys(trusted_keys, signing_key)
    session = ReviewSession(out, source, keys, signer)
    server = ReviewServer(session, port)
    click.echo(f"reviewing {session.output.folder} ({session.output.frames} frames, "
               f"{len(session.state.ranges)} flagged range(s))", err=True)
    click.echo(f"caution: {REVIEW_CAUTION}", err=True)
    click.echo("open this address in a browser on this computer (Ctrl+C stops the server):", err=True)
    click.echo(server.url)
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        click.echo("stopped", err=True)
    finally:
        server.stop()


@main.command("disclose", epilog=f"""\b
Example:
  redact disclose lobby-out/review-1 --trusted-key keys/steward.public.pem \\
      --signing-key keys/steward.private.pem --recipient "A. Person" \\
      --organisation "Example Trust" --purpose "subject access request" --request-ref SAR-17

Writes OUT/disclosure-N/: a signed record (date, recipient, organisation, purpose, reference)
naming the same redacted copy and package, without processing the video again. Check it with
`redact verify OUT/disclosure-N --trusted-key KEY --video OUT/redacted.mp4`. The key passphrase is read
from ${PASSPHRASE_ENV} or prompted.

Disclose only what your data-protection officer has approved; a person must have reviewed the copy.""")
@click.argument("out", type=click.Path(exists=True, file_okay=False, path_type=Path))
@trusted_keys_option(help="Trusted public key, a file (NAME.public.pem): the output's package must verify "
                         "with it; repeat for several.")
@signing_key_option(help="Private key that signs the disclosure record, a file (NAME.private.pem).")
@disclosure_options
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@library_errors
def disclose(out: Path, trusted_keys: tuple[Path, ...], signing_key: Path, disclosure, as_json: bool) -> None:
    """Record a new disclosure of OUT (an output of `process` or `review`) in a new signed record."""
    from redact.errors import InputError
    from redact.review.disclose import disclose_again

    if not disclosure:
        raise InputError("give the disclosure: --recipient, --organisation, --purpose, --request-ref")
    keys, signer = _keys(trusted_keys, signing_key)
    rec = disclose_again(out, keys, signer, disclosure)
    if as_json:
        echo_json({"record": str(rec.path), "key_id": rec.key_id, "statement_sha256": rec.statement_sha256,
                   "parent_statement_sha256": rec.parent_statement_sha256, "disclosure": rec.disclosure})
        return
    click.echo(f"disclosure record: {rec.path}  (signed, key id {rec.key_id})")
    click.echo(f"names package statement sha256 {rec.parent_statement_sha256}")
