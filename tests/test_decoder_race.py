"""A failing run stops and joins every worker thread before it cleans up (no crash, however often).

A run once crashed with SIGSEGV in 3 of 13 tries: after an error, the staging folder was removed
and the reader's container closed while the decoding thread was still inside FFmpeg. The loops
below repeat each failing case 30 times in a child process (a crash there is a failed test, not
a dead test run) and check, at the moment the staging folder is removed, that no thread of the
pipeline is alive. Outside reference: PyAV/FFmpeg muxes the damaged file (Matroska allows any
presentation order; the decoder hands back frames with the timestamps we gave them).
"""

from __future__ import annotations

import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np


def write_backwards_timestamps(path: Path, width: int = 320, height: int = 240, frames: int = 60,
                               swap_at: int = 20) -> Path:
    """An intra-only H.264 Matroska file whose presentation times of frames swap_at and swap_at+1
    are exchanged: the decoder yields a timestamp lower than the one before (a damaged file)."""
    import av

    enc = av.CodecContext.create("libx264", "w")
    enc.width, enc.height, enc.pix_fmt = width, height, "yuv420p"
    enc.time_base, enc.framerate = Fraction(1, 25), Fraction(25)
    enc.options = {"g": "1", "bf": "0"}  # every frame a key frame, no reordering
    packets = []
    rng = np.random.default_rng(3)
    for i in range(frames):
        vf = av.VideoFrame.from_ndarray(rng.integers(0, 256, (height, width, 3), dtype=np.uint8), format="rgb24")
        vf = vf.reformat(format="yuv420p")
        vf.pts = i
        packets += list(enc.encode(vf))
    packets += list(enc.encode(None))
    times = list(range(frames))
    times[swap_at], times[swap_at + 1] = times[swap_at + 1], times[swap_at]
    with av.open(str(path), "w", format="matroska") as c:
        s = c.add_stream("h264", rate=25)
        s.width, s.height, s.pix_fmt = width, height, "yuv420p"
        s.time_base = Fraction(1, 25)
        s.codec_context.extradata = enc.extradata
        for pk, t in zip(packets, times):
            pk.stream, pk.time_base, pk.pts, pk.dts = s, Fraction(1, 25), t, None
            c.mux(pk)
    return path


_LOOP = r"""
import shutil, sys, threading
from pathlib import Path
import redact.media.video as video
import redact.pipeline as pipeline
from redact.errors import InputError, VideoError
from redact.media.stages import read_ahead
from redact.provenance.signing import Signer
from redact.vision.records import Poses

bad, good, work, rounds = Path(sys.argv[1]), Path(sys.argv[2]), Path(sys.argv[3]), int(sys.argv[4])

def alive():
    return sorted(t.name for t in threading.enumerate() if t.name.startswith("redact-"))

at_cleanup = []
real_rmtree = shutil.rmtree
def spy(path, *a, **k):
    if ".redact-partial-" in str(path):
        at_cleanup.append(alive())
    return real_rmtree(path, *a, **k)
shutil.rmtree = spy

class Nobody:  # finds nobody, quickly; may run on several frames at once like the real model
    concurrent = True
    def estimate(self, image):
        return Poses.empty()

real_writer = video.VideoWriter

class FailingWriter(real_writer):  # the encoder fails at its third frame, mid-stream
    def write(self, image, pts):
        if self.frames_written == 2:
            raise video.VideoError("injected encoder failure")
        super().write(image, pts)

signer = Signer.from_seed(bytes(32))
settings = pipeline.ProcessSettings(lookback_seconds=0)
for i in range(rounds):
    for case in ("timestamps", "encoder"):
        out = work / f"{case}-{i}"
        video.VideoWriter = FailingWriter if case == "encoder" else real_writer
        try:
            pipeline.process_video(bad if case == "timestamps" else good, out, signer, settings, estimator=Nobody())
            raise SystemExit(f"{case} {i}: the run succeeded")
        except InputError as e:
            assert case == "timestamps", (case, e)
            assert str(bad) in str(e) and "timestamps must increase" in str(e), e
        except VideoError as e:
            assert case == "encoder" and "injected encoder failure" in str(e), (case, e)
        assert at_cleanup[-1] == [], (case, i, at_cleanup[-1])
        assert alive() == [], (case, i, alive())
        assert not out.exists(), out
    # close the reader from this thread while another thread decodes
    with video.VideoReader(good) as reader:
        frames = read_ahead(reader.frames(), depth=2)
        next(frames)
        reader.close()
        frames.close()
    assert alive() == [], ("close", i, alive())
print("ok", rounds, len(at_cleanup))
"""


def test_failing_runs_join_every_thread_before_cleanup_30_times(tmp_path, crossing_clip):
    bad = write_backwards_timestamps(tmp_path / "backwards.mkv")
    r = subprocess.run([sys.executable, "-c", _LOOP, str(bad), str(crossing_clip.path), str(tmp_path), "30"],
                       capture_output=True, text=True, timeout=1800)
    assert r.returncode == 0, (r.returncode, r.stderr[-3000:])  # -11 would be the SIGSEGV
    assert r.stdout.split() == ["ok", "30", "60"]


def test_backwards_timestamps_are_refused_with_the_file_named(tmp_path):
    import pytest

    from redact.errors import InputError
    from redact.media.video import VideoReader

    bad = write_backwards_timestamps(tmp_path / "backwards.mkv", frames=30, swap_at=10)
    seen = 0
    with pytest.raises(InputError) as e, VideoReader(bad) as reader:
        for _ in reader.frames():
            seen += 1
    assert seen == 11  # frames 0-10 decode in order; frame 11 goes back in time
    assert str(bad) in str(e.value) and "frame 11 has timestamp" in str(e.value)
