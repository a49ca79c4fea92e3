"""Box geometry shared by every detector and the tracker: areas, IoU, greedy NMS, the letterbox.

Boxes are float arrays [N,4] x1,y1,x2,y2 in pixels. One implementation of each, so that the pose
model, the face detector, the audit, the tracker and the redaction plan cannot drift apart.

- IoU: intersection over union; a pair whose union is empty has IoU 0; an inverted box has area 0.
- NMS: greedy non-maximum suppression (keep the best-scoring box, drop what it suppresses, repeat).
  What counts as suppressed differs by caller and is a small rule passed in: the pose model drops
  duplicates by IoU and a box lying mostly inside a kept one (`nms`), the audit measures
  containment against the smaller of the two boxes (redact.redaction.audit.merge_detections).
- Letterbox: how an image was scaled (keeping its aspect) and padded into a model input, to map
  model coordinates back to source pixels.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

#: A suppression rule for `greedy_nms`: (iou [R], inter [R], kept area (scalar), rest areas [R]) → drop [R] bool,
#: for the boxes still in play against the box just kept.
SuppressRule = Callable[[np.ndarray, np.ndarray, float, np.ndarray], np.ndarray]


def box_areas(boxes: np.ndarray) -> np.ndarray:
    """Areas [N] float64 of boxes [N,4] x1,y1,x2,y2; degenerate (inverted) boxes have area 0."""
    b = np.asarray(boxes, np.float64).reshape(-1, 4)
    return np.clip(b[:, 2] - b[:, 0], 0.0, None) * np.clip(b[:, 3] - b[:, 1], 0.0, None)


def intersections(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Intersection areas [N,M] float64 of boxes a [N,4] and b [M,4]."""
    a = np.asarray(a, np.float64).reshape(-1, 4)
    b = np.asarray(b, np.float64).reshape(-1, 4)
    iw = np.minimum(a[:, None, 2], b[None, :, 2]) - np.maximum(a[:, None, 0], b[None, :, 0])
    ih = np.minimum(a[:, None, 3], b[None, :, 3]) - np.maximum(a[:, None, 1], b[None, :, 1])
    return np.clip(iw, 0.0, None) * np.clip(ih, 0.0, None)


def iou_matrix(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Intersection over union [N,M] float64 of boxes a [N,4] and b [M,4] (x1,y1,x2,y2).

    A pair whose union is empty (two zero-area boxes) has IoU 0.
    """
    inter = intersections(a, b)
    union = box_areas(a)[:, None] + box_areas(b)[None, :] - inter
    out = np.zeros(inter.shape)
    np.divide(inter, union, out=out, where=union > 0)
    return out


def greedy_nms(boxes: np.ndarray, scores: np.ndarray, suppress: SuppressRule) -> np.ndarray:
    """Greedy non-maximum suppression: kept indices [K] int64, best score first (ties in input order).

    boxes [N,4], scores [N]. Repeatedly keeps the best remaining box and drops the remaining boxes
    for which `suppress(iou, inter, kept_area, rest_areas)` is True.
    """
    b = np.asarray(boxes, np.float64).reshape(-1, 4)
    order = np.argsort(-np.asarray(scores), kind="stable")
    areas = box_areas(b)
    keep: list[int] = []
    while order.size:
        i = int(order[0])
        keep.append(i)
        rest = order[1:]
        inter = intersections(b[i], b[rest])[0]
        union = areas[i] + areas[rest] - inter
        ious = np.divide(inter, union, out=np.zeros_like(inter), where=union > 0)
        order = rest[~suppress(ious, inter, float(areas[i]), areas[rest])]
    return np.array(keep, dtype=np.int64)


def nms(boxes: np.ndarray, scores: np.ndarray, iou: float, containment: float = 0.0) -> np.ndarray:
    """Greedy NMS as the pose model needs it; returns kept indices, best score first.

    A box is dropped when its IoU with a kept box exceeds `iou`, or, with containment > 0, when its
    intersection with a kept box covers at least that fraction of its own area (a box of zero area
    counts as contained).
    """

    def suppress(ious, inter, kept_area, rest_areas):
        drop = ious > iou
        if containment > 0:
            inside = np.divide(inter, rest_areas, out=np.ones_like(inter), where=rest_areas > 0)
            drop |= inside >= containment
        return drop

    return greedy_nms(boxes, scores, suppress)


@dataclass(frozen=True)
class Letterbox:
    """How a source image (src_w × src_h) was scaled by `scale` and padded into a model input
    (in_w × in_h): input pixel = source pixel × scale + pad. pad_x, pad_y are in input pixels."""

    scale: float
    pad_x: float
    pad_y: float
    src_w: int
    src_h: int
    in_w: int
    in_h: int

    def to_source(self, xy: np.ndarray) -> np.ndarray:
        """Input-pixel coordinates xy [..., 2] → source pixels [..., 2] (same dtype for float32 input)."""
        a = np.asarray(xy)
        return (a - np.array([self.pad_x, self.pad_y], a.dtype)) / a.dtype.type(self.scale)

    def boxes_to_source(self, boxes: np.ndarray) -> np.ndarray:
        """Input-pixel boxes [N,4] → source pixels [N,4]."""
        b = np.asarray(boxes)
        return (b - np.array([self.pad_x, self.pad_y, self.pad_x, self.pad_y], b.dtype)) / b.dtype.type(self.scale)
