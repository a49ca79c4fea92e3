"""Rendering: every style makes real faces unrecognisable, touches nothing outside the regions,
never writes into its input, and stick figures draw only confident limbs.

Real faces: scikit-image `skimage.data.astronaut()` (public domain, NASA, as stated in
skimage/data/_fetchers.py) and `skimage.data.camera()` (CC0, photographer Lav Varshney), loaded
from the installed package and pasted at known rectangles over generated backgrounds.
Outside reference for "unrecognisable": skimage.metrics.structural_similarity (SSIM, Wang et al.
2004) between the face crop before and after.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from skimage import data
from skimage.metrics import structural_similarity

from redact.errors import RedactError
from redact.redaction.background import BackgroundBuilder
from redact.redaction.regions import people_mask
from redact.redaction.render import (
    FIGURE_GREY,
    FILL_GREY,
    STYLES,
    Blur,
    RenderSettings,
    obscure_all,
    obscurer_for,
    render_frame,
)
from redact.vision.records import Tracks

H, W = 480, 640


def _background(seed: int = 0) -> np.ndarray:
    """Generated scene: smooth coloured noise plus a gradient and a few hard edges."""
    rng = np.random.default_rng(seed)
    noise = cv2.GaussianBlur((rng.random((H, W, 3)) * 255).astype(np.uint8), (0, 0), 3)
    grad = np.linspace(0, 80, W, dtype=np.float32)[None, :, None]
    bg = np.clip(noise.astype(np.float32) * 0.7 + grad, 0, 255).astype(np.uint8)
    bg[::40, :] = 30  # grid lines: structure that must survive outside the regions
    bg[:, ::40] = 30
    return np.ascontiguousarray(bg)


def _scene():
    """A frame with two people and their tracks; returns (image, tracks, face rectangles).

    astronaut crop rows 0..300, cols 100..360 (public domain, NASA) pasted at x=300,y=120;
    camera crop rows 40..300, cols 120..340 (CC0) pasted at x=-60 (partly off-screen), y=150.
    Face rectangles were read off the photos: astronaut x165..275 y50..200, camera x160..265 y65..200.
    """
    img = _background()
    astro = data.astronaut()[0:300, 100:360]
    img[120:420, 300:560] = astro
    cam = np.dstack([data.camera()] * 3)[40:300, 120:340]  # [260, 220, 3]
    img[150:410, 0:160] = cam[:, 60:]  # 60 columns off the left edge
    ax, ay = 300 - 100, 120 - 0  # astronaut photo → frame offset
    cx, cy = -60 - 120, 150 - 40  # camera photo → frame offset
    faces = [(165 + ax, 50 + ay, 275 + ax, 200 + ay), (max(0, 160 + cx), 65 + cy, 265 + cx, 200 + cy)]
    boxes = np.array([[300, 120, 560, 420], [-60, 150, 160, 410]], np.float32)
    kp = np.zeros((2, 17, 3), np.float32)
    # astronaut (photo coordinates): nose, eyes, ears, shoulders, hips out of view
    for k, (x, y) in {0: (222, 140), 1: (200, 115), 2: (245, 115), 3: (172, 125), 4: (270, 125),
                      5: (310, 270), 6: (130, 270)}.items():
        kp[0, k] = (x + ax, y + ay, 0.9)
    for k, (x, y) in {0: (245, 150), 2: (225, 120), 4: (190, 135), 6: (150, 230)}.items():
        kp[1, k] = (x + cx, y + cy, 0.8)
    tracks = Tracks(np.array([1, 2]), boxes, np.array([0.9, 0.8]), kp, np.array([True, True]),
                    np.zeros(2, np.int32))
    return img, tracks, faces


def _crop(img, r):
    x0, y0, x1, y1 = r
    return img[y0:y1, x0:x1]


def _ssim(a, b) -> float:
    return float(structural_similarity(a, b, channel_axis=2, data_range=255))


def _clean_background(img_shape):
    b = BackgroundBuilder(max_samples=4)
    for _ in range(4):
        b.add(_background(), np.zeros(img_shape[:2], bool))
    return b.build()


@pytest.fixture(scope="module")
def scene():
    return _scene()


def _blocks(src: np.ndarray, across: int) -> np.ndarray:
    """src pixelated so that `across` square blocks span its width (area average, then nearest)."""
    h, w = src.shape[:2]
    bw = w / across
    small = cv2.resize(src, (across, max(1, round(h / bw))), interpolation=cv2.INTER_AREA)
    return cv2.resize(small, (w, h), interpolation=cv2.INTER_NEAREST)


@pytest.mark.parametrize("style", STYLES)
def test_faces_unrecognisable_in_every_style(scene, style):
    img, tracks, faces = scene
    settings = RenderSettings(style=style)
    empty = _clean_background(img.shape) if style == "background" else None
    out = render_frame(img, tracks, settings, background=empty)
    for face in faces:
        src, got = _crop(img, face), _crop(out, face)
        mad = np.abs(got.astype(int) - src.astype(int)).mean()
        # Threshold: a block portrait about 14 blocks across stays recognisable (from memory:
        # L. D. Harmon, "The recognition of faces", Scientific American 229(5), 1973). We require
        # less structure (lower SSIM) than the same face at half that resolution, 7 blocks across.
        limit = _ssim(src, _blocks(src, 7))
        # Control (common practice): a faint Gaussian blur (sigma 2 px on a ~100 px face) leaves
        # the face recognisable; it must fail both checks, so the checks can fail.
        faint = cv2.GaussianBlur(src, (0, 0), 2)
        assert np.abs(faint.astype(int) - src.astype(int)).mean() < 25
        assert _ssim(src, faint) > limit + 0.2
        # Our styles: pixels differ strongly, and less structure survives than the 7-block face.
        assert mad > 25, (style, face, mad)
        assert _ssim(src, got) < limit, (style, face, _ssim(src, got), limit)


@pytest.mark.parametrize("style", STYLES)
def test_pixels_outside_every_region_are_unchanged(scene, style):
    img, tracks, _ = scene
    settings = RenderSettings(style=style, figure=True)
    empty = _clean_background(img.shape) if style == "background" else None
    out = render_frame(img, tracks, settings, background=empty)
    mask = people_mask(tracks, img.shape, settings.regions)
    assert mask.any() and (~mask).any()
    assert np.array_equal(out[~mask], img[~mask])
    assert not np.array_equal(out[mask], img[mask])


@pytest.mark.parametrize("style", STYLES)
def test_input_is_never_written(scene, style):
    img, tracks, _ = scene
    before = img.copy()
    ro = img.copy()
    ro.flags.writeable = False  # any write into the input raises
    empty = _clean_background(img.shape) if style == "background" else None
    out = render_frame(ro, tracks, RenderSettings(style=style, figure=True), background=empty)
    assert np.array_equal(ro, before) and np.array_equal(img, before)
    assert out.dtype == np.uint8 and out.shape == img.shape and out.flags.c_contiguous
    assert not np.shares_memory(out, ro)


def test_obscure_all_reveals_nothing(scene):
    img, _, _ = scene
    out = obscure_all(img)
    # Uniform and text-free: one value everywhere. SSIM against a constant image has no
    # structure term left (its variance is zero), so the stronger check is that the output
    # does not depend on the input at all: two different scenes give identical frames.
    assert out.shape == img.shape and np.unique(out).size == 1
    other = np.ascontiguousarray(np.dstack([data.camera()] * 3))  # CC0, Lav Varshney
    assert np.array_equal(obscure_all(cv2.resize(other, (W, H))), out)
    assert np.array_equal(img, _scene()[0])  # input untouched


def test_stick_figure_draws_confident_limbs_only():
    img = np.full((200, 200, 3), 60, np.uint8)
    kp = np.zeros((1, 17, 3), np.float32)
    kp[0, 5] = (80, 60, 0.9)    # left shoulder
    kp[0, 7] = (80, 140, 0.9)   # left elbow: link (5,7) is confident
    kp[0, 6] = (120, 60, 0.9)   # right shoulder (link 5–6 confident too)
    kp[0, 8] = (120, 140, 0.2)  # right elbow below threshold: link (6,8) must not be drawn
    tracks = Tracks(np.array([1]), np.array([[60, 40, 140, 160]]), np.array([0.9]), kp,
                    np.array([True]), np.zeros(1, np.int32))
    out = render_frame(img, tracks, RenderSettings(style="figure", figure_threshold=0.5))
    confident = out[70:131, 80]      # along the shoulder–elbow line x=80
    unconfident = out[70:131, 120]   # along where the shoulder–elbow line x=120 would be
    assert (confident == FIGURE_GREY).all()
    assert (unconfident == FILL_GREY).all()
    # one neutral grey: R = G = B for every drawn pixel
    drawn = out[(out != FILL_GREY).any(axis=2) & (out != 60).any(axis=2)]
    assert drawn.size and (drawn[:, 0] == drawn[:, 1]).all() and (drawn[:, 1] == drawn[:, 2]).all()


def test_figure_is_dropped_after_the_hold_but_the_region_stays():
    """A person missed for more than figure_hold detections keeps an obscured region and loses the
    figure; with a detection stride the hold counts detections, not frames."""
    img = np.full((200, 200, 3), 60, np.uint8)
    kp = np.zeros((1, 17, 3), np.float32)
    kp[0, 5], kp[0, 7] = (80, 60, 0.9), (80, 140, 0.9)  # left shoulder and elbow
    box = np.array([[60, 40, 140, 160]])

    def render(misses: int, every: int = 1):
        tracks = Tracks(np.array([1]), box, np.array([0.9]), kp, np.array([misses == 0]), np.array([misses], np.int32))
        return render_frame(img, tracks, RenderSettings(style="figure", figure_hold=2), detect_every=every)

    limb = (slice(70, 131), 80)
    for misses, every, drawn in ((0, 1, True), (2, 1, True), (3, 1, False), (8, 3, True), (9, 3, False)):
        out = render(misses, every)
        assert (out[limb] == FIGURE_GREY).all() == drawn, (misses, every)
        assert (out[100, 100] == FILL_GREY).all()  # the person's region is obscured either way
    with pytest.raises(RedactError):
        RenderSettings(figure_hold=-1)


def test_blur_strength_scales_with_region_size(scene):
    img, _, _ = scene
    mask = np.zeros(img.shape[:2], bool)
    mask[100:300, 100:300] = True
    weak = Blur(fraction=0.01, min_sigma=1.0).apply(img, mask)
    strong = Blur().apply(img, mask)
    reg = (slice(120, 280), slice(120, 280))

    # variance of the Laplacian falls as blur grows (common practice measure of detail)
    def lap(a):
        return cv2.Laplacian(cv2.cvtColor(a, cv2.COLOR_RGB2GRAY), cv2.CV_64F).var()

    assert lap(strong[reg]) < lap(weak[reg]) < lap(img[reg])


def test_settings_are_checked():
    with pytest.raises(RedactError):
        RenderSettings(style="sparkle")
    with pytest.raises(RedactError):
        RenderSettings(figure_threshold=1.5)
    with pytest.raises(RedactError):
        obscurer_for(RenderSettings(style="background"))  # the background style without an empty scene
    with pytest.raises(RedactError):
        render_frame(np.zeros((10, 10), np.uint8), Tracks.empty(), RenderSettings())


def test_render_is_deterministic(scene):
    img, tracks, _ = scene
    s = RenderSettings(style="blur", figure=True)
    assert np.array_equal(render_frame(img, tracks, s), render_frame(img, tracks, s))
