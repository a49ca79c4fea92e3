"""The part of a frame to obscure for each tracked person.

A person's region is their box grown by a margin (a base margin plus the track's own
`margin`, which the tracker grows while a track coasts on prediction), united with the convex
hull of their confident keypoints, padded by a disc. Regions are clipped to the frame, so a
person partly off-screen is still covered where they are visible. Masks are bool [H, W].

When a track's numbers are unusable (NaN, infinite) no region can be trusted: `person_region`
raises, and the caller fails closed by obscuring the whole frame.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from redact.errors import RedactError
from redact.vision.records import Tracks

#: Vertices used to approximate the padding disc around each keypoint.
_DISC_VERTICES = 16


@dataclass(frozen=True)
class RegionSettings:
    """How far a region reaches beyond what the detector reported.

    base_margin: grow the box by this fraction of its width (left/right) and height
    (top/bottom) on each side, before the track's own margin is added (common practice: 0.15).
    kp_threshold: keypoints with confidence at or above this join the hull (common practice).
    kp_pad: pad the keypoint hull by this fraction of the box's longer side (plus the track's
    margin), so that a head reaches beyond the ears and eyes (common practice).
    min_pad_px: the hull padding is never below this many pixels.
    """

    base_margin: float = 0.15
    kp_threshold: float = 0.3
    kp_pad: float = 0.15
    min_pad_px: float = 4.0

    def __post_init__(self) -> None:
        for name in ("base_margin", "kp_pad", "min_pad_px"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0):
                raise RedactError(f"region setting {name} must be a finite number >= 0, got {v}")
        if not (0.0 <= self.kp_threshold <= 1.0):
            raise RedactError(f"region setting kp_threshold must be within 0..1, got {self.kp_threshold}")


@dataclass(frozen=True)
class Region:
    """One person's region in one frame.

    polygons: convex polygons [K,2] float64 (x, y) in frame pixels, already clipped to the frame;
    rect: (x0, y0, x1, y1) int, the clipped bounding rectangle (x1, y1 exclusive; empty when
    x1 <= x0 or y1 <= y0); size: the shorter side in pixels of the unclipped grown box, used to
    scale blur and pixel blocks so that a person partly off-screen is obscured as strongly as one
    in full view.
    """

    polygons: tuple[np.ndarray, ...]
    rect: tuple[int, int, int, int]
    size: float

    @property
    def empty(self) -> bool:
        x0, y0, x1, y1 = self.rect
        return x1 <= x0 or y1 <= y0

    def mask(self, shape: tuple[int, ...]) -> np.ndarray:
        """The region as a bool mask [H, W] for a frame of shape (H, W, ...)."""
        h, w = int(shape[0]), int(shape[1])
        out = np.zeros((h, w), np.uint8)
        if not self.empty:
            _fill(out, self.polygons)
        return out.astype(bool)

    def paint(self, image: np.ndarray, value: tuple[int, int, int]) -> None:
        """Fill the region in place in an RGB uint8 frame with one colour: exactly the pixels
        `mask` marks, without building a mask (the fast path of a solid fill)."""
        if not self.empty:
            _fill(image, self.polygons, value)

    def crop_mask(self) -> np.ndarray:
        """The region as a bool mask over its own rect only [y1-y0, x1-x0] (cheap for big frames)."""
        x0, y0, x1, y1 = self.rect
        out = np.zeros((max(0, y1 - y0), max(0, x1 - x0)), np.uint8)
        if not self.empty:
            _fill(out, tuple(p - (x0, y0) for p in self.polygons))
        return out.astype(bool)


def _padded_hull(points: np.ndarray, pad: float) -> np.ndarray:
    """Convex hull [K,2] of points [N,2] grown by a disc of radius pad (the disc is circumscribed)."""
    r = pad / math.cos(math.pi / _DISC_VERTICES)  # polygon that contains the disc
    ang = np.arange(_DISC_VERTICES) * (2 * math.pi / _DISC_VERTICES)
    ring = np.stack([np.cos(ang), np.sin(ang)], axis=1) * r
    cloud = (points[:, None, :] + ring[None, :, :]).reshape(-1, 2).astype(np.float32)
    return cv2.convexHull(cloud).reshape(-1, 2).astype(np.float64)


def _clip_convex(poly: np.ndarray, w: int, h: int) -> np.ndarray | None:
    """Intersection of a convex polygon with the frame rectangle [0,w]x[0,h] (Sutherland–Hodgman)."""
    pts = [tuple(p) for p in poly]
    for axis, bound, keep_below in ((0, 0.0, False), (0, float(w), True), (1, 0.0, False), (1, float(h), True)):
        if not pts:
            return None
        out = []
        for i, cur in enumerate(pts):
            prev = pts[i - 1]
            cur_in = cur[axis] <= bound if keep_below else cur[axis] >= bound
            prev_in = prev[axis] <= bound if keep_below else prev[axis] >= bound
            if cur_in != prev_in:
                t = (bound - prev[axis]) / (cur[axis] - prev[axis])
                other = 1 - axis
                cross = [0.0, 0.0]
                cross[axis] = bound
                cross[other] = prev[other] + t * (cur[other] - prev[other])
                out.append(tuple(cross))
            if cur_in:
                out.append(cur)
        pts = out
    if len(pts) < 3:
        return None
    return np.asarray(pts, np.float64)


def _fill(mask: np.ndarray, polygons: tuple[np.ndarray, ...], value=1) -> None:
    """Rasterise polygons into an image (a uint8 mask, or an RGB frame with an RGB value),
    conservatively (edge pixels included)."""
    shift = 4
    scale = 1 << shift
    pts = [np.round(p * scale).astype(np.int32).reshape(-1, 1, 2) for p in polygons]
    for p in pts:  # one call per polygon: a single fillPoly leaves overlaps as holes (even-odd)
        cv2.fillPoly(mask, [p], value, lineType=cv2.LINE_8, shift=shift)
    cv2.polylines(mask, pts, True, value, thickness=1, lineType=cv2.LINE_8, shift=shift)


def person_region(box: np.ndarray, keypoints: np.ndarray, extra_margin: float, shape: tuple[int, ...],
                  settings: RegionSettings = RegionSettings()) -> Region:
    """The region of one person: box [4] x1,y1,x2,y2, keypoints [17,3] (x, y, conf), in frame pixels.

    extra_margin is the track's own margin (fraction of box size), added to settings.base_margin.
    Raises RedactError when the box or margin is not finite (the caller must fail closed).
    """
    h, w = int(shape[0]), int(shape[1])
    box = np.asarray(box, np.float64)
    kp = np.asarray(keypoints, np.float64)
    extra = float(extra_margin)
    if not (np.all(np.isfinite(box)) and math.isfinite(extra)):
        raise RedactError("a tracked person has a non-finite box or margin; the frame cannot be redacted safely")
    x1, y1, x2, y2 = min(box[0], box[2]), min(box[1], box[3]), max(box[0], box[2]), max(box[1], box[3])
    bw, bh = x2 - x1, y2 - y1
    m = settings.base_margin + max(extra, 0.0)
    gx1, gy1, gx2, gy2 = x1 - m * bw, y1 - m * bh, x2 + m * bw, y2 + m * bh
    size = max(min(gx2 - gx1, gy2 - gy1), 1.0)

    polys: list[np.ndarray] = []
    rect = np.array([[gx1, gy1], [gx2, gy1], [gx2, gy2], [gx1, gy2]], np.float64)
    # A degenerate box still covers at least its padded point.
    if bw <= 0 or bh <= 0:
        rect = _padded_hull(np.array([[x1, y1], [x2, y2]]), max(settings.min_pad_px, 1.0))
    clipped = _clip_convex(rect, w, h)
    if clipped is not None:
        polys.append(clipped)

    good = np.isfinite(kp).all(axis=1) & (kp[:, 2] >= settings.kp_threshold)
    if good.any():
        pad = max(settings.min_pad_px, (settings.kp_pad + max(extra, 0.0)) * max(bw, bh))
        hull = _padded_hull(kp[good, :2], pad)
        clipped = _clip_convex(hull, w, h)
        if clipped is not None:
            polys.append(clipped)
        hx = hull[:, 0].max() - hull[:, 0].min()
        hy = hull[:, 1].max() - hull[:, 1].min()
        size = max(size, min(hx, hy))

    if not polys:
        return Region((), (0, 0, 0, 0), float(size))
    allp = np.concatenate(polys)
    rx0 = max(0, int(math.floor(allp[:, 0].min())) - 1)
    ry0 = max(0, int(math.floor(allp[:, 1].min())) - 1)
    rx1 = min(w, int(math.ceil(allp[:, 0].max())) + 1)
    ry1 = min(h, int(math.ceil(allp[:, 1].max())) + 1)
    return Region(tuple(polys), (rx0, ry0, rx1, ry1), float(size))


def track_regions(tracks: Tracks, shape: tuple[int, ...],
                  settings: RegionSettings = RegionSettings()) -> list[Region]:
    """One Region per track (same order as tracks), for a frame of shape (H, W, ...)."""
    return [person_region(tracks.boxes[i], tracks.keypoints[i], float(tracks.margin[i]), shape, settings)
            for i in range(len(tracks))]


def people_mask(tracks: Tracks, shape: tuple[int, ...], settings: RegionSettings = RegionSettings()) -> np.ndarray:
    """The union of every tracked person's region: bool [H, W]."""
    h, w = int(shape[0]), int(shape[1])
    out = np.zeros((h, w), np.uint8)
    for r in track_regions(tracks, shape, settings):
        if not r.empty:
            _fill(out, r.polygons)
    return out.astype(bool)
