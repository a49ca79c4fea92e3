"""Pose engine on real people from scikit-image's open-licence stills, against the reference framework."""

from __future__ import annotations

import json
from pathlib import Path

import cv2
import numpy as np
import pytest
from skimage import data

from redact.errors import InputError
from redact.vision.pose import PoseEstimator, PoseSettings, input_size_for, nms

FIXTURE = Path(__file__).parent / "fixtures" / "pose_reference.json"
NOSE, L_EYE, R_EYE, L_SHOULDER, R_SHOULDER = 0, 1, 2, 5, 6

# Head and torso rectangles (x1, y1, x2, y2) of the person in each still, measured once by inspection.
REGIONS = {
    "astronaut": {"head": (150, 50, 300, 190), "torso": (40, 190, 380, 330)},  # public domain (NASA)
    "camera": {"head": (170, 80, 290, 200), "torso": (60, 140, 280, 330)},     # CC0 (Lav Varshney)
}


@pytest.fixture(scope="module")
def estimator():
    return PoseEstimator.default(PoseSettings())


def _still(name: str) -> np.ndarray:
    # astronaut(): public domain (NASA); camera(): CC0; coffee(): CC0 — per skimage/data/_fetchers.py
    return getattr(data, name)()


def _inside(pt, rect) -> bool:
    return rect[0] <= pt[0] <= rect[2] and rect[1] <= pt[1] <= rect[3]


@pytest.mark.parametrize("name", ["astronaut", "camera"])
def test_one_person_with_confident_head_and_shoulders(estimator, name):
    poses = estimator.estimate(_still(name))
    assert len(poses) == 1
    kp = poses.keypoints[0]
    head, torso = REGIONS[name]["head"], REGIONS[name]["torso"]
    assert kp[NOSE, 2] > 0.5 and _inside(kp[NOSE], head)
    eye = max((L_EYE, R_EYE), key=lambda i: kp[i, 2])  # in profile (camera) one eye is hidden
    assert kp[eye, 2] > 0.5 and _inside(kp[eye], head)
    for s in (L_SHOULDER, R_SHOULDER):
        assert kp[s, 2] > 0.5 and _inside(kp[s], torso)


def test_no_person_in_coffee(estimator):
    assert len(estimator.estimate(_still("coffee"))) == 0


def _against_reference(model: str, name: str):
    """The reference framework's recorded predictions for a still, and ours with the same settings."""
    ref = json.loads(FIXTURE.read_text())
    s = ref["provenance"]["settings"]
    est = PoseEstimator.default(PoseSettings(model=model, input_long_side=s["imgsz"],
                                             score_threshold=s["conf"], nms_iou=s["iou"]))
    return ref["images"][name], est.estimate(_still(name))


@pytest.mark.parametrize("name", ["astronaut", "camera"])
def test_onnx_path_agrees_with_reference_framework(name):
    """Within 1 px of ultralytics' own predictions (recorded by tools/convert_pose_model.py)."""
    r, poses = _against_reference("yolo11n-pose", name)
    assert len(poses) == len(r["boxes"])
    np.testing.assert_allclose(poses.boxes, np.array(r["boxes"]), atol=1.0)
    np.testing.assert_allclose(poses.keypoints[:, :, :2], np.array(r["keypoints"])[:, :, :2], atol=1.0)
    np.testing.assert_allclose(poses.keypoints[:, :, 2], np.array(r["keypoints"])[:, :, 2], atol=0.01)
    np.testing.assert_allclose(poses.scores, r["scores"], atol=0.01)


@pytest.mark.parametrize("name", ["astronaut", "camera"])
def test_int8_model_stays_close_to_reference_framework(name):
    """The int8 copy (tools/quantize_pose_model.py) against ultralytics' float32 predictions on the
    same weights: same people, OKS >= 0.95 over the reference's confident keypoints (COCO OKS, as in
    pycocotools), median keypoint distance <= 5 px, scores within 0.05. Tolerances are this
    project's (measured OKS 0.987 and 0.999), not a published bound."""
    from redact.vision.skeleton import oks

    r, poses = _against_reference("yolo11n-pose-int8", name)
    assert len(poses) == len(r["boxes"]) == 1
    rk, rb = np.array(r["keypoints"])[0], np.array(r["boxes"])[0]
    confident = rk[:, 2] > 0.5
    area = (rb[2] - rb[0]) * (rb[3] - rb[1])
    assert oks(poses.keypoints[0], rk, area, confident) >= 0.95
    assert np.median(np.linalg.norm(poses.keypoints[0, :, :2] - rk[:, :2], axis=1)[confident]) <= 5.0
    assert abs(float(poses.scores[0]) - r["scores"][0]) <= 0.05


def test_grey_and_rgba_inputs(estimator):
    rgb = _still("astronaut")
    rgba = np.dstack([rgb, np.full(rgb.shape[:2], 255, np.uint8)])
    a, b = estimator.estimate(rgb), estimator.estimate(rgba)
    np.testing.assert_array_equal(a.keypoints, b.keypoints)
    assert len(estimator.estimate(_still("camera"))) == 1  # camera() is 2-D grey


def test_tiny_and_huge_images(estimator):
    assert len(estimator.estimate(np.zeros((1, 1, 3), np.uint8))) == 0
    big = cv2.resize(_still("astronaut"), (8000, 8000), interpolation=cv2.INTER_NEAREST)
    poses = estimator.estimate(big)
    assert len(poses) == 1
    assert poses.keypoints[0, NOSE, 0] == pytest.approx(221 * 8000 / 512, rel=0.05)


@pytest.mark.parametrize("bad", ["not an image", np.zeros((0, 0, 3), np.uint8), np.zeros((4, 4, 5), np.uint8),
                                 np.zeros((4, 4, 3), np.float32), None])
def test_bad_inputs_get_clear_errors(estimator, bad):
    with pytest.raises(InputError):
        estimator.estimate(bad)


def test_input_size_keeps_aspect_in_multiples_of_32():
    assert input_size_for(1280, 720, 640) == (640, 384)
    assert input_size_for(720, 1280, 640) == (384, 640)
    assert input_size_for(512, 512, 640) == (640, 640)
    assert input_size_for(5000, 10, 640) == (640, 32)


def test_nms_against_cv2():
    """Greedy NMS agrees with OpenCV's cv2.dnn.NMSBoxes (outside reference) on random boxes."""
    rng = np.random.default_rng(7)
    xy = rng.uniform(0, 200, (60, 2))
    wh = rng.uniform(20, 80, (60, 2))
    boxes = np.c_[xy, xy + wh].astype(np.float32)
    scores = rng.uniform(0, 1, 60).astype(np.float32)
    ours = sorted(nms(boxes, scores, 0.5).tolist())
    theirs = sorted(np.array(cv2.dnn.NMSBoxes(np.c_[xy, wh].tolist(), scores.tolist(), 0.0, 0.5)).reshape(-1).tolist())
    assert ours == theirs


def test_containment_drops_only_boxes_inside_a_better_box():
    boxes = np.array([[0, 0, 100, 200], [10, 10, 60, 90], [90, 0, 190, 200]], np.float32)
    scores = np.array([0.9, 0.8, 0.7], np.float32)
    assert sorted(nms(boxes, scores, 0.6).tolist()) == [0, 1, 2]          # plain NMS keeps the part box
    assert sorted(nms(boxes, scores, 0.6, containment=0.85).tolist()) == [0, 2]
