"""The model manifest and the hash check that runs before any model is loaded."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest
from click.testing import CliRunner

from redact.cli import main
from redact.errors import ModelError
from redact.vision.models import MODELS_DIR, check_model, get_model, list_models, open_session

REPO = Path(__file__).resolve().parent.parent


def test_every_manifest_matches_its_file_and_the_docs():
    models = list_models()
    assert models, "no bundled model"
    docs = "".join(p.read_text() for p in (REPO / "models_manifest").glob("*.md"))
    for m in models:
        blob = (MODELS_DIR / m.file).read_bytes()
        assert hashlib.sha256(blob).hexdigest() == m.sha256  # FIPS 180-4 via hashlib
        assert len(blob) == m.bytes
        assert m.sha256 in docs, f"models_manifest/ does not record the hash of {m.id}"
        assert (REPO / m.manifest["licence_file"]).is_file()
        assert check_model(m) == "ok"


def test_one_changed_byte_is_refused_before_inference(tmp_path, monkeypatch):
    import onnxruntime

    entry = get_model()
    blob = bytearray(entry.path.read_bytes())
    blob[len(blob) // 2] ^= 0x01
    altered = tmp_path / entry.file
    altered.write_bytes(bytes(blob))

    def must_not_run(*a, **k):
        raise AssertionError("onnxruntime was reached with an altered model")

    monkeypatch.setattr(onnxruntime, "InferenceSession", must_not_run)
    with pytest.raises(ModelError) as e:
        open_session(entry, path=altered)
    assert entry.sha256 in str(e.value)
    assert hashlib.sha256(bytes(blob)).hexdigest() in str(e.value)


def test_models_command_lists_licence_and_ok():
    r = CliRunner().invoke(main, ["models"])
    assert r.exit_code == 0, r.output
    assert "yolo11n-pose" in r.output and "AGPL-3.0" in r.output and r.output.rstrip().endswith("ok")
