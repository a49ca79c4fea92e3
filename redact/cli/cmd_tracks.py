"""`redact tracks`: a track sheet for the operator answering a request for footage (redact.tracksheet)."""

from __future__ import annotations

from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors
from redact.cli.options import track_options
from redact.cli.progress import FrameProgress
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


Track ids are only valid for the same video and settings. The sheet's fingerprint
(settings_sha256 in plan-template.json) covers every setting that decides them: the pose model
(--pose-model) and its SHA-256, --input-size, --score-threshold, --coast-seconds,
--detect-every, and the detector's and tracker's built-in settings; the plan also names the
source file by its SHA-256. Give the later `redact process` run exactly the same options:
`redact process --plan` refuses a plan whose fingerprint or source differs. --threads only
changes the speed.

{SHEET_CAUTION}
Tracking makes mistakes (one person can get two ids; ids can swap when people cross): check
every picture, and review the redacted copy before disclosure.""")
@click.argument("source", type=click.Path(path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="The sheet, a new folder to create (must not exist).")
@track_options
@click.option("--json", "as_json", is_flag=True, help="Print the track list as one JSON document on stdout.")
@click.option("--quiet", is_flag=True, help="No progress line.")
@library_errors
def tracks(source: Path, out: Path, settings, as_json: bool, quiet: bool) -> None:
    """Write one picture per tracked person in SOURCE (first, middle and last appearance) with
    its track id, time range and frame count, plus tracks.json and a plan template."""
    from redact.tracksheet import make_track_sheet

    if not source.exists():
        raise InputError(f"{source}: no such file")
    progress = FrameProgress(quiet or as_json, label="tracks")
    try:
        items = make_track_sheet(source, out, settings, progress=progress)
    finally:
        progress.close()
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
