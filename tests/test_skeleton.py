"""COCO-17 layout and OKS, checked against the published COCO keypoint definition and pycocotools."""

from __future__ import annotations

import numpy as np
import pytest

from redact.vision.skeleton import KEYPOINT_NAMES, LINKS, LINKS_1BASED, SIGMAS, oks, oks_matrix

# Source: COCO keypoint format (cocodataset.org), as listed in shared/CHECKS.md.
COCO_NAMES = ["nose", "left_eye", "right_eye", "left_ear", "right_ear", "left_shoulder", "right_shoulder",
              "left_elbow", "right_elbow", "left_wrist", "right_wrist", "left_hip", "right_hip", "left_knee",
              "right_knee", "left_ankle", "right_ankle"]
COCO_SKELETON = [[16, 14], [14, 12], [17, 15], [15, 13], [12, 13], [6, 12], [7, 13], [6, 7], [6, 8], [7, 9],
                 [8, 10], [9, 11], [2, 3], [1, 2], [1, 3], [2, 4], [3, 5], [4, 6], [5, 7]]


def test_names_links_sigmas_match_published_coco():
    from pycocotools.cocoeval import Params  # outside reference: pycocotools' own sigmas

    assert list(KEYPOINT_NAMES) == COCO_NAMES
    assert [list(link) for link in LINKS_1BASED] == COCO_SKELETON
    assert all(a == x - 1 and b == y - 1 for (a, b), (x, y) in zip(LINKS, LINKS_1BASED))
    np.testing.assert_allclose(SIGMAS, Params(iouType="keypoints").kpt_oks_sigmas, rtol=0, atol=0)


def _coco_oks(gt_kp: np.ndarray, gt_area: float, gt_box, dt_kp: np.ndarray) -> float:
    """OKS as pycocotools' COCOeval.computeOks computes it for one gt and one detection."""
    from pycocotools.coco import COCO
    from pycocotools.cocoeval import COCOeval

    gt = COCO()
    gt.dataset = {
        "images": [{"id": 1, "width": 1000, "height": 1000}],
        "categories": [{"id": 1, "name": "person", "keypoints": COCO_NAMES, "skeleton": COCO_SKELETON}],
        "annotations": [{"id": 1, "image_id": 1, "category_id": 1, "iscrowd": 0, "area": gt_area,
                         "bbox": list(gt_box), "keypoints": gt_kp.reshape(-1).tolist(),
                         "num_keypoints": int((gt_kp[:, 2] > 0).sum())}],
    }
    gt.createIndex()
    dt = gt.loadRes([{"image_id": 1, "category_id": 1, "keypoints": dt_kp.reshape(-1).tolist(), "score": 1.0}])
    ev = COCOeval(gt, dt, "keypoints")
    ev._prepare()
    return float(ev.computeOks(1, 1)[0, 0])


@pytest.mark.parametrize("case", range(6))
def test_oks_matches_pycocotools(case):
    rng = np.random.default_rng(case)
    gt = np.zeros((17, 3))
    gt[:, 0] = rng.uniform(300, 500, 17)
    gt[:, 1] = rng.uniform(200, 700, 17)
    gt[:, 2] = 2
    if case >= 3:  # some ground-truth keypoints not labelled
        gt[rng.choice(17, 5, replace=False), 2] = 0
    dt = gt.copy()
    dt[:, :2] += rng.normal(0, [2, 5, 10, 20, 4, 8][case], (17, 2))
    dt[:, 2] = 1
    area = float(rng.uniform(5_000, 60_000))
    box = [300, 200, 200, 500]
    expected = _coco_oks(gt, area, box, dt)
    assert oks(dt, gt, area, visible=gt[:, 2]) == pytest.approx(expected, abs=1e-12)
    m = oks_matrix(dt[None], np.c_[gt[:, :2], gt[:, 2]][None], np.array([area]), min_conf=0)
    assert m[0, 0] == pytest.approx(expected, abs=1e-12)


def test_oks_identity_and_far():
    pose = np.c_[np.linspace(0, 160, 17), np.linspace(0, 320, 17), np.ones(17)]
    assert oks(pose, pose, 10_000) == 1.0
    assert oks(pose + [1000, 0, 0], pose, 10_000) < 1e-6
    assert oks(pose, pose, 10_000, visible=np.zeros(17)) == 0.0
