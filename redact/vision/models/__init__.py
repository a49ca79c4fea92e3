"""Bundled models: their manifests, the hash check before loading, and onnxruntime sessions.

Each model ships as `<file>.onnx` beside `<id>.manifest.json` in this folder. A model is never
loaded unless the SHA-256 of the exact bytes handed to onnxruntime equals the manifest's.
Human-readable provenance and licences live in the repository's `models_manifest/`.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from redact.errors import ModelError

MODELS_DIR = Path(__file__).resolve().parent
# Processing runs the int8 model by default: on two cores it is what makes 720p real time, its
# keypoints are a few pixels from the float32 model's (models_manifest/yolo11n-pose-int8.md).
# The audit, an independent second look, keeps the float32 model at a larger input size.
DEFAULT_POSE_MODEL = "yolo11n-pose-int8"
FLOAT_POSE_MODEL = "yolo11n-pose"
DEFAULT_FACE_MODEL = "face-detector-full-range"
# The bundled model each task uses when no id is given (see models_manifest/).
DEFAULT_MODELS = {"pose": DEFAULT_POSE_MODEL, "face-detection": DEFAULT_FACE_MODEL}


@dataclass(frozen=True)
class ModelEntry:
    """One manifest: what a bundled model is, where it came from, and how to decode it."""

    id: str
    file: str
    sha256: str
    bytes: int
    licence: str
    task: str
    decoder: str
    input: dict[str, Any]
    thresholds: dict[str, float]
    source: dict[str, str]
    conversion: dict[str, Any]
    manifest: dict[str, Any]

    @property
    def path(self) -> Path:
        return MODELS_DIR / self.file


def _parse_manifest(path: Path) -> ModelEntry:
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
        return ModelEntry(
            id=str(doc["id"]), file=str(doc["file"]), sha256=str(doc["sha256"]).lower(),
            bytes=int(doc["bytes"]), licence=str(doc["licence"]), task=str(doc["task"]),
            decoder=str(doc["decoder"]), input=dict(doc["input"]), thresholds=dict(doc.get("thresholds", {})),
            source=dict(doc["source"]), conversion=dict(doc["conversion"]), manifest=doc,
        )
    except (OSError, ValueError, KeyError, TypeError) as e:
        raise ModelError(f"model manifest {path.name} is unreadable ({e}); reinstall redact") from None


def list_models() -> list[ModelEntry]:
    """Every bundled model's manifest, sorted by id."""
    return sorted((_parse_manifest(p) for p in MODELS_DIR.glob("*.manifest.json")), key=lambda m: m.id)


def get_model(model_id: str | None = None, task: str = "pose") -> ModelEntry:
    """The manifest of a model by id, or the default for a task."""
    wanted = model_id or DEFAULT_MODELS.get(task)
    for m in list_models():
        if (wanted and m.id == wanted) or (not wanted and m.task == task):
            return m
    known = ", ".join(m.id for m in list_models()) or "none"
    raise ModelError(f"no bundled model '{wanted or task}' (bundled: {known})")


def read_verified(entry: ModelEntry, path: Path | None = None) -> bytes:
    """The model file's bytes, after checking their SHA-256 against the manifest."""
    p = path or entry.path
    try:
        blob = p.read_bytes()
    except OSError as e:
        raise ModelError(f"model {entry.id}: cannot read {p.name} ({e.strerror}); reinstall redact") from None
    actual = hashlib.sha256(blob).hexdigest()
    if actual != entry.sha256:
        raise ModelError(
            f"model {entry.id}: file {p.name} has sha256 {actual}, manifest expects {entry.sha256}; "
            "refusing to load an altered model"
        )
    return blob


def check_model(entry: ModelEntry) -> str:
    """Check one model's hash and size; returns 'ok' or raises ModelError."""
    blob = read_verified(entry)
    if len(blob) != entry.bytes:
        raise ModelError(f"model {entry.id}: {len(blob)} bytes, manifest expects {entry.bytes}")
    return "ok"


def default_threads() -> int:
    """Intra-op threads for onnxruntime: every core this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def open_session(entry: ModelEntry, threads: int | None = None, path: Path | None = None):
    """An onnxruntime CPU session over the verified bytes (hash checked on the very bytes loaded)."""
    import onnxruntime as ort

    blob = read_verified(entry, path)
    opts = ort.SessionOptions()
    opts.intra_op_num_threads = threads or default_threads()
    opts.inter_op_num_threads = 1
    opts.execution_mode = ort.ExecutionMode.ORT_SEQUENTIAL
    opts.graph_optimization_level = ort.GraphOptimizationLevel.ORT_ENABLE_ALL
    opts.log_severity_level = 3
    # Idle pool threads sleep instead of spinning: spinning is faster for the model alone, but in
    # the pipeline it burns the cores that decoding, drawing and encoding need (benchmarks/).
    opts.add_session_config_entry("session.intra_op.allow_spinning", "0")
    try:
        return ort.InferenceSession(blob, sess_options=opts, providers=["CPUExecutionProvider"])
    except Exception as e:  # onnxruntime raises its own exception types
        raise ModelError(f"model {entry.id}: onnxruntime cannot load it ({e})") from None
