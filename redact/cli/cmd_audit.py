"""`redact audit`: an independent check that a redacted video hides everyone (see redact.redaction.audit)."""

from __future__ import annotations

import sys
import time
from pathlib import Path

import click

from redact.cli import main
from redact.cli.common import echo_json, library_errors

AUDIT_CAUTION = (
    "A clean audit does not prove that nobody can be identified: heavy blur defeats a face "
    "detector while people who know someone still recognise them, and gait, clothing, voice and "
    "context identify people too. The audit supports the human review before disclosure; it "
    "does not replace it."
)


class _Progress:
    """Frames done on stderr, at most every few seconds (stdout stays for results)."""

    def __init__(self, quiet: bool):
        self.quiet, self.last = quiet, 0.0

    def __call__(self, done: int, total: int) -> None:
        now = time.perf_counter()
        if self.quiet or (now - self.last < 5.0 and done != total):
            return
        self.last = now
        click.echo(f"audit: frame {done}/{total}", err=True)


def _print_report(report) -> None:
    every = "every frame" if report.settings["step"] == 1 else f"1 in every {report.settings['step']} frames"
    click.echo(f"audited: {report.video} ({report.width}x{report.height}; {report.frames_decoded} frames decoded, "
               f"{report.frames_scanned} scanned: {every})")
    click.echo(f"faces found: {report.faces}  persons found: {report.persons}  "
               f"(face score >= {report.settings['face_score']}, person score >= {report.settings['pose_score']})")
    if report.persons_on_fill or report.faces_on_fill:
        click.echo(f"seen on the redaction's own fill and stick figures (not counted): "
                   f"{report.persons_on_fill} person(s), {report.faces_on_fill} face(s)")
    if report.faces_single:
        click.echo(f"faces seen in one scanned frame only, scored below {report.settings['face_sure_score']} "
                   f"(listed, not counted; check them): {report.faces_single}")
    if report.source is not None:
        click.echo(f"source: {report.source_faces} face(s) found in {report.source}; "
                   f"{report.survived} survived in the redacted video")
    if report.stopped_early:
        click.echo(f"decoding stopped early, the rest was not checked: {report.stopped_early}")
    if report.ranges:
        click.echo(f"frames with findings ({len(report.ranges)} range(s)):")
        for r in report.range_records():
            (a, b), (ta, tb) = r["frames"], r["seconds"]
            click.echo(f"  frames {a}-{b} ({ta:.2f}-{tb:.2f} s): {'; '.join(r['explained'])}")
    click.echo("result: " + ("nothing found above the thresholds" if report.passed
                             else "FOUND people or faces that may be identifiable; review the ranges above"))


@main.command("audit", epilog=f"""\b
Example:
  redact audit lobby-redacted/redacted.mp4
  redact audit lobby-redacted/redacted.mp4 --source lobby.mp4 --json

\b
Exit status: 0 nothing found above the thresholds, 1 faces or persons found
(or the video is damaged), 2 unusable input.

{AUDIT_CAUTION}""")
@click.argument("redacted", type=click.Path(path_type=Path))
@click.option("--source", type=click.Path(path_type=Path), default=None,
              help="The original video: its faces are found too and checked against the redacted copy, "
                   "frame by frame (same frame count needed).")
@click.option("--step", type=click.IntRange(1, 10000), default=1, show_default=True,
              help="Scan every K-th frame only (faster, and may miss a face shown briefly).")
@click.option("--face-score", type=click.FloatRange(0.01, 0.99), default=None,
              help="Face detector score threshold (default: the model's, 0.6). Lower reports more.")
@click.option("--pose-score", type=click.FloatRange(0.01, 0.99), default=0.25, show_default=True,
              help="Person score threshold of the pose model. Lower reports more.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@click.option("--quiet", is_flag=True, help="No progress messages.")
@library_errors
def audit(redacted: Path, source: Path | None, step: int, face_score: float | None, pose_score: float,
          as_json: bool, quiet: bool) -> None:
    """Look for faces and people still detectable in a redacted video.

    A face detector of another model family (MediaPipe BlazeFace, full range, scanning the frame
    and overlapping tiles) and the pose model at a larger input size scan the video. People and
    faces the detectors see in the redaction's own grey fill and stick figures are listed but not
    counted.
    """
    from redact.redaction.audit import AuditSettings, audit_video

    settings = AuditSettings(step=step, face_score=face_score, pose_score=pose_score)
    report = audit_video(redacted, source, settings, progress=_Progress(quiet or as_json))
    if as_json:
        echo_json(report.as_dict())
    else:
        _print_report(report)
        click.echo(AUDIT_CAUTION, err=True)
    sys.exit(0 if report.passed else 1)
