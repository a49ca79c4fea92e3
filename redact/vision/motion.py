"""What moves in front of a fixed camera, found without any model: the motion safety net.

A person the pose model misses (too small, too dark, half hidden) still moves. Background
subtraction finds the pixels that differ from a learned model of the empty scene: OpenCV's MOG2,
an adaptive Gaussian mixture per pixel (Zivkovic, "Improved adaptive Gaussian mixture model for
background subtraction", ICPR 2004; Zivkovic & van der Heijden, Pattern Recognition Letters 27,
2006). It runs on a grey copy of the frame reduced to `analysis_width` pixels, so it costs a few
milliseconds a frame, and it runs in frame order (the model learns from every frame).

Three things break background subtraction, and each is handled as a state of the frame rather
than as blobs:
- camera shake: the frame's shift against the learned background is measured by phase
  correlation (Kuglin & Hines 1975; cv2.phaseCorrelate) and undone when it is small;
- a camera that moves (pans, is knocked): a larger shift restarts the model, and the frames
  until it has learned the new view again are reported as `camera_moved` / `learning`;
- a whole-frame change (lights switched, sun behind a cloud, auto exposure): when most of the
  frame differs at once, the frame is `lighting_change`; the model relearns quickly.
A person who stands still from the first frame on is part of the learned background and is never
found here; nor is anyone while the model is learning. The net adds to the detector, it does
not replace it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from redact.errors import InputError

#: Frame states; only `ok` frames have blobs a reviewer can rely on as complete.
STATES = ("ok", "learning", "camera_moved", "lighting_change")


@dataclass(frozen=True)
class MotionSettings:
    """How the motion net looks at each frame. Defaults are common practice unless noted.

    analysis_width: the grey frame is reduced to this width before background subtraction.
    history_seconds: frames the background model remembers (MOG2 `history`), in seconds.
    var_threshold: MOG2's squared Mahalanobis distance for "differs from the background"
    (OpenCV's default, 16). min_blob: smallest blob kept, in analysis pixels (noise is smaller).
    learning_seconds: after a start or restart, frames of this long are `learning`.
    shake: shifts up to this fraction of the analysis width are undone as camera shake; larger
    ones mean the camera moved. lighting: a frame in which more than this fraction differs
    from the background is a whole-frame change, not movers.
    """

    enabled: bool = True
    analysis_width: int = 320
    history_seconds: float = 10.0
    var_threshold: float = 16.0
    min_blob: int = 6
    learning_seconds: float = 1.0
    shake: float = 0.02
    lighting: float = 0.35

    def __post_init__(self) -> None:
        if not 64 <= self.analysis_width <= 1920:
            raise InputError(f"motion analysis width must be 64..1920 pixels, got {self.analysis_width}")
        for name in ("history_seconds", "var_threshold", "learning_seconds"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise InputError(f"motion setting {name} must be a positive number, got {v}")
        if not 0 < self.shake < 0.5 or not 0 < self.lighting <= 1:
            raise InputError("motion settings shake must be in (0, 0.5) and lighting in (0, 1]")
        if self.min_blob < 1:
            raise InputError(f"motion setting min_blob must be at least 1, got {self.min_blob}")


@dataclass(frozen=True)
class Foreground:
    """What moved in one frame.

    mask: bool [h, w] at analysis scale (True = differs from the background); scale: source
    pixels per analysis pixel; boxes: [K, 4] float32 x1, y1, x2, y2 in source pixels, one per
    blob of moving pixels; state: one of STATES; shift: the measured camera shift (x, y) in
    source pixels; changed: the fraction of the frame that differs.
    """

    mask: np.ndarray
    scale: float
    boxes: np.ndarray
    state: str
    shift: tuple[float, float]
    changed: float

    def __post_init__(self) -> None:
        if self.state not in STATES:
            raise ValueError(f"unknown motion state {self.state!r}")
        b = np.ascontiguousarray(self.boxes, np.float32).reshape(-1, 4)
        b.flags.writeable = False
        object.__setattr__(self, "boxes", b)

    @property
    def reliable(self) -> bool:
        """True when the blobs are all the movement there is (not learning, moving, relighting)."""
        return self.state == "ok"


def analysis_grey(image: np.ndarray, width: int) -> tuple[np.ndarray, float]:
    """BT.601 luma uint8 [h, w] of an RGB (or grey) frame reduced by area averaging to at most
    `width` pixels wide, and the scale (source pixels per analysis pixel)."""
    h, w = image.shape[:2]
    aw = min(width, w)
    ah = max(1, int(round(h * aw / w)))
    grey = cv2.cvtColor(image, cv2.COLOR_RGB2GRAY) if image.ndim == 3 else image  # BT.601 weights
    return cv2.resize(grey, (aw, ah), interpolation=cv2.INTER_AREA), w / aw


#: A shift must account for at least this share of the frame differing from the background (and
#: undoing it must halve that) before it is taken as the camera's own (common practice).
SHIFT_EVIDENCE = 0.005
#: Grey levels (0..255) by which a lightly blurred pixel must differ to count as different in
#: that test (common practice; H.264 and sensor noise stay below it).
DIFFERENCE_LEVEL = 12


def _differs(a: np.ndarray, b: np.ndarray) -> float:
    """Share of pixels of two grey images that differ by more than DIFFERENCE_LEVEL."""
    return float((cv2.absdiff(a, b) > DIFFERENCE_LEVEL).mean()) if a.size else 0.0


_KERNEL = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (3, 3))
#: Joins the pieces of one walker (head, moving arms, legs) that subtraction finds apart; taller
#: than wide because people are (common practice).
_JOIN = cv2.getStructuringElement(cv2.MORPH_RECT, (3, 7))


class MotionDetector:
    """Background subtraction over a clip, one frame after another; `observe(image)` per frame."""

    def __init__(self, settings: MotionSettings, fps: float):
        self.settings = settings
        self.fps = fps if fps and math.isfinite(fps) and fps > 0 else 25.0
        self._model: cv2.BackgroundSubtractorMOG2 | None = None
        self._learned = 0
        self._size: tuple[int, int] | None = None
        self._window: np.ndarray | None = None  # phase-correlation window for the analysis size

    def _restart(self) -> None:
        history = max(2, int(round(self.settings.history_seconds * self.fps)))
        # Shadows off: on a grey image MOG2 would label any darker pixel a shadow, and a person in
        # dark clothes on a bright floor is exactly that.
        self._model = cv2.createBackgroundSubtractorMOG2(history=history, varThreshold=self.settings.var_threshold,
                                                        detectShadows=False)
        self._learned = 0

    def _background(self, grey: np.ndarray) -> np.ndarray | None:
        """The learned empty scene, grey, at analysis scale (None before there is one)."""
        assert self._model is not None
        background = self._model.getBackgroundImage()
        if background is None or background.shape[:2] != grey.shape:
            return None
        return cv2.cvtColor(background, cv2.COLOR_BGR2GRAY) if background.ndim == 3 else background

    def _camera_shift(self, grey: np.ndarray) -> tuple[tuple[float, float], np.ndarray | None]:
        """Translation (analysis pixels) of the camera since the background was learned, or (0, 0),
        and the frame with that translation undone (None when there is none to undo, or when the
        view slid by half of itself or more: nothing is left to compare).

        Phase correlation (cv2.phaseCorrelate) gives the dominant translation, which may be that
        of a large walker rather than of the camera. A shift is believed only when it explains the
        frame: undoing it must remove at least half of the pixels that differ from the background,
        and those must be a fair share of the frame (SHIFT_EVIDENCE), as when the whole view
        slides; people walking over a still view fail this and the camera is taken as still."""
        background = self._background(grey)
        if background is None:
            return (0.0, 0.0), None
        if self._window is None or self._window.shape != grey.shape:
            self._window = cv2.createHanningWindow(grey.shape[::-1], cv2.CV_32F)
        (dx, dy), _ = cv2.phaseCorrelate(background.astype(np.float32), grey.astype(np.float32), self._window)
        if math.hypot(dx, dy) < 0.25:
            return (0.0, 0.0), None
        bx, by = int(math.ceil(abs(dx))) + 1, int(math.ceil(abs(dy))) + 1
        if 2 * bx >= grey.shape[1] or 2 * by >= grey.shape[0]:
            return (float(dx), float(dy)), None
        m: np.ndarray = np.float32([[1, 0, -dx], [0, 1, -dy]])  # type: ignore[arg-type, assignment]  # numpy types np.float32() as scalar-only
        undone = cv2.warpAffine(grey, m, grey.shape[::-1], borderMode=cv2.BORDER_REPLICATE)
        inner = (slice(by, -by), slice(bx, -bx))
        before = _differs(grey[inner], background[inner])
        after = _differs(undone[inner], background[inner])
        if before < SHIFT_EVIDENCE or after > 0.5 * before:
            return (0.0, 0.0), None
        return (float(dx), float(dy)), undone

    def observe(self, image: np.ndarray) -> Foreground:
        """The moving parts of one RGB (or grey) frame; call once per frame, in frame order."""
        return self.observe_grey(*analysis_grey(image, self.settings.analysis_width))

    def observe_grey(self, small: np.ndarray, scale: float) -> Foreground:
        """Like observe, from the frame's analysis_grey image and its scale (computed once per frame)."""
        s = self.settings
        # A light blur first (common practice): sensor noise and the sub-pixel rest of undone
        # shake sit on sharp edges and would otherwise read as movement there.
        grey = cv2.GaussianBlur(small, (3, 3), 0)
        if self._model is None or self._size != grey.shape:
            self._size = grey.shape
            self._restart()
        learning_frames = max(1, int(round(s.learning_seconds * self.fps)))
        shift = (0.0, 0.0)
        state = "ok"
        rate = -1.0  # MOG2's own rate, 1/history once warmed up
        if self._learned >= 2:
            shift, undone = self._camera_shift(grey)
            if math.hypot(*shift) > s.shake * grey.shape[1]:
                self._restart()
                state = "camera_moved"
            elif undone is not None:
                grey = undone  # camera shake, undone
        assert self._model is not None
        first = self._learned == 0
        raw = self._model.apply(grey, learningRate=rate)
        self._learned += 1
        if first:  # the model has only just seen the view: nothing can differ from it yet
            empty = np.zeros(grey.shape, bool)
            return Foreground(empty, scale, np.zeros((0, 4), np.float32),
                              "camera_moved" if state == "camera_moved" else "learning", (0.0, 0.0), 0.0)
        fg = raw > 0
        if shift != (0.0, 0.0):
            # The strip a shake brought into view is new to the model, not movement.
            bx, by = int(math.ceil(abs(shift[0]))) + 1, int(math.ceil(abs(shift[1]))) + 1
            fg[:by], fg[-by:], fg[:, :bx], fg[:, -bx:] = False, False, False, False
        changed = float(fg.mean())
        if state == "ok" and self._learned <= learning_frames:
            state = "learning"
        if state == "ok" and changed > s.lighting:
            state = "lighting_change"
            self._model.apply(grey, learningRate=0.5)  # relearn the new light quickly
        boxes = _blobs(fg, s.min_blob, scale) if state != "lighting_change" else np.zeros((0, 4), np.float32)
        return Foreground(fg, scale, boxes, state, (shift[0] * scale, shift[1] * scale), changed)


def _blobs(fg: np.ndarray, min_blob: int, scale: float) -> np.ndarray:
    """Boxes [K, 4] in source pixels around the connected moving areas (opened, then joined)."""
    m = cv2.morphologyEx(fg.astype(np.uint8), cv2.MORPH_OPEN, _KERNEL)
    m = cv2.dilate(m, _JOIN)
    n, _, stats, _ = cv2.connectedComponentsWithStats(m, connectivity=8)
    keep = stats[1:, cv2.CC_STAT_AREA] >= min_blob
    st = stats[1:][keep].astype(np.float32)
    if not len(st):
        return np.zeros((0, 4), np.float32)
    x, y, w, h = st[:, 0], st[:, 1], st[:, 2], st[:, 3]
    return np.stack([x, y, x + w, y + h], axis=1) * np.float32(scale)
