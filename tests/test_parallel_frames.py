"""Several frames inferred at once (ProcessSettings.model_frames) change nothing but the speed.

The clip is the crossing scene of tests/conftest.py (astronaut(): public domain, NASA; camera():
CC0, Lav Varshney). Outside references: hashlib's SHA-256 (FIPS 180-4) for byte equality, PyAV/
FFmpeg to decode the redacted video.
"""

from __future__ import annotations

import hashlib
import json

import av
import numpy as np
import pytest

import redact.vision.models
from redact.media.video import VideoReader
from redact.pipeline import ProcessSettings, inference_workers, process_video
from redact.provenance.signing import Signer
from redact.skeletons.rows import read_rows
from redact.vision.pose import PoseEstimator, PoseSettings

SEED = bytes(range(32))
SAME_BYTES = ("skeletons.jsonl", "tracks.json", "quality.jsonl", "review.json", "frames.sha256")
FAULTS = {4, 9}


def _log(result) -> list[dict]:
    return [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]


@pytest.fixture(scope="module")
def clip(crossing_clip):
    return crossing_clip.path


def test_two_frames_at_once_write_the_same_bytes_as_one_at_a_time(clip, tmp_path, monkeypatch):
    monkeypatch.setattr(redact.vision.models, "default_threads", lambda: 2)
    parallel, serial = ProcessSettings(), ProcessSettings(threads=1)
    assert (parallel.model_frames, parallel.model_threads) == (2, 1)
    assert (serial.model_frames, serial.model_threads) == (1, 1)
    signer = Signer.from_seed(SEED)
    a = process_video(clip, tmp_path / "parallel", signer, parallel)
    b = process_video(clip, tmp_path / "serial", signer, serial)
    assert a.frames == b.frames > 0
    with open(a.package / "skeletons.jsonl", "rb") as f:
        assert sum(len(r.tracks) for r in read_rows(f)) > 0, "nobody detected: the comparison would prove little"
    for name in SAME_BYTES:
        assert hashlib.sha256((a.package / name).read_bytes()).digest() == \
            hashlib.sha256((b.package / name).read_bytes()).digest(), f"{name} differs"
    model_a = next(e for e in _log(a) if e["kind"] == "model")
    model_b = next(e for e in _log(b) if e["kind"] == "model")
    assert (model_a["frames_at_once"], model_b["frames_at_once"]) == (2, 1)


class _FaultyOnFrames(PoseEstimator):
    """The bundled estimator, raising on chosen frames recognised by their pixels (so the answer
    does not depend on which thread calls first)."""

    def __init__(self, clip, faults):
        base = PoseEstimator.default(PoseSettings(), threads=1)
        super().__init__(base.session, base.settings)
        with VideoReader(clip, hash_file=False) as r:
            self.bad = {hashlib.sha256(f.image.tobytes()).digest() for f in r.frames() if f.index in faults}

    def estimate(self, image):
        if hashlib.sha256(np.ascontiguousarray(image).tobytes()).digest() in self.bad:
            raise RuntimeError("injected fault")
        return super().estimate(image)


def test_a_fault_on_a_frame_inferred_in_parallel_obscures_exactly_that_frame(clip, tmp_path, monkeypatch):
    monkeypatch.setattr(redact.vision.models, "default_threads", lambda: 2)
    settings = ProcessSettings()
    assert settings.model_frames == 2
    estimator = _FaultyOnFrames(clip, FAULTS)
    assert inference_workers(settings, estimator) == 2  # a PoseEstimator may be shared between threads
    assert inference_workers(settings, object()) == 1   # an estimator that does not say so is not
    result = process_video(clip, tmp_path / "out", Signer.from_seed(SEED), settings, estimator=estimator)
    assert set(result.fault_frames) == FAULTS
    with av.open(str(result.video)) as c:
        out = [f.to_ndarray(format="rgb24") for f in c.decode(video=0)]
    assert len(out) == result.frames
    for i in range(len(out)):
        uniform = out[i].std() < 2.0
        assert uniform == (i in FAULTS), f"frame {i}: uniform={uniform}"
    faults = [e for e in _log(result) if e["kind"] == "fault"]
    assert len(faults) == 1 and faults[0]["count"] == len(FAULTS)
