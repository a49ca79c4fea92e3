"""`redact inspect`: a readable summary of a package (source, model, key, counts, flagged ranges)."""

from __future__ import annotations

from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import load_trusted_keys, trusted_keys_option


@main.command("inspect", epilog="""\b
Example:
  redact inspect out/package --trusted-key steward.public.pem
  redact inspect out/package.tar --json

Without --trusted-key the summary is read from an UNVERIFIED package: run `redact verify` before relying
on it. Skeleton data is pseudonymised, not anonymous: handle the package as personal data.""")
@click.argument("package", type=click.Path(exists=True, path_type=Path))
@trusted_keys_option(required=False, help="Trusted public key, a file (NAME.public.pem); when given, the package "
                                           "is verified first. Repeat for several.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@library_errors
def inspect(package: Path, trusted_keys: tuple[Path, ...], as_json: bool) -> None:
    """Summarise PACKAGE: source, model, key id, counts of frames/people/tracks, flagged ranges."""
    from redact.provenance.summary import summarise_package

    trusted = load_trusted_keys(trusted_keys)
    summary = summarise_package(package, trusted or None)
    if as_json:
        echo_json(summary)
        return
    if not summary["verified"]:
        click.echo("warning: NOT VERIFIED (no --trusted-key given); run `redact verify` before relying on this",
                   err=True)
    for w in summary["warnings"]:
        click.echo(f"WARNING: {w}")
    src, model, counts = summary["source"], summary["model"], summary["counts"]
    click.echo(f"package:  {package} ({'verified' if summary['verified'] else 'unverified'})")
    click.echo(f"key id:   {summary['key_id']}")
    click.echo(f"source:   {src.get('name')}  {src.get('bytes')} bytes  {src.get('frames')} frames  "
               f"{src.get('width')}x{src.get('height')}  {src.get('fps')} fps")
    click.echo(f"          sha256 {src.get('sha256')}")
    click.echo(f"model:    {model.get('id')}  licence {model.get('licence')}")
    click.echo(f"created:  {summary['created']}  by {summary['tool']}")
    click.echo(f"counts:   {counts['frames']} frame rows, {counts['tracks']} tracks, "
               f"{counts['fault_frames']} fault frames")
    click.echo(f"people:   {counts['detections']} person detections, {counts['predicted']} positions predicted "
               f"by the tracker between detections ({counts['people']} person rows in all)")
    click.echo(f"log:      {summary['log_entries']} entries")
    flagged = summary["flagged"]
    click.echo(f"flagged for review: {len(flagged)} range(s)")
    for r in flagged:
        (a, b), (ta, tb) = r["frames"], r["seconds"]
        when = f" ({ta:.2f}-{tb:.2f} s)" if all(isinstance(t, (int, float)) for t in (ta, tb)) else ""
        click.echo(f"  frames {a}-{b}{when}: {'; '.join(r['explained']) or 'no reason given'}")
    click.echo("Skeleton data is pseudonymised, not anonymous; flagged frames need human review.", err=True)
