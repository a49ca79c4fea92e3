"""Nobody left visible: the default run against clips whose every person pixel is known.

The truth is the construction of each clip (redact.media.synthetic: the rectangle of every pasted
person pixel per frame), not the code under test; the people are scikit-image's astronaut()
(public domain, NASA) and camera() (CC0, Lav Varshney) stills, scaled, blurred, noised and
H.264-compressed as CCTV is. What was obscured is read two ways: from the run's per-frame obscure
records (exact geometry), and from the redacted video itself, decoded with PyAV/FFmpeg, against
the source frames.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from redact.media import synthetic as syn
from redact.media.video import VideoReader
from redact.pipeline import ProcessSettings, process_video
from redact.vision.records import Poses

FPS = 25


@pytest.fixture
def signer():
    from redact.provenance.signing import Signer

    return Signer.from_seed(bytes(range(32)))


class BlindEstimator:
    """Finds nobody, ever: what is left is the motion net alone."""

    def estimate(self, image):
        return Poses.empty()


def _walkers(width: int, height: int, seconds: float, heights: tuple[float, ...], **kw) -> syn.SceneSpec:
    """People of the given heights walking across a fixed hall, alternately left→right and right→left."""
    actors = []
    for k, hp in enumerate(heights):
        y = height * (0.45 + 0.4 * k / max(1, len(heights)))
        a, b = (0.08 * width, 0.92 * width) if k % 2 == 0 else (0.92 * width, 0.08 * width)
        actors.append(syn.Actor(("astronaut", "camera")[k % 2], ((0.0, a, y, hp), (seconds, b, y, hp)), mirror=k % 2 == 1))
    return syn.SceneSpec(width, height, Fraction(FPS), seconds, tuple(actors), background="hall", **kw)


def _run(path, tmp_path, signer, estimator=None, settings=ProcessSettings()):
    records = []
    result = process_video(path, tmp_path / "out", signer, settings, estimator=estimator, records=records.append)
    return result, records


def _coverage(records, truths) -> np.ndarray:
    """[frames, actors] fraction of each visible person's pixel rectangle inside an obscured region (nan: absent)."""
    out = np.full((len(truths), len(truths[0].visible)), np.nan)
    for rec, truth in zip(records, truths):
        assert rec.frame == truth.frame
        m = rec.mask()
        for a in np.flatnonzero(truth.visible):
            x0, y0, x1, y1 = truth.person_rects[a]
            out[truth.frame, a] = m[y0:y1, x0:x1].mean()
    return out


def _largest_visible_patch(source: np.ndarray, redacted: np.ndarray, rect) -> float:
    """Fraction of a person's rectangle where the redacted frame still shows the source (|Δ| ≤ 6
    grey levels in every channel: H.264 noise, not an obscured pixel)."""
    x0, y0, x1, y1 = rect
    d = np.abs(source[y0:y1, x0:x1].astype(np.int16) - redacted[y0:y1, x0:x1].astype(np.int16)).max(axis=2)
    return float((d <= 6).mean())


def test_a_blind_detector_still_hides_every_walker_by_motion_alone(tmp_path, signer):
    """The motion net is independent of any model: with an estimator that finds nobody, every
    walker is inside an obscured region on every frame, and the frames are flagged."""
    spec = _walkers(640, 360, 3.0, (70.0, 90.0), noise=2.0, blur=0.8)
    path = tmp_path / "walkers.mp4"
    truths = syn.write_clip(spec, path, crf=23)
    result, records = _run(path, tmp_path, signer, BlindEstimator())
    cov = _coverage(records, truths)
    seen = ~np.isnan(cov)
    assert seen.sum() > 100
    assert (cov[seen] >= 0.98).all(), np.argwhere(seen & (cov < 0.98))
    # every frame with a walker is inside a range flagged for review, for movement nobody explains;
    # but frame 0, where the motion net has nothing to compare with yet: the look-back obscures the
    # walkers there (asserted above) without flagging it, and the range begins on frame 1
    flagged = set()
    for r in result.review:
        if "unexplained_motion" in r.reasons:
            flagged.update(range(r.frame_start, r.frame_end + 1))
    on_screen = {t.frame for t in truths if t.visible.any()}
    assert on_screen - flagged <= {0}
    assert 1 in flagged
    # and the video agrees: no person rectangle shows the source on more than a sliver of it
    with VideoReader(path) as src, VideoReader(result.video) as red:
        for (fs, fr), truth in zip(zip(src.frames(), red.frames()), truths):
            for a in np.flatnonzero(truth.visible):
                assert _largest_visible_patch(fs.image, fr.image, truth.person_rects[a]) < 0.05, (truth.frame, a)


def test_small_people_in_720p_are_obscured_in_every_frame(tmp_path, signer):
    """People 40–80 px tall in a 1280×720 clip, blurred and compressed like CCTV: obscured in
    at least 99 % of the frames they are in, by the default settings (issue 12's acceptance)."""
    spec = _walkers(1280, 720, 4.0, (40.0, 55.0, 65.0, 80.0), noise=3.0, blur=1.0, seed=2)
    path = tmp_path / "small.mp4"
    truths = syn.write_clip(spec, path, crf=28)
    result, records = _run(path, tmp_path, signer)
    cov = _coverage(records, truths)
    for a in range(cov.shape[1]):
        seen = ~np.isnan(cov[:, a])
        covered = (cov[seen, a] >= 0.95).mean()
        assert covered >= 0.99, (a, covered, np.flatnonzero(seen & (cov[:, a] < 0.95)))


def test_a_dim_stretch_is_flagged_and_its_people_stay_hidden(tmp_path, signer):
    """The scene falls to 30 % of its brightness for a second (a light switched off): those frames
    are flagged "dim" although their luma stays above the absolute dark threshold, and the people
    in them stay obscured."""
    spec = _walkers(640, 360, 3.0, (80.0, 100.0), noise=2.0, dim_region=(0, 0, 640, 360), dim_factor=0.3,
                    dim_seconds=(1.0, 2.0))
    path = tmp_path / "dim.mp4"
    truths = syn.write_clip(spec, path, crf=23)
    result, records = _run(path, tmp_path, signer)
    dim_frames = {t.frame for t in truths if 1.0 <= t.t < 2.0}
    flagged = set()
    for r in result.review:
        if "dim" in r.reasons:
            flagged.update(range(r.frame_start, r.frame_end + 1))
    assert dim_frames <= flagged
    assert not flagged & {t.frame for t in truths if t.t < 0.9}  # not before the light went
    cov = _coverage(records, truths)
    dim_rows = sorted(dim_frames)
    assert np.nanmin(cov[dim_rows]) >= 0.95


@pytest.mark.parametrize("motion", [True, False])
def test_the_motion_settings_and_counts_are_signed(tmp_path, signer, crossing_clip, motion):
    from dataclasses import replace

    from redact.provenance.verify import verify_package

    s = ProcessSettings()
    s = replace(s, scene=replace(s.scene, motion=replace(s.scene.motion, enabled=motion)))
    result, _ = _run(crossing_clip.path, tmp_path, signer, settings=s)
    pred = verify_package(result.package, [signer.public_key]).predicate
    assert pred.parameters["scene"]["motion"]["enabled"] is motion
    assert pred.motion is not None and pred.motion.enabled is motion
    assert (pred.motion.states.get("ok", 0) > 0) is motion
    assert pred.parameters["search"]["windows"]["min_person_height"] == 40
