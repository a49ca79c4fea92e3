"""Moving boxes in a redaction plan: parsing, linear interpolation between keyframes, pixels.

Outside references: OpenCV's cv2.pointPolygonTest (a pixel centre inside or on the outline of the
interpolated box is obscured, the plan's pixel rule), NumPy slicing (a whole-number box covers
exactly image[y1:y2, x1:x2]). Interpolated values are worked out by hand in the comments.
"""

from __future__ import annotations

import json
from fractions import Fraction
from types import SimpleNamespace

import cv2
import numpy as np
import pytest

from redact.errors import PlanError
from redact.redaction.moving_box import box_pixels
from redact.redaction.plan import PLAN_VERSION, parse_plan
from redact.vision.records import Tracks

W, H = 320, 240
INFO = SimpleNamespace(width=W, height=H, frames=50, duration=2.0, fps=Fraction(25))


def plan_with(*boxes) -> bytes:
    return json.dumps({"version": PLAN_VERSION, "moving_boxes": list(boxes)}).encode()


def mask_on(plan, frame: int):
    d = plan.decide(frame, frame / 25, Tracks.empty(), (H, W, 3))
    return d.mask


def test_box_moves_linearly_between_keyframes_and_only_within_them():
    plan = parse_plan(plan_with({"label": "missed", "keyframes": [
        {"frame": 10, "box": [0, 0, 20, 10]}, {"frame": 20, "box": [100, 50, 140, 90]}]}), INFO)
    assert mask_on(plan, 9) is None and mask_on(plan, 21) is None  # outside first..last keyframe
    # Frame 15 is halfway: box = (0+100)/2, (0+50)/2, (20+140)/2, (10+90)/2 = [50, 25, 80, 50] (by hand).
    m = mask_on(plan, 15)
    expect = np.zeros((H, W), bool)
    expect[25:50, 50:80] = True  # whole-number corners: the NumPy slice
    assert np.array_equal(m, expect)
    # Frame 10 and 20 are the keyframes themselves.
    e10 = np.zeros((H, W), bool)
    e10[0:10, 0:20] = True
    assert np.array_equal(mask_on(plan, 10), e10)
    fresh = parse_plan(plan_with({"keyframes": [{"frame": 10, "box": [0, 0, 20, 10]},
                                                {"frame": 20, "box": [100, 50, 140, 90]}]}), INFO)
    for f in range(50):  # decide runs once per frame, in order
        mask_on(fresh, f)
    assert fresh.applied()["moving_boxes[0]"] == {"label": None, "frames": 11, "ranges": [[10, 20]]}


@pytest.mark.parametrize("seed", range(5))
def test_fractional_boxes_follow_the_pixel_centre_rule_of_opencv(seed):
    rng = np.random.default_rng(seed)
    x1, y1 = rng.uniform(0, 150, 2)
    box = np.array([x1, y1, x1 + rng.uniform(3, 100), y1 + rng.uniform(3, 100)])
    x0, r0, c1, r1 = box_pixels(box, W, H)
    got = np.zeros((H, W), bool)
    got[r0:r1, x0:c1] = True
    contour = np.array([[box[0], box[1]], [box[2], box[1]], [box[2], box[3]], [box[0], box[3]]], np.float32)
    ys, xs = np.mgrid[0:H, 0:W]
    want = np.array([cv2.pointPolygonTest(contour, (float(x) + 0.5, float(y) + 0.5), False) >= 0
                     for x, y in zip(xs.ravel(), ys.ravel())]).reshape(H, W)
    assert np.array_equal(got, want)


@pytest.mark.parametrize("entry, words", [
    ({"keyframes": []}, "moving_boxes[0].keyframes: expected a non-empty list"),
    ({"keyframes": [{"frame": 5, "box": [0, 0, 9, 9]}, {"frame": 5, "box": [0, 0, 9, 9]}]},
     "moving_boxes[0].keyframes[1].frame: keyframes must be in increasing frame order"),
    ({"keyframes": [{"frame": 50, "box": [0, 0, 9, 9]}]}, "frame 50 is outside the clip (frames 0-49)"),
    ({"keyframes": [{"frame": 1, "box": [0, 0, 400, 9]}]}, "moving_boxes[0].keyframes[0].box: expected 0 <= x1 < x2 <= 320"),
    ({"keyframes": [{"frame": 1, "box": [3.6, 0, 4.4, 9]}]}, "covers no pixel centre"),
    ({"keyframes": [{"frame": 1, "box": [0, 0, 9, 9], "t": 1}]}, "exactly the keys frame and box"),
    ({"keyframes": [{"frame": 1, "box": [0, 0, 9, 9]}], "colour": "red"}, "moving_boxes[0].colour: unknown key"),
])
def test_bad_moving_boxes_name_the_field(entry, words):
    with pytest.raises(PlanError) as e:
        parse_plan(plan_with(entry), INFO)
    assert words in str(e.value) and "\n" not in str(e.value)


def test_moving_boxes_are_in_the_record_as_written():
    entry = {"label": "x", "keyframes": [{"frame": 1, "box": [0, 0, 9, 9]}]}
    assert parse_plan(plan_with(entry), INFO).record()["moving_boxes"] == [entry]
