"""Shared parts of the recall benchmarks: the vtest footage, its reference people, matching, degradation.

Footage: OpenCV's sample `vtest.avi` (Debian package opencv-doc; licence Apache-2.0 AND
BSD-3-Clause per /usr/share/doc/opencv-doc/copyright; 768×576, 10 frames/s, pedestrians 60–120 px
tall). It is read at run time from the installed path and never copied: nothing derived from it
(frames, boxes, images) is written anywhere but a temporary directory that is removed. Only
frames 0–399 are used; the rest of the clip is held out for independent measurement.

Reference people: the float32 model (`yolo11n-pose`) on the native frame at a 1280 long side,
score ≥ 0.5 (the rule of the project's issue 12). Boxes the same pass finds at 0.1 ≤ score < 0.5
are kept as "weak reference" boxes: a detection on one of them is not counted as false, and it
does not count towards recall either.

Matching: greedy by detection score, one detection per reference box, IoU ≥ 0.5 (the PASCAL VOC
/ COCO box criterion, Everingham et al. 2010; Lin et al. 2014).
"""

from __future__ import annotations

import tempfile
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import cv2
import numpy as np

from redact.media.video import VideoReader, VideoWriter
from redact.vision.models import FLOAT_POSE_MODEL
from redact.vision.pose import PoseEstimator, PoseSettings

VTEST = Path("/usr/share/doc/opencv-doc/examples/data/vtest.avi")
VTEST_LICENCE = "Apache-2.0 AND BSD-3-Clause (Debian opencv-doc, /usr/share/doc/opencv-doc/copyright)"
VTEST_FRAMES = 400  # frames 0..399 only; the rest is held out

REF_LONG_SIDE = 1280
REF_SCORE = 0.5
WEAK_SCORE = 0.1
MATCH_IOU = 0.5


def vtest_missing_message() -> str:
    return (f"{VTEST} is absent: install the Debian package opencv-doc (it carries OpenCV's sample "
            f"pedestrian clip vtest.avi, {VTEST_LICENCE}); the vtest parts are skipped")


def read_vtest(indices) -> dict[int, np.ndarray]:
    """RGB frames of vtest.avi with the given indices (all < 400), decoded by redact.media.video."""
    want = set(int(i) for i in indices)
    if not want:
        return {}
    if max(want) >= VTEST_FRAMES or min(want) < 0:
        raise ValueError(f"only frames 0..{VTEST_FRAMES - 1} of vtest may be used")
    out: dict[int, np.ndarray] = {}
    with VideoReader(VTEST, hash_file=False) as r:
        for f in r.frames():
            if f.index in want:
                out[f.index] = np.array(f.image)
            if f.index >= max(want):
                break
    return out


@dataclass(frozen=True)
class Reference:
    """Reference boxes of one frame in source pixels: people (score ≥ 0.5) and weak boxes."""

    people: np.ndarray  # [N, 4] x1 y1 x2 y2
    weak: np.ndarray    # [M, 4]

    def scaled(self, s: float, dx: float = 0.0, dy: float = 0.0) -> Reference:
        off = np.array([dx, dy, dx, dy], np.float64)
        return Reference(self.people * s + off, self.weak * s + off)


def reference_estimator(threads: int | None = None) -> PoseEstimator:
    return PoseEstimator.default(PoseSettings(model=FLOAT_POSE_MODEL, input_long_side=REF_LONG_SIDE,
                                              score_threshold=WEAK_SCORE), threads=threads)


def reference_of(est: PoseEstimator, image: np.ndarray) -> Reference:
    p = est.estimate(image)
    b = p.boxes.astype(np.float64)
    strong = p.scores >= REF_SCORE
    return Reference(b[strong], b[~strong])


def heights(boxes: np.ndarray) -> np.ndarray:
    return (boxes[:, 3] - boxes[:, 1]) if len(boxes) else np.zeros(0)


def iou_matrix(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """IoU of every box in a [N,4] with every box in b [M,4] (x1 y1 x2 y2)."""
    a = np.asarray(a, np.float64).reshape(-1, 4)
    b = np.asarray(b, np.float64).reshape(-1, 4)
    if not len(a) or not len(b):
        return np.zeros((len(a), len(b)))
    x1 = np.maximum(a[:, None, 0], b[None, :, 0])
    y1 = np.maximum(a[:, None, 1], b[None, :, 1])
    x2 = np.minimum(a[:, None, 2], b[None, :, 2])
    y2 = np.minimum(a[:, None, 3], b[None, :, 3])
    inter = np.clip(x2 - x1, 0, None) * np.clip(y2 - y1, 0, None)
    area_a = (a[:, 2] - a[:, 0]) * (a[:, 3] - a[:, 1])
    area_b = (b[:, 2] - b[:, 0]) * (b[:, 3] - b[:, 1])
    union = area_a[:, None] + area_b[None, :] - inter
    return np.divide(inter, union, out=np.zeros_like(inter), where=union > 0)


def match(det_boxes: np.ndarray, det_scores: np.ndarray, ref_boxes: np.ndarray,
          iou: float = MATCH_IOU) -> tuple[np.ndarray, np.ndarray]:
    """Greedy one-to-one matching, best detection first: (ref matched [N] bool, det matched [M] bool)."""
    ref_hit = np.zeros(len(ref_boxes), bool)
    det_hit = np.zeros(len(det_boxes), bool)
    m = iou_matrix(det_boxes, ref_boxes)
    for d in np.argsort(-np.asarray(det_scores), kind="stable"):
        if not len(ref_boxes):
            break
        cand = np.where(ref_hit, -1.0, m[d])
        j = int(np.argmax(cand))
        if cand[j] >= iou:
            ref_hit[j] = det_hit[d] = True
    return ref_hit, det_hit


@dataclass
class FrameScore:
    """Outcome of one frame: per reference person whether it was found, and the false detections."""

    found: np.ndarray        # [N] bool
    ref_heights: np.ndarray  # [N] px in the frame the strategy saw
    false_weak: int          # unmatched to a person but IoU ≥ 0.5 with a weak reference box
    false_part: int          # overlapping a reference box (a part or duplicate of someone)
    false_background: int    # overlapping no reference box at all


def score_frame(det_boxes, det_scores, ref: Reference) -> FrameScore:
    found, det_hit = match(det_boxes, det_scores, ref.people)
    rest = ~det_hit
    fw = fp = fb = 0
    if rest.any():
        db, ds = det_boxes[rest], det_scores[rest]
        _, weak_hit = match(db, ds, ref.weak)
        allref = np.concatenate([ref.people, ref.weak]) if len(ref.weak) else ref.people
        over = _overlap_own(db, allref)
        fw = int(weak_hit.sum())
        fp = int((~weak_hit & (over >= 0.25)).sum())
        fb = int((~weak_hit & (over < 0.25)).sum())
    return FrameScore(found, heights(ref.people), fw, fp, fb)


def _overlap_own(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """For each box in a, the largest fraction of its own area covered by one box of b."""
    if not len(b):
        return np.zeros(len(a))
    x1 = np.maximum(a[:, None, 0], b[None, :, 0])
    y1 = np.maximum(a[:, None, 1], b[None, :, 1])
    x2 = np.minimum(a[:, None, 2], b[None, :, 2])
    y2 = np.minimum(a[:, None, 3], b[None, :, 3])
    inter = np.clip(x2 - x1, 0, None) * np.clip(y2 - y1, 0, None)
    area = np.maximum((a[:, 2] - a[:, 0]) * (a[:, 3] - a[:, 1]), 1e-9)
    return (inter / area[:, None]).max(axis=1)


# ---------------------------------------------------------------- degradation

@dataclass(frozen=True)
class Degradation:
    """Optics blur (Gaussian sigma, px), sensor noise (Gaussian sigma, grey levels, per channel),
    then H.264 (libx264 through PyAV, redact.media.video.VideoWriter, preset veryfast) at a CRF; crf None
    = not re-encoded. Values are common practice for CCTV-like footage, not measured on a camera."""

    name: str
    blur: float = 0.0
    noise: float = 0.0
    crf: int | None = None


LEVELS = (Degradation("clean"), Degradation("mild", 0.7, 2.0, 23), Degradation("moderate", 1.0, 4.0, 29),
          Degradation("heavy", 1.5, 6.0, 35))


def degrade(images: list[np.ndarray], level: Degradation, seed: int) -> list[np.ndarray]:
    """Apply a degradation to a run of consecutive same-sized RGB frames; returns new frames.

    The frames are encoded as one clip so that all but the first are inter-coded, as in camera
    streams; the caller usually keeps only the last one.
    """
    rng = np.random.default_rng(seed)
    out = []
    for im in images:
        x = im.astype(np.float32)
        if level.blur > 0:
            x = cv2.GaussianBlur(x, (0, 0), level.blur)
        if level.noise > 0:
            x += rng.normal(0.0, level.noise, x.shape).astype(np.float32)
        out.append(np.clip(np.rint(x), 0, 255).astype(np.uint8))
    if level.crf is None:
        return out
    h, w = out[0].shape[:2]
    with tempfile.TemporaryDirectory(prefix="redact-bench-") as tmp:
        path = Path(tmp) / "clip.mp4"
        with VideoWriter(path, w, h, Fraction(1, 10), Fraction(10), crf=level.crf, threads=1) as wr:
            for i, im in enumerate(out):
                wr.write(im, i)
        with VideoReader(path, hash_file=False, threads=1) as r:
            dec = [np.array(f.image[:h, :w]) for f in r.frames()]
    if len(dec) != len(out):
        raise RuntimeError(f"H.264 round trip returned {len(dec)} frames for {len(out)}")
    return dec


def darken(image: np.ndarray, factor: float) -> np.ndarray:
    return np.clip(np.rint(image.astype(np.float32) * np.float32(factor)), 0, 255).astype(np.uint8)


def clahe_luma(image: np.ndarray, clip: float = 2.0, grid: int = 8) -> np.ndarray:
    """CLAHE (Zuiderveld 1994, cv2.createCLAHE) on the luma channel only (YCrCb), chroma kept.
    clip 2.0 and an 8×8 grid are common practice (OpenCV's own default clip limit is 40)."""
    ycc = cv2.cvtColor(image, cv2.COLOR_RGB2YCrCb)
    ycc[:, :, 0] = cv2.createCLAHE(clipLimit=clip, tileGridSize=(grid, grid)).apply(np.ascontiguousarray(ycc[:, :, 0]))
    return cv2.cvtColor(ycc, cv2.COLOR_YCrCb2RGB)


def wilson_low(k: int, n: int, z: float = 1.96) -> float:
    """Lower end of the Wilson score interval for k successes in n (95 % for z = 1.96)."""
    if n == 0:
        return float("nan")
    p = k / n
    d = 1 + z * z / n
    c = p + z * z / (2 * n)
    r = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return max(0.0, float((c - r) / d))
