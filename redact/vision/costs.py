"""Pairwise matching costs between tracks and detections: pure, vectorised, chosen by name.

Every cost function takes the tracks' predicted boxes [N,4] and keypoints [N,17,3] and the
detections' boxes [M,4] and keypoints [M,17,3] (pixels, x1,y1,x2,y2 and x,y,confidence) and
returns a [N,M] float64 matrix in 0..1 where 0 is a perfect match. The tracker gates and assigns
on it; it never looks inside. Build one with `make_cost(name, ...)`; names are in `COST_NAMES`.

Box overlap is intersection over union; keypoint similarity is COCO's Object Keypoint
Similarity (OKS, cocodataset.org keypoint evaluation) from redact.vision.skeleton.oks_matrix, with the
detection as the reference pose and its box area standing in for the object area s²
(common practice when no segmentation exists; COCO itself uses the segment area).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from redact.errors import InputError
from redact.vision.boxes import box_areas, iou_matrix
from redact.vision.skeleton import NUM_KEYPOINTS, oks_matrix

#: A cost function: (track boxes [N,4], track kps [N,17,3], det boxes [M,4], det kps [M,17,3]) -> [N,M].
CostFn = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]


def keypoint_counts(kps: np.ndarray, min_conf: float) -> np.ndarray:
    """Number [N] of keypoints in kps [N,17,3] whose confidence is above min_conf."""
    k = np.asarray(kps, np.float64).reshape(-1, NUM_KEYPOINTS, 3)
    return (k[:, :, 2] > min_conf).sum(axis=1)


def oks_similarity(track_kps: np.ndarray, det_boxes: np.ndarray, det_kps: np.ndarray,
                   min_conf: float) -> tuple[np.ndarray, np.ndarray]:
    """OKS [N,M] of track poses against detection poses, and a validity mask [N,M].

    A pair is valid when both poses have at least one keypoint above min_conf; OKS counts only
    the detection's confident keypoints (redact.vision.skeleton.oks_matrix).
    """
    sim = oks_matrix(track_kps, det_kps, box_areas(det_boxes), min_conf=min_conf)
    valid = (keypoint_counts(track_kps, min_conf)[:, None] > 0) & (keypoint_counts(det_kps, min_conf)[None, :] > 0)
    return np.where(valid, sim, 0.0), valid


@dataclass(frozen=True)
class _CostSpec:
    iou_weight: float
    oks_weight: float
    min_conf: float


def _iou_cost(spec: _CostSpec) -> CostFn:
    def cost(tb, tk, db, dk):
        return 1.0 - iou_matrix(tb, db)
    return cost


def _oks_cost(spec: _CostSpec) -> CostFn:
    def cost(tb, tk, db, dk):
        sim, _ = oks_similarity(tk, db, dk, spec.min_conf)
        return 1.0 - sim  # a pair without keypoints costs 1 (no evidence of a match)
    return cost


def _iou_oks_cost(spec: _CostSpec) -> CostFn:
    wi, wo = spec.iou_weight, spec.oks_weight

    def cost(tb, tk, db, dk):
        iou = iou_matrix(tb, db)
        sim, valid = oks_similarity(tk, db, dk, spec.min_conf)
        # Weighted mean of the similarities; where a pose has no confident keypoint the OKS term
        # is left out (its weight becomes 0) so the pair is judged on the boxes alone.
        w_oks = np.where(valid, wo, 0.0)
        den = wi + w_oks
        out = np.ones(iou.shape)
        np.divide(wi * iou + w_oks * sim, den, out=out, where=den > 0)
        return 1.0 - np.where(den > 0, out, 0.0)
    return cost


_REGISTRY: dict[str, Callable[[_CostSpec], CostFn]] = {
    "iou": _iou_cost,
    "oks": _oks_cost,
    "iou+oks": _iou_oks_cost,
}
COST_NAMES: tuple[str, ...] = tuple(_REGISTRY)


def make_cost(name: str, iou_weight: float = 0.5, oks_weight: float = 0.5, min_conf: float = 0.3) -> CostFn:
    """The cost function registered under name ("iou", "oks" or "iou+oks").

    iou_weight, oks_weight: weights of the two similarities in "iou+oks" (at least one > 0);
    min_conf: keypoints at or below this confidence are not used by OKS.
    """
    if name not in _REGISTRY:
        raise InputError(f"unknown tracking cost {name!r}; choose one of {', '.join(COST_NAMES)}")
    if iou_weight < 0 or oks_weight < 0 or (name == "iou+oks" and iou_weight + oks_weight <= 0):
        raise InputError("tracking cost weights must be non-negative and not both zero")
    return _REGISTRY[name](_CostSpec(float(iou_weight), float(oks_weight), float(min_conf)))
