"""`redact process` and `redact demo`: the main job from the command line."""

from __future__ import annotations

import os
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import click

from redact.cli import CAUTION, main
from redact.cli.cmd_keys import PASSPHRASE_ENV, read_passphrase
from redact.cli.common import echo_json, library_errors
from redact.cli.options import disclosure_options, pipeline_options
from redact.cli.privacy_options import privacy_options
from redact.errors import InputError

DEMO_PASSPHRASE = "demo only - not a secret"


class _Progress:
    """A progress line on stderr with frames/s and ETA (stdout stays for results)."""

    def __init__(self, quiet: bool):
        self.quiet = quiet
        self.start = time.perf_counter()
        self.last = 0.0
        self.tty = sys.stderr.isatty()

    def __call__(self, done: int, total: int) -> None:
        now = time.perf_counter()
        if self.quiet or (now - self.last < (0.25 if self.tty else 5.0) and done != total):
            return
        self.last = now
        fps = done / max(now - self.start, 1e-9)
        eta = max(total - done, 0) / fps if fps > 0 else 0.0
        pct = 100.0 * done / total if total else 0.0
        line = f"frame {done}/{total} ({pct:5.1f} %)  {fps:5.1f} frames/s  ETA {eta:5.0f} s"
        click.echo(("\r" + line) if self.tty else line, err=True, nl=not self.tty)

    def close(self) -> None:
        if self.tty and not self.quiet:
            click.echo("", err=True)


def _summary(result) -> dict:
    return {
        "video": str(result.video), "package": str(result.package), "frames": result.frames,
        "tracks": result.tracks, "fault_frames": len(result.fault_frames),
        "review_ranges": [{"frames": [r.frame_start, r.frame_end], "seconds": [r.t_start, r.t_end],
                           "reasons": list(r.reasons)} for r in result.review],
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
            click.echo(f"  frames {r.frame_start}-{r.frame_end} ({r.t_start:.2f}-{r.t_end:.2f} s): {', '.join(r.reasons)}")
    else:
        click.echo("no range flagged; a person must still review the whole video before disclosure")


def _run(source: Path, out: Path, signer, settings, disclosure, as_json: bool, quiet: bool, privacy=None,
         audit: bool = False, plan: Path | None = None):
    from redact.pipeline import process_video

    progress = _Progress(quiet or as_json)
    try:
        result = process_video(source, out, signer, settings, disclosure=disclosure, privacy=privacy,
                               progress=progress, audit=audit, plan=plan)
    finally:
        progress.close()
    if result.stopped_early:
        click.echo(f"warning: the source is damaged; {result.stopped_early}; only those frames were processed",
                   err=True)
    if as_json:
        echo_json(_summary(result))
    else:
        _print_summary(result)
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
  redact process lobby.mp4 --out lobby-redacted --key keys/steward.private.pem \\
      --recipient "J. Doe" --purpose "subject access request"

The key passphrase is read from ${PASSPHRASE_ENV} or prompted (hidden).
Outputs: OUT/redacted.mp4 and OUT/package/ (signed, skeleton-only). Nothing in OUT is
overwritten; an interrupted run leaves only a hidden .redact-partial-* folder.

{CAUTION}""")
@click.argument("source", type=click.Path(path_type=Path, dir_okay=True))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path), help="Output folder (created if missing).")
@click.option("--key", "key", required=True, type=click.Path(path_type=Path),
              help="Private signing key (PKCS#8 PEM from `redact keygen`).")
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
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@click.option("--quiet", is_flag=True, help="No progress line.")
@library_errors
def process(source: Path, out: Path, key: Path, settings, privacy, disclosure, plan: Path | None, audit: bool,
            as_json: bool, quiet: bool) -> None:
    """Obscure every person in a video and write a signed skeleton-only package.

    Each person is tracked and obscured in every frame, including frames where the detector
    loses them for a while; a frame that cannot be processed is obscured whole. Frames where
    people are likely missed (dark, blurred, low confidence, lost tracks) are listed for review.
    """
    from redact.provenance.signing import load_private_key

    if not source.exists():
        raise InputError(f"{source}: no such file")
    if not key.is_file():
        raise InputError(f"--key {key}: no such key file (create one with `redact keygen`)")
    signer = load_private_key(key, read_passphrase(confirm=False))
    _run(source, out, signer, settings, disclosure, as_json, quiet, privacy=privacy, audit=audit, plan=plan)


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
use `redact keygen` and `redact process --key` for real material.

{CAUTION}""")
@click.option("--out", "out", type=click.Path(path_type=Path), default=None,
              help="Output folder (default: redact-demo-output/<UTC time>).")
@click.option("--clip", type=click.Path(path_type=Path, exists=True, dir_okay=False), default=None,
              help="Another clip to run the demo on.")
@pipeline_options
@click.option("--json", "as_json", is_flag=True, help="Print one JSON summary on stdout.")
@click.option("--quiet", is_flag=True, help="No progress line.")
@library_errors
def demo(out: Path | None, clip: Path | None, settings, as_json: bool, quiet: bool) -> None:
    """Run the whole job on the invented demo scene and say what to open first."""
    from redact.provenance.signing import generate_key, load_private_key

    source = clip or demo_clip()
    out = out or Path("redact-demo-output") / datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    keys = out / "demo-key"
    keys.mkdir(parents=True, exist_ok=True)
    private, public = keys / "demo.private.pem", keys / "demo.public.pem"
    if not private.exists():
        generate_key(private, public, DEMO_PASSPHRASE.encode())
    signer = load_private_key(private, DEMO_PASSPHRASE.encode())
    disclosure = {"recipient": "demo recipient", "organisation": "demo", "purpose": "demonstration of redact",
                  "date": datetime.now(UTC).date().isoformat()}
    result = _run(source, out, signer, settings, disclosure, as_json, quiet)
    from redact.provenance.signing import load_public_key
    from redact.report.document import build_report

    report = out / "report.html"
    tmp = out / ".report.html.partial"
    tmp.write_bytes(build_report(result.package, [load_public_key(public)], video=result.video))
    os.replace(tmp, report)
    if not as_json:
        click.echo("")
        click.echo("Open first:")
        click.echo(f"  1. {report}  - the disclosure report: signature status, flagged ranges, cautions")
        click.echo(f"  2. {result.video}  - the redacted copy; step through the review ranges above")
        click.echo(f"  3. redact inspect {result.package}  - what the package holds")
        click.echo(f"  4. redact verify {result.package} --key {public} --video {result.video}")
        click.echo(f"\n{CAUTION}")
