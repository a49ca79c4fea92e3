"""Per-frame quality measures, review flags and their encodings.

Outside references: ITU-R BT.601 luma coefficients (Y' = 0.299 R' + 0.587 G' + 0.114 B');
OpenCV's cv2.GaussianBlur for the blurred copies; scikit-image's `astronaut()` photo (public
domain, NASA) as the sharp image, loaded from the installed package.
"""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
from skimage import data

from redact.errors import RedactError
from redact.redaction.quality import (
    FrameQuality,
    QualityMonitor,
    ReviewRange,
    ReviewRules,
    analysis_grey,
    encode_quality_line,
    luma,
    review_document,
    sharpness,
)
from redact.vision.records import Tracks


def _bt601(r, g, b):
    # ITU-R BT.601: Y' = 0.299 R' + 0.587 G' + 0.114 B'
    return 0.299 * r + 0.587 * g + 0.114 * b


@pytest.mark.parametrize("rgb", [(255, 0, 0), (0, 255, 0), (0, 0, 255), (255, 255, 255), (0, 0, 0),
                                 (12, 200, 77)])
def test_luma_of_pure_colours_is_bt601(rgb):
    img = np.empty((30, 40, 3), np.uint8)
    img[:] = rgb
    q = QualityMonitor().observe(0, 0.0, img, Tracks.empty())
    assert q.luma_mean == pytest.approx(_bt601(*rgb), abs=1e-3)
    assert q.luma_std == pytest.approx(0.0, abs=1e-3)
    big = np.empty((1080, 1920, 3), np.uint8)  # downscaled before measuring: still exact
    big[:] = rgb
    assert QualityMonitor().observe(0, 0.0, big, None).luma_mean == pytest.approx(_bt601(*rgb), abs=1e-3)
    # Published values: red 76.245, green 149.685, blue 29.07 on 0..255 (0.299·255 etc.).
    assert luma(img)[0, 0] == pytest.approx(_bt601(*rgb), abs=1e-3)


def test_luma_of_grey_ramps_and_mixed_ramps():
    ramp = np.tile(np.arange(256, dtype=np.uint8), (8, 1))  # [8, 256]
    grey = np.dstack([ramp] * 3)
    np.testing.assert_allclose(luma(grey), ramp.astype(float), atol=1e-3)  # coefficients sum to 1
    mixed = np.dstack([ramp, ramp[:, ::-1], (ramp // 2)])
    np.testing.assert_allclose(luma(mixed), _bt601(ramp.astype(float), ramp[:, ::-1].astype(float),
                                                   (ramp // 2).astype(float)), atol=1e-3)
    q = QualityMonitor().observe(0, 0.0, grey, None)  # 256 wide: below the analysis size
    assert q.luma_mean == pytest.approx(127.5, abs=1e-3)
    assert q.luma_std == pytest.approx(np.arange(256).std(), abs=1e-2)


def test_sharpness_orders_sharp_above_blurred_copies():
    img = data.astronaut()  # public domain, NASA
    values = [sharpness(analysis_grey(img))]
    for sigma in (0.5, 1.0, 2.0, 3.0, 5.0):
        values.append(sharpness(analysis_grey(cv2.GaussianBlur(img, (0, 0), sigma))))
    assert all(a > b for a, b in zip(values, values[1:])), values


def _tracks(n_observed: int, n_predicted: int = 0, conf: float = 0.9) -> Tracks:
    m = n_observed + n_predicted
    kp = np.zeros((m, 17, 3), np.float32)
    kp[:, :, 2] = conf
    boxes = np.array([[10 + 60 * k, 10, 50 + 60 * k, 90] for k in range(m)], np.float32).reshape(m, 4)  # apart
    return Tracks(np.arange(m), boxes, np.full(m, 0.9), kp, np.arange(m) < n_observed, np.zeros(m, np.int32))


def _textured(level: float, seed: int) -> np.ndarray:
    """A moving still: astronaut (public domain, NASA) shifted and scaled in brightness."""
    img = data.astronaut()[::2, ::2]
    img = np.roll(img, seed * 3, axis=1).astype(np.float32) * level
    return np.clip(img, 0, 255).astype(np.uint8)


def test_dark_segment_is_flagged_exactly():
    mon = QualityMonitor(ReviewRules(coasting=0, count_drop=0))
    for f in range(60):
        dark = 20 <= f < 35
        q = mon.observe(f, f / 25, _textured(0.08 if dark else 1.0, f), _tracks(1))
        assert ("dark" in q.reasons) == dark, (f, q.luma_mean)
    rs = mon.ranges()
    assert len(rs) == 1
    r = rs[0]
    assert (r.frame_start, r.frame_end) == (20, 34)
    assert r.t_start == pytest.approx(20 / 25) and r.t_end == pytest.approx(34 / 25)
    assert "dark" in r.reasons and list(r.reasons) == sorted(r.reasons)


def test_each_rule_flags_its_own_reason():
    mon = QualityMonitor()
    bright = _textured(1.0, 0)
    assert mon.observe(0, 0.0, bright, _tracks(2)).reasons == ()
    assert mon.observe(1, 0.04, bright, _tracks(2, conf=0.1)).reasons == ("low_confidence",)
    assert mon.observe(2, 0.08, bright, _tracks(1, 1)).reasons == ("coasting", "count_drop")
    assert mon.observe(3, 0.12, cv2.GaussianBlur(bright, (0, 0), 6), _tracks(2)).reasons == ("blurred",)
    flat = np.full_like(bright, 128)
    assert set(mon.observe(4, 0.16, flat, _tracks(2)).reasons) == {"low_contrast", "blurred"}
    q = mon.observe(5, 0.2, None, None, fault=True)
    assert "fault" in q.reasons and q.luma_mean is None and q.mean_conf is None
    q = mon.observe(6, 0.24, np.zeros((4, 4), np.float32), None, fault=True)  # damaged image
    assert q.reasons == ("fault",) and q.luma_mean is None
    with pytest.raises(RedactError):
        mon.observe(7, 0.28, np.zeros((4, 4), np.float32), _tracks(2))  # unusable image, no fault
    with pytest.raises(RedactError):
        mon.observe(7, 0.2, bright, _tracks(2))  # frames must increase


def test_ranges_merge_gaps_up_to_merge_gap():
    mon = QualityMonitor(ReviewRules(merge_gap=3, coasting=1, count_drop=0))
    flagged = {2, 3, 7, 8, 13, 20}  # gaps: 3 frames (4,5,6) merge; 4 frames (9..12) split
    img = _textured(1.0, 0)
    for f in range(25):
        mon.observe(f, f * 0.5, img, _tracks(1, 1 if f in flagged else 0))
    got = [(r.frame_start, r.frame_end, r.t_start, r.t_end) for r in mon.ranges()]
    assert got == [(2, 8, 1.0, 4.0), (13, 13, 6.5, 6.5), (20, 20, 10.0, 10.0)]
    assert mon.flagged == len(flagged) and mon.frames == 25


def test_count_drop_compares_with_recent_maximum():
    mon = QualityMonitor(ReviewRules(count_drop=2, drop_window=3, coasting=0))
    img = _textured(1.0, 0)
    counts = [3, 3, 3, 2, 1, 1, 1, 1, 3]
    drops = [mon.observe(i, i, img, _tracks(c)).count_drop for i, c in enumerate(counts)]
    # drop = max(observed over previous 3 frames) − observed now (arithmetic from the definition)
    assert drops == [0, 0, 0, 1, 2, 2, 1, 0, 0]
    assert [r.frame_start for r in mon.ranges()] == [4]


def _run_once() -> tuple[bytes, bytes]:
    mon = QualityMonitor()
    lines = []
    for f in range(12):
        img = _textured(0.1 if 4 <= f < 8 else 1.0, f)
        q = mon.observe(f, f / 30, img, _tracks(2 if f % 5 else 1, int(f % 3 == 0), 0.3 + f / 50))
        lines.append(encode_quality_line(q))
    lines.append(encode_quality_line(mon.observe(12, 0.4, None, None, fault=True)))
    return b"".join(lines), review_document(mon.ranges(), mon.rules, frames=mon.frames)


def test_encodings_are_byte_identical_across_runs_and_parse():
    a1, r1 = _run_once()
    a2, r2 = _run_once()
    assert a1 == a2 and r1 == r2
    rows = [json.loads(line) for line in a1.splitlines()]
    assert len(rows) == 13 and rows[-1]["fault"] is True and rows[-1]["luma_mean"] is None
    assert rows[0]["t"] == 0.0 and b'"t":0.033333' in a1.splitlines()[1]  # fixed 6 decimals
    doc = json.loads(r1)
    assert doc["rules"]["dark"] == ReviewRules().dark and doc["frames"] == 13
    assert any("dark" in r["reasons"] for r in doc["ranges"])


def test_encode_fixed_decimals():
    q = FrameQuality(3, 0.1, 12.345678, 0.0, 99.999, 2, 1, 1, None, 0, False, ("coasting",))
    assert encode_quality_line(q) == (
        b'{"frame":3,"t":0.100000,"luma_mean":12.35,"luma_std":0.00,"sharpness":100.00,"people":2,'
        b'"observed":1,"predicted":1,"mean_conf":null,"count_drop":0,"fault":false,"reasons":["coasting"]}\n')
    doc = json.loads(review_document([ReviewRange(1, 4, 0.04, 0.16, ("dark",))], ReviewRules()))
    assert doc["version"] == 2
    assert doc["ranges"] == [{"frames": [1, 4], "seconds": [0.04, 0.16], "reasons": ["dark"],
                              "explained": ["dark picture"]}]


def test_rules_are_checked():
    with pytest.raises(RedactError):
        ReviewRules(dark=-1)
    with pytest.raises(RedactError):
        ReviewRules(merge_gap=1.5)  # type: ignore[arg-type]


def test_short_lived_and_off_screen_coasting_tracks_do_not_flag():
    """min_hits: a track seen once and then coasting is not flagged; a settled one is, while on screen."""
    import numpy as np

    from redact.redaction.quality import QualityMonitor, ReviewRules
    from redact.vision.records import Tracks

    def tracks(box, hits, observed):
        return Tracks(np.array([1]), np.array([box], np.float32), np.array([0.9]), np.zeros((1, 17, 3)),
                      np.array([observed]), np.array([0 if observed else 1], np.int32), None,
                      np.array([hits], np.int32))

    img = np.full((100, 200, 3), 120, np.uint8)
    img[::2] = 160  # some texture, so the image rules stay quiet
    m = QualityMonitor(ReviewRules(min_hits=3))
    assert "coasting" not in m.observe(0, 0.0, img, tracks([10, 10, 50, 90], 1, False)).reasons
    assert "coasting" in m.observe(1, 0.04, img, tracks([10, 10, 50, 90], 5, False)).reasons
    assert "coasting" not in m.observe(2, 0.08, img, tracks([-90, -80, -10, -5], 5, False)).reasons


def test_every_review_reason_has_plain_words():
    """The terminal, --json, the report and the review page say each reason in words (one table,
    redact.formats.review_json.REASON_WORDS); a reason without words would show as a code."""
    from redact.formats.review_json import REASON_WORDS
    from redact.redaction.quality import REASONS

    assert set(REASONS) <= set(REASON_WORDS), sorted(set(REASONS) - set(REASON_WORDS))


def test_a_coasting_box_inside_an_observed_person_is_explained_by_them():
    """A duplicate box of someone tracked, or a person hidden behind them (and obscured with
    them), does not flag coasting or a count drop; a coasting box on its own does."""
    img = np.full((100, 200, 3), 120, np.uint8)
    img[::2] = 160  # some texture, so the image rules stay quiet

    def tracks(boxes, observed):
        n = len(boxes)
        kp = np.zeros((n, 17, 3), np.float32)
        kp[:, :, 2] = 0.9
        return Tracks(np.arange(n), np.array(boxes, np.float32), np.full(n, 0.9), kp,
                      np.array(observed), np.zeros(n, np.int32), None, np.full(n, 12, np.int32))

    m = QualityMonitor()
    assert m.observe(0, 0.0, img, tracks([[10, 10, 60, 90], [14, 12, 58, 88]], [True, True])).reasons == ()
    assert m.observe(1, 0.04, img, tracks([[10, 10, 60, 90], [14, 12, 58, 88]], [True, False])).reasons == ()
    assert m.observe(2, 0.08, img, tracks([[10, 10, 60, 90], [120, 12, 160, 88]], [True, False])).reasons == (
        "coasting", "count_drop")
