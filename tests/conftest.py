"""Shared pytest fixtures: small moving-still clips with exact ground truth, and named bad inputs.

People in the clips come from scikit-image's stills, loaded from the installed package:
astronaut() is public domain (NASA), camera() is CC0 (photographer Lav Varshney).
Clips are small (320×240, 2 s at 25 fps) so the suite stays fast; session-scoped clips are
shared, so treat them as read-only.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import pytest
from click.testing import CliRunner

from redact.media import synthetic as syn


@dataclass(frozen=True)
class SyntheticClip:
    """A clip on disk, the scene it was rendered from, and its per-frame truth."""

    path: Path
    spec: syn.SceneSpec
    truths: list


def crossing_spec(width: int = 320, height: int = 240, seconds: float = 2.0, seed: int = 0) -> syn.SceneSpec:
    """Two people crossing: the astronaut (public domain, NASA) walks in from off-screen left to the
    right; the camera man (CC0, Lav Varshney), mirrored, walks right to left through a dim stretch
    on the right third of the frame; both are partly off-screen at some point."""
    w, h = width, height
    return syn.SceneSpec(
        width=w, height=h, fps=Fraction(25), seconds=seconds,
        actors=(
            syn.Actor("astronaut", ((0.0, -0.05 * w, 0.50 * h, 0.62 * h), (seconds, 0.95 * w, 0.50 * h, 0.62 * h))),
            syn.Actor("camera", ((0.0, 1.05 * w, 0.55 * h, 0.50 * h), (seconds, 0.10 * w, 0.55 * h, 0.50 * h)),
                      mirror=True),
        ),
        background="hall", dim_region=(int(0.66 * w), 0, w, h), dim_factor=0.3, seed=seed,
    )


def make_clip(directory: Path, name: str = "clip.mp4", spec: syn.SceneSpec | None = None) -> SyntheticClip:
    """Write a moving-still clip into directory and return it with its truth."""
    spec = spec or crossing_spec()
    path = Path(directory) / name
    truths = syn.write_clip(spec, path)
    return SyntheticClip(path, spec, truths)


@pytest.fixture(scope="session")
def crossing_clip(tmp_path_factory) -> SyntheticClip:
    """320×240, 25 fps, 2 s: two people crossing, one partly off-screen, one through a dim stretch."""
    return make_clip(tmp_path_factory.mktemp("clips"), "crossing.mp4")


@pytest.fixture(scope="session")
def clip_with_audio(tmp_path_factory) -> SyntheticClip:
    """The crossing scene (1 s) with a 440 Hz AAC tone, written with PyAV."""
    spec = crossing_spec(seconds=1.0)
    path = tmp_path_factory.mktemp("clips") / "with_audio.mp4"
    return SyntheticClip(path, spec, syn.write_clip_with_audio(spec, path))


@pytest.fixture
def clip_factory(tmp_path):
    """Call with (name, spec=None) to write a fresh clip into this test's tmp_path."""
    return lambda name="clip.mp4", spec=None: make_clip(tmp_path, name, spec)


@pytest.fixture
def bad_inputs(tmp_path, crossing_clip) -> dict[str, Path]:
    """Named unusable inputs: each must give a clear InputError (or stop early, for truncation)."""
    d = tmp_path
    empty = d / "empty.mp4"
    empty.write_bytes(b"")
    return {
        "missing": d / "does_not_exist.mp4",
        "directory": d,
        "text": syn.write_text_file(d / "notes.mp4"),
        "png": syn.write_png(d / "still.png"),
        "empty": empty,
        "zero_frames": syn.write_zero_frame_video(d / "zero.avi"),
        "truncated": syn.write_truncated(crossing_clip.path, d / "truncated.mp4", 0.5),
    }


class ScriptedEstimator:
    """The real default estimator, except on chosen calls (frame indices when every frame is
    detected): `misses` find nobody (the tracker must coast), `faults` raise (fail closed)."""

    def __init__(self, misses=(), faults=(), settings=None):
        from redact.vision.pose import PoseEstimator, PoseSettings

        self.inner = PoseEstimator.default(settings or PoseSettings())
        self.misses, self.faults, self.calls = set(misses), set(faults), 0

    def estimate(self, image):
        from redact.vision.records import Poses

        i = self.calls
        self.calls += 1
        if i in self.faults:
            raise RuntimeError(f"injected fault at call {i}")
        poses = self.inner.estimate(image)
        return Poses.empty() if i in self.misses else poses


@pytest.fixture
def key(tmp_path, monkeypatch):
    """A fresh signing key made through `redact keygen`; its passphrase is in the environment."""
    from redact.cli import main

    monkeypatch.setenv("REDACT_KEY_PASSPHRASE", "test passphrase")
    r = CliRunner().invoke(main, ["keygen", "--out-dir", str(tmp_path / "keys"), "--name", "t"])
    assert r.exit_code == 0, r.output
    return tmp_path / "keys" / "t.private.pem"
