"""redact.media.synthetic: the ground truth must match where the stills' pixels really are.

Outside reference: the scikit-image stills themselves (astronaut() public domain, NASA;
camera() CC0, Lav Varshney), loaded from the installed package, and OpenCV's resize.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from redact.errors import InputError
from redact.media import synthetic as syn


def _spec(actors, **kw):
    base = dict(width=320, height=240, fps=Fraction(25), seconds=1.0, actors=tuple(actors), background="hall")
    base.update(kw)
    return syn.SceneSpec(**base)


@pytest.mark.parametrize("still", ["astronaut", "camera"])
def test_person_rect_is_where_the_pasted_pixels_are(still):
    spec = _spec([syn.Actor(still, ((0.0, 150.0, 120.0, 180.0),))])
    empty = syn.render_background(spec)
    img, truth = syn.render_frame(spec, 0)
    changed = np.any(img != empty, axis=2)
    ys, xs = np.nonzero(changed)
    x0, y0, x1, y1 = truth.person_rects[0]
    # every changed pixel lies in the rectangle, and the rectangle is tight (within 2 px per side:
    # a cut-out pixel may equal the background by chance at the very edge)
    assert xs.min() >= x0 and ys.min() >= y0 and xs.max() < x1 and ys.max() < y1
    assert xs.min() - x0 <= 2 and ys.min() - y0 <= 2 and x1 - 1 - xs.max() <= 2 and y1 - 1 - ys.max() <= 2
    assert y1 - y0 == 180  # height_px is the cut-out's height
    assert truth.visible[0] and not truth.partial[0] and not truth.dimmed[0]


@pytest.mark.parametrize("still", ["astronaut", "camera"])
def test_face_rect_shows_the_stills_face(still):
    import cv2

    spec = _spec([syn.Actor(still, ((0.0, 160.0, 120.0, 200.0),))])
    img, truth = syn.render_frame(spec, 0)
    fx0, fy0, fx1, fy1 = truth.face_rects[0]
    px0, py0, px1, py1 = truth.person_rects[0]
    assert px0 <= fx0 < fx1 <= px1 and py0 <= fy0 < fy1 <= py1
    # The face crop of the rendered frame looks like the face crop of the original still
    # (normalised cross-correlation, OpenCV), and unlike another part of the still.
    still = syn.load_still(still)
    sx0, sy0, sx1, sy1 = syn.STILLS[spec.actors[0].still].face
    ref = cv2.resize(still[sy0:sy1, sx0:sx1], (int(fx1 - fx0), int(fy1 - fy0)), interpolation=cv2.INTER_AREA)
    crop = img[fy0:fy1, fx0:fx1]
    ncc = cv2.matchTemplate(crop.astype(np.float32), ref.astype(np.float32), cv2.TM_CCOEFF_NORMED).max()
    assert ncc > 0.9
    other = cv2.resize(still[400:400 + (sy1 - sy0), 300:300 + (sx1 - sx0)], ref.shape[1::-1])
    wrong = cv2.matchTemplate(crop.astype(np.float32), other.astype(np.float32), cv2.TM_CCOEFF_NORMED).max()
    assert wrong < ncc - 0.3


def test_partly_off_screen_is_clipped_and_flagged():
    spec = _spec([syn.Actor("astronaut", ((0.0, 10.0, 120.0, 160.0),))])
    img, truth = syn.render_frame(spec, 0)
    x0, y0, x1, y1 = truth.person_rects[0]
    assert x0 == 0 and x1 > 0 and truth.partial[0] and truth.visible[0]
    empty = syn.render_background(spec)
    assert np.any(img[:, 0] != empty[:, 0])  # person pixels reach the left edge


def test_absent_and_fully_off_screen_actors_are_not_visible():
    spec = _spec([syn.Actor("camera", ((0.5, 100.0, 100.0, 100.0), (1.0, 120.0, 100.0, 100.0))),
                  syn.Actor("camera", ((0.0, -500.0, 100.0, 100.0),))])
    img, truth = syn.render_frame(spec, 0)
    assert not truth.visible.any()
    assert (truth.person_rects == 0).all() and (truth.face_rects == 0).all()
    assert np.array_equal(img, syn.render_background(spec))


def test_paths_interpolate_linearly():
    a = syn.Actor("camera", ((0.0, 0.0, 100.0, 50.0), (2.0, 200.0, 100.0, 150.0)))
    assert a.at(1.0) == pytest.approx((100.0, 100.0, 100.0))
    assert a.at(2.5) is None and a.at(-0.1) is None


def test_dim_stretch_darkens_people_and_background():
    actor = syn.Actor("astronaut", ((0.0, 240.0, 120.0, 160.0),))
    lit, t1 = syn.render_frame(_spec([actor]), 0)
    dim, t2 = syn.render_frame(_spec([actor], dim_region=(160, 0, 320, 240), dim_factor=0.25), 0)
    assert t2.dimmed[0] and not t1.dimmed[0]
    ratio = dim[:, 160:].astype(float).mean() / lit[:, 160:].astype(float).mean()
    assert ratio == pytest.approx(0.25, abs=0.01)
    assert np.array_equal(dim[:, :160], lit[:, :160])


def test_crossing_clip_truth(crossing_clip):
    t = crossing_clip.truths
    assert len(t) == crossing_clip.spec.frames == 50
    assert any(tr.partial.any() for tr in t)          # someone partly off-screen
    assert any(tr.dimmed[1] for tr in t)              # the camera man passes the dim stretch
    # the two people cross: their rectangles overlap in some frame, and their order swaps
    def overlap(r, s):
        return min(r[2], s[2]) > max(r[0], s[0]) and min(r[3], s[3]) > max(r[1], s[1])
    assert any(overlap(tr.person_rects[0], tr.person_rects[1]) for tr in t)
    cx = [(tr.person_rects[:, 0] + tr.person_rects[:, 2]) / 2 for tr in t if tr.visible.all()]
    assert cx[0][0] < cx[0][1] and cx[-1][0] > cx[-1][1]


def test_rendering_is_deterministic(tmp_path):
    spec = _spec([syn.Actor("camera", ((0.0, 50.0, 120.0, 120.0), (1.0, 270.0, 120.0, 120.0)))],
                 noise=2.0, seed=3, seconds=0.4)
    a = [img for img, _ in syn.render_scene(spec)]
    b = [img for img, _ in syn.render_scene(spec)]
    assert all(np.array_equal(x, y) for x, y in zip(a, b))
    assert not np.array_equal(a[0], a[1])
    # the encoded file is byte-identical too (x264 is deterministic unless told otherwise)
    syn.write_clip(spec, tmp_path / "a.mp4")
    syn.write_clip(spec, tmp_path / "b.mp4")
    assert (tmp_path / "a.mp4").read_bytes() == (tmp_path / "b.mp4").read_bytes()


def test_bad_specs_are_refused():
    with pytest.raises(InputError):
        syn.Actor("nobody", ((0.0, 0.0, 0.0, 10.0),))
    with pytest.raises(InputError):
        syn.Actor("camera", ((1.0, 0.0, 0.0, 10.0), (0.5, 0.0, 0.0, 10.0)))
    with pytest.raises(InputError):
        _spec([], background="jungle")


def test_stills_are_the_documented_scikit_image_images():
    a, c = syn.load_still("astronaut"), syn.load_still("camera")
    assert a.shape == c.shape == (512, 512, 3) and a.dtype == np.uint8
    assert np.array_equal(c[:, :, 0], c[:, :, 2])  # camera() is grey, replicated to RGB
