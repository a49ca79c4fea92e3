"""The empty scene behind people (style "background"): a masked temporal median that never shows a
person, in bounded memory.

People are scikit-image's `astronaut()` photo (public domain, NASA), loaded from the installed
package and pasted at known rectangles over a generated background.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from skimage import data

from redact.errors import RedactError
from redact.redaction.background import Background, BackgroundBuilder
from redact.redaction.render import FILL_GREY, BackgroundFill, RenderSettings, render_frame
from redact.vision.records import Tracks

H, W = 180, 320
PERSON = cv2.resize(data.astronaut()[0:300, 100:360], (80, 96), interpolation=cv2.INTER_AREA)  # NASA, PD


def _background() -> np.ndarray:
    rng = np.random.default_rng(7)
    bg = cv2.GaussianBlur((rng.random((H, W, 3)) * 255).astype(np.uint8), (0, 0), 2)
    bg[:, ::20] = 20
    return bg


def _frame(x: int, y: int = 40):
    """Background with the person pasted at (x, y); returns image and the exact person mask."""
    img = _background()
    img[y:y + 96, x:x + 80] = PERSON
    mask = np.zeros((H, W), bool)
    mask[y:y + 96, x:x + 80] = True
    return img, mask


def test_static_person_leaves_the_empty_scene_invalid_and_render_falls_back():
    b = BackgroundBuilder(max_samples=8)
    for _ in range(10):
        img, mask = _frame(100)
        b.add(img, mask)
    scene = b.build()
    assert not scene.valid[mask].any()           # no clean sample there
    assert (scene.image[~scene.valid] == 0).all()  # and no scene stored there
    assert scene.valid[:, :90].all() and scene.valid[:, 190:].all()  # the rest of the scene is clean
    # Rendering with the scene style: the person's pixels fall back to the solid fill.
    box = np.array([[100, 40, 180, 136]], np.float32)
    tracks = Tracks(np.array([1]), box, np.array([0.9]), np.zeros((1, 17, 3)), np.array([True]),
                    np.zeros(1, np.int32))
    out = render_frame(img, tracks, RenderSettings(style="background"), background=scene)
    assert (out[mask] == FILL_GREY).all()


def test_moving_person_never_appears_in_the_empty_scene_even_where_a_plain_median_shows_them():
    b = BackgroundBuilder(max_samples=16, max_side=W)  # no downscale: compare pixel for pixel
    frames = []
    # The person stands at x=100 in 7 of 10 samples and walks elsewhere in 3: a plain median
    # over those pixels shows the person; the masked median must show only the background.
    for x in (100, 100, 20, 100, 100, 220, 100, 100, 160, 100):
        img, mask = _frame(x)
        frames.append(img)
        b.add(img, mask)
    scene = b.build()
    bg = _background()
    naive = np.median(np.stack(frames), axis=0)
    region = (slice(40, 136), slice(100, 180))
    assert np.abs(naive[region] - bg[region]).mean() > 20  # control: the plain median leaks the person
    assert scene.valid[region].all()
    assert np.abs(scene.image.astype(int) - bg.astype(int))[scene.valid].max() <= 1
    assert scene.valid.mean() > 0.95


def test_memory_is_bounded_and_samples_are_spread_over_the_clip():
    b = BackgroundBuilder(max_samples=8, max_side=64)
    kept = []
    for i in range(1000):
        if b.wants_next():
            kept.append(i)
        img = np.full((H, W, 3), i % 256, np.uint8)
        b.add(img, np.zeros((H, W), bool))
        assert b.samples < 8
    assert b.samples >= 4  # after thinning, between half and all of the budget
    assert max(kept) > 500  # late frames were sampled, not only the start
    p = b.build()
    assert max(p.image.shape[:2]) == 64


def test_resized_background_shrinks_validity_near_invalid_pixels():
    valid = np.ones((10, 10), bool)
    valid[4:6, 4:6] = False
    p = Background(np.full((10, 10, 3), 50, np.uint8), valid)
    big = p.resized(40, 40)
    assert big.valid.shape == (40, 40)
    assert not big.valid[16:24, 16:24].any()  # the invalid pixels' footprint stays invalid
    assert big.valid[:8, :].all() and (big.image[big.valid] == 50).all()


def test_background_fill_uses_the_scene_only_where_valid():
    valid = np.zeros((H, W), bool)
    valid[:, : W // 2] = True
    p = Background(np.full((H, W, 3), 77, np.uint8), valid)
    img = _background()
    mask = np.zeros((H, W), bool)
    mask[50:100, 100:220] = True
    out = BackgroundFill(p).apply(img, mask)
    assert (out[50:100, 100:160] == 77).all() and (out[50:100, 160:220] == FILL_GREY).all()
    assert np.array_equal(out[~mask], img[~mask])


def test_errors():
    with pytest.raises(RedactError):
        BackgroundBuilder().build()
    b = BackgroundBuilder(max_samples=4)
    b.add(np.zeros((10, 10, 3), np.uint8), np.zeros((10, 10), bool))
    with pytest.raises(RedactError):
        b.add(np.zeros((12, 10, 3), np.uint8), np.zeros((12, 10), bool))


def test_process_with_the_background_style_records_it_under_its_own_name(crossing_clip, tmp_path):
    """The style, its setting and its log entry carry the name "background" (the word "plate" is
    left to number plates in plans); the old style name is refused by the CLI."""
    import base64
    import json

    from click.testing import CliRunner

    from redact.cli import main
    from redact.pipeline import ProcessSettings, process_video
    from redact.provenance.signing import Signer
    from redact.vision.pose import PoseSettings

    settings = ProcessSettings(render=RenderSettings(style="background"), pose=PoseSettings(input_long_side=320))
    result = process_video(crossing_clip.path, tmp_path / "o", Signer.from_seed(bytes(range(32))), settings)
    log = [json.loads(line) for line in (result.package / "log.jsonl").read_text().splitlines()]
    entry = [e for e in log if e["kind"] == "background"]
    assert len(entry) == 1 and entry[0]["samples"] == 32 and 0 < entry[0]["valid_fraction"] <= 1
    assert not any("plate" in json.dumps(e) for e in log)
    statement = json.loads(base64.b64decode(json.loads((result.package / "envelope.json").read_text())["payload"]))
    params = statement["predicate"]["parameters"]
    assert params["render"]["style"] == "background" and params["background_samples"] == 32
    assert "include_audio" in params and "keep_audio" not in params
    r = CliRunner().invoke(main, ["process", str(crossing_clip.path), "--out", str(tmp_path / "x"),
                                  "--signing-key", "k.pem", "--style", "plate"])
    assert r.exit_code == 2 and "'plate' is not one of" in r.stderr
    r = CliRunner().invoke(main, ["process", "--help"])
    assert "--include-audio" in r.stdout and "--keep-audio" not in r.stdout and "background" in r.stdout
