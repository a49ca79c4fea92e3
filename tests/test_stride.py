"""Detection stride keeps redaction fail-safe: on a held-out clip (a scene the defaults were not
tuned on) running the detector every 3rd frame exposes no face that every-frame detection hides.

People: scikit-image astronaut() (public domain, NASA) and camera() (CC0, Lav Varshney), pasted at
known rectangles; SSIM is scikit-image's structural_similarity; PyAV/FFmpeg decodes the output.
"""

from __future__ import annotations

from fractions import Fraction

import av
import numpy as np
import pytest
from conftest import make_clip
from skimage.metrics import structural_similarity

from redact.media import synthetic as syn
from redact.pipeline import ProcessSettings, process_video
from redact.provenance.signing import Signer

MIN_SIDE = 16  # slivers at the frame edge are not measured (see tests/test_process.py)


def held_out_spec() -> syn.SceneSpec:
    """Faster walkers than the tuning clip, on the plain background, one entering from the top-right."""
    w, h = 320, 240
    return syn.SceneSpec(
        width=w, height=h, fps=Fraction(25), seconds=1.6,
        actors=(syn.Actor("camera", ((0.0, 0.15 * w, 0.6 * h, 0.55 * h), (1.6, 0.85 * w, 0.55 * h, 0.6 * h))),
                syn.Actor("astronaut", ((0.0, 1.1 * w, 0.5 * h, 0.5 * h), (1.6, 0.3 * w, 0.5 * h, 0.5 * h)), mirror=True)),
        background="plain", seed=11)


def _frames(path):
    with av.open(str(path)) as c:
        return [f.to_ndarray(format="rgb24") for f in c.decode(video=0)]


def _exposed_faces(clip, video) -> list[str]:
    src, out = _frames(clip.path), _frames(video)
    bad = []
    for i, truth in enumerate(clip.truths):
        for a in np.nonzero(truth.visible)[0]:
            x0, y0, x1, y1 = (int(v) for v in truth.face_rects[a])
            if x1 - x0 < MIN_SIDE or y1 - y0 < MIN_SIDE:
                continue
            s = src[i][y0:y1, x0:x1].mean(axis=2)
            o = out[i][y0:y1, x0:x1].mean(axis=2)
            if structural_similarity(s, o, data_range=255, win_size=7) >= 0.35:
                bad.append(f"frame {i} actor {a}")
    return bad


@pytest.fixture(scope="module")
def held_out_clip(tmp_path_factory):
    return make_clip(tmp_path_factory.mktemp("held-out"), "held_out.mp4", held_out_spec())


@pytest.mark.parametrize("stride", [1, 3])
def test_no_face_exposed_with_detection_stride(held_out_clip, tmp_path, stride):
    result = process_video(held_out_clip.path, tmp_path / "out", Signer.from_seed(bytes(32)),
                           ProcessSettings(detect_every=stride))
    assert _exposed_faces(held_out_clip, result.video) == []
    assert result.frames == len(held_out_clip.truths)
