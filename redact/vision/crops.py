"""Where to point the pose model: windows around activity, each scaled so its people are big enough.

The pose model finds people reliably only when they are roughly 100 px tall or more *at its
input* (benchmarks/recall_by_height.py measures the curve), and a whole frame shrunk to the
model's input makes a 60-px pedestrian 30 px tall. Scaling the whole frame up instead costs the
model on empty background. So the model looks at windows around what is already known to be
there — tracked people and moving blobs — each window scaled so that the person in it reaches
`target_height` pixels, and at a tiled sweep of the whole frame at the scale of the smallest
person of interest when nothing is known yet (the first frame, after the camera moved).

A window is a rectangle in source pixels plus one scale factor; the model input is the window
times the scale, rounded up to the model's stride (windows may reach past the frame edge: the
outside is padded as a letterbox is). Planning is pure geometry on NumPy arrays.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from redact.errors import InputError

#: Model input sides are multiples of this (the model's largest stride).
STRIDE = 32


@dataclass(frozen=True)
class CropSettings:
    """How windows are sized. Heights are person heights; see the module doc.

    min_person_height: the smallest person, in source pixels, the search is sized for (recorded
    in every package: smaller people may be missed by the model; the motion net still covers
    them when they move). target_height: the height a person is scaled to at the model input.
    max_upscale: windows are never enlarged more than this (a 10-px blob is not blown up 13×).
    context: room around a person, as a fraction of their height on each side, so that the
    whole body is inside the window although the box came from an earlier frame or a fragment.
    max_side: the longest model input side of one window; sweep_side: the model input side of
    one sweep tile; sweep_overlap: overlap of neighbouring sweep tiles, as a fraction of the
    tallest person a tile is meant for (twice min_person_height), so nobody is cut by every tile.

    target_height 112 and context 0.25 were chosen from benchmarks/recall_by_height.py (the
    models find 95 % of real pedestrians from about 115 px at their input, 99 % from 130 px; a
    person tracked over frames needs to be found in most frames, not all: the tracker bridges a
    miss) and from the speed and coverage of benchmarks/small_people.py and
    tests/test_real_footage.py, measured side by side (benchmarks/README.md): against 128 and
    0.5 they halve the model's pixels with every reference person of the real clip still obscured.
    """

    enabled: bool = True
    min_person_height: int = 40
    target_height: int = 112
    max_upscale: float = 4.0
    context: float = 0.25
    max_side: int = 640
    sweep_side: int = 640
    sweep_overlap: float = 1.0

    def __post_init__(self) -> None:
        if not 8 <= self.min_person_height <= 2000:
            raise InputError(f"smallest person height must be 8..2000 pixels, got {self.min_person_height}")
        if not 32 <= self.target_height <= 640:
            raise InputError(f"target height must be 32..640 pixels, got {self.target_height}")
        if not (math.isfinite(self.max_upscale) and 1.0 <= self.max_upscale <= 8.0):
            raise InputError(f"largest upscale must be 1..8, got {self.max_upscale}")
        if not (math.isfinite(self.context) and 0.1 <= self.context <= 2.0):
            raise InputError(f"context must be 0.1..2 person heights, got {self.context}")
        for name in ("max_side", "sweep_side"):
            v = getattr(self, name)
            if v % STRIDE or not 2 * STRIDE <= v <= 2048:
                raise InputError(f"{name} must be a multiple of {STRIDE} in 64..2048, got {v}")
        if not 0.0 <= self.sweep_overlap <= 2.0:
            raise InputError(f"sweep overlap must be 0..2, got {self.sweep_overlap}")

    def scale_for(self, height: float) -> float:
        """The factor that brings a person this tall (source px) to target_height, capped."""
        return min(self.max_upscale, self.target_height / max(float(height), float(self.min_person_height)))


@dataclass(frozen=True)
class Window:
    """One model input: source rectangle x0, y0 (top left, may be negative) and the scale.

    The model input is in_w × in_h pixels and shows source x in [x0, x0 + in_w / scale).
    """

    x0: float
    y0: float
    scale: float
    in_w: int
    in_h: int

    @property
    def x1(self) -> float:
        return self.x0 + self.in_w / self.scale

    @property
    def y1(self) -> float:
        return self.y0 + self.in_h / self.scale

    @property
    def pixels(self) -> int:
        """Model input pixels: what the model costs to run on this window (about proportional)."""
        return self.in_w * self.in_h


def _ceil_stride(v: float) -> int:
    return max(2 * STRIDE, int(math.ceil(v / STRIDE - 1e-9)) * STRIDE)


def _window(x0: float, y0: float, x1: float, y1: float, scale: float) -> Window:
    """The window covering source [x0, x1) × [y0, y1) at `scale`, grown evenly to whole strides."""
    in_w, in_h = _ceil_stride((x1 - x0) * scale), _ceil_stride((y1 - y0) * scale)
    gx, gy = (in_w / scale - (x1 - x0)) / 2, (in_h / scale - (y1 - y0)) / 2
    return Window(float(x0 - gx), float(y0 - gy), float(scale), in_w, in_h)


def _place(x0: float, x1: float, limit: float) -> tuple[float, float]:
    """Shift [x0, x1) inside [0, limit) when it fits, so no model pixel is spent on padding."""
    size = x1 - x0
    if size >= limit:
        return (limit - size) / 2, (limit + size) / 2
    if x0 < 0:
        return 0.0, size
    if x1 > limit:
        return limit - size, limit
    return x0, x1


def person_windows(boxes: np.ndarray, frame_w: int, frame_h: int, settings: CropSettings,
                   min_scale: float = 0.0) -> list[Window]:
    """Windows [one per group of nearby people] for boxes [K, 4] x1, y1, x2, y2 in source pixels.

    Each box gets a window of its person plus `context` at the scale that brings it to the
    target height, and never below min_scale (a window must not show a person smaller than the
    whole-frame pass would); windows are then merged greedily, smallest people first, while one
    merged window costs no more model pixels than the two apart (at the larger of the two scales,
    so the smaller person keeps their size) and stays within max_side.
    """
    boxes = np.asarray(boxes, np.float64).reshape(-1, 4)
    items: list[tuple[float, float, float, float, float]] = []
    for x1, y1, x2, y2 in boxes:
        if not (np.isfinite([x1, y1, x2, y2]).all() and x2 > x1 and y2 > y1):
            continue
        h = max(y2 - y1, settings.min_person_height)
        k = max(settings.scale_for(h), min_scale)
        pad = settings.context * h
        cx = (x1 + x2) / 2
        half_w = max((x2 - x1) / 2, h / 4) + pad
        items.append((cx - half_w, y1 - pad - (h - (y2 - y1)) / 2, cx + half_w, y2 + pad + (h - (y2 - y1)) / 2, k))
    items.sort(key=lambda it: -it[4])
    merged = True
    while merged and len(items) > 1:
        merged = False
        for i in range(len(items)):
            for j in range(i + 1, len(items)):
                a, b = items[i], items[j]
                k = max(a[4], b[4])
                u = (min(a[0], b[0]), min(a[1], b[1]), max(a[2], b[2]), max(a[3], b[3]))
                cost_u = (u[2] - u[0]) * (u[3] - u[1]) * k * k
                cost_ab = ((a[2] - a[0]) * (a[3] - a[1]) * a[4] ** 2) + ((b[2] - b[0]) * (b[3] - b[1]) * b[4] ** 2)
                if cost_u <= cost_ab and max(u[2] - u[0], u[3] - u[1]) * k <= settings.max_side:
                    items[i] = (*u, k)
                    del items[j]
                    merged = True
                    break
            if merged:
                break
    out = []
    for x0, y0, x1, y1, k in items:
        x0, x1 = _place(x0, x1, frame_w)
        y0, y1 = _place(y0, y1, frame_h)
        out.append(_window(x0, y0, x1, y1, k))
    return out


def sweep_windows(frame_w: int, frame_h: int, settings: CropSettings) -> list[Window]:
    """Overlapping tiles over the whole frame at the scale of the smallest person of interest.

    Used when nothing is known about the scene yet (first frame, camera moved): the tiles find
    people who stand still, whom neither motion nor earlier detections point to. Tiles overlap by
    sweep_overlap × the tallest person a tile is for, so a person lies whole inside some tile.
    """
    k = settings.scale_for(settings.min_person_height)
    side = settings.sweep_side / k  # source pixels per tile
    overlap = min(side / 2, settings.sweep_overlap * 2 * settings.min_person_height)

    def starts(length: float) -> list[float]:
        if length <= side:
            return [(length - side) / 2]
        n = int(math.ceil((length - overlap) / (side - overlap)))
        step = (length - side) / max(1, n - 1)
        return [i * step for i in range(n)]

    tiles = []
    for y in starts(frame_h):
        for x in starts(frame_w):
            w = min(side, frame_w) if frame_w < side else side
            h = min(side, frame_h) if frame_h < side else side
            x0 = x if frame_w >= side else (frame_w - w) / 2
            y0 = y if frame_h >= side else (frame_h - h) / 2
            tiles.append(_window(x0, y0, x0 + w, y0 + h, k))
    return tiles
