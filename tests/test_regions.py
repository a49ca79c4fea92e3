"""Regions to obscure: box + margin, united with the padded keypoint hull, clipped to the frame."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from redact.errors import RedactError
from redact.redaction.regions import RegionSettings, people_mask, person_region, track_regions
from redact.vision.records import Tracks

H, W = 240, 320


def _tracks(boxes, kps=None, margins=None, observed=None) -> Tracks:
    boxes = np.asarray(boxes, np.float32).reshape(-1, 4)
    m = len(boxes)
    kps = np.zeros((m, 17, 3), np.float32) if kps is None else np.asarray(kps, np.float32)
    return Tracks(np.arange(m), boxes, np.full(m, 0.9), kps,
                  np.ones(m, bool) if observed is None else np.asarray(observed),
                  np.zeros(m, np.int32), None if margins is None else np.asarray(margins, np.float32))


def test_box_plus_margin_is_covered_and_far_pixels_are_not():
    s = RegionSettings(base_margin=0.1)
    mask = people_mask(_tracks([[100, 60, 140, 160]]), (H, W), s)
    # box 40×100, margin 0.1 → x 96..144, y 50..170 (arithmetic from the definition)
    assert mask[50:171, 96:145].all()
    assert not mask[:, :94].any() and not mask[:, 147:].any()
    assert not mask[:48, :].any() and not mask[173:, :].any()


def test_keypoint_hull_is_covered_beyond_the_box():
    # An arm keypoint reaches far outside the box: the hull (with padding) must cover it and
    # the segment to the shoulder, but low-confidence keypoints are ignored.
    kp = np.zeros((1, 17, 3), np.float32)
    kp[0, 5] = (110, 80, 0.9)   # left shoulder, in the box
    kp[0, 9] = (220, 80, 0.9)   # left wrist, far right of the box
    kp[0, 10] = (20, 200, 0.1)  # right wrist, not confident
    s = RegionSettings(base_margin=0.0, kp_threshold=0.3, kp_pad=0.05, min_pad_px=4)
    mask = people_mask(_tracks([[100, 60, 140, 160]], kp), (H, W), s)
    assert mask[80, 110:221].all()          # the arm segment
    assert mask[80, 224] and mask[76, 220]  # padding around the wrist (pad = 0.05·100 = 5 px)
    assert not mask[80, 232]                # but not much further
    assert not mask[195:205, 15:25].any()   # the unconfident keypoint is not covered


def test_region_grows_with_track_margin():
    small = people_mask(_tracks([[100, 60, 140, 160]], margins=[0.0]), (H, W))
    big = people_mask(_tracks([[100, 60, 140, 160]], margins=[0.5]), (H, W))
    assert big.sum() > small.sum()
    assert (big | small).sum() == big.sum()  # the larger region contains the smaller
    assert big[40:181, 80:161].all()         # box grown by 0.15+0.5 of its size each side


def test_clipped_at_frame_edges_and_partly_offscreen_person_still_covered():
    kp = np.zeros((1, 17, 3), np.float32)
    kp[0, 0] = (-10, 30, 0.9)  # nose off-screen
    kp[0, 5] = (15, 60, 0.9)
    mask = people_mask(_tracks([[-60, -20, 40, 120]], kp), (H, W))
    assert mask.shape == (H, W)
    assert mask[0:130, 0:50].all()  # visible part of the box (+ margin) is covered
    r = track_regions(_tracks([[-60, -20, 40, 120]], kp), (H, W))[0]
    x0, y0, x1, y1 = r.rect
    assert x0 >= 0 and y0 >= 0 and x1 <= W and y1 <= H
    # size comes from the unclipped grown box, so an off-screen half is obscured as strongly
    assert r.size >= 100


def test_entirely_offscreen_person_gives_empty_region():
    r = track_regions(_tracks([[-300, -300, -200, -100]]), (H, W))[0]
    assert r.empty and not r.mask((H, W)).any()


def test_non_finite_box_raises_so_caller_can_fail_closed():
    with pytest.raises(RedactError):
        person_region(np.array([np.nan, 0, 10, 10]), np.zeros((17, 3)), 0.0, (H, W))


def test_union_of_two_people():
    mask = people_mask(_tracks([[10, 10, 50, 100], [200, 50, 260, 200]]), (H, W), RegionSettings(base_margin=0))
    assert mask[10:101, 10:51].all() and mask[50:201, 200:261].all()
    assert not mask[120:, :150].any()


@settings(max_examples=60, deadline=None)
@given(x=st.floats(-400, 700), y=st.floats(-300, 500), w=st.floats(1, 300), h=st.floats(1, 400),
       extra=st.floats(0, 1))
def test_any_box_is_covered_where_it_is_visible(x, y, w, h, extra):
    # Property from the definition: every frame pixel inside the grown box is in the mask.
    s = RegionSettings(base_margin=0.1)
    mask = people_mask(_tracks([[x, y, x + w, y + h]], margins=[extra]), (H, W), s)
    m = 0.1 + extra
    gx0, gy0 = int(np.ceil(x - m * w)), int(np.ceil(y - m * h))
    gx1, gy1 = int(np.floor(x + w + m * w)), int(np.floor(y + h + m * h))
    gx0, gy0, gx1, gy1 = max(gx0, 0), max(gy0, 0), min(gx1, W - 1), min(gy1, H - 1)
    if gx1 >= gx0 and gy1 >= gy0:
        assert mask[gy0:gy1 + 1, gx0:gx1 + 1].all()


def test_paint_covers_exactly_the_mask():
    """The solid-fill fast path paints the same pixels the region's mask marks."""
    import numpy as np

    from redact.redaction.regions import person_region

    kp = np.zeros((17, 3))
    kp[0] = (60, 30, 0.9)
    kp[5] = (40, 70, 0.9)
    kp[6] = (85, 72, 0.9)
    region = person_region(np.array([30.0, 20.0, 95.0, 150.0]), kp, 0.2, (120, 110, 3))
    img = np.zeros((120, 110, 3), np.uint8)
    region.paint(img, (200, 200, 200))
    np.testing.assert_array_equal(img[:, :, 0] == 200, region.mask(img.shape))
    assert (img[region.mask(img.shape)] == 200).all()
