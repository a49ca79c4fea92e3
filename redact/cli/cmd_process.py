"""`redact process` and `redact demo`: the main job from the command line."""

from __future__ import annotations

import os
import sys
from datetime import UTC, datetime
from pathlib import Path

import click

from redact.cli import CAUTION, main
from redact.cli.cmd_keys import PASSPHRASE_ENV, read_passphrase
from redact.cli.common import echo_json, library_errors
from redact.cli.keyfiles import check_signing_key, public_key_beside, signing_key_option
from redact.cli.options import disclosure_options, pipeline_options
from redact.cli.privacy_options import privacy_options
from redact.cli.progress import FrameProgress
from redact.errors import InputError, OutputError
from redact.fsio import atomic_write

DEMO_PASSPHRASE = "demo only - not a secret"
REPORT_NAME = "report.html"


def _summary(result, report: Path | None = None, open_first: list[dict] | None = None) -> dict:
    return {
        "report": None if report is None else str(report),
        "open_first": open_first or [],
        "video": str(result.video), "package": str(result.package), "frames": result.frames,
        "tracks": result.tracks, "fault_frames": len(result.fault_frames),
        "review_ranges": [r.as_record() for r in result.review],
        "frames_per_second": round(result.fps, 2), "seconds": round(result.seconds, 2),
        "stopped_early": result.stopped_early, "key_id": result.key_id, "source_sha256": result.source_sha256,
        "audit": result.audit,
    }


def _print_summary(result) -> None:
    s = _summary(result)
    click.echo(f"redacted video: {s['video']}")
    click.echo(f"package:        {s['package']}  (signed, key id {s['key_id']})")
    click.echo(f"frames: {s['frames']}  people tracked: {s['tracks']}  frames failed and fully obscured: "
               f"{s['fault_frames']}  speed: {s['frames_per_second']:.1f} frames/s")
    if result.review:
        click.echo(f"review before disclosure: {len(result.review)} range(s) flagged:")
        for r in result.review:
            click.echo(f"  {r.describe()}")
    else:
        click.echo("no range flagged; a person must still review the whole video before disclosure")


def _check_report_free(out: Path, write_report: bool) -> Path | None:
    """OUT/report.html, refused up front when it already exists (outputs are never overwritten)."""
    if not write_report:
        return None
    report = out / REPORT_NAME
    if os.path.lexists(report):
        raise OutputError(f"{report} already exists; choose a new --out (outputs are never overwritten)")
    return report


def _write_report(report: Path, result, signer) -> None:
    """The disclosure report of the run's package, checked with the key that just signed it, written
    through a hidden temporary name and renamed into place (never over an existing file: redact.fsio)."""
    from redact.report.document import build_report

    atomic_write(report, build_report(result.package, [signer.public_key], video=result.video))


def open_first(result, report: Path | None, public_key: str) -> list[dict]:
    """What to open after a run, in order: the report, the redacted copy, the package, its check."""
    items = []
    if report is not None:
        items.append({"open": str(report), "why": "the disclosure report: signature status, flagged ranges, cautions"})
    items += [
        {"open": str(result.video), "why": "the redacted copy; step through the review ranges, then watch it all"},
        {"open": f"redact inspect {result.package}", "why": "what the package holds"},
        {"open": f"redact verify {result.package} --trusted-key {public_key} --video {result.video}",
         "why": "check the signature and every file, as a recipient would"},
    ]
    return items


def _print_open_first(items: list[dict]) -> None:
    click.echo("")
    click.echo("Open first:")
    for n, item in enumerate(items, 1):
        click.echo(f"  {n}. {item['open']}  - {item['why']}")
    click.echo(f"\n{CAUTION}")


def _run(source: Path, out: Path, signer, settings, disclosure, as_json: bool, quiet: bool, privacy=None,
         audit: bool = False, plan: Path | None = None, write_report: bool = True,
         public_key: str = "NAME.public.pem"):
    from redact.pipeline import process_video

    report = _check_report_free(out, write_report)
    progress = FrameProgress(quiet or as_json)
    try:
        result = process_video(source, out, signer, settings, disclosure=disclosure, privacy=privacy,
                               progress=progress, audit=audit, plan=plan)
    finally:
        progress.close()
    for line in result.notices:
        click.echo(f"note: {line}", err=True)
    if result.stopped_early:
        click.echo(f"warning: {source}: the source is damaged; {result.stopped_early}; only those frames were "
                   "processed", err=True)
    if report is not None:
        _write_report(report, result, signer)
    items = open_first(result, report, public_key)
    if as_json:
        echo_json(_summary(result, report, items))
    else:
        _print_summary(result)
        _print_open_first(items)
    if result.audit is not None:
        a = result.audit
        verdict = "passed" if a["passed"] else "FOUND SOMETHING"
        click.echo(f"independent audit {verdict}: faces {a['faces']}, persons {a['persons']}, source faces "
                   f"surviving {a['survived']} of {a['source_faces']} (recorded in the log)", err=True)
        if not a["passed"]:
            click.echo("error: the audit found faces or people in the redacted video; the outputs are written "
                       "but must not be disclosed before review (see `redact audit`)", err=True)
            sys.exit(1)
    return result


@main.command("process", epilog=f"""\b
Example:
  redact keygen --out-dir keys --name steward
  redact process lobby.mp4 --out lobby-redacted --signing-key keys/steward.private.pem \\
      --recipient "J. Doe" --purpose "subject access request"

The key passphrase is read from ${PASSPHRASE_ENV} or prompted (hidden).
Outputs in the folder OUT: redacted.mp4, package/ (signed, skeleton-only) and report.html (the
disclosure report; --no-report leaves it out). Nothing in OUT is overwritten; an interrupted run
leaves only a hidden .redact-partial-* folder. The run ends with what to open first.

{CAUTION}""")
@click.argument("source", type=click.Path(path_type=Path, dir_okay=True))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="Output folder (created if missing).")
@signing_key_option()
@pipeline_options
@privacy_options
@disclosure_options
@click.option("--plan", "plan", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="A redaction plan (JSON, see docs/plan-format.md): tracks to leave visible, e.g. the "
                   "person who asked for the footage (ids from `redact tracks`), and extra regions or "
                   "frames to obscure. Validated before any output.")
@click.option("--audit", is_flag=True,
              help="After redacting, scan the redacted video and the source with independent detectors "
                   "(a face detector and the pose model at a larger size); exit 1 if anything is found. "
                   "A clean audit does not replace human review.")
@click.option("--no-report", "no_report", is_flag=True,
              help="Do not write the disclosure report OUT/report.html (written by default).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@click.option("--quiet", is_flag=True, help="No progress line.")
@library_errors
def process(source: Path, out: Path, signing_key: Path, settings, privacy, disclosure, plan: Path | None, audit: bool,
            no_report: bool, as_json: bool, quiet: bool) -> None:
    """Obscure every person in a video and write a signed skeleton-only package.

    Each person is tracked and obscured in every frame, including frames where the detector
    loses them for a while; a frame that cannot be processed is obscured whole. Frames where
    people are likely missed (dark, blurred, low confidence, lost tracks) are listed for review.
    """
    from redact.provenance.signing import load_private_key

    if not source.exists():
        raise InputError(f"{source}: no such file")
    signer = load_private_key(check_signing_key(signing_key), read_passphrase(confirm=False))
    _run(source, out, signer, settings, disclosure, as_json, quiet, privacy=privacy, audit=audit, plan=plan,
         write_report=not no_report, public_key=public_key_beside(signing_key))


def demo_clip() -> Path:
    """The demo clip shipped in the repository's demo_clips/ folder."""
    here = Path(__file__).resolve().parents[2] / "demo_clips"
    clips = sorted(here.glob("*.mp4")) if here.is_dir() else []
    if not clips:
        raise InputError("the demo clip is not here (it ships in the repository's demo_clips/ folder; "
                         "run from a checkout installed with `pip install -e .`, or pass --clip)")
    return clips[0]


@main.command("demo", epilog=f"""\b
Example:
  redact demo                # writes redact-demo-output/<time>/
  redact demo --out demo-output

The demo signs with a throw-away key made for this run (passphrase "{DEMO_PASSPHRASE}");
use `redact keygen` and `redact process --signing-key` for real material.

{CAUTION}""")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Output folder (default: redact-demo-output/<UTC time>).")
@click.option("--clip", type=click.Path(path_type=Path, exists=True, dir_okay=False), default=None,
              help="Another clip to run the demo on.")
@signing_key_option(required=False, help="Sign with this private key, a file (NAME.private.pem) instead of "
                                         "a throw-away key made for the demo.")
@pipeline_options
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@click.option("--quiet", is_flag=True, help="No progress line.")
@library_errors
def demo(out: Path | None, clip: Path | None, signing_key: Path | None, settings, as_json: bool,
         quiet: bool) -> None:
    """Run the whole job on the invented demo scene and say what to open first."""
    from redact.provenance.signing import generate_key, load_private_key

    source = clip or demo_clip()
    out = out or Path("redact-demo-output") / datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    if signing_key is not None:
        signer = load_private_key(check_signing_key(signing_key), read_passphrase(confirm=False))
        public_key = public_key_beside(signing_key)
    else:
        keys = out / "demo-key"
        keys.mkdir(parents=True, exist_ok=True)
        private, public = keys / "demo.private.pem", keys / "demo.public.pem"
        if not private.exists():
            generate_key(private, public, DEMO_PASSPHRASE.encode())
        signer = load_private_key(private, DEMO_PASSPHRASE.encode())
        public_key = str(public)
    disclosure = {"recipient": "demo recipient", "organisation": "demo", "purpose": "demonstration of redact",
                  "date": datetime.now(UTC).date().isoformat()}
    _run(source, out, signer, settings, disclosure, as_json, quiet, public_key=public_key)
