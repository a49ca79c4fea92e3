"""Stored regions and re-rendering without the model.

Outside references: PyAV/FFmpeg decodes both copies; gzip (RFC 1952) via Python's gzip module;
the signature and hashes are checked by the package verifier, whose Ed25519 is cross-checked
against RFC 8032 in tests/test_signing.py. People in the clip: skimage.data.astronaut() (public
domain, NASA) and skimage.data.camera() (CC0, Lav Varshney), pasted by tests/conftest.py.
"""

from __future__ import annotations

import gzip
import io
import json
import shutil

import av
import numpy as np
import pytest

from redact.errors import InputError, VerificationFailed
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.predicate import thaw
from redact.provenance.signing import Signer
from redact.redaction.render import RenderSettings
from redact.review.outputs import load_output
from redact.review.rerender import rerender
from redact.review.store import REGIONS, parse_regions

SEED = bytes(range(7, 39))


def decoded(path) -> list[np.ndarray]:
    with av.open(str(path)) as c:
        return [f.to_ndarray(format="rgb24") for f in c.decode(video=0)]


class EncoderSpy:
    """Keeps a copy of every frame handed to the H.264 encoder, per output file."""

    def __init__(self):
        self.frames: dict[str, list[np.ndarray]] = {}

    def patch(self, mp):
        from redact.media import video

        real = video.VideoWriter.write
        spy = self

        def write(writer, image_rgb, pts):
            spy.frames.setdefault(writer.path.name.split(".partial")[0].lstrip("."), []).append(np.array(image_rgb))
            return real(writer, image_rgb, pts)

        mp.setattr(video.VideoWriter, "write", write)


@pytest.fixture(scope="module", params=["figure", "blur"])
def run(request, crossing_clip, tmp_path_factory):
    """One processed output per style: figure (solid fill + stick figures) and blur (masked copies)."""
    d = tmp_path_factory.mktemp(f"rerender-{request.param}")
    signer = Signer.from_seed(SEED)
    settings = ProcessSettings(render=RenderSettings(style=request.param))
    spy = EncoderSpy()
    with pytest.MonkeyPatch.context() as mp:
        spy.patch(mp)
        result = process_video(crossing_clip.path, d / "out", signer, settings)
    return {"dir": d, "signer": signer, "result": result, "clip": crossing_clip, "encoded": spy.frames["redacted.mp4"],
            "style": request.param}


def _rerender(run, out, source=None, plan=None):
    loaded = load_output(run["dir"] / "out", [run["signer"].public_key])
    stored = parse_regions(io.BytesIO(loaded.files[REGIONS]), loaded.frames)
    return rerender(source or run["clip"].path, stored, loaded.frame_digests(), loaded.predicate.source.sha256,
                    thaw(loaded.predicate.parameters), out, plan=plan)


def test_regions_are_a_signed_gzip_file_with_one_run_per_unchanged_stretch(run):
    pkg = run["result"].package
    raw = (pkg / REGIONS).read_bytes()
    lines = gzip.decompress(raw).splitlines()  # RFC 1952 member, readable by any gzip
    header = json.loads(lines[0])
    assert header["kind"] == "redact-regions" and header["width"] == 320 and header["height"] == 240
    runs = [json.loads(x)["f"] for x in lines[1:]]
    assert runs[0][0] == 0 and runs[-1][1] == run["result"].frames - 1
    assert all(b[0] == a[1] + 1 for a, b in zip(runs, runs[1:]))  # contiguous, no frame twice
    st = json.loads(__import__("base64").b64decode(json.loads((pkg / "envelope.json").read_bytes())["payload"]))
    assert REGIONS in {s["name"] for s in st["subject"]}  # signed like every package file
    docs = [json.loads(x) for x in lines[1:]]
    why = {w["k"] for d in docs for r in d["under"] + d["over"] for w in r["why"]}
    assert {"person", "lookback"} <= why  # the astronaut enters from off-screen: look-back used
    states = {w.get("state") for d in docs for r in d["under"] for w in r["why"] if w["k"] == "person"}
    assert states <= {"observed", "predicted"} and "observed" in states
    assert any(d["fig"] for d in docs) == (run["style"] == "figure")  # stick figures stored where drawn


def test_rerender_without_corrections_gives_the_same_frames(run, tmp_path, monkeypatch):
    spy = EncoderSpy()
    spy.patch(monkeypatch)
    res = _rerender(run, tmp_path / "again.mp4")
    assert res.corrected_frames == 0
    # The pictures handed to the encoder are pixel-identical to the original run's.
    first, second = run["encoded"], spy.frames["again.mp4"]
    assert len(first) == len(second) == run["result"].frames
    for k, (a, b) in enumerate(zip(first, second)):
        assert np.array_equal(a, b), f"frame {k} differs before encoding"
    # Decoded (PyAV/FFmpeg) the copies agree too, but not always bit for bit: x264's
    # macroblock-tree rate control (x264 option mbtree, on by default; VideoWriter(reproducible=True)
    # turns it off) can choose other quantisers for identical input from run to run. So decoded
    # frames are compared within a bound instead: PSNR at least 40 dB (common practice for
    # "visually identical"; single pixels at sharp edges can still differ by some 50 code values).
    original, again = decoded(run["result"].video), decoded(res.video)
    assert len(original) == len(again) == run["result"].frames
    for k, (a, b) in enumerate(zip(original, again)):
        err = (a.astype(np.float64) - b) ** 2
        psnr = 10 * np.log10(255.0 ** 2 / max(err.mean(), 1e-12))
        assert psnr >= 40, f"frame {k}: PSNR {psnr:.1f} dB"


def test_rerender_refuses_another_source_and_leaves_nothing(run, tmp_path, clip_factory):
    from tests.conftest import crossing_spec

    other = clip_factory("other.mp4", crossing_spec(seed=3))
    with pytest.raises(InputError, match="differs from the signed source"):
        _rerender(run, tmp_path / "x.mp4", source=other.path)
    assert list(tmp_path.glob("*x.mp4*")) == []


def test_a_changed_regions_file_fails_verification(run, tmp_path):
    copy = tmp_path / "out"
    shutil.copytree(run["dir"] / "out", copy)
    p = copy / "package" / REGIONS
    lines = gzip.decompress(p.read_bytes()).splitlines()
    lines[1] = lines[1].replace(b'"k":"person"', b'"k":"motion"', 1)  # another reason for one region
    p.write_bytes(gzip.compress(b"\n".join(lines) + b"\n", mtime=0))
    with pytest.raises(VerificationFailed, match="regions.jsonl.gz: SHA-256 does not match"):
        load_output(copy, [run["signer"].public_key])
