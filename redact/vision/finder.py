"""Find every person in a frame at the scale the pose model needs: full frame, windows, sweep.

One frame's search is a `SearchPlan`: optionally the whole frame at the model's usual input
size (finds people who are large in the picture), windows around known activity scaled so their
people reach the target height (redact.vision.crops.person_windows), and optionally a tiled
sweep of the whole frame at the scale of the smallest person of interest (first frame, after the
camera moved). Every part runs the same model; the detections are mapped back to source pixels
and merged by the same NMS and containment rule as a single pass (redact.vision.pose.nms), so a
person seen in two windows is one person.

Optionally the detector's input is contrast-enhanced (CLAHE on luma) when the frame is dim;
the redacted video is never brightened, only what the model looks at.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from redact.vision.boxes import Letterbox, box_areas, intersections, iou_matrix, nms
from redact.vision.crops import CropSettings, Window, person_windows, sweep_windows
from redact.vision.pose import PAD_VALUE, PoseEstimator, as_rgb, decode
from redact.vision.records import Poses
from redact.vision.skeleton import NUM_KEYPOINTS


@dataclass(frozen=True)
class SearchPlan:
    """What the model looks at in one frame: the whole frame (at the usual input size) and/or windows."""

    full: bool
    windows: tuple[Window, ...] = ()

    @property
    def pixels(self) -> int:
        return sum(w.pixels for w in self.windows)


def window_tensor(image: np.ndarray, win: Window) -> np.ndarray:
    """The model input [1, 3, in_h, in_w] float32 0..1 showing `win` of an RGB image.

    Outside the frame is the letterbox grey. Enlarging uses bilinear interpolation; shrinking
    first averages whole pixels (INTER_AREA) so fine texture does not alias.
    """
    h, w = image.shape[:2]
    k = win.scale
    if k < 1.0:
        # Shrink the covered source part with area averaging, then place it exactly.
        sx0, sy0 = max(0, int(math.floor(win.x0))), max(0, int(math.floor(win.y0)))
        sx1, sy1 = min(w, int(math.ceil(win.x1))), min(h, int(math.ceil(win.y1)))
        small = cv2.resize(image[sy0:sy1, sx0:sx1], None, fx=k, fy=k, interpolation=cv2.INTER_AREA)
        # small pixel u shows source x = sx0 + u·(sx1-sx0)/small_w; the canvas shows (x - x0)·k.
        m: np.ndarray = np.float32([[k * (sx1 - sx0) / small.shape[1], 0, (sx0 - win.x0) * k],  # type: ignore[arg-type, assignment]  # numpy types np.float32() as scalar-only
                        [0, k * (sy1 - sy0) / small.shape[0], (sy0 - win.y0) * k]])
        src = small
    else:
        m = np.float32([[k, 0, -win.x0 * k], [0, k, -win.y0 * k]])  # type: ignore[arg-type, assignment]  # numpy types np.float32() as scalar-only
        src = image
    canvas = cv2.warpAffine(src, m, (win.in_w, win.in_h), flags=cv2.INTER_LINEAR,
                            borderMode=cv2.BORDER_CONSTANT, borderValue=(PAD_VALUE,) * 3)
    return (canvas.transpose(2, 0, 1)[None].astype(np.float32) * np.float32(1.0 / 255.0))


def _window_letterbox(win: Window, src_w: int, src_h: int) -> Letterbox:
    """The mapping model input → source pixels of a window, in the single-pass Letterbox form."""
    return Letterbox(win.scale, -win.x0 * win.scale, -win.y0 * win.scale, src_w, src_h, win.in_w, win.in_h)


def _truncated(boxes: np.ndarray, win: Window, src_w: int, src_h: int, tol: float = 2.0) -> np.ndarray:
    """[N] bool: boxes touching an edge of the window that lies inside the frame, i.e. people the
    window cut, whose box is only the part it saw. tol is in model input pixels."""
    t = tol / win.scale
    cut = np.zeros(len(boxes), bool)
    if win.x0 > 0:
        cut |= boxes[:, 0] <= win.x0 + t
    if win.y0 > 0:
        cut |= boxes[:, 1] <= win.y0 + t
    if win.x1 < src_w:
        cut |= boxes[:, 2] >= win.x1 - t
    if win.y1 < src_h:
        cut |= boxes[:, 3] >= win.y1 - t
    return cut


def _merge(parts: list[tuple[Poses, np.ndarray]], iou: float, containment: float, limit: int) -> Poses:
    """One set of people from every part's detections. parts: (poses, cut [N] bool).

    A detection the window cut is only a part of a person: it is dropped when an uncut detection
    overlaps it (IoU above 0.3 or half of it inside), because that one saw the whole person; it
    is kept otherwise, since it may be the only sign of someone (fail closed). The rest goes
    through the usual NMS with the containment rule.
    """
    parts = [(p, c) for p, c in parts if len(p)]
    if not parts:
        return Poses.empty()
    boxes = np.concatenate([p.boxes for p, _ in parts])
    scores = np.concatenate([p.scores for p, _ in parts])
    kps = np.concatenate([p.keypoints for p, _ in parts]).reshape(-1, NUM_KEYPOINTS, 3)
    cut = np.concatenate([c for _, c in parts])
    if cut.any() and (~cut).any():
        whole = boxes[~cut]
        drop = (iou_matrix(boxes[cut], whole).max(1) > 0.3) | (_inside(boxes[cut], whole) >= 0.5)
        keep_mask = np.ones(len(boxes), bool)
        keep_mask[np.flatnonzero(cut)[drop]] = False
        boxes, scores, kps = boxes[keep_mask], scores[keep_mask], kps[keep_mask]
    keep = nms(boxes, scores, iou, containment)[:limit]
    return Poses(boxes[keep], scores[keep], kps[keep])


def _grow(boxes: np.ndarray, frac: float) -> np.ndarray:
    w, h = boxes[:, 2] - boxes[:, 0], boxes[:, 3] - boxes[:, 1]
    return boxes + np.stack([-w, -h, w, h], axis=1) * frac


def _drop_parts(boxes: np.ndarray) -> np.ndarray:
    """Boxes minus those lying mostly (half or more) inside a box at least 1.5 times as tall: a
    small box inside a tall person is a part of them (a head, a swinging arm, a duplicate), and an
    enlarging window on it would find that part again as a "person" of its own."""
    if len(boxes) < 2:
        return boxes
    h = boxes[:, 3] - boxes[:, 1]
    inside = intersections(boxes, boxes) / np.maximum(box_areas(boxes), 1e-9)[:, None]
    taller = h[None, :] >= 1.5 * h[:, None]
    part = ((inside >= 0.5) & taller).any(axis=1)
    return boxes[~part]


def _inside(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """For each box of a [N, 4], the largest fraction of its area inside one box of b [M, 4]."""
    area = np.maximum(box_areas(a), 1e-9)
    return (intersections(a, b) / area[:, None]).max(1)


def enhance_for_detection(image: np.ndarray, clip_limit: float = 2.0, tiles: int = 8) -> np.ndarray:
    """Contrast-limited adaptive histogram equalisation of luma (Zuiderveld, "Contrast Limited
    Adaptive Histogram Equalization", Graphics Gems IV, 1994; cv2.createCLAHE), colour kept.
    For the detector's eyes only."""
    ycc = cv2.cvtColor(image, cv2.COLOR_RGB2YCrCb)
    clahe = cv2.createCLAHE(clipLimit=clip_limit, tileGridSize=(tiles, tiles))
    ycc[:, :, 0] = clahe.apply(np.ascontiguousarray(ycc[:, :, 0]))
    return cv2.cvtColor(ycc, cv2.COLOR_YCrCb2RGB)


class PersonFinder:
    """Runs one pose model over a frame's SearchPlan and merges what every part found.

    estimate(image) keeps the single-pass interface (whole frame only). Safe to call from several
    threads at once when the estimator is (`concurrent`)."""

    def __init__(self, estimator: PoseEstimator, settings: CropSettings | None = None):
        self.estimator = estimator
        self.settings = settings or CropSettings()
        self.concurrent = bool(getattr(estimator, "concurrent", False))

    def plan(self, frame_w: int, frame_h: int, people: np.ndarray, moving: np.ndarray | None, full: bool,
             sweep: tuple[Window, ...] = ()) -> SearchPlan:
        """The search of one frame. people [K, 4]: boxes of tracked people (from a recent frame);
        moving [M, 4]: boxes of moving blobs in this frame (redact.vision.motion); both source px.
        sweep: tiles of the sweep scheduled for this frame (redact.vision.search), searched as well.

        A blob lying mostly inside a person's (grown) box adds nothing and gets no window, nor does
        any box lying mostly inside a much taller one (a part of that person). People
        too small for the whole-frame pass get windows that enlarge them to the target height.
        People the whole-frame pass sees at the target size need nothing more on frames that run
        it; on other frames they get windows at the whole-frame scale, unless those would cost
        more than the whole frame, which then runs instead. When the enlarging windows would cost
        more than sweeping the whole frame at their largest scale (many small people close
        together), the sweep is used instead.
        """
        s = self.settings
        if not s.enabled:
            return SearchPlan(True)
        people = np.asarray(people, np.float64).reshape(-1, 4)
        moving = np.zeros((0, 4)) if moving is None else np.asarray(moving, np.float64).reshape(-1, 4)
        if len(people) and len(moving):
            moving = moving[_inside(moving, _grow(people, 0.2)) < 0.7]
        boxes = _drop_parts(np.concatenate([people, moving]))
        in_w, in_h = self.estimator.input_size(frame_w, frame_h)
        full_scale = min(in_w / frame_w, in_h / frame_h)
        small = (boxes[:, 3] - boxes[:, 1]) * full_scale < s.target_height
        windows = person_windows(boxes[small], frame_w, frame_h, s, min_scale=full_scale)
        if windows:
            k = max(w.scale for w in windows)
            if sum(w.pixels for w in windows) > frame_w * frame_h * k * k * 1.2:
                windows = sweep_windows(frame_w, frame_h, CropSettings(
                    min_person_height=max(8, int(s.target_height / k)), target_height=s.target_height,
                    max_upscale=s.max_upscale, sweep_side=s.sweep_side))
        if not full and (~small).any():
            large = person_windows(boxes[~small], frame_w, frame_h, s, min_scale=full_scale)
            if sum(w.pixels for w in large) >= in_w * in_h:
                full = True
            else:
                windows = windows + large
        return SearchPlan(full, tuple(windows) + tuple(sweep))

    def find(self, image: np.ndarray, plan: SearchPlan, enhance: bool = False) -> Poses:
        """Every person the plan's parts find, in source pixels, duplicates merged."""
        rgb = as_rgb(image)
        if enhance:
            rgb = enhance_for_detection(rgb)
        est = self.estimator
        cfg = est.settings
        h, w = rgb.shape[:2]
        parts: list[tuple[Poses, np.ndarray]] = []
        if plan.full:
            found = est.estimate(rgb)
            parts.append((found, np.zeros(len(found), bool)))
        for win in plan.windows:
            found = decode(est.infer(window_tensor(rgb, win)), _window_letterbox(win, w, h), cfg)
            parts.append((found, _truncated(found.boxes, win, w, h)))
        return _merge(parts, cfg.nms_iou, cfg.containment, cfg.max_people)

    def estimate(self, image: np.ndarray) -> Poses:
        return self.estimator.estimate(image)
