"""The shared kernels: box geometry (redact.vision.boxes), frame ranges (redact.ranges), and the
bug their copies caused (privacy rebuilt Tracks without `hits`).

Outside references: OpenCV's cv2.dnn.NMSBoxes (greedy NMS, suppress when IoU > threshold) and
cv2.resize's geometry for the letterbox; pycocotools' maskUtils.iou for IoU (also checked in
tests/test_costs.py). Range examples are hand-computed.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from redact.ranges import RangeBuilder, format_ranges, frame_ranges
from redact.vision import boxes as B


def _random_boxes(seed: int, n: int = 50):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 200, (n, 2))
    wh = rng.uniform(5, 70, (n, 2))
    return xy, wh, rng.uniform(0.05, 1.0, n)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_nms_and_the_audit_merge_agree_with_opencv_without_containment(seed):
    from redact.redaction.audit import merge_detections

    xy, wh, scores = _random_boxes(seed)
    boxes = np.c_[xy, xy + wh]
    ref = sorted(np.asarray(cv2.dnn.NMSBoxes(np.c_[xy, wh].tolist(), scores.tolist(), 0.0, 0.4)).reshape(-1).tolist())
    assert sorted(B.nms(boxes, scores, 0.4).tolist()) == ref
    assert sorted(merge_detections(boxes, scores, 0.4, 1.0).tolist()) == ref  # containment 1.0: never "more than"


def test_containment_rules_differ_only_in_which_area_they_measure():
    from redact.redaction.audit import merge_detections

    # The better box (0) lies wholly inside the worse one (1): the pose rule measures the dropped
    # box's own area (25 % inside: kept), the audit the smaller box's (100 %: dropped).
    boxes = np.array([[10, 10, 20, 20], [5, 5, 25, 25]], float)
    scores = np.array([0.9, 0.8])
    assert B.nms(boxes, scores, 0.9, containment=0.5).tolist() == [0, 1]
    assert merge_detections(boxes, scores, 0.9, 0.5).tolist() == [0]


def test_iou_of_one_pair_matches_pycocotools():
    from pycocotools import mask as mask_utils  # reference implementation (COCO API)

    from redact.redaction.audit import iou

    xy, wh, _ = _random_boxes(5, 20)
    ref = mask_utils.iou(np.c_[xy, wh][:10].tolist(), np.c_[xy, wh][10:].tolist(), [0] * 10)
    ours = B.iou_matrix(np.c_[xy, xy + wh][:10], np.c_[xy, xy + wh][10:])
    np.testing.assert_allclose(ours, ref, atol=1e-9)
    a, b = np.c_[xy, xy + wh][0], np.c_[xy, xy + wh][10]
    assert iou(tuple(a), tuple(b)) == pytest.approx(ref[0][0], abs=1e-9)


def test_pose_letterbox_maps_input_pixels_back_to_the_source():
    from redact.vision.pose import letterbox

    img = np.zeros((100, 200, 3), np.uint8)
    img[40:60, 90:110] = 255  # a white square centred at source (100, 50)
    tensor, lb = letterbox(img, 64, 64)
    assert (lb.scale, lb.pad_x, lb.pad_y, lb.src_w, lb.src_h, lb.in_w, lb.in_h) == (0.32, 0, 16, 200, 100, 64, 64)
    ys, xs = np.nonzero(tensor[0, 0] > 0.6)  # where the square landed in the input (cv2.resize INTER_AREA)
    centre = np.array([[xs.mean() + 0.5, ys.mean() + 0.5]])  # pixel centres
    np.testing.assert_allclose(lb.to_source(centre), [[100, 50]], atol=1.0)
    np.testing.assert_allclose(lb.boxes_to_source(np.array([[0, 16, 64, 48]], np.float32)), [[0, 0, 200, 100]])


def test_face_letterbox_is_the_same_record():
    from redact.vision.face import preprocess
    from redact.vision.pose import Letterbox as PoseLetterbox

    _, lb = preprocess(np.zeros((100, 300, 3), np.uint8), 128)
    assert type(lb) is B.Letterbox is PoseLetterbox
    np.testing.assert_allclose(lb.to_source(np.array([[0.0, 128.0]])), [[0, 200]])  # the square's corner


def test_frame_ranges_hand_computed():
    assert frame_ranges([]) == []
    assert frame_ranges([3, 4, 5, 9, 11, 12]) == [[3, 5], [9, 9], [11, 12]]
    assert frame_ranges([3, 3, 4, 4, 7]) == [[3, 4], [7, 7]]  # repeats add nothing
    assert frame_ranges([0, 3, 6, 10, 13], gap=3) == [[0, 6], [10, 13]]  # every 3rd frame scanned
    assert format_ranges([5, 1, 2, 3, 2]) == "1-3, 5"
    assert format_ranges([7, 8, 10], dash="–") == "7–8, 10"
    b = RangeBuilder()
    for f in (4, 5, 5, 6, 9):
        b.add(f)
    assert b.ranges == [[4, 6], [9, 9]] and b.count() == 4
    with pytest.raises(ValueError):
        RangeBuilder(0)


def test_every_user_of_ranges_says_the_same():
    from redact.redaction.audit import FrameAudit, finding_ranges
    from redact.redaction.plan import format_ids
    from redact.report.document import _spans

    frames = [2, 3, 4, 8, 10, 11]
    assert format_ids(frames) == "2-4, 8, 10-11"
    assert _spans(frames) == "2–4, 8, 10–11"
    face = ((0.0, 0.0, 10.0, 10.0), 0.9)
    audits = tuple(FrameAudit(f, f / 25, (face,) if f in frames else (), ()) for f in range(14))
    assert finding_ranges(audits, 1) == ((2, 4, ("face",)), (8, 8, ("face",)), (10, 11, ("face",)))
    assert finding_ranges(audits, 2) == ((2, 4, ("face",)), (8, 11, ("face",)))


def test_privacy_keeps_every_track_field_it_does_not_change(monkeypatch):
    """The de-identification rebuilt Tracks positionally and left out `hits`, silently resetting it
    to zeros; it now changes only the fields it means to (ids, boxes, keypoints)."""
    from redact.skeletons import privacy as pv
    from redact.skeletons.rows import FrameRow
    from redact.vision.records import Tracks

    kp = np.zeros((2, 17, 3))
    kp[:, :, :2] = np.arange(34).reshape(17, 2)
    kp[:, :, 2] = 0.9
    tr = Tracks(np.array([3, 8]), np.array([[0, 0, 40, 40], [5, 5, 50, 60]]), np.array([0.9, 0.8]), kp,
                np.array([True, False]), np.array([0, 2], np.int32), np.array([0.1, 0.2], np.float32),
                np.array([7, 12], np.int32))
    seen: list[Tracks] = []
    real = pv.encode_row_units

    def capture(frame, pts, t, tracks, *rest):
        seen.append(tracks)
        return real(frame, pts, t, tracks, *rest)

    monkeypatch.setattr(pv, "encode_row_units", capture)
    options = pv.PrivacyOptions(drop_keypoints=(0, 1), noise_px=1.0, new_ids=True, seed=1)
    lines = list(pv.apply_privacy([FrameRow(0, 0, 0.0, "ok", tr)], options, (640, 480)))
    assert len(lines) == 1 and len(seen) == 1
    out = seen[0]
    assert out.hits.tolist() == [7, 12]
    assert out.margin.tolist() == pytest.approx([0.1, 0.2])
    assert out.misses.tolist() == [0, 2] and out.observed.tolist() == [True, False]
    assert out.ids.tolist() != [3, 8]  # new ids were given, so the rebuilt path ran
