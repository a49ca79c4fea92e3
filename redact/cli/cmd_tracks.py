"""`redact tracks`: a track sheet for the operator answering a request for footage (redact.tracksheet)."""

from __future__ import annotations

from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.options import pipeline_options
from redact.errors import InputError

SHEET_CAUTION = (
    "SENSITIVE: the sheet shows people WITHOUT redaction. Keep it under your control, never put it "
    "into a package or disclose it, and delete it after use."
)


@main.command("tracks", epilog=f"""\b
Example:
  redact tracks lobby.mp4 --out lobby-sheet
  # look at lobby-sheet/track-*.png, find the requester, then:
  cp lobby-sheet/plan-template.json plan.json   # add the id(s) to keep_visible
  redact process lobby.mp4 --out lobby-redacted --signing-key keys/steward.private.pem --plan plan.json

Use exactly the same detection and tracking options (--score-threshold, --input-size,
--coast-seconds) as the later `redact process` run: track ids are only valid for the same video
and settings, and `redact process --plan` refuses a plan made with others.

{SHEET_CAUTION}
Tracking makes mistakes (one person can get two ids; ids can swap when people cross): check
every picture, and review the redacted copy before disclosure.""")
@click.argument("source", type=click.Path(path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="The sheet, a new folder to create (must not exist).")
@pipeline_options
@click.option("--json", "as_json", is_flag=True, help="Print the track list as one JSON document on stdout.")
@library_errors
def tracks(source: Path, out: Path, settings, as_json: bool) -> None:
    """Write one picture per tracked person in SOURCE (first, middle and last appearance) with
    its track id, time range and frame count, plus tracks.json and a plan template."""
    from redact.tracksheet import make_track_sheet

    if not source.exists():
        raise InputError(f"{source}: no such file")
    items = make_track_sheet(source, out, settings)
    if as_json:
        echo_json({"sheet": str(out), "sensitive": True, "tracks": items})
    else:
        click.echo(f"track sheet: {out}  ({len(items)} track(s))")
        for t in items:
            click.echo(f"  track {t['id']:>4}  {t['first_t']:8.2f}-{t['last_t']:<8.2f} s  "
                       f"frames {t['first_frame']}-{t['last_frame']}  observed {t['frames_observed']}  "
                       f"{out / t['image']}")
        click.echo(f"plan template: {out / 'plan-template.json'}")
    click.echo(f"warning: {SHEET_CAUTION}", err=True)
