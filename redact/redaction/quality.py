"""Per-frame quality measures and the frames a person should review.

Automated redaction misses people in poor light, at small scale, under blur and occlusion.
This module measures each frame cheaply (on a grey image downscaled to at most ANALYSIS_SIDE
pixels) and flags frames by named rules; flagged frames are merged into time ranges for review.
The flags are a guide to where to look first, not a clearance: a person must still review the
whole redacted video before disclosure.

Measures: luma by ITU-R BT.601 (Y' = 0.299 R' + 0.587 G' + 0.114 B', on 8-bit code values),
its mean and standard deviation; sharpness = variance of the Laplacian (common practice; from
memory: Pech-Pacheco et al., "Diatom autofocusing in brightfield microscopy", ICPR 2000);
people, observed and coasting track counts; mean keypoint confidence of observed people; the
drop of the observed count below its recent maximum.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import asdict, dataclass

import cv2
import numpy as np

from redact.errors import RedactError

# The file formats have one owner each (redact.formats); re-exported here for the stages' callers.
from redact.formats.quality_jsonl import FrameQuality as FrameQuality
from redact.formats.quality_jsonl import encode_quality_line as encode_quality_line
from redact.formats.review_json import REVIEW_NOTE as REVIEW_NOTE
from redact.formats.review_json import ReviewFile, encode_review
from redact.formats.review_json import ReviewRange as ReviewRange
from redact.vision.boxes import box_areas, intersections
from redact.vision.records import Tracks

#: ITU-R BT.601 luma coefficients for R', G', B'.
BT601 = (0.299, 0.587, 0.114)
#: Longer side of the grey image the measures are computed on.
ANALYSIS_SIDE = 320

REASONS: tuple[str, ...] = ("blurred", "camera_moved", "coasting", "count_drop", "dark", "dim", "fault", "kept_overlap",
                            "lighting_change", "low_confidence", "low_contrast", "unexplained_motion")


@dataclass(frozen=True)
class ReviewRules:
    """Named thresholds that flag a frame for review. Defaults are common practice; all settable.

    dark: luma mean (0..255) below this. low_contrast: luma standard deviation below this.
    blurred: variance of the Laplacian (on the ANALYSIS_SIDE grey image) below this.
    low_confidence: mean keypoint confidence of observed people below this.
    coasting: flag frames with at least this many tracks coasting (0 = never).
    count_drop: flag when the observed count is this many below its maximum over the previous
    drop_window frames (0 = never). fault: flag frames that failed and were fully obscured.
    merge_gap: flagged frames at most this many frames apart join one range.
    min_hits: the coasting and count-drop rules count only tracks observed in at least this many
    frames (tracks whose count is unknown, 0, always count), and coasting only while the predicted
    box is still in the picture: a detection seen for a few frames and then gone is usually a
    duplicate box of someone already tracked (a leg, a half at the frame edge), and would
    otherwise flag the whole coast time after it. 10 frames (0.4 s at 25 fps): on the demo and
    the clips of benchmarks/review_flags.py such boxes lived 4–6 frames, and 3 flagged a sixth of
    the demo with nobody missed.
    explained: a coasting track whose predicted box lies at least this share inside the boxes of
    people observed in the frame, or encloses this share of one of them, is explained by them (a
    duplicate box of one of them, a box that spanned two people crossing, or someone hidden
    behind them and obscured with them): it neither flags coasting nor counts as a drop.
    Chosen on benchmarks/review_flags.py (precision of both flags on clips of known misses).
    """

    dark: float = 40.0
    low_contrast: float = 10.0
    blurred: float = 20.0
    low_confidence: float = 0.35
    coasting: int = 1
    count_drop: int = 1
    drop_window: int = 5
    fault: bool = True
    merge_gap: int = 5
    min_hits: int = 10
    explained: float = 0.5

    def __post_init__(self) -> None:
        if not (isinstance(self.explained, (int, float)) and 0 < self.explained <= 1):
            raise RedactError(f"review rule explained must be in (0, 1], got {self.explained!r}")
        for name in ("dark", "low_contrast", "blurred", "low_confidence"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise RedactError(f"review rule {name} must be a finite number >= 0, got {v!r}")
        for name in ("coasting", "count_drop", "drop_window", "merge_gap", "min_hits"):
            v = getattr(self, name)
            if not (isinstance(v, int) and v >= 0):
                raise RedactError(f"review rule {name} must be a whole number >= 0, got {v!r}")


def luma(image: np.ndarray) -> np.ndarray:
    """BT.601 luma [H, W] float32 of an RGB image [H, W, 3] (8-bit code values stay 0..255)."""
    a = np.asarray(image)
    if a.ndim != 3 or a.shape[2] != 3:
        raise RedactError(f"quality: expected an RGB image [H,W,3], got {list(a.shape)}")
    a = a.astype(np.float32)
    return a[:, :, 0] * BT601[0] + a[:, :, 1] * BT601[1] + a[:, :, 2] * BT601[2]


def analysis_grey(image: np.ndarray, side: int = ANALYSIS_SIDE) -> np.ndarray:
    """BT.601 luma [h, w] float32 of the image area-downscaled so its longer side is at most side."""
    a = np.asarray(image)
    if a.ndim != 3 or a.shape[2] != 3 or a.dtype != np.uint8:
        raise RedactError(f"quality: expected an RGB uint8 image [H,W,3], got {list(a.shape)} {a.dtype}")
    h, w = a.shape[:2]
    if max(h, w) > side:
        s = side / max(h, w)
        a = cv2.resize(a, (max(1, round(w * s)), max(1, round(h * s))), interpolation=cv2.INTER_AREA)
    return luma(a)


def sharpness(grey: np.ndarray) -> float:
    """Variance of the Laplacian (3×3 aperture) of a grey image [h, w] (common practice)."""
    lap = cv2.Laplacian(np.asarray(grey, np.float32), cv2.CV_32F, ksize=1, borderType=cv2.BORDER_REFLECT)
    return float(lap.astype(np.float64).var())


def _explained(tracks: Tracks, share: float, samples: int = 16) -> np.ndarray:
    """bool [N]: the track's box lies at least `share` inside the union of the boxes of the other,
    observed tracks (measured on a samples × samples grid of points over the box), or encloses at
    least `share` of one of those boxes (a wide box around someone found: a duplicate of them)."""
    n = len(tracks)
    if n < 2 or not tracks.observed.any():
        return np.zeros(n, bool)
    boxes = tracks.boxes.astype(np.float64)
    u = (np.arange(samples) + 0.5) / samples
    out = np.zeros(n, bool)
    for i in range(n):
        others = boxes[tracks.observed & (np.arange(n) != i)]
        if not len(others):
            continue
        if (intersections(others, boxes[i][None])[:, 0] >= share * np.maximum(box_areas(others), 1e-9)).any():
            out[i] = True
            continue
        x0, y0, x1, y1 = boxes[i]
        px = (x0 + u * (x1 - x0))[None, :, None]
        py = (y0 + u * (y1 - y0))[:, None, None]
        inside = ((px >= others[:, 0]) & (px < others[:, 2]) & (py >= others[:, 1]) & (py < others[:, 3])).any(axis=2)
        out[i] = inside.mean() >= share
    return out


class QualityMonitor:
    """Streams frames in order: `observe` measures and flags each; `ranges` merges the flags."""

    def __init__(self, rules: ReviewRules = ReviewRules()):
        self.rules = rules
        self._recent: deque[int] = deque(maxlen=max(1, rules.drop_window))
        self._last_frame: int | None = None
        self._ranges: list[ReviewRange] = []
        self._open: list | None = None  # [frame_start, frame_end, t_start, t_end, set(reasons)]
        self.frames = 0
        self.flagged = 0

    def observe(self, frame: int, t: float, image: np.ndarray | None, tracks: Tracks | None,
                fault: bool = False, extra: tuple[str, ...] = ()) -> FrameQuality:
        """Measure one frame. image [H,W,3] uint8 RGB, or None when it could not be decoded;
        tracks None for a frame whose processing failed. Frames must come in increasing order."""
        if self._last_frame is not None and frame <= self._last_frame:
            raise RedactError(f"quality: frame {frame} came after frame {self._last_frame}; frames must increase")
        self._last_frame = frame
        r = self.rules
        lm = ls = sh = None
        usable = image is not None
        if usable and fault:  # a failed frame may carry a damaged image: measure it only if it is sound
            a = np.asarray(image)
            usable = a.ndim == 3 and a.shape[2] == 3 and a.dtype == np.uint8 and a.size > 0
        if usable:
            g = analysis_grey(image)  # type: ignore[arg-type]  # usable implies image is not None
            lm, ls, sh = float(g.mean(dtype=np.float64)), float(g.std(dtype=np.float64)), sharpness(g)
        people = observed = predicted = 0
        settled_observed = settled_coasting = explained_count = 0
        mean_conf = None
        if tracks is not None:
            people = len(tracks)
            observed = int(tracks.observed.sum())
            predicted = people - observed
            if observed:
                mean_conf = float(tracks.keypoints[tracks.observed, :, 2].astype(np.float64).mean())
            settled = (tracks.hits >= r.min_hits) | (tracks.hits == 0)
            visible = np.ones(people, bool)
            if usable:
                h, w = np.asarray(image).shape[:2]
                b = tracks.boxes
                visible = (b[:, 2] > 0) & (b[:, 0] < w) & (b[:, 3] > 0) & (b[:, 1] < h)
            coasting = ~tracks.observed & settled & visible
            explained = coasting & _explained(tracks, r.explained)
            settled_observed = int((tracks.observed & settled).sum())
            settled_coasting = int((coasting & ~explained).sum())
            explained_count = int(explained.sum())
        # A frame without tracks (failed) says nothing about the count: no drop, not remembered.
        drop = (max(0, max(self._recent) - settled_observed - explained_count)
                if (self._recent and tracks is not None) else 0)
        if tracks is not None:
            self._recent.append(settled_observed)

        reasons = []
        if lm is not None and lm < r.dark:
            reasons.append("dark")
        if ls is not None and ls < r.low_contrast:
            reasons.append("low_contrast")
        if sh is not None and sh < r.blurred:
            reasons.append("blurred")
        if mean_conf is not None and mean_conf < r.low_confidence:
            reasons.append("low_confidence")
        if r.coasting and settled_coasting >= r.coasting:
            reasons.append("coasting")
        if r.count_drop and drop >= r.count_drop:
            reasons.append("count_drop")
        if fault and r.fault:
            reasons.append("fault")
        unknown = set(extra) - set(REASONS)
        if unknown:
            raise RedactError(f"quality: unknown review reason(s) {sorted(unknown)}")
        reasons.extend(r_ for r_ in extra if r_ not in reasons)
        q = FrameQuality(int(frame), float(t), lm, ls, sh, people, observed, predicted, mean_conf, int(drop),
                         bool(fault), tuple(sorted(reasons)))
        self.frames += 1
        if q.reasons:
            self.flagged += 1
            self._flag(q)
        return q

    def _flag(self, q: FrameQuality) -> None:
        o = self._open
        if o is not None and q.frame - o[1] - 1 <= self.rules.merge_gap:
            o[1], o[3] = q.frame, q.t
            o[4].update(q.reasons)
            return
        self._close()
        self._open = [q.frame, q.frame, q.t, q.t, set(q.reasons)]

    def _close(self) -> None:
        if self._open is not None:
            f0, f1, t0, t1, rs = self._open
            self._ranges.append(ReviewRange(f0, f1, t0, t1, tuple(sorted(rs))))
            self._open = None

    def ranges(self) -> list[ReviewRange]:
        """Flagged frames merged into ranges (gaps of at most rules.merge_gap frames are joined)."""
        out = list(self._ranges)
        if self._open is not None:
            f0, f1, t0, t1, rs = self._open
            out.append(ReviewRange(f0, f1, t0, t1, tuple(sorted(rs))))
        return out


def review_document(ranges: list[ReviewRange], rules: ReviewRules, frames: int | None = None) -> bytes:
    """review.json: the rules used and the ranges to review (written by redact.formats.review_json)."""
    return encode_review(ReviewFile(tuple(ranges), asdict(rules), frames))
