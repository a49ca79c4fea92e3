"""COCO-17 keypoint layout (names, links, OKS sigmas) and Object Keypoint Similarity.

Source: the COCO keypoint format (cocodataset.org) and pycocotools' cocoeval.py.
"""

from __future__ import annotations

import numpy as np

KEYPOINT_NAMES: tuple[str, ...] = (
    "nose", "left_eye", "right_eye", "left_ear", "right_ear",
    "left_shoulder", "right_shoulder", "left_elbow", "right_elbow",
    "left_wrist", "right_wrist", "left_hip", "right_hip",
    "left_knee", "right_knee", "left_ankle", "right_ankle",
)
NUM_KEYPOINTS = len(KEYPOINT_NAMES)

#: The 19 skeleton links as published by COCO (1-based keypoint numbers).
LINKS_1BASED: tuple[tuple[int, int], ...] = (
    (16, 14), (14, 12), (17, 15), (15, 13), (12, 13), (6, 12), (7, 13), (6, 7), (6, 8),
    (7, 9), (8, 10), (9, 11), (2, 3), (1, 2), (1, 3), (2, 4), (3, 5), (4, 6), (5, 7),
)
#: The same links, 0-based, for indexing keypoint arrays.
LINKS: tuple[tuple[int, int], ...] = tuple((a - 1, b - 1) for a, b in LINKS_1BASED)

#: Per-keypoint OKS sigmas from pycocotools cocoeval.py.
SIGMAS = np.array(
    [.26, .25, .25, .35, .35, .79, .79, .72, .72, .62, .62, 1.07, 1.07, .87, .87, .89, .89]
) / 10.0

HEAD_KEYPOINTS: tuple[int, ...] = (0, 1, 2, 3, 4)


def oks(pred: np.ndarray, truth: np.ndarray, area: float, visible: np.ndarray | None = None) -> float:
    """Object Keypoint Similarity of one predicted pose against one ground-truth pose.

    pred, truth: [17, 2+] pixel coordinates; area: ground-truth object area (s²);
    visible: [17] ground-truth visibility flags (v > 0 counts), default all visible.
    OKS = Σ exp(−d²/(2 s² κ²))·[v>0] / Σ[v>0], κ = 2σ (COCO). Returns 0.0 with no visible keypoint.
    """
    pred = np.asarray(pred, dtype=np.float64)
    truth = np.asarray(truth, dtype=np.float64)
    if pred.shape[0] != NUM_KEYPOINTS or truth.shape[0] != NUM_KEYPOINTS:
        raise ValueError(f"expected [17, 2+] keypoints, got {pred.shape} and {truth.shape}")
    vis = np.ones(NUM_KEYPOINTS, bool) if visible is None else np.asarray(visible) > 0
    if not vis.any():
        return 0.0
    kappa2 = (2.0 * SIGMAS) ** 2
    d2 = ((pred[:, :2] - truth[:, :2]) ** 2).sum(axis=1)
    # pycocotools adds np.spacing(1) to the area to avoid division by zero.
    e = d2 / kappa2 / (area + np.spacing(1)) / 2.0
    return float(np.exp(-e)[vis].sum() / vis.sum())


def oks_matrix(a: np.ndarray, b: np.ndarray, areas_b: np.ndarray, min_conf: float = 0.0) -> np.ndarray:
    """Pairwise OKS between poses a [N,17,3] and b [M,17,3] (b is the reference, with areas [M]).

    Keypoints of b whose confidence is not above min_conf are treated as not visible.
    Returns [N, M] float64.
    """
    a = np.asarray(a, np.float64)
    b = np.asarray(b, np.float64)
    n, m = len(a), len(b)
    if n == 0 or m == 0:
        return np.zeros((n, m))
    kappa2 = (2.0 * SIGMAS) ** 2
    d2 = ((a[:, None, :, :2] - b[None, :, :, :2]) ** 2).sum(-1)  # [N, M, 17]
    e = d2 / kappa2[None, None, :] / (np.asarray(areas_b, np.float64)[None, :, None] + np.spacing(1)) / 2.0
    vis = (b[:, :, 2] > min_conf)[None, :, :]
    num = (np.exp(-e) * vis).sum(-1)
    den = vis.sum(-1)
    out = np.zeros((n, m))
    np.divide(num, den, out=out, where=den > 0)
    return out
