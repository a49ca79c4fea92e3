"""Quantise the bundled YOLO11n-pose model to int8 (static, QDQ) for faster CPU inference (run once, offline).

Not run by CI. It needs `onnx` next to onnxruntime (onnxruntime.quantization imports it):

    python -m venv build/quant && build/quant/bin/pip install -e . onnx==1.23.2 scikit-image
    build/quant/bin/python tools/quantize_pose_model.py

Method (onnxruntime.quantization.quantize_static): QDQ format, int8 weights per output channel,
uint8 activations per tensor, MinMax calibration. The detection head's decoding (the anchor grid,
distribution focal loss, box and keypoint arithmetic and the concatenated output, everything in
`/model.23/` except the head's hidden convolutions) stays in float32: its output carries pixel
coordinates (0..640) and scores (0..1) in one tensor, which one uint8 scale cannot hold; quantising
it loses every detection.

Calibration images, all from this repository or scikit-image (licences named beside each):
every 5th frame of demo_clips/ticket_hall.mp4 (our invented scene, built from scikit-image's
astronaut(), public domain, and camera(), CC0), the same frames darkened (×0.35) and brightened
(×1.4) to cover night and glare, and scikit-image stills without people (coffee(), chelsea(),
rocket(), all CC0 per skimage/data/_fetchers.py) so that backgrounds other than ours are seen.
Writes redact/vision/models/yolo11n_pose_int8.onnx and its manifest, and prints the agreement with the
float32 model on frames not used for calibration.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import platform
import re
import tempfile
from importlib import metadata
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
MODELS = REPO / "redact" / "vision" / "models"
SOURCE_ID = "yolo11n-pose"
OUT_ID = "yolo11n-pose-int8"
OUT_FILE = "yolo11n_pose_int8.onnx"
DEMO = REPO / "demo_clips" / "ticket_hall.mp4"
CALIBRATION_STEP = 5
GAINS = (0.35, 1.4)
# The head's hidden convolutions (cv2/cv3/cv4 .x.0 and .x.1) are quantised; the rest of model.23 is not.
HEAD_HIDDEN = re.compile(r"^/model\.23/cv[234]\.\d/cv[234]\.\d\.[01]/")


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def calibration_tensors() -> list[np.ndarray]:
    """Letterboxed model inputs (1×3×H×W float32) for calibration; see the module docstring."""
    from skimage import data

    from redact.media.video import VideoReader
    from redact.vision.pose import input_size_for, letterbox

    frames = []
    with VideoReader(DEMO, hash_file=False) as r:
        for f in r.frames():
            if f.index % CALIBRATION_STEP == 0:
                frames.append(f.image)
    images = list(frames)
    for g in GAINS:
        images += [np.clip(im.astype(np.float32) * g, 0, 255).astype(np.uint8) for im in frames[::2]]
    images += [data.coffee(), data.chelsea(), data.rocket()]
    out = []
    for im in images:
        w, h = input_size_for(im.shape[1], im.shape[0], 640)
        out.append(letterbox(im, w, h)[0])
    return out


def excluded_nodes(model_path: Path) -> list[str]:
    import onnx

    nodes = onnx.load(str(model_path)).graph.node
    return [n.name for n in nodes if n.name.startswith("/model.23/") and not HEAD_HIDDEN.match(n.name)]


def quantise(src: Path, dst: Path, tensors: list[np.ndarray]) -> list[str]:
    from onnxruntime.quantization import (
        CalibrationDataReader,
        CalibrationMethod,
        QuantFormat,
        QuantType,
        quantize_static,
    )
    from onnxruntime.quantization.shape_inference import quant_pre_process

    class Reader(CalibrationDataReader):
        def __init__(self):
            self.it = iter(tensors)

        def get_next(self):
            t = next(self.it, None)
            return None if t is None else {"images": t}

    with tempfile.TemporaryDirectory() as d:
        pre = Path(d) / "pre.onnx"
        quant_pre_process(str(src), str(pre), skip_symbolic_shape=True)  # dynamic H×W defeats symbolic inference
        excluded = excluded_nodes(pre)
        quantize_static(str(pre), str(dst), Reader(), quant_format=QuantFormat.QDQ, per_channel=True,
                        activation_type=QuantType.QUInt8, weight_type=QuantType.QInt8,
                        calibrate_method=CalibrationMethod.MinMax, nodes_to_exclude=excluded)
    return excluded


def agreement(fp32_path: Path, int8_path: Path) -> dict:
    """OKS and detection agreement of the int8 model with the float32 one on demo frames not used
    for calibration (matched by Hungarian assignment on OKS, as in redact's tracker)."""
    import onnxruntime as ort
    from scipy.optimize import linear_sum_assignment

    from redact.media.video import VideoReader
    from redact.vision.pose import PoseSettings, decode, letterbox
    from redact.vision.skeleton import oks_matrix

    def session(p):
        o = ort.SessionOptions()
        o.log_severity_level = 3
        return ort.InferenceSession(str(p), o, providers=["CPUExecutionProvider"])

    a_s, b_s, st = session(fp32_path), session(int8_path), PoseSettings()
    scores, people, missed, extra = [], 0, 0, 0
    with VideoReader(DEMO, hash_file=False) as r:
        for f in r.frames():
            if f.index % CALIBRATION_STEP == 0 or f.index % 2:
                continue
            t, lb = letterbox(f.image, 640, 384)
            a = decode(a_s.run(None, {"images": t})[0], lb, st)
            b = decode(b_s.run(None, {"images": t})[0], lb, st)
            people += len(a)
            if not len(a) or not len(b):
                missed, extra = missed + len(a), extra + len(b)
                continue
            area = (a.boxes[:, 2] - a.boxes[:, 0]) * (a.boxes[:, 3] - a.boxes[:, 1])
            m = oks_matrix(b.keypoints, a.keypoints, area, 0.5)
            ri, ci = linear_sum_assignment(-m)
            ok = m[ri, ci] > 0.5
            scores += m[ri, ci][ok].tolist()
            missed += len(a) - int(ok.sum())
            extra += len(b) - int(ok.sum())
    s = np.array(scores)
    return {"frames": "demo frames with index even and not a multiple of 5", "fp32_people": people,
            "matched": len(s), "missed": missed, "extra": extra,
            "oks_mean": round(float(s.mean()), 4), "oks_p5": round(float(np.percentile(s, 5)), 4)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.parse_args()
    from redact.vision.models import get_model, read_verified

    src_entry = get_model(SOURCE_ID)
    read_verified(src_entry)  # the float32 model is the one the manifest names
    dst = MODELS / OUT_FILE
    tensors = calibration_tensors()
    excluded = quantise(src_entry.path, dst, tensors)
    agree = agreement(src_entry.path, dst)
    tools = {n: metadata.version(n) for n in ("onnxruntime", "onnx", "numpy", "opencv-python-headless", "scikit-image")}
    manifest = {
        "id": OUT_ID,
        "task": "pose",
        "file": OUT_FILE,
        "sha256": sha256(dst),
        "bytes": dst.stat().st_size,
        "licence": src_entry.licence,
        "licence_file": src_entry.manifest["licence_file"],
        "description": "YOLO11n-pose quantised to int8 (static QDQ, per-channel weights; detection head "
                       "decoding kept in float32): about 1.5-2x faster on CPUs with int8 dot-product "
                       "instructions, keypoints within a few pixels of the float32 model",
        "source": dict(src_entry.source, derived_from={"id": SOURCE_ID, "sha256": src_entry.sha256}),
        "conversion": {
            "command": "python tools/quantize_pose_model.py",
            "method": "onnxruntime.quantization.quantize_static: QDQ, weights QInt8 per channel, activations "
                      "QUInt8 per tensor, MinMax calibration; nodes of /model.23/ other than the head's hidden "
                      f"convolutions excluded ({len(excluded)} nodes)",
            "calibration": f"{len(tensors)} inputs: every {CALIBRATION_STEP}th frame of demo_clips/ticket_hall.mp4, "
                           f"half of them again at gains {GAINS[0]} and {GAINS[1]}, and scikit-image coffee(), "
                           "chelsea(), rocket() (CC0)",
            "agreement_with_float32": agree,
            "tools": dict(tools, python=platform.python_version()),
        },
        "input": src_entry.input,
        "outputs": src_entry.manifest["outputs"],
        "keypoints": src_entry.manifest["keypoints"],
        "decoder": src_entry.decoder,
        "thresholds": src_entry.thresholds,
        "default_input_long_side": src_entry.manifest["default_input_long_side"],
    }
    (MODELS / f"{OUT_ID}.manifest.json").write_text(json.dumps(manifest, indent=2, ensure_ascii=False) + "\n")
    print(json.dumps({"file": str(dst.relative_to(REPO)), "sha256": manifest["sha256"], "bytes": manifest["bytes"],
                      "agreement_with_float32": agree}, indent=1))


if __name__ == "__main__":
    main()
