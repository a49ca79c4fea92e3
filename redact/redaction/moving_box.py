"""Moving boxes: a rectangle drawn on a few keyframes that follows a person between them.

A reviewer who finds a person the detector missed draws a box around them on one frame, then
again on later frames where they have moved; in between, each corner moves linearly with the
frame number (linear interpolation between consecutive keyframes). The box is active from the
first keyframe to the last, inclusive, and nowhere else. This is the `moving_boxes` field of a
redaction plan (docs/plan-format.md), parsed here and applied by redact.redaction.plan.

Pixels covered follow the plan's pixel rule (redact.redaction.plan): a pixel is obscured when its
centre lies inside the box or on its edge, so for a box [x1, y1, x2, y2] the columns i with
x1 <= i + 0.5 <= x2 and the rows j with y1 <= j + 0.5 <= y2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from redact.errors import PlanError

MAX_KEYFRAMES = 10_000  # per moving box (common practice)


@dataclass(frozen=True)
class MovingBox:
    """A validated moving box: keyframe frame numbers [K] int64 strictly increasing, boxes [K, 4]
    float64 (x1, y1, x2, y2), its field path and label, and the entry as written (for the record)."""

    path: str
    label: str | None
    frames: np.ndarray
    boxes: np.ndarray
    source: dict

    @property
    def first(self) -> int:
        return int(self.frames[0])

    @property
    def last(self) -> int:
        return int(self.frames[-1])

    def box_at(self, frame: int) -> np.ndarray | None:
        """The box [4] on `frame` (linear between keyframes), or None outside first..last."""
        f = int(frame)
        if f < self.first or f > self.last:
            return None
        k = int(np.searchsorted(self.frames, f, side="right")) - 1
        if k >= len(self.frames) - 1 or self.frames[k] == f:
            return self.boxes[k].copy()
        a, b = int(self.frames[k]), int(self.frames[k + 1])
        w = (f - a) / (b - a)
        return self.boxes[k] * (1.0 - w) + self.boxes[k + 1] * w


def box_pixels(box: np.ndarray, width: int, height: int) -> tuple[int, int, int, int]:
    """The pixel rectangle (x0, y0, x1, y1), exclusive ends, whose centres lie in box (edges
    included), clipped to the frame; empty (x1 <= x0) when none does."""
    x1, y1, x2, y2 = (float(v) for v in box)
    c0 = max(0, math.ceil(x1 - 0.5))
    c1 = min(width, math.floor(x2 - 0.5) + 1)
    r0 = max(0, math.ceil(y1 - 0.5))
    r1 = min(height, math.floor(y2 - 0.5) + 1)
    return c0, r0, max(c0, c1), max(r0, r1)


def _err(path: str, msg: str) -> PlanError:
    return PlanError(f"plan: {path}: {msg}")


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def parse_moving_box(v, path: str, info) -> MovingBox:
    """One entry of `moving_boxes`: {"label"?: str, "keyframes": [{"frame": n, "box": [x1, y1, x2, y2]}, …]}.

    Frames are whole numbers within the clip, strictly increasing; every box has x1 < x2 and
    y1 < y2 within the frame and covers at least one pixel centre. Raises PlanError naming the field.
    """
    w, h, last = int(info.width), int(info.height), int(info.frames) - 1
    if not isinstance(v, dict):
        raise _err(path, "expected an object")
    for k in v:
        if k not in ("keyframes", "label"):
            raise _err(f"{path}.{k}", "unknown key (allowed: keyframes, label)")
    label = v.get("label")
    if label is not None and (not isinstance(label, str) or len(label) > 200):
        raise _err(f"{path}.label", "expected a string of at most 200 characters")
    kfs = v.get("keyframes")
    if not isinstance(kfs, list) or not kfs:
        raise _err(f"{path}.keyframes", "expected a non-empty list of {frame, box}")
    if len(kfs) > MAX_KEYFRAMES:
        raise _err(f"{path}.keyframes", f"{len(kfs)} entries; at most {MAX_KEYFRAMES} are allowed")
    frames: list[int] = []
    boxes: list[list[float]] = []
    for i, kf in enumerate(kfs):
        p = f"{path}.keyframes[{i}]"
        if not isinstance(kf, dict) or set(kf) != {"frame", "box"}:
            raise _err(p, "expected an object with exactly the keys frame and box")
        f = kf["frame"]
        if not isinstance(f, int) or isinstance(f, bool):
            raise _err(f"{p}.frame", "expected a whole frame number")
        if not 0 <= f <= last:
            raise _err(f"{p}.frame", f"frame {f} is outside the clip (frames 0-{last})")
        if frames and f <= frames[-1]:
            raise _err(f"{p}.frame", f"keyframes must be in increasing frame order ({f} after {frames[-1]})")
        b = kf["box"]
        if not (isinstance(b, list) and len(b) == 4 and all(_num(c) for c in b)):
            raise _err(f"{p}.box", "expected a list [x1, y1, x2, y2] of four numbers")
        x1, y1, x2, y2 = (float(c) for c in b)
        if not (0 <= x1 < x2 <= w and 0 <= y1 < y2 <= h):
            raise _err(f"{p}.box", f"expected 0 <= x1 < x2 <= {w} and 0 <= y1 < y2 <= {h}, got {b}")
        c0, r0, c1, r1 = box_pixels(np.array([x1, y1, x2, y2]), w, h)
        if c1 <= c0 or r1 <= r0:
            raise _err(f"{p}.box", "covers no pixel centre (too thin or too small); draw it larger")
        frames.append(f)
        boxes.append([x1, y1, x2, y2])
    return MovingBox(path, label, np.asarray(frames, np.int64), np.asarray(boxes, np.float64), dict(v))
