"""The motion net (redact.vision.motion) against the exact paste rectangles of synthetic clips.

The reference is the construction of the clip itself (redact.media.synthetic: the rectangle of
every pasted person pixel per frame), not the code under test. People are scikit-image's
astronaut() (public domain, NASA) and camera() (CC0, Lav Varshney) stills.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from redact.errors import InputError
from redact.media import synthetic as syn
from redact.vision.motion import MotionDetector, MotionSettings

FPS = 25


def _walker_scene(height_px: float = 60.0, seconds: float = 3.0, **kw) -> syn.SceneSpec:
    actors = (syn.Actor("astronaut", ((0.0, 200.0, 420.0, height_px), (seconds, 1000.0, 440.0, height_px))),
              syn.Actor("camera", ((0.0, 1100.0, 300.0, height_px * 0.8), (seconds, 400.0, 320.0, height_px * 0.8)),
                        mirror=True))
    return syn.SceneSpec(1280, 720, Fraction(FPS), seconds, actors, background="hall", noise=2.0, **kw)


def _covered(boxes: np.ndarray, rect: np.ndarray, shape) -> float:
    """Fraction of rect [x0, y0, x1, y1) inside the union of boxes."""
    m = np.zeros(shape[:2], bool)
    for x1, y1, x2, y2 in boxes:
        m[int(np.floor(y1)):int(np.ceil(y2)), int(np.floor(x1)):int(np.ceil(x2))] = True
    x0, y0, x1, y1 = rect
    return float(m[y0:y1, x0:x1].mean())


def test_every_walker_lies_inside_moving_blobs_once_learned():
    spec = _walker_scene()
    det = MotionDetector(MotionSettings(), FPS)
    learned = 0
    for img, truth in syn.render_scene(spec):
        fg = det.observe(img)
        if fg.state == "learning":
            continue
        assert fg.state == "ok"
        learned += 1
        for a in np.flatnonzero(truth.visible):
            # blobs are found on a frame reduced 4×: allow their 4-px grid at the rectangle's rim
            assert _covered(fg.boxes, truth.person_rects[a], img.shape) >= 0.9, (truth.frame, a)
    assert learned >= spec.frames - FPS * 1.2  # learning lasts learning_seconds (1 s)


def test_empty_scene_with_camera_shake_has_no_blobs():
    spec = syn.SceneSpec(1280, 720, Fraction(FPS), 2.0, (), background="hall", noise=2.0)
    bg = syn.render_background(spec)
    det = MotionDetector(MotionSettings(), FPS)
    rng = np.random.default_rng(3)
    for i in range(spec.frames):
        dx, dy = (0, 0) if i < 30 else tuple(int(v) for v in rng.integers(-3, 4, 2))  # up to 3 px of shake
        img = np.roll(bg, (dy, dx), axis=(0, 1)).astype(np.float32) + rng.normal(0, 2.0, bg.shape[:2])[:, :, None]
        fg = det.observe(np.clip(img, 0, 255).astype(np.uint8))  # with sensor noise, as a camera has
        if i >= 30:
            assert fg.state == "ok"
            assert len(fg.boxes) == 0, (i, dx, dy, fg.boxes)
            assert abs(fg.shift[0] - dx) <= 2 and abs(fg.shift[1] - dy) <= 2


def test_a_moved_camera_restarts_learning_and_says_so():
    spec = syn.SceneSpec(1280, 720, Fraction(FPS), 2.0, (), background="hall", noise=2.0)
    bg = syn.render_background(spec)
    det = MotionDetector(MotionSettings(), FPS)
    states = [det.observe(bg if i < 30 else np.roll(bg, 90, axis=1)).state for i in range(60)]
    assert states[29] == "ok" and states[30] == "camera_moved"
    assert set(states[31:31 + FPS - 1]) == {"learning"}  # learning_seconds = 1 s
    assert states[-1] == "ok"


def test_whole_frame_light_change_is_a_state_not_blobs():
    spec = syn.SceneSpec(1280, 720, Fraction(FPS), 2.0, (), background="hall", noise=2.0)
    bg = syn.render_background(spec)
    dark = (bg.astype(np.float32) * 0.45).astype(np.uint8)
    det = MotionDetector(MotionSettings(), FPS)
    out = [det.observe(bg if i < 30 else dark) for i in range(45)]
    assert out[30].state == "lighting_change" and len(out[30].boxes) == 0
    assert out[-1].state == "ok" and len(out[-1].boxes) == 0  # relearned the new light


@pytest.mark.parametrize("kw", [dict(analysis_width=10), dict(history_seconds=0), dict(shake=0.6),
                                dict(lighting=0), dict(min_blob=0)])
def test_settings_are_checked(kw):
    with pytest.raises(InputError):
        MotionSettings(**kw)


def test_large_walkers_over_a_still_view_are_not_a_moving_camera():
    """Phase correlation locks onto whatever dominates the picture; walkers a third of the frame
    tall must not read as the camera moving (which would restart learning and flag every frame)."""
    actors = []
    for k in range(3):  # already walking when the clip starts, each from its own side
        a, b = (-32.0, 672.0) if k % 2 == 0 else (672.0, -32.0)
        y, h = 180.0 + 47 * k, 110.0 + 20 * k
        actors.append(syn.Actor(("astronaut", "camera")[k % 2], ((-1.0 - k, a, y, h), (5.0 + k, b, y, h)),
                                mirror=k % 2 == 1))
    spec = syn.SceneSpec(640, 360, Fraction(FPS), 4.0, tuple(actors), background="hall", noise=2.0, blur=0.8)
    det = MotionDetector(MotionSettings(), FPS)
    states = [det.observe(img).state for img, _ in syn.render_scene(spec)]
    assert "camera_moved" not in states
    assert states[FPS * 2:] == ["ok"] * (spec.frames - FPS * 2)
