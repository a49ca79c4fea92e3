"""Memory of a run is bounded by frame size, not clip length: queues hold a fixed number of bytes.

A 7680×4320 RGB frame is 100 MB; with queues of fixed depth a run held tens of them. Now each
queue between the threads holds at most media.stages.QUEUE_BYTES, so at 8K every queue is one
frame deep. The run here uses 1920×1080 frames with QUEUE_BYTES set to one such frame (the
situation of every 8K run) and measures the frames alive at once with tracemalloc (NumPy reports
its buffers to it), an outside count that does not depend on timing. Clip: a moving colour ramp
encoded by PyAV/FFmpeg (no people from any photograph).
"""

from __future__ import annotations

import tracemalloc
from pathlib import Path

import numpy as np
import pytest

import redact.media.stages as stages
import redact.pipeline as pipeline
from redact.errors import InputError
from redact.media.video import probe
from redact.pipeline import ProcessSettings, estimate_memory_bytes, frames_in_flight, process_video
from redact.provenance.signing import Signer
from redact.vision.records import Poses

W, H = 1920, 1080
FRAME = W * H * 3


def _ramp_clip(path: Path, frames: int = 16) -> Path:
    import av

    with av.open(str(path), "w") as c:
        s = c.add_stream("libx264", rate=25)
        s.width, s.height, s.pix_fmt = W, H, "yuv420p"
        s.options = {"preset": "ultrafast"}
        for i in range(frames):
            img = np.zeros((H, W, 3), np.uint8)
            img[:, :, 0] = (np.arange(W) + 40 * i) % 256
            vf = av.VideoFrame.from_ndarray(img, format="rgb24")
            vf.pts = i
            for pk in s.encode(vf):
                c.mux(pk)
        for pk in s.encode(None):
            c.mux(pk)
    return path


class OnePerson:
    """One person in the middle of every frame, so every frame is drawn into a new buffer."""

    concurrent = True

    def estimate(self, image):
        return Poses(np.array([[400, 200, 1400, 1000]], np.float32), np.array([0.9], np.float32),
                     np.zeros((1, 17, 3), np.float32))


def test_queue_depth_shrinks_with_the_frame_size():
    hd, uhd8k = 1280 * 720 * 3, 7680 * 4320 * 3
    assert [stages.depth_for(hd, d) for d in (1, 2, 4)] == [1, 2, 4]  # HD: the usual depths
    assert [stages.depth_for(uhd8k, d) for d in (1, 2, 4, 8)] == [1, 1, 1, 1]  # 8K: one frame a queue
    assert stages.depth_for(uhd8k, 4) * uhd8k <= max(stages.QUEUE_BYTES, uhd8k)


def test_the_estimate_grows_with_the_frame_size_not_the_length(tmp_path):
    info = probe(_ramp_clip(tmp_path / "ramp.mp4", frames=4))
    from dataclasses import replace

    s = ProcessSettings()
    assert estimate_memory_bytes(info, s) == estimate_memory_bytes(replace(info, frames=100_000), s)
    big = replace(info, width=7680, height=4320)
    assert estimate_memory_bytes(big, s) > 10 * estimate_memory_bytes(replace(info, width=640, height=360), s)
    # at 8K the queues are one frame deep: the look-back plus 9 frames (three queues of one frame and
    # the one each consumer works on, the frames ahead of inference (one per model worker, 2 here), the
    # frame being drawn), where fixed depths held 4 + 1 + 4 + 2 + 1 + 1 + 4 + 1 = 18 besides the look-back
    lookback = int(round(s.lookback_seconds * 25))
    assert frames_in_flight(big, s) <= lookback + 7 + s.model_frames


def test_a_run_holds_no_more_frames_than_its_queues_allow(tmp_path, monkeypatch):
    clip = _ramp_clip(tmp_path / "ramp.mp4")
    monkeypatch.setattr(stages, "QUEUE_BYTES", FRAME)  # every queue one frame deep, as at 8K
    settings = ProcessSettings(lookback_seconds=0)
    bound = frames_in_flight(probe(clip), settings) + 1  # + the encoder's YUV copy and small arrays
    tracemalloc.start()
    try:
        process_video(clip, tmp_path / "out", Signer.from_seed(bytes(32)), settings, estimator=OnePerson())
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak <= bound * FRAME, f"{peak / FRAME:.1f} frames alive at once, bound {bound}"


def test_a_run_that_cannot_fit_in_memory_is_refused_before_any_output(tmp_path, monkeypatch):
    clip = _ramp_clip(tmp_path / "ramp.mp4", frames=4)
    monkeypatch.setattr(pipeline, "available_memory", lambda: 100 * 2**20)
    out = tmp_path / "out"
    with pytest.raises(InputError) as e:
        process_video(clip, out, Signer.from_seed(bytes(32)), ProcessSettings(), estimator=OnePerson())
    assert f"{clip}: a {W}×{H} run needs about" in str(e.value) and "0.1 GiB are available" in str(e.value)
    assert not out.exists()
