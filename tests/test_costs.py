"""Matching costs: IoU against hand-computed values and pycocotools, OKS against redact.vision.skeleton.oks."""

from __future__ import annotations

import numpy as np
import pytest

from redact.errors import InputError
from redact.vision.costs import COST_NAMES, box_areas, iou_matrix, make_cost
from redact.vision.skeleton import NUM_KEYPOINTS, oks


def _pose(cx: float, cy: float, scale: float = 40.0, conf: float = 0.9) -> np.ndarray:
    """A fixed, person-like layout of 17 keypoints around (cx, cy), [17,3]."""
    rel = np.array([[0, -1.0], [-.1, -1.05], [.1, -1.05], [-.2, -1], [.2, -1], [-.4, -.6], [.4, -.6],
                    [-.5, -.2], [.5, -.2], [-.55, .15], [.55, .15], [-.25, .2], [.25, .2],
                    [-.25, .6], [.25, .6], [-.25, 1.0], [.25, 1.0]])
    k = np.zeros((NUM_KEYPOINTS, 3))
    k[:, 0] = cx + rel[:, 0] * scale
    k[:, 1] = cy + rel[:, 1] * scale
    k[:, 2] = conf
    return k


def test_iou_hand_computed():
    # Hand-computed: intersection and union of axis-aligned rectangles (x1,y1,x2,y2).
    a = np.array([[0, 0, 10, 10]])
    b = np.array([
        [0, 0, 10, 10],    # identical: 100/100 = 1
        [5, 5, 15, 15],    # overlap 5x5 = 25; union 100+100-25 = 175 -> 1/7
        [2, 2, 4, 4],      # inside: 4/100
        [10, 0, 20, 10],   # touching edge: 0
        [20, 20, 30, 30],  # disjoint: 0
        [0, 5, 10, 25],    # overlap 10x5 = 50; union 100+200-50 = 250 -> 0.2
    ])
    got = iou_matrix(a, b)
    assert got.shape == (1, 6) and got.dtype == np.float64
    np.testing.assert_allclose(got[0], [1.0, 1 / 7, 0.04, 0.0, 0.0, 0.2], rtol=0, atol=1e-12)
    # Symmetric: IoU(b, a) is the transpose.
    np.testing.assert_allclose(iou_matrix(b, a), got.T)


def test_iou_zero_area_boxes_are_zero_not_nan():
    z = np.array([[5, 5, 5, 5]])
    assert iou_matrix(z, z)[0, 0] == 0.0
    assert box_areas(np.array([[4, 4, 2, 2]]))[0] == 0.0  # inverted box: area 0


def test_iou_matches_pycocotools():
    # Outside reference: pycocotools (COCO's evaluation code) computes box IoU from x,y,w,h boxes.
    from pycocotools import mask as mask_utils

    rng = np.random.default_rng(7)
    xy = rng.uniform(0, 200, (30, 2))
    wh = rng.uniform(1, 80, (30, 2))
    xyxy = np.hstack([xy, xy + wh])
    a, b = xyxy[:12], xyxy[12:]
    ref = mask_utils.iou(np.hstack([xy[:12], wh[:12]]).tolist(), np.hstack([xy[12:], wh[12:]]).tolist(),
                         [0] * 18)
    got = iou_matrix(a, b)
    assert (got > 0).sum() >= 5  # the random boxes do overlap somewhere, so the check has teeth
    np.testing.assert_allclose(got, ref, atol=1e-9)


@pytest.mark.parametrize("name", COST_NAMES)
@pytest.mark.parametrize("n,m", [(3, 4), (0, 2), (2, 0), (0, 0)])
def test_cost_shape_dtype_range(name, n, m):
    rng = np.random.default_rng(n * 10 + m)
    tb = np.hstack([rng.uniform(0, 100, (n, 2)), rng.uniform(100, 200, (n, 2))])
    db = np.hstack([rng.uniform(0, 100, (m, 2)), rng.uniform(100, 200, (m, 2))])
    tk = np.stack([_pose(*rng.uniform(50, 150, 2)) for _ in range(n)]) if n else np.zeros((0, 17, 3))
    dk = np.stack([_pose(*rng.uniform(50, 150, 2)) for _ in range(m)]) if m else np.zeros((0, 17, 3))
    c = make_cost(name)(tb, tk, db, dk)
    assert c.shape == (n, m) and c.dtype == np.float64
    assert np.isfinite(c).all() and (c >= 0).all() and (c <= 1).all()


def test_oks_cost_agrees_with_single_pair_oks():
    # redact.vision.skeleton.oks follows pycocotools' cocoeval formula; the matrix cost must agree with it.
    truth = _pose(100, 100)
    near = truth.copy()
    near[:, :2] += [3.0, -2.0]
    box = np.array([[60.0, 50.0, 140.0, 150.0]])
    c = make_cost("oks")(box, near[None], box, truth[None])
    expect = 1.0 - oks(near, truth, area=80.0 * 100.0)
    assert 0.0 < expect < 0.5
    assert c[0, 0] == pytest.approx(expect, abs=1e-12)
    assert make_cost("oks")(box, truth[None], box, truth[None])[0, 0] == pytest.approx(0.0, abs=1e-12)


def test_iou_plus_oks_is_weighted_mean_and_falls_back_to_iou_without_keypoints():
    t = _pose(100, 100)
    d = t.copy()
    d[:, :2] += 4.0
    tb = np.array([[60.0, 50.0, 140.0, 150.0]])
    db = tb + 10.0
    iou = iou_matrix(tb, db)[0, 0]
    sim = 1.0 - make_cost("oks")(tb, t[None], db, d[None])[0, 0]
    c = make_cost("iou+oks", iou_weight=1.0, oks_weight=3.0)(tb, t[None], db, d[None])[0, 0]
    assert c == pytest.approx(1.0 - (1.0 * iou + 3.0 * sim) / 4.0, abs=1e-12)
    # No confident keypoint in the detection: judged on the boxes alone.
    d_lo = d.copy()
    d_lo[:, 2] = 0.1
    c_lo = make_cost("iou+oks", min_conf=0.3)(tb, t[None], db, d_lo[None])[0, 0]
    assert c_lo == pytest.approx(1.0 - iou, abs=1e-12)


def test_unknown_cost_and_bad_weights_raise():
    with pytest.raises(InputError, match="unknown tracking cost"):
        make_cost("euclid")
    with pytest.raises(InputError):
        make_cost("iou+oks", iou_weight=0.0, oks_weight=0.0)
