"""Moving areas that no tracked person explains: obscured anyway, and flagged for review.

The motion net (redact.vision.motion) finds what moves; the tracker says where the people it
knows are. Whatever moves outside every obscured region may be a person the model missed, so it
is obscured too (fail closed), by a box grown around the moving pixels, and held for a few
frames so that a walker whose blob flickers stays covered. These boxes are never skeletons and
never rows: they say only that something moved there.

Not every such area is a person: a shadow, a swinging door, a bag. A frame is flagged for review
(reason "unexplained_motion") only when an unexplained area is at least `flag_height` of the
smallest person of interest tall and does not touch an obscured region (a person's own shadow,
bag or swinging arm does), so that a reviewer's list is not filled with shadows; all of them are
obscured regardless.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import cv2
import numpy as np

from redact.errors import InputError
from redact.vision.motion import Foreground

_OPEN = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (3, 3))
_JOIN = cv2.getStructuringElement(cv2.MORPH_RECT, (3, 7))


@dataclass(frozen=True)
class UnexplainedSettings:
    """How unexplained movement is obscured. Defaults are common practice (no published source).

    margin: grow each box by this fraction of its size on each side, plus pad_px pixels.
    min_area: smallest unexplained area kept, in analysis pixels of the motion net.
    hold_seconds: an area stays obscured this long after it was last seen (blobs flicker).
    flag_height: flag the frame when an area is at least this fraction of min_person_height tall.
    """

    margin: float = 0.25
    pad_px: float = 8.0
    min_area: int = 4
    hold_seconds: float = 0.3
    flag_height: float = 0.75

    def __post_init__(self) -> None:
        for name in ("margin", "pad_px", "hold_seconds", "flag_height"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0):
                raise InputError(f"unexplained-motion setting {name} must be a number >= 0, got {v}")
        if self.min_area < 1:
            raise InputError(f"unexplained-motion min_area must be at least 1, got {self.min_area}")


def covered_mask(fg: Foreground, polygons: list[np.ndarray], rects: list[tuple[int, int, int, int]],
                 whole: bool = False) -> np.ndarray:
    """bool [h, w] at the motion net's scale: True where an obscured region lies.

    polygons: [K, 2] float (x, y) source-pixel polygons; rects: (x0, y0, x1, y1) source rectangles."""
    h, w = fg.mask.shape
    if whole:
        return np.ones((h, w), bool)
    m = np.zeros((h, w), np.uint8)
    inv = 1.0 / fg.scale
    pts = [np.round(np.asarray(p, np.float64) * inv).astype(np.int32) for p in polygons if len(p) >= 3]
    for poly in pts:  # one at a time: fillPoly over several polygons leaves their overlaps empty
        cv2.fillPoly(m, [poly], 1)
    for x0, y0, x1, y1 in rects:
        a0, b0 = max(0, int(math.floor(x0 * inv))), max(0, int(math.floor(y0 * inv)))
        a1, b1 = min(w, int(math.ceil(x1 * inv))), min(h, int(math.ceil(y1 * inv)))
        if a1 > a0 and b1 > b0:
            m[b0:b1, a0:a1] = 1
    return m.astype(bool)


@dataclass(frozen=True)
class Unexplained:
    """One frame's unexplained movement: boxes [K, 4] float32 source pixels (grown by the margin)
    and, per box, whether it could be a missed person (flag [K] bool: tall enough and not attached
    to an obscured region, as a person's own shadow or bag is)."""

    boxes: np.ndarray
    flag: np.ndarray

    @staticmethod
    def none() -> Unexplained:
        return Unexplained(np.zeros((0, 4), np.float32), np.zeros(0, bool))


def unexplained(fg: Foreground, covered: np.ndarray, settings: UnexplainedSettings, frame_w: int, frame_h: int,
                min_person_height: float) -> Unexplained:
    """Boxes around moving pixels outside `covered` (bool at the net's scale), grown by the margin."""
    # Noise is removed from the moving pixels before the covered part is taken away, so that the
    # thin edge of a walker sticking out of their region (a box a frame behind) survives.
    moving = cv2.morphologyEx(fg.mask.astype(np.uint8), cv2.MORPH_OPEN, _OPEN).astype(bool)
    m = (moving & ~covered).astype(np.uint8)
    if not m.any():
        return Unexplained.none()
    m = cv2.dilate(m, _JOIN)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(m, connectivity=8)
    keep = np.flatnonzero(stats[1:, cv2.CC_STAT_AREA] >= settings.min_area) + 1
    if not len(keep):
        return Unexplained.none()
    touching = np.zeros(n, bool)
    if covered.any():
        ring = cv2.dilate(covered.astype(np.uint8), _OPEN).astype(bool)
        touching[np.unique(labels[ring & (labels > 0)])] = True
    st = stats[keep].astype(np.float64)
    x, y, w, h = (st[:, i] * fg.scale for i in range(4))
    # heights without what the joining dilation added (half its height above and below)
    core_h = np.maximum(0.0, st[:, 3] - (_JOIN.shape[0] - 1)) * fg.scale
    flag = (core_h >= settings.flag_height * min_person_height) & ~touching[keep]
    gx = w * settings.margin + settings.pad_px
    gy = h * settings.margin + settings.pad_px
    boxes = np.stack([x - gx, y - gy, x + w + gx, y + h + gy], axis=1)
    boxes[:, [0, 2]] = boxes[:, [0, 2]].clip(0, frame_w)
    boxes[:, [1, 3]] = boxes[:, [1, 3]].clip(0, frame_h)
    return Unexplained(boxes.astype(np.float32), flag)


class UnexplainedHold:
    """Keeps each frame's unexplained boxes for hold_seconds of later frames; call in frame order."""

    def __init__(self, settings: UnexplainedSettings, fps: float):
        fps = fps if fps and math.isfinite(fps) and fps > 0 else 25.0
        self.frames = max(0, int(round(settings.hold_seconds * fps)))
        self._recent: deque[np.ndarray] = deque(maxlen=self.frames + 1)

    def step(self, found: Unexplained) -> np.ndarray:
        """[K, 4] boxes to obscure in this frame: its own plus those held from recent frames."""
        self._recent.append(found.boxes)
        return np.concatenate(list(self._recent))
