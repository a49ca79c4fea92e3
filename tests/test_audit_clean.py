"""An audit that fails on clean output teaches people to ignore it: after `process` (default style,
stick figures on grey) the demo clip and every synthetic clip the tests use audit clean, while the
same clip unredacted fails.

People in the synthetic clips come from scikit-image's stills loaded from the installed package
(`astronaut()`: public domain, NASA; `camera()`: CC0, Lav Varshney); the demo scene is invented
(demo_clips/README.md). The audit's detectors are independent of the redaction's pose model run:
MediaPipe BlazeFace (Apache-2.0) for faces and the float32 pose model at 960 px for people
(redact.redaction.audit). The synthetic clips are scanned frame by frame; the demo (1280×720,
about 270 frames) every 2nd frame, to keep the suite within its time on two shared cores (every
frame was scanned once by hand: 0 faces, 0 persons, 14 figure detections on the fill).
"""

from __future__ import annotations

import pytest
from conftest import crossing_spec, make_clip
from test_stride import held_out_spec

from redact.cli.cmd_process import demo_clip
from redact.pipeline import process_video
from redact.provenance.signing import Signer
from redact.redaction.audit import AuditSettings, audit_video

SEED = bytes(range(32))
SPECS = {
    "crossing 320x240 (conftest)": lambda: crossing_spec(),
    "crossing 640x360 (test_audit)": lambda: crossing_spec(640, 360, seconds=1.0),
    "crossing seed 1 (test_batch)": lambda: crossing_spec(seconds=1.0, seed=1),
    "held-out walkers (test_stride)": held_out_spec,
}


def _check(source, out, step: int, unredacted_step: int) -> None:
    result = process_video(source, out, Signer.from_seed(SEED))
    clean = audit_video(result.video, settings=AuditSettings(step=step))
    found = [(f.frame, len(f.faces), len(f.persons)) for f in clean.frames if f.has_findings]
    assert clean.passed and clean.faces == 0 and clean.persons == 0, found
    assert clean.frames_scanned == -(-clean.frames_decoded // step)
    raw = audit_video(source, settings=AuditSettings(step=unredacted_step))
    assert not raw.passed and raw.faces > 0 and raw.persons > 0


@pytest.mark.parametrize("name", sorted(SPECS))
def test_synthetic_clip_audits_clean_after_process_and_fails_unredacted(tmp_path, name):
    clip = make_clip(tmp_path, "clip.mp4", SPECS[name]())
    _check(clip.path, tmp_path / "out", step=1, unredacted_step=5)


def test_demo_audits_clean_after_process_and_fails_unredacted(tmp_path):
    _check(demo_clip(), tmp_path / "out", step=2, unredacted_step=25)
