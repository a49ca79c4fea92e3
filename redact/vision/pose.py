"""Multi-person pose estimation on the CPU: letterbox → onnxruntime → decode → NMS → source pixels.

The letterbox record and NMS are the shared ones of redact.vision.boxes (re-exported here).

The default model (YOLO11n-pose, see models_manifest/) outputs `output0` [1, 56, A]: for each
anchor cx, cy, w, h, person score, then 17 × (x, y, confidence) in COCO-17 order, in input-image
pixels. There is no NMS inside the graph, so it is done here.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from redact.errors import InputError
from redact.vision.boxes import Letterbox, nms
from redact.vision.models import DEFAULT_POSE_MODEL
from redact.vision.records import Poses
from redact.vision.skeleton import NUM_KEYPOINTS

PAD_VALUE = 114  # grey padding used when the model was trained (ultralytics LetterBox default)
STRIDE = 32      # input sides must be multiples of the model's largest stride
MAX_SIDE = 20000


@dataclass(frozen=True)
class PoseSettings:
    """Detection settings: model input long side, person score threshold, NMS IoU, max people.

    model: id of the bundled pose model (`redact models` lists them; models_manifest/ says what each is).
    containment: a box lying at least this fraction inside a higher-scoring box is dropped as a
    duplicate (0 = off). The detector often reports a partly visible or bent person twice, a
    whole-body box and a part box inside it; plain IoU NMS keeps both because their IoU is low.
    Dropping the inner box never uncovers anyone, since it lies inside the kept box's region
    (common practice, "intersection over the smaller area").
    """

    model: str = DEFAULT_POSE_MODEL
    input_long_side: int = 640
    score_threshold: float = 0.25
    nms_iou: float = 0.6
    max_people: int = 200
    containment: float = 0.85

    def __post_init__(self) -> None:
        if self.input_long_side < STRIDE or self.input_long_side % STRIDE:
            raise InputError(f"input size must be a positive multiple of {STRIDE}, got {self.input_long_side}")
        if not 0.0 < self.score_threshold < 1.0:
            raise InputError(f"score threshold must be between 0 and 1, got {self.score_threshold}")
        if not 0.0 < self.nms_iou <= 1.0:
            raise InputError(f"NMS IoU must be in (0, 1], got {self.nms_iou}")
        if not 0.0 <= self.containment <= 1.0:
            raise InputError(f"containment must be in [0, 1], got {self.containment}")


def input_size_for(width: int, height: int, long_side: int) -> tuple[int, int]:
    """Model input (w, h) keeping the source aspect: long side fixed, short side rounded up to 32."""
    if width >= height:
        short = int(np.ceil(long_side * height / width / STRIDE) * STRIDE)
        return long_side, max(STRIDE, short)
    short = int(np.ceil(long_side * width / height / STRIDE) * STRIDE)
    return max(STRIDE, short), long_side


def as_rgb(image) -> np.ndarray:
    """Validate an image and return it as RGB uint8 [H,W,3]; grey and RGBA are converted."""
    if not isinstance(image, np.ndarray):
        raise InputError(f"expected an image as a NumPy array, got {type(image).__name__}")
    if image.size == 0:
        raise InputError(f"image is empty (shape {list(image.shape)})")
    if image.dtype != np.uint8:
        raise InputError(f"expected uint8 pixels, got {image.dtype}")
    if image.ndim == 2:
        image = cv2.cvtColor(image, cv2.COLOR_GRAY2RGB)
    elif image.ndim == 3 and image.shape[2] == 1:
        image = cv2.cvtColor(image[:, :, 0], cv2.COLOR_GRAY2RGB)
    elif image.ndim == 3 and image.shape[2] == 4:
        image = np.ascontiguousarray(image[:, :, :3])
    elif not (image.ndim == 3 and image.shape[2] == 3):
        raise InputError(f"expected an image of shape [H,W], [H,W,3] or [H,W,4], got {list(image.shape)}")
    if max(image.shape[:2]) > MAX_SIDE:
        raise InputError(f"image side {max(image.shape[:2])} exceeds the limit of {MAX_SIDE} pixels")
    return image


def letterbox(image: np.ndarray, in_w: int, in_h: int) -> tuple[np.ndarray, Letterbox]:
    """Scale into (in_w, in_h) keeping aspect, pad the rest with grey; returns NCHW float32 in 0..1."""
    h, w = image.shape[:2]
    r = min(in_w / w, in_h / h)
    new_w, new_h = max(1, int(round(w * r))), max(1, int(round(h * r)))
    interp = cv2.INTER_AREA if r < 1 else cv2.INTER_LINEAR
    resized = cv2.resize(image, (new_w, new_h), interpolation=interp) if (new_w, new_h) != (w, h) else image
    pad_x, pad_y = (in_w - new_w) / 2, (in_h - new_h) / 2
    top, left = int(round(pad_y - 0.1)), int(round(pad_x - 0.1))
    # Written plane by plane straight into the NCHW tensor: the same float32 values as scaling a
    # padded HWC canvas, without its strided transpose (about 5x less time at 720p).
    unit = np.float32(1.0 / 255.0)
    tensor = np.full((1, 3, in_h, in_w), np.float32(PAD_VALUE) * unit, np.float32)
    for c in range(3):
        np.multiply(resized[:, :, c], unit, out=tensor[0, c, top:top + new_h, left:left + new_w], casting="unsafe")
    return tensor, Letterbox(r, left, top, w, h, in_w, in_h)


def decode(output: np.ndarray, lb: Letterbox, settings: PoseSettings) -> Poses:
    """Raw model output [1, 5+51, A] → Poses in source pixels (score filter, NMS, clip)."""
    pred = output[0]
    if pred.ndim != 2 or pred.shape[0] != 5 + 3 * NUM_KEYPOINTS:
        raise ValueError(f"unexpected model output shape {list(output.shape)}")
    scores = pred[4]
    cand = np.nonzero(scores > settings.score_threshold)[0]
    if cand.size == 0:
        return Poses.empty()
    p = pred[:, cand].T  # [K, 56]
    cx, cy, bw, bh = p[:, 0], p[:, 1], p[:, 2], p[:, 3]
    boxes = np.stack([cx - bw / 2, cy - bh / 2, cx + bw / 2, cy + bh / 2], axis=1)
    keep = nms(boxes, p[:, 4], settings.nms_iou, settings.containment)[: settings.max_people]
    boxes, p = boxes[keep], p[keep]
    kps = p[:, 5:].reshape(-1, NUM_KEYPOINTS, 3).copy()
    # map from input pixels back to source pixels
    offset = np.array([lb.pad_x, lb.pad_y, lb.pad_x, lb.pad_y], np.float32)
    boxes = (boxes - offset) / lb.scale
    kps[:, :, 0] = (kps[:, :, 0] - lb.pad_x) / lb.scale
    kps[:, :, 1] = (kps[:, :, 1] - lb.pad_y) / lb.scale
    # clip to the image, as the reference framework does (ultralytics ops.clip_boxes / clip_coords)
    boxes[:, [0, 2]] = boxes[:, [0, 2]].clip(0, lb.src_w)
    boxes[:, [1, 3]] = boxes[:, [1, 3]].clip(0, lb.src_h)
    kps[:, :, 0] = kps[:, :, 0].clip(0, lb.src_w)
    kps[:, :, 1] = kps[:, :, 1].clip(0, lb.src_h)
    return Poses(boxes, p[:, 4], kps)


class PoseEstimator:
    """One model session; `estimate(image)` finds every person in an RGB image."""

    #: estimate() may run in several threads at once (onnxruntime sessions allow concurrent runs
    #: and this class keeps no per-call state), so the pipeline may infer frames side by side.
    concurrent = True

    def __init__(self, session, settings: PoseSettings = PoseSettings(), static_input: tuple[int, int] | None = None):
        self.session = session
        self.settings = settings
        self.input_name = session.get_inputs()[0].name
        self.static_input = static_input

    @classmethod
    def default(cls, settings: PoseSettings = PoseSettings(), threads: int | None = None) -> PoseEstimator:
        """The bundled model settings.model names, hash-checked, on the CPU."""
        from redact.vision.models import get_model, open_session

        entry = get_model(settings.model, task="pose")
        return cls(open_session(entry, threads), settings)

    def input_size(self, width: int, height: int) -> tuple[int, int]:
        return self.static_input or input_size_for(width, height, self.settings.input_long_side)

    def preprocess(self, image) -> tuple[np.ndarray, Letterbox]:
        rgb = as_rgb(image)
        in_w, in_h = self.input_size(rgb.shape[1], rgb.shape[0])
        return letterbox(rgb, in_w, in_h)

    def infer(self, tensor: np.ndarray) -> np.ndarray:
        return self.session.run(None, {self.input_name: tensor})[0]

    def estimate(self, image) -> Poses:
        """People in one image (RGB uint8; grey and RGBA accepted), in its pixel coordinates."""
        tensor, lb = self.preprocess(image)
        return decode(self.infer(tensor), lb, self.settings)
